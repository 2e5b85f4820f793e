"""Faults injected at chosen sweep points, or at random with a seed: the hook behind a plan's
``bench.simulation.faults`` list (see sweeper.plan.faults), usable from tests as well.

A `FaultInjector` is a sim fault hook (``hook(resource, message) -> FaultAction | None``). The
runner tells it which point is being measured (`point_index`, -1 outside the sweep); a rule
``at_point: k`` fires on the first `times` matching messages while point k is measured (retries
of that point included), a rule with a probability fires on each matching message during the
sweep with that probability, drawn from its own generator seeded by the rule's seed. A resumed
run starting at point k retires the at_point rules of points up to k (`disarm_through`).

What each kind does to the matching message (the simulated instrument behaves as a real one
would; the transaction layer turns it into the error the fault policy sees):

==================  ===============================================  ======================
kind                the message (default: matching text)             seen as
==================  ===============================================  ======================
timeout             its answer is lost (a query, "?")                InstrumentTimeout
slow_answer         the instrument is busy `delay_s` first ("?")     late answer; a timeout
                                                                     if past the timeout
dropped_session     the connection breaks before it arrives (any)    ConnectionLost
scpi_error          `code`,"`message`" joins the error queue (any)   ScpiError
truncated_block     a data answer is cut to half, no terminator      MalformedResponse
corrupted_block     16 payload bytes of a data answer are inverted   MalformedResponse
write_failure       not an instrument fault: `write_fault(k)` tells  the run stops safely
                    the runner to fail writing point k
==================  ===============================================  ======================
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from sweeper.sim.faults import FaultAction

#: Default message text each kind matches ("" = any message).
DEFAULT_MATCH = {
    "timeout": "?",
    "slow_answer": "?",
    "dropped_session": "",
    "scpi_error": "",
    "truncated_block": "?",
    "corrupted_block": "?",
    "write_failure": "",
}
#: Fraction of a block answer kept by truncated_block; payload bytes inverted by corrupted_block.
TRUNCATE_KEEP = 0.5
CORRUPT_BYTES = 16
#: Answers at least this long count as data blocks even without a 488.2 block header.
DATA_BYTES = 256


@dataclass
class InjectionRule:
    """One injection, resolved to a resource name ("*" = any)."""

    kind: str
    resource: str = "*"
    at_point: int | None = None
    probability: float | None = None
    seed: int = 0
    times: int = 1
    command: str = ""
    code: int = -200
    message: str = "Execution error"
    delay_s: float = 1.0
    remaining: int = field(init=False, default=0)
    rng: np.random.Generator | None = field(init=False, default=None)

    def __post_init__(self) -> None:
        if self.kind not in DEFAULT_MATCH:
            raise ValueError(f"unknown injection kind {self.kind!r} (expected one of: {', '.join(DEFAULT_MATCH)})")
        if (self.at_point is None) == (self.probability is None):
            raise ValueError("give at_point or probability (one of them)")
        self.remaining = self.times
        self.rng = np.random.default_rng(self.seed) if self.probability is not None else None

    @property
    def match(self) -> str:
        """Upper-case text a message must contain."""
        return (self.command or DEFAULT_MATCH[self.kind]).upper()


@dataclass
class Fired:
    """One injected fault: at which point, what, on which resource and message."""

    point_index: int
    kind: str
    resource: str
    message: str


def _is_block(answer: bytes) -> bool:
    """A waveform-sized answer: an IEEE 488.2 definite-length block, or any answer of at least
    DATA_BYTES (a waveform sent as text)."""
    definite = answer.startswith(b"#") and len(answer) > 2 and answer[1:2].isdigit() and answer[1:2] != b"0"
    return definite or len(answer) >= DATA_BYTES


def _truncate(answer: bytes) -> bytes:
    return answer[: int(len(answer) * TRUNCATE_KEEP)]


def _corrupt(answer: bytes) -> bytes:
    header = 2 + int(answer[1:2]) if answer.startswith(b"#") and answer[1:2].isdigit() else 0
    data = bytearray(answer)
    payload = len(data) - header
    if payload <= 0:
        return answer
    for i in range(CORRUPT_BYTES):
        data[header + (i * payload) // CORRUPT_BYTES] ^= 0xFF
    return bytes(data)


class FaultInjector:
    """A sim fault hook firing injection rules at chosen points or at random (see the module doc)."""

    def __init__(self, rules: Iterable[InjectionRule]) -> None:
        self.rules = list(rules)
        self.point_index = -1
        self.fired: list[Fired] = []

    def __call__(self, resource: str, message: str) -> FaultAction | None:
        if self.point_index < 0:
            return None
        upper = message.upper()
        for rule in self.rules:
            if rule.kind == "write_failure" or rule.resource not in ("*", resource) or rule.match not in upper:
                continue
            if rule.at_point is not None:
                if rule.at_point != self.point_index or rule.remaining <= 0:
                    continue
                rule.remaining -= 1
            else:
                assert rule.rng is not None and rule.probability is not None
                if rule.rng.random() >= rule.probability:
                    continue
            return self._action(rule, resource, message)
        return None

    def _action(self, rule: InjectionRule, resource: str, message: str) -> FaultAction:
        fired = Fired(self.point_index, rule.kind, resource, message)
        if rule.kind not in ("truncated_block", "corrupted_block"):
            self.fired.append(fired)
        if rule.kind == "timeout":
            return FaultAction(drop_answer=True)
        if rule.kind == "slow_answer":
            return FaultAction(delay_s=rule.delay_s)
        if rule.kind == "dropped_session":
            return FaultAction(drop_session=True)
        if rule.kind == "scpi_error":
            return FaultAction(scpi_error=(rule.code, rule.message))
        change = _truncate if rule.kind == "truncated_block" else _corrupt

        def on_block_only(answer: bytes) -> bytes:
            if not _is_block(answer):
                if rule.at_point is not None:
                    rule.remaining += 1  # not a block: stay armed for the next answer
                return answer
            self.fired.append(fired)
            return change(answer)

        return FaultAction(answer_filter=on_block_only, keep_terminator=rule.kind != "truncated_block")

    def disarm_through(self, point_index: int) -> None:
        """Retire the at_point rules of points up to point_index: a resumed run starting at
        point k has had the faults of point k delivered already (they are why it stopped)."""
        for rule in self.rules:
            if rule.at_point is not None and rule.at_point <= point_index:
                rule.remaining = 0

    def write_fault(self, point_index: int) -> bool:
        """True when writing point `point_index` is to fail (a write_failure rule is due there)."""
        for rule in self.rules:
            if rule.kind == "write_failure" and rule.at_point == point_index and rule.remaining > 0:
                rule.remaining -= 1
                self.fired.append(Fired(point_index, "write_failure", "", ""))
                return True
        return False


def injector_from_specs(
    specs: Iterable[Any], measuring_role: str, resource_of: Callable[[str], str]
) -> FaultInjector | None:
    """The injector of a plan's bench.simulation.faults entries (None when there are none).

    specs: the plan's Injection entries; resource_of(role) gives the resource name of a role;
    an injection without a role hits the measuring instrument (measuring_role).
    """
    rules = []
    for spec in specs:
        resource = "*" if spec.kind == "write_failure" else resource_of(spec.role or measuring_role)
        rules.append(InjectionRule(
            kind=spec.kind, resource=resource, at_point=spec.at_point, probability=spec.probability,
            seed=spec.seed, times=spec.times, command=spec.command, code=spec.code, message=spec.message,
            delay_s=spec.delay_s,
        ))
    return FaultInjector(rules) if rules else None
