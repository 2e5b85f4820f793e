"""Production mode driven through its input: boards, a failing board, a retest, tally vs catalog.

The demo plan (configs/rc-antialias.yaml, an invented data-logger board) runs on the simulated
bench. One board is made to fail through the documented simulated-board hook of
`sweeper.campaigns.production.run_shift` (a 120 nF part where 100 nF +-5 % is specified), and passes
after its "rework" (the hook gives the plan's parts on its second test). Serials are invented.
"""

from __future__ import annotations

import io
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

from sweeper.campaigns.board import SIM_OVERRIDE_KEY
from sweeper.cli import main
from sweeper.plan import load_plan
from sweeper.campaigns.production import (
    MAX_SERIAL_CHARS,
    read_shift_summary,
    run_shift,
    serial_problem,
    stream_reader,
    tally,
    write_shift_summary,
)
from sweeper.store.catalog import Catalog, default_catalog_path, rebuild
from sweeper.store.runfile import read_run

REPO = Path(__file__).resolve().parents[2]
PLAN = REPO / "configs" / "rc-antialias.yaml"
GOOD, BAD, OTHER, PRIOR = "DLF7-7001", "DLF7-7002", "DLF7-7003", "DLF7-6999"
WRONG_C_F = 120e-9  # 20 % high against a 100 nF +-5 % part: far outside the band


def wrong_part_then_rework(serial: str, attempt: int):
    """The failing board has the wrong capacitor on its first test and the right one after rework."""
    return {"C": WRONG_C_F} if serial == BAD and attempt == 0 else None


@pytest.fixture(scope="module")
def shift(tmp_path_factory):
    """One shift: three boards (one failing), a refused serial, a declined retest, one retest."""
    runs = tmp_path_factory.mktemp("line") / "runs"
    plan = load_plan(PLAN)
    typed = "\n".join([
        GOOD,
        f"  {BAD}\r",            # a scanner's CR and stray spaces are stripped
        "DLF7\x07BELL",          # control character: refused
        "X" * (MAX_SERIAL_CHARS + 1),  # too long: refused
        OTHER,
        GOOD, "n",               # already tested: retest declined, no run
        BAD, "y",                # already tested: retest after rework
        "end",
        "DLF7-9999",             # after "end": never read
    ]) + "\n"
    told: list[str] = []
    results = []
    summary = run_shift(plan, runs, stream_reader(io.StringIO(typed)), tell=told.append,
                        on_result=lambda test, outcome, t: results.append((test, outcome, t)),
                        sim_board=wrong_part_then_rework)
    return runs, plan, summary, told, results


def test_tally_counts_runs_boards_yield_and_retests(shift) -> None:
    _, _, summary, _, _ = shift
    t = summary.tally
    assert [x.serial for x in summary.tests] == [GOOD, BAD, OTHER, BAD]
    assert [x.result for x in summary.tests] == ["PASS", "FAIL", "PASS", "PASS"]
    assert [x.retest for x in summary.tests] == [False, False, False, True]
    assert (t.tested, t.boards, t.passed, t.failed, t.errors, t.retests) == (4, 3, 3, 1, 0, 1)
    # first-pass yield = boards passing on their first test / boards tested for the first time
    assert (t.first_tests_passed, t.first_tests) == (2, 3)
    assert t.first_pass_yield == pytest.approx(2 / 3)
    assert summary.ended_by == "operator"


def test_refusals_and_the_declined_retest_are_told(shift) -> None:
    _, _, summary, told, _ = shift
    assert any("control character (U+0007)" in m for m in told)
    assert any(f"at most {MAX_SERIAL_CHARS}" in m for m in told)
    assert any(f"{GOOD} not retested" in m for m in told)
    assert "DLF7-9999" not in {x.serial for x in summary.tests}


def test_catalog_agrees_with_the_tally(shift) -> None:
    runs, plan, summary, _, _ = shift
    with Catalog(default_catalog_path(runs)) as catalog:
        records = {r.run_id: r for r in catalog.find()}
    assert len(records) == summary.tally.tested
    for test in summary.tests:
        r = records[test.run_id]
        assert r.serial == test.serial
        assert r.retest == test.retest
        assert r.verdict == test.verdict and r.status == "complete"
        assert r.plan_sha256 == plan.sha256
    assert sum(r.verdict == "PASS" for r in records.values()) == summary.tally.passed
    assert sum(r.retest for r in records.values()) == summary.tally.retests
    assert len({r.serial for r in records.values()}) == summary.tally.boards
    # The retest flags are written into the run files: a catalog rebuilt from disk agrees.
    with rebuild(runs / "rebuilt.sqlite", runs) as rebuilt:
        assert {r.run_id: r.retest for r in rebuilt.find()} == {k: r.retest for k, r in records.items()}


def test_run_files_keep_the_plan_text_and_name_the_board(shift) -> None:
    _, plan, summary, _, _ = shift
    for test in summary.tests:
        _, meta = read_run(test.run_file)
        assert meta["plan_yaml"] == PLAN.read_text(encoding="utf-8")
        assert meta["plan_sha256"] == plan.sha256
        assert meta["dut"]["serial"] == test.serial
        assert meta["retest"] == test.retest
        assert meta["shift_id"] == summary.shift_id
    failing_meta = read_run(summary.tests[1].run_file)[1]
    assert failing_meta[SIM_OVERRIDE_KEY] == {"C": pytest.approx(WRONG_C_F)}
    assert SIM_OVERRIDE_KEY not in read_run(summary.tests[3].run_file)[1]


def test_failing_frequencies_are_where_the_true_board_leaves_the_limits(shift) -> None:
    """The board with C = 120 nF: its true response from scipy.signal.freqs (outside reference)
    against the limits stored in the run. Loaded first-order RC low-pass with a probe
    Rp || Cp on the output, referenced to the DUT input (circuit handbook algebra):
    H(s) = 1 / (s R (C + Cp) + 1 + R / Rp)."""
    _, _, _, _, results = shift
    test, outcome, _ = results[1]
    frame, _ = read_run(test.run_file)
    r_ohm, rp_ohm, cp_f = 1.6e3, 1e6, 15e-12  # the plan's R and probe loading
    f = frame["frequency_hz"].to_numpy()
    _, h = signal.freqs([1.0], [r_ohm * (WRONG_C_F + cp_f), 1.0 + r_ohm / rp_ohm], worN=2 * np.pi * f)
    gain_db, phase_deg = 20 * np.log10(np.abs(h)), np.degrees(np.angle(h))
    # Distance of the true response outside the band (positive = outside), dB and degrees.
    out_gain = np.maximum(frame["gain_lo_db"] - gain_db, gain_db - frame["gain_hi_db"]).to_numpy()
    out_phase = np.maximum(frame["phase_lo_deg"] - phase_deg, phase_deg - frame["phase_hi_deg"]).to_numpy()
    # Clear cases only: 4 standard uncertainties (k = 1, from the run) from a limit either way,
    # so the measurement noise cannot move a point across; points nearer a limit are not asserted.
    u_gain, u_phase = 4 * frame["u_gain_db"].to_numpy(), 4 * frame["u_phase_deg"].to_numpy()
    clearly_out = (out_gain > u_gain) | (out_phase > u_phase)
    clearly_in = (out_gain < -u_gain) & (out_phase < -u_phase)
    failing = np.isin(f, test.failing_hz)
    assert clearly_out.sum() >= 5 and clearly_in.sum() >= 5  # the check has cases of both kinds
    assert np.all(failing[clearly_out]) and not np.any(failing[clearly_in])
    assert outcome.verdict.name == "FAIL"


@pytest.mark.parametrize("suffix", [".csv", ".json"])
def test_shift_summary_export_round_trips(shift, tmp_path: Path, suffix: str) -> None:
    _, _, summary, _, _ = shift
    path = tmp_path / f"shift{suffix}"
    write_shift_summary(summary, path)
    back = read_shift_summary(path)
    assert back.tests == summary.tests
    assert back.tally == summary.tally == tally(back.tests)
    assert (back.shift_id, back.plan_sha256, back.ended_by) == (summary.shift_id, summary.plan_sha256, "operator")


def test_a_serial_from_an_earlier_shift_needs_a_retest_answer(shift) -> None:
    runs, plan, _, _, _ = shift
    summary = run_shift(plan, runs, stream_reader(io.StringIO(f"{OTHER}\nno\n{OTHER}\nY\n")))
    assert [(t.serial, t.retest) for t in summary.tests] == [(OTHER, True)]
    assert summary.ended_by == "end of input"
    t = summary.tally
    assert (t.tested, t.retests, t.first_tests) == (1, 1, 0) and np.isnan(t.first_pass_yield)


def test_serial_rules() -> None:
    assert serial_problem("DLF7-000123") is None
    assert serial_problem("Ω-7 board") is None  # printable text is a serial's business
    assert "control character" in serial_problem("A\tB")
    assert "control character" in serial_problem("A\x00B")
    assert serial_problem("S" * MAX_SERIAL_CHARS) is None
    assert "65 characters" in serial_problem("S" * (MAX_SERIAL_CHARS + 1))


def test_sim_board_hook_is_refused_on_a_visa_bench(tmp_path: Path) -> None:
    text = PLAN.read_text(encoding="utf-8").replace("kind: simulated ", "kind: visa      ")
    (tmp_path / "visa.yaml").write_text(text, encoding="utf-8")
    plan = load_plan(tmp_path / "visa.yaml")
    assert plan.bench.kind == "visa"
    with pytest.raises(ValueError, match="simulated"):
        run_shift(plan, tmp_path / "runs", stream_reader(io.StringIO("")), sim_board={BAD: {"C": "120 nF"}})


def test_line_command_end_to_end_through_stdin(tmp_path: Path) -> None:
    """`sweeper line` as a station runs it: serials piped in as a scanner would type them."""
    runs, out, quick = tmp_path / "runs", tmp_path / "shift.csv", tmp_path / "quick.yaml"
    # Fewer points per decade keep the real process quick; the plan is otherwise the demo's.
    quick.write_text(PLAN.read_text(encoding="utf-8").replace("points_per_decade: 5", "points_per_decade: 2"),
                     encoding="utf-8")
    typed = "DLF7-8001\nDLF7-8002\nDLF7-8001\ny\n\n"
    env = {**os.environ, "COLUMNS": "120"}
    done = subprocess.run([sys.executable, "-m", "sweeper", "line", str(quick), "--out", str(runs),
                           "--summary-out", str(out)], input=typed, capture_output=True, text=True,
                          timeout=120, env=env, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "Traceback" not in done.stdout + done.stderr
    assert "██" in done.stdout  # the large PASS
    assert "tested 3 · boards 2 · passed 3 · failed 0 · errors 0 · retests 1" in done.stdout
    back = read_shift_summary(out)
    assert [(t.serial, t.result, t.retest) for t in back.tests] == [
        ("DLF7-8001", "PASS", False), ("DLF7-8002", "PASS", False), ("DLF7-8001", "PASS", True)]
    with Catalog(default_catalog_path(runs)) as catalog:
        records = catalog.find()
    assert sorted((r.serial, r.retest, r.verdict) for r in records) == sorted(
        (t.serial, t.retest, t.verdict) for t in back.tests)


def test_line_command_refuses_a_bad_summary_suffix(tmp_path: Path) -> None:
    done = CliRunner().invoke(main, ["line", str(PLAN), "--out", str(tmp_path), "--summary-out",
                                     str(tmp_path / "shift.txt")], input="")
    assert done.exit_code == 2 and done.exception is None or isinstance(done.exception, SystemExit)
    assert ".csv or .json" in done.output
    assert not (tmp_path / "catalog.sqlite").exists()  # refused before any board was tested
