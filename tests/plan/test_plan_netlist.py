"""Plans with a netlist or a golden curve as their model: every problem located, in the plan's
own lines for an inline netlist, in the model file's for a file; the model files kept."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from test_plan_errors import edit, only_problem, position, problems_of

from sweeper.plan import PlanError, load_plan, load_plan_text

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
NETLIST_PLAN = (CONFIGS / "aa4-netlist.yaml").read_text(encoding="utf-8")
GOLDEN_PLAN = (CONFIGS / "aa4-golden.yaml").read_text(encoding="utf-8")


def test_the_demo_netlist_plan_loads_with_its_parts() -> None:
    plan = load_plan_text(NETLIST_PLAN)
    netlist = plan.model.parsed_netlist
    assert list(netlist.nominal) == ["R1", "R2", "C1", "C2", "R3", "R4", "C3", "C4"]
    assert netlist.tolerance["C3"] == pytest.approx(0.05)
    assert [s.name for s in plan.model.part_specs()] == list(netlist.nominal)


def test_a_bad_value_in_an_inline_netlist_is_located_on_the_plans_line_and_column() -> None:
    text = edit("C3 c   out 2.079n tol=5%", "C3 c   out 2.079q tol=5%", NETLIST_PLAN)
    problem = only_problem(text)
    assert (problem.line, problem.column) == position(text, "C3 c   out", "2.079q")
    assert (problem.file, problem.field, problem.kind) == ("plan.yaml", "model.netlist.C3", "bad_value")


@pytest.mark.parametrize(("old", "new", "kind", "line_with", "token"), [
    ("    R4 c   d  10k    tol=1%", "    R4 c   e  10k    tol=1%", "dangling_node", "R4 c   e", "R4"),
    ("    .output out", "    .output nowhere", "missing_output", ".output nowhere", "nowhere"),
    ("    C4 d   0  304.5p tol=5%", "    W4 d   0  304.5p tol=5%", "unknown_element", "W4 d", "W4"),
])
def test_inline_netlist_problems_point_into_the_plan(old: str, new: str, kind: str, line_with: str, token: str) -> None:
    text = edit(old, new, NETLIST_PLAN)
    problem = next(p for p in problems_of(text) if p.kind == kind)
    assert (problem.line, problem.column) == position(text, line_with, token)
    assert problem.file == "plan.yaml" and problem.field.startswith("model.netlist")


def test_a_netlist_file_is_read_beside_the_plan_and_its_problems_point_into_it(tmp_path: Path) -> None:
    netlist = NETLIST_PLAN.split("  netlist: |\n")[1].split("  loading:")[0]
    netlist = "\n".join(line[4:] for line in netlist.splitlines()) + "\n"
    (tmp_path / "aa4.cir").write_text(netlist.replace("R2 a   b  10k", "R2 a   b  10kk"))
    plan_text = NETLIST_PLAN.split("  netlist: |\n")[0] + "  netlist_file: aa4.cir\n  loading:" + \
        NETLIST_PLAN.split("  loading:")[1]
    (tmp_path / "plan.yaml").write_text(plan_text)
    with pytest.raises(PlanError) as caught:
        load_plan(tmp_path / "plan.yaml")
    problem = caught.value.problems[0]
    assert problem.file == str(tmp_path / "aa4.cir") and problem.kind == "bad_value" and problem.field == "R2"
    assert (problem.line, problem.column) == position(netlist.replace("10kk", "10kk"), "R2 a", "10k")
    (tmp_path / "aa4.cir").write_text(netlist)
    plan = load_plan(tmp_path / "plan.yaml")
    assert plan.model.parsed_netlist.nominal["R2"] == 10e3
    assert plan.model_files["aa4.cir"]["text"] == netlist
    # a run's stored copy is used instead of the disk (the file may be gone or changed by then)
    (tmp_path / "aa4.cir").unlink()
    again = load_plan_text(plan_text, "stored", model_files=plan.model_files)
    assert again.model.parsed_netlist.nominal == plan.model.parsed_netlist.nominal


def test_a_missing_netlist_file_is_located_at_the_plan_field(tmp_path: Path) -> None:
    text = NETLIST_PLAN.split("  netlist: |\n")[0] + "  netlist_file: nowhere.cir\n  loading:" + \
        NETLIST_PLAN.split("  loading:")[1]
    problem = only_problem(text)
    assert problem.kind == "file_missing" and problem.field == "model.netlist_file"
    assert (problem.line, problem.column) == position(text, "netlist_file:", "nowhere.cir")


@pytest.mark.parametrize(("old", "new", "kind", "field"), [
    ("  circuit: netlist\n", "  circuit: netlist\n  netlist_file: aa4.cir\n", "conflict", "model.netlist_file"),
    ("  circuit: netlist\n", "  circuit: netlist\n  components: {R1: 10 kOhm}\n", "conflict", "model.components"),
    ("  circuit: netlist\n", "  circuit: rc-lowpass\n  components: {R: 1 kOhm, C: 1 nF}\n", "conflict", "model.netlist"),
])
def test_netlist_fields_that_do_not_fit_together_are_refused(old: str, new: str, kind: str, field: str) -> None:
    problems = problems_of(edit(old, new, NETLIST_PLAN))
    assert (kind, field) in [(p.kind, p.field) for p in problems], [str(p) for p in problems]


def test_a_netlist_circuit_without_its_netlist_is_refused() -> None:
    text = NETLIST_PLAN.split("  netlist: |\n")[0] + "  loading:" + NETLIST_PLAN.split("  loading:")[1]
    problem = only_problem(text)
    assert problem.kind == "missing" and problem.field == "model"


def test_simulated_parts_of_a_netlist_take_the_netlists_names_and_kinds() -> None:
    plan = load_plan_text(edit("components: {}  ", "components: {C3: 2.5n, R1: 10.2k}  ", NETLIST_PLAN))
    assert plan.bench.simulation.components == {"C3": pytest.approx(2.5e-9), "R1": pytest.approx(10.2e3)}
    unknown = only_problem(edit("components: {}  ", "components: {C9: 2.5 nF}  ", NETLIST_PLAN))
    assert unknown.kind == "unknown_name" and unknown.field == "bench.simulation.components.C9"
    wrong = only_problem(edit("components: {}  ", "components: {C3: 2.5 kOhm}  ", NETLIST_PLAN))
    assert wrong.kind == "bad_quantity" and wrong.field == "bench.simulation.components.C3"


def test_the_demo_golden_plan_loads_and_a_sweep_outside_its_curve_is_refused() -> None:
    plan = load_plan_text(GOLDEN_PLAN, "plan.yaml", base_dir=CONFIGS)
    assert plan.model.golden_curve is not None and plan.model.golden_curve.has_uncertainty
    text = edit("  stop: 100 kHz", "  stop: 2 MHz", GOLDEN_PLAN)
    with pytest.raises(PlanError) as caught:
        load_plan_text(text, "plan.yaml", base_dir=CONFIGS)
    problem = caught.value.problems[0]
    assert problem.kind == "out_of_range" and problem.field == "sweep.stop"
    assert (problem.line, problem.column) == position(text, "  stop: 2 MHz", "2 MHz")


def test_a_golden_uncertainty_band_needs_uncertainty_columns(tmp_path: Path) -> None:
    (tmp_path / "g.csv").write_text("frequency_hz,gain_db,phase_deg\n1000,0,0\n100000,-50,100\n")
    text = GOLDEN_PLAN.replace("aa4-golden.csv", "g.csv")
    with pytest.raises(PlanError) as caught:
        load_plan_text(text, "plan.yaml", base_dir=tmp_path)
    problem = caught.value.problems[0]
    assert problem.kind == "missing" and problem.field == "model.golden.band"
    fixed = text.replace("band: uncertainty", "band: fixed, gain: 0.2 dB, phase: 2 deg").replace(
        ", coverage_factor: 2", "")
    load_plan_text(fixed, "plan.yaml", base_dir=tmp_path)


def test_a_bad_golden_file_is_reported_in_its_own_lines(tmp_path: Path) -> None:
    (tmp_path / "g.csv").write_text("frequency_hz,gain_db,phase_deg,u_gain_db,u_phase_deg\n1000,0,0,0,0\n900,0,0,0,0\n")
    with pytest.raises(PlanError) as caught:
        load_plan_text(GOLDEN_PLAN.replace("aa4-golden.csv", "g.csv"), "plan.yaml", base_dir=tmp_path)
    problem = caught.value.problems[0]
    assert (problem.file, problem.line, problem.kind) == (str(tmp_path / "g.csv"), 3, "not_increasing")


@pytest.mark.parametrize(("old", "new", "line_with", "token", "says"), [
    ("    R4 c   d  10k    tol=1%", "    R4 c   d  10M    tol=1%", "R4 c   d", "10M",
     "model.netlist.R4: '10M' uses 'M', which SPICE reads as milli"),
    ("    R4 c   d  10k    tol=1%", "    R4 c   e  10k    tol=1%", "R4 c   e", "R4",
     "model.netlist.R4: node 'e' of R4 connects to nothing else"),
    ("    C4 d   0  304.5p tol=5%", "    W4 d   0  304.5p tol=5%", "W4 d", "W4",
     "model.netlist.W4: 'W4' is not an element"),
    ("    .output out", "    .output nowhere", ".output nowhere", "nowhere",
     "model.netlist.output: no element is connected to the output node 'nowhere'"),
])
def test_sweeper_check_reports_a_bad_netlist_located_and_exits_2_without_a_traceback(
        tmp_path: Path, old: str, new: str, line_with: str, token: str, says: str) -> None:
    path = tmp_path / "plan.yaml"
    path.write_text(edit(old, new, NETLIST_PLAN))
    run = subprocess.run([sys.executable, "-m", "sweeper", "check", str(path)], capture_output=True, text=True,
                         timeout=120)
    assert run.returncode == 2
    assert "Traceback" not in run.stderr + run.stdout
    line, column = position(path.read_text(), line_with, token)
    assert f"{path}:{line}:{column}: {says}" in run.stderr, run.stderr
