"""Fault injection for the virtual bench.

Every message a simulated instrument receives passes through `SimBench.on_message`, which
consults the configured fault hook: any callable ``hook(resource, message) -> FaultAction |
None`` (or an object with such an ``on_message`` method). The returned action says what goes
wrong with this message. `FaultPlan` is a ready-made hook holding one-shot rules.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol


@dataclass
class FaultAction:
    """What goes wrong with one message (all fields default to 'nothing')."""

    scpi_error: tuple[int, str] | None = None  # queued in the instrument's error queue; the message still runs
    delay_s: float = 0.0  # the instrument is busy this long (simulated s): answers become readable only after it
    drop_answer: bool = False  # the message runs but its answer is lost: the next read times out
    drop_session: bool = False  # the connection breaks before the message arrives; I/O fails until reopened
    answer_filter: Callable[[bytes], bytes] | None = None  # rewrites the answer (without its terminator)
    keep_terminator: bool = True  # when answer_filter changed the answer, still append the LF terminator


class FaultHook(Protocol):
    """Anything consulted once per message."""

    def __call__(self, resource: str, message: str) -> FaultAction | None: ...


@dataclass
class _Rule:
    resource: str  # resource name, or "*" for any
    contains: str  # upper-case substring the message must contain ("" = any)
    action: Callable[[], FaultAction]
    remaining: int


@dataclass
class FaultPlan:
    """A scripted list of one-shot faults, consulted in order; the first matching rule fires.

    Each rule matches a resource (or "*") and optionally a substring of the message
    (case-insensitive), fires `times` times, then retires.
    """

    rules: list[_Rule] = field(default_factory=list)
    fired: list[tuple[str, str, str]] = field(default_factory=list)  # (resource, message, rule kind)

    def __call__(self, resource: str, message: str) -> FaultAction | None:
        upper = message.upper()
        for rule in self.rules:
            if rule.remaining <= 0:
                continue
            if rule.resource not in ("*", resource) or rule.contains not in upper:
                continue
            action = rule.action()
            rule.remaining -= 1
            self.fired.append((resource, message, rule.action.__name__))
            return action
        return None

    def _add(self, resource: str, contains: str, times: int, action: Callable[[], FaultAction]) -> FaultPlan:
        self.rules.append(_Rule(resource, contains.upper(), action, times))
        return self

    def queue_error(self, resource: str, code: int, text: str, contains: str = "", times: int = 1) -> FaultPlan:
        """Queue the SCPI error <code>,"<text>" on the next matching message."""

        def scpi_error() -> FaultAction:
            return FaultAction(scpi_error=(code, text))

        return self._add(resource, contains, times, scpi_error)

    def delay_answer(self, resource: str, seconds: float, contains: str = "", times: int = 1) -> FaultPlan:
        """Make the instrument busy for seconds (simulated) after the next matching message."""

        def delay() -> FaultAction:
            return FaultAction(delay_s=seconds)

        return self._add(resource, contains, times, delay)

    def drop_answer(self, resource: str, contains: str = "?", times: int = 1) -> FaultPlan:
        """Lose the answer to the next matching query (the reader times out)."""

        def no_answer() -> FaultAction:
            return FaultAction(drop_answer=True)

        return self._add(resource, contains, times, no_answer)

    def drop_session(self, resource: str, contains: str = "", times: int = 1) -> FaultPlan:
        """Break the connection on the next matching message."""

        def dropped() -> FaultAction:
            return FaultAction(drop_session=True)

        return self._add(resource, contains, times, dropped)

    def truncate_block(self, resource: str, keep_fraction: float = 0.5, contains: str = "?", times: int = 1) -> FaultPlan:
        """Cut the next definite-length block answer to keep_fraction of its bytes, without terminator.

        The rule stays armed across queries whose answers are not blocks.
        """
        if not 0.0 <= keep_fraction < 1.0:
            raise ValueError(f"keep_fraction must be in [0, 1), got {keep_fraction}")
        rule_box: list[_Rule] = []

        def truncated_block() -> FaultAction:
            def cut(answer: bytes) -> bytes:
                if not answer.startswith(b"#"):
                    rule_box[0].remaining += 1  # not a block: re-arm
                    return answer
                return answer[: int(len(answer) * keep_fraction)]

            return FaultAction(answer_filter=cut, keep_terminator=False)

        self._add(resource, contains, times, truncated_block)
        rule_box.append(self.rules[-1])
        return self

    def corrupt_block(self, resource: str, flip_bytes: int = 16, contains: str = "?", times: int = 1) -> FaultPlan:
        """Invert flip_bytes evenly spread payload bytes of the next definite-length block answer."""
        rule_box: list[_Rule] = []

        def corrupted_block() -> FaultAction:
            def flip(answer: bytes) -> bytes:
                if not answer.startswith(b"#") or len(answer) < 3:
                    rule_box[0].remaining += 1
                    return answer
                header_len = 2 + int(answer[1:2])
                data = bytearray(answer)
                payload_len = len(data) - header_len
                if payload_len <= 0:
                    return answer
                for i in range(flip_bytes):
                    data[header_len + (i * payload_len) // flip_bytes] ^= 0xFF
                return bytes(data)

            return FaultAction(answer_filter=flip)

        self._add(resource, contains, times, corrupted_block)
        rule_box.append(self.rules[-1])
        return self


def consult(hook: object | None, resource: str, message: str) -> FaultAction | None:
    """Ask a fault hook (callable, or object with on_message) about one message."""
    if hook is None:
        return None
    if hasattr(hook, "on_message"):
        return hook.on_message(resource, message)
    if callable(hook):
        return hook(resource, message)
    raise TypeError(f"fault hook must be callable or have on_message(resource, message), got {type(hook).__name__}")
