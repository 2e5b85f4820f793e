"""The crash-safety path of a run, written once: open the bench, measure, and on every way out
switch the source off, close the sessions and the transcript, then finish the records.

A fresh run (sweeper.run.runner) and a resumed one (sweeper.run.resume) differ only in what
they do with the open bench (`body`); how the run ends, how the output is switched off and
how the journal, run file and catalog are finished is the same code for both.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from sweeper.instruments.bench import Bench, BenchSpec, open_bench, safe_output_off
from sweeper.measure.engine import SweepStopped
from sweeper.measure.point import Flag, Verdict
from sweeper.run.outcome import RunOutcome
from sweeper.run.supervise import RunAborted, WriteFailed
from sweeper.run.transcript import Transcript
from sweeper.store.catalog import Catalog, default_catalog_path
from sweeper.store.journal import Journal
from sweeper.store.runfile import FINISH_EVENT, RunWriter, file_sha256
from sweeper.verdict import run_verdict


def run_on_bench(
    outcome: RunOutcome,
    spec: BenchSpec,
    transcript: Transcript,
    injector: object | None,
    body: Callable[[Bench], None],
    *,
    passthrough: tuple[type[BaseException], ...] = (),
) -> bool:
    """Open the bench, call body(bench), and whatever happens switch the source off, close the
    bench and the transcript; record in outcome how the run ended (status, error and its kind,
    transactions, the output's state). Exceptions of the passthrough types are re-raised after
    the clean-up; every other one ends the run (data kept). Returns True when a write failed
    half-way (the run file must then be rebuilt from the journal, never written again)."""
    opened: Bench | None = None
    write_failed = False
    try:
        with open_bench(spec, transcript=transcript, sim_faults=injector) as bench:
            opened = bench
            try:
                body(bench)
            except BaseException:
                safe_output_off(bench.source)  # best effort: the sweep's error is the one to report
                raise
            finally:
                outcome.transactions = bench.stats.writes + bench.stats.queries
            bench.source.set_output(False)
            outcome.status = "complete"
    except passthrough:
        raise
    except (KeyboardInterrupt, SweepStopped) as exc:
        outcome.status = "interrupted"
        outcome.error = "interrupted by the operator" if isinstance(exc, KeyboardInterrupt) else str(exc)
        outcome.error_kind = type(exc).__name__
    except (RunAborted, WriteFailed) as exc:  # the fault policy stopped the run; data kept
        outcome.status = "error"
        outcome.error = str(exc)
        outcome.error_kind = type(exc).__name__
        write_failed = isinstance(exc, WriteFailed) and not exc.clean
    except Exception as exc:  # instrument, transport or storage faults end the run, data kept
        outcome.status = "error"
        outcome.error = f"{type(exc).__name__}: {exc}"
        outcome.error_kind = type(exc).__name__
    finally:
        transcript.close()
        note_bench_end(outcome, opened)
    return write_failed


def note_bench_end(outcome: RunOutcome, bench: Bench | None) -> None:
    """Record how the bench closed: whether the source took 'output off' and, on a simulated
    bench, the simulated generator's own output state."""
    if bench is None:
        return
    outcome.output_off = getattr(bench, "output_off", None)
    sim = getattr(bench, "sim", None)
    outcome.sim_output_on = bool(sim.generator.output_on) if sim is not None else None


def finish_run(
    outcome: RunOutcome,
    journal: Journal | None,
    writer: RunWriter | None,
    points_planned: int,
    fault_summary: dict[str, Any],
    extra_summary: dict[str, Any] | None = None,
    write_failed: bool = False,
) -> None:
    """Judge the run from outcome.points, write the finish record (journal, then run file) and
    file the run in the catalog.

    Never raises: a record that cannot be written (full disk) is reported in outcome.error and
    the run stays unfinished in the journal, to be finished by `sweeper resume`. After a failed
    write (write_failed) the run file is only closed: it is rebuilt from the journal later
    (`ensure_runfile`, by resume or any reader), never written to a failing disk again. A run
    with skipped or clipped (not judged) points, like an incomplete one, never passes.
    """
    outcome.hdf5_write_failed = bool(write_failed)
    points = outcome.points
    skipped = sum(1 for p in points if p.flags & Flag.SKIPPED)
    clipped = sum(1 for p in points if p.flags & Flag.CLIPPED)
    outcome.verdict = run_verdict([p.verdict for p in points]) if points else Verdict.NOT_JUDGED
    if (outcome.status != "complete" or skipped or clipped) and outcome.verdict == Verdict.PASS:
        outcome.verdict = Verdict.NOT_JUDGED  # an incomplete run never passes
    outcome.faults = dict(fault_summary.get("faults", {}))
    summary = {
        "status": outcome.status,
        "verdict": Verdict(outcome.verdict).name,
        "points_measured": len(points) - skipped,
        "points_planned": int(points_planned),
        "error": outcome.error or "",
        "points_skipped": skipped,
        **fault_summary,
        **(extra_summary or {}),
    }
    if outcome.transcript_path is not None and Path(outcome.transcript_path).is_file():
        try:  # the transcript is closed by now; its hash goes into the chained journal
            summary["transcript_sha256"] = file_sha256(outcome.transcript_path)
        except OSError:
            pass
    if journal is None:
        return
    problems = []
    event = None
    try:
        event = journal.append_event(FINISH_EVENT, summary=summary)
    except Exception as exc:  # noqa: BLE001 - a full disk must not turn into a traceback
        problems.append(f"the finish record could not be written to the journal ({exc}); "
                        "`sweeper resume` can finish the run later")
    journal.close()
    if writer is not None:
        try:
            if event is not None and not write_failed:
                writer.finish(event["summary"], end_utc=event["time_utc"])
                if journal.sealed:
                    writer.seal(journal.chain)
        except Exception as exc:  # noqa: BLE001
            problems.append(f"the run file could not be finished ({exc})")
        try:
            writer.close()
        except Exception as exc:  # noqa: BLE001 - HDF5 flushes on close, which fails on a full disk
            problems.append(f"the run file could not be closed cleanly ({exc})")
        if write_failed:
            problems.append("the run file is rebuilt from the journal once there is room "
                            "(`sweeper resume` does it, as does reading the run)")
        elif event is not None:
            outcome.catalog_error = file_in_catalog(writer.path, writer.path.parent)
    if problems:
        outcome.error = "; ".join(filter(None, [outcome.error, *problems]))
        if outcome.status == "complete":
            outcome.status = "error"


def file_in_catalog(run_path: Path, out_dir: Path) -> str | None:
    """Index a finished run file in the catalog beside it; returns an error text instead of raising.

    The run file and journal are already safe on disk: a catalog failure must not lose them,
    and `sweeper catalog rebuild` can always re-create the index from the files.
    """
    try:
        with Catalog(default_catalog_path(out_dir)) as catalog:
            catalog.add_runfile(run_path)
    except Exception as exc:  # any catalog fault is reported, never fatal to the run
        return f"{type(exc).__name__}: {exc}"
    return None


__all__ = ["file_in_catalog", "finish_run", "note_bench_end", "run_on_bench"]
