"""The runner's and resume's own 'output off' paths, seen with the bench's close-time fallback
disabled: Bench.close then only closes the sessions, so a source left on stays on unless the
run itself switched it off. The simulated generator's own output state is the witness."""

from __future__ import annotations

from pathlib import Path

import pytest
from run_rig import load, plan_text

from sweeper.instruments import bench as bench_module
from sweeper.run.resume import resume_run
from sweeper.run.runner import execute_run

POINTS = 6


@pytest.fixture
def no_close_fallback(monkeypatch):
    """Bench.close without its safe_output_off / reopen_output_off fallback."""

    def close(self) -> None:
        if self.closed:
            return
        self.closed = True
        for link in self.links:
            link.close()
        if self.resource_manager is not None:
            self.resource_manager.close()

    monkeypatch.setattr(bench_module.Bench, "close", close)


def test_a_complete_run_switches_the_output_off_itself(tmp_path: Path, no_close_fallback) -> None:
    outcome = execute_run(load(plan_text(points=POINTS), tmp_path), tmp_path / "runs")
    assert outcome.status == "complete"
    assert outcome.sim_output_on is False


def test_an_aborted_run_switches_the_output_off_itself(tmp_path: Path, no_close_fallback) -> None:
    plan = load(plan_text(points=POINTS, faults="{timeout: {retries: 0, then: abort}}",
                          injections="[{kind: timeout, at_point: 2, times: 50}]"), tmp_path)
    outcome = execute_run(plan, tmp_path / "runs")
    assert outcome.status == "error"
    assert outcome.sim_output_on is False


def test_a_stopped_then_resumed_run_switches_the_output_off_itself(tmp_path: Path, no_close_fallback) -> None:
    seen: list = []
    plan = load(plan_text(points=POINTS, transient="false"), tmp_path)
    stopped = execute_run(plan, tmp_path / "runs", on_point=seen.append, should_stop=lambda: len(seen) >= 2)
    assert stopped.status == "interrupted" and stopped.sim_output_on is False
    resumed = resume_run(str(stopped.journal_path))
    assert resumed.outcome.status == "complete" and resumed.outcome.sim_output_on is False
