"""The live page's data lists a run's interruptions with their times and gaps."""

from __future__ import annotations

from pathlib import Path

from sweeper.live.page import render_page
from sweeper.live.state import journal_snapshot
from sweeper.plan import load_plan
from sweeper.run.resume import resume_run
from sweeper.run.runner import execute_run

REPO = Path(__file__).resolve().parents[2]


def test_a_resumed_run_shows_its_interruption(tmp_path: Path) -> None:
    plan = load_plan(REPO / "configs" / "rc-antialias.yaml")
    seen: list = []
    stopped = execute_run(plan, tmp_path / "runs", on_point=seen.append, should_stop=lambda: len(seen) >= 3)
    assert stopped.status == "interrupted"
    assert journal_snapshot(stopped.journal_path).as_json()["interruptions"] == []
    resume_run(str(stopped.journal_path))
    (gap,) = journal_snapshot(stopped.journal_path).as_json()["interruptions"]
    assert gap["interrupted_utc"].endswith("Z") and gap["resumed_utc"].endswith("Z")
    assert gap["gap_s"] >= 0 and "ended interrupted" in gap["reason"]
    assert 'id="interruptions"' in render_page("t", "s")
