"""Circuit handbook facts: corners, slopes, phases, resonance and Q.

Each check names its source; "common practice" marks trade knowledge. Formulas are the
standard first- and second-order results found in any circuit-analysis textbook.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeper.circuits import build_circuit, figures

R, C = 1.6e3, 100e-9
FC_HZ = 1 / (2 * math.pi * R * C)  # handbook: first-order RC corner fc = 1/(2 pi R C)
HALF_POWER_DB = 20 * math.log10(1 / math.sqrt(2))  # -3.0103 dB


def _gain_phase(circuit, frequency_hz: float) -> tuple[float, float]:
    h = circuit.response(np.array([frequency_hz]))[0]
    return 20 * math.log10(abs(h)), math.degrees(np.angle(h))


def test_rc_lowpass_corner_gain_and_phase() -> None:
    # Handbook: H = 1/(1 + j w R C); fc = 1/(2 pi R C); |H(fc)| = 1/sqrt(2) (-3.0103 dB); phase -45 deg.
    circuit = build_circuit("rc-lowpass", {"R": R, "C": C})
    result = figures(circuit)
    # Tolerance: the root finder stops at ~1e-14 in log10(f); 1e-10 relative is ample.
    assert result["corner_hz"] == pytest.approx(FC_HZ, rel=1e-10)
    assert result["corner_analytic_hz"] == pytest.approx(FC_HZ, rel=1e-12)
    gain_db, phase_deg = _gain_phase(circuit, FC_HZ)
    # Tolerance: float64 evaluation of a closed form, rounding only.
    assert gain_db == pytest.approx(HALF_POWER_DB, abs=1e-9)
    assert gain_db == pytest.approx(-3.0103, abs=5e-5)  # the rounded handbook figure
    assert phase_deg == pytest.approx(-45.0, abs=1e-9)


def test_rc_lowpass_rolls_off_at_20_db_per_decade() -> None:
    # Handbook: a first-order low-pass falls 20 dB per decade well above fc. Between 100 fc and
    # 1000 fc the exact slope differs from -20 by 10 log10((1 + 1e4)/(1 + 1e6)) + 20 = 4.3e-4 dB,
    # so 0.01 dB is a fair tolerance that a wrong order (-40 dB/dec) or wrong corner cannot meet.
    circuit = build_circuit("rc-lowpass", {"R": R, "C": C})
    g100, _ = _gain_phase(circuit, 100 * FC_HZ)
    g1000, _ = _gain_phase(circuit, 1000 * FC_HZ)
    assert g1000 - g100 == pytest.approx(-20.0, abs=0.01)


def test_cr_highpass_corner_phase_is_plus_45() -> None:
    # Handbook: H = j w R C / (1 + j w R C); at fc gain -3.0103 dB and phase +45 deg.
    circuit = build_circuit("cr-highpass", {"C": C, "R": R})
    gain_db, phase_deg = _gain_phase(circuit, FC_HZ)
    assert gain_db == pytest.approx(HALF_POWER_DB, abs=1e-9)  # rounding only
    assert phase_deg == pytest.approx(45.0, abs=1e-9)
    assert figures(circuit)["corner_hz"] == pytest.approx(FC_HZ, rel=1e-10)  # root-finder tolerance


def test_first_order_rl_corners() -> None:
    # Handbook: RL and LR first-order corners at R / (2 pi L) (inductor resistance RL = 0).
    r, inductance = 1e3, 10e-3
    corner_hz = r / (2 * math.pi * inductance)
    for topology in ("rl-highpass", "lr-lowpass"):
        result = figures(build_circuit(topology, {"R": r, "L": inductance}))
        assert result["corner_hz"] == pytest.approx(corner_hz, rel=1e-10)  # root-finder tolerance
    # With RL > 0 the closed forms in corner_analytic_hz are derived here by hand (|H|^2 = 1/2
    # relative to the passband); the numerical corner must agree with them.
    for topology in ("rl-highpass", "lr-lowpass"):
        result = figures(build_circuit(topology, {"R": r, "L": inductance, "RL": 40.0}))
        assert result["corner_hz"] == pytest.approx(result["corner_analytic_hz"], rel=1e-10)


def test_series_rlc_bandpass_resonance_and_q() -> None:
    # Handbook: series RLC, output across R: f0 = 1/(2 pi sqrt(L C)); H(f0) = 1 (0 dB, 0 deg);
    # Q = sqrt(L/C)/R = f0 / bandwidth between the -3.01 dB points (bandwidth = R / (2 pi L)).
    r, inductance, capacitance = 100.0, 10e-3, 100e-9
    circuit = build_circuit("rlc-bandpass", {"R": r, "L": inductance, "C": capacitance})
    f0 = 1 / (2 * math.pi * math.sqrt(inductance * capacitance))
    q = math.sqrt(inductance / capacitance) / r
    result = figures(circuit)
    assert result["f0_hz"] == pytest.approx(f0, rel=1e-15)  # same formula, rounding only
    assert result["q"] == pytest.approx(q, rel=1e-15)
    gain_db, phase_deg = _gain_phase(circuit, f0)
    # Tolerance: reactances cancel at f0 up to float64 rounding (~1e-16 of sqrt(L/C)).
    assert gain_db == pytest.approx(0.0, abs=1e-9)
    assert phase_deg == pytest.approx(0.0, abs=1e-9)
    # Tolerance: both corners from the root finder, ~1e-14 relative each.
    assert result["bandwidth_hz"] == pytest.approx(r / (2 * math.pi * inductance), rel=1e-9)
    assert f0 / result["bandwidth_hz"] == pytest.approx(q, rel=1e-9)
    # Handbook: f0 is the geometric mean of the two -3 dB frequencies of a series RLC band-pass.
    assert math.sqrt(result["corner_low_hz"] * result["corner_high_hz"]) == pytest.approx(f0, rel=1e-9)


def test_series_rlc_lowpass_and_highpass_at_resonance() -> None:
    # Handbook: at f0 the voltage across C (or L) is Q times the drive, lagging (leading) by 90 deg.
    r, inductance, capacitance = 47.0, 4.7e-3, 220e-9
    values = {"R": r, "L": inductance, "C": capacitance}
    f0 = 1 / (2 * math.pi * math.sqrt(inductance * capacitance))
    q = math.sqrt(inductance / capacitance) / r
    for topology, phase in (("rlc-lowpass", -90.0), ("rlc-highpass", 90.0)):
        gain_db, phase_deg = _gain_phase(build_circuit(topology, values), f0)
        assert gain_db == pytest.approx(20 * math.log10(q), abs=1e-9)  # rounding only
        assert phase_deg == pytest.approx(phase, abs=1e-9)


def test_phase_limits() -> None:
    # Common practice: a resistive divider has 0 deg everywhere; output across an inductor
    # (RL high-pass) leads by 90 deg at low frequency; across a capacitor (RC low-pass) it lags
    # by 90 deg at high frequency. At 1e-4 (1e4) times the corner the residue is
    # atan(1e-4) = 0.0057 deg, so a 0.01 deg tolerance still fails a wrong sign or order.
    divider = build_circuit("divider", {"R1": 1e3, "R2": 1e3})
    phases = np.degrees(np.angle(divider.response(np.geomspace(1, 1e9, 50))))
    assert np.all(phases == 0.0)
    r, inductance = 1e3, 10e-3
    rl_corner = r / (2 * math.pi * inductance)
    _, rl_phase = _gain_phase(build_circuit("rl-highpass", {"R": r, "L": inductance}), rl_corner * 1e-4)
    assert rl_phase == pytest.approx(90.0, abs=0.01)
    _, rc_phase = _gain_phase(build_circuit("rc-lowpass", {"R": R, "C": C}), FC_HZ * 1e4)
    assert rc_phase == pytest.approx(-90.0, abs=0.01)


def test_notch_depth() -> None:
    # Handbook: across series L+C the reactances cancel at f0: an ideal notch is a zero of H
    # (infinite depth). With inductor resistance RL the branch leaves RL: H(f0) = RL / (R + RL).
    r, inductance, capacitance = 330.0, 10e-3, 100e-9
    ideal = figures(build_circuit("rlc-notch", {"R": r, "L": inductance, "C": capacitance}))
    # Tolerance: exact cancellation leaves only float64 rounding (~1e-16 of sqrt(L/C) = 316 Ohm,
    # i.e. ~-300 dB); -200 dB is far below anything a finite RL of even a micro-ohm gives.
    assert ideal["notch_depth_db"] < -200.0
    rl = 3.3
    lossy = figures(build_circuit("rlc-notch", {"R": r, "L": inductance, "C": capacitance, "RL": rl}))
    assert lossy["notch_depth_db"] == pytest.approx(20 * math.log10(rl / (r + rl)), abs=1e-9)  # rounding only
    assert lossy["q"] == pytest.approx(math.sqrt(inductance / capacitance) / (r + rl), rel=1e-15)


def test_lc_supply_filter_resonance() -> None:
    # Handbook: an LC filter with inductor resistance RL and no load is a series RLC with the
    # output across C: |H(f0)| = Q = sqrt(L/C) / RL, phase -90 deg; DC gain 1.
    inductance, capacitance, rl = 10e-6, 100e-6, 0.05
    circuit = build_circuit("lc-supply", {"L": inductance, "C": capacitance, "RL": rl})
    f0 = 1 / (2 * math.pi * math.sqrt(inductance * capacitance))
    q = math.sqrt(inductance / capacitance) / rl
    result = figures(circuit)
    assert result["f0_hz"] == pytest.approx(f0, rel=1e-15)  # same formula
    assert result["q"] == pytest.approx(q, rel=1e-12)  # from the denominator coefficients: rounding only
    gain_db, phase_deg = _gain_phase(circuit, f0)
    assert gain_db == pytest.approx(20 * math.log10(q), abs=1e-9)
    assert phase_deg == pytest.approx(-90.0, abs=1e-9)
    assert result["passband_gain_db"] == pytest.approx(0.0, abs=1e-12)
    # Handbook: with a load resistor the DC gain is the resistive divider RLOAD / (RL + RLOAD).
    loaded = figures(build_circuit("lc-supply", {"L": inductance, "C": capacitance, "RL": rl, "RLOAD": 2.0}))
    assert loaded["passband_gain_db"] == pytest.approx(20 * math.log10(2.0 / 2.05), abs=1e-12)


def test_slowest_time_constants() -> None:
    # Handbook: an RC low-pass has tau = R C; an underdamped series RLC decays as exp(-R t / 2L),
    # tau = 2 L / R; a resistive divider has no memory (0 s).
    assert build_circuit("rc-lowpass", {"R": R, "C": C}).slowest_time_constant_s() == pytest.approx(
        R * C, rel=1e-12
    )
    rlc = build_circuit("rlc-bandpass", {"R": 100.0, "L": 10e-3, "C": 100e-9})
    assert rlc.slowest_time_constant_s() == pytest.approx(2 * 10e-3 / 100.0, rel=1e-12)  # root rounding
    assert build_circuit("divider", {"R1": 1.0, "R2": 1.0}).slowest_time_constant_s() == 0.0
    # Rational: the slowest pole given, -20 Hz -> tau = 1 / (2 pi 20).
    rational = build_circuit("rational", {}, poles_hz=(-20.0, -1e3 + 5e2j, -1e3 - 5e2j))
    assert rational.slowest_time_constant_s() == pytest.approx(1 / (2 * math.pi * 20.0), rel=1e-15)


def test_figures_undefined_are_nan() -> None:
    result = figures(build_circuit("divider", {"R1": 1e3, "R2": 1e3}))
    assert result["passband_gain_db"] == pytest.approx(20 * math.log10(0.5), abs=1e-12)  # handbook divider
    for key in ("corner_hz", "f0_hz", "q", "bandwidth_hz", "notch_depth_db"):
        assert math.isnan(result[key])
