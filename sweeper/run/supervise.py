"""The supervised sweep: the engine run point by point under the plan's fault policy.

The engine measures; this module decides what an instrument fault at a point costs. For a
fault of kind K at point i (sweeper.plan.faults.FaultPolicies): up to `retries` re-measurements
after a device clear, `backoff` apart (doubling, on the bench clock); then up to `reopens`
session reopens (the identity checked again, the configuration re-applied, retries counted
afresh); then `then`: "skip" writes point i flagged SKIPPED | FAULT with NaN values (the run
keeps its shape) and goes on, "abort" stops the run (RunAborted). Every fault and its handling
is a "fault" event in the journal; the counts go into the run summary. A point measured after
a recovered fault carries the FAULT and RETRIED flags.

Every point is on disk before anyone hears of it: the journal first (written and fsync'ed),
then the run file. A failed write (disk full, folder gone) is retried as `faults.write_failure`
says, then stops the run safely (WriteFailed): nothing already in the journal is lost. The
source output is not this module's business: the bench's close switches it off on every path.
"""

from __future__ import annotations

import errno
import math
import shutil
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from sweeper.instruments.errors import (
    ConnectionLost,
    IdentityMismatch,
    InstrumentError,
    InstrumentTimeout,
    MalformedResponse,
    ScpiError,
)
from sweeper.instruments.roles import Capture
from sweeper.measure.engine import sweep
from sweeper.measure.settings import EngineSettings, EngineState, Instruments
from sweeper.plan.faults import FaultPolicies
from sweeper.measure.point import Flag, Point
from sweeper.run.recovery import clear_session, reapply, reopen_session, role_adapters

#: Attempts at one point, all fault kinds together, before the run stops whatever the policy
#: says (a guard against faults that keep changing kind).
MAX_ATTEMPTS_PER_POINT = 50
#: Commands named in a message about an error found in an instrument's queue.
COMMANDS_NAMED = 6


class RunAborted(Exception):
    """The fault policy stopped the run (the source goes off as the bench closes)."""

    def __init__(self, message: str, kind: str = "") -> None:
        self.kind = kind
        super().__init__(message)


class WriteFailed(Exception):
    """A point could not be written (journal or run file): the run stops, the journal keeps
    every point written before. clean: nothing failed yet (the disk was nearly full), so the
    run file can still be finished."""

    def __init__(self, message: str, clean: bool = False) -> None:
        self.clean = clean
        super().__init__(message)


def fault_kind(exc: BaseException) -> str | None:
    """The policy kind of an instrument error; None for errors no policy can help (another
    instrument answering after a reopen)."""
    if isinstance(exc, IdentityMismatch):
        return None
    if isinstance(exc, InstrumentTimeout):
        return "timeout"
    if isinstance(exc, MalformedResponse):
        return "malformed_response"
    if isinstance(exc, ScpiError):
        return "scpi_error"
    if isinstance(exc, (ConnectionLost, InstrumentError)):
        return "connection_lost"
    return None


def estimate_run_bytes(points: int, min_samples: int, keep_waveforms: bool) -> int:
    """A generous estimate of what one run writes, bytes: journal (about 1.2 kB a point),
    run file (about 100 kB of layout plus 0.5 kB a point), transcript (about 1 kB a point),
    and, when kept, waveforms (two channels of float64, assumed incompressible)."""
    per_point = 4096 + (16 * 4 * max(int(min_samples), 1) if keep_waveforms else 0)
    return 256 * 1024 + int(points) * per_point


def space_problem(out_dir: Path, needed_bytes: int) -> str | None:
    """Why the folder cannot take a run of about needed_bytes (it wants twice that free, plus
    16 MiB), or None."""
    try:
        free = shutil.disk_usage(out_dir).free
    except OSError as exc:
        return f"cannot tell its free space ({exc.strerror or exc})"
    wanted = 2 * int(needed_bytes) + 16 * 1024 * 1024
    if free < wanted:
        return (f"only {free / 1e6:.1f} MB free; this run needs about {needed_bytes / 1e6:.1f} MB "
                f"(and wants {wanted / 1e6:.1f} MB free to be safe)")
    return None


@dataclass
class _Budget:
    point: int = -1
    retries: Counter = field(default_factory=Counter)
    reopens: Counter = field(default_factory=Counter)
    attempts: int = 0

    def at(self, index: int) -> _Budget:
        if index != self.point:
            self.point, self.retries, self.reopens, self.attempts = index, Counter(), Counter(), 0
        return self


class Supervisor:
    """Runs a sweep over an open bench under the plan's fault policy, writing every point.

    policies: the plan's fault policies; judge: fills in each point's limits and verdict;
    points: the list finished points are appended to (the caller's, so it sees them even when
    the run stops); journal, writer: an open Journal and RunWriter; injector: the simulated
    bench's FaultInjector, told which point is measured (None on a real bench); its
    write_failure rules are the test hook for failed writes.
    """

    def __init__(
        self,
        policies: FaultPolicies,
        bench: Any,
        journal: Any,
        writer: Any,
        frequencies_hz: Sequence[float],
        judge: Callable[[Point], Point],
        settings: EngineSettings,
        model_response: Callable[[float], complex],
        *,
        points: list[Point],
        start_utc: datetime,
        elapsed_offset_s: float = 0.0,
        on_point: Callable[[Point], None] | None = None,
        should_stop: Callable[[], bool] | None = None,
        injector: Any = None,
        transcript: Any = None,
    ) -> None:
        self.policies = policies
        self.bench = bench
        self.journal = journal
        self.writer = writer
        self.frequencies_hz = np.asarray(frequencies_hz, dtype=float)
        self.judge = judge
        self.settings = settings
        self.model_response = model_response
        self.points = points
        self.start_utc = start_utc
        self.on_point = on_point
        self.should_stop = should_stop
        self.injector = injector
        self.transcript = transcript
        self.instruments = Instruments(bench.source, bench.clock, bench.scope, bench.meter)
        self.clock = bench.clock
        self._t0 = self.clock.now_s() - elapsed_offset_s
        self.next_index = 0
        self.faults: Counter = Counter()  # fault kind -> faults met
        self.actions: Counter = Counter()  # retry | reopen | skip | abort | ignore -> times taken
        self.skipped = 0
        self._faulted_point = -1
        self._budget = _Budget()
        self._commands: dict[str, list[str]] = {role: [] for role in role_adapters(bench)}
        self._error_queries = {role: a.driver.driver.errors.query for role, a in role_adapters(bench).items()}
        for link in getattr(bench, "links", []):
            link.observers.append(self._observe)

    # -- what the instruments were told since their error queues were last read --------

    def _observe(self, time_utc: str, role: str, command: str, answer: str, duration_s: float,
                 error: str | None) -> None:
        sent = self._commands.setdefault(role, [])
        if command == self._error_queries.get(role):
            sent.clear()
        else:
            sent.append(command)
            del sent[:-COMMANDS_NAMED]

    def _check_errors(self, roles: Sequence[str] | None = None) -> None:
        """Read the error queues; ScpiError naming the commands sent since the last read."""
        for role, adapter in role_adapters(self.bench).items():
            if roles is not None and role not in roles:
                continue
            sent = list(self._commands.get(role, []))
            errors = adapter.drain_errors()
            if errors:
                listed = "; ".join(f'{code},"{text}"' for code, text in errors)
                raise ScpiError(role, adapter.link.resource_name, "; ".join(sent),
                                f"instrument reported {listed} (commands since its error queue was last read)",
                                tuple(errors))

    # -- points -----------------------------------------------------------------------

    def elapsed_s(self) -> float:
        """Bench-clock time since the run started (continued across a resume), s."""
        return self.clock.now_s() - self._t0

    def _set_point(self, index: int) -> None:
        if self.injector is not None:
            self.injector.point_index = index

    def _measured(self, point: Point, capture: Capture | None) -> None:
        """The engine's sink: check the error queues if the plan says so, judge the point, keep it."""
        if self.policies.check_errors == "each-point":
            self._check_errors()
        if point.index == self._faulted_point:
            point.flags = int(point.flags | Flag.FAULT | Flag.RETRIED)
        point = self.judge(point)
        self.keep(point, capture)
        for name, bit in (("clipping", Flag.CLIPPED), ("low_signal", Flag.LOW_SIGNAL)):
            if point.flags & bit and getattr(self.policies, name).action == "abort":
                self._event(point.index, name, "", "", "", f"point {point.index} flagged {name}", "abort")
                raise RunAborted(f"point {point.index} ({point.frequency_hz:.6g} Hz) is flagged {bit.name.lower()} "
                                 f"(faults.{name}.action: abort)", name)
        self.next_index = point.index + 1
        self._set_point(self.next_index)

    def keep(self, point: Point, capture: Capture | None = None) -> None:
        """Write a point (journal, then run file) and report it; WriteFailed when it cannot be."""
        policy = self.policies.write_failure
        self._check_room(point.index, policy.min_free_mb)
        for attempt in range(policy.retries + 1):
            try:
                if self.injector is not None and self.injector.write_fault(point.index):
                    raise OSError(errno.ENOSPC, "No space left on device (injected by bench.simulation.faults)")
                self.journal.append_point(point)
                break
            except OSError as exc:
                action = "retry" if attempt < policy.retries else "abort"
                self._event(point.index, "write_failure", "", str(self.journal.path), "", str(exc), action)
                if action == "abort":
                    raise WriteFailed(f"point {point.index} could not be written to the journal "
                                      f"{self.journal.path}: {exc}") from None
                time.sleep(policy.backoff_s * 2**attempt)
        try:
            self.writer.append(point)
            if capture is not None:
                self.writer.add_waveforms(point.index, capture.volts, capture.sample_interval_s)
        except Exception as exc:  # noqa: BLE001 - h5py reports a full disk in several ways
            self._event(point.index, "write_failure", "", str(self.writer.path), "", str(exc), "abort")
            raise WriteFailed(f"point {point.index} is in the journal, but the run file {self.writer.path} "
                              f"could not be written: {exc} (it is rebuilt from the journal)") from None
        self.points.append(point)
        if self.on_point is not None:
            self.on_point(point)

    def _check_room(self, index: int, min_free_mb: int) -> None:
        """Stop before writing when the disk is nearly full: a journal write that fails is
        harmless, but HDF5 does not recover from a run-file write that fails half-way (the
        process can crash on exit), so the run stops while it can still stop cleanly."""
        try:
            free = shutil.disk_usage(self.journal.path.parent).free
        except OSError:
            return  # cannot tell: the writes themselves will say
        if free < min_free_mb * 1e6:
            detail = (f"only {free / 1e6:.1f} MB left on the disk of {self.journal.path.parent} "
                      f"(faults.write_failure.min_free_mb: {min_free_mb})")
            self._event(index, "write_failure", "", str(self.journal.path.parent), "", detail, "abort")
            raise WriteFailed(f"point {index} was not written: {detail}; the run stopped while it could "
                              "still stop cleanly", clean=True)

    def _skipped_point(self, index: int) -> Point:
        elapsed = self.elapsed_s()
        nan = math.nan
        return self.judge(Point(
            index=index, frequency_hz=float(self.frequencies_hz[index]), gain_db=nan, phase_deg=nan,
            u_gain_db=nan, u_phase_deg=nan, amplitude_in_v=nan, amplitude_out_v=nan,
            flags=int(Flag.SKIPPED | Flag.FAULT), elapsed_s=elapsed,
            time_utc=datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        ))

    # -- faults -----------------------------------------------------------------------

    def _event(self, index: int | None, kind: str, role: str, resource: str, command: str, detail: str,
               action: str, **extra: Any) -> None:
        self.faults[kind] += 1
        self.actions[action] += 1
        data = dict(point_index=index, fault=kind, role=role, resource=resource, command=command,
                    detail=detail, action=action, **extra)
        try:
            self.journal.append_event("fault", **data)
        except Exception:  # noqa: BLE001 - the disk is failing too: the run stops at the next write
            pass
        if self.transcript is not None:
            self.transcript.note(f"fault at point {index}: {kind} on {role}: {action}")

    def _decide(self, exc: InstrumentError) -> tuple[str, float]:
        """The action for a fault at the next unmeasured point and the wait before it, s."""
        kind = fault_kind(exc)
        budget = self._budget.at(self.next_index)
        budget.attempts += 1
        if kind is None or budget.attempts > MAX_ATTEMPTS_PER_POINT:
            return "abort", 0.0
        policy = self.policies.policy(kind)
        if budget.retries[kind] < policy.retries:
            budget.retries[kind] += 1
            return "retry", policy.backoff_s * 2 ** (budget.retries[kind] - 1)
        if budget.reopens[kind] < policy.reopens:
            budget.reopens[kind] += 1
            budget.retries[kind] = 0
            return "reopen", policy.backoff_s * 2 ** (budget.reopens[kind] - 1)
        return policy.then, 0.0

    def _recover(self, role: str, reopen: bool, state: EngineState) -> None:
        roles = [role] if role in role_adapters(self.bench) else list(role_adapters(self.bench))
        for name in roles:
            if reopen:
                reopen_session(self.bench, name)
            else:
                clear_session(role_adapters(self.bench)[name])
        reapply(self.instruments, self.settings, state)

    def run(self, start_index: int, state: EngineState) -> EngineState:
        """Measure from start_index to the end. Raises RunAborted, WriteFailed, SweepStopped
        (a stop request) or KeyboardInterrupt; any other error is a bug or an unusable bench."""
        n = len(self.frequencies_hz)
        self.next_index = start_index
        pending: tuple[str, bool] | None = None  # (role, reopen) to recover before measuring
        while True:
            self._set_point(self.next_index)
            try:
                if pending is not None:
                    self._recover(pending[0], pending[1], state)
                    pending = None
                if self.next_index < n:
                    sweep(self.frequencies_hz, self.settings, self.instruments, self.model_response,
                          self._measured, start_index=self.next_index, should_stop=self.should_stop,
                          start_utc=self.start_utc, elapsed_offset_s=self.elapsed_s(), state=state)
                self._set_point(-1)
                self._final_check()
                return state
            except InstrumentError as exc:
                self._set_point(-1)
                action, wait_s = self._decide(exc)
                kind = fault_kind(exc) or "identity"
                index = self.next_index if self.next_index < n else None
                self._event(index, kind, exc.role, exc.resource, exc.command, exc.detail, action,
                            wait_s=wait_s)
                if action == "abort":
                    raise RunAborted(self._abort_text(exc, kind), kind) from None
                if action == "skip":
                    self._faulted_point = -1
                    self.keep(self._skipped_point(self.next_index))
                    self.skipped += 1
                    self.next_index += 1
                    pending = (exc.role, False)
                    continue
                self._faulted_point = self.next_index
                if wait_s > 0:
                    self.clock.sleep(wait_s)
                pending = (exc.role, action == "reopen")

    def _final_check(self) -> None:
        """After the last point: every error queue read once more, so an error from a command
        that is not checked at once (a per-point one) is never silently left behind."""
        try:
            self._check_errors()
        except ScpiError as exc:
            then = self.policies.scpi_error.then
            action = "abort" if then == "abort" else "ignore"
            self._event(None, "scpi_error", exc.role, exc.resource, exc.command, exc.detail, action)
            if action == "abort":
                raise RunAborted(self._abort_text(exc, "scpi_error") + " (found after the last point)",
                                 "scpi_error") from None

    def _abort_text(self, exc: InstrumentError, kind: str) -> str:
        if kind == "identity":
            return f"{exc} (the run stopped: a different instrument answers)"
        budget = self._budget
        policy = self.policies.policy(kind)
        return (f"{exc} (point {self.next_index}: {kind}; retries used {budget.retries[kind]} of {policy.retries}, "
                f"reopens {budget.reopens[kind]} of {policy.reopens}, then {policy.then}: faults.{kind})")

    def summary(self) -> dict[str, Any]:
        """Fault counts for the run summary."""
        return {
            "faults": dict(sorted(self.faults.items())),
            "fault_actions": dict(sorted(self.actions.items())),
            "points_skipped": self.skipped,
        }
