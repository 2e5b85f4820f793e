"""Driver-file schema and loader: shipped drivers load; every problem is located."""

from __future__ import annotations

from pathlib import Path

import pytest

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


def _problems(text: str) -> list[str]:
    with pytest.raises(DriverFileError) as info:
        parse_driver(text, "drv.yaml")
    return [str(p) for p in info.value.problems]


def test_schema_errors_carry_line_column_field_given_expected() -> None:
    text = GOOD_SCOPE.replace("divisions: 8", "divisions: eight").replace(
        "mode: sample_rate", "mode: sample_rate\n    speed: 3"
    ).replace("format: 1", "format: 1\nconnection: {timeout_s: -2}")
    problems = _problems(text)
    # all problems are reported at once, in file order of the schema
    assert problems == [
        "drv.yaml:2:25: connection.timeout_s: given '-2'; expected input should be greater than 0",
        "drv.yaml:8:16: scope.vertical.divisions: given 'eight'; expected input should be a valid number, "
        "unable to parse string as a number",
        "drv.yaml:12:12: scope.horizontal.speed: given '3'; expected no such field here (check the spelling)",
    ]


def test_missing_field_points_at_its_parent() -> None:
    text = GOOD_SCOPE.replace("  samples: {min: 100, max: 10000}\n", "")
    assert _problems(text) == ["drv.yaml:5:1: scope.samples: given nothing (missing); expected this field (it is required)"]


def test_unknown_placeholder_is_located() -> None:
    text = GOOD_SCOPE.replace("DIV {volts_per_div}", "DIV {volts}")
    (problem,) = _problems(text)
    assert problem.startswith("drv.yaml:15:25: scope.operations.set_scale[0].write: given 'LANE{channel}:DIV {volts}'")
    assert "{volts} is unknown here" in problem


def test_malformed_template_is_located() -> None:
    text = GOOD_SCOPE.replace('"RATE {sample_rate_hz}"', '"RATE {__import__(\'os\')}"')
    (problem,) = _problems(text)
    assert problem.startswith("drv.yaml:16:31: scope.operations.set_sample_rate[0].write:")
    assert "malformed placeholder" in problem


def test_missing_store_and_bad_parser() -> None:
    text = GOOD_SCOPE.replace("y_origin, y_reference", "y_origin").replace("parse: ints", "parse: {block: int12}")
    problems = _problems(text)
    assert problems == [
        "drv.yaml:19:40: scope.operations.fetch[0].parse: given a mapping; expected block sample type must be one "
        "of int8, int16, float32",
    ]
    text = GOOD_SCOPE.replace("y_origin, y_reference", "y_origin")
    assert _problems(text) == [
        "drv.yaml:20:5: scope.operations.scaling: given a list; expected a step that stores 'y_reference'"
    ]


def test_role_section_must_match() -> None:
    text = GOOD_SCOPE.replace("role: scope", "role: meter")
    assert _problems(text) == [
        "drv.yaml:5:1: scope: given a mapping; expected no 'scope' section in a driver for role meter",
        "drv.yaml:3:7: role: given 'meter'; expected a 'meter' section for role meter (none found)",
    ]


def test_step_kind_and_regex_errors() -> None:
    text = GOOD_SCOPE.replace('arm: [{write: "RUN"}', 'arm: [{write: "RUN", query: "X?"}').replace(
        "'^Maker,Model,'", "'(unclosed'"
    )
    problems = _problems(text)
    assert problems[0].startswith("drv.yaml:4:12: identify[0]: given '(unclosed'; expected a regular expression")
    assert problems[1] == (
        "drv.yaml:18:11: scope.operations.arm[0]: given a mapping; expected a step has exactly one of 'write' or 'query'"
    )


def test_yaml_syntax_error_is_located() -> None:
    (problem,) = _problems("format: 1\nname: [unclosed\n")
    assert problem.startswith("drv.yaml:3:1: (YAML): given text YAML cannot read")


def test_not_a_mapping() -> None:
    (problem,) = _problems("- just\n- a list\n")
    assert problem.startswith("drv.yaml:1:1: (top level): given a list")


def test_load_driver_reports_the_path(tmp_path: Path) -> None:
    path = tmp_path / "broken.yaml"
    path.write_text(GOOD_SCOPE.replace("divisions: 8", "divisions: 0"))
    with pytest.raises(DriverFileError, match=rf"^{path}:7:16: scope.vertical.divisions: given '0'"):
        load_driver(path)


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
