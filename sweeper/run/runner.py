"""One run, wired end to end: plan -> RunSpec -> bench -> supervised engine -> journal and run
file -> verdict -> catalog.

The CLI calls `execute_run`; everything here is plain calls on plain data. The plan is read
once (sweeper.run.spec); the bench, transcript and records are opened and closed by the one
crash-safety path (sweeper.run.session), which switches the source output off on every way out.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Callable
import time
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from sweeper.instruments.bench import open_bench
from sweeper.measure.engine import prepare_source, sweep
from sweeper.measure.point import Point, Verdict
from sweeper.measure.settings import EngineState, Instruments
from sweeper.run.outcome import RunOutcome
from sweeper.run.session import file_in_catalog, finish_run, run_on_bench
from sweeper.run.spec import RunSpec, bench_for_run, run_metadata, run_spec
from sweeper.run.supervise import Supervisor, estimate_run_bytes, space_problem
from sweeper.run.transcript import Transcript, transcript_path
from sweeper.store.journal import Journal
from sweeper.store.runfile import RunWriter, run_header
from sweeper.verdict.prediction import model_response

if TYPE_CHECKING:
    from sweeper.plan import Plan


def new_run_id(serial: str, when: datetime) -> str:
    """A sortable, unique run id: UTC time, the DUT serial (filename-safe) and a random suffix."""
    safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in serial)[:40] or "noserial"
    return f"{when.strftime('%Y%m%dT%H%M%SZ')}-{safe}-{secrets.token_hex(2)}"


def check_output_dir(out_dir: Path) -> None:
    """Fail before any instrument is touched if the output folder cannot be written."""
    out_dir.mkdir(parents=True, exist_ok=True)
    probe = out_dir / f".write-test-{os.getpid()}"
    try:
        with open(probe, "wb") as fh:
            fh.write(b"x" * 4096)
            fh.flush()
            os.fsync(fh.fileno())
    finally:
        probe.unlink(missing_ok=True)


def output_problem(out_dir: Path, needed_bytes: int) -> str | None:
    """Why the output folder cannot take a run of about needed_bytes (not writable, not enough
    free space), or None; checked before any instrument is touched."""
    try:
        check_output_dir(out_dir)
    except OSError as exc:
        return f"{out_dir}: the output folder cannot be written ({exc.strerror or exc}); nothing was run"
    problem = space_problem(out_dir, needed_bytes)
    return f"{out_dir}: {problem}; nothing was run" if problem else None


def execute_run(
    plan: Plan,
    out_dir: Path,
    *,
    on_start: Callable[[str, np.ndarray], None] | None = None,
    on_point: Callable[[Point], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    keep_waveforms: bool = False,
    campaign: str | None = None,
    extra_metadata: dict | None = None,
) -> RunOutcome:
    """Run the plan once on its bench and file the result; never raises for instrument faults.

    The output folder and its free space are checked before any instrument is touched.
    Instrument faults are handled as the plan's `faults` section says (sweeper.run.supervise);
    every transaction goes to the run's transcript, beside the run file.
    """
    return execute_spec(run_spec(plan, keep_waveforms), Path(out_dir), on_start=on_start, on_point=on_point,
                        should_stop=should_stop, campaign=campaign, extra_metadata=extra_metadata)


def execute_spec(
    spec: RunSpec,
    out_dir: Path,
    *,
    on_start: Callable[[str, np.ndarray], None] | None = None,
    on_point: Callable[[Point], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    campaign: str | None = None,
    extra_metadata: dict | None = None,
) -> RunOutcome:
    """`execute_run` for a plan already translated into a RunSpec."""
    start = datetime.now(timezone.utc)
    run_id = new_run_id(spec.serial, start)
    freqs = spec.frequencies_hz
    outcome = RunOutcome(run_id, out_dir / f"{run_id}.h5", out_dir / f"{run_id}.journal", "error", Verdict.NOT_JUDGED)
    refusal = output_problem(out_dir, estimate_run_bytes(len(freqs), spec.settings.min_samples, spec.keep_waveforms))
    refusal = refusal or spec.refusal
    if refusal is not None:
        outcome.error = refusal
        outcome.error_kind = "refused"
        return outcome
    injector = spec.injector()
    meta = run_metadata(spec, run_id, start, campaign)
    meta.update(extra_metadata or {})
    transcript = Transcript(transcript_path(out_dir, run_id))
    outcome.transcript_path = transcript.path
    meta["transcript"] = transcript.path.name
    points: list[Point] = []
    opened: dict[str, object] = {}

    def measure(bench) -> None:
        meta["instruments"] = [asdict(i) for i in bench.identities]
        prediction = {k: np.asarray(v, dtype=float) for k, v in spec.limits.as_arrays().items() if k != "frequency_hz"}
        header = run_header(meta, freqs, prediction)
        opened["journal"] = journal = Journal.create(outcome.journal_path, header)
        opened["writer"] = writer = RunWriter.from_header(outcome.run_path, header)
        outcome.catalog_error = file_in_catalog(writer.path, writer.path.parent)  # known from its first moment
        if on_start:
            on_start(run_id, freqs)
        opened["supervisor"] = supervisor = Supervisor(
            spec.policies, bench, journal, writer, freqs, spec.judge, spec.settings, model_response(spec.model),
            points=points, start_utc=start, on_point=on_point, should_stop=should_stop, injector=injector,
            transcript=transcript)
        prepare_source(bench.source, spec.settings)
        supervisor.run(0, EngineState())

    write_failed = run_on_bench(outcome, bench_for_run(spec.bench, meta), transcript, injector, measure)
    outcome.points = points
    supervisor = opened.get("supervisor")
    finish_run(outcome, opened.get("journal"), opened.get("writer"), len(freqs),
               supervisor.summary() if supervisor else {},
               {"transcript": transcript.path.name, "transcript_error": transcript.error or ""}, write_failed)
    return outcome


@dataclass
class SweepOnly:
    """What `sweep_only` measured: the judged points, and per point the transactions counted
    so far (cumulative), bytes read, bench-clock seconds and wall seconds of the whole sweep."""

    points: list[Point]
    transactions_after: list[int]
    transactions: int
    bytes_read: int
    bench_s: float
    wall_s: float
    io_s: float


def sweep_only(spec: RunSpec, *, clock: Any = None) -> SweepOnly:
    """The sweep as `execute_run` wires it (bench, engine, judge; the source off at the end),
    without journal, run file, transcript or catalog: for benchmarks and studies that measure
    many sweeps. clock: where bench time is read (default: the bench's own clock; a served
    simulated bench passes its simulated clock)."""
    points: list[Point] = []
    counts: list[int] = []
    judge = spec.judge
    with open_bench(spec.bench) as bench:
        stats = bench.stats
        timer = clock if clock is not None else bench.clock

        def keep(point: Point, capture: object) -> None:
            points.append(judge(point))
            counts.append(stats.writes + stats.queries)

        prepare_source(bench.source, spec.settings)
        before = (stats.writes + stats.queries, stats.bytes_read, timer.now_s(), stats.seconds)
        wall = time.perf_counter()
        sweep(spec.frequencies_hz, spec.settings, Instruments(bench.source, bench.clock, bench.scope, bench.meter),
              model_response(spec.model), keep, start_utc=datetime.now(timezone.utc))
        wall = time.perf_counter() - wall
        result = SweepOnly(points, counts, stats.writes + stats.queries - before[0], stats.bytes_read - before[1],
                           timer.now_s() - before[2], wall, stats.seconds - before[3])
        bench.source.set_output(False)
    return result


__all__ = ["SweepOnly", "check_output_dir", "execute_run", "execute_spec", "new_run_id", "output_problem", "sweep_only"]
