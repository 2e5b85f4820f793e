"""Safe substitution for driver-file command templates.

A template is SCPI text with placeholders: ``"LANE{channel}:DIV {volts_per_div}"``.
A placeholder is ``{name}`` with name an identifier; ``{{`` and ``}}`` stand for literal
braces. Values come from a dict of numbers and plain tokens (enum words such as ``HIZ``).
The template text is scanned by the small parser below: it is never handed to ``eval`` or
``str.format``, so a hostile driver file can only produce an error, never run code.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

Value = int | float | str

_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
# Tokens a string value may be: letters, digits and a few signs, nothing that can end or
# chain a SCPI message (no ';', ':', whitespace, quotes, newlines).
_TOKEN = re.compile(r"[A-Za-z0-9_+\-.]+\Z")


class TemplateError(ValueError):
    """A template or a value for it is not acceptable."""


@dataclass(frozen=True)
class _Literal:
    text: str


@dataclass(frozen=True)
class _Placeholder:
    name: str


def parse_template(template: str) -> tuple[_Literal | _Placeholder, ...]:
    """Split a template into literal text and placeholders; TemplateError on a malformed one."""
    parts: list[_Literal | _Placeholder] = []
    literal: list[str] = []
    i = 0
    n = len(template)
    while i < n:
        ch = template[i]
        if ch == "{":
            if i + 1 < n and template[i + 1] == "{":
                literal.append("{")
                i += 2
                continue
            close = template.find("}", i + 1)
            if close < 0:
                raise TemplateError(f"unclosed '{{' at column {i + 1} in template {template!r}")
            name = template[i + 1 : close]
            if not _IDENT.match(name):
                raise TemplateError(
                    f"malformed placeholder {{{name}}} at column {i + 1} in template {template!r}: "
                    "expected {name} with name made of letters, digits and '_'"
                )
            if literal:
                parts.append(_Literal("".join(literal)))
                literal = []
            parts.append(_Placeholder(name))
            i = close + 1
            continue
        if ch == "}":
            if i + 1 < n and template[i + 1] == "}":
                literal.append("}")
                i += 2
                continue
            raise TemplateError(f"single '}}' at column {i + 1} in template {template!r} (write '}}}}')")
        literal.append(ch)
        i += 1
    if literal:
        parts.append(_Literal("".join(literal)))
    return tuple(parts)


def placeholders(template: str) -> tuple[str, ...]:
    """Names of the placeholders in a template, in order of appearance."""
    return tuple(p.name for p in parse_template(template) if isinstance(p, _Placeholder))


def format_number(value: float) -> str:
    """Shortest of %.12g .. %.17g that reads back as exactly the same float (ints as ints)."""
    if isinstance(value, bool):
        raise TemplateError(f"boolean {value!r} is not a number for an instrument")
    if isinstance(value, int):
        return str(value)
    value = float(value)
    if not math.isfinite(value):
        raise TemplateError(f"{value!r} cannot be sent to an instrument")
    for digits in range(12, 18):
        text = "%.*g" % (digits, value)
        if float(text) == value:
            return text
    return repr(value)


def format_value(name: str, value: Value) -> str:
    """Text for one placeholder value: numbers formatted exactly, strings only as plain tokens."""
    if isinstance(value, str):
        if not _TOKEN.match(value):
            raise TemplateError(f"value {value!r} for {{{name}}} is not a plain token (letters, digits, _ + - .)")
        return value
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        try:
            return format_number(value)
        except TemplateError as exc:
            raise TemplateError(f"value for {{{name}}}: {exc}") from None
    raise TemplateError(f"value for {{{name}}} has type {type(value).__name__}; expected a number or a token")


def render(template: str, values: Mapping[str, Value]) -> str:
    """Fill a template's placeholders from values; TemplateError names any unknown placeholder."""
    out: list[str] = []
    for part in parse_template(template):
        if isinstance(part, _Literal):
            out.append(part.text)
            continue
        if part.name not in values:
            known = ", ".join(sorted(values)) or "none"
            raise TemplateError(f"unknown placeholder {{{part.name}}} in {template!r} (known here: {known})")
        out.append(format_value(part.name, values[part.name]))
    return "".join(out)
