"""Instrument errors: what went wrong, on which role and resource, with which command.

Every failure of an instrument transaction reaches the engine as one of these, never as a
raw pyvisa or socket exception, so a fault policy can tell a timeout from a lost connection
from a garbled answer from an instrument that refused a command.
"""

from __future__ import annotations


class InstrumentError(Exception):
    """An instrument transaction failed.

    role: 'source' | 'scope' | 'meter' (or another label given to the Link);
    resource: VISA resource name; command: the SCPI text sent ('' when none);
    detail: what happened, in words.
    """

    def __init__(self, role: str, resource: str, command: str, detail: str) -> None:
        self.role = role
        self.resource = resource
        self.command = command
        self.detail = detail
        super().__init__(self._message())

    def _message(self) -> str:
        where = f"{self.role} ({self.resource})" if self.resource else self.role
        if self.command:
            return f"{where}: {self.command!r}: {self.detail}"
        return f"{where}: {self.detail}"

    def __reduce__(self):  # keep pickling (e.g. across processes) working with our signature
        return (self.__class__, (self.role, self.resource, self.command, self.detail))


class InstrumentTimeout(InstrumentError):
    """No (complete) answer arrived within the session timeout."""


class ConnectionLost(InstrumentError):
    """The session is gone or the transport failed (closed socket, I/O error, invalid session)."""


class MalformedResponse(InstrumentError):
    """An answer arrived but could not be parsed (bad number, truncated or malformed block)."""


class ScpiError(InstrumentError):
    """The instrument reported an error in its SCPI error queue after a command.

    errors: the (code, text) pairs drained from the queue, oldest first.
    """

    def __init__(
        self,
        role: str,
        resource: str,
        command: str,
        detail: str,
        errors: tuple[tuple[int, str], ...] = (),
    ) -> None:
        self.errors = tuple(errors)
        super().__init__(role, resource, command, detail)

    def __reduce__(self):
        return (self.__class__, (self.role, self.resource, self.command, self.detail, self.errors))


class LimitError(ValueError):
    """A request lies outside what the driver file says the instrument can do.

    Raised before anything is sent, so the instrument never sees the bad value.
    """


class IdentityMismatch(InstrumentError):
    """The instrument's *IDN? answer matches none of its driver file's identify patterns."""


class BenchError(ValueError):
    """The bench cannot be built as the plan describes it (missing instrument, wrong driver role,
    driver file not found or invalid)."""
