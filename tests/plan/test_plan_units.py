"""Engineering-notation quantities: parse_quantity and format_quantity.

Prefix values are those of the SI (BIPM, The International System of Units, 9th edition,
2019, Table 7: f 1e-15, p 1e-12, n 1e-9, micro 1e-6, m 1e-3, k 1e3, M 1e6, G 1e9).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sweeper.plan import format_quantity, parse_quantity
from sweeper.plan.units import KINDS

# Decimal scaling makes "100n" the float nearest 100e-9, but a unit factor (60 for min, 2 sqrt 2
# for Vrms, 180/pi for rad) adds one more rounding: 1e-12 relative is far above a few ulps
# (2.2e-16 each) and far below any difference that matters.
REL = 1e-12

PARSED = [
    # (written, kind, SI value); source of each expected value in the comment
    ("10 kHz", "frequency", 10e3),  # SI prefix k
    ("10kHz", "frequency", 10e3),  # no space is the same quantity
    ("1.59 kHz", "frequency", 1.59e3),
    ("2.5 MHz", "frequency", 2.5e6),  # M mega
    ("2.5 mHz", "frequency", 2.5e-3),  # m milli: case matters
    ("1 GHz", "frequency", 1e9),
    ("100", "frequency", 100.0),  # bare number takes the field's unit
    (100, "frequency", 100.0),
    (2.5, "frequency", 2.5),
    ("1e3", "frequency", 1e3),
    ("1.5E-2", "frequency", 1.5e-2),
    ("1.59k", "frequency", 1.59e3),  # bare prefixed number
    ("1meg", "frequency", 1e6),  # "meg" as in circuit-simulator netlists (common practice)
    ("-1 kHz", "frequency", -1e3),  # signed: poles are written as negative frequencies
    ("\u22121 kHz", "frequency", -1e3),  # typographic minus sign
    ("1.59 kOhm", "resistance", 1.59e3),
    ("1.59 kohm", "resistance", 1.59e3),
    ("50 Ohm", "resistance", 50.0),
    ("50 ohms", "resistance", 50.0),
    ("2 MOhm", "resistance", 2e6),
    ("10 mOhm", "resistance", 10e-3),
    ("4.7 k\u03a9", "resistance", 4.7e3),  # Greek capital omega
    ("4.7 k\u2126", "resistance", 4.7e3),  # ohm sign
    ("47R", "resistance", 47.0),
    # IEC 60062 letter code, the letter standing for the decimal point (from memory of IEC 60062):
    ("4R7", "resistance", 4.7),
    ("4k7", "resistance", 4.7e3),
    ("2M2", "resistance", 2.2e6),
    ("R47", "resistance", 0.47),
    ("inf", "resistance", math.inf),
    ("open", "resistance", math.inf),
    (float("inf"), "resistance", math.inf),
    ("100 nF", "capacitance", 100e-9),
    ("100n", "capacitance", 100e-9),
    ("15 pF", "capacitance", 15e-12),
    ("2.2 \u00b5F", "capacitance", 2.2e-6),  # micro sign
    ("2.2 \u03bcF", "capacitance", 2.2e-6),  # Greek mu typed for micro
    ("2.2 uF", "capacitance", 2.2e-6),
    ("4n7", "capacitance", 4.7e-9),  # IEC 60062 letter code (from memory)
    ("10 mH", "inductance", 10e-3),
    ("4u7", "inductance", 4.7e-6),
    ("0.5 mV", "voltage", 0.5e-3),
    ("-1.5 V", "voltage", -1.5),
    ("1 ms", "time", 1e-3),
    ("250 us", "time", 250e-6),
    ("250 \u00b5s", "time", 250e-6),
    ("10 ns", "time", 10e-9),
    ("2 s", "time", 2.0),
    ("2 min", "time", 120.0),  # 1 min = 60 s
    ("1.5 h", "time", 5400.0),  # 1 h = 3600 s
    ("5 %", "percent", 0.05),  # 1 % = 0.01
    ("5%", "percent", 0.05),
    ("0.1 %", "percent", 0.001),
    (0, "percent", 0.0),  # zero is the same in every reading
    ("0.02 dB", "gain", 0.02),
    ("-3", "gain", -3.0),
    ("10 mdB", "gain", 0.01),
    ("45 deg", "angle", 45.0),
    ("45 degrees", "angle", 45.0),
    ("45\u00b0", "angle", 45.0),
    ("-0.2", "angle", -0.2),
    ("1 rad", "angle", math.degrees(1.0)),  # reference: math.degrees (180/pi)
    ("100 mrad", "angle", math.degrees(0.1)),
    ("2 Vpp", "amplitude", 2.0),
    ("2", "amplitude", 2.0),  # bare number is Vpp
    ("500 mVpp", "amplitude", 0.5),
    ("1 Vpk", "amplitude", 2.0),  # sine: Vpp = 2 Vpk (common practice)
    # sine: Vpp = 2 sqrt(2) Vrms (common practice; Vpk = sqrt(2) Vrms is the handbook sine relation)
    ("0.707 Vrms", "amplitude", 0.707 * 2 * math.sqrt(2)),
    ("1 Vrms", "amplitude", 2 * math.sqrt(2)),
    ("100 mVrms", "amplitude", 0.1 * 2 * math.sqrt(2)),
]


@pytest.mark.parametrize(("written", "kind", "expected"), PARSED)
def test_parse_quantity(written: object, kind: str, expected: float) -> None:
    got = parse_quantity(written, kind)
    if math.isinf(expected):
        assert got == expected
    else:
        assert got == pytest.approx(expected, rel=REL, abs=0.0)


def test_vrms_is_about_2_83_vpp() -> None:
    # Hand value: 2 * sqrt(2) = 2.8284..., so 0.707 Vrms is very nearly 2 Vpp (common practice).
    # 0.707 is sqrt(0.5) rounded to 3 digits: relative error 1.1e-4, hence the 2e-4 tolerance.
    assert parse_quantity("0.707 Vrms", "amplitude") == pytest.approx(2.0, rel=2e-4)


BAD = [
    # (written, kind, fragment the message must contain)
    ("10 kF", "frequency", "'10 kF' is not a frequency (expected Hz, e.g. '100 kHz')"),
    ("10 KHz", "frequency", "did you mean '10 kHz'"),
    ("10 hz", "frequency", "did you mean '10 Hz'"),
    ("fast", "frequency", "'fast' is not a frequency"),
    ("", "frequency", "is not a frequency"),
    ("1 kOhm", "capacitance", "'1 kOhm' is not a capacitance (expected F"),
    ("100 nF", "resistance", "is not a resistance"),
    ("10 mH", "voltage", "is not a voltage"),
    ("2 V", "amplitude", "ambiguous for an amplitude: write Vpp, Vrms or Vpk"),
    ("200 mV", "amplitude", "ambiguous for an amplitude"),
    ("5", "percent", "ambiguous for a percentage"),
    (5, "percent", "ambiguous for a percentage"),
    (0.05, "percent", "ambiguous for a percentage"),
    ("5m", "time", "ambiguous for a time: write '5 ms' or '5 min'"),
    ("5 kHz", "time", "is not a time"),
    ("3 k", "gain", "is not a gain"),  # no bare prefixes on dB
    ("1 kdeg", "angle", "is not an angle"),
    ("inf", "frequency", "is not a frequency"),  # only resistances may be infinite
    (float("inf"), "capacitance", "out of range"),
    (float("nan"), "frequency", "is not a number"),
    ("1e999", "frequency", "out of range"),
    (10**400, "frequency", "out of range"),
    (True, "frequency", "is not a frequency"),  # YAML 'yes' must not become 1 Hz
    (None, "voltage", "is not a voltage"),
    ([1, 2], "voltage", "is not a voltage"),
    ("1.59 k Ohm", "resistance", "is not a resistance"),
    ("1 kHz", "mass", "unknown quantity kind"),
]


@pytest.mark.parametrize(("written", "kind", "fragment"), BAD)
def test_parse_quantity_rejects(written: object, kind: str, fragment: str) -> None:
    with pytest.raises(ValueError) as info:
        parse_quantity(written, kind)  # type: ignore[arg-type]
    assert fragment in str(info.value)


FORMATTED = [
    (1590.0, "frequency", "1.59 kHz"),
    (100e-9, "capacitance", "100 nF"),
    (1.6e3, "resistance", "1.6 kOhm"),
    (math.inf, "resistance", "open"),
    (0.05, "percent", "5 %"),
    (2.0, "amplitude", "2 Vpp"),
    (0.5e-3, "voltage", "500 uV"),
    (1e-3, "time", "1 ms"),
    (90.0, "time", "1.5 min"),
    (0.0, "frequency", "0 Hz"),
    (-45.0, "angle", "-45 deg"),
    (999.96, "frequency", "1 kHz"),  # rounds up to the next prefix, not "1e+03 Hz"
]


@pytest.mark.parametrize(("value", "kind", "text"), FORMATTED)
def test_format_quantity(value: float, kind: str, text: str) -> None:
    assert format_quantity(value, kind) == text


_FORMAT_KINDS = sorted(KINDS)


@settings(deadline=None, max_examples=200)
@given(
    kind=st.sampled_from(_FORMAT_KINDS),
    mantissa=st.floats(min_value=1.0, max_value=9.999),
    exponent=st.integers(min_value=-12, max_value=9),
    negative=st.booleans(),
)
def test_format_then_parse_round_trips(kind: str, mantissa: float, exponent: int, negative: bool) -> None:
    value = mantissa * 10.0**exponent * (-1 if negative else 1)
    back = parse_quantity(format_quantity(value, kind), kind)
    # format_quantity keeps 3 significant digits: the rounding error is at most half a unit in
    # the third digit, i.e. 0.5e-2 of a mantissa >= 1, so relative error <= 5e-3.
    assert back == pytest.approx(value, rel=5e-3)
