"""`sweeper resume`: the checks before it measures anything (same plan by hash, same instruments
by *IDN? and driver file, the run not in use, not already complete), the interruption it
records, and how RUN is found. Driven through the real command line (click's runner calls the
same `main` as `python -m sweeper`)."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner
from run_rig import load, plan_text, without_times

from sweeper.cli import main
from sweeper.run.runner import execute_run
from sweeper.store.catalog import Catalog, default_catalog_path
from sweeper.store.journal import Journal, read_journal
from sweeper.store.runfile import frames_identical, read_run

POINTS = 10


def interrupted_run(tmp_path: Path, after: int = 4, **fields):
    """A run stopped (as by SIGTERM) after `after` points; returns its outcome."""
    seen = []
    plan = load(plan_text(points=POINTS, transient="false", **fields), tmp_path)
    outcome = execute_run(plan, tmp_path / "runs", on_point=seen.append, should_stop=lambda: len(seen) >= after)
    assert outcome.status == "interrupted"
    return outcome


def resume(*args: str):
    return CliRunner().invoke(main, ["resume", *args])


def rewritten(journal: Path, change) -> Path:
    """A copy of a run's journal whose header was changed by change(metadata), written through
    the journal API (so its checksums are right): a run 'measured elsewhere'."""
    contents = read_journal(journal)
    header = contents.header
    change(header["metadata"])
    copy = journal.with_name("other.journal")
    with Journal.create(copy, header) as out:
        for point in contents.points:
            out.append_point(point)
    return copy


def test_resume_completes_an_interrupted_run_and_records_the_interruption(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)
    result = resume(str(outcome.run_path), "--plan", str(tmp_path / "plan.yaml"))  # the same plan: accepted
    assert result.exit_code == 0, result.output
    assert "resuming" in result.output and "interruption recorded" in result.output
    frame, meta = read_run(outcome.run_path)
    assert len(frame) == POINTS and meta["finished"] and meta["summary"]["status"] == "complete"
    (gap,) = meta["summary"]["interruptions"]
    assert gap["points_before"] == 4 and gap["last_point_index"] == 3
    assert gap["reason"].startswith("the run ended interrupted")
    assert gap["gap_s"] >= 0 and gap["resumed_utc"] >= gap["interrupted_utc"]
    kinds = [e["kind"] for e in read_journal(outcome.journal_path).events]
    assert kinds == ["finished", "resumed", "finished"]  # the first finish was voided by the resume
    reference = execute_run(load(plan_text(points=POINTS, transient="false"), tmp_path / "ref"), tmp_path / "ref")
    assert frames_identical(without_times(frame), without_times(read_run(reference.run_path)[0]))
    with Catalog(default_catalog_path(outcome.run_path.parent)) as catalog:
        record = catalog.get(outcome.run_id)
    assert record.status == "complete" and record.points_measured == POINTS


def test_resume_refuses_a_changed_plan(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)
    changed = tmp_path / "changed.yaml"
    changed.write_text((tmp_path / "plan.yaml").read_text().replace("points: 10", "points: 11"))
    before = outcome.journal_path.read_bytes()
    result = resume(str(outcome.journal_path), "--plan", str(changed))
    assert result.exit_code == 2
    assert "plan changed since the run started" in result.output and "Traceback" not in result.output
    assert outcome.journal_path.read_bytes() == before  # nothing was written


def test_resume_refuses_an_altered_stored_plan(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)

    def alter(meta: dict) -> None:  # another plan text under the old hash
        meta["plan_yaml"] = meta["plan_yaml"].replace("points: 10", "points: 11")

    result = resume(str(rewritten(outcome.journal_path, alter)))
    assert result.exit_code == 2
    assert "does not hash to its SHA-256" in result.output


def test_resume_refuses_other_instruments(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)

    def other_scope(meta: dict) -> None:
        meta["instruments"][1]["idn"] = "Sweeper Sim,CAP-2A,SIM-CA-9999,1.0"

    journal = rewritten(outcome.journal_path, other_scope)
    before = journal.read_bytes()
    result = resume(str(journal))
    assert result.exit_code == 3
    assert "not the bench this run started on" in result.output
    assert "SIM-CA-9999" in result.output and "scope (TCPIP0::sim-scope-a::5025::SOCKET)" in result.output
    assert journal.read_bytes() == before  # nothing was written


def test_resume_refuses_a_changed_driver_file(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)

    def other_driver(meta: dict) -> None:
        meta["instruments"][0]["driver_sha256"] = "0" * 64

    result = resume(str(rewritten(outcome.journal_path, other_driver)))
    assert result.exit_code == 2
    assert "driver file sim-generator.yaml" in result.output


def test_resume_refuses_a_run_in_use(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)
    with Journal.open_append(outcome.journal_path):  # another process would hold this lock
        result = resume(str(outcome.journal_path))
    assert result.exit_code == 3
    assert "open for writing by another process" in result.output


def test_resume_of_a_complete_run_measures_nothing(tmp_path: Path) -> None:
    plan = load(plan_text(points=POINTS), tmp_path)
    outcome = execute_run(plan, tmp_path / "runs")
    before = outcome.journal_path.read_bytes()
    result = resume(outcome.run_id, "--runs", str(tmp_path / "runs"))  # by run id
    assert result.exit_code == 0, result.output
    assert "already complete" in result.output
    assert outcome.journal_path.read_bytes() == before


@pytest.mark.parametrize("run", ["no-such-run", "missing.journal"])
def test_resume_of_an_unknown_run_is_bad_input(tmp_path: Path, run: str) -> None:
    result = resume(run, "--runs", str(tmp_path))
    assert result.exit_code == 2
    assert "no such run" in result.output and "Traceback" not in result.output


def test_resume_finds_a_run_by_the_start_of_its_id(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)
    result = resume(outcome.run_id[:20], "--runs", str(tmp_path / "runs"))
    assert result.exit_code == 0, result.output
    assert read_run(outcome.run_path)[1]["summary"]["status"] == "complete"


def test_resume_after_a_kill_mid_record_says_so(tmp_path: Path) -> None:
    outcome = interrupted_run(tmp_path)
    # What a kill during a write leaves: the finish record torn half-way (no newline).
    data = outcome.journal_path.read_bytes()
    last = data.rstrip(b"\n").rfind(b"\n") + 1
    outcome.journal_path.write_bytes(data[: last + (len(data) - last) // 2])
    assert read_journal(outcome.journal_path).torn_tail
    result = resume(str(outcome.journal_path))
    assert result.exit_code == 0, result.output
    gap = read_run(outcome.run_path)[1]["summary"]["interruptions"][0]
    assert "while writing a record" in gap["reason"]


def test_stop_request_is_a_clean_interruption(tmp_path: Path) -> None:
    seen = []
    plan = load(plan_text(points=POINTS), tmp_path)

    def stop() -> bool:
        return len(seen) >= 2

    outcome = execute_run(plan, tmp_path / "runs", on_point=seen.append, should_stop=stop)
    assert outcome.status == "interrupted" and outcome.exit_code == 130
    assert outcome.sim_output_on is False and len(read_journal(outcome.journal_path).points) == 2


def test_a_resumed_campaign_sweep_opens_the_same_simulated_bench(tmp_path: Path) -> None:
    # A campaign's sweep number is mixed into the simulator's seed (its sweeps differ); it is
    # stored in the run, so a resume reopens the same bench and measures what an uninterrupted
    # sweep measures, bit for bit (with the transient off, as for any resume).
    sweep_two = {"campaign_sweep": 2, "campaign_offset_s": 600.0}
    seen = []
    plan = load(plan_text(points=POINTS, transient="false"), tmp_path)
    outcome = execute_run(plan, tmp_path / "runs", on_point=seen.append, should_stop=lambda: len(seen) >= 4,
                          extra_metadata=sweep_two)
    assert outcome.status == "interrupted"
    result = resume(str(outcome.run_path))
    assert result.exit_code == 0, result.output
    resumed = without_times(read_run(outcome.run_path)[0])
    twin = execute_run(load(plan_text(points=POINTS, transient="false"), tmp_path / "twin"), tmp_path / "twin",
                       extra_metadata=sweep_two)
    assert frames_identical(resumed, without_times(read_run(twin.run_path)[0]))
    other = execute_run(load(plan_text(points=POINTS, transient="false"), tmp_path / "other"), tmp_path / "other",
                        extra_metadata={**sweep_two, "campaign_sweep": 3})
    assert not frames_identical(resumed, without_times(read_run(other.run_path)[0]))
