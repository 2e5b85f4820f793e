"""Crash safety (issue 4, first check): a running sweep SIGKILLed at many random moments loses no
point it had reported, leaves a readable run every time, and `sweeper resume` completes it with
exactly the points of an uninterrupted run with the same seed (all floats bit for bit; only the
two time columns differ).

Runs are real processes. The first run of the first scenario and its final resume are
`python -m sweeper ...` subprocesses; the other runs are started from kill_zygote.py, a fork
server that has imported sweeper once and runs each command line in a forked child, so that
two dozen kills fit in seconds. The simulated bench runs in real time (each simulated delay is
slept), so a 40-point sweep lasts about a second and the kills fall all over it: right after the
journal appears (before the first point), at random moments, and near the end.

The simulated DUT's transient is switched off here (bench.simulation.transient: false): the
energy stored in the DUT at a frequency change depends on the exact instant of the change, which
a restarted bench cannot recreate, so with it a resumed point would differ in its last bits.
"""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from run_rig import METER, SCOPE_A, SCOPE_B, journal_points_match_runfile, load, plan_text, without_times

from sweeper.run.runner import execute_run
from sweeper.store.journal import JournalError, read_journal
from sweeper.store.runfile import frames_identical, read_run

HERE = Path(__file__).parent
POINTS = 30
KILLS_PER_SCENARIO = 8
SCENARIOS = [
    ("scope A", dict(instrument=SCOPE_A, seed=11)),
    ("scope B", dict(instrument=SCOPE_B, seed=12)),
    ("meter", dict(mode="meter", instrument=METER, seed=13, stop="10 kHz")),
]
REPORTED = re.compile(r"^\s*(\d+)\s+[\d.]+\s*[kMG]?Hz\b", re.MULTILINE)


class Zygote:
    """The fork server (see kill_zygote.py)."""

    def __init__(self) -> None:
        env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "COLUMNS": "200"}
        self.proc = subprocess.Popen([sys.executable, str(HERE / "kill_zygote.py")], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True, env=env, cwd=HERE)

    def ask(self, **request: object) -> dict:
        assert self.proc.stdin is not None and self.proc.stdout is not None
        self.proc.stdin.write(json.dumps(request) + "\n")
        self.proc.stdin.flush()
        return json.loads(self.proc.stdout.readline())

    def close(self) -> None:
        if self.proc.stdin is not None:
            self.proc.stdin.close()
        self.proc.wait(timeout=30)


class Child:
    """One command running in its own process: from the zygote, or a real `python -m sweeper`."""

    def __init__(self, argv: list[str], cwd: Path, log: Path, zygote: Zygote | None) -> None:
        self.log, self.zygote = log, zygote
        if zygote is None:
            env = {**os.environ, "COLUMNS": "200"}
            stream = open(log, "w")
            self.proc = subprocess.Popen([sys.executable, "-m", "sweeper", *argv], cwd=cwd, stdout=stream,
                                         stderr=subprocess.STDOUT, env=env)
            stream.close()
            self.pid = self.proc.pid
        else:
            log.touch()  # there even when the child is killed before it opens it
            self.pid = zygote.ask(op="start", argv=argv, cwd=str(cwd), log=str(log))["pid"]

    def kill(self) -> tuple[str, int]:
        """SIGKILL it; how it ended: ("signal", SIGKILL), or ("code", c) when it ended first."""
        try:
            os.kill(self.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        return self.wait()

    def wait(self) -> tuple[str, int]:
        if self.zygote is None:
            code = self.proc.wait(timeout=120)
            return ("signal", -code) if code < 0 else ("code", code)
        got = self.zygote.ask(op="wait", pid=self.pid)
        return ("signal", got["signal"]) if got["signal"] is not None else ("code", got["code"])

    def reported(self) -> set[int]:
        """Indexes of the points the process printed (it prints a point once it is on disk)."""
        return {int(m) - 1 for m in REPORTED.findall(self.log.read_text(errors="replace"))}


def journal_points(path: Path | None, runs: Path | None = None) -> int:
    """Point records in the journal (cheap enough to poll); the journal in `runs` when path is
    None; -1 when there is none yet."""
    if path is None:
        found = sorted(runs.glob("*.journal")) if runs is not None and runs.exists() else []
        if not found:
            return -1
        path = found[0]
    try:
        data = path.read_bytes()
    except OSError:
        return -1
    return data.count(b'"type":"point"')


def wait_until(condition, limit_s: float = 20.0) -> None:
    deadline = time.monotonic() + limit_s
    while not condition() and time.monotonic() < deadline:
        time.sleep(0.002)


@pytest.fixture(scope="module")
def zygote():
    server = Zygote()
    yield server
    server.close()


def test_sigkill_at_random_moments_then_resume_gives_the_uninterrupted_result(tmp_path: Path, zygote: Zygote) -> None:
    rng = np.random.default_rng(20240501)  # the kill moments are drawn from a fixed seed
    kills = lost = 0
    kill_points: list[int] = []
    for number, (name, fields) in enumerate(SCENARIOS):
        where = tmp_path / f"s{number}"
        where.mkdir()
        reference = execute_run(load(plan_text(points=POINTS, transient="false", **fields), where), where / "ref")
        assert reference.status == "complete", reference.error
        ref_frame, _ = read_run(reference.run_path)
        plan_path = where / "plan.yaml"
        plan_path.write_text(plan_text(points=POINTS, transient="false", realtime="true", **fields))
        runs = where / "runs"
        journal: Path | None = None
        # Kill moments, by points already in the journal: the header only, spread over the
        # sweep, once as a resume starts up (0: before its first point), near the end.
        spread = sorted(rng.choice(np.arange(1, POINTS - 3), KILLS_PER_SCENARIO - 3, replace=False).tolist())
        targets = [0, *spread[:2], 0, *spread[2:], POINTS - 3]
        for k in range(KILLS_PER_SCENARIO + 1):
            final = k == KILLS_PER_SCENARIO
            real = number == 0 and k == 0  # a real `python -m sweeper run` process
            argv = ["run", str(plan_path), "--out", str(runs)] if journal is None else ["resume", str(journal)]
            child = Child(argv, where, where / f"log{k}.txt", None if real else zygote)
            if final:
                assert child.wait() == ("code", 0), child.log.read_text()
                break
            if k == 0:  # right after the journal appears: before the first point
                wait_until(lambda runs=runs: any(runs.glob("*.journal")), 60.0)
            else:  # once the journal holds `target` points, then somewhere within a point
                target = max(targets[k], journal_points(journal, runs))
                wait_until(lambda j=journal, r=runs, t=target: journal_points(j, r) >= t)
                time.sleep(float(rng.uniform(0.0, 0.03)))
            ended = child.kill()
            if ended != ("signal", signal.SIGKILL):  # it finished first: fine, if it finished well
                assert ended == ("code", 0), child.log.read_text()
                continue
            kills += 1
            found = sorted(runs.glob("*.journal")) if journal is None else [journal]
            try:
                journal = next(p for p in found if read_journal(p))
            except (StopIteration, JournalError):  # killed before the journal had its header
                for p in found:
                    p.unlink()  # nothing was measured: the run is started again
                journal = None
                kill_points.append(0)
                continue
            n = journal_points_match_runfile(journal, journal.with_suffix(".h5"))
            missing = child.reported() - set(range(n))
            lost += len(missing)
            assert not missing, f"{name}: points {sorted(missing)} were reported but are not in the journal"
            kill_points.append(n)
        assert journal is not None
        frame, meta = read_run(journal.with_suffix(".h5"))
        assert meta["finished"] and meta["summary"]["status"] == "complete"
        assert len(frame) == POINTS
        # Bit for bit: every float column (gain, phase, uncertainties, ranges, ...) of every point.
        assert frames_identical(without_times(frame), without_times(ref_frame)), name
        assert meta["summary"]["resumed"] >= 1
    print(f"\nkills survived: {kills}; points lost: {lost}; points in the journal at the kills: {kill_points}")
    assert kills >= 20
    assert lost == 0
    # The kills covered the whole sweep: before the first point, in the middle, near the end.
    assert min(kill_points) == 0 and max(kill_points) >= POINTS - 6
    assert any(5 <= n <= POINTS - 10 for n in kill_points)


def test_sigterm_stops_between_points_and_the_run_resumes(tmp_path: Path, zygote: Zygote) -> None:
    """A polite stop (SIGTERM) ends the run between points as 'interrupted' (exit 130); resume
    takes it up again and completes it."""
    plan_path = tmp_path / "plan.yaml"
    plan_path.write_text(plan_text(points=POINTS, transient="false", realtime="true"))
    runs = tmp_path / "runs"
    child = Child(["run", str(plan_path), "--out", str(runs)], tmp_path, tmp_path / "log0.txt", zygote)
    wait_until(lambda: any(journal_points(p) >= 5 for p in runs.glob("*.journal")))
    os.kill(child.pid, signal.SIGTERM)
    assert child.wait() == ("code", 130), child.log.read_text()
    (journal,) = runs.glob("*.journal")
    events = read_journal(journal).events
    assert events[-1]["kind"] == "finished" and events[-1]["summary"]["status"] == "interrupted"
    again = Child(["resume", str(journal)], tmp_path, tmp_path / "log1.txt", zygote)
    assert again.wait() == ("code", 0), again.log.read_text()
    frame, meta = read_run(journal.with_suffix(".h5"))
    assert len(frame) == POINTS and meta["summary"]["status"] == "complete"
    assert "interrupted" in meta["summary"]["interruptions"][0]["reason"]
