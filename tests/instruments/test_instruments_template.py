"""Safe substitution of driver-file command templates."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, strategies as st

from sweeper.instruments.template import TemplateError, format_number, placeholders, render


def test_render_numbers_and_tokens() -> None:
    values = {"channel": 2, "volts_per_div": 0.05, "load": "HIZ"}
    assert render("LANE{channel}:DIV {volts_per_div}", values) == "LANE2:DIV 0.05"
    assert render("DRIV:INTO {load}", values) == "DRIV:INTO HIZ"
    assert render("*OPC?", {}) == "*OPC?"


def test_literal_braces() -> None:
    assert render("A {{x}} {n}}}", {"n": 1}) == "A {x} 1}"


@pytest.mark.parametrize(
    ("value", "text"),
    [
        (1000.0, "1000"),
        (1e6, "1000000"),
        (0.001, "0.001"),
        (1e-9, "1e-09"),
        (2.5e7, "25000000"),
        (-0.5, "-0.5"),
        (7, "7"),
        (1 / 3, "0.3333333333333333"),  # 12 digits would not read back: repr-exact needs 16
        (1591.5494309189535, "1591.5494309189535"),
    ],
)
def test_number_format(value: float, text: str) -> None:
    assert format_number(value) == text


@given(st.floats(allow_nan=False, allow_infinity=False))
def test_numbers_read_back_exactly(value: float) -> None:
    # The instrument must receive exactly the float we computed (Python float() is the reference reader).
    assert float(format_number(value)) == value


def test_unknown_placeholder_is_named() -> None:
    with pytest.raises(TemplateError, match=r"unknown placeholder \{volts\}.*known here: channel"):
        render("LANE{channel}:DIV {volts}", {"channel": 1})


@pytest.mark.parametrize(
    "hostile",
    [
        "{__import__}",
        "{__class__}",
        "{self}",
    ],
)
def test_identifier_lookalikes_are_just_unknown_names(hostile: str) -> None:
    # Only names in the values dict are ever looked up: no attribute, global or builtin access.
    with pytest.raises(TemplateError, match="unknown placeholder"):
        render(hostile, {"channel": 1})


@pytest.mark.parametrize(
    "hostile",
    [
        "{__import__('os').system('echo pwned')}",
        "{channel.__class__}",
        "{channel[0]}",
        "{channel!r}",
        "{channel:>10}",
        "{0}",
        "{}",
        "{ channel }",
        "{channel",
        "oops}",
    ],
)
def test_anything_but_a_plain_name_is_malformed(hostile: str) -> None:
    with pytest.raises(TemplateError, match="malformed placeholder|unclosed|single"):
        render(hostile, {"channel": 1})


@pytest.mark.parametrize("value", ["HIZ;*RST", "A B", "1\n*RST", "x:y", '"q"', ""])
def test_string_values_must_be_plain_tokens(value: str) -> None:
    # A value can never end the message or chain another command.
    with pytest.raises(TemplateError, match="not a plain token"):
        render("DRIV:INTO {load}", {"load": value})


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf, True, None, [1]])
def test_non_numbers_are_refused(value: object) -> None:
    with pytest.raises(TemplateError):
        render("STIM:TONE {frequency_hz}", {"frequency_hz": value})  # type: ignore[dict-item]


def test_placeholders_listed_in_order() -> None:
    assert placeholders("LANE{channel}:DIV {volts_per_div};{channel}") == ("channel", "volts_per_div", "channel")
