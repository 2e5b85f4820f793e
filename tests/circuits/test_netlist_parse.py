"""The netlist reader: SPICE element lines (the SPICE3 input format, common practice: scale
factors T G MEG K M U N P F, case-insensitive, M = milli), our extensions, located problems."""

from __future__ import annotations

import math

import pytest

from sweeper.circuits.netlist import NetlistError, parse_netlist
from sweeper.circuits.netlist.values import ValueProblem, parse_gain, parse_tolerance, parse_value


@pytest.mark.parametrize(("text", "kind", "value"), [
    ("10k", "resistance", 10e3),
    ("4.7kOhm", "resistance", 4.7e3),
    ("1meg", "resistance", 1e6),
    ("1MEG", "resistance", 1e6),
    ("2.2Meg", "resistance", 2.2e6),
    ("47R", "resistance", 47.0),
    ("4.7n", "capacitance", 4.7e-9),
    ("100pF", "capacitance", 100e-12),
    ("2.2uF", "capacitance", 2.2e-6),
    ("10f", "capacitance", 10e-15),  # SPICE: f is femto
    ("1e-9", "capacitance", 1e-9),
    ("10m", "inductance", 10e-3),  # SPICE: m is milli
    ("10mH", "inductance", 10e-3),
    ("4.7uH", "inductance", 4.7e-6),
    ("10meg", "frequency", 10e6),
    ("1.5megHz", "frequency", 1.5e6),
    ("1G", "frequency", 1e9),
    ("100k", "number", 1e5),
    ("-2.5", "number", -2.5),
])
def test_spice_numbers_read_with_their_scale_factors(text: str, kind: str, value: float) -> None:
    assert parse_value(text, kind) == pytest.approx(value, rel=1e-15)


@pytest.mark.parametrize(("text", "kind", "says"), [
    ("1M", "resistance", "milli"),  # SPICE reads 1M as 0.001: refused rather than guessed
    ("2.2MOhm", "resistance", "milli"),
    ("1F", "capacitance", "femto"),
    ("4k7", "resistance", "letter code"),
    ("10q", "resistance", "not a resistance"),
    ("10kF", "resistance", "not a resistance"),
    ("abc", "capacitance", "not a capacitance"),
])
def test_ambiguous_or_wrong_numbers_are_refused_saying_what_to_write(text: str, kind: str, says: str) -> None:
    with pytest.raises(ValueProblem, match=says):
        parse_value(text, kind)


def test_tolerances_gains_and_frequencies_of_the_extensions_read() -> None:
    assert parse_tolerance("1%") == pytest.approx(0.01)
    assert parse_tolerance("0.5 %") == pytest.approx(0.005)
    assert parse_tolerance("0") == 0.0
    with pytest.raises(ValueProblem):
        parse_tolerance("5")  # 5 or 0.05? refused as in plans
    assert parse_gain("100dB") == pytest.approx(1e5)
    assert parse_gain("2e5") == pytest.approx(2e5)


def test_a_netlist_reads_parts_tolerances_nodes_and_op_amps() -> None:
    netlist = parse_netlist("""* a title written as a comment
.input IN
.output Out
R1 in a 10k tol=1%   ; inline comment
C1 a 0 4.7n
+ tol = 5%
XU1 a out out opamp a0=100dB gbw=10meg rout=50
.end
R9 this is ignored after .end
""")
    assert netlist.input_node == "in" and netlist.output_node == "out"
    assert netlist.nominal == {"R1": 10e3, "C1": 4.7e-9}
    assert netlist.tolerance == {"R1": 0.01, "C1": 0.05}
    amp = next(e for e in netlist.elements if e.kind == "opamp").opamp
    assert (amp.a0, amp.gbw_hz, amp.rout_ohm) == (pytest.approx(1e5), 10e6, 50.0)
    assert not amp.ideal


def test_a_source_line_marks_the_input_and_gnd_is_ground() -> None:
    netlist = parse_netlist("V1 drive gnd AC 1\nR1 drive out 1k\nR2 out GND 1k\n.output out\n")
    assert netlist.input_node == "drive"
    assert {e.kind for e in netlist.elements} == {"R"}


def test_subcircuits_flatten_with_prefixed_names_and_nodes() -> None:
    netlist = parse_netlist("""
.input in
.output out
X1 in mid rc
X2 mid out rc
.subckt RC a b
R1 a b 1k tol=1%
C1 b 0 1n tol=5%
.ends
""")
    assert list(netlist.nominal) == ["X1.R1", "X1.C1", "X2.R1", "X2.C1"]
    assert netlist.part("X2.C1").nodes == ("out", "0")
    assert netlist.part("X1.C1").nodes == ("mid", "0")


def _problems(text: str) -> list:
    with pytest.raises(NetlistError) as caught:
        parse_netlist(text, "board.cir")
    return caught.value.problems


@pytest.mark.parametrize(("text", "kind", "line", "column", "field"), [
    (".input in\n.output out\nR1 in out 1k\nQ1 out in 0 bc547\n", "unknown_element", 4, 1, "Q1"),
    (".input in\n.output out\nR1 in out 1k\nR2 out x 1k\n", "dangling_node", 4, 1, "R2"),
    (".input in\nR1 in out 1k\nR2 out 0 1k\n", "missing_output", 1, 1, ".output"),
    (".input in\n.output out2\nR1 in out 1k\nR2 out 0 1k\n", "missing_output", 2, 9, ".output"),
    (".input in\n.output out\nR1 in out 10q\nR2 out 0 1k\n", "bad_value", 3, 11, "R1"),
    (".input in\n.output out\nR1 in out 1k tol=5\nR2 out 0 1k\n", "bad_value", 3, 14, "R1"),
    (".input in\n.output out\nR1 in out 1k\nR1 out 0 1k\n", "duplicate_element", 4, 1, "R1"),
    (".input in\n.output out\nR1 in out\n", "wrong_node_count", 3, 1, "R1"),
    (".input in\n.output out\nR1 in out 1k\nC1 out 0 1n\n.ac dec 10 1 1meg\n", "unknown_directive", 5, 1, ".ac"),
    (".input in\n.output out\nR1 in out 1k\nX1 out 0 out filt\n", "unknown_subcircuit", 4, 14, "X1"),
    (".input in\n.output out\nR1 in out 1k tolerance=1%\nR2 out 0 1k\n", "unknown_parameter", 3, 14, "R1"),
    (".input in\n.output out\nR1 in out 1k\nC1 out 0 1n\nC2 a b 1n\nC3 b a 1n\n", "floating_node", 5, 1, "C2"),
    (".output out\nR1 in out 1k\nR2 out 0 1k\n", "missing_input", 1, 1, ".input"),
    (".input in\n.output out\nR1 in out 1k\nX1 0 out out opamp\nX2 0 out out opamp\n", "singular_circuit", 2, 1,
     ".output"),
    (".input in\n.output out\nR1 in out 1k\nXA out 0 out opamp gain=3\n", "unknown_parameter", 4, 20, "XA"),
])
def test_netlist_problems_are_located_by_file_line_column_and_element(text: str, kind: str, line: int, column: int,
                                                                       field: str) -> None:
    problems = _problems(text)
    match = [p for p in problems if p.kind == kind]
    assert match, [str(p) for p in problems]
    problem = match[0]
    assert (problem.file, problem.line, problem.column, problem.field) == ("board.cir", line, column, field)
    assert str(problem).startswith(f"board.cir:{line}:{column}: {field}: ")


def test_every_problem_of_a_netlist_is_reported_at_once() -> None:
    problems = _problems("R1 in a 10q\nC1 a 0 1F\nZ9 a 0 1\n")
    assert {"bad_value", "unknown_element", "missing_output", "missing_input"} <= {p.kind for p in problems}
    assert [p.line for p in problems] == sorted(p.line for p in problems)


def test_a_first_line_that_looks_like_a_spice_title_is_explained() -> None:
    problems = _problems("Sallen Key filter\n.input in\n.output out\nR1 in out 1k\nR2 out 0 1k\n")
    assert problems[0].kind == "unknown_element" and "title" in problems[0].text


def test_a_recursive_subcircuit_is_refused() -> None:
    problems = _problems(".input in\n.output out\nR1 in out 1k\nX1 out 0 loop\n.subckt loop a b\nX2 a b loop\n.ends\n")
    assert "recursive_subcircuit" in [p.kind for p in problems]


def test_an_ideal_op_amp_has_infinite_gain_and_bandwidth() -> None:
    netlist = parse_netlist(".input in\n.output out\nR1 in b 1k\nR2 b 0 1k\nX1 b out out opamp\n")
    amp = netlist.elements[-1].opamp
    assert amp.ideal and math.isinf(amp.a0) and math.isinf(amp.gbw_hz)
