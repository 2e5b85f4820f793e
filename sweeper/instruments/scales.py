"""Instrument setting grids: 1-2-5 sequences, picking ranges and rates within limits.

Pure functions on floats; no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

_MANTISSAS = (1.0, 2.0, 5.0)
_REL = 1e-9  # relative slack so 0.1 * 3 style float error never drops a grid point


def tidy(value: float) -> float:
    """Round to 12 significant digits so grid values are the decimal numbers they stand for."""
    return float("%.12g" % value)


def one_two_five(minimum: float, maximum: float) -> list[float]:
    """All 1, 2, 5 x 10^k values in [minimum, maximum] (ascending); both > 0."""
    if not (0 < minimum <= maximum) or not math.isfinite(maximum):
        raise ValueError(f"need 0 < minimum <= maximum, got {minimum!r}, {maximum!r}")
    values = []
    for exponent in range(math.floor(math.log10(minimum)) - 1, math.ceil(math.log10(maximum)) + 2):
        for mantissa in _MANTISSAS:
            value = tidy(mantissa * 10.0**exponent)
            if minimum * (1 - _REL) <= value <= maximum * (1 + _REL):
                values.append(value)
    return values


def round_down_125(value: float) -> float:
    """Largest 1-2-5 value <= value (value > 0)."""
    exponent = math.floor(math.log10(value))
    for k in (exponent + 1, exponent, exponent - 1):
        for mantissa in reversed(_MANTISSAS):
            candidate = tidy(mantissa * 10.0**k)
            if candidate <= value * (1 + _REL):
                return candidate
    return tidy(10.0 ** (exponent - 1))


def round_up_125(value: float) -> float:
    """Smallest 1-2-5 value >= value (value > 0)."""
    exponent = math.floor(math.log10(value))
    for k in (exponent - 1, exponent, exponent + 1):
        for mantissa in _MANTISSAS:
            candidate = tidy(mantissa * 10.0**k)
            if candidate >= value * (1 - _REL):
                return candidate
    return tidy(10.0 ** (exponent + 2))


def smallest_at_least(options: Sequence[float], wanted: float) -> float:
    """The smallest option >= wanted, or the largest option when none is big enough."""
    ordered = sorted(options)
    for option in ordered:
        if option >= wanted * (1 - _REL):
            return option
    return ordered[-1]


def clamp(value: float, low: float, high: float) -> float:
    """value limited to [low, high]."""
    return min(max(value, low), high)
