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

from sweeper.instruments.bench import open_bench, safe_output_off
from sweeper.judge import Limits, run_verdict
from sweeper.measure.engine import EngineSettings, EngineState, SweepStopped, prepare_source
from sweeper.measure.point import Flag, Point, Verdict
from sweeper.measure.schedule import frequency_grid, time_constants_for_target
from sweeper.prediction import nominal_circuit, predict_limits
from sweeper.store.catalog import Catalog, default_catalog_path
from sweeper.store.journal import Journal
from sweeper.store.runfile import FINISH_EVENT, RunWriter, file_sha256, run_header
from sweeper.supervise import RunAborted, Supervisor, WriteFailed, estimate_run_bytes, space_problem
from sweeper.transcript import Transcript, transcript_path

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
    transcript_path: Path | None = None
    faults: dict = field(default_factory=dict)  # fault kind -> faults met (sweeper.supervise)
    output_off: bool | None = None  # the source took 'output off' as the bench closed
    sim_output_on: bool | None = None  # a simulated bench's generator output after the run

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
        mode=plan.bench.mode,
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
    """Run the plan once on its bench and file the result; never raises for instrument faults.

    The output folder and its free space are checked before any instrument is touched.
    Instrument faults are handled as the plan's `faults` section says (sweeper.supervise);
    every transaction goes to the run's transcript, beside the run file.
    """
    out_dir = Path(out_dir)
    start = datetime.now(timezone.utc)
    run_id = new_run_id(plan.dut.serial, start)
    run_path = out_dir / f"{run_id}.h5"
    journal_path = out_dir / f"{run_id}.journal"
    freqs = plan_frequencies(plan)
    outcome = RunOutcome(run_id, run_path, journal_path, "error", Verdict.NOT_JUDGED)
    refusal = output_problem(out_dir, estimate_run_bytes(len(freqs), plan.acquisition.min_samples, keep_waveforms))
    if refusal is None:
        injector, refusal = fault_injector(plan)
    if refusal is not None:
        outcome.error = refusal
        return outcome
    limits: Limits = predict_limits(plan, freqs)
    settings = engine_settings(plan, keep_waveforms)
    model = nominal_circuit(plan)
    meta = run_metadata(plan, run_id, start, campaign)
    meta.update(extra_metadata or {})
    transcript = Transcript(transcript_path(out_dir, run_id))
    outcome.transcript_path = transcript.path
    meta["transcript"] = transcript.path.name
    meta["keep_waveforms"] = bool(keep_waveforms)  # `sweeper resume` goes on the same way
    points: list[Point] = []
    journal: Journal | None = None
    writer: RunWriter | None = None
    supervisor: Supervisor | None = None
    opened = None
    write_failed = False
    try:
        with open_bench(plan, transcript=transcript, sim_faults=injector, run_metadata=meta) as bench:
            opened = bench
            try:
                meta["instruments"] = [asdict(i) for i in bench.identities]
                prediction = {k: np.asarray(v, dtype=float) for k, v in limits.as_arrays().items() if k != "frequency_hz"}
                header = run_header(meta, freqs, prediction)
                journal = Journal.create(journal_path, header)
                writer = RunWriter.from_header(run_path, header)
                if on_start:
                    on_start(run_id, freqs)
                supervisor = Supervisor(plan, bench, journal, writer, freqs, limits, settings, model_response(model),
                                        points=points, start_utc=start, on_point=on_point, should_stop=should_stop,
                                        injector=injector, transcript=transcript)
                prepare_source(bench.source, settings)
                supervisor.run(0, EngineState())
            except BaseException:
                safe_output_off(bench.source)  # best effort: the sweep's error is the one to report
                raise
            finally:
                outcome.transactions = bench.stats.writes + bench.stats.queries
            bench.source.set_output(False)
            outcome.status = "complete"
    except (KeyboardInterrupt, SweepStopped) as exc:
        outcome.status = "interrupted"
        outcome.error = "interrupted by the operator" if isinstance(exc, KeyboardInterrupt) else str(exc)
    except (RunAborted, WriteFailed) as exc:  # the fault policy stopped the run; data kept
        outcome.status = "error"
        outcome.error = str(exc)
        write_failed = isinstance(exc, WriteFailed) and not exc.clean
    except Exception as exc:  # instrument, transport or storage faults end the run, data kept
        outcome.status = "error"
        outcome.error = f"{type(exc).__name__}: {exc}"
    finally:
        transcript.close()
        note_bench_end(outcome, opened)
        outcome.points = points
        finish_run(outcome, journal, writer, len(freqs), supervisor.summary() if supervisor else {},
                   {"transcript": transcript.path.name, "transcript_error": transcript.error or ""}, write_failed)
    return outcome


def model_response(model) -> Callable[[float], complex]:
    """The nominal circuit's complex response at one frequency (Hz), for the engine's ranges."""
    return lambda f: complex(model.response(np.array([f]))[0])


def output_problem(out_dir: Path, needed_bytes: int) -> str | None:
    """Why the output folder cannot take a run of about needed_bytes (not writable, not enough
    free space), or None; checked before any instrument is touched."""
    try:
        check_output_dir(out_dir)
    except OSError as exc:
        return f"{out_dir}: the output folder cannot be written ({exc.strerror or exc}); nothing was run"
    problem = space_problem(out_dir, needed_bytes)
    return f"{out_dir}: {problem}; nothing was run" if problem else None


def fault_injector(plan: "Plan") -> tuple[object | None, str | None]:
    """The simulated bench's injector of bench.simulation.faults (None when none are listed),
    or a refusal when faults are listed for a bench that is not simulated."""
    from sweeper.instruments.bench import SIM_DEFAULTS
    from sweeper.sim.injection import injector_from_plan

    bench = plan.bench
    if not bench.simulation.faults:
        return None, None
    if bench.kind != "simulated" and (bench.visa_library or "").strip() != "@sim":
        return None, "bench.simulation.faults: faults are injected on a simulated bench only; nothing was run"

    def resource_of(role: str) -> str:
        ref = getattr(bench, role, None)
        return ref.resource if ref is not None else SIM_DEFAULTS[role][0]

    return injector_from_plan(plan, resource_of), None


def note_bench_end(outcome: RunOutcome, bench: object | None) -> None:
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
    fault_summary: dict,
    extra_summary: dict | None = None,
    write_failed: bool = False,
) -> None:
    """Judge outcome.points, write the finish record (journal, then run file) and file the run.

    Never raises: a record that cannot be written (full disk) is reported in outcome.error and
    the run stays unfinished in the journal, to be finished by `sweeper resume`. After a failed
    write (write_failed) the run file is only closed: it is rebuilt from the journal later
    (`ensure_runfile`, by resume or any reader), never written to a failing disk again. A run
    with skipped points, like an incomplete one, never passes.
    """
    points = outcome.points
    skipped = sum(1 for p in points if p.flags & Flag.SKIPPED)
    outcome.verdict = run_verdict([p.verdict for p in points]) if points else Verdict.NOT_JUDGED
    if (outcome.status != "complete" or skipped) and outcome.verdict == Verdict.PASS:
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


def run_file_checksum(outcome: RunOutcome) -> str:
    """SHA-256 of the finished run file, hex."""
    return file_sha256(outcome.run_path)
