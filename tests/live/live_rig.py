"""A run to watch: the header and points of one real sweep on the simulated bench, replayed into
a fresh journal point by point (as the runner appends them), from a background thread.

Board, serial and station are invented.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import Any

from sweeper.measure.point import Point
from sweeper.plan import load_plan
from sweeper.run.runner import execute_run
from sweeper.store.journal import Journal, read_journal
from sweeper.store.runfile import FINISH_EVENT

REPO = Path(__file__).resolve().parents[2]
DEMO_PLAN = REPO / "configs" / "rc-antialias-wrong-cap.yaml"  # a failing board: the page has something to show


def recorded_run(out_dir: Path) -> tuple[dict[str, Any], list[Point], dict[str, Any]]:
    """Run the demo plan once; (journal header, points, finish summary) of that run."""
    outcome = execute_run(load_plan(DEMO_PLAN), out_dir)
    assert outcome.status == "complete", outcome.error
    contents = read_journal(outcome.journal_path)
    finish = next(e for e in contents.events if e["kind"] == FINISH_EVENT)
    return contents.header, contents.points, finish["summary"]


class Replay(threading.Thread):
    """Appends points to a new journal every `interval_s`, then the finish event.

    The last point waits for `release` to be set, so a caller can act while the run is
    certainly still going, however slow the machine.
    """

    def __init__(self, path: Path, header: dict[str, Any], points: list[Point], summary: dict[str, Any],
                 interval_s: float, first: int = 0) -> None:
        super().__init__(daemon=True)
        self.path = path
        self.points = points
        self.summary = summary
        self.interval_s = interval_s
        self.journal = Journal.create(path, header)
        for point in points[:first]:
            self.journal.append_point(point)
        self.first = first
        self.appended = first
        self.done = threading.Event()
        self.release = threading.Event()

    def run(self) -> None:
        try:
            for point in self.points[self.first:]:
                time.sleep(self.interval_s)
                if point is self.points[-1]:
                    self.release.wait(timeout=120)
                self.journal.append_point(point)
                self.appended += 1
            self.journal.append_event(FINISH_EVENT, summary=self.summary)
        finally:
            self.journal.close()
            self.done.set()
