"""Driver-file schema and loader: shipped drivers load; every problem is located."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeper.located import Problem
from sweeper.instruments.driverfile import (
    DriverFileError,
    driver_search_path,
    find_driver,
    load_driver,
    parse_driver,
    repository_drivers_dir,
)

SHIPPED = ["sim-generator.yaml", "sim-scope-a.yaml", "sim-scope-b.yaml", "sim-meter.yaml"]

# Line numbers of GOOD_SCOPE, for the located-error checks below:
#  1 format  2 name  3 role  4 identify  5 scope:  6 vertical:  7 divisions  8 volts_per_div
#  9 horizontal:  10 mode  11 sample_rate_hz  12 samples  13 operations:  14 reset  15 set_scale
#  16 set_sample_rate  17 set_samples  18 arm  19 fetch  20 scaling:  21 - query  22 parse
GOOD_SCOPE = """\
format: 1
name: test scope
role: scope
identify: ['^Maker,Model,']
scope:
  vertical:
    divisions: 8
    volts_per_div: [0.01, 0.1, 1.0]
  horizontal:
    mode: sample_rate
    sample_rate_hz: {min: 1000, max: 1.0e+6}
  samples: {min: 100, max: 10000}
  operations:
    reset: [{write: "*RST"}]
    set_scale: [{write: "LANE{channel}:DIV {volts_per_div}"}]
    set_sample_rate: [{write: "RATE {sample_rate_hz}"}]
    set_samples: [{write: "POINTS {samples}"}]
    arm: [{write: "RUN"}, {query: "*OPC?", expect: "1"}]
    fetch: [{query: "DATA? {channel}", parse: ints, store: codes}]
    scaling:
      - query: "LEG? {channel}"
        parse: {fields: [x_increment, y_increment, y_origin, y_reference]}
"""


@pytest.mark.parametrize("name", SHIPPED)
def test_shipped_drivers_load(name: str) -> None:
    loaded = load_driver(repository_drivers_dir() / name)
    assert loaded.name == name
    assert len(loaded.sha256) == 64


def test_idn_patterns_suggest_the_right_driver() -> None:
    # *IDN? answers from sweeper/sim/DIALECTS.md
    answers = {
        "sim-generator.yaml": "Sweeper Sim,STIM-1,SIM-ST-0001,1.0",
        "sim-scope-a.yaml": "Sweeper Sim,CAP-2A,SIM-CA-0001,1.0",
        "sim-scope-b.yaml": "Sweeper Sim,SNAP-2B,SIM-SN-0001,1.0",
        "sim-meter.yaml": "Sweeper Sim,RATIO-1,SIM-RA-0001,1.0",
    }
    drivers = {name: load_driver(repository_drivers_dir() / name).driver for name in SHIPPED}
    for name, idn in answers.items():
        assert [n for n, d in drivers.items() if d.matches(idn)] == [name]


def test_good_text_parses() -> None:
    driver = parse_driver(GOOD_SCOPE, "good.yaml")
    assert driver.role == "scope"
    assert driver.scope is not None and driver.scope.vertical.volts_per_div == [0.01, 0.1, 1.0]


def _problems(text: str) -> list[Problem]:
    with pytest.raises(DriverFileError) as info:
        parse_driver(text, "drv.yaml")
    assert str(info.value) == "\n".join(str(p) for p in info.value.problems)  # rendered in one place
    return info.value.problems


def _where(problems: list[Problem]) -> list[tuple[int, int, str, str]]:
    """(line, column, field, kind) of each problem: what tests match on, never the wording."""
    return [(p.line, p.column, p.field, p.kind) for p in problems]


def test_schema_errors_carry_line_column_field_kind_given_expected() -> None:
    text = GOOD_SCOPE.replace("divisions: 8", "divisions: eight").replace(
        "mode: sample_rate", "mode: sample_rate\n    speed: 3"
    ).replace("format: 1", "format: 1\nconnection: {timeout_s: -2}")
    problems = _problems(text)
    # all problems are reported at once, in file order
    assert _where(problems) == [
        (2, 25, "connection.timeout_s", "out_of_range"),
        (8, 16, "scope.vertical.divisions", "not_a_number"),
        (12, 5, "scope.horizontal.speed", "unknown_key"),
    ]
    assert [p.given for p in problems] == ["-2", "'eight'", "3"]
    assert problems[0].expected == "above 0"
    # an unknown key is answered with the keys that are valid there
    assert "mode" in problems[2].expected and "sample_rate_hz" in problems[2].expected


def test_missing_field_points_at_its_parent() -> None:
    text = GOOD_SCOPE.replace("  samples: {min: 100, max: 10000}\n", "")
    assert _where(_problems(text)) == [(5, 1, "scope.samples", "missing")]


def test_unknown_placeholder_is_located() -> None:
    text = GOOD_SCOPE.replace("DIV {volts_per_div}", "DIV {volts}")
    (problem,) = _problems(text)
    assert _where([problem]) == [(15, 25, "scope.operations.set_scale[0].write", "unknown_placeholder")]
    assert problem.given == '"LANE{channel}:DIV {volts}"'
    assert "{volts}" in problem.text


def test_malformed_template_is_located() -> None:
    text = GOOD_SCOPE.replace('"RATE {sample_rate_hz}"', '"RATE {__import__(\'os\')}"')
    (problem,) = _problems(text)
    assert _where([problem]) == [(16, 31, "scope.operations.set_sample_rate[0].write", "bad_template")]


def test_missing_store_and_bad_parser() -> None:
    text = GOOD_SCOPE.replace("y_origin, y_reference", "y_origin").replace("parse: ints", "parse: {block: int12}")
    assert _where(_problems(text)) == [(19, 47, "scope.operations.fetch[0].parse", "bad_parser")]
    text = GOOD_SCOPE.replace("y_origin, y_reference", "y_origin")
    (problem,) = _problems(text)
    assert _where([problem]) == [(20, 5, "scope.operations.scaling", "missing")]
    assert "y_reference" in problem.text


def test_role_section_must_match() -> None:
    text = GOOD_SCOPE.replace("role: scope", "role: meter")
    assert _where(_problems(text)) == [(3, 7, "role", "missing"), (5, 1, "scope", "conflict")]


def test_step_kind_and_regex_errors() -> None:
    text = GOOD_SCOPE.replace('arm: [{write: "RUN"}', 'arm: [{write: "RUN", query: "X?"}').replace(
        "'^Maker,Model,'", "'(unclosed'"
    )
    assert _where(_problems(text)) == [
        (4, 12, "identify[0]", "bad_regex"),
        (18, 11, "scope.operations.arm[0]", "conflict"),
    ]


def test_duplicate_keys_are_refused_not_resolved() -> None:
    # A second `fetch:` would otherwise silently win (PyYAML keeps the last duplicate).
    text = GOOD_SCOPE.replace('    scaling:\n', '    fetch: [{write: "*RST"}]\n    scaling:\n')
    problems = _problems(text)
    assert (20, 5, "scope.operations.fetch", "duplicate_key") in _where(problems)


def test_yaml_syntax_error_is_located() -> None:
    (problem,) = _problems("format: 1\nname: [unclosed\n")
    assert _where([problem]) == [(3, 1, "", "yaml_syntax")]


def test_not_a_mapping() -> None:
    (problem,) = _problems("- just\n- a list\n")
    assert _where([problem]) == [(1, 1, "", "not_a_mapping")]


def test_load_driver_reports_the_path(tmp_path: Path) -> None:
    path = tmp_path / "broken.yaml"
    path.write_text(GOOD_SCOPE.replace("divisions: 8", "divisions: 0"))
    with pytest.raises(DriverFileError) as info:
        load_driver(path)
    (problem,) = info.value.problems
    assert (problem.file, problem.line, problem.column, problem.field, problem.kind) == (
        str(path), 7, 16, "scope.vertical.divisions", "out_of_range")
    assert str(problem).startswith(f"{path}:7:16: scope.vertical.divisions: ")


def test_unreadable_and_non_utf8_files(tmp_path: Path) -> None:
    with pytest.raises(DriverFileError) as info:
        load_driver(tmp_path / "absent.yaml")
    assert info.value.kinds == ["file_missing"]
    latin = tmp_path / "latin.yaml"
    latin.write_bytes("name: caf\u00e9\n".encode("latin-1"))
    with pytest.raises(DriverFileError) as info:
        load_driver(latin)
    assert info.value.kinds == ["not_utf8"]
    assert (info.value.problems[0].line, info.value.problems[0].column) == (1, 10)


def test_search_order(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    plan_dir = tmp_path / "plans"
    plan_dir.mkdir()
    (tmp_path / "drivers").mkdir()
    extra = tmp_path / "extra"
    extra.mkdir()
    (extra / "only-extra.yaml").write_text("x")
    (tmp_path / "drivers" / "sim-meter.yaml").write_text("x")
    monkeypatch.setenv("SWEEPER_DRIVERS", str(extra))
    monkeypatch.chdir(tmp_path)
    search = driver_search_path(plan_dir / "plan.yaml")
    assert search[:2] == [plan_dir.resolve(), (tmp_path / "drivers").resolve()]
    assert search[-1] == extra
    # the plan's ../drivers wins over the repository's copy
    assert find_driver("sim-meter.yaml", search) == (tmp_path / "drivers").resolve() / "sim-meter.yaml"
    assert find_driver("sim-scope-b.yaml", search) == repository_drivers_dir() / "sim-scope-b.yaml"
    assert find_driver("only-extra.yaml", search) == extra / "only-extra.yaml"
    with pytest.raises(FileNotFoundError, match="'nope.yaml' not found"):
        find_driver("nope.yaml", search)
