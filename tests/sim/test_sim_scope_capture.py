"""Scope captures through the DUT, checked against circuit handbook formulas and Ohm's law.

Every capture goes through real pyvisa sessions (query_binary_values / query_ascii_values)
and is scaled with the instrument's own scaling answers. Tolerances are 5 standard deviations of
the fitted quantity, from the Cramer-Rao bound of a sine fit, sqrt(2 / M) * sigma (Andersson
and Handel), with sigma combining the configured white noise and the 8-bit quantisation noise
lsb / sqrt(12).

The quantisation noise model needs dither: an undithered 8-bit quantiser gives a sine a
deterministic amplitude error (about 6e-4 relative at 62 codes peak, tried with numpy), which
does not average down with M. Gaussian noise of at least half an LSB rms makes the error's mean
practically independent of the signal (non-subtractive dither, Widrow's quantisation theory;
the residual scales as exp(-2 pi^2 sigma^2 / lsb^2) < 1 %), so these tests run with 10 mV rms
noise, >= 0.5 LSB on every range used (largest LSB: 10 x 0.5 V / 256 = 19.5 mV).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sim_rig import CORNER_HZ, C_LOWPASS_F, R_LOWPASS_OHM, amplitude_sigma_v, divider, fit_phasor, fit_sine, rc_lowpass

NOISE_V = 10e-3  # V rms; dither for the 8-bit quantiser (see above)
SOURCE_OHM = 50.0  # generator source resistance (DIALECTS.md)
DB_PER_NEPER = 20 / math.log(10)  # d(20 log10 x) = 8.686 dx / x


def gain_phase(z_in: complex, z_out: complex) -> tuple[float, float]:
    """Gain 20 log10 |out / in| (dB) and phase of out relative to in (degrees)."""
    ratio = z_out / z_in
    return 20 * math.log10(abs(ratio)), math.degrees(math.atan2(ratio.imag, ratio.real))


def ratio_sigma(sigma_in: float, a_in: float, sigma_out: float, a_out: float) -> float:
    """Relative standard deviation of an amplitude ratio (= phase standard deviation in rad)."""
    return math.hypot(sigma_in / a_in, sigma_out / a_out)


def test_divider_gain_and_phase_scope_a(open_rig):
    r1, r2 = 1e3, 1e3
    rig = open_rig(divider(r1, r2), noise_v=NOISE_V, seed=1)
    frequency_hz = 997.0  # incoherent with the sample rate: quantisation error averages like noise
    rig.drive(frequency_hz, amplitude_vpp=2.0)
    volts, dt = rig.capture_a((0.5, 0.2), sample_rate_hz=1e5, points=10_000)
    z_in, z_out = fit_phasor(volts[0], dt, frequency_hz), fit_phasor(volts[1], dt, frequency_hz)
    gain_db, phase_deg = gain_phase(z_in, z_out)

    # Ohm's law: 1 V peak EMF (2 Vpp, high-Z setting) across R_s + R1 + R2; voltage divider R2 / (R1 + R2).
    expected_in_v = 1.0 * (r1 + r2) / (r1 + r2 + SOURCE_OHM)
    expected_ratio = r2 / (r1 + r2)
    sigma_in = amplitude_sigma_v(NOISE_V, 8 * 0.5 / 256, 10_000)  # 8 divisions of 0.5 V over 256 codes
    sigma_out = amplitude_sigma_v(NOISE_V, 8 * 0.2 / 256, 10_000)
    rel = ratio_sigma(sigma_in, expected_in_v, sigma_out, expected_in_v * expected_ratio)
    assert abs(z_in) == pytest.approx(expected_in_v, abs=5 * sigma_in)
    assert gain_db == pytest.approx(20 * math.log10(expected_ratio), abs=5 * DB_PER_NEPER * rel)
    assert phase_deg == pytest.approx(0.0, abs=5 * math.degrees(rel))


def test_rc_lowpass_at_corner_scope_a(open_rig):
    rig = open_rig(rc_lowpass(), noise_v=NOISE_V, seed=2)
    rig.drive(CORNER_HZ, amplitude_vpp=2.0)
    volts, dt = rig.capture_a((0.5, 0.2), sample_rate_hz=1e5, points=10_000)
    z_in, z_out = fit_phasor(volts[0], dt, CORNER_HZ), fit_phasor(volts[1], dt, CORNER_HZ)
    gain_db, phase_deg = gain_phase(z_in, z_out)

    # Handbook: first-order RC low-pass at fc = 1 / (2 pi R C): |H| = 1 / sqrt(2) (-3.01 dB), -45 degrees.
    sigma_in = amplitude_sigma_v(NOISE_V, 8 * 0.5 / 256, 10_000)
    sigma_out = amplitude_sigma_v(NOISE_V, 8 * 0.2 / 256, 10_000)
    rel = ratio_sigma(sigma_in, abs(z_in), sigma_out, abs(z_out))
    assert gain_db == pytest.approx(20 * math.log10(1 / math.sqrt(2)), abs=5 * DB_PER_NEPER * rel)
    assert phase_deg == pytest.approx(-45.0, abs=5 * math.degrees(rel))
    # Ohm's law at the input node: Z_in = R + 1 / (j w C) against the 50 Ohm source.
    z_dut = R_LOWPASS_OHM + 1 / (2j * math.pi * CORNER_HZ * C_LOWPASS_F)
    assert abs(z_in) == pytest.approx(abs(z_dut / (z_dut + SOURCE_OHM)), abs=5 * sigma_in)


def test_scope_b_ascii_path_gives_the_same_answer_as_a(open_rig):
    rig = open_rig(rc_lowpass(), noise_v=NOISE_V, seed=3)
    rig.drive(CORNER_HZ, amplitude_vpp=2.0)
    volts_a, dt_a = rig.capture_a((0.5, 0.2), sample_rate_hz=1e5, points=10_000)
    # Scope B: 10 divisions; 10 ms/div over 10000 points = 10 us per sample; trace moved up 1 division.
    volts_b, dt_b, codes_b = rig.capture_b((0.5, 0.2), seconds_per_div=0.01, record=10_000, position_div=1.0)
    assert dt_b == pytest.approx(dt_a, rel=1e-12)
    assert codes_b.min() > -128 and codes_b.max() < 127  # positioned, yet not clipped
    a = gain_phase(fit_phasor(volts_a[0], dt_a, CORNER_HZ), fit_phasor(volts_a[1], dt_a, CORNER_HZ))
    b = gain_phase(fit_phasor(volts_b[0], dt_b, CORNER_HZ), fit_phasor(volts_b[1], dt_b, CORNER_HZ))

    a_in, a_out = 0.985, 0.985 / math.sqrt(2)  # approximate amplitudes, V (only for the tolerance)
    rel_a = ratio_sigma(
        amplitude_sigma_v(NOISE_V, 8 * 0.5 / 256, 10_000), a_in, amplitude_sigma_v(NOISE_V, 8 * 0.2 / 256, 10_000), a_out
    )
    rel_b = ratio_sigma(
        amplitude_sigma_v(NOISE_V, 10 * 0.5 / 256, 10_000), a_in, amplitude_sigma_v(NOISE_V, 10 * 0.2 / 256, 10_000), a_out
    )
    rel = math.hypot(rel_a, rel_b)
    assert b[0] == pytest.approx(a[0], abs=5 * DB_PER_NEPER * rel)
    assert b[1] == pytest.approx(a[1], abs=5 * math.degrees(rel))
    # Both against the handbook corner values.
    assert b[0] == pytest.approx(20 * math.log10(1 / math.sqrt(2)), abs=5 * DB_PER_NEPER * rel_b)
    assert b[1] == pytest.approx(-45.0, abs=5 * math.degrees(rel_b))


@pytest.mark.parametrize(("load", "expected_peak_v"), [("50", 0.5), ("HIZ", 0.25)])
def test_load_setting_50_ohm_doubles_the_emf(open_rig, load, expected_peak_v):
    # A 50 Ohm DUT input (25 + 25 Ohm divider). Common practice: with the generator's load set
    # to 50 Ohm, the displayed 1 Vpp is what a 50 Ohm load sees (0.5 V peak), because the EMF is
    # doubled; with the high-Z setting the EMF is 1 Vpp and the 50/50 Ohm divider halves it.
    rig = open_rig(divider(25.0, 25.0), noise_v=NOISE_V, seed=4)
    rig.drive(997.0, amplitude_vpp=1.0, load=load)
    volts, dt = rig.capture_a((0.2, 0.1), sample_rate_hz=1e5, points=10_000)
    sigma = amplitude_sigma_v(NOISE_V, 8 * 0.2 / 256, 10_000)
    assert abs(fit_phasor(volts[0], dt, 997.0)) == pytest.approx(expected_peak_v, abs=5 * sigma)


def test_clipping_when_the_range_is_too_small(open_rig):
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=5)
    rig.drive(997.0, amplitude_vpp=2.0)
    rig.capture_a((0.01, 0.2), sample_rate_hz=1e5, points=10_000, width_bits=8)  # lane 1: +-40 mV screen
    s = rig.scope_a
    codes_in = s.query_binary_values("LANE1:BLOC?", datatype="b", container=np.array)
    codes_out = s.query_binary_values("LANE2:BLOC?", datatype="b", container=np.array)
    # DIALECTS.md: the ADC clips at the screen edges, codes -128 and +127.
    assert codes_in.min() == -128 and codes_in.max() == 127
    # Geometry of a sine of amplitude A through a window +-W: the fraction of time outside is
    # 1 - (2 / pi) asin(W / A). Tolerance 0.005: the half-code edge (0.16 mV) moves it by 1e-4,
    # the 10000 incoherent samples by about 1e-3.
    amplitude_v = 1.0 * 2000 / 2050  # Ohm's law, as in the divider test
    expected_fraction = 1 - (2 / math.pi) * math.asin(0.04 / amplitude_v)
    clipped_fraction = np.mean((codes_in == -128) | (codes_in == 127))
    assert clipped_fraction == pytest.approx(expected_fraction, abs=0.005)
    # Channel 2 on a suitable range does not clip.
    assert codes_out.min() > -128 and codes_out.max() < 127


def test_offset_setting_and_ac_coupling(open_rig):
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=6)
    rig.drive(997.0, amplitude_vpp=0.2, offset_v=1.0)
    dc_in_v = 1.0 * 2000 / 2050  # Ohm's law: 1 V DC EMF across 50 Ohm + 2 kOhm
    sigma = amplitude_sigma_v(NOISE_V, 8 * 0.05 / 256, 10_000)
    s = rig.scope_a
    # DC coupling, screen centred on +1 V: the whole signal is on screen.
    s.write("LANE1:CENT 1.0")
    volts, dt = rig.capture_a((0.05, 0.05), sample_rate_hz=1e5, points=10_000)
    phasors, dc = fit_sine(volts[0], dt, 997.0)
    assert dc == pytest.approx(dc_in_v, abs=5 * sigma)
    assert abs(phasors[0]) == pytest.approx(0.1 * dc_in_v, abs=5 * sigma)
    # AC coupling removes the DC level: centred on 0 V the same range holds the signal.
    s.write("LANE1:CENT 0")
    s.write("LANE1:COUP AC")
    assert s.query("LANE1:COUP?") == "AC"
    volts, dt = rig.capture_a((0.05, 0.05), sample_rate_hz=1e5, points=10_000)
    phasors, dc = fit_sine(volts[0], dt, 997.0)
    assert dc == pytest.approx(0.0, abs=5 * sigma)
    assert abs(phasors[0]) == pytest.approx(0.1 * dc_in_v, abs=5 * sigma)


def test_source_distortion_passes_through_the_dut_at_its_own_frequency(open_rig):
    fraction = 0.05
    rig = open_rig(rc_lowpass(), noise_v=NOISE_V, distortion_frac=fraction, seed=7)
    f = 997.0
    rig.drive(f, amplitude_vpp=2.0)
    volts, dt = rig.capture_a((0.5, 0.2), sample_rate_hz=1e5, points=50_000)
    p_in, _ = fit_sine(volts[0], dt, f, harmonics=3)
    p_out, _ = fit_sine(volts[1], dt, f, harmonics=3)

    def z_dut(freq_hz: float) -> complex:  # series R and C: Z = R + 1 / (j w C)
        return R_LOWPASS_OHM + 1 / (2j * math.pi * freq_hz * C_LOWPASS_F)

    def h(freq_hz: float) -> complex:  # handbook RC low-pass: H = 1 / (1 + j w R C)
        return 1 / (1 + 2j * math.pi * freq_hz * R_LOWPASS_OHM * C_LOWPASS_F)

    def divider_gain(freq_hz: float) -> float:  # Ohm's law against the 50 Ohm source
        return abs(z_dut(freq_hz) / (z_dut(freq_hz) + SOURCE_OHM))

    sigma_in = amplitude_sigma_v(NOISE_V, 8 * 0.5 / 256, 50_000)
    sigma_out = amplitude_sigma_v(NOISE_V, 8 * 0.2 / 256, 50_000)
    for k in (2, 3):
        # Each harmonic leaves the source at `fraction` of the fundamental and is divided and
        # filtered at its own frequency k f.
        expected_in = fraction * divider_gain(k * f) / divider_gain(f)
        expected_out = expected_in * abs(h(k * f)) / abs(h(f))
        assert abs(p_in[k - 1]) / abs(p_in[0]) == pytest.approx(expected_in, abs=5 * sigma_in / abs(p_in[0]))
        assert abs(p_out[k - 1]) / abs(p_out[0]) == pytest.approx(expected_out, abs=5 * sigma_out / abs(p_out[0]))


def test_a_setting_changed_after_the_acquisition_makes_its_data_stale(open_rig):
    # DIALECTS.md (clarifications): the legend describes current settings, so data taken with
    # other settings is refused rather than scaled wrongly.
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=8)
    rig.drive(997.0, amplitude_vpp=1.0)
    rig.capture_a((0.5, 0.5), sample_rate_hz=1e5, points=2000)
    a = rig.scope_a
    a.write("CAPT:WIDT 8")  # the transfer width does not invalidate the data
    assert len(a.query_binary_values("LANE1:BLOC?", datatype="b")) == 2000
    a.write("LANE2:DIV 0.5")  # same value: nothing changes
    assert len(a.query_binary_values("LANE1:BLOC?", datatype="b")) == 2000
    a.write("LANE2:DIV 1")
    assert a.query_binary_values("LANE1:BLOC?", datatype="b") == []
    assert a.query("SYST:ERR?") == '-230,"Data corrupt or stale"'
    b = rig.scope_b
    rig.capture_b((0.5, 0.5), seconds_per_div=1e-3, record=1000)
    b.write("FRAM:PITC 2e-3")
    assert b.query("LIST:COD?") == ""
    assert b.query("SYST:ERR?") == '-230,"Data corrupt or stale"'
