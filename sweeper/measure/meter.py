"""Meter mode: an instrument that measures gain and phase itself; the uncertainty comes from
repeat readings (GUM type A)."""

from __future__ import annotations

import math

import numpy as np

from sweeper.instruments.roles import Meter
from sweeper.measure.point import Flag, Measurement
from sweeper.measure.settings import EngineSettings


#: Fewest readings per point: a type A standard deviation needs two; three keep Student's k
#: at 95 % (4.30 with 2 degrees of freedom) within reach of a guarded decision.
MIN_READINGS = 3


def mean_and_type_a(gains: np.ndarray, phases: np.ndarray) -> tuple[float, float, float, float]:
    """Mean gain (dB), circular-safe mean phase (degrees, (-180, 180]) and their experimental
    standard deviations of the mean (GUM 4.2.3: s / sqrt(n)), from n >= 2 readings."""
    n = gains.size
    ref = phases[0]
    rel = (phases - ref + 180.0) % 360.0 - 180.0
    phase = float(((ref + rel.mean()) + 180.0) % 360.0 - 180.0)
    return (float(gains.mean()), 180.0 if phase == -180.0 else phase,
            float(gains.std(ddof=1) / math.sqrt(n)), float(rel.std(ddof=1) / math.sqrt(n)))


def measure_with_meter(f: float, settings: EngineSettings, meter: Meter) -> Measurement:
    """Measure one frequency f (Hz) with a gain-phase meter; uncertainty from repeat readings
    (GUM type A, s / sqrt(n), n - 1 degrees of freedom).

    As in waveform mode: at least `averages` readings (and MIN_READINGS), then more until the
    target uncertainty is met or `max_averages` readings were taken (flagged UNCERTAINTY_MISSED).
    """
    least = max(MIN_READINGS, settings.averages)
    most = max(least, settings.max_averages)
    readings = [meter.measure(f) for _ in range(least)]
    flags = 0
    while True:
        gains = np.array([r.gain_db for r in readings])
        phases = np.array([r.phase_deg for r in readings])
        gain, phase, u_gain, u_phase = mean_and_type_a(gains, phases)
        met = (settings.target_gain_db is None or u_gain <= settings.target_gain_db) and (
            settings.target_phase_deg is None or u_phase <= settings.target_phase_deg)
        if met:
            break
        if len(readings) >= most:
            flags |= Flag.UNCERTAINTY_MISSED
            break
        readings.append(meter.measure(f))
    n = len(readings)
    return Measurement(
        gain_db=gain,
        phase_deg=phase,
        u_gain_db=u_gain,
        u_phase_deg=u_phase,
        amplitude_in_v=_mean_finite([r.amplitude_in_v for r in readings]),
        amplitude_out_v=_mean_finite([r.amplitude_out_v for r in readings]),
        captures=n,
        flags=int(flags),
        dof_eff_gain=float(n - 1),
        dof_eff_phase=float(n - 1),
        u_gain_type_a_db=u_gain,
        u_phase_type_a_deg=u_phase,
    )


def _mean_finite(values: list[float]) -> float:
    finite = [v for v in values if math.isfinite(v)]
    return float(np.mean(finite)) if finite else math.nan


__all__ = ["MIN_READINGS", "mean_and_type_a", "measure_with_meter"]
