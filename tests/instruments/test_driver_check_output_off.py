"""`driver check` refuses a source whose output_off is empty or does not switch the output off
(rendered with example values and read), so a run cannot end with the source left on silently."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeper.instruments.driver_check import check_driver

REPO = Path(__file__).resolve().parents[2]
GENERATOR = REPO / "drivers" / "sim-generator.yaml"
OFF = '    output_off:\n      - write: "DRIV:ENAB OFF"'


@pytest.mark.parametrize("replacement,kind", [
    ('      - write: "DRIV:ENAB ON"', "output_off_not_off"),      # sends ON
    ('      - write: "*CLS"', "output_off_not_off"),              # says nothing of the output
    ('      - write: "   "', "empty"),  # sends nothing: the loader refuses a blank command
])
def test_output_off_that_does_not_switch_off_is_refused(tmp_path: Path, replacement: str, kind: str) -> None:
    text = GENERATOR.read_text(encoding="utf-8")
    assert text.count(OFF) == 1
    bad = tmp_path / "gen.yaml"
    bad.write_text(text.replace(OFF, "    output_off:\n" + replacement), encoding="utf-8")
    result = check_driver(bad)
    assert not result.ok
    assert [p.kind for p in result.problems] == [kind]
    line = text[: text.index(OFF)].count("\n") + 1  # the output_off key's line
    problem = result.problems[0]
    assert problem.field.startswith("source.operations.output_off") and abs(problem.line - line) <= 1, str(problem)


def test_demo_generator_passes() -> None:
    assert check_driver(GENERATOR).ok
