"""Open a bench (a BenchSpec: roles, resources, driver files): sessions, role adapters, identities.

``with open_bench(spec) as bench:`` gives bench.source, bench.scope (waveform mode) or
bench.meter (meter mode), bench.clock, bench.identities and bench.stats. Leaving the block,
normally or by any exception, switches the source output off first and then closes every
session.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from typing import Any

import pyvisa

from sweeper.instruments.clock import RealClock
from sweeper.instruments.driver_roles import DriverMeter, DriverScope, DriverSource, make_role
from sweeper.instruments.driverfile import LoadedDriver
from sweeper.instruments.errors import BenchError, IdentityMismatch, InstrumentError
from sweeper.instruments.interpreter import DriverSession
from sweeper.instruments.limits import bench_drivers
from sweeper.instruments.spec import SIM_DEFAULTS, BenchSpec, RoleSpec, roles_for
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


def open_bench(
    spec: BenchSpec,
    *,
    clock: Clock | None = None,
    transcript: Observer | None = None,
    fault_hook: FaultHook | None = None,
    sim_faults: object | None = None,
) -> Bench:
    """Open a bench (a context manager: leaving it switches the output off and closes).

    clock: the clock of a visa bench (RealClock when None); a simulated bench runs on its own
        simulated clock, so giving one there is an error.
    transcript: observer(time_utc, role, command, answer, duration_s, error) for every transaction.
    fault_hook: fault_hook(role, command), called before every transaction; may raise.
    sim_faults: a sweeper.sim fault hook (e.g. FaultPlan) for a simulated bench.
    Raises BenchError (a driver file missing, invalid or of the wrong role; a visa bench
    without an instrument it needs) before any session opens, or InstrumentError.
    """
    drivers, problems = bench_drivers(spec)  # before any session: a bad driver file touches nothing
    if problems:
        raise BenchError("\n".join(f"{where}: {message}" for where, message in problems))
    stats = TransactionStats()
    observers = [transcript] if transcript is not None else []
    sim = None
    if spec.simulated:
        if clock is not None:
            raise BenchError("a simulated bench runs on its own simulated clock: do not pass clock=")
        if spec.sim is None:
            raise BenchError("a simulated bench needs its simulation settings (BenchSpec.sim)")
        from sweeper.sim import open_sim_resource_manager

        config = spec.sim if sim_faults is None else replace(spec.sim, faults=sim_faults)
        rm, sim = open_sim_resource_manager(config)
        bench_clock: Clock = sim.clock
    elif spec.kind == "visa":
        if sim_faults is not None:
            raise BenchError("sim_faults apply to a simulated bench only")
        try:
            rm = pyvisa.ResourceManager(spec.visa_library or "@py")
        except Exception as exc:  # noqa: BLE001
            raise BenchError(f"cannot load the VISA library {spec.visa_library or '@py'!r}: {exc}") from exc
        bench_clock = clock if clock is not None else RealClock()
    else:
        raise BenchError(f"bench.kind {spec.kind!r} is not simulated or visa")

    bench = Bench(None, None, None, bench_clock, [], stats, resource_manager=rm, sim=sim)
    try:
        for role in roles_for(spec.mode):
            ref = spec.role(role)
            assert ref is not None  # bench_drivers refused a bench without it
            adapter, identity, link = open_role(
                rm, role, ref.resource, drivers[role],
                timeout_s=ref.timeout_s, stats=stats, observers=observers, fault_hook=fault_hook,
            )
            setattr(bench, role, adapter)
            bench.identities.append(identity)
            bench.links.append(link)
    except BaseException:
        bench.close()
        raise
    return bench


__all__ = [
    "SIM_DEFAULTS", "Bench", "BenchSpec", "RoleSpec", "open_bench", "open_role", "reopen_output_off",
    "safe_output_off",
]
