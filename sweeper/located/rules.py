"""Cross-field rules inside pydantic models that still point at the exact field.

A rule that ties several fields together raises one pydantic error of type LOCATED whose
context holds `Finding`s, each with the path (below the model that raised it) of the field to
point at; the located-error translator (sweeper.located.pydantic_errors) expands them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

from pydantic_core import PydanticCustomError

LOCATED = "located_findings"  # pydantic error type carrying a list of Findings in ctx["findings"]


class RuleError(ValueError):
    """A value of the right type that breaks a rule; `tail` reads after the value ("must be above 0 Hz").

    kind: the stable problem kind reported for it ('out_of_range' by default).
    """

    def __init__(self, value: object, tail: str, kind: str = "out_of_range") -> None:
        self.value = value
        self.tail = tail
        self.kind = kind
        super().__init__(f"{value!r} {tail}")

    def sentence(self, shown: str) -> str:
        """The message as shown after the field, with the value as written (`shown`)."""
        return f"{shown} {self.tail}"


@dataclass(frozen=True)
class Finding:
    """One problem found by a cross-field rule, relative to the model that raised it.

    loc: path of keys / list indices below that model. at: "value" points at the value (or,
    when absent, at the parent mapping), "key" at the key. follows_value: the message reads
    after the value as written ("must be above 0 Hz"). kind: the stable problem kind.
    """

    loc: tuple[str | int, ...]
    message: str
    at: Literal["value", "key"] = "value"
    follows_value: bool = False
    kind: str = "rule"


def raise_located(findings: list[Finding | dict[str, Any]]) -> None:
    """Raise one pydantic error carrying every finding (Findings or nested pydantic error dicts)."""
    lines = []
    for item in findings:
        if isinstance(item, Finding):
            lines.append(f"{'.'.join(map(str, item.loc)) or '(here)'}: {item.message}")
        else:
            lines.append(f"{'.'.join(map(str, item.get('loc', ()))) or '(here)'}: {item.get('msg', '')}")
    raise PydanticCustomError(LOCATED, "{summary}", {"summary": "; ".join(lines), "findings": list(findings)})
