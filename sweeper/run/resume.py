"""`sweeper resume`: finish an interrupted run from its next unmeasured point, in the same
journal and run file, after checking it is the same plan on the same instruments.

The journal is the record of truth (sweeper.store.journal). Resuming: lock the journal (cutting
a torn last record off), check the plan (the text stored in the journal must match its
SHA-256, and a plan file given with --plan must hash the same; the plan is then loaded from
the stored text, never from disk), open the bench and compare every instrument's *IDN? and
driver file with those the run started with, write a "resumed" event recording the
interruption (last durable write, resume time, gap, the reason when the journal tells it),
rebuild the run file from the journal when needed, restore the engine's carried state (ranges,
capture window, last amplitudes) from the last measured point and re-apply it to the
instruments, then measure on under the plan's fault policy and finish as a new run would.

A run stopped by the fault policy or by a stop request ("finished" with status error or
interrupted) can be resumed as well: the "resumed" event voids that finish record. A complete
run is not measured again: resume only makes sure its run file and catalog entry exist.
"""

from __future__ import annotations

import hashlib
import math
import os
import socket
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any

import numpy as np

from sweeper.measure.point import Point, Verdict
from sweeper.plan import PlanError, load_plan_text
from sweeper.run.outcome import EXIT_BAD_INPUT, EXIT_RUN_ERROR, RunOutcome
from sweeper.run.recovery import engine_state_from_points, reapply
from sweeper.run.session import file_in_catalog, finish_run, run_on_bench
from sweeper.run.spec import RunSpec, bench_for_run, run_spec
from sweeper.run.supervise import Supervisor
from sweeper.run.transcript import Transcript, transcript_path
from sweeper.store.journal import Journal, JournalContents, JournalError, cut_damage, find_damage
from sweeper.store.runfile import FINISH_EVENT, RESUMED_EVENT, SALVAGE_EVENT, RunWriter, ensure_runfile
from sweeper.store.seal import check_journal, check_run
from sweeper.verdict import Limits
from sweeper.verdict.prediction import model_response

LIMIT_NAMES = ("model_gain_db", "model_phase_deg", "gain_lo_db", "gain_hi_db", "phase_lo_deg", "phase_hi_deg")


class ResumeRefused(Exception):
    """The run cannot be resumed as asked; exit_code 2 (bad input: not a run, plan changed)
    or 3 (instruments differ, run in use)."""

    def __init__(self, message: str, exit_code: int = EXIT_BAD_INPUT) -> None:
        self.exit_code = exit_code
        super().__init__(message)


@dataclass
class ResumeOutcome:
    """What a resume did: the run's outcome (all its points), where it went on from, and the
    interruption it recorded (empty when the run was already complete)."""

    outcome: RunOutcome
    resumed_at: int
    interruption: dict[str, Any] = field(default_factory=dict)
    already_complete: bool = False


def locate_run(run: str, runs_dir: str | os.PathLike[str] = "runs") -> tuple[Path, Path]:
    """The (journal, run file) of RUN: a .journal or .h5 path, or a run id (or a unique start
    of one) in runs_dir. ResumeRefused (exit 2) when there is no such journal."""
    given = Path(run)
    if given.suffix in (".journal", ".h5") and (given.exists() or given.with_suffix(".journal").exists()):
        journal = given.with_suffix(".journal")
        if not journal.is_file():
            raise ResumeRefused(f"{given}: no journal beside it ({journal.name}); a run can only be "
                                "resumed from its journal")
        return journal, journal.with_suffix(".h5")
    folder = Path(runs_dir)
    exact = folder / f"{run}.journal"
    if exact.is_file():
        return exact, exact.with_suffix(".h5")
    matches = sorted(folder.glob(f"{run}*.journal")) if run and "/" not in run else []
    if len(matches) == 1:
        return matches[0], matches[0].with_suffix(".h5")
    if len(matches) > 1:
        names = ", ".join(m.stem for m in matches[:5])
        raise ResumeRefused(f"{run}: more than one run starts so in {folder} ({names}); give more of the run id")
    raise ResumeRefused(f"{run}: no such run (expected a .journal or .h5 file, or a run id in {folder})")


def finish_in_force(events: list[dict[str, Any]]) -> dict[str, Any] | None:
    """The journal's finish event, unless a later "resumed" event voided it."""
    for event in reversed(events):
        if event["kind"] == RESUMED_EVENT:
            return None
        if event["kind"] == FINISH_EVENT:
            return event
    return None


def stored_plan(metadata: dict[str, Any], plan_path: str | os.PathLike[str] | None = None):
    """The run's plan, loaded from the text stored in its journal, after checking that text
    against its SHA-256 and, when given, the plan file against it too (ResumeRefused, exit 2)."""
    text, sha = metadata.get("plan_yaml"), metadata.get("plan_sha256")
    if not isinstance(text, str) or not isinstance(sha, str):
        raise ResumeRefused("the journal holds no plan text and hash: it is not a sweeper run journal")
    if hashlib.sha256(text.encode("utf-8")).hexdigest() != sha:
        raise ResumeRefused(f"the plan text stored in the journal does not hash to its SHA-256 {sha[:12]}: "
                            "the journal was altered; nothing was resumed")
    if plan_path is not None:
        try:
            data = Path(plan_path).read_bytes()
        except OSError as exc:
            raise ResumeRefused(f"{plan_path}: cannot be read ({exc.strerror or exc})") from None
        digests = {hashlib.sha256(data).hexdigest()}
        try:
            digests.add(hashlib.sha256(data.decode("utf-8-sig").encode("utf-8")).hexdigest())
        except UnicodeDecodeError:
            pass
        if sha not in digests:
            raise ResumeRefused(
                f"{plan_path}: plan SHA-256 {hashlib.sha256(data).hexdigest()[:12]} is not the run's "
                f"{sha[:12]}: the plan changed since the run started. Resume goes on with the run's own "
                "plan only; to measure with the changed plan, start a new run")
    label = metadata.get("plan_path") or "<plan stored in the journal>"
    try:
        plan = load_plan_text(text, f"{label} (as stored in the journal)", model_files=metadata.get("model_files"))
    except PlanError as exc:
        raise ResumeRefused(f"the run's plan no longer loads with this sweeper:\n{exc}") from None
    plan._sha256 = sha
    return plan


def identity_problems(stored: list[dict[str, Any]], identities: list[Any]) -> tuple[list[str], list[str]]:
    """(instrument differences, driver file differences) between the identities a run started
    with and those of the bench now open."""
    now = {i.role: i for i in identities}
    instruments: list[str] = []
    drivers: list[str] = []
    for before in stored:
        role = before.get("role", "?")
        current = now.get(role)
        if current is None:
            instruments.append(f"{role}: the run used {before.get('resource')!r}, the bench has no {role} now")
            continue
        if current.idn != before.get("idn") or current.resource != before.get("resource"):
            instruments.append(
                f"{role} ({current.resource}): *IDN? answers {current.idn!r}; the run was measured with "
                f"{before.get('idn')!r} at {before.get('resource')}")
        if current.driver_sha256 != before.get("driver_sha256"):
            drivers.append(
                f"{role}: driver file {current.driver} (SHA-256 {current.driver_sha256[:12]}) is not the one the "
                f"run started with ({before.get('driver')}, {str(before.get('driver_sha256'))[:12]})")
    return instruments, drivers


def _utc(seconds: float) -> str:
    return datetime.fromtimestamp(seconds, timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def interruption_record(contents: JournalContents, last_write_s: float, now: datetime) -> dict[str, Any]:
    """What is known of the interruption: when the journal was last written (its modification
    time), when the run is resumed, the gap in seconds, why (when the journal says), where."""
    last_event = contents.events[-1] if contents.events else None
    done = finish_in_force(contents.events)
    if done is not None:
        summary = done.get("summary") or {}
        reason = f"the run ended {summary.get('status', 'unfinished')}"
        if summary.get("error"):
            reason += f": {summary['error']}"
    elif contents.torn_tail:
        reason = "the process stopped while writing a record (killed, crashed or power lost)"
    elif last_event is not None and last_event["kind"] == "fault":
        reason = (f"the process stopped while handling a fault ({last_event.get('fault')} on "
                  f"{last_event.get('role')}: {last_event.get('detail')})")
    else:
        reason = "the process ended without finishing the run (killed, crashed or power lost)"
    last_point = contents.points[-1] if contents.points else None
    return {
        "interrupted_utc": _utc(last_write_s),
        "resumed_utc": now.isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        "gap_s": round(max(0.0, now.timestamp() - last_write_s), 3),
        "reason": reason,
        "points_before": len(contents.points),
        "last_point_index": last_point.index if last_point is not None else -1,
        "last_point_utc": last_point.time_utc if last_point is not None else "",
        "host": socket.gethostname(),
    }


def _fault_counts(events: list[dict[str, Any]]) -> tuple[Counter, Counter]:
    faults, actions = Counter(), Counter()
    for event in events:
        if event["kind"] == "fault":
            faults[str(event.get("fault"))] += 1
            actions[str(event.get("action"))] += 1
    return faults, actions


def resume_run(
    run: str,
    runs_dir: str | os.PathLike[str] = "runs",
    *,
    plan_path: str | os.PathLike[str] | None = None,
    on_start: Callable[[str, np.ndarray, int], None] | None = None,
    on_point: Callable[[Point], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    salvage: bool = False,
) -> ResumeOutcome:
    """Resume RUN (see the module docstring). ResumeRefused before anything is measured or
    written when the run cannot be resumed; otherwise never raises for instrument faults.
    on_start(run_id, planned frequencies, index resumed at) runs once the checks passed.

    A run file whose seal disagrees with itself or its journal is refused, and nothing is
    written. With salvage, a journal damaged after its header is cut back to its last good
    record, the damaged bytes kept in `<run_id>.damaged-<UTC time>.bin` beside it (and the old
    run file as `<run_id>.h5.before-salvage`), and a `salvaged` event records it."""
    journal_path, run_path = locate_run(run, runs_dir)
    salvaged: dict[str, Any] = {}
    if salvage:
        salvaged = _salvage(journal_path, run_path)
    if run_path.is_file() and not salvaged:
        check = check_run(run_path, journal_path)
        if check.broken and not check_journal(journal_path).broken:  # a damaged journal is told below
            raise ResumeRefused(f"{run_path}: {check.describe()}; refused, nothing was written "
                                "(the run file and journal are left as they are)", EXIT_RUN_ERROR)
    try:
        last_write_s = journal_path.stat().st_mtime
        journal = Journal.open_append(journal_path)
    except (OSError, JournalError) as exc:
        in_use = "another process" in str(exc)
        hint = " (is the run still going?)" if in_use else (
            "" if exc.__class__ is OSError or getattr(exc, "line", None) in (None, 1)
            else "; `sweeper resume --salvage` goes on from the last good record, keeping the damaged bytes aside")
        raise ResumeRefused(str(exc) + hint, EXIT_RUN_ERROR if in_use else EXIT_BAD_INPUT) from None
    try:
        if salvaged:
            journal.append_event(SALVAGE_EVENT, **salvaged)
        contents = journal.contents
        header = contents.header
        meta = header.get("metadata") or {}
        run_id = str(meta.get("run_id", journal_path.stem))
        outcome = RunOutcome(run_id, run_path, journal_path, "error", Verdict.NOT_JUDGED)
        done = finish_in_force(contents.events)
        if done is not None and (done.get("summary") or {}).get("status") == "complete":
            journal.close()
            return _already_complete(outcome, contents, done)
        plan = stored_plan(meta, plan_path)
        spec = run_spec(plan, bool(meta.get("keep_waveforms", False)))
        freqs = np.asarray(header.get("planned_frequency_hz", []), dtype=float)
        if freqs.shape != spec.frequencies_hz.shape or not np.array_equal(freqs, spec.frequencies_hz):
            raise ResumeRefused("the run's plan gives other frequencies with this sweeper than when the run "
                                "started; start a new run")
        points = list(contents.points)
        if [p.index for p in points] != list(range(len(points))):
            raise ResumeRefused(f"{journal_path}: its points are not the run's first {len(points)} in order")
        prediction = header.get("prediction") or {}
        if any(name not in prediction for name in LIMIT_NAMES):
            raise ResumeRefused(f"{journal_path}: its header lacks the run's limits")
        limits = Limits(freqs, *(np.asarray(prediction[name], dtype=float) for name in LIMIT_NAMES))
        if spec.refusal is not None:
            raise ResumeRefused(spec.refusal)
        outcome.points = points
        return _resume(spec, journal, contents, meta, outcome, limits, last_write_s,
                       on_start=on_start, on_point=on_point, should_stop=should_stop)
    except BaseException:
        if not journal.closed:
            journal.close()
        raise


def _salvage(journal_path: Path, run_path: Path) -> dict[str, Any]:
    """Move a damaged journal tail aside (see `resume_run`); {} when the journal reads whole."""
    try:
        _, damage = find_damage(journal_path)
    except JournalError as exc:
        raise ResumeRefused(f"{exc}; nothing can be salvaged without a sound header") from None
    if damage is None:
        return {}
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%S.%fZ")
    keep = journal_path.with_name(f"{journal_path.stem}.damaged-{stamp}.bin")
    cut_damage(journal_path, damage, keep)
    if run_path.is_file():
        os.replace(run_path, run_path.with_name(run_path.name + ".before-salvage"))
    return {"line": damage.line, "offset": damage.offset, "bytes": len(damage.data),
            "sha256": hashlib.sha256(damage.data).hexdigest(), "kept_in": keep.name, "reason": damage.message}


def _already_complete(outcome: RunOutcome, contents: JournalContents, done: dict[str, Any]) -> ResumeOutcome:
    """A complete run: make sure its run file and catalog entry exist, measure nothing."""
    summary = done.get("summary") or {}
    outcome.status = "complete"
    outcome.points = list(contents.points)
    try:
        outcome.verdict = Verdict[str(summary.get("verdict", "NOT_JUDGED"))]
    except KeyError:
        outcome.verdict = Verdict.NOT_JUDGED
    try:
        ensure_runfile(outcome.journal_path, outcome.run_path)
        outcome.catalog_error = file_in_catalog(outcome.run_path, outcome.run_path.parent)
    except Exception as exc:  # noqa: BLE001 - reported, the journal is intact
        outcome.error = f"the run file could not be rebuilt from the journal: {exc}"
    return ResumeOutcome(outcome, len(contents.points), already_complete=True)


def _resume(spec: RunSpec, journal: Journal, contents: JournalContents, meta: dict[str, Any], outcome: RunOutcome,
            limits: Limits, last_write_s: float, *, on_start, on_point, should_stop) -> ResumeOutcome:
    """Measure on from the first unmeasured point, judged against the limits the run started
    with (from its journal), through the same crash-safety path as a fresh run."""
    out_dir = outcome.journal_path.parent
    freqs = spec.frequencies_hz
    resumed_at = len(outcome.points)
    injector = spec.injector()
    if injector is not None:
        injector.disarm_through(resumed_at)
    transcript = Transcript(out_dir / meta["transcript"] if meta.get("transcript")
                            else transcript_path(out_dir, outcome.run_id))
    outcome.transcript_path = transcript.path
    interruption: dict[str, Any] = {}
    opened: dict[str, Any] = {}

    def measure(bench) -> None:
        instruments, drivers = identity_problems(meta.get("instruments") or [], bench.identities)
        if instruments or drivers:
            raise ResumeRefused("not the bench this run started on; nothing was resumed:\n  "
                                + "\n  ".join(instruments + drivers),
                                EXIT_RUN_ERROR if instruments else EXIT_BAD_INPUT)
        now = datetime.now(timezone.utc)
        interruption.update(interruption_record(contents, last_write_s, now))
        journal.append_event(RESUMED_EVENT, **interruption)
        transcript.note(f"resumed at point {resumed_at}: {interruption['reason']}")
        ensure_runfile(outcome.journal_path, outcome.run_path)
        opened["writer"] = writer = RunWriter.resume(outcome.run_path)
        outcome.catalog_error = file_in_catalog(writer.path, writer.path.parent)  # running again
        if on_start:
            on_start(outcome.run_id, freqs, resumed_at)
        state = engine_state_from_points(outcome.points, freqs)
        offset_s = next((p.elapsed_s for p in reversed(outcome.points) if math.isfinite(p.elapsed_s)), 0.0)
        judge = spec.judge_with(limits)
        opened["supervisor"] = supervisor = Supervisor(
            spec.policies, bench, journal, writer, freqs, judge, spec.settings, model_response(spec.model),
            points=outcome.points, start_utc=now - timedelta(seconds=offset_s), elapsed_offset_s=offset_s,
            on_point=on_point, should_stop=should_stop, injector=injector, transcript=transcript)
        reapply(supervisor.instruments, spec.settings, state)
        supervisor.run(resumed_at, state)

    write_failed = run_on_bench(outcome, bench_for_run(spec.bench, meta), transcript, injector, measure,
                                passthrough=(ResumeRefused,))
    if not interruption:  # the bench never opened: nothing was resumed, the journal is as it was
        journal.close()
        return ResumeOutcome(outcome, resumed_at)
    faults, actions = _fault_counts(contents.events)
    supervisor = opened.get("supervisor")
    if supervisor is not None:
        faults.update(supervisor.faults)
        actions.update(supervisor.actions)
    interruptions = [{k: v for k, v in e.items() if k != "kind"} for e in contents.events
                     if e["kind"] == RESUMED_EVENT] + [interruption]
    finish_run(outcome, journal, opened.get("writer"), len(freqs),
               {"faults": dict(sorted(faults.items())), "fault_actions": dict(sorted(actions.items()))},
               {"transcript": transcript.path.name, "transcript_error": transcript.error or "",
                "interruptions": interruptions, "resumed": len(interruptions)}, write_failed)
    return ResumeOutcome(outcome, resumed_at, interruption)


__all__ = ["ResumeOutcome", "ResumeRefused", "interruption_record", "locate_run", "resume_run", "stored_plan"]
