"""A small SCPI command parser and instrument base for the simulated instruments.

Headers follow SCPI 1999 conventions: case-insensitive, each node in its short form (the
upper-case letters of its mnemonic) or long form (the whole mnemonic), an optional leading
colon, optional numeric suffixes where a node takes one (``VIEW<n>`` matches VIEW1,
view2, VIEW = 1), and a trailing '?' for queries. IEEE 488.2 common commands (*RST, *CLS,
*ESR?, *OPC, *WAI, SYSTem:ERRor?) and the error queue live in `ScpiInstrument`.
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

# SCPI / IEEE 488.2 error codes used by the simulated instruments (SCPI 1999, chapter 21).
UNDEFINED_HEADER = (-113, "Undefined header")
HEADER_SUFFIX_OUT_OF_RANGE = (-114, "Header suffix out of range")
DATA_TYPE_ERROR = (-104, "Data type error")
PARAMETER_NOT_ALLOWED = (-108, "Parameter not allowed")
MISSING_PARAMETER = (-109, "Missing parameter")
DATA_OUT_OF_RANGE = (-222, "Data out of range")
ILLEGAL_PARAMETER_VALUE = (-224, "Illegal parameter value")
SETTINGS_CONFLICT = (-221, "Settings conflict")
DATA_STALE = (-230, "Data corrupt or stale")
QUEUE_OVERFLOW = (-350, "Queue overflow")

ERROR_QUEUE_DEPTH = 20
SCPI_NAN = 9.91e37  # SCPI "not a number" answer
_NRF = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")

# IEEE 488.2 standard event status register bits.
ESR_OPC, ESR_QYE, ESR_DDE, ESR_EXE, ESR_CME = 1, 4, 8, 16, 32


class ScpiError(Exception):
    """Raised by a handler: the message is rejected and (code, text) queued."""

    def __init__(self, error: tuple[int, str]) -> None:
        super().__init__(f'{error[0]},"{error[1]}"')
        self.error = error


def _node_regex(mnemonic: str) -> str:
    """Regex for one node: 'DETector<n>' -> '(?:DET|DETECTOR)(\\d*)'; '*IDN' -> '\\*IDN'."""
    suffix = mnemonic.endswith("<n>")
    word = mnemonic[:-3] if suffix else mnemonic
    short = "".join(ch for ch in word if not ch.islower())
    forms = {short.upper(), word.upper()}
    alternatives = "|".join(re.escape(f) for f in sorted(forms, key=len, reverse=True))
    return f"(?:{alternatives})" + (r"(\d*)" if suffix else "")


def compile_mnemonic(mnemonic: str) -> re.Pattern[str]:
    """Compiled, case-insensitive full-match regex for a header or parameter mnemonic."""
    nodes = mnemonic.lstrip(":").split(":")
    return re.compile(":?" + ":".join(_node_regex(n) for n in nodes), re.IGNORECASE)


@dataclass
class _Command:
    pattern: re.Pattern[str]
    setter: Callable[[tuple[int, ...], list[str]], None] | None
    getter: Callable[[tuple[int, ...], list[str]], str | bytes] | None


def split_message(message: str) -> tuple[str, bool, list[str]]:
    """Split a program message into (header without '?', is_query, parameters)."""
    text = message.strip()
    parts = text.split(None, 1)
    header = parts[0] if parts else ""
    rest = parts[1].strip() if len(parts) > 1 else ""
    is_query = header.endswith("?")
    if is_query:
        header = header[:-1]
    params = [p.strip() for p in rest.split(",")] if rest else []
    return header, is_query, params


def parse_number(text: str) -> float:
    """A decimal numeric parameter (NRf); ScpiError -104 when it is not one."""
    if not _NRF.match(text.strip()):
        raise ScpiError(DATA_TYPE_ERROR)
    return float(text)


def parse_choice(text: str, choices: dict[str, str]) -> str:
    """Match an enumerated parameter against {mnemonic: value}; ScpiError -224 when none fits."""
    for mnemonic, value in choices.items():
        if compile_mnemonic(mnemonic).fullmatch(text.strip()):
            return value
    raise ScpiError(ILLEGAL_PARAMETER_VALUE)


def parse_bool(text: str) -> bool:
    """ON|OFF|1|0."""
    return parse_choice(text, {"ON": "1", "OFF": "0", "1": "1", "0": "0"}) == "1"


def parse_suffixed(text: str, mnemonic: str, lo: int, hi: int) -> int:
    """A suffixed parameter such as LANE2 or VIEW1 (suffix defaults to 1); -224 or -114 on error."""
    m = compile_mnemonic(mnemonic).fullmatch(text.strip())
    if not m:
        raise ScpiError(ILLEGAL_PARAMETER_VALUE)
    n = int(m.group(1)) if m.group(1) else 1
    if not lo <= n <= hi:
        raise ScpiError(ILLEGAL_PARAMETER_VALUE)
    return n


def format_number(value: float) -> str:
    """A numeric answer: shortest text that reads back as the same float; SCPI NaN for nan/inf."""
    value = float(value)
    if not np.isfinite(value):
        return f"{SCPI_NAN:.2E}"
    return repr(value)


#: ISO 3 preferred numbers, series R10 (ratio 10^(1/10), rounded): a finer vertical-scale grid.
R10 = (1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0)


def steps_125(lo: float, hi: float, mantissas: tuple[float, ...] = (1.0, 2.0, 5.0)) -> np.ndarray:
    """All 1-2-5 sequence values in [lo, hi] (or another mantissa series per decade)."""
    decades = range(int(np.floor(np.log10(lo))) - 1, int(np.ceil(np.log10(hi))) + 1)
    values = [m * 10.0**d for d in decades for m in mantissas]
    values = [float(f"{v:.6g}") for v in values]
    return np.array([v for v in values if lo * (1 - 1e-9) <= v <= hi * (1 + 1e-9)])


def step_at_or_above(value: float, steps: np.ndarray) -> float:
    """Smallest step >= value (relative tolerance 1e-9); the largest step when none is."""
    ok = steps[steps >= value * (1 - 1e-9)]
    return float(ok[0]) if ok.size else float(steps[-1])


def step_at_or_below(value: float, steps: np.ndarray) -> float:
    """Largest step <= value (relative tolerance 1e-9); the smallest step when none is."""
    ok = steps[steps <= value * (1 + 1e-9)]
    return float(ok[-1]) if ok.size else float(steps[0])


class ScpiInstrument:
    """Base of a simulated SCPI instrument: command table, error queue, common commands.

    Subclasses register their headers with `add` and implement `reset` (the *RST state).
    """

    def __init__(self) -> None:
        self._commands: list[_Command] = []
        self._errors: deque[tuple[int, str]] = deque()
        self.esr = 0
        self.add("*RST", setter=self._rst)
        self.add("*CLS", setter=self._cls)
        self.add("*ESR", getter=self._esr_query)
        self.add("*OPC", setter=self._opc)
        self.add("*WAI", setter=lambda suffixes, params: self._no_params(params))
        self.add("SYSTem:ERRor", getter=self._error_query)
        self.add("SYSTem:ERRor:NEXT", getter=self._error_query)

    # --- command table

    def add(
        self,
        mnemonic: str,
        setter: Callable[[tuple[int, ...], list[str]], None] | None = None,
        getter: Callable[[tuple[int, ...], list[str]], str | bytes] | None = None,
    ) -> None:
        """Register a header; handlers get (numeric suffixes, parameters)."""
        self._commands.append(_Command(compile_mnemonic(mnemonic), setter, getter))

    def handle(self, message: str) -> str | bytes | None:
        """Execute one program message: its answer, or None for a command without one.

        Raises LookupError when no registered header (in this query or command form)
        matches, so that the caller can try its static tables before queueing -113.
        """
        header, is_query, params = split_message(message)
        for command in self._commands:
            m = command.pattern.fullmatch(header)
            if not m:
                continue
            handler = command.getter if is_query else command.setter
            if handler is None:
                break
            suffixes = tuple(int(g) if g else 1 for g in m.groups())
            try:
                return handler(suffixes, params)
            except ScpiError as e:
                self.queue_error(e.error)
                return None
        raise LookupError(header)

    # --- error queue and status

    def queue_error(self, error: tuple[int, str]) -> None:
        """Append to the error queue (SCPI: on overflow the newest entry becomes -350) and set ESR."""
        code = error[0]
        if -199 <= code <= -100:
            self.esr |= ESR_CME
        elif -299 <= code <= -200:
            self.esr |= ESR_EXE
        elif -399 <= code <= -300 or code > 0:
            self.esr |= ESR_DDE
        elif -499 <= code <= -400:
            self.esr |= ESR_QYE
        if len(self._errors) >= ERROR_QUEUE_DEPTH:
            self._errors[-1] = QUEUE_OVERFLOW
            return
        self._errors.append(error)

    def pop_error(self) -> str:
        """Oldest queued error as <code>,"<text>" (FIFO); 0,"No error" when empty."""
        code, text = self._errors.popleft() if self._errors else (0, "No error")
        return f'{code},"{text}"'

    def clear_status(self) -> None:
        """*CLS: empty the error queue and the event status register."""
        self._errors.clear()
        self.esr = 0

    def reset(self) -> None:
        """*RST: default settings (the error queue is kept, IEEE 488.2)."""
        raise NotImplementedError

    def _rst(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        self.reset()

    def _cls(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        self.clear_status()

    def _esr_query(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        self._no_params(params)
        value, self.esr = self.esr, 0
        return str(value)

    def _opc(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        self.esr |= ESR_OPC

    def _error_query(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        self._no_params(params)
        return self.pop_error()

    # --- parameter helpers for subclasses

    @staticmethod
    def _no_params(params: list[str]) -> None:
        if params:
            raise ScpiError(PARAMETER_NOT_ALLOWED)

    @staticmethod
    def one_param(params: list[str]) -> str:
        """The single parameter of a setting; -109 when missing, -108 when more than one."""
        if not params or params == [""]:
            raise ScpiError(MISSING_PARAMETER)
        if len(params) > 1:
            raise ScpiError(PARAMETER_NOT_ALLOWED)
        return params[0]

    def clamp(self, value: float, lo: float, hi: float) -> float:
        """Clamp a numeric setting into [lo, hi], queueing -222 when it had to."""
        if value < lo or value > hi:
            self.queue_error(DATA_OUT_OF_RANGE)
            return min(max(value, lo), hi)
        return value

    @staticmethod
    def check_suffix(n: int, lo: int, hi: int) -> int:
        """A header's numeric suffix must lie in [lo, hi]; -114 otherwise."""
        if not lo <= n <= hi:
            raise ScpiError(HEADER_SUFFIX_OUT_OF_RANGE)
        return n
