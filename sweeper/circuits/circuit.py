"""A circuit model: a catalogued topology with its component values and bench loading."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

import numpy as np

from sweeper.circuits import impedance, polynomial
from sweeper.circuits.catalog import COMPONENTS, ComponentSpec
from sweeper.circuits.loading import Loading

_UNITS = {"resistance": "Ohm", "capacitance": "F", "inductance": "H"}


@dataclass(frozen=True)
class Circuit:
    """A validated circuit model; build it with `build_circuit`.

    values: every component of the topology in SI units (Ohm, F, H), optional ones filled in.
    zeros_hz, poles_hz, gain: the "rational" topology's H(s) = gain * prod(s - 2 pi z) /
        prod(s - 2 pi p), roots in Hz (s-plane / 2 pi); empty and 1.0 for other topologies.
    """

    topology: str
    values: dict[str, float]
    loading: Loading = field(default_factory=Loading)
    zeros_hz: tuple[complex, ...] = ()
    poles_hz: tuple[complex, ...] = ()
    gain: float = 1.0

    def response(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Complex H(j 2 pi f) at each frequency (Hz > 0), from complex impedances."""
        return impedance.response(
            self.topology, self.values, self.loading, frequency_hz, self.zeros_hz, self.poles_hz, self.gain
        )

    def ba(self) -> tuple[np.ndarray, np.ndarray]:
        """Numerator and denominator coefficients in s, highest power first (scipy.signal.freqs),
        from polynomial algebra; the denominator is monic."""
        if self.topology == "rational":
            return polynomial.rational_ba(self.zeros_hz, self.poles_hz, self.gain, self.loading)
        return polynomial.divider_ba(self.topology, self.values, self.loading)

    def input_impedance_ohm(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Complex impedance into the DUT input node (output loaded by probe and load resistor,
        a channel-1 probe of the same R and C across the input), Ohm; inf + 0j when open."""
        return impedance.input_impedance(self.topology, self.values, self.loading, frequency_hz)

    def poles_rad_s(self) -> np.ndarray:
        """Poles of H(s), rad/s (complex)."""
        if self.topology == "rational":
            _, a = polynomial.rational_ba((), (), 1.0, self.loading)
            return np.concatenate([2 * np.pi * np.asarray(self.poles_hz, dtype=complex), np.roots(a)])
        _, a = self.ba()
        return np.roots(a).astype(complex)

    def slowest_time_constant_s(self) -> float:
        """1 / min |Re(pole)|, s: 0 without poles, inf with a pole on the imaginary axis."""
        return slowest_time_constant_s(self.poles_rad_s())


def slowest_time_constant_s(poles_rad_s: np.ndarray) -> float:
    """1 / min |Re(pole)| of poles in rad/s, s: 0 without poles, inf with one on the imaginary axis."""
    if poles_rad_s.size == 0:
        return 0.0
    slowest = float(np.min(np.abs(poles_rad_s.real)))
    return math.inf if slowest == 0 else 1.0 / slowest


def _describe(spec: ComponentSpec) -> str:
    unit = _UNITS[spec.kind]
    if spec.required:
        return f"a {spec.kind} > 0 {unit}, finite"
    if math.isinf(spec.default):
        return f"a {spec.kind} > 0 {unit} or inf (optional, default inf)"
    return f"a {spec.kind} >= 0 {unit}, finite (optional, default {spec.default:g})"


def _check_value(topology: str, spec: ComponentSpec, given: object) -> float:
    expected = _describe(spec)
    problem = f"{topology}: component {spec.name!r}: given {given!r}, expected {expected}"
    if isinstance(given, bool) or not isinstance(given, (int, float, np.integer, np.floating)):
        raise ValueError(problem)
    value = float(given)
    if math.isnan(value):
        raise ValueError(problem)
    if spec.required:
        ok = 0 < value < math.inf
    elif math.isinf(spec.default):
        ok = value > 0
    else:
        ok = 0 <= value < math.inf
    if not ok:
        raise ValueError(problem)
    return value


def _check_roots(name: str, roots: Iterable[complex]) -> tuple[complex, ...]:
    """Roots in Hz, finite; complex ones must come in conjugate pairs."""
    try:
        values = tuple(complex(r) for r in roots)
    except (TypeError, ValueError) as error:
        raise ValueError(f"rational: {name}: given {roots!r}, expected complex numbers (Hz)") from error
    if not all(math.isfinite(r.real) and math.isfinite(r.imag) for r in values):
        raise ValueError(f"rational: {name}: given {values!r}, expected finite values (Hz)")
    upper = sorted((r for r in values if r.imag > 0), key=lambda r: (r.real, r.imag))
    lower = sorted((r.conjugate() for r in values if r.imag < 0), key=lambda r: (r.real, r.imag))
    paired = len(upper) == len(lower) and all(
        abs(u - w) <= 1e-12 * max(abs(u), 1.0) for u, w in zip(upper, lower, strict=True)
    )
    if not paired:
        raise ValueError(
            f"rational: {name}: given {values!r}, expected complex values in conjugate pairs "
            "(a real circuit has a real-coefficient H(s))"
        )
    return values


def build_circuit(
    topology: str,
    values: Mapping[str, float],
    loading: Loading | None = None,
    zeros_hz: Iterable[complex] = (),
    poles_hz: Iterable[complex] = (),
    gain: float = 1.0,
) -> Circuit:
    """Validate component values (SI: Ohm, F, H) against the catalog and build a Circuit.

    Raises ValueError naming the topology, the component, what was given and what was expected,
    for an unknown topology and for missing, unknown, negative, zero or non-finite components.
    """
    if topology not in COMPONENTS:
        raise ValueError(f"topology: given {topology!r}, expected one of {', '.join(COMPONENTS)}")
    specs = {spec.name: spec for spec in COMPONENTS[topology]}
    unknown = [name for name in values if name not in specs]
    if unknown:
        expected = ", ".join(specs) if specs else "no components"
        raise ValueError(f"{topology}: component {unknown[0]!r}: unknown, expected one of: {expected}")
    checked: dict[str, float] = {}
    for name, spec in specs.items():
        if name in values:
            checked[name] = _check_value(topology, spec, values[name])
        elif spec.required:
            raise ValueError(f"{topology}: component {name!r}: missing, expected {_describe(spec)}")
        else:
            checked[name] = spec.default
    zeros = tuple(zeros_hz)
    poles = tuple(poles_hz)
    if topology == "rational":
        zeros = _check_roots("zeros_hz", zeros)
        poles = _check_roots("poles_hz", poles)
        if (
            isinstance(gain, bool)
            or not isinstance(gain, (int, float))
            or not math.isfinite(gain)
            or gain == 0
        ):
            raise ValueError(f"rational: gain: given {gain!r}, expected a finite non-zero number")
    elif zeros or poles or gain != 1.0:
        raise ValueError(f"{topology}: zeros_hz, poles_hz and gain apply to the 'rational' topology only")
    return Circuit(
        topology, checked, loading if loading is not None else Loading(), zeros, poles, float(gain)
    )
