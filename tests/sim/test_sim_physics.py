"""Pure physics functions of the virtual bench against Ohm's law, the handbook and scipy.signal."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal
from sim_rig import C_LOWPASS_F, R_LOWPASS_OHM, rc_lowpass

from sweeper.sim import physics


def test_emf_per_displayed_volt():
    # Common practice: a 50 Ohm load setting on a 50 Ohm source doubles the EMF; high-Z leaves it.
    assert physics.emf_per_displayed_volt(50.0) == 2.0
    assert physics.emf_per_displayed_volt(math.inf) == 1.0
    # Voltage divider: a 150 Ohm load across 50 Ohm sees 3/4 of the EMF.
    assert physics.emf_per_displayed_volt(150.0) == pytest.approx(4 / 3, rel=1e-15)
    with pytest.raises(ValueError):
        physics.emf_per_displayed_volt(0.0)


def test_node_spectrum_of_an_rc_lowpass_matches_scipy_freqs():
    frequencies_hz = [10.0, 1e3, 1e5]
    # Reference library: scipy.signal.freqs of 1 / (R C s + 1), and Ohm's law for the input node.
    _, h = signal.freqs([1.0], [R_LOWPASS_OHM * C_LOWPASS_F, 1.0], worN=2 * np.pi * np.array(frequencies_hz))
    for f, h_ref in zip(frequencies_hz, h):
        spectrum = physics.node_spectrum(rc_lowpass(), f, emf_peak_v=1.0)
        z = R_LOWPASS_OHM + 1 / (2j * math.pi * f * C_LOWPASS_F)
        v_in = z / (z + 50.0)
        # Both sides are double-precision evaluations of the same rational function: 1e-12 relative.
        assert spectrum.input_v[0] == pytest.approx(v_in, rel=1e-12)
        assert spectrum.output_v[0] / spectrum.input_v[0] == pytest.approx(h_ref, rel=1e-12)


def test_dc_through_an_rc_lowpass_and_output_off():
    spectrum = physics.node_spectrum(rc_lowpass(), 1e3, emf_peak_v=0.0, emf_dc_v=2.0)
    # No DC current flows into a capacitor: no drop across the source, the output follows (handbook).
    assert spectrum.dc_input_v == pytest.approx(2.0, rel=1e-9)
    assert spectrum.dc_output_v == pytest.approx(2.0, rel=1e-9)
    assert np.all(spectrum.output_v == 0)


def test_node_values_are_sines_of_the_phasors():
    spectrum = physics.node_spectrum(rc_lowpass(), 1e3, emf_peak_v=1.0)
    phase = np.linspace(0, 2 * np.pi, 1001)
    values = physics.node_values_v(spectrum, phase)
    v_out = spectrum.output_v[0]
    # Im(V exp(j theta)) = |V| sin(theta + arg V)
    assert values[1] == pytest.approx(abs(v_out) * np.sin(phase + np.angle(v_out)), abs=1e-12)


def test_quantise_rounds_and_clips_at_the_screen_edges():
    lsb = 0.01
    codes = physics.quantise(np.array([0.0, 0.004, 0.006, -0.006, 5.0, -5.0]), lsb, centre_v=0.0)
    assert codes.tolist() == [0, 0, 1, -1, 127, -128]
    assert physics.quantise(np.array([1.0]), lsb, centre_v=1.0).tolist() == [0]  # offset: code 0 at the centre


def test_wrap_phase_to_the_half_open_interval():
    assert physics.wrap_phase_deg(180.0) == 180.0
    assert physics.wrap_phase_deg(-180.0) == 180.0
    assert physics.wrap_phase_deg(190.0) == pytest.approx(-170.0)
    assert physics.wrap_phase_deg(-370.0) == pytest.approx(-10.0)


def test_transient_decays_with_the_time_constant():
    values = physics.transient_v(1.0, 2e-3, np.array([0.0, 2e-3, 4e-3]))
    assert values == pytest.approx([1.0, math.exp(-1), math.exp(-2)], rel=1e-15)
    assert np.all(physics.transient_v(1.0, math.inf, np.array([0.0, 1.0])) == 0.0)
