"""Every topology's response against scipy.signal.freqs on the circuit's own (b, a).

Circuit.response evaluates complex impedances directly; Circuit.ba builds coefficients by
polynomial algebra. The two share only the arm structure of the topology, so agreement checks
both the impedance arithmetic and the polynomial algebra. Reference: scipy.signal.freqs
(general-purpose evaluation of b(s) / a(s) at s = j w).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import freqs

from sweeper.circuits import COMPONENTS, Loading, build_circuit

# Invented example parts, chosen so that corners and resonances sit in the audio/RF range.
EXAMPLES = {
    "divider": {"R1": 1.0e3, "R2": 2.2e3},
    "rc-lowpass": {"R": 1.6e3, "C": 100e-9},
    "cr-highpass": {"C": 47e-9, "R": 3.3e3},
    "rl-highpass": {"R": 1.0e3, "L": 10e-3, "RL": 4.7},
    "lr-lowpass": {"L": 22e-3, "R": 470.0, "RL": 8.2},
    "rlc-bandpass": {"R": 100.0, "L": 10e-3, "C": 100e-9},
    "rlc-lowpass": {"R": 47.0, "L": 4.7e-3, "C": 220e-9},
    "rlc-highpass": {"R": 220.0, "L": 1e-3, "C": 1e-6},
    "rlc-notch": {"R": 330.0, "L": 10e-3, "C": 100e-9, "RL": 3.0},
    "lc-supply": {"L": 10e-6, "C": 100e-6, "RL": 0.05, "RC": 0.02, "RLOAD": 5.0},
}

LOADINGS = {
    "ideal": Loading(),
    "probe": Loading(probe_resistance_ohm=1e6, probe_capacitance_f=15e-12),
    "probe+load": Loading(probe_resistance_ohm=10e6, probe_capacitance_f=12e-12, load_resistance_ohm=10e3),
    "source": Loading(
        source_resistance_ohm=50.0,
        probe_resistance_ohm=1e6,
        probe_capacitance_f=15e-12,
        load_resistance_ohm=100e3,
        reference="source",
    ),
    "source-ideal-probe": Loading(source_resistance_ohm=600.0, reference="source"),
}

RATIONALS = {
    # DC gain 2: gain = 2 * (2 pi 1 kHz) * (2 pi 20 kHz)
    "two-pole": {
        "zeros_hz": (),
        "poles_hz": (-1e3, -20e3),
        "gain": 2 * (2 * math.pi * 1e3) * (2 * math.pi * 20e3),
    },
    "resonant-pair": {"zeros_hz": (0.0,), "poles_hz": (-300 + 4e3j, -300 - 4e3j), "gain": 5.0},
    "non-minimum-phase": {
        "zeros_hz": (2e3, -1e4 + 3e3j, -1e4 - 3e3j),
        "poles_hz": (-500, -3e3, -8e3, -5e4),
        "gain": -7.0,
    },
}

# Tolerance: both sides are float64 evaluations of the same rational function; rounding leaves
# differences near 1e-15 relative (more only where a notch zero makes H itself tiny). 1e-9 is
# six orders above that, while any wrong coefficient or arm changes H far more than 1e-9.
RTOL = 1e-9


def _frequencies(circuit) -> np.ndarray:
    """>= 200 log-spaced frequencies reaching 3 decades past the natural frequencies."""
    b, a = circuit.ba()
    roots = np.abs(np.concatenate([np.roots(b), np.roots(a)]))
    roots = roots[roots > 0] / (2 * np.pi)
    low, high = (roots.min() / 1e3, roots.max() * 1e3) if roots.size else (1.0, 1e7)
    return np.geomspace(low, high, 240)


def test_every_catalog_topology_has_an_example() -> None:
    assert set(EXAMPLES) | {"rational"} == set(COMPONENTS)


@pytest.mark.parametrize("loading_name", list(LOADINGS))
@pytest.mark.parametrize("topology", list(EXAMPLES))
def test_topology_matches_scipy_freqs(topology: str, loading_name: str) -> None:
    circuit = build_circuit(topology, EXAMPLES[topology], LOADINGS[loading_name])
    frequency_hz = _frequencies(circuit)
    b, a = circuit.ba()
    _, reference = freqs(b, a, worN=2 * np.pi * frequency_hz)  # reference: scipy.signal.freqs
    np.testing.assert_allclose(circuit.response(frequency_hz), reference, rtol=RTOL, atol=0)


@pytest.mark.parametrize("loading_name", list(LOADINGS))
@pytest.mark.parametrize("name", list(RATIONALS))
def test_rational_matches_scipy_freqs(name: str, loading_name: str) -> None:
    circuit = build_circuit("rational", {}, LOADINGS[loading_name], **RATIONALS[name])
    frequency_hz = _frequencies(circuit)
    b, a = circuit.ba()
    _, reference = freqs(b, a, worN=2 * np.pi * frequency_hz)  # reference: scipy.signal.freqs
    np.testing.assert_allclose(circuit.response(frequency_hz), reference, rtol=RTOL, atol=0)


def test_rational_ba_matches_scipy_zpk2tf() -> None:
    # Reference: scipy.signal.zpk2tf builds (b, a) from zeros, poles and gain in rad/s.
    from scipy.signal import zpk2tf

    spec = RATIONALS["non-minimum-phase"]
    b, a = build_circuit("rational", {}, **spec).ba()
    zeros = 2 * np.pi * np.array(spec["zeros_hz"])
    poles = 2 * np.pi * np.array(spec["poles_hz"])
    b_ref, a_ref = zpk2tf(zeros, poles, spec["gain"])
    # Tolerance: coefficient products of up to four roots, float64 rounding only.
    np.testing.assert_allclose(b, np.real(b_ref) / a_ref[0], rtol=1e-12)
    np.testing.assert_allclose(a, np.real(a_ref) / a_ref[0], rtol=1e-12)


def test_probe_capacitance_adds_an_order_and_infinite_resistances_drop_out() -> None:
    # RL high-pass: first order; a probe capacitance across L adds a second energy store.
    # (Across the C of an RC low-pass it would not: two parallel capacitors are one.)
    plain = build_circuit("rl-highpass", {"R": 1e3, "L": 10e-3})
    probed = build_circuit("rl-highpass", {"R": 1e3, "L": 10e-3}, Loading(probe_capacitance_f=15e-12))
    assert len(plain.ba()[1]) == 2
    assert len(probed.ba()[1]) == 3
    # A resistive divider with ideal probe and no load is a constant R2 / (R1 + R2).
    b, a = build_circuit("divider", {"R1": 1e3, "R2": 3e3}).ba()
    assert b.shape == a.shape == (1,)
    assert b[0] / a[0] == pytest.approx(0.75, rel=1e-15)  # float64 rounding only
    # lc-supply without a load resistor: the series R-L-C of a second-order low-pass.
    assert len(build_circuit("lc-supply", {"L": 1e-5, "C": 1e-4}).ba()[1]) == 3
