"""Find instruments: list what a VISA backend sees, ask each *IDN?, suggest a driver file.

Backends: "@py" (pyvisa-py, the default), "@sim" (sweeper's simulated bench, with a demo DUT),
or anything else pyvisa.ResourceManager takes (a path to a system VISA library, "@ivi").
pyvisa-py's own listing cannot see raw SCPI sockets (nothing announces them), so resources can
also be given by hand or found by trying ports of the local host.

Nothing leaves the machine unless asked for: a real backend's own listing (pyvisa-py sends
VXI-11 broadcasts and mDNS queries on the LAN to find TCPIP instruments, and a system VISA
library may do the like) runs only with lan=True (`sweeper instruments --lan`); by default
only the resources named by hand and the loopback ports tried are asked. The "@sim" backend
lists its simulated instruments in-process, sending nothing.
"""

from __future__ import annotations

import socket
import time
import warnings
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pyvisa
from pyvisa import rname

from sweeper.instruments.driverfile import DriverFileError, LoadedDriver, driver_search_path, load_driver

#: *IDN? timeout when probing, s: a LAN instrument answers it within milliseconds (common practice).
PROBE_TIMEOUT_S = 1.0
#: Terminations used to ask an unknown instrument *IDN? (LF both ways: the raw-socket custom).
PROBE_TERMINATION = "\n"


class BackendError(RuntimeError):
    """The VISA backend cannot be loaded."""


@dataclass
class Found:
    """One resource and what it said."""

    resource: str
    idn: str = ""
    error: str = ""  # why no identity was read ('' when it was)
    drivers: list[str] = field(default_factory=list)  # names of driver files whose identify patterns match
    driver_paths: list[Path] = field(default_factory=list)
    seconds: float = 0.0  # time the identity query took

    @property
    def identified(self) -> bool:
        """True when *IDN? was answered."""
        return bool(self.idn) and not self.error


def sim_demo_config() -> Any:
    """SimConfig of the "@sim" backend: a first-order RC low-pass (1.6 kOhm, 100 nF) as the DUT."""
    from sweeper.circuits import Loading, build_circuit
    from sweeper.sim import SimConfig

    circuit = build_circuit("rc-lowpass", {"R": 1.6e3, "C": 100e-9}, Loading(reference="input"))
    return SimConfig(circuit=circuit, noise_v=0.5e-3, seed=1)


def open_resource_manager(backend: str = "@py") -> Any:
    """A pyvisa ResourceManager for a backend name: '@py', '@sim' (sweeper's simulated bench)
    or a VISA library path / pyvisa backend string. BackendError when it cannot be loaded."""
    backend = (backend or "@py").strip()
    if backend == "@sim":
        from sweeper.sim import open_sim_resource_manager

        rm, _bench = open_sim_resource_manager(sim_demo_config())
        return rm
    if not backend.startswith("@") and not Path(backend).exists():
        raise BackendError(f"VISA library {backend!r} not found (expected '@py', '@sim' or a path to a VISA library)")
    try:
        return pyvisa.ResourceManager(backend)
    except Exception as exc:  # noqa: BLE001 - any loading failure is reported the same way
        raise BackendError(f"cannot load the VISA library {backend!r}: {exc}") from exc


#: Backends whose own listing sends nothing over a network (they are listed without --lan).
LOCAL_BACKENDS = frozenset({"@sim"})


def backend_listing_allowed(backend: str, lan: bool) -> bool:
    """Whether to ask the backend's own discovery: always for a backend that lists in-process
    ("@sim"), else only when LAN discovery was asked for (it may broadcast on the LAN)."""
    return lan or (backend or "@py").strip() in LOCAL_BACKENDS


def list_backend_resources(rm: Any, query: str = "?*") -> list[str]:
    """What the backend's own discovery finds (warnings about missing optional packages hushed)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return list(rm.list_resources(query))
        except Exception:  # noqa: BLE001 - a backend that cannot list simply lists nothing
            return []


def parse_ports(text: str) -> list[int]:
    """Ports from '5025', '5025-5028' or '5025,5030-5032'; ValueError says what is wrong."""
    ports: list[int] = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        low_text, sep, high_text = part.partition("-")
        try:
            low = int(low_text)
            high = int(high_text) if sep else low
        except ValueError:
            raise ValueError(f"{part!r} is not a port or a port range like 5025-5028") from None
        if not (1 <= low <= high <= 65535):
            raise ValueError(f"{part!r}: ports must lie in 1 .. 65535, low end first")
        if high - low > 1024:
            raise ValueError(f"{part!r}: at most 1025 ports per range")
        ports.extend(range(low, high + 1))
    if not ports:
        raise ValueError(f"{text!r} names no port")
    return list(dict.fromkeys(ports))


def listening_ports(ports: Iterable[int], host: str = "127.0.0.1", timeout_s: float = 0.2) -> list[int]:
    """The ports of host that accept a TCP connection (each tried once and closed at once)."""
    found = []
    for port in ports:
        try:
            with socket.create_connection((host, port), timeout=timeout_s):
                found.append(port)
        except OSError:
            continue
    return found


def socket_resources(ports: Iterable[int], host: str = "127.0.0.1") -> list[str]:
    """Raw SCPI socket resource names for ports of a host."""
    return [f"TCPIP0::{host}::{port}::SOCKET" for port in ports]


def resource_name_problem(resource: str) -> str | None:
    """Why a text is not a VISA resource name (pyvisa's parser), or None when it is one."""
    try:
        rname.parse_resource_name(resource)
    except rname.InvalidResourceName as exc:
        return (f"{resource!r} is not a VISA resource name ({exc}); expected e.g. "
                "TCPIP0::192.168.0.20::5025::SOCKET, TCPIP0::192.168.0.20::inst0::INSTR, GPIB0::12::INSTR")
    return None


def query_identity(rm: Any, resource: str, timeout_s: float = PROBE_TIMEOUT_S) -> tuple[str, str]:
    """Ask one resource *IDN?; returns (identity, '') or ('', why not)."""
    problem = resource_name_problem(resource)
    if problem is not None:
        return "", problem
    timeout_ms = max(1, int(round(timeout_s * 1000)))
    try:
        session = rm.open_resource(
            resource,
            read_termination=PROBE_TERMINATION,
            write_termination=PROBE_TERMINATION,
            timeout=timeout_ms,
            open_timeout=timeout_ms,
        )
    except Exception as exc:  # noqa: BLE001 - reported, not raised
        return "", f"cannot open ({_short(exc)})"
    try:
        answer = str(session.query("*IDN?")).strip()
    except Exception as exc:  # noqa: BLE001
        return "", f"no answer to *IDN? within {timeout_s:g} s ({_short(exc)})"
    finally:
        try:
            session.close()
        except Exception:  # noqa: BLE001 - closing is best effort
            pass
    if not answer:
        return "", "empty answer to *IDN?"
    return answer, ""


def _short(exc: Exception) -> str:
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return text if len(text) <= 120 else text[:117] + "..."


def known_drivers(search: Sequence[Path] | None = None) -> tuple[list[LoadedDriver], list[str]]:
    """Every valid driver file (*.yaml) in the search folders, first of a name wins (as
    find_driver does); and a line per file that could not be loaded."""
    folders = list(search) if search is not None else driver_search_path(None)
    drivers: list[LoadedDriver] = []
    problems: list[str] = []
    seen: set[str] = set()
    for folder in folders:
        if not folder.is_dir():
            continue
        for path in sorted(list(folder.glob("*.yaml")) + list(folder.glob("*.yml"))):
            if path.name in seen:
                continue
            seen.add(path.name)
            try:
                drivers.append(load_driver(path))
            except DriverFileError as exc:
                problems.append(f"{path}: not a valid driver file ({len(exc.problems)} problem(s))")
    return drivers, problems


def suggest_drivers(idn: str, drivers: Iterable[LoadedDriver]) -> list[LoadedDriver]:
    """The drivers whose identify patterns match an *IDN? answer."""
    return [d for d in drivers if d.driver.identify and d.driver.matches(idn)]


def discover(
    rm: Any,
    resources: Iterable[str],
    drivers: Sequence[LoadedDriver],
    timeout_s: float = PROBE_TIMEOUT_S,
) -> list[Found]:
    """Ask each resource *IDN? and suggest driver files; one Found per resource, in order."""
    results = []
    for resource in dict.fromkeys(resources):
        start = time.perf_counter()
        idn, error = query_identity(rm, resource, timeout_s)
        found = Found(resource=resource, idn=idn, error=error, seconds=time.perf_counter() - start)
        if idn:
            matches = suggest_drivers(idn, drivers)
            found.drivers = [d.name for d in matches]
            found.driver_paths = [d.path for d in matches]
        results.append(found)
    return results


__all__ = [
    "LOCAL_BACKENDS",
    "PROBE_TIMEOUT_S",
    "BackendError",
    "backend_listing_allowed",
    "Found",
    "discover",
    "known_drivers",
    "list_backend_resources",
    "listening_ports",
    "open_resource_manager",
    "parse_ports",
    "query_identity",
    "resource_name_problem",
    "sim_demo_config",
    "socket_resources",
    "suggest_drivers",
]
