"""Open the bench a plan describes: sessions, driver files, role adapters, identities.

``with open_bench(plan) as bench:`` gives bench.source, bench.scope (waveform mode) or
bench.meter (meter mode), bench.clock, bench.identities and bench.stats. Leaving the block,
normally or by any exception, switches the source output off first and then closes every
session.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import pyvisa

from sweeper.instruments.clock import RealClock
from sweeper.instruments.driver_roles import DriverMeter, DriverScope, DriverSource, make_role
from sweeper.instruments.driverfile import LoadedDriver
from sweeper.instruments.errors import BenchError, IdentityMismatch, InstrumentError
from sweeper.instruments.interpreter import DriverSession
from sweeper.instruments.limits import SIM_DEFAULTS, bench_drivers, roles_for
from sweeper.instruments.link import FaultHook, Link, Observer
from sweeper.instruments.roles import Clock, Identity, TransactionStats
from sweeper.instruments.transport import prepare_session

@dataclass
class Bench:
    """An open bench. Use as a context manager, or call close() (always safe, never raises)."""

    source: DriverSource | None
    scope: DriverScope | None
    meter: DriverMeter | None
    clock: Clock
    identities: list[Identity]
    stats: TransactionStats
    links: list[Link] = field(default_factory=list)
    resource_manager: Any = None
    sim: Any = None  # the sweeper.sim SimBench behind a simulated bench, else None
    closed: bool = False
    output_off: bool | None = None  # after close(): whether the source took 'output off'

    def close(self) -> None:
        """Switch the source output off (best effort), then close every session. Never raises."""
        if self.closed:
            return
        self.closed = True
        self.output_off = safe_output_off(self.source) or reopen_output_off(self.source, self.resource_manager)
        for link in self.links:
            link.close()
        if self.resource_manager is not None:
            try:
                self.resource_manager.close()
            except Exception:  # noqa: BLE001 - closing is best effort
                pass

    def __enter__(self) -> Bench:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()


def safe_output_off(source: DriverSource | None) -> bool:
    """Try to switch a source's output off; True when the instrument took the command."""
    if source is None:
        return True
    try:
        source.set_output(False)
        return True
    except Exception:  # noqa: BLE001 - a safety action must not raise over the original problem
        try:  # the error queue may have refused something else: send the bare command once more
            source.session.forget_state()
            source.session.run("output_off")
            return True
        except Exception:  # noqa: BLE001
            return False


def reopen_output_off(source: DriverSource | None, rm: Any) -> bool:
    """When the source's session broke (e.g. a dropped connection), open a fresh session to the
    same resource and send the driver's output_off once. True when the instrument took it."""
    if source is None or rm is None:
        return source is None
    link, loaded = source.link, source.driver
    conn = loaded.driver.connection
    try:
        resource = rm.open_resource(
            link.resource_name,
            read_termination=conn.read_termination,
            write_termination=conn.write_termination,
            timeout=max(1, int(round(link.timeout_s * 1000))),
        )
    except Exception:  # noqa: BLE001 - a safety action must not raise over the original problem
        return False
    prepare_session(resource)
    fresh = Link(resource, link.role, stats=link.stats, observers=link.observers)
    try:
        DriverSession(loaded, fresh).run("output_off")
        return True
    except Exception:  # noqa: BLE001
        return False
    finally:
        fresh.close()


def open_role(
    rm: Any,
    role: str,
    resource_name: str,
    loaded: LoadedDriver,
    *,
    timeout_s: float | None = None,
    stats: TransactionStats | None = None,
    observers: Iterable[Observer] = (),
    fault_hook: FaultHook | None = None,
) -> tuple[DriverSource | DriverScope | DriverMeter, Identity, Link]:
    """Open one resource with its driver: session, *IDN? check, init sequence, role adapter.

    The Link is closed again if anything after opening fails.
    """
    driver = loaded.driver
    if driver.role != role:
        raise BenchError(f"{role}: driver {loaded.name} is a {driver.role} driver, not a {role} driver")
    conn = driver.connection
    timeout = conn.timeout_s if timeout_s is None else timeout_s
    try:
        resource = rm.open_resource(
            resource_name,
            read_termination=conn.read_termination,
            write_termination=conn.write_termination,
            timeout=max(1, int(round(timeout * 1000))),
            chunk_size=conn.chunk_size,
        )
    except Exception as exc:  # noqa: BLE001 - any failure to open is reported the same way
        raise InstrumentError(role, resource_name, "", f"could not open the session ({exc})") from exc
    prepare_session(resource)  # raw sockets: no delayed-ACK stalls, a clear that ends (instruments.transport)
    link = Link(resource, role, stats=stats, observers=observers, fault_hook=fault_hook)
    try:
        idn = link.query("*IDN?").strip()
        if driver.identify and not driver.matches(idn):
            raise IdentityMismatch(
                role, resource_name, "*IDN?",
                f"answered {idn!r}, which driver {loaded.name} does not recognise "
                f"(identify patterns: {', '.join(driver.identify)})",
            )
        session = DriverSession(loaded, link)
        session.init()
        adapter = make_role(session)
    except BaseException:
        link.close()
        raise
    return adapter, Identity(role, resource_name, idn, loaded.name, loaded.sha256), link


def sim_circuit(plan: Any) -> Any:
    """The true DUT of a simulated bench: the model's topology with its nominal values, overridden
    by bench.simulation.components, under the plan's loading, referenced to the DUT input node
    (the simulator adds its generator's own source resistance)."""
    from sweeper.prediction import true_circuit

    return true_circuit(plan, reference="input")


def sim_config(plan: Any, faults: object | None = None, run_metadata: Mapping[str, Any] | None = None) -> Any:
    """The sweeper.sim SimConfig of a plan's simulated DUT: sim_circuit(plan) and bench.simulation
    (also what `sweeper bench serve` serves).

    run_metadata: the run's stored metadata, when the bench is opened for a run. A campaign's
    sweep number (`campaign_sweep`) becomes the simulator's sweep seed, so the sweeps of a
    campaign differ, and its start on the campaign clock (`campaign_offset_s`) the bench's age,
    so drift goes on from sweep to sweep; both are stored in the run, so a resumed run opens
    the same bench. Without them (a single run) the bench is today's: sweep seed 0, age 0 s.
    """
    from sweeper.sim import Drift, Probe, SimConfig

    simulation = plan.bench.simulation
    meta = run_metadata or {}
    probes = None
    if simulation.probes is not None:
        probes = tuple(Probe(p.attenuation, p.resistance_ohm, p.capacitance_f) for p in simulation.probes)
    drift = None if simulation.drift is None else Drift(**simulation.drift.model_dump())
    return SimConfig(
        circuit=sim_circuit(plan),
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
        bench_age_s=float(meta.get("campaign_offset_s") or 0.0),
        sweep_seed=int(meta.get("campaign_sweep") or 0),
    )


def open_bench(
    plan: Any,
    *,
    clock: Clock | None = None,
    transcript: Observer | None = None,
    fault_hook: FaultHook | None = None,
    sim_faults: object | None = None,
    run_metadata: Mapping[str, Any] | None = None,
) -> Bench:
    """Open the plan's bench (a context manager: leaving it switches the output off and closes).

    clock: the clock of a visa bench (RealClock when None); a simulated bench runs on its own
        simulated clock, so giving one there is an error.
    transcript: observer(time_utc, role, command, answer, duration_s, error) for every transaction.
    fault_hook: fault_hook(role, command), called before every transaction; may raise.
    sim_faults: a sweeper.sim fault hook (e.g. FaultPlan) for a simulated bench.
    run_metadata: the run's stored metadata, for a simulated bench's sweep seed and age (sim_config).
    Raises BenchError (a driver file missing, invalid or of the wrong role; a visa bench
    without an instrument it needs) before any session opens, or InstrumentError.
    """
    bench_spec = plan.bench
    drivers, problems = bench_drivers(plan)  # before any session: a bad driver file touches nothing
    if problems:
        raise BenchError("\n".join(f"{where}: {message}" for where, message in problems))
    stats = TransactionStats()
    observers = [transcript] if transcript is not None else []
    sim = None
    if bench_spec.kind == "simulated" or (bench_spec.visa_library or "").strip() == "@sim":
        if clock is not None:
            raise BenchError("a simulated bench runs on its own simulated clock: do not pass clock=")
        from sweeper.sim import open_sim_resource_manager

        rm, sim = open_sim_resource_manager(sim_config(plan, sim_faults, run_metadata))
        bench_clock: Clock = sim.clock
    elif bench_spec.kind == "visa":
        if sim_faults is not None:
            raise BenchError("sim_faults apply to a simulated bench only")
        try:
            rm = pyvisa.ResourceManager(bench_spec.visa_library or "@py")
        except Exception as exc:  # noqa: BLE001
            raise BenchError(f"cannot load the VISA library {bench_spec.visa_library or '@py'!r}: {exc}") from exc
        bench_clock = clock if clock is not None else RealClock()
    else:
        raise BenchError(f"bench.kind {bench_spec.kind!r} is not simulated or visa")

    bench = Bench(None, None, None, bench_clock, [], stats, resource_manager=rm, sim=sim)
    try:
        for role in roles_for(bench_spec.mode):
            ref = getattr(bench_spec, role)
            if ref is None:
                resource_name, timeout_s = SIM_DEFAULTS[role][0], None
            else:  # the plan's timeout when it gives one, else the driver file's
                resource_name = ref.resource
                timeout_s = ref.timeout_s if "timeout_s" in ref.model_fields_set else None
            adapter, identity, link = open_role(
                rm, role, resource_name, drivers[role],
                timeout_s=timeout_s, stats=stats, observers=observers, fault_hook=fault_hook,
            )
            setattr(bench, role, adapter)
            bench.identities.append(identity)
            bench.links.append(link)
    except BaseException:
        bench.close()
        raise
    return bench


__all__ = [
    "SIM_DEFAULTS", "Bench", "open_bench", "open_role", "reopen_output_off", "safe_output_off", "sim_circuit",
    "sim_config",
]
