"""Transfer-function coefficients (b, a) in s built by polynomial algebra.

Coefficients are highest power first (the scipy.signal.freqs convention). Impedances are
ratios of polynomials in s; series arms add, parallel arms add admittances, and the divider
with its loading is reduced to one ratio. This path never evaluates a complex impedance (see
`impedance` for that), so comparing the two checks both.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np

from sweeper.circuits.catalog import ARMS, COMPONENTS, Arm
from sweeper.circuits.loading import Loading

Ratio = tuple[np.ndarray, np.ndarray]  # (numerator, denominator), highest power first


def _trim(p: np.ndarray) -> np.ndarray:
    """Drop exact leading zeros (a zero polynomial stays [0.])."""
    p = np.trim_zeros(np.asarray(p, dtype=float), "f")
    return p if p.size else np.zeros(1)


def _add(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    size = max(p.size, q.size)
    return _trim(np.pad(p, (size - p.size, 0)) + np.pad(q, (size - q.size, 0)))


def _mul(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    return _trim(np.convolve(p, q))


def _ratio_sum(ratios: Sequence[Ratio]) -> Ratio:
    numerator, denominator = ratios[0]
    for n, d in ratios[1:]:
        numerator = _add(_mul(numerator, d), _mul(n, denominator))
        denominator = _mul(denominator, d)
    return numerator, denominator


def _leaf_impedance(kind: str, value: float) -> Ratio:
    if kind == "resistance":
        return np.array([value]), np.array([1.0])
    if kind == "inductance":
        return np.array([value, 0.0]), np.array([1.0])
    return np.array([1.0]), np.array([value, 0.0])


def _impedance(arm: Arm, kinds: dict[str, str], values: Mapping[str, float]) -> Ratio:
    """Impedance of an arm as a polynomial ratio, Ohm."""
    if isinstance(arm, str):
        return _leaf_impedance(kinds[arm], float(values[arm]))
    operator, *parts = arm
    if operator == "series":
        return _ratio_sum([_impedance(part, kinds, values) for part in parts])
    # parallel: add admittances; an infinite resistance (open circuit) drops out
    admittances = [
        _impedance(part, kinds, values)[::-1]
        for part in parts
        if not (isinstance(part, str) and math.isinf(values[part]))
    ]
    numerator, denominator = _ratio_sum(admittances)
    return denominator, numerator


def _probe_polynomial(loading: Loading) -> np.ndarray:
    """One probe's admittance G + s C as a polynomial, siemens."""
    return _trim(np.array([loading.probe_capacitance_f, loading.probe_conductance_s]))


def _normalise(b: np.ndarray, a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Scale so the denominator is monic."""
    return _trim(b) / a[0], _trim(a) / a[0]


def rational_ba(
    zeros_hz: np.ndarray, poles_hz: np.ndarray, gain: float, loading: Loading
) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of gain * prod(s - 2 pi z) / prod(s - 2 pi p), with the source divider for the
    "source" reference (the block's own input impedance is infinite; channel 1 loads it)."""
    b = gain * np.real(np.poly(2 * np.pi * np.asarray(zeros_hz, dtype=complex)))
    a = np.real(np.poly(2 * np.pi * np.asarray(poles_hz, dtype=complex)))
    if loading.reference == "source" and loading.source_resistance_ohm > 0:
        source_factor = _add(np.array([1.0]), loading.source_resistance_ohm * _probe_polynomial(loading))
        a = _mul(a, source_factor)
    return _normalise(np.atleast_1d(b), np.atleast_1d(a))


def divider_ba(topology: str, values: Mapping[str, float], loading: Loading) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of a divider topology under loading, for the loading's reference."""
    kinds = {spec.name: spec.kind for spec in COMPONENTS[topology]}
    series_arm, shunt_arm = ARMS[topology]
    n_series, d_series = _impedance(series_arm, kinds, values)
    n_shunt, d_shunt = _impedance(shunt_arm, kinds, values)
    output_admittance = _trim(np.array([loading.probe_capacitance_f, loading.output_conductance_s]))
    # loaded shunt: 1 / (d_shunt / n_shunt + Y_out) = n_shunt / d_loaded
    d_loaded = _add(d_shunt, _mul(output_admittance, n_shunt))
    b = _mul(n_shunt, d_series)
    a = _add(_mul(n_series, d_loaded), b)
    if loading.reference == "source" and loading.source_resistance_ohm > 0:
        # H_source = H / (1 + Rs Y_in), Y_in = Y_probe + d_series d_loaded / a
        y_probe = _probe_polynomial(loading)
        extra = _add(_mul(y_probe, a), _mul(d_series, d_loaded))
        a = _add(a, loading.source_resistance_ohm * extra)
    return _normalise(b, a)
