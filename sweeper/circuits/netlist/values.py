"""Numbers as SPICE element lines write them: 10k, 4.7n, 1meg, 2.2uF, 1e-9.

SPICE scale factors are case-insensitive: t (1e12), g (1e9), meg (1e6), k (1e3), m (1e-3!),
u or the micro sign (1e-6), n (1e-9), p (1e-12), f (1e-15); a unit may follow (10kOhm, 4.7nF,
10mH, 1megHz). Two spellings are refused because the trade reads them two ways: a lone
upper-case "M" (SPICE: milli; many people: mega) and, on a capacitor, a lone "F" (SPICE:
femto; many people: farad). Resistor letter codes such as 4k7 are refused as well: SPICE
reads 4k7 as 4k, silently dropping the 7. Every refusal says what to write instead.
Tolerances are percentages with the sign written (tol=1%, tol=0.5%), as in plans: a bare
number is refused as ambiguous (1 or 0.01?), except 0.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

SCALES = {"t": 12, "g": 9, "meg": 6, "k": 3, "m": -3, "u": -6, "\u00b5": -6, "n": -9, "p": -12, "f": -15}
UNITS = {  # value kind -> units allowed after the scale (lower case)
    "resistance": ("ohms", "ohm", "r", "\u03c9", "\u2126"),
    "capacitance": ("f",),
    "inductance": ("h",),
    "frequency": ("hz",),
    "number": (),
}
EXAMPLES = {
    "resistance": "a resistance in Ohm, e.g. 10k, 4.7kOhm, 1meg",
    "capacitance": "a capacitance in F, e.g. 4.7n, 100pF, 2.2u",
    "inductance": "an inductance in H, e.g. 10m (milli), 4.7uH",
    "frequency": "a frequency in Hz, e.g. 10meg, 1.5megHz, 200k",
    "number": "a number, e.g. 100k, 1e5, 2.5",
}
_NUMBER = re.compile(r"([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)(.*)$")
_PERCENT = re.compile(r"([+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*%$")
_LETTER_CODE = re.compile(r"^\d+[rRkKmMgGpPnNuU\u00b5]\d+")


class ValueProblem(ValueError):
    """A value that cannot be read; the message says what was expected."""


def parse_value(text: str, kind: str) -> float:
    """The SI value of a SPICE number of the given kind (see module docstring); ValueProblem
    with what was expected when it cannot be read."""
    expected = EXAMPLES[kind]
    match = _NUMBER.match(text)
    if match is None:
        raise ValueProblem(f"is not {expected}")
    number, rest = match.group(1), match.group(2)
    if _LETTER_CODE.match(text):
        raise ValueProblem(f"is a letter code, which SPICE reads as {number}{rest[:1]} (the digits after the "
                           f"letter are dropped); write it with a decimal point, e.g. 4.7k for 4k7")
    exponent = 0
    lowered = rest.lower()
    if lowered.startswith("meg"):
        exponent, rest = 6, rest[3:]
    elif rest[:1] == "M":
        raise ValueProblem("uses 'M', which SPICE reads as milli (1M = 0.001) and many people as mega: "
                           "write m for milli or meg for mega")
    elif rest[:1] == "F" and kind == "capacitance" and rest[1:] == "":
        raise ValueProblem("ends in 'F', which SPICE reads as femto (1F = 1e-15): write 1f for femto, "
                           "e.g. 4.7nF or 100p for picofarads, or a bare number for farads")
    elif rest[:1].lower() in SCALES and not _is_unit(rest, kind):
        exponent, rest = SCALES[rest[:1].lower()], rest[1:]
    if rest and rest.lower() not in UNITS[kind]:
        raise ValueProblem(f"is not {expected}")
    value = float(Decimal(number).scaleb(exponent))  # one rounding: 4.7n is the float nearest 4.7e-9
    if not math.isfinite(value):
        raise ValueProblem(f"is not finite; expected {expected}")
    return value


def _is_unit(rest: str, kind: str) -> bool:
    """Whether the text after the number is a bare unit (the 'f' of '1f' is a scale, not farad)."""
    return rest.lower() in UNITS[kind] and not (kind == "capacitance" and rest == "f")


def parse_gain(text: str) -> float:
    """An open-loop gain: a SPICE number (100k, 1e5) or decibels (100dB); ValueProblem otherwise."""
    if text.lower().endswith("db"):
        try:
            return 10.0 ** (float(text[:-2]) / 20.0)
        except ValueError:
            raise ValueProblem("is not a gain (expected e.g. 100k, 1e5 or 100dB)") from None
    return parse_value(text, "number")


def parse_tolerance(text: str) -> float:
    """A part tolerance as a fraction: '1%' -> 0.01 ('%' required; a bare 0 is allowed)."""
    match = _PERCENT.match(text.strip())
    if match is None and text.strip() not in ("0", "0.0"):
        raise ValueProblem("is not a tolerance (expected a percentage, e.g. 1% or 0.5%)")
    fraction = float(match.group(1)) / 100.0 if match is not None else 0.0
    if not 0.0 <= fraction < 1.0:
        raise ValueProblem("is not a tolerance between 0 % and 100 %")
    return fraction
