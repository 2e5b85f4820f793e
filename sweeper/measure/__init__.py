"""Measuring: sine fits and gain/phase with uncertainties (pure numerics), the schedule of a
sweep, the three ways of measuring a point (waveform, scope-measure, meter), and the engine."""
