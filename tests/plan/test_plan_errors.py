"""Bad plans: every problem is reported with the right file:line:column and field path.

Each case edits the valid fixture tests/plan/fixtures/base-plan.yaml and states where the
problem must be reported by naming the text it must point at; the expected line and column are
found in the edited text, so they do not depend on counting lines by hand.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import pytest
import yaml

from sweeper.plan import PlanError, Problem, load_plan, load_plan_text

FIXTURES = Path(__file__).resolve().parent / "fixtures"
BASE = (FIXTURES / "base-plan.yaml").read_text(encoding="utf-8")
RATIONAL = (FIXTURES / "rational-meter.yaml").read_text(encoding="utf-8")


def edit(old: str, new: str, text: str = BASE) -> str:
    assert old in text, f"fixture no longer contains {old!r}"
    return text.replace(old, new, 1)


def position(text: str, line_with: str, token: str, occurrence: int = 1) -> tuple[int, int]:
    """1-based (line, column) of token on the occurrence-th line containing line_with."""
    seen = 0
    for number, line in enumerate(text.splitlines(), start=1):
        if line_with in line:
            seen += 1
            if seen == occurrence:
                assert token in line
                return number, line.index(token) + 1
    raise AssertionError(f"no line with {line_with!r}")


def problems_of(text: str) -> list[Problem]:
    with pytest.raises(PlanError) as info:
        load_plan_text(text, "plan.yaml")
    assert info.value.problems, "PlanError without problems"
    return info.value.problems


def only_problem(text: str) -> Problem:
    problems = problems_of(text)
    assert len(problems) == 1, "\n".join(map(str, problems))
    return problems[0]


def test_base_fixture_is_valid() -> None:
    load_plan_text(BASE)


@dataclass
class Case:
    name: str
    text: str
    field: str
    line_with: str  # a line containing this text ...
    token: str  # ... at the first occurrence of this token, is where the problem must point
    fragment: str  # the message must contain this
    occurrence: int = 1


CASES = [
    Case(
        "wrong unit",
        edit("  stop: 20 kHz", "  stop: 20 kF"),
        "sweep.stop",
        "stop: 20 kF",
        "20 kF",
        "'20 kF' is not a frequency (expected Hz, e.g. '100 kHz')",
    ),
    Case(
        "wrong unit in a flow mapping",
        edit("target_uncertainty: {gain: 10 mdB}", "target_uncertainty: {gain: 10 mdeg}"),
        "acquisition.target_uncertainty.gain",
        "target_uncertainty",
        "10 mdeg",
        "is not a gain",
    ),
    Case(
        "wrong unit in a list item",
        edit("      phase_max: -45 deg", "      phase_max: -45 dB"),
        "limits.masks[1].phase_max",
        "phase_max",
        "-45 dB",
        "is not an angle",
    ),
    Case("wrong type: int", edit("  points: 31", "  points: many"), "sweep.points", "points:", "many", "'many' is not a whole number"),
    Case("wrong type: fractional int", edit("  points: 31", "  points: 31.5"), "sweep.points", "points:", "31.5", "is not a whole number"),
    Case("wrong type: bool", edit("  min_cycles: 10", "  min_cycles: yes"), "acquisition.min_cycles", "min_cycles", "yes", "true/false, not a number"),
    Case("wrong type: list", edit("  tags: [fixture]", "  tags: fixture"), "metadata.tags", "tags:", "fixture", "is not a list"),
    Case("wrong type: mapping", edit("  allowance: {phase: 0.5 deg}", "  allowance: 0.5 deg"), "limits.allowance", "allowance:", "0.5 deg", "is not a mapping"),
    Case("wrong type: text", edit("  serial: SIB2-004711", "  serial: 004711"), "dut.serial", "serial:", "004711", "put it in quotes"),
    Case("wrong choice", edit("  spacing: log", "  spacing: logarithmic"), "sweep.spacing", "spacing:", "logarithmic", "is not one of 'log' or 'linear'"),
    Case("unknown top-level key", BASE + "extras: 1\n", "extras", "extras:", "extras", "unknown key 'extras'"),
    Case(
        "nested typo",
        edit("    probe_capacitance: 12 pF", "    probe_capacitence: 12 pF"),
        "model.loading.probe_capacitence",
        "probe_capacitence",
        "probe_capacitence",
        "did you mean 'probe_capacitance'?",
    ),
    Case(
        "typo in a flow mapping",
        edit("{gain: 10 mdB}", "{gian: 10 mdB}"),
        "acquisition.target_uncertainty.gian",
        "target_uncertainty",
        "gian",
        "unknown key 'gian'",
    ),
    Case(
        "typo in a list item",
        edit("      phase_max: -45 deg", "      phase_maxx: -45 deg"),
        "limits.masks[1].phase_maxx",
        "phase_maxx",
        "phase_maxx",
        "unknown key 'phase_maxx'",
    ),
    Case(
        "python attribute name is not a YAML key",
        edit("  amplitude: 1 Vrms", "  amplitude_vpp: 2.8"),
        "stimulus.amplitude_vpp",
        "amplitude_vpp",
        "amplitude_vpp",
        "unknown key 'amplitude_vpp'",
    ),
    Case("start >= stop", edit("  start: 20 Hz", "  start: 20 kHz"), "sweep.stop", "stop:", "20 kHz", "stop (20 kHz) must be above start (20 kHz)"),
    Case("non-positive frequency", edit("  start: 20 Hz", "  start: -20 Hz"), "sweep.start", "start:", "-20 Hz", "must be at least 1 mHz"),
    Case("points < 2", edit("  points: 31", "  points: 1"), "sweep.points", "points:", "1", "must be at least 2"),
    Case(
        "negative component",
        edit("R: {value: 3k3,", "R: {value: -3.3 kOhm,"),
        "model.components.R.value",
        "R: {value",
        "-3.3 kOhm",
        "'-3.3 kOhm' must be above 0 Ohm",
    ),
    Case(
        "tolerance above 100 %",
        edit("tolerance: 10 %}", "tolerance: 150 %}"),
        "model.components.C.tolerance",
        "C: {value",
        "150 %",
        "must be below 100 %",
    ),
    Case(
        "tolerance below 0 %",
        edit("tolerance: 10 %}", "tolerance: -1 %}"),
        "model.components.C.tolerance",
        "C: {value",
        "-1 %",
        "must be at least 0 %",
    ),
    Case(
        "tolerance as a bare number",
        edit("tolerance: 10 %}", "tolerance: 10}"),
        "model.components.C.tolerance",
        "C: {value",
        "10}",
        "ambiguous for a percentage",
    ),
    Case(
        "amplitude over the cap",
        edit("  amplitude: 1 Vrms", "  amplitude: 3 Vrms"),
        "stimulus.amplitude",
        "amplitude: 3",
        "3 Vrms",
        "is above max_amplitude (8 Vpp)",
    ),
    Case("offset beyond the cap", edit("  offset: 0.5 V", "  offset: -3 V"), "stimulus.offset", "offset:", "-3 V", "half of max_amplitude"),
    Case("ambiguous amplitude", edit("  amplitude: 1 Vrms", "  amplitude: 1 V"), "stimulus.amplitude", "amplitude: 1", "1 V", "write Vpp, Vrms or Vpk"),
    Case(
        "empty sweep",
        edit("  start: 20 Hz\n  stop: 20 kHz\n  points: 31\n  spacing: log\n", "  frequencies: []\n"),
        "sweep.frequencies",
        "frequencies:",
        "[]",
        "is empty",
    ),
    Case(
        "explicit list and start",
        edit("  stop: 20 kHz\n  points: 31\n  spacing: log\n", "  frequencies: [1 kHz, 2 kHz]\n"),
        "sweep.start",
        "start:",
        "start",
        "not allowed with an explicit frequencies list",
    ),
    Case(
        "no point density",
        edit("  points: 31\n", ""),
        "sweep",
        "sweep:",
        "sweep",
        "give points_per_decade or points",
    ),
    Case(
        "duplicate key",
        edit("  points: 31\n", "  points: 31\n  points: 41\n"),
        "sweep.points",
        "points: 41",
        "points",
        "duplicate key 'points' (first at line",
    ),
    Case(
        "missing required section",
        edit(BASE[BASE.index("stimulus:") : BASE.index("sweep:")], ""),
        "stimulus",
        "plan: 1",
        "plan",
        "missing required section 'stimulus'",
    ),
    Case(
        "missing required key points at the parent",
        edit("    driver: sim-scope-b.yaml\n", ""),
        "bench.scope.driver",
        "  scope:",
        "scope",
        "missing required key 'driver'",
    ),
    Case(
        "missing required component points at its mapping",
        edit("    C: {value: 47 nF, tolerance: 10 %}\n", ""),
        "model.components.C",
        "  components:",
        "components",
        "needs component C (capacitance)",
        occurrence=2,  # the first "  components:" is the simulation's
    ),
    Case(
        "meter mode without a meter",
        edit("  mode: waveform", "  mode: meter"),
        "bench.meter",
        "bench:",
        "bench",
        "meter mode needs a meter",
    ),
    Case("unknown circuit", edit("circuit: rc-lowpass", "circuit: rc-lowpas"), "model.circuit", "circuit:", "rc-lowpas", "did you mean 'rc-lowpass'?"),
    Case(
        "unknown component",
        edit("    C: {value: 47 nF", "    Cx: {value: 47 nF"),
        "model.components.Cx",
        "Cx:",
        "Cx",
        "unknown component 'Cx' for circuit 'rc-lowpass'",
    ),
    Case(
        "unknown simulated component",
        edit("components: {R: 3.3 kOhm, C: 47n}", "components: {R: 3.3 kOhm, L: 1 mH}"),
        "bench.simulation.components.L",
        "components: {R",
        "L:",
        "unknown component 'L'",
    ),
    Case(
        "simulated component of the wrong kind",
        edit("components: {R: 3.3 kOhm, C: 47n}", "components: {R: 3.3 kOhm, C: 47 nH}"),
        "bench.simulation.components.C",
        "components: {R",
        "47 nH",
        "'47 nH' is not a capacitance",
    ),
    Case(
        "zeros on a fixed topology",
        edit("  circuit: rc-lowpass\n", "  circuit: rc-lowpass\n  zeros: [0]\n"),
        "model.zeros",
        "zeros:",
        "zeros",
        "only for circuit 'rational'",
    ),
    Case("plan format", edit("plan: 1", "plan: 2"), "plan", "plan: 2", "2", "is not a plan format this sweeper reads"),
    Case(
        "mask bounds reversed",
        edit("gain_min: -0.5 dB, gain_max: 0.2 dB", "gain_min: 0.5 dB, gain_max: 0.2 dB"),
        "limits.masks[0].gain_max",
        "- {from",
        "0.2 dB",
        "must be at least gain_min (0.5 dB)",
    ),
    Case(
        "max_averages below averages",
        edit("  max_averages: 4", "  max_averages: 1"),
        "acquisition.max_averages",
        "max_averages",
        "1",
        "1 must be at least averages (2)",
    ),
    Case(
        "points and points_per_decade",
        edit("  points: 31\n", "  points: 31\n  points_per_decade: 10\n"),
        "sweep.points",
        "points: 31",
        "points",
        "give points or points_per_decade, not both",
    ),
    Case(
        "points_per_decade with linear spacing",
        edit("  points: 31\n  spacing: log", "  points_per_decade: 10\n  spacing: linear"),
        "sweep.points_per_decade",
        "points_per_decade",
        "points_per_decade",
        "needs log spacing",
    ),
    Case("zero-ohm load", edit("  load: 50 Ohm", "  load: 0 Ohm"), "stimulus.load", "load:", "0 Ohm", "must be above 0 Ohm"),
    Case(
        "frequency listed twice",
        edit("[100 Hz, 500, 1 kHz, 1.1k,", "[100 Hz, 500, 1 kHz, 1000,", RATIONAL),
        "sweep.frequencies[3]",
        "frequencies:",
        "1000",
        "1000 is listed twice",
    ),
    Case(
        "complex pole without its conjugate",
        edit('["-50", "-1 kHz"]', '["-50", "-2 kHz"]', RATIONAL),
        "model.poles[0]",
        "poles:",
        "[-50 Hz, 1 kHz]",
        "needs its conjugate [-50, -1000] too",
    ),
    Case(
        "pole in the right half-plane",
        edit("-20 kHz]", "20 kHz]", RATIONAL),
        "model.poles[2]",
        "poles:",
        "20 kHz]",
        "is in the right half-plane",
    ),
    Case(
        "python tag is refused, never constructed",
        edit("name: fixture-rc", 'name: !!python/object/apply:os.getcwd []'),
        "name",
        "name:",
        "!!python",
        "python/object/apply:os.getcwd' is not supported",
    ),
]


#: The stable kind each case must be reported as: programs and tests rely on the kind and the
#: location, never on the wording of the sentence.
KINDS = {
    'wrong unit': 'bad_quantity',
    'wrong unit in a flow mapping': 'bad_quantity',
    'wrong unit in a list item': 'bad_quantity',
    'wrong type: int': 'not_whole_number',
    'wrong type: fractional int': 'not_whole_number',
    'wrong type: bool': 'not_a_number',
    'wrong type: list': 'not_a_list',
    'wrong type: mapping': 'not_a_mapping',
    'wrong type: text': 'not_text',
    'wrong choice': 'not_one_of',
    'unknown top-level key': 'unknown_key',
    'nested typo': 'unknown_key',
    'typo in a flow mapping': 'unknown_key',
    'typo in a list item': 'unknown_key',
    'python attribute name is not a YAML key': 'unknown_key',
    'start >= stop': 'out_of_order',
    'non-positive frequency': 'out_of_range',
    'points < 2': 'out_of_range',
    'negative component': 'out_of_range',
    'tolerance above 100 %': 'out_of_range',
    'tolerance below 0 %': 'out_of_range',
    'tolerance as a bare number': 'bad_quantity',
    'amplitude over the cap': 'over_cap',
    'offset beyond the cap': 'over_cap',
    'ambiguous amplitude': 'bad_quantity',
    'empty sweep': 'empty',
    'explicit list and start': 'conflict',
    'no point density': 'missing',
    'duplicate key': 'duplicate_key',
    'missing required section': 'missing',
    'missing required key points at the parent': 'missing',
    'missing required component points at its mapping': 'missing',
    'meter mode without a meter': 'missing',
    'unknown circuit': 'unknown_name',
    'unknown component': 'unknown_name',
    'unknown simulated component': 'unknown_name',
    'simulated component of the wrong kind': 'bad_quantity',
    'zeros on a fixed topology': 'conflict',
    'plan format': 'unsupported_version',
    'mask bounds reversed': 'out_of_order',
    'max_averages below averages': 'out_of_range',
    'points and points_per_decade': 'conflict',
    'points_per_decade with linear spacing': 'conflict',
    'zero-ohm load': 'out_of_range',
    'frequency listed twice': 'duplicate',
    'complex pole without its conjugate': 'unpaired_root',
    'pole in the right half-plane': 'unstable',
    'python tag is refused, never constructed': 'unsupported_tag',
}


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_problem_kind_and_location(case: Case) -> None:
    problems = problems_of(case.text)
    matching = [p for p in problems if p.field == case.field]
    assert matching, "\n".join(map(str, problems))
    problem = matching[0]
    assert problem.kind == KINDS[case.name], str(problem)
    assert problem.loc and problem.field == case.field
    assert (problem.line, problem.column) == position(case.text, case.line_with, case.token, case.occurrence)


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_located_problem(case: Case) -> None:
    problems = problems_of(case.text)
    matching = [p for p in problems if p.field == case.field]
    assert matching, "\n".join(map(str, problems))
    problem = matching[0]
    line, column = position(case.text, case.line_with, case.token, case.occurrence)
    assert (problem.file, problem.line, problem.column) == ("plan.yaml", line, column), str(problem)
    assert case.fragment in problem.text, str(problem)
    assert str(problem) == f"plan.yaml:{line}:{column}: {case.field}: {problem.text}"


def test_message_shape_matches_the_guide() -> None:
    # The team guide's example: plan.yaml:14:5: sweep.stop: '10 kF' is not a frequency (expected Hz, e.g. '100 kHz')
    text = edit("  stop: 20 kHz", "  stop: 10 kF")
    problem = only_problem(text)
    line, column = position(text, "stop: 10 kF", "10 kF")
    assert str(problem) == (
        f"plan.yaml:{line}:{column}: sweep.stop: '10 kF' is not a frequency (expected Hz, e.g. '100 kHz')"
    )
    assert problem.given == "'10 kF'"


def test_several_problems_all_reported() -> None:
    path = FIXTURES / "many-problems.yaml"
    text = path.read_text(encoding="utf-8")
    expected = {}
    for number, line in enumerate(text.splitlines(), start=1):
        marker = re.search(r"# <- (\S+) @ (.+)$", line)
        if marker and not line.startswith("#"):
            field, token = marker.groups()
            expected[field] = (number, line.index(token) + 1)
    assert len(expected) >= 8
    with pytest.raises(PlanError) as info:
        load_plan(path)
    got = {p.field: (p.line, p.column) for p in info.value.problems}
    assert got == expected, str(info.value)
    assert all(p.file == str(path) for p in info.value.problems)
    lines = str(info.value).splitlines()
    assert len(lines) == len(expected)  # one problem per line
    assert lines == [str(p) for p in info.value.problems]


def test_problems_in_many_sections_at_once() -> None:
    text = edit("  stop: 20 kHz", "  stop: 20 kF")
    text = edit("  points: 31", "  points: many", text)
    text = edit("  amplitude: 1 Vrms", "  amplitude: 30 Vrms", text)
    text = edit("  tags: [fixture]", "  tags: fixture\n  tagz: [x]", text)
    fields = {p.field for p in problems_of(text)}
    assert fields == {"sweep.stop", "sweep.points", "stimulus.amplitude", "metadata.tags", "metadata.tagz"}


def yaml_mark(text: str) -> tuple[int, int]:
    """Where PyYAML itself (the reference parser) places a syntax error, 1-based."""
    with pytest.raises(yaml.MarkedYAMLError) as info:
        yaml.safe_load(text)
    mark = info.value.problem_mark
    return mark.line + 1, mark.column + 1


@pytest.mark.parametrize(
    "text",
    [
        edit("  stop: 20 kHz", "  stop: [20 kHz"),
        edit("name: fixture-rc", 'name: "fixture-rc'),
        edit("  points: 31", "\tpoints: 31"),
        edit("  points: 31", "   points: 31"),
        edit("dut:\n", "dut:\n  - x\n"),
        BASE + "---\nplan: 1\n",
        "plan: 1\nname: [\n",
    ],
    ids=["unclosed flow", "unclosed quote", "tab", "indentation", "mixed block", "two documents", "eof"],
)
def test_malformed_yaml(text: str) -> None:
    problem = only_problem(text)
    assert (problem.line, problem.column) == yaml_mark(text)
    assert problem.field == ""
    assert problem.text.startswith("YAML syntax:")


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("", "the plan is empty"),
        ("# only a comment\n", "the plan is empty"),
        ("- a\n- b\n", "the top level of a plan must be a mapping"),
        ("just text\n", "the top level of a plan must be a mapping"),
    ],
)
def test_not_a_plan(text: str, fragment: str) -> None:
    problem = only_problem(text)
    assert fragment in problem.text
    assert problem.line == 1 and problem.column == 1


def test_control_character_is_located() -> None:
    text = edit("name: fixture-rc", "name: fixture\x07rc")
    problem = only_problem(text)
    assert (problem.line, problem.column) == position(text, "name:", "\x07")


def test_self_referencing_alias() -> None:
    text = edit("  tags: [fixture]", "  tags: &loop [fixture, *loop]")
    problems = problems_of(text)
    assert any("refers to itself" in p.text for p in problems)


def test_alias_bomb_is_refused_quickly() -> None:
    # Ten levels of ten-fold aliases would expand to 1e10 nodes if followed blindly.
    lines = ["a0: &a0 [x, x, x, x, x, x, x, x, x, x]"]
    for level in range(1, 10):
        lines.append(f"a{level}: &a{level} [" + ", ".join([f"*a{level - 1}"] * 10) + "]")
    problem = only_problem("\n".join(lines) + "\n")
    assert "more than" in problem.text


def test_missing_file(tmp_path: Path) -> None:
    missing = tmp_path / "nope.yaml"
    with pytest.raises(PlanError) as info:
        load_plan(missing)
    (problem,) = info.value.problems
    assert problem.file == str(missing) and problem.line == 0
    assert str(problem) == f"{missing}: no such file"


def test_directory_instead_of_file(tmp_path: Path) -> None:
    with pytest.raises(PlanError) as info:
        load_plan(tmp_path)
    assert "is a directory" in str(info.value)


def test_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "latin1.yaml"
    path.write_bytes("plan: 1\nname: caf\u00e9\n".encode("latin-1"))
    with pytest.raises(PlanError) as info:
        load_plan(path)
    (problem,) = info.value.problems
    # 0xe9 is the 4th byte of line 2 ("name: caf" is 9 bytes, so column 10).
    assert (problem.line, problem.column) == (2, 10)
    assert "UTF-8" in problem.text


def test_utf8_with_byte_order_mark(tmp_path: Path) -> None:
    path = tmp_path / "bom.yaml"
    data = b"\xef\xbb\xbf" + BASE.encode("utf-8")
    path.write_bytes(data)
    plan = load_plan(path)
    assert plan.name == "fixture-rc"
    import hashlib

    assert plan.sha256 == hashlib.sha256(data).hexdigest()  # checksum of the bytes as stored


def test_plan_error_str_lists_every_problem() -> None:
    text = edit("  stop: 20 kHz", "  stop: 20 kF")
    text = edit("  points: 31", "  points: many", text)
    with pytest.raises(PlanError) as info:
        load_plan_text(text, "x.yaml")
    assert str(info.value) == "\n".join(str(p) for p in info.value.problems)
    assert len(str(info.value).splitlines()) == 2


def test_location_of_fields_for_later_checks() -> None:
    # Checks that run after loading (driver limits, durations) point at the plan through Plan.location.
    plan = load_plan_text(BASE)
    assert plan.location("sweep.stop") == position(BASE, "  stop:", "20 kHz")
    assert plan.location("limits.masks[0].to") == position(BASE, "- {from: 20 Hz", "200 Hz")
    assert plan.location("sweep") == position(BASE, "sweep:", "sweep")  # a block mapping: its key
    # Not written (a default): the nearest written parent.
    assert plan.location("acquisition.settle_cycles") == position(BASE, "acquisition:", "acquisition")
    assert plan.location("no.such.field") is None
