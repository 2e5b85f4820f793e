"""pyvisa-sim, extended: answers computed from the bench's state, a fast read path, faults.

pyvisa-sim answers from the static dialogues and properties of a YAML file. Here:

- `SimDevice` (a pyvisa-sim Device) passes every message through `SimBench.on_message`
  (counting, latency, fault hook), asks its Python instrument model first and falls back to
  the static tables of devices.yaml (matched case-insensitively); a header nobody knows
  queues -113 and gets no answer.
- `SweeperSimLibrary` (a pyvisa-sim SimVisaLibrary) reads whole pending answers in one call
  (pyvisa-sim hands out one byte per call), with the VISA END / termination-character /
  max-count statuses set as a real library would, and times out in simulated time.
- `open_sim_resource_manager(config)` builds a fresh library, devices and bench each time,
  so two benches never share state.
"""

from __future__ import annotations

import importlib.resources
import itertools
import math
from collections import deque
from dataclasses import dataclass
from typing import Any, SupportsInt

import pyvisa
from pyvisa import constants
from pyvisa.highlevel import VisaLibraryBase
from pyvisa_sim import parser
from pyvisa_sim.component import NoResponse
from pyvisa_sim.devices import Device, Devices
from pyvisa_sim.highlevel import SimVisaLibrary

from sweeper.sim.bench import SimBench, SimConfig
from sweeper.sim.faults import FaultAction
from sweeper.sim.instruments import MODELS
from sweeper.sim.scpi import UNDEFINED_HEADER, ScpiInstrument

StatusCode = constants.StatusCode
DEVICES_FILE = "devices.yaml"  # package data of sweeper.sim


def split_units(text: str) -> list[str]:
    """Split a compound program message at ';' outside quoted strings (IEEE 488.2 message units).

    Each unit is run as its own command; the answers of the queries among them are joined
    with ';' into one response message, as IEEE 488.2 prescribes.
    """
    units, current, quoted = [], [], False
    for ch in text:
        if ch == '"':
            quoted = not quoted
        if ch == ";" and not quoted:
            units.append("".join(current).strip())
            current = []
        else:
            current.append(ch)
    units.append("".join(current).strip())
    return [u for u in units if u]


@dataclass
class _Reply:
    data: bytes  # the whole answer, terminator included
    ready_at_s: float  # simulated time from which it can be read
    pos: int = 0  # bytes already handed out


class SimDevice(Device):
    """A pyvisa-sim Device answered by a Python instrument model, then by its static tables."""

    model: ScpiInstrument
    bench: SimBench

    @classmethod
    def adopt(cls, parsed: Device, model: ScpiInstrument, bench: SimBench) -> SimDevice:
        """Take over a Device parsed from devices.yaml (its static tables and terminators)."""
        device = cls.__new__(cls)
        device.__dict__.update(parsed.__dict__)
        device._resource_name = None  # re-bound by Devices.add_device
        device._dialogues = {query.strip().upper(): answer for query, answer in parsed._dialogues.items()}
        device.model = model
        device.bench = bench
        device._replies = deque()
        device.busy_until_s = 0.0
        device.connected = True
        return device

    # --- connection state

    def connect(self) -> None:
        """A new session: the link is up and holds no stale bytes (the instrument keeps its settings)."""
        self.connected = True
        self.clear()

    def clear(self) -> None:
        """Device clear: discard unread input and pending answers."""
        self._input_buffer = bytearray()
        self._replies.clear()

    # --- messages in

    def receive(self, data: bytes) -> StatusCode:
        """Take bytes from the controller; run each complete message (ended by the query EOM)."""
        if not self.connected:
            return StatusCode.error_connection_lost
        self._input_buffer.extend(data)
        eom = self._query_eom or b"\n"
        while True:
            end = self._input_buffer.find(eom)
            if end < 0:
                return StatusCode.success
            message = bytes(self._input_buffer[:end])
            del self._input_buffer[: end + len(eom)]
            status = self._run(message)
            if status != StatusCode.success:
                return status

    def write(self, data: bytes) -> None:
        """pyvisa-sim's Device interface (used when a session writes directly)."""
        self.receive(data)

    def _run(self, raw: bytes) -> StatusCode:
        text = raw.decode("ascii", errors="replace").strip()
        if not text:
            return StatusCode.success  # an empty program message is legal and does nothing
        action = self.bench.on_message(str(self.resource_name), text) or FaultAction()
        if action.drop_session:
            self.connected = False
            self.clear()
            return StatusCode.error_connection_lost
        if action.scpi_error is not None:
            self.model.queue_error(action.scpi_error)
        now = self.bench.clock.now_s()
        if action.delay_s > 0:
            self.busy_until_s = max(self.busy_until_s, now + action.delay_s)
        answers = [a for a in (self._answer(unit) for unit in split_units(text)) if a is not None]
        answer = b";".join(answers) if answers else None
        if answer is None or action.drop_answer:
            return StatusCode.success
        terminated = True
        if action.answer_filter is not None:
            filtered = action.answer_filter(answer)
            if filtered != answer:
                terminated = action.keep_terminator
            answer = filtered
        data = answer + self._response_eom if terminated else answer
        if data:
            self._replies.append(_Reply(data=data, ready_at_s=max(now, self.busy_until_s)))
        return StatusCode.success

    def _answer(self, text: str) -> bytes | None:
        """The model's answer, else a static one; None when there is nothing to send."""
        try:
            answer = self.model.handle(text)
        except LookupError:
            static = self._match(text.upper().encode("ascii", errors="replace"))
            if static is None:
                self.model.queue_error(UNDEFINED_HEADER)
                return None
            return None if static is NoResponse else bytes(static)
        if answer is None:
            return None
        return answer if isinstance(answer, bytes) else answer.encode("ascii")

    # --- answers out

    def read(self) -> tuple[bytes, bool]:
        """pyvisa-sim's one-byte Device interface: (byte, END on this byte)."""
        data, status = self.read_chunk(1, termchar=None, suppress_end=False, timeout_s=0.0)
        return data, status == StatusCode.success

    def read_chunk(
        self, count: int, termchar: int | None, suppress_end: bool, timeout_s: float
    ) -> tuple[bytes, StatusCode]:
        """Up to count bytes of pending answers in one call, with VISA read semantics.

        Stops after the last byte of an answer (END, unless suppressed: status success),
        after the termination character when termchar is given (termination status), or at
        count bytes (max-count status). Waits in simulated time for a delayed answer; with
        nothing arriving within timeout_s, advances the clock by the timeout and reports a
        timeout (an infinite timeout with nothing pending reports it at once instead of
        hanging).
        """
        if not self.connected:
            return b"", StatusCode.error_connection_lost
        clock = self.bench.clock
        out = bytearray()
        term = bytes([termchar]) if termchar is not None else None
        while True:
            if not self._replies:
                if math.isfinite(timeout_s):
                    clock.sleep(timeout_s)
                return bytes(out), StatusCode.error_timeout
            reply = self._replies[0]
            wait_s = reply.ready_at_s - clock.now_s()
            if wait_s > 0:
                if wait_s > timeout_s:
                    clock.sleep(timeout_s)
                    return bytes(out), StatusCode.error_timeout
                clock.sleep(wait_s)
            chunk = reply.data[reply.pos : reply.pos + count - len(out)]
            term_hit = False
            if term is not None:
                at = chunk.find(term)
                if at >= 0:
                    chunk = chunk[: at + 1]
                    term_hit = True
            reply.pos += len(chunk)
            out += chunk
            self.bench.bytes_sent[str(self.resource_name)] += len(chunk)
            end = reply.pos >= len(reply.data)
            if end:
                self._replies.popleft()
            if end and not suppress_end:
                return bytes(out), StatusCode.success
            if term_hit:
                return bytes(out), StatusCode.success_termination_character_read
            if len(out) >= count:
                return bytes(out), StatusCode.success_max_count_read


class SweeperSimLibrary(SimVisaLibrary):
    """pyvisa-sim's library over sweeper's devices.yaml, bound to one SimBench."""

    bench: SimBench | None

    def _init(self) -> None:
        self.sessions = {}
        resource = importlib.resources.files("sweeper.sim").joinpath(DEVICES_FILE)
        with importlib.resources.as_file(resource) as path:
            self.devices = parser.get_devices(path, False)
        self.bench = None

    def bind(self, bench: SimBench) -> None:
        """Give every device of devices.yaml its instrument model over this bench."""
        adopted = Devices()
        for name in self.devices.list_resources():
            parsed = self.devices[name]
            model = MODELS[parsed.name](bench)
            adopted.add_device(name, SimDevice.adopt(parsed, model, bench))
        self.devices = adopted
        self.bench = bench

    def _device(self, session: Any) -> SimDevice | None:
        sess = self.sessions.get(session)
        device = getattr(sess, "device", None)
        return device if isinstance(device, SimDevice) else None

    def open(
        self,
        session: Any,
        resource_name: str,
        access_mode: constants.AccessModes = constants.AccessModes.no_lock,
        open_timeout: SupportsInt = constants.VI_TMO_IMMEDIATE,
    ) -> tuple[Any, StatusCode]:
        """Open a session; a SimDevice starts with a clean link."""
        new_session, status = super().open(session, resource_name, access_mode, open_timeout)
        device = self._device(new_session) if status == StatusCode.success else None
        if device is not None:
            device.connect()
        return new_session, status

    def read(self, session: Any, count: int) -> tuple[bytes, StatusCode]:
        """Fast read: a whole pending answer (up to count bytes) per call."""
        device = self._device(session)
        if device is None:
            return super().read(session, count)
        sess = self.sessions[session]
        timeout_ms, _ = sess.get_attribute(constants.ResourceAttribute.timeout_value)
        timeout_s = math.inf if timeout_ms in (None, constants.VI_TMO_INFINITE) else float(timeout_ms) / 1000.0
        termchar_enabled, _ = sess.get_attribute(constants.ResourceAttribute.termchar_enabled)
        termchar, _ = sess.get_attribute(constants.ResourceAttribute.termchar)
        suppress_end, _ = sess.get_attribute(constants.ResourceAttribute.suppress_end_enabled)
        data, status = device.read_chunk(
            count,
            termchar=int(termchar) if termchar_enabled else None,
            suppress_end=bool(suppress_end),
            timeout_s=timeout_s,
        )
        return data, self.handle_return_value(session, status)

    def write(self, session: Any, data: bytes) -> tuple[int, StatusCode]:
        """Hand bytes to the device; a dropped link raises VisaIOError (connection lost)."""
        device = self._device(session)
        if device is None:
            return super().write(session, data)
        status = device.receive(bytes(data))
        return (len(data) if status >= 0 else 0), self.handle_return_value(session, status)

    def clear(self, session: Any) -> StatusCode:
        """Device clear (viClear): discard unread input and pending answers."""
        device = self._device(session)
        if device is None:
            return self.handle_return_value(session, StatusCode.error_invalid_object)
        if not device.connected:
            return self.handle_return_value(session, StatusCode.error_connection_lost)
        device.clear()
        return self.handle_return_value(session, StatusCode.success)


_bench_ids = itertools.count(1)


def open_sim_resource_manager(config: SimConfig) -> tuple[pyvisa.ResourceManager, SimBench]:
    """A resource manager over a fresh virtual bench, and that bench.

    Resources: TCPIP0::sim-gen::5025::SOCKET, TCPIP0::sim-scope-a::5025::SOCKET,
    TCPIP0::sim-scope-b::5025::SOCKET, TCPIP0::sim-meter::5025::SOCKET (open them with
    read_termination and write_termination "\\n"). bench.clock is the simulated clock.
    """
    bench = SimBench(config)
    library = SweeperSimLibrary(f"sweeper-sim-bench-{next(_bench_ids)}")
    # pyvisa caches libraries by path for the life of the process; this one belongs to one
    # bench only, so take it out of the cache (nothing can be handed it again by mistake,
    # and it is freed with its resource manager).
    VisaLibraryBase._registry.pop((SweeperSimLibrary, library.library_path), None)
    library.bind(bench)
    return pyvisa.ResourceManager(visa_library=library), bench
