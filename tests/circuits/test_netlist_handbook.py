"""Netlist responses against handbook formulas and scipy.signal (references named at each check).

Tolerances: both sides are float64 evaluations of the same rational function, differing by
rounding (about 1e-14 relative seen); 1e-9 relative (9e-9 dB) is five orders above that and far
below any error a wrong stamp or node would make.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from netlist_examples import butterworth_qs, butterworth_sallen_key, lc_ladder_5, mfb_bandpass, sallen_key_stage
from scipy import signal
from scipy.optimize import brentq

from sweeper.circuits.figures import HALF_POWER_DB, figures
from sweeper.circuits.netlist import NetlistCircuit, parse_netlist

RTOL = 1e-9


def _circuit(text: str) -> NetlistCircuit:
    return NetlistCircuit(parse_netlist(text))


def test_a_unity_gain_sallen_key_stage_has_the_handbook_f0_and_q() -> None:
    # Handbook: H = 1 / (1 + s C2 (R1 + R2) + s^2 R1 R2 C1 C2); f0 = 1 / (2 pi sqrt(R1 R2 C1 C2)),
    # Q = sqrt(R1 R2 C1 C2) / (C2 (R1 + R2)); at f0 a second-order low-pass has |H| = Q and -90 degrees.
    r1, r2, c1, c2 = 12e3, 6.8e3, 4.7e-9, 1.5e-9  # invented, unequal on purpose
    text = f".input in\n.output out\nR1 in a {r1}\nR2 a b {r2}\nC1 a out {c1}\nC2 b 0 {c2}\nX1 b out out opamp\n"
    circuit = _circuit(text)
    f0 = 1 / (2 * math.pi * math.sqrt(r1 * r2 * c1 * c2))
    q = math.sqrt(r1 * r2 * c1 * c2) / (c2 * (r1 + r2))
    h0 = circuit.response(f0)
    assert abs(h0) == pytest.approx(q, rel=RTOL)
    assert math.degrees(np.angle(h0)) == pytest.approx(-90.0, abs=1e-7)
    # scipy.signal.freqs of the handbook transfer function, 240 frequencies over 4 decades
    f = np.geomspace(f0 / 100, f0 * 100, 240)
    _, reference = signal.freqs([1.0], [r1 * r2 * c1 * c2, c2 * (r1 + r2), 1.0], 2 * np.pi * f)
    np.testing.assert_allclose(circuit.response(f), reference, rtol=RTOL)


def test_a_butterworth_sallen_key_stage_is_3_01_db_down_at_f0() -> None:
    # Handbook: a Butterworth response is -10 log10(2) = -3.0103 dB at its corner, any order.
    f0 = 20e3
    text = ".input in\n.output out\n" + sallen_key_stage("A", "in", "out", 1 / math.sqrt(2), f0)
    assert 20 * math.log10(abs(_circuit(text).response(f0))) == pytest.approx(HALF_POWER_DB, abs=1e-9)


@pytest.mark.parametrize("order", [4, 6, 8])
def test_cascaded_sallen_key_stages_give_scipys_butterworth(order: int) -> None:
    # Reference: scipy.signal.butter(order, w0, analog=True) evaluated by scipy.signal.freqs.
    f0 = 10e3
    circuit = _circuit(butterworth_sallen_key(order, f0))
    f = np.geomspace(f0 / 100, f0 * 30, 240)
    b, a = signal.butter(order, 2 * np.pi * f0, analog=True)
    _, reference = signal.freqs(b, a, 2 * np.pi * f)
    np.testing.assert_allclose(circuit.response(f), reference, rtol=RTOL)
    assert 20 * math.log10(abs(circuit.response(f0))) == pytest.approx(HALF_POWER_DB, abs=1e-9)
    assert figures(circuit)["corner_hz"] == pytest.approx(f0, rel=1e-9)


def test_the_butterworth_stage_qs_are_the_handbook_values() -> None:
    # Handbook table (from memory, 4 digits): 4th order 0.5412, 1.3066.
    assert butterworth_qs(4) == pytest.approx([0.5412, 1.3066], abs=1e-4)


def test_a_multiple_feedback_band_pass_peaks_at_its_design_f0_with_its_design_gain_and_q() -> None:
    # Handbook (MFB band-pass, C1 = C2): gain at f0 = -R3 / (2 R1) (here -2, i.e. 180 degrees),
    # f0 from the design, -3.01 dB bandwidth f0 / Q.
    f0, q, gain = 1e3, 5.0, 2.0
    circuit = _circuit(mfb_bandpass(f0, q, gain))
    h0 = circuit.response(f0)
    assert h0 == pytest.approx(-gain, rel=RTOL)
    def below_half_power(f: float) -> float:
        return abs(circuit.response(f)) ** 2 - gain**2 / 2

    low, high = brentq(below_half_power, f0 / 10, f0, xtol=1e-9), brentq(below_half_power, f0, f0 * 10, xtol=1e-9)
    assert high - low == pytest.approx(f0 / q, rel=1e-9)  # exact for a 2nd-order band-pass (handbook)
    # Reference: the MFB band-pass H = -(s / (R1 C)) / (s^2 + s 2 / (R3 C) + (R1 + R2) / (R1 R2 R3 C^2)), scipy.signal.freqs
    c = 10e-9
    w0 = 2 * math.pi * f0
    r1, r2, r3 = q / (w0 * c * gain), q / (w0 * c * (2 * q * q - gain)), 2 * q / (w0 * c)
    f = np.geomspace(f0 / 100, f0 * 100, 240)
    _, reference = signal.freqs([-1 / (r1 * c), 0.0], [1.0, 2 / (r3 * c), (r1 + r2) / (r1 * r2 * r3 * c * c)], 2 * np.pi * f)
    np.testing.assert_allclose(circuit.response(f), reference, rtol=RTOL)


def test_a_doubly_terminated_lc_ladder_is_half_of_scipys_5th_order_butterworth() -> None:
    # Reference: 0.5 * scipy.signal.butter(5, w0, analog=True); handbook ladder element values.
    f0 = 10e3
    circuit = _circuit(lc_ladder_5(f0))
    f = np.geomspace(f0 / 100, f0 * 30, 240)
    b, a = signal.butter(5, 2 * np.pi * f0, analog=True)
    _, reference = signal.freqs(0.5 * b, a, 2 * np.pi * f)
    np.testing.assert_allclose(circuit.response(f), reference, rtol=1e-8)  # values through 16 printed digits
    assert 20 * math.log10(abs(circuit.response(f0))) == pytest.approx(20 * math.log10(0.5) + HALF_POWER_DB, abs=1e-8)


def test_a_single_pole_op_amp_follower_has_the_closed_loop_gain_a0_over_1_plus_a0() -> None:
    # Handbook (negative feedback): a follower with open-loop A(s) = a0 / (1 + s a0 / wt) has
    # H = A / (1 + A); at DC a0 / (1 + a0), and its -3 dB bandwidth is about the GBW.
    a0, gbw = 1e4, 1e6
    circuit = _circuit(f".input in\n.output out\nR1 in x 1k\nR2 x 0 1k\nX1 x out out opamp a0={a0} gbw={gbw}\n")
    f = np.geomspace(10, 1e8, 241)
    s = 2j * np.pi * f
    a = a0 / (1 + s * a0 / (2 * np.pi * gbw))
    np.testing.assert_allclose(circuit.response(f), 0.5 * a / (1 + a), rtol=RTOL)
