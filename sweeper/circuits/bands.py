"""Tolerance bands: the spread of gain and phase a circuit's component tolerances allow.

Phases of every off-nominal response are taken relative to the nominal one (nominal +
wrap(off-nominal - nominal)), so a band that reaches past +-180 degrees stays one interval
around the nominal instead of splitting at the cut. The nominal phase itself is wrapped to
(-180, 180]; band edges may therefore lie slightly outside that range.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

from sweeper.circuits import impedance
from sweeper.circuits.circuit import Circuit, build_circuit
from sweeper.circuits.loading import Loading

DISTRIBUTIONS = ("uniform", "normal")


@dataclass
class Band:
    """Nominal response and its tolerance band at each frequency (arrays of one length)."""

    frequency_hz: np.ndarray
    nominal_gain_db: np.ndarray
    nominal_phase_deg: np.ndarray  # wrapped to (-180, 180]
    gain_lo_db: np.ndarray
    gain_hi_db: np.ndarray
    phase_lo_deg: np.ndarray
    phase_hi_deg: np.ndarray


def wrap_deg(phase_deg: np.ndarray) -> np.ndarray:
    """Wrap angles (degrees) to (-180, 180]."""
    return 180.0 - np.mod(180.0 - np.asarray(phase_deg, dtype=float), 360.0)


def _prepare(
    topology: str,
    nominal: Mapping[str, float],
    tolerance: Mapping[str, float],
    loading: Loading | None,
    rational: dict,
) -> tuple[Circuit, dict[str, float]]:
    """The nominal circuit and the toleranced parts (name -> fraction > 0), in catalog order."""
    circuit = build_circuit(topology, nominal, loading, **rational)
    for name, fraction in tolerance.items():
        if name not in circuit.values:
            expected = ", ".join(circuit.values) or "no components"
            raise ValueError(
                f"{topology}: tolerance of {name!r}: unknown component, expected one of: {expected}"
            )
        if isinstance(fraction, bool) or not isinstance(fraction, (int, float)) or not 0 <= fraction < 1:
            raise ValueError(
                f"{topology}: tolerance of {name!r}: given {fraction!r}, "
                "expected a fraction in [0, 1) (0.01 = 1 %)"
            )
    toleranced = {name: float(tolerance[name]) for name in circuit.values if tolerance.get(name, 0) > 0}
    return circuit, toleranced


def _band(
    circuit: Circuit,
    frequency_hz: np.ndarray,
    sets: dict[str, np.ndarray],
    percentiles: tuple[float, float] | None,
) -> Band:
    """Evaluate the component sets (name -> column of shape (K, 1)) and reduce to a band:
    min/max over the sets when percentiles is None, else those percentiles."""
    frequency_hz = np.asarray(frequency_hz, dtype=float)
    nominal_h = circuit.response(frequency_hz)
    values = {name: sets.get(name, value) for name, value in circuit.values.items()}
    h = impedance.response(
        circuit.topology,
        values,
        circuit.loading,
        frequency_hz,
        circuit.zeros_hz,
        circuit.poles_hz,
        circuit.gain,
    )
    return band_of_responses(frequency_hz, nominal_h, np.atleast_2d(h), percentiles)


def band_of_responses(
    frequency_hz: np.ndarray,
    nominal_h: np.ndarray,
    h: np.ndarray,
    percentiles: tuple[float, float] | None,
) -> Band:
    """A band from the nominal response (F,) and off-nominal responses (K, F), complex: min/max
    over the K when percentiles is None, else those percentiles (%); phases relative to nominal."""
    with np.errstate(divide="ignore", invalid="ignore"):
        nominal_gain_db = 20 * np.log10(np.abs(nominal_h))
        nominal_phase_deg = wrap_deg(np.degrees(np.angle(nominal_h)))
        gain_db = 20 * np.log10(np.abs(h))
        phase_deg = nominal_phase_deg + np.degrees(np.angle(h / nominal_h))
    if percentiles is None:
        gain_lo, gain_hi = gain_db.min(axis=0), gain_db.max(axis=0)
        phase_lo, phase_hi = phase_deg.min(axis=0), phase_deg.max(axis=0)
    else:
        gain_lo, gain_hi = np.percentile(gain_db, percentiles, axis=0)
        phase_lo, phase_hi = np.percentile(phase_deg, percentiles, axis=0)
    return Band(np.asarray(frequency_hz, dtype=float), nominal_gain_db, nominal_phase_deg, gain_lo, gain_hi,
                phase_lo, phase_hi)


def check_monte_carlo(samples: int, percentiles: tuple[float, float], distribution: str) -> tuple[float, float]:
    """Validate Monte Carlo settings (ValueError saying what was expected); the percentiles as floats."""
    if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)) or samples < 1:
        raise ValueError(f"monte carlo: samples: given {samples!r}, expected an integer >= 1")
    lo, hi = (float(p) for p in percentiles)
    if not (0 <= lo <= hi <= 100) or math.isnan(lo) or math.isnan(hi):
        raise ValueError(f"monte carlo: percentiles: given {percentiles!r}, expected 0 <= lo <= hi <= 100")
    if distribution not in DISTRIBUTIONS:
        raise ValueError(
            f"monte carlo: distribution: given {distribution!r}, expected one of {', '.join(DISTRIBUTIONS)}"
        )
    return lo, hi


def unit_draws(rng: np.random.Generator, distribution: str, samples: int) -> np.ndarray:
    """Deviations in units of the tolerance, in [-1, 1]: uniform, or normal with the tolerance at
    3 sigma, clipped to +-1."""
    if distribution == "uniform":
        return rng.uniform(-1.0, 1.0, samples)
    return np.clip(rng.normal(0.0, 1.0 / 3.0, samples), -1.0, 1.0)


def worst_case_band(
    topology: str,
    nominal: Mapping[str, float],
    tolerance: Mapping[str, float],
    frequency_hz: np.ndarray,
    loading: Loading | None = None,
    *,
    zeros_hz: Iterable[complex] = (),
    poles_hz: Iterable[complex] = (),
    gain: float = 1.0,
) -> Band:
    """Band from every corner of the tolerance box (each toleranced part at nominal * (1 +- t),
    2^n combinations) plus the nominal, as min/max per frequency (Hz).

    tolerance: fractions (0.01 = 1 %); parts absent or at 0 are held at nominal. Exact for
    responses monotonic in each part; near a resonance an interior point can reach further.
    """
    circuit, toleranced = _prepare(
        topology, nominal, tolerance, loading, {"zeros_hz": zeros_hz, "poles_hz": poles_hz, "gain": gain}
    )
    corners = list(itertools.product((-1.0, 1.0), repeat=len(toleranced)))
    signs = np.array([*corners, [0.0] * len(toleranced)])
    sets = {
        name: (circuit.values[name] * (1 + fraction * signs[:, i]))[:, np.newaxis]
        for i, (name, fraction) in enumerate(toleranced.items())
    }
    return _band(circuit, frequency_hz, sets, None)


def monte_carlo_band(
    topology: str,
    nominal: Mapping[str, float],
    tolerance: Mapping[str, float],
    frequency_hz: np.ndarray,
    loading: Loading | None = None,
    samples: int = 2000,
    percentiles: tuple[float, float] = (0.5, 99.5),
    seed: int = 0,
    distribution: str = "uniform",
    *,
    zeros_hz: Iterable[complex] = (),
    poles_hz: Iterable[complex] = (),
    gain: float = 1.0,
) -> Band:
    """Band from `samples` random component sets, the given percentiles (%) per frequency (Hz).

    "uniform": each toleranced part uniform within nominal * (1 +- t); "normal": normal with
    t = 3 sigma, clipped to +-t. Deterministic for a given seed; parts at 0 tolerance held at
    nominal. All samples are evaluated at once (arrays of samples x frequencies).
    """
    circuit, toleranced = _prepare(
        topology, nominal, tolerance, loading, {"zeros_hz": zeros_hz, "poles_hz": poles_hz, "gain": gain}
    )
    lo, hi = check_monte_carlo(samples, percentiles, distribution)
    rng = np.random.default_rng(seed)
    sets = {
        name: (circuit.values[name] * (1 + fraction * unit_draws(rng, distribution, samples)))[:, np.newaxis]
        for name, fraction in toleranced.items()
    }
    return _band(circuit, frequency_hz, sets, (lo, hi))
