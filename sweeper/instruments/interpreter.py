"""The generic driver-file interpreter: runs a driver's operations over a Link.

No per-dialect code lives here: an operation is a list of steps from the driver file; each
step's template is filled by sweeper.instruments.template, sent through the Link, and its
answer parsed by the step's parser into named results.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from typing import Any

import numpy as np

from sweeper.instruments import ieee4882
from sweeper.instruments.driverfile import LoadedDriver, ParseSpec, Step
from sweeper.instruments.errors import InstrumentError, MalformedResponse, ScpiError
from sweeper.instruments.link import Link, parse_integers, parse_numbers
from sweeper.instruments.template import Value, render


#: SCPI 1999 Vol. 1, 7.2.1.5 (from memory): NaN is sent as 9.91E+37, +/-infinity as +/-9.9E+37.
SCPI_NAN = 9.91e37
SCPI_INF = 9.9e37


def scpi_special(value: float) -> float:
    """Map the SCPI stand-ins for NaN and infinity to float nan and inf."""
    if value == SCPI_NAN:
        return math.nan
    if abs(value) == SCPI_INF:
        return math.copysign(math.inf, value)
    return value


def parse_answer(spec: ParseSpec, answer: str | bytes) -> Any:
    """Parse one answer by its spec; ValueError (or BlockError) says what is wrong with it.

    Returns str, float, int, a float64 or int64 array, a samples array for a block, or a dict
    of named fields (numbers where they read as numbers, else stripped text).
    """
    if spec.kind == "block":
        if not isinstance(answer, bytes):
            raise ValueError("a block parser needs the raw block")
        return ieee4882.decode_samples(answer, spec.sample, spec.byte_order)  # type: ignore[arg-type]
    text = answer.decode("ascii", errors="replace") if isinstance(answer, bytes) else answer
    text = text.strip()
    if spec.kind == "text":
        return text
    if spec.kind == "float":
        try:
            return scpi_special(float(text))
        except ValueError:
            raise ValueError(f"{text!r} is not a number") from None
    if spec.kind == "int":
        try:
            return int(text)
        except ValueError:
            try:
                number = float(text)
            except ValueError:
                raise ValueError(f"{text!r} is not an integer") from None
            if not number.is_integer():
                raise ValueError(f"{text!r} is not an integer") from None
            return int(number)
    if spec.kind == "floats":
        numbers = parse_numbers(text)
        numbers[numbers == SCPI_NAN] = math.nan
        infinite = np.abs(numbers) == SCPI_INF
        numbers[infinite] = np.copysign(math.inf, numbers[infinite])
        return numbers
    if spec.kind == "ints":
        return parse_integers(text)
    if spec.kind == "fields":
        # Data elements of one response unit are separated by ',', the units of a compound
        # query's response by ';' (IEEE 488.2): either way each item is one field.
        items = [item.strip() for item in re.split(r"[,;]", text)]
        if len(items) != len(spec.fields):
            raise ValueError(f"answer has {len(items)} fields (separated by ',' or ';'), expected {len(spec.fields)} "
                             f"({', '.join(spec.fields)})")
        values: dict[str, Any] = {}
        for name, item in zip(spec.fields, items):
            try:
                values[name] = float(item)
            except ValueError:
                values[name] = item.strip('"')
        return values
    raise ValueError(f"unknown parser {spec.kind!r}")


class DriverSession:
    """One instrument driven by its driver file over one Link.

    Keeps the last text written for each step that names a `state`, so repeated settings are
    not resent; the memory is cleared by reset() and after any failed transaction.
    """

    def __init__(self, loaded: LoadedDriver, link: Link) -> None:
        self.loaded = loaded
        self.driver = loaded.driver
        self.link = link
        self._state: dict[str, str] = {}

    @property
    def role(self) -> str:
        """The driver's role: 'source' | 'scope' | 'meter'."""
        return self.driver.role

    def forget_state(self) -> None:
        """Forget what was last written for each state name (after reset or a fault)."""
        self._state.clear()

    def init(self) -> None:
        """Send the driver's init steps, then check the error queue."""
        self.forget_state()
        sent = self._run_steps(self.driver.init, {}, None, {})
        self.check_errors(sent, "init")

    def run(
        self,
        operation: str,
        params: Mapping[str, Value] | None = None,
        *,
        check_errors: bool = False,
        timeout_s: float | None = None,
    ) -> dict[str, Any]:
        """Run one operation of the role section with its placeholder values; returns what its
        steps stored. check_errors drains the error queue afterwards (ScpiError if not empty);
        timeout_s overrides the session timeout for its queries."""
        steps: list[Step] = getattr(self.driver.section.operations, operation)
        results: dict[str, Any] = {}
        sent = self._run_steps(steps, params or {}, timeout_s, results)
        if check_errors:
            self.check_errors(sent, operation)
        return results

    def has(self, operation: str) -> bool:
        """True when the driver gives the operation at least one step."""
        return bool(getattr(self.driver.section.operations, operation, None))

    def drain_errors(self) -> list[tuple[int, str]]:
        """Read the error queue empty; returns (code, text) pairs (none when the driver has no queue)."""
        query = self.driver.errors.query
        if query is None:
            return []
        try:
            return ieee4882.drain_errors(lambda: self.link.query(query), self.driver.errors.max_reads)
        except ieee4882.ErrorQueueStuck as exc:
            raise ScpiError(self.link.role, self.link.resource_name, query, str(exc), tuple(exc.errors)) from None
        except ieee4882.BlockError as exc:
            raise MalformedResponse(self.link.role, self.link.resource_name, query, str(exc)) from None

    def check_errors(self, sent: list[str], operation: str) -> None:
        """Drain the error queue after an operation; ScpiError names the command(s) sent."""
        errors = self.drain_errors()
        if not errors:
            return
        self.forget_state()
        command = sent[-1] if len(sent) == 1 else "; ".join(sent)
        listed = "; ".join(f'{code},"{text}"' for code, text in errors)
        raise ScpiError(
            self.link.role,
            self.link.resource_name,
            command,
            f"instrument reported {listed} after operation '{operation}'",
            tuple(errors),
        )

    def _run_steps(
        self, steps: list[Step], params: Mapping[str, Value], timeout_s: float | None, results: dict[str, Any]
    ) -> list[str]:
        sent: list[str] = []
        try:
            for step in steps:
                if step.write is not None:
                    text = render(step.write, params)
                    if step.state is not None and self._state.get(step.state) == text:
                        continue
                    self.link.write(text)
                    sent.append(text)
                    if step.state is not None:
                        self._state[step.state] = text
                    continue
                assert step.query is not None
                text = render(step.query, params)
                sent.append(text)
                if step.parse.kind == "block":
                    answer: str | bytes = self.link.query_block(text, timeout_s=timeout_s)
                else:
                    answer = self.link.query(text, timeout_s=timeout_s)
                if step.expect is not None:
                    got = answer.strip() if isinstance(answer, str) else answer
                    if got != step.expect:
                        raise MalformedResponse(
                            self.link.role, self.link.resource_name, text, f"expected {step.expect!r}, got {got!r}"
                        )
                try:
                    value = parse_answer(step.parse, answer)
                except ValueError as exc:
                    raise MalformedResponse(self.link.role, self.link.resource_name, text, str(exc)) from None
                if step.parse.kind == "fields":
                    results.update(value)
                elif step.store:
                    results[step.store] = value
        except InstrumentError:
            self.forget_state()
            raise
        return sent


def as_codes(value: Any) -> np.ndarray:
    """Waveform codes from a fetch result as a float64 array."""
    return np.asarray(value, dtype=np.float64)
