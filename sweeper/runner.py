"""One run, wired end to end: plan -> prediction -> bench -> engine -> journal and run file -> verdict.

The CLI calls `execute_run`; everything here is plain calls on plain data. The source output
is switched off on every path out (the bench's close does it, and it runs in `finally`).
"""

from __future__ import annotations

import os
import platform
import secrets
import socket
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from sweeper.instruments.bench import open_bench
from sweeper.instruments.roles import Capture
from sweeper.judge import Limits, run_verdict
from sweeper.measure.engine import EngineSettings, Instruments, SweepStopped, prepare_source, sweep
from sweeper.measure.point import Point, Verdict
from sweeper.measure.schedule import frequency_grid, time_constants_for_target
from sweeper.prediction import nominal_circuit, predict_limits
from sweeper.store.catalog import Catalog, default_catalog_path
from sweeper.store.journal import Journal
from sweeper.store.runfile import FINISH_EVENT, RunWriter, file_sha256, run_header

if TYPE_CHECKING:
    from sweeper.plan import Plan

EXIT_PASS = 0
EXIT_FAIL = 1
EXIT_BAD_INPUT = 2
EXIT_RUN_ERROR = 3
EXIT_INTERRUPTED = 130



@dataclass
class RunOutcome:
    """What a run produced: where it is, how it was judged, how it ended."""

    run_id: str
    run_path: Path
    journal_path: Path
    status: str  # "complete" | "interrupted" | "error"
    verdict: Verdict
    points: list[Point] = field(default_factory=list)
    error: str | None = None
    transactions: int = 0
    catalog_error: str | None = None

    @property
    def exit_code(self) -> int:
        """Process exit code: 0 pass, 1 not a clean pass, 3 run error, 130 interrupted."""
        if self.status == "interrupted":
            return EXIT_INTERRUPTED
        if self.status == "error":
            return EXIT_RUN_ERROR
        return EXIT_PASS if self.verdict == Verdict.PASS else EXIT_FAIL


def plan_frequencies(plan: "Plan") -> np.ndarray:
    """The plan's frequency grid in measurement order, Hz."""
    s = plan.sweep
    return frequency_grid(s.start_hz, s.stop_hz, s.points_per_decade, s.points, s.spacing, s.direction,
                          s.frequencies_hz)


def engine_settings(plan: "Plan", keep_waveforms: bool = False) -> EngineSettings:
    """The plan's stimulus, acquisition and decision settings as the engine's plain numbers."""
    a, st = plan.acquisition, plan.stimulus
    tau = nominal_circuit(plan).slowest_time_constant_s()
    return EngineSettings(
        amplitude_vpp=st.amplitude_vpp,
        offset_v=st.offset_v,
        load_ohm=st.load_ohm,
        min_cycles=a.min_cycles,
        min_samples=a.min_samples,
        settle_s=a.settle_s,
        settle_cycles=a.settle_cycles,
        settle_time_constants=time_constants_for_target(a.settle_time_constants, a.target_gain_db,
                                                        a.target_phase_deg),
        slowest_time_constant_s=tau,
        averages=a.averages,
        max_averages=a.max_averages,
        target_gain_db=a.target_gain_db,
        target_phase_deg=a.target_phase_deg,
        autorange=a.autorange,
        fit=a.fit,
        decision_rule=plan.limits.decision_rule,
        coverage_factor=plan.limits.coverage_factor,
        keep_waveforms=keep_waveforms,
    )


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


def run_metadata(plan: "Plan", run_id: str, start: datetime, campaign: str | None) -> dict:
    """The run's traceability record (identities are added once the bench is open)."""
    return {
        "run_id": run_id,
        "campaign_id": campaign or "",
        "plan_name": plan.name,
        "plan_yaml": plan.source_text,
        "plan_sha256": plan.sha256,
        "plan_path": str(plan.path) if plan.path else "",
        "dut": {"board": plan.dut.board, "serial": plan.dut.serial, "description": plan.dut.description},
        "operator": plan.metadata.operator,
        "station": plan.metadata.station,
        "project": plan.metadata.project,
        "tags": list(plan.metadata.tags),
        "bench_kind": plan.bench.kind,
        "mode": plan.bench.mode,
        "host": socket.gethostname(),
        "platform": platform.platform(),
        "start_utc": start.isoformat(timespec="seconds"),
        "decision_rule": plan.limits.decision_rule,
        "coverage_factor": plan.limits.coverage_factor,
    }


def execute_run(
    plan: "Plan",
    out_dir: Path,
    *,
    on_start: Callable[[str, np.ndarray], None] | None = None,
    on_point: Callable[[Point], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    keep_waveforms: bool = False,
    campaign: str | None = None,
    extra_metadata: dict | None = None,
) -> RunOutcome:
    """Run the plan once on its bench and file the result; never raises for instrument faults."""
    out_dir = Path(out_dir)
    check_output_dir(out_dir)
    start = datetime.now(timezone.utc)
    run_id = new_run_id(plan.dut.serial, start)
    run_path = out_dir / f"{run_id}.h5"
    journal_path = out_dir / f"{run_id}.journal"
    freqs = plan_frequencies(plan)
    limits: Limits = predict_limits(plan, freqs)
    settings = engine_settings(plan, keep_waveforms)
    model = nominal_circuit(plan)
    meta = run_metadata(plan, run_id, start, campaign)
    meta.update(extra_metadata or {})
    points: list[Point] = []
    outcome = RunOutcome(run_id, run_path, journal_path, "error", Verdict.NOT_JUDGED)
    journal: Journal | None = None
    writer: RunWriter | None = None
    try:
        with open_bench(plan) as bench:
            meta["instruments"] = [asdict(i) for i in bench.identities]
            prediction = {k: np.asarray(v, dtype=float) for k, v in limits.as_arrays().items() if k != "frequency_hz"}
            header = run_header(meta, freqs, prediction)
            journal = Journal.create(journal_path, header)
            writer = RunWriter.from_header(run_path, header)
            if on_start:
                on_start(run_id, freqs)

            def sink(point: Point, capture: Capture | None) -> None:
                journal.append_point(point)
                writer.append(point)
                if capture is not None:
                    writer.add_waveforms(point.index, capture.volts, capture.sample_interval_s)
                points.append(point)
                if on_point:
                    on_point(point)

            instruments = Instruments(bench.source, bench.clock, bench.scope, bench.meter)
            prepare_source(bench.source, settings)
            try:
                sweep(freqs, settings, instruments, limits, lambda f: complex(model.response(np.array([f]))[0]),
                      sink, should_stop=should_stop, start_utc=start)
            finally:
                bench.source.set_output(False)
            outcome.status = "complete"
            outcome.transactions = bench.stats.writes + bench.stats.queries
    except (KeyboardInterrupt, SweepStopped) as exc:
        outcome.status = "interrupted"
        outcome.error = "interrupted by the operator" if isinstance(exc, KeyboardInterrupt) else str(exc)
    except Exception as exc:  # instrument, transport or storage faults end the run, data kept
        outcome.status = "error"
        outcome.error = f"{type(exc).__name__}: {exc}"
    finally:
        outcome.points = points
        outcome.verdict = run_verdict([p.verdict for p in points]) if points else Verdict.NOT_JUDGED
        if outcome.status != "complete" and outcome.verdict == Verdict.PASS:
            outcome.verdict = Verdict.NOT_JUDGED  # an incomplete run never passes
        summary = {
            "status": outcome.status,
            "verdict": Verdict(outcome.verdict).name,
            "points_measured": len(points),
            "points_planned": int(len(freqs)),
            "error": outcome.error or "",
        }
        if journal is not None:
            event = journal.append_event(FINISH_EVENT, summary=summary)
            journal.close()
            if writer is not None:
                writer.finish(event["summary"], end_utc=event["time_utc"])
                writer.close()
                outcome.catalog_error = file_in_catalog(run_path, out_dir)
    return outcome


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


def run_file_checksum(outcome: RunOutcome) -> str:
    """SHA-256 of the finished run file, hex."""
    return file_sha256(outcome.run_path)
