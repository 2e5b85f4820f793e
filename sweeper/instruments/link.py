"""The one place every instrument transaction passes.

A Link wraps one open pyvisa message-based resource. Each write or query through it is
counted into TransactionStats, timed with time.perf_counter, shown to observers (e.g. a
transcript), offered to an optional fault hook (which may raise, to inject faults), and any
pyvisa or transport failure comes out as an InstrumentError subclass naming the command.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from datetime import datetime, timezone
from typing import Any

import numpy as np
from pyvisa import constants, errors as visa_errors

from sweeper.instruments import ieee4882
from sweeper.instruments.errors import ConnectionLost, InstrumentError, InstrumentTimeout, MalformedResponse
from sweeper.instruments.roles import TransactionStats

#: observer(time_utc, role, command, answer, duration_s, error): answer cut to ANSWER_PREVIEW
#: characters ('' for a write), error None on success or the error message.
Observer = Callable[[str, str, str, str, float, "str | None"], None]
#: fault_hook(role, command) runs before the transaction is sent and may raise.
FaultHook = Callable[[str, str], None]

ANSWER_PREVIEW = 200

_LOST_CODES = {
    constants.StatusCode.error_connection_lost,
    constants.StatusCode.error_invalid_object,
    constants.StatusCode.error_io,
    constants.StatusCode.error_closing_failed,
    constants.StatusCode.error_no_listeners,
    constants.StatusCode.error_resource_not_found,
}


def _preview(answer: str) -> str:
    return answer if len(answer) <= ANSWER_PREVIEW else answer[:ANSWER_PREVIEW] + f"... ({len(answer)} chars)"


class Link:
    """Counted, timed, observable and fault-injectable transactions on one VISA resource.

    resource: an open pyvisa MessageBasedResource; role: label for counts, messages and the
    transcript ('source', 'scope', 'meter'); stats: shared counters (a new one if None).
    """

    def __init__(
        self,
        resource: Any,
        role: str,
        *,
        stats: TransactionStats | None = None,
        observers: Iterable[Observer] = (),
        fault_hook: FaultHook | None = None,
    ) -> None:
        self.resource = resource
        self.role = role
        self.resource_name: str = str(getattr(resource, "resource_name", "") or "")
        self.stats = stats if stats is not None else TransactionStats()
        self.observers: list[Observer] = list(observers)
        self.fault_hook = fault_hook
        self.closed = False

    # -- public transactions -------------------------------------------------------------

    def write(self, command: str) -> None:
        """Send one command (the resource adds the write termination)."""
        self._transact("write", command, lambda: (self.resource.write(command), "")[1])

    def query(self, command: str, *, timeout_s: float | None = None) -> str:
        """Send a query and return its answer, termination stripped."""
        return self._transact("query", command, lambda: self.resource.read(), timeout_s=timeout_s, send=True)

    def query_block(self, command: str, *, timeout_s: float | None = None) -> bytes:
        """Send a query answered by an IEEE 488.2 arbitrary block; return the payload bytes.

        The block is read raw (header, then exactly the announced bytes, then the terminator),
        so LF bytes inside binary data do not end the read early; truncated or malformed
        blocks raise MalformedResponse.
        """
        return self._transact("block", command, self._read_block, timeout_s=timeout_s, send=True)

    def query_ascii_values(self, command: str, *, timeout_s: float | None = None) -> np.ndarray:
        """Send a query answered by comma-separated numbers; return them as float64."""
        text = self.query(command, timeout_s=timeout_s)
        try:
            return parse_numbers(text)
        except ValueError as exc:
            raise MalformedResponse(self.role, self.resource_name, command, str(exc)) from None

    @property
    def timeout_s(self) -> float:
        """The session timeout, seconds."""
        return float(self.resource.timeout) / 1000.0

    @timeout_s.setter
    def timeout_s(self, value: float) -> None:
        self.resource.timeout = max(1, int(round(value * 1000.0)))

    def close(self) -> None:
        """Close the session (idempotent; never raises)."""
        if self.closed:
            return
        self.closed = True
        try:
            self.resource.close()
        except Exception:  # noqa: BLE001 - closing is best effort
            pass

    # -- internals -----------------------------------------------------------------------

    def _read_exact(self, count: int) -> bytes:
        return bytes(self.resource.read_bytes(count, break_on_termchar=False))

    def _read_block(self) -> bytes:
        calls = 0

        def read_exact(count: int) -> bytes:
            # Call 1 reads '#<n>', call 2 the length digits, call 3 the payload. After the
            # header has begun, a timeout means the block stopped short: report it as a
            # truncated block (the bytes of the read that timed out may be lost, so the
            # count is a lower bound).
            nonlocal calls
            calls += 1
            if calls == 1:
                return self._read_exact(count)
            got = bytearray()
            chunk = max(1, int(getattr(self.resource, "chunk_size", 20 * 1024)))
            # The count is known: the termination character is switched off for the payload, so
            # an LF byte inside binary data does not end a read (with it on, pyvisa-py returns
            # at every LF: thousands of reads for a 2 MB block). END still ends a read early;
            # the loop goes on until count bytes are in.
            term = self.resource.read_termination
            self.resource.read_termination = None
            try:
                while len(got) < count:
                    got += self.resource.read_bytes(min(chunk, count - len(got)), break_on_termchar=True)
            except visa_errors.VisaIOError as exc:
                if exc.error_code != constants.StatusCode.error_timeout:
                    raise
                part = "length digits" if calls == 2 else "bytes"
                raise ieee4882.BlockError(
                    f"truncated block: header announces {count} {part}, the read timed out "
                    f"after at least {len(got)}"
                ) from None
            finally:
                self.resource.read_termination = term
            return bytes(got)

        def read_to_end() -> bytes:
            term = self.resource.read_termination
            self.resource.read_termination = None  # #0 ends with END only: binary LFs must not stop it
            try:
                return bytes(self.resource.read_raw())
            finally:
                self.resource.read_termination = term

        block = ieee4882.read_block(read_exact, read_to_end)
        if not block.indefinite:
            term = (self.resource.read_termination or "").encode("ascii")
            if term:
                tail = self._read_exact(len(term))
                if tail != term:
                    raise ieee4882.BlockError(
                        f"block of {len(block.payload)} bytes not followed by the terminator {term!r} "
                        f"(got {tail!r}): more data than the header announced"
                    )
        return block.payload

    def _transact(
        self,
        kind: str,
        command: str,
        action: Callable[[], Any],
        *,
        timeout_s: float | None = None,
        send: bool = False,
    ) -> Any:
        stats = self.stats
        if kind == "write":
            stats.writes += 1
        else:
            stats.queries += 1
        stats.per_role[self.role] = stats.per_role.get(self.role, 0) + 1
        time_utc = datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")
        start = time.perf_counter()
        answer_text = ""
        error: str | None = None
        previous_timeout: int | None = None
        try:
            if self.closed:
                raise ConnectionLost(self.role, self.resource_name, command, "session already closed")
            if self.fault_hook is not None:
                self.fault_hook(self.role, command)
            if timeout_s is not None:
                previous_timeout = self.resource.timeout
                self.timeout_s = timeout_s
            if send:
                self.resource.write(command)
            result = action()
            if isinstance(result, bytes):
                stats.bytes_read += len(result)
                answer_text = f"<block of {len(result)} bytes>"
            elif isinstance(result, str):
                stats.bytes_read += len(result)
                answer_text = _preview(result)
            return result
        except InstrumentError as exc:
            error = str(exc)
            raise
        except Exception as exc:  # noqa: BLE001 - translated into our own errors
            translated = self._translate(exc, command)
            error = str(translated)
            raise translated from exc
        finally:
            if previous_timeout is not None:
                try:
                    self.resource.timeout = previous_timeout
                except Exception:  # noqa: BLE001 - a dead session cannot take its timeout back
                    pass
            duration_s = time.perf_counter() - start
            stats.seconds += duration_s
            self._notify(time_utc, command, answer_text, duration_s, error)

    def _notify(self, time_utc: str, command: str, answer: str, duration_s: float, error: str | None) -> None:
        """Tell every observer. An observer that fails (e.g. a full disk under a transcript) is
        raised after all were told, unless the transaction itself failed: that error wins."""
        failure: Exception | None = None
        for observer in self.observers:
            try:
                observer(time_utc, self.role, command, answer, duration_s, error)
            except Exception as exc:  # noqa: BLE001 - re-raised below
                failure = failure or exc
        if failure is not None and error is None:
            raise failure

    def _translate(self, exc: Exception, command: str) -> InstrumentError:
        role, name = self.role, self.resource_name
        if isinstance(exc, visa_errors.VisaIOError):
            if exc.error_code == constants.StatusCode.error_timeout:
                return InstrumentTimeout(role, name, command, f"no complete answer within {self._timeout_text()}")
            if exc.error_code in _LOST_CODES:
                return ConnectionLost(role, name, command, f"connection lost ({exc.abbreviation}: {exc.description})")
            return ConnectionLost(role, name, command, f"VISA error {exc.abbreviation}: {exc.description}")
        if isinstance(exc, visa_errors.InvalidSession):
            return ConnectionLost(role, name, command, "the VISA session is closed or invalid")
        if isinstance(exc, (ConnectionError, OSError, EOFError)):
            return ConnectionLost(role, name, command, f"transport failed: {exc}")
        if isinstance(exc, ieee4882.BlockError):
            return MalformedResponse(role, name, command, str(exc))
        if isinstance(exc, UnicodeDecodeError):
            return MalformedResponse(role, name, command, f"answer is not text ({exc.reason})")
        return ConnectionLost(role, name, command, f"unexpected {type(exc).__name__}: {exc}")

    def _timeout_text(self) -> str:
        try:
            return f"{self.timeout_s:g} s"
        except Exception:  # noqa: BLE001
            return "the timeout"


def parse_numbers(text: str) -> np.ndarray:
    """Comma-separated numbers as float64; ValueError names the first bad item."""
    items = text.strip().split(",")
    if items == [""]:
        return np.empty(0)
    try:
        return np.array([float(item) for item in items])
    except ValueError:
        bad = next(item for item in items if not _is_float(item))
        raise ValueError(f"{bad.strip()!r} in a comma-separated list is not a number") from None


def parse_integers(text: str) -> np.ndarray:
    """Comma-separated integers as int64; ValueError names the first bad item."""
    items = text.strip().split(",")
    if items == [""]:
        return np.empty(0, dtype=np.int64)
    try:
        return np.array([int(item) for item in items], dtype=np.int64)
    except ValueError:
        bad = next(item for item in items if not _is_int(item))
        raise ValueError(f"{bad.strip()!r} in a comma-separated list is not an integer") from None


def _is_float(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _is_int(text: str) -> bool:
    try:
        int(text)
    except ValueError:
        return False
    return True
