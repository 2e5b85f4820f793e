"""The plan translated once, in one place, into what each stage of a run needs.

A validated plan is a document; the stages below it (bench opener, engine, judge, fault
supervision, simulated fault injection, the run's metadata) each take a small value built
here, never the whole plan, so a run reads top-down: plan -> RunSpec -> stages.
"""

from __future__ import annotations

import platform
import socket
from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from typing import TYPE_CHECKING, Any

import numpy as np

from sweeper.circuits import Circuit
from sweeper.instruments.driverfile import driver_search_path
from sweeper.instruments.spec import SIM_DEFAULTS, BenchSpec, RoleSpec, roles_for
from sweeper.measure.schedule import frequency_grid, time_constants_for_target
from sweeper.measure.settings import EngineSettings
from sweeper.plan.faults import FaultPolicies
from sweeper.verdict import Limits, PointJudge
from sweeper.verdict.prediction import limits_function, nominal_circuit, predict_limits, true_circuit

if TYPE_CHECKING:
    from sweeper.plan import Plan
    from sweeper.sim import SimConfig
    from sweeper.sim.injection import FaultInjector


def plan_frequencies(plan: Plan) -> np.ndarray:
    """The plan's frequency grid in measurement order, Hz."""
    s = plan.sweep
    return frequency_grid(s.start_hz, s.stop_hz, s.points_per_decade, s.points, s.spacing, s.direction,
                          s.frequencies_hz)


def engine_settings(plan: Plan, keep_waveforms: bool = False) -> EngineSettings:
    """The plan's stimulus, acquisition and decision settings as the engine's plain numbers."""
    a, st = plan.acquisition, plan.stimulus
    tau = nominal_circuit(plan.model).slowest_time_constant_s()
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
        coverage_probability=plan.limits.coverage_probability,
        keep_waveforms=keep_waveforms,
        mode=plan.bench.mode,
        thd_flag_db=a.thd_flag_db,
        snr_flag_db=a.snr_flag_db,
    )


def sim_config(plan: Plan, faults: object | None = None) -> SimConfig:
    """The sweeper.sim SimConfig of a plan's simulated DUT: the model's topology with the true
    part values of bench.simulation.components, under the plan's loading, referenced to the DUT
    input node (the simulator adds its generator's own source resistance); also what
    `sweeper bench serve` serves."""
    from sweeper.sim import Drift, Probe, SimConfig

    simulation = plan.bench.simulation
    probes = None
    if simulation.probes is not None:
        probes = tuple(Probe(p.attenuation, p.resistance_ohm, p.capacitance_f) for p in simulation.probes)
    drift = None if simulation.drift is None else Drift(**simulation.drift.model_dump())
    return SimConfig(
        circuit=true_circuit(plan.model, simulation.components, reference="input"),
        noise_v=simulation.noise_v,
        noise_range_frac=simulation.noise_range_frac,
        distortion_frac=simulation.distortion_frac,
        seed=simulation.seed,
        realtime=simulation.realtime,
        faults=faults,
        transient=simulation.transient,
        probes=probes,
        channel_gain_db=tuple(simulation.channel_gain_db),
        channel_phase_deg=tuple(simulation.channel_phase_deg),
        skew_s=simulation.skew_s,
        drift=drift,
    )


def bench_for_run(bench: BenchSpec, run_metadata: Mapping[str, Any]) -> BenchSpec:
    """The bench as opened for one run, from the run's stored metadata: on a simulated bench a
    campaign's sweep number (`campaign_sweep`) becomes the simulator's sweep seed, so the sweeps
    of a campaign differ, and its start on the campaign clock (`campaign_offset_s`) the bench's
    age, so drift goes on from sweep to sweep. Both are stored in the run, so a resumed run opens
    the same bench; a single run gets sweep seed 0 and age 0 s."""
    if bench.sim is None:
        return bench
    sim = replace(bench.sim, bench_age_s=float(run_metadata.get("campaign_offset_s") or 0.0),
                  sweep_seed=int(run_metadata.get("campaign_sweep") or 0))
    return replace(bench, sim=sim)


def bench_spec(plan: Plan) -> BenchSpec:
    """The plan's bench: its roles with resources, driver files and timeouts (the plan's timeout
    when it gives one, else the driver file's), driver folders, and the simulation."""
    bench = plan.bench
    roles = []
    for role in roles_for(bench.mode):
        ref = getattr(bench, role)
        if ref is None:
            if bench.kind == "simulated":
                resource, driver = SIM_DEFAULTS[role]
                roles.append(RoleSpec(role, resource, driver, None, f"bench.{role}"))
            continue
        timeout_s = ref.timeout_s if "timeout_s" in ref.model_fields_set else None
        roles.append(RoleSpec(role, ref.resource, ref.driver, timeout_s, f"bench.{role}"))
    simulated = bench.kind == "simulated" or (bench.visa_library or "").strip() == "@sim"
    return BenchSpec(
        kind=bench.kind,
        mode=bench.mode,
        roles=tuple(roles),
        visa_library=bench.visa_library,
        search_path=tuple(driver_search_path(plan.path)),
        sim=sim_config(plan) if simulated else None,
    )


def plan_metadata(plan: Plan) -> dict[str, Any]:
    """What a run file records of its plan and DUT (traceability), apart from the run's own facts."""
    return {
        "plan_name": plan.name,
        "plan_yaml": plan.source_text,
        "plan_sha256": plan.sha256,
        "plan_path": str(plan.path) if plan.path else "",
        "model_files": plan.model_files,  # netlist or golden-curve files the model was read from
        "dut": {"board": plan.dut.board, "serial": plan.dut.serial, "description": plan.dut.description},
        "operator": plan.metadata.operator,
        "station": plan.metadata.station,
        "project": plan.metadata.project,
        "tags": list(plan.metadata.tags),
        "bench_kind": plan.bench.kind,
        "mode": plan.bench.mode,
        "decision_rule": plan.limits.decision_rule,
        "coverage_factor": plan.limits.coverage_factor,
        "coverage_probability": plan.limits.coverage_probability,
        **_station_metadata(plan._station),
    }


def _station_metadata(station: Any) -> dict[str, Any]:
    """The station file's name, path, text and SHA-256 for the run file ({} without a station)."""
    if station is None:
        return {}
    return {"station_name": station.name, "station_path": str(station.path or ""),
            "station_yaml": station.text, "station_sha256": station.sha256}


@dataclass(frozen=True)
class RunSpec:
    """Everything one run of a plan needs, built by `run_spec`.

    frequencies_hz: planned frequencies in measurement order (Hz); settings: the engine's;
    bench: what to open; policies: the fault policies; injections: faults to inject on a
    simulated bench (the plan's entries); limits: model and limits at the planned frequencies;
    model: the nominal circuit (the engine's first ranges); metadata: the plan's part of the
    run metadata; refusal: why the run must not start (None when it may).
    """

    serial: str
    frequencies_hz: np.ndarray
    settings: EngineSettings
    bench: BenchSpec
    policies: FaultPolicies
    limits: Limits
    model: Circuit
    metadata: dict[str, Any]
    injections: tuple[Any, ...] = ()
    refusal: str | None = None
    keep_waveforms: bool = False
    limits_at: Callable[[float], dict[str, float]] | None = None

    @property
    def judge(self) -> PointJudge:
        """The judge of this run's points (limits, decision rule, coverage), judging each point
        at the frequency it was measured at."""
        return self.judge_with(self.limits)

    def judge_with(self, limits: Limits) -> PointJudge:
        """A judge of this run's points against the given planned limits (a resumed run's stored ones)."""
        s = self.settings
        return PointJudge(limits, s.decision_rule, s.coverage_factor, s.coverage_probability, self.limits_at)

    def injector(self) -> FaultInjector | None:
        """A fresh fault injector for the simulated bench (rules carry state, so one per run)."""
        if not self.injections or self.refusal is not None:
            return None
        from sweeper.sim.injection import injector_from_specs

        measuring = "meter" if self.bench.mode == "meter" else "scope"

        def resource_of(role: str) -> str:
            ref = self.bench.role(role)
            return ref.resource if ref is not None else SIM_DEFAULTS[role][0]

        return injector_from_specs(self.injections, measuring, resource_of)


def run_spec(plan: Plan, keep_waveforms: bool = False) -> RunSpec:
    """Translate a validated plan into a RunSpec (the one place where a run reads its plan)."""
    frequencies = plan_frequencies(plan)
    bench = bench_spec(plan)
    injections = tuple(plan.bench.simulation.faults)
    refusal = None
    if injections and not bench.simulated:
        refusal = "bench.simulation.faults: faults are injected on a simulated bench only; nothing was run"
    return RunSpec(
        serial=plan.dut.serial,
        frequencies_hz=frequencies,
        settings=engine_settings(plan, keep_waveforms),
        bench=bench,
        policies=plan.faults,
        limits=predict_limits(plan.model, plan.limits, frequencies),
        model=nominal_circuit(plan.model),
        metadata=plan_metadata(plan),
        injections=injections,
        refusal=refusal,
        keep_waveforms=keep_waveforms,
        limits_at=limits_function(plan.model, plan.limits),
    )


def run_metadata(spec: RunSpec, run_id: str, start: datetime, campaign: str | None) -> dict[str, Any]:
    """The run's traceability record (instrument identities are added once the bench is open)."""
    return {
        "run_id": run_id,
        "campaign_id": campaign or "",
        **spec.metadata,
        "host": socket.gethostname(),
        "platform": platform.platform(),
        "start_utc": start.astimezone(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        "keep_waveforms": bool(spec.keep_waveforms),  # `sweeper resume` goes on the same way
    }


__all__ = [
    "RunSpec",
    "bench_for_run",
    "bench_spec",
    "engine_settings",
    "plan_frequencies",
    "plan_metadata",
    "run_metadata",
    "run_spec",
    "sim_config",
]
