"""Engineering-notation quantities with units, as written in test plans.

`parse_quantity("1.59 kOhm", "resistance")` returns 1590.0 (SI). Every field of a plan
knows its kind, so a bare number ("1e3") or a bare prefixed number ("100n") takes the
field's unit. The wrong kind of unit is refused with a message that says what was
expected. SI prefixes are case-sensitive (m = milli, M = mega); "meg" is also mega.

Kinds and their units (SI result in brackets):

- frequency [Hz]: Hz
- resistance [Ohm]: Ohm, ohm, Ohms, ohms, Ω, R ("47R"); the resistor code "4R7", "4k7",
  "2M2", "R47" (IEC 60062 letter code, common practice); "inf" or "open" for no resistor
- capacitance [F]: F; letter code "4n7"
- inductance [H]: H; letter code "4u7"
- voltage [V]: V
- time [s]: s (with prefixes up to milli), min, h; a bare "5m" is refused as ambiguous
- percent [fraction]: "%" only, "5 %" -> 0.05; bare numbers are refused as ambiguous
  (5 or 0.05?), except 0 which means the same either way
- gain [dB]: dB (mdB accepted); bare number = dB
- angle [degree]: deg, degree, degrees, °; rad (mrad, urad) converted to degrees;
  bare number = degrees
- amplitude [Vpp]: Vpp, Vrms (x 2 sqrt 2, a sine assumed), Vpk (x 2); bare number = Vpp;
  "2 V" is refused as ambiguous
"""

from __future__ import annotations

import math
import re
from decimal import Decimal
from dataclasses import dataclass, field
from typing import Annotated

from pydantic import BeforeValidator

from sweeper.located.rules import RuleError

PREFIXES: dict[str, int] = {  # SI prefix -> power of ten
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    "\u00b5": -6,  # micro sign
    "\u03bc": -6,  # Greek small mu, often typed for micro
    "m": -3,
    "": 0,
    "k": 3,
    "M": 6,
    "meg": 6,
    "Meg": 6,
    "MEG": 6,
    "G": 9,
}
_ALL = frozenset(PREFIXES) - {""}
_SMALL = frozenset({"f", "p", "n", "u", "\u00b5", "\u03bc", "m"})
_MICRO_MILLI = frozenset({"u", "\u00b5", "\u03bc", "m"})

_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
_INFINITE_WORDS = frozenset({"inf", "+inf", "infinity", "+infinity", "open"})


@dataclass(frozen=True)
class _Unit:
    exponent: int = 0  # one unit = factor * 10**exponent in SI
    factor: float = 1.0
    prefixes: frozenset[str] = frozenset()  # SI prefixes this unit takes


@dataclass(frozen=True)
class _Kind:
    noun: str  # "a frequency"
    expected: str  # "Hz, e.g. '100 kHz'"
    units: dict[str, _Unit]
    bare_prefixes: frozenset[str] = frozenset()  # prefixes allowed with no unit ("100n")
    bare_allowed: bool = True  # a bare number takes the field's unit
    allow_inf: bool = False
    letter_code: dict[str, int] = field(default_factory=dict)  # "4k7" style letters -> power of ten
    display_unit: str = ""
    display_prefixes: tuple[str, ...] = ()


_RAD = 180.0 / math.pi

KINDS: dict[str, _Kind] = {
    "frequency": _Kind(
        "a frequency",
        "Hz, e.g. '100 kHz'",
        {"Hz": _Unit(prefixes=_ALL)},
        bare_prefixes=_ALL,
        display_unit="Hz",
        display_prefixes=("f", "p", "n", "u", "m", "", "k", "M", "G"),
    ),
    "resistance": _Kind(
        "a resistance",
        "Ohm, e.g. '4.7 kOhm', or 'open'",
        {
            "Ohm": _Unit(prefixes=_ALL),
            "ohm": _Unit(prefixes=_ALL),
            "Ohms": _Unit(prefixes=_ALL),
            "ohms": _Unit(prefixes=_ALL),
            "\u03a9": _Unit(prefixes=_ALL),  # Greek capital omega
            "\u2126": _Unit(prefixes=_ALL),  # ohm sign
            "R": _Unit(),
        },
        bare_prefixes=_ALL,
        allow_inf=True,
        letter_code={"R": 0, "k": 3, "K": 3, "M": 6, "G": 9},
        display_unit="Ohm",
        display_prefixes=("u", "m", "", "k", "M", "G"),
    ),
    "capacitance": _Kind(
        "a capacitance",
        "F, e.g. '100 nF'",
        {"F": _Unit(prefixes=_SMALL)},
        bare_prefixes=_SMALL,
        letter_code={"f": -15, "p": -12, "n": -9, "u": -6, "\u00b5": -6, "m": -3},
        display_unit="F",
        display_prefixes=("f", "p", "n", "u", "m", ""),
    ),
    "inductance": _Kind(
        "an inductance",
        "H, e.g. '10 mH'",
        {"H": _Unit(prefixes=_SMALL)},
        bare_prefixes=_SMALL,
        letter_code={"n": -9, "u": -6, "\u00b5": -6, "m": -3},
        display_unit="H",
        display_prefixes=("p", "n", "u", "m", ""),
    ),
    "voltage": _Kind(
        "a voltage",
        "V, e.g. '0.5 mV'",
        {"V": _Unit(prefixes=_ALL)},
        bare_prefixes=_ALL,
        display_unit="V",
        display_prefixes=("n", "u", "m", "", "k"),
    ),
    "time": _Kind(
        "a time",
        "s, ms, us, ns, min or h, e.g. '1 ms'",
        {"s": _Unit(prefixes=_SMALL), "min": _Unit(factor=60.0), "h": _Unit(factor=3600.0)},
        bare_prefixes=_SMALL - {"m"},
        display_unit="s",
        display_prefixes=("p", "n", "u", "m", ""),
    ),
    "percent": _Kind(
        "a percentage",
        "%, e.g. '5 %'; a bare number is ambiguous",
        {"%": _Unit(exponent=-2)},
        bare_allowed=False,
        display_unit="%",
    ),
    "gain": _Kind(
        "a gain",
        "dB, e.g. '-3 dB'",
        {"dB": _Unit(prefixes=frozenset({"m"}))},
        display_unit="dB",
    ),
    "angle": _Kind(
        "an angle",
        "deg or rad, e.g. '45 deg'",
        {
            "deg": _Unit(),
            "degree": _Unit(),
            "degrees": _Unit(),
            "\u00b0": _Unit(),
            "rad": _Unit(factor=_RAD, prefixes=_MICRO_MILLI),
        },
        display_unit="deg",
    ),
    "amplitude": _Kind(
        "an amplitude",
        "Vpp, Vrms or Vpk, e.g. '2 Vpp'",
        {
            "Vpp": _Unit(prefixes=_ALL),
            # Sine assumed: Vpp = 2 sqrt(2) Vrms, Vpp = 2 Vpk (common practice).
            "Vrms": _Unit(factor=2.0 * math.sqrt(2.0), prefixes=_ALL),
            "Vpk": _Unit(factor=2.0, prefixes=_ALL),
        },
        bare_prefixes=_ALL,
        display_unit="Vpp",
        display_prefixes=("n", "u", "m", "", "k"),
    ),
}


class QuantityError(RuleError):
    """A value that is not a quantity of the expected kind; the message says what was expected.

    quantity: the kind of quantity wanted ('frequency', 'resistance', ...).
    """

    def __init__(self, value: object, kind: str, message: str | None = None) -> None:
        self.quantity = kind
        spec = KINDS.get(kind)
        if message is None:
            if spec is None:
                message = f"unknown quantity kind {kind!r} (expected one of {', '.join(KINDS)})"
            else:
                message = f"{_show(value)} is not {spec.noun} (expected {spec.expected})"
        self.expected = spec.expected if spec else ""
        self.message = message
        super().__init__(value, message, kind="bad_quantity")
        self.args = (message,)

    def sentence(self, shown: str) -> str:
        """The whole message: it names the value itself."""
        return self.message

    def __str__(self) -> str:
        return self.message


def _show(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _finite(number: float, value: object, kind: str) -> float:
    if math.isnan(number):
        raise QuantityError(value, kind, f"{_show(value)} is not a number")
    if math.isinf(number):
        spec = KINDS[kind]
        if spec.allow_inf and number > 0:
            return number
        raise QuantityError(value, kind, f"{_show(value)} is out of range for {spec.noun}")
    return number


def _suffix_scale(suffix: str, spec: _Kind) -> tuple[int, float] | None:
    """(power of ten, factor) of a unit suffix (prefix + unit, or a bare prefix); None if not valid."""
    unit = spec.units.get(suffix)
    if unit is not None:
        return unit.exponent, unit.factor
    if suffix in spec.bare_prefixes:
        return PREFIXES[suffix], 1.0
    for name, unit in spec.units.items():
        if suffix.endswith(name) and len(suffix) > len(name):
            prefix = suffix[: -len(name)]
            if prefix in unit.prefixes:
                return PREFIXES[prefix] + unit.exponent, unit.factor
    return None


def _scaled(number_text: str, exponent: int, factor: float = 1.0) -> float:
    """number_text * 10**exponent * factor, the power of ten applied exactly (decimal), so '100n' == 100e-9."""
    try:
        scaled = float(Decimal(number_text).scaleb(exponent))
    except ArithmeticError:  # exponent beyond what decimal allows: certainly out of range
        return math.inf
    return scaled * factor if factor != 1.0 else scaled


def _hint(number_text: str, suffix: str, spec: _Kind) -> str:
    """A 'did you mean' for a suffix that only differs in letter case (not m/M, which differ in meaning)."""
    if "m" in suffix.lower():
        return ""
    candidates = {s for s in _spellings(spec) if s.lower() == suffix.lower() and s != suffix}
    if len(candidates) == 1:
        return f"; did you mean '{number_text} {candidates.pop()}'? (units are case-sensitive)"
    return ""


def _spellings(spec: _Kind) -> set[str]:
    out = set(spec.bare_prefixes)
    for name, unit in spec.units.items():
        out.add(name)
        out.update(p + name for p in unit.prefixes)
    return out


def parse_quantity(value: str | int | float, kind: str) -> float:
    """Parse an engineering-notation quantity of a given kind into SI units.

    kind is one of: frequency (Hz), resistance (Ohm), capacitance (F), inductance (H),
    voltage (V), time (s), percent (fraction, "5 %" -> 0.05), gain (dB), angle (degrees),
    amplitude (Vpp). Raises ValueError (QuantityError) with a message naming what was expected.
    """
    spec = KINDS.get(kind)
    if spec is None:
        raise QuantityError(value, kind)
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise QuantityError(value, kind)
    if not isinstance(value, str):
        try:
            number = float(value)
        except OverflowError:
            raise QuantityError(value, kind, f"{_show(value)} is out of range for {spec.noun}") from None
        if kind == "percent" and number != 0.0:
            raise QuantityError(
                value,
                kind,
                f"{_show(value)} is ambiguous for a percentage: write it with '%', e.g. '{value} %'",
            )
        return _finite(number, value, kind)

    text = value.strip().replace("\u2212", "-")  # a typographic minus sign is still a minus
    if spec.allow_inf and text.lower() in _INFINITE_WORDS:
        return math.inf
    if kind == "resistance" and re.fullmatch(r"R\d+", text):
        return float("0." + text[1:])  # letter code for values below 1 Ohm: 'R47' -> 0.47
    match = _NUMBER.match(text)
    if match is None:
        raise QuantityError(value, kind)
    number_text = match.group(0)
    rest = text[match.end():]
    suffix = rest.strip()

    if spec.letter_code and rest and rest == suffix:
        coded = _letter_code(number_text, rest, spec)
        if coded is not None:
            return _finite(coded, value, kind)
    number = _scaled(number_text, 0)
    if suffix == "":
        if not spec.bare_allowed and number != 0.0:
            raise QuantityError(
                value,
                kind,
                f"{_show(value)} is ambiguous for a percentage: write it with '%', e.g. '{number_text} %'",
            )
        return _finite(number, value, kind)
    if kind == "amplitude" and _suffix_scale(suffix, KINDS["voltage"]) is not None and suffix not in PREFIXES:
        raise QuantityError(
            value,
            kind,
            f"{_show(value)} is ambiguous for an amplitude: write Vpp, Vrms or Vpk, e.g. '{number_text} {suffix}pp'",
        )
    if kind == "time" and suffix == "m":
        raise QuantityError(
            value,
            kind,
            f"{_show(value)} is ambiguous for a time: write '{number_text} ms' or '{number_text} min'",
        )
    scale = _suffix_scale(suffix, spec)
    if scale is None:
        raise QuantityError(
            value,
            kind,
            f"{_show(value)} is not {spec.noun} (expected {spec.expected}){_hint(number_text, suffix, spec)}",
        )
    return _finite(_scaled(number_text, *scale), value, kind)


def _letter_code(number_text: str, rest: str, spec: _Kind) -> float | None:
    """IEC 60062 letter code: '4k7' -> 4700, '4R7' -> 4.7, '4n7' -> 4.7e-9 (the letter is the decimal point)."""
    if not number_text.isdigit():
        return None
    letter, digits = rest[0], rest[1:]
    if letter not in spec.letter_code or not digits.isdigit():
        return None
    return _scaled(f"{number_text}.{digits}", spec.letter_code[letter])


def format_quantity(value_si: float, kind: str, digits: int = 3) -> str:
    """Render an SI value for people: format_quantity(1590, "frequency") -> '1.59 kHz'.

    The result parses back with parse_quantity to the value rounded to `digits` significant digits.
    """
    spec = KINDS.get(kind)
    if spec is None:
        raise QuantityError(value_si, kind)
    value = float(value_si)
    if math.isnan(value):
        return "nan"
    if math.isinf(value):
        return "open" if kind == "resistance" and value > 0 else ("-inf" if value < 0 else "inf")
    if kind == "percent":
        return f"{_digits(value * 100.0, digits)} %"
    if kind == "time" and abs(value) >= 60.0:
        if abs(value) >= 3600.0:
            return f"{_digits(value / 3600.0, digits)} h"
        return f"{_digits(value / 60.0, digits)} min"
    if not spec.display_prefixes:
        return f"{_digits(value, digits)} {spec.display_unit}"
    return _engineering(value, spec.display_unit, spec.display_prefixes, digits)


def _digits(value: float, digits: int) -> str:
    return f"{value:.{digits}g}"


def _engineering(value: float, unit: str, prefixes: tuple[str, ...], digits: int) -> str:
    if value == 0.0:
        return f"0 {unit}"
    exponents = [PREFIXES[p] for p in prefixes]
    exponent = 3 * math.floor(math.log10(abs(value)) / 3)
    exponent = min(max(exponent, exponents[0]), exponents[-1])
    mantissa = float(f"{value / 10.0**exponent:.{digits}g}")
    if abs(mantissa) >= 1000.0 and exponent + 3 in exponents:
        exponent += 3
        mantissa = float(f"{value / 10.0**exponent:.{digits}g}")
    prefix = prefixes[exponents.index(exponent)]
    return f"{_digits(mantissa, digits)} {prefix}{unit}"


def _validator(kind: str):
    def validate(value: object) -> float:
        return parse_quantity(value, kind)  # type: ignore[arg-type]

    validate.__name__ = f"parse_{kind}"
    return validate


FrequencyHz = Annotated[float, BeforeValidator(_validator("frequency"))]
ResistanceOhm = Annotated[float, BeforeValidator(_validator("resistance"))]
CapacitanceF = Annotated[float, BeforeValidator(_validator("capacitance"))]
InductanceH = Annotated[float, BeforeValidator(_validator("inductance"))]
VoltageV = Annotated[float, BeforeValidator(_validator("voltage"))]
TimeS = Annotated[float, BeforeValidator(_validator("time"))]
Fraction = Annotated[float, BeforeValidator(_validator("percent"))]
GainDb = Annotated[float, BeforeValidator(_validator("gain"))]
AngleDeg = Annotated[float, BeforeValidator(_validator("angle"))]
AmplitudeVpp = Annotated[float, BeforeValidator(_validator("amplitude"))]
