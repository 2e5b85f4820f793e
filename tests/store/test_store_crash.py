"""A writer killed with SIGKILL mid-run loses no point it reported written."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from store_samples import assert_points_identical, sample_point

from sweeper.store.journal import read_journal
from sweeper.store.runfile import ensure_runfile, frames_identical, points_frame, read_run

CHILD = Path(__file__).with_name("crash_child.py")


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX SIGKILL")
def test_sigkill_mid_run_loses_no_reported_point(tmp_path):
    journal_path, run_path = tmp_path / "crash.journal", tmp_path / "crash.h5"
    child = subprocess.Popen(
        [sys.executable, str(CHILD), str(journal_path), str(run_path)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    reported: list[int] = []
    try:
        while len(reported) < 60:
            line = child.stdout.readline()
            if not line:
                pytest.fail(f"child ended early: {child.stderr.read()}")
            reported.append(int(line))
        os.kill(child.pid, signal.SIGKILL)  # no cleanup, no flush, no close: the child is gone
    finally:
        if child.poll() is None:
            os.kill(child.pid, signal.SIGKILL)
        child.wait(timeout=30)
    reported += [int(line) for line in child.stdout.read().split()]  # lines already in the pipe
    child.stdout.close()
    child.stderr.close()
    assert child.returncode == -signal.SIGKILL

    contents = read_journal(journal_path)  # must not raise, whatever instant the kill hit
    recovered = [p.index for p in contents.points]
    assert recovered == list(range(len(recovered)))  # in order, no gaps
    assert set(reported) <= set(recovered)
    assert len(recovered) <= max(reported) + 2  # at most the point after the last reported one
    assert_points_identical(contents.points, [sample_point(i) for i in recovered])

    # The run file the child left is either readable and stale or rebuilt; either way it ends current.
    ensure_runfile(journal_path, run_path)
    frame, metadata = read_run(run_path)
    assert frames_identical(frame, points_frame(contents.points))
    assert metadata["run_id"] == "STN-A3-crash" and metadata["finished"] is False
