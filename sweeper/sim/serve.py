"""The virtual bench as raw SCPI socket servers: one TCP port per instrument, loopback by default.

The servers share the physics of the pyvisa-sim bench: they build the same `SimBench`, the
same `SimDevice`s (sweeper/sim/library.py) and the same instrument models, and drive each
device through its `receive` / `read_chunk` methods. So a plan can reach the simulated
instruments exactly as it would a LAN instrument: `TCPIP0::127.0.0.1::<port>::SOCKET` through
pyvisa-py, with LF-terminated messages and binary blocks sent as they are.

Simulated time: the bench clock does not really sleep (answers come at once), but before each
message it catches up with the wall-clock time that passed since the previous one, so the
settling waits a client makes in real time are seen by the DUT (turn off with wall_clock=False).

Network faults (`NetFaultPlan`), per server: a dropped connection, a stall, a block cut short,
a slow trickle. The SCPI-level faults of `SimConfig.faults` (sweeper/sim/faults.py) still apply.

Use::

    with serve_bench(SimConfig(circuit=dut, noise_v=0.5e-3)) as served:
        print(served.resources["scope-a"])   # TCPIP0::127.0.0.1::<port>::SOCKET
"""

from __future__ import annotations

import ipaddress
import itertools
import math
import select
import socket
import struct
import threading
import time
from collections import Counter
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

from pyvisa import constants
from pyvisa.highlevel import VisaLibraryBase

from sweeper.sim.bench import SimBench, SimConfig
from sweeper.sim.library import SimDevice, SweeperSimLibrary
from sweeper.sim.scpi import ScpiInstrument

StatusCode = constants.StatusCode

LOOPBACK = "127.0.0.1"
DEFAULT_BASE_PORT = 5025  # the usual raw SCPI socket port (common practice)

#: Served instrument name -> resource name of the same instrument on the pyvisa-sim bench
#: (the name the SimBench counts messages under and SimConfig.faults rules match).
SIM_RESOURCES = {
    "generator": "TCPIP0::sim-gen::5025::SOCKET",
    "scope-a": "TCPIP0::sim-scope-a::5025::SOCKET",
    "scope-b": "TCPIP0::sim-scope-b::5025::SOCKET",
    "meter": "TCPIP0::sim-meter::5025::SOCKET",
}
#: Port order from a base port: generator base, scope A base + 1, scope B base + 2, meter base + 3.
INSTRUMENTS: tuple[str, ...] = tuple(SIM_RESOURCES)
#: Driver file of each served instrument.
DRIVERS = {
    "generator": "sim-generator.yaml",
    "scope-a": "sim-scope-a.yaml",
    "scope-b": "sim-scope-b.yaml",
    "meter": "sim-meter.yaml",
}

MESSAGE_END = b"\n"
_POLL_S = 0.05  # how often idle server threads look at the stop flag, s
_RECV_BYTES = 65536


def socket_resource(host: str, port: int) -> str:
    """VISA resource name of a raw SCPI socket: TCPIP0::<host>::<port>::SOCKET."""
    return f"TCPIP0::{host}::{port}::SOCKET"


def is_loopback(host: str) -> bool:
    """True when host names the loopback interface (127.0.0.0/8, ::1 or 'localhost')."""
    if host.strip().lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


# ---------------------------------------------------------------------------------------------
# Network faults


@dataclass
class NetFault:
    """One network fault rule of a NetFaultPlan.

    kind: 'drop' (close the connection instead of taking the message; reset=True sends a TCP
    reset, else an orderly close), 'stall' (hold the answer seconds of real time, then send it;
    math.inf never sends it), 'cut' (send keep_fraction of a definite-length block answer, then
    nothing more; close=True also closes the connection), 'trickle' (send the answer in pieces
    of chunk_bytes every interval_s).
    """

    kind: str
    instrument: str  # served instrument name, or "*"
    contains: str  # upper-case substring the message must contain ("" = any)
    remaining: int
    seconds: float = 0.0
    keep_fraction: float = 0.5
    chunk_bytes: int = 64
    interval_s: float = 0.01
    reset: bool = True
    close: bool = False
    skip: int = 0  # matching messages to let through before the rule fires


@dataclass
class NetFaultPlan:
    """Scripted network faults, consulted per message in order; the first matching rule fires.

    Like sweeper.sim.faults.FaultPlan but on the wire: each rule matches a served instrument
    (or "*") and a substring of the message (case-insensitive), lets `after` matches through,
    then fires `times` times and retires.
    `fired` records (instrument, message, kind). Safe to extend while the servers run.
    """

    rules: list[NetFault] = field(default_factory=list)
    fired: list[tuple[str, str, str]] = field(default_factory=list)
    _lock: threading.Lock = field(default_factory=threading.Lock, repr=False, compare=False)

    def _add(self, rule: NetFault) -> NetFaultPlan:
        if rule.instrument != "*" and rule.instrument not in SIM_RESOURCES:
            raise ValueError(f"unknown instrument {rule.instrument!r}; expected one of {', '.join(INSTRUMENTS)} or '*'")
        if rule.remaining < 1:
            raise ValueError(f"times must be at least 1, got {rule.remaining}")
        rule.contains = rule.contains.upper()
        with self._lock:
            self.rules.append(rule)
        return self

    def drop_connection(
        self, instrument: str, contains: str = "", times: int = 1, reset: bool = True, after: int = 0
    ) -> NetFaultPlan:
        """Close the connection when a matching message arrives (the message is not run);
        reset=True aborts it (TCP reset: 'connection reset by peer'), else an orderly close."""
        return self._add(NetFault("drop", instrument, contains, times, reset=reset, skip=after))

    def stall(self, instrument: str, seconds: float, contains: str = "?", times: int = 1, after: int = 0) -> NetFaultPlan:
        """Hold the answer to a matching query for seconds of real time (inf: never send it)."""
        if not seconds > 0:
            raise ValueError(f"a stall lasts a positive time, got {seconds} s")
        return self._add(NetFault("stall", instrument, contains, times, seconds=seconds, skip=after))

    def cut_block(
        self, instrument: str, keep_fraction: float = 0.5, contains: str = "?", times: int = 1, close: bool = False,
        after: int = 0,
    ) -> NetFaultPlan:
        """Send only keep_fraction of a definite-length block answer (answers that are not blocks
        neither fire the rule nor count towards `after`); close=True then closes the connection."""
        if not 0.0 <= keep_fraction < 1.0:
            raise ValueError(f"keep_fraction must be in [0, 1), got {keep_fraction}")
        return self._add(NetFault("cut", instrument, contains, times, keep_fraction=keep_fraction, close=close,
                                  skip=after))

    def trickle(
        self, instrument: str, chunk_bytes: int = 64, interval_s: float = 0.01, contains: str = "?", times: int = 1,
        after: int = 0,
    ) -> NetFaultPlan:
        """Send a matching answer chunk_bytes at a time, one piece every interval_s (real time)."""
        if chunk_bytes < 1 or interval_s < 0:
            raise ValueError(f"trickle needs chunk_bytes >= 1 and interval_s >= 0, got {chunk_bytes}, {interval_s}")
        return self._add(NetFault("trickle", instrument, contains, times, chunk_bytes=chunk_bytes,
                                  interval_s=interval_s, skip=after))

    def match(self, instrument: str, message: str, answer: bytes | None = None) -> NetFault | None:
        """The rule that fires for this message (and answer, for 'cut'), consuming one shot."""
        upper = message.upper()
        with self._lock:
            for rule in self.rules:
                if rule.remaining <= 0 or rule.instrument not in ("*", instrument) or rule.contains not in upper:
                    continue
                if rule.kind == "drop" and answer is not None:
                    continue  # a drop acts before the message runs
                if rule.kind != "drop" and answer is None:
                    continue  # the others act on the answer
                if rule.kind == "cut" and not answer.lstrip().startswith(b"#"):
                    continue  # not a block: stay armed
                if rule.skip > 0:
                    rule.skip -= 1
                    continue
                rule.remaining -= 1
                self.fired.append((instrument, message, rule.kind))
                return rule
        return None


# ---------------------------------------------------------------------------------------------
# Servers


_served_ids = itertools.count(1)


def build_devices(bench: SimBench) -> dict[str, SimDevice]:
    """The bench's four SimDevices (the pyvisa-sim devices of devices.yaml with their models), by name."""
    library = SweeperSimLibrary(f"sweeper-served-bench-{next(_served_ids)}")
    VisaLibraryBase._registry.pop((SweeperSimLibrary, library.library_path), None)
    library.bind(bench)
    devices = {}
    for name, resource in SIM_RESOURCES.items():
        device = library.devices[resource]
        assert isinstance(device, SimDevice)
        devices[name] = device
    return devices


class _Connection:
    """One client connection to one served instrument (runs in its own thread)."""

    def __init__(self, server: _InstrumentServer, sock: socket.socket) -> None:
        self.server = server
        self.sock = sock
        self.thread = threading.Thread(target=self._serve, name=f"scpi-{server.name}-conn", daemon=True)

    def close(self, reset: bool = False) -> None:
        """Close the socket; reset=True aborts it with a TCP reset (SO_LINGER 0)."""
        try:
            if reset:
                self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
            else:
                self.sock.shutdown(socket.SHUT_RDWR)
        except OSError:
            pass
        try:
            self.sock.close()
        except OSError:
            pass

    def _serve(self) -> None:
        server = self.server
        handle = server.handle
        buffer = bytearray()
        with handle.lock:
            server.device.connect()  # a new connection: no stale input or answers
        try:
            while not handle.stopping.is_set():
                readable, _, _ = select.select([self.sock], [], [], _POLL_S)
                if not readable:
                    continue
                data = self.sock.recv(_RECV_BYTES)
                if not data:
                    break  # the client closed its end
                buffer += data
                while True:
                    end = buffer.find(MESSAGE_END)
                    if end < 0:
                        break
                    message = bytes(buffer[:end])
                    del buffer[: end + len(MESSAGE_END)]
                    if not self._message(message):
                        return
        except (OSError, ValueError):
            pass  # the client went away mid-transfer, or the server is stopping (socket closed)
        finally:
            self.close()
            server.forget(self)

    def _message(self, raw: bytes) -> bool:
        """Run one message and send its answer; False when the connection is to end."""
        server, handle = self.server, self.server.handle
        text = raw.decode("ascii", errors="replace").strip()
        drop = handle.faults.match(server.name, text)
        if drop is not None:
            self.close(reset=drop.reset)
            return False
        with handle.lock:
            handle.catch_up_clock()
            status = server.device.receive(raw + MESSAGE_END)
            answer = _collect(server.device)
            handle.mark_wall_clock()
        if status == StatusCode.error_connection_lost:
            self.close(reset=True)  # a SimConfig.faults drop_session: the link breaks
            return False
        if not answer:
            return True
        fault = handle.faults.match(server.name, text, answer)
        return self._send(answer, fault)

    def _send(self, answer: bytes, fault: NetFault | None) -> bool:
        stopping = self.server.handle.stopping
        if fault is None:
            self.sock.sendall(answer)
            return True
        if fault.kind == "stall":
            if math.isinf(fault.seconds):
                return True  # the answer never comes; the connection stays up
            if stopping.wait(fault.seconds):
                return False
            self.sock.sendall(answer)
            return True
        if fault.kind == "cut":
            self.sock.sendall(answer[: int(len(answer) * fault.keep_fraction)])
            if fault.close:
                self.close()
                return False
            return True
        for start in range(0, len(answer), fault.chunk_bytes):  # trickle
            if start and stopping.wait(fault.interval_s):
                return False
            self.sock.sendall(answer[start : start + fault.chunk_bytes])
        return True


def _collect(device: SimDevice) -> bytes:
    """Every answer the device has pending, terminators included (waiting in simulated time)."""
    out = bytearray()
    while True:
        data, status = device.read_chunk(1 << 62, termchar=None, suppress_end=False, timeout_s=math.inf)
        out += data
        if status == StatusCode.error_timeout or status == StatusCode.error_connection_lost:
            return bytes(out)


class _InstrumentServer:
    """A listening socket for one instrument and the connections it accepted."""

    def __init__(self, handle: ServerHandle, name: str, device: SimDevice, host: str, port: int) -> None:
        self.handle = handle
        self.name = name
        self.device = device
        family = socket.AF_INET6 if ":" in host else socket.AF_INET
        self.listener = socket.socket(family, socket.SOCK_STREAM)
        self.listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            self.listener.bind((host, port))
            self.listener.listen(4)
        except OSError:
            self.listener.close()
            raise
        self.address: tuple[str, int] = self.listener.getsockname()[:2]
        self.connections: list[_Connection] = []
        self._lock = threading.Lock()
        self.thread = threading.Thread(target=self._accept, name=f"scpi-{name}", daemon=True)

    def _accept(self) -> None:
        while not self.handle.stopping.is_set():
            try:
                readable, _, _ = select.select([self.listener], [], [], _POLL_S)
                if not readable:
                    continue
                sock, _ = self.listener.accept()
            except (OSError, ValueError):
                return  # the listener was closed
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            connection = _Connection(self, sock)
            with self._lock:
                self.connections.append(connection)
            self.handle.connections[self.name] += 1
            connection.thread.start()

    def forget(self, connection: _Connection) -> None:
        with self._lock:
            if connection in self.connections:
                self.connections.remove(connection)

    def stop(self) -> None:
        try:
            self.listener.close()
        except OSError:
            pass
        with self._lock:
            connections = list(self.connections)
        for connection in connections:
            connection.close()
        self.thread.join(timeout=2.0)
        for connection in connections:
            connection.thread.join(timeout=2.0)


class ServerHandle:
    """Running loopback servers of one virtual bench. A context manager; stop() ends them.

    bench: the shared SimBench (generator state, clock, counters); host; ports and resources
    by instrument name; faults: the NetFaultPlan consulted on every message; connections:
    connections accepted per instrument.
    """

    def __init__(self, bench: SimBench, devices: Mapping[str, SimDevice], faults: NetFaultPlan, wall_clock: bool) -> None:
        self.bench = bench
        self.devices = dict(devices)
        self.faults = faults
        self.wall_clock = wall_clock
        self.lock = threading.RLock()  # one bench, one message at a time
        self.stopping = threading.Event()
        self.connections: Counter[str] = Counter()
        self.servers: dict[str, _InstrumentServer] = {}
        self.host = LOOPBACK
        self._last_wall_s = time.monotonic()

    @property
    def ports(self) -> dict[str, int]:
        """TCP port of each served instrument."""
        return {name: server.address[1] for name, server in self.servers.items()}

    @property
    def addresses(self) -> dict[str, tuple[str, int]]:
        """(address, port) each listening socket is bound to."""
        return {name: server.address for name, server in self.servers.items()}

    @property
    def resources(self) -> dict[str, str]:
        """VISA resource name of each served instrument: TCPIP0::<host>::<port>::SOCKET."""
        return {name: socket_resource(self.host, port) for name, port in self.ports.items()}

    def model(self, name: str) -> ScpiInstrument:
        """The instrument model behind a served instrument (for tests and diagnostics)."""
        return self.devices[name].model

    def catch_up_clock(self) -> None:
        """Advance the simulated clock by the wall-clock time since the last message (when wall_clock)."""
        if self.wall_clock and not self.bench.clock.realtime:
            gap_s = time.monotonic() - self._last_wall_s
            if gap_s > 0:
                self.bench.clock.sleep(gap_s)

    def mark_wall_clock(self) -> None:
        """Remember when the last message was finished (wall clock)."""
        self._last_wall_s = time.monotonic()

    def stop(self) -> None:
        """Close every listener and connection and wait for the server threads (idempotent)."""
        if self.stopping.is_set():
            return
        self.stopping.set()
        for server in self.servers.values():
            server.stop()

    def __enter__(self) -> ServerHandle:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.stop()


def resolve_ports(ports: Mapping[str, int] | int | None, instruments: Iterable[str]) -> dict[str, int]:
    """Port per instrument: None -> any free port each (0); an int -> consecutive from that base
    in the order generator, scope-a, scope-b, meter (0 -> any free port each); a mapping as given."""
    names = list(instruments)
    unknown = [n for n in names if n not in SIM_RESOURCES]
    if unknown:
        raise ValueError(f"unknown instrument(s) {', '.join(unknown)}; expected some of {', '.join(INSTRUMENTS)}")
    if ports is None:
        return {name: 0 for name in names}
    if isinstance(ports, int):
        if ports == 0:
            return {name: 0 for name in names}
        if not 1 <= ports <= 65535 - len(INSTRUMENTS):
            raise ValueError(f"base port {ports} is outside 1 .. {65535 - len(INSTRUMENTS)}")
        return {name: ports + INSTRUMENTS.index(name) for name in names}
    missing = [n for n in names if n not in ports]
    if missing:
        raise ValueError(f"no port given for {', '.join(missing)}")
    return {name: int(ports[name]) for name in names}


def serve_bench(
    config: SimConfig,
    host: str = LOOPBACK,
    ports: Mapping[str, int] | int | None = None,
    *,
    instruments: Iterable[str] = INSTRUMENTS,
    faults: NetFaultPlan | None = None,
    allow_remote: bool = False,
    wall_clock: bool = True,
) -> ServerHandle:
    """Start the virtual bench's instruments as raw SCPI socket servers; returns a running handle.

    host: the address to bind; anything but loopback needs allow_remote=True (ValueError
    otherwise), since the servers have no authentication. ports: see resolve_ports (None: any
    free ports). faults: network faults (a new empty NetFaultPlan when None). wall_clock: the
    simulated clock catches up with real time between messages (see the module docstring).
    Raises OSError when a port cannot be bound (every server already started is stopped).
    """
    if not is_loopback(host) and not allow_remote:
        raise ValueError(
            f"refusing to bind {host!r}: the simulated instruments have no access control, so they "
            "serve the loopback interface only unless remote access is asked for explicitly (allow_remote)"
        )
    wanted = resolve_ports(ports, instruments)
    bench = SimBench(config)
    handle = ServerHandle(bench, build_devices(bench), faults if faults is not None else NetFaultPlan(), wall_clock)
    handle.host = "127.0.0.1" if host.strip().lower() == "localhost" else host
    try:
        for name, port in wanted.items():
            handle.servers[name] = _InstrumentServer(handle, name, handle.devices[name], handle.host, port)
    except BaseException:
        handle.stop()
        raise
    for server in handle.servers.values():
        server.thread.start()
    return handle


__all__ = [
    "DEFAULT_BASE_PORT",
    "DRIVERS",
    "INSTRUMENTS",
    "LOOPBACK",
    "NetFault",
    "NetFaultPlan",
    "ServerHandle",
    "build_devices",
    "is_loopback",
    "resolve_ports",
    "serve_bench",
    "socket_resource",
]
