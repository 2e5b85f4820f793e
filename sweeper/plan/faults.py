"""The plan's fault handling: a policy per fault kind, and faults to inject on a simulated bench.

Top-level section ``faults`` (every key optional; a kind given in part keeps its other defaults)::

    faults:
      timeout:            {retries: 2, backoff: 0.5 s, reopens: 1, then: abort}
      connection_lost:    {retries: 0, backoff: 1 s,   reopens: 2, then: abort}
      malformed_response: {retries: 2, backoff: 0 s,   reopens: 0, then: skip}
      scpi_error:         {retries: 0, backoff: 0 s,   reopens: 0, then: abort}
      clipping:           {action: flag}          # flag | abort
      low_signal:         {action: flag}          # flag | abort
      write_failure:      {retries: 0, backoff: 1 s, min_free_mb: 16}   # then the run stops safely
      check_errors: configuration                 # configuration | each-point

Per point and fault kind: up to `retries` re-measurements on the same session, `backoff` apart
(doubling each time, on the bench clock); then up to `reopens` session reopens (configuration
re-applied, the point measured again, retries counted afresh); then `then`: `skip` writes the
point flagged SKIPPED with NaN values and goes on, `abort` stops the run safely.

``bench.simulation.faults`` lists faults to inject on a simulated bench::

    - {kind: timeout, role: scope, at_point: 3}           # the first query of point 3 gets no answer
    - {kind: corrupted_block, probability: 2 %, seed: 9}  # any block answer, at random
    - {kind: write_failure, at_point: 5}                  # writing point 5 fails (disk full)
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, BeforeValidator, ConfigDict, Field, model_validator

from sweeper.located import Finding, RuleError, raise_located
from sweeper.plan.units import Fraction, TimeS

FAULT_KINDS = ("timeout", "connection_lost", "malformed_response", "scpi_error")

_DEFAULTS: dict[str, dict[str, Any]] = {
    "timeout": {"retries": 2, "backoff": 0.5, "reopens": 1, "then": "abort"},
    "connection_lost": {"retries": 0, "backoff": 1.0, "reopens": 2, "then": "abort"},
    "malformed_response": {"retries": 2, "backoff": 0.0, "reopens": 0, "then": "skip"},
    "scpi_error": {"retries": 0, "backoff": 0.0, "reopens": 0, "then": "abort"},
    "clipping": {"action": "flag"},
    "low_signal": {"action": "flag"},
    "write_failure": {"retries": 0, "backoff": 1.0, "min_free_mb": 16},
}


def _rule(value: object, tail: str) -> Exception:
    return RuleError(value, tail)


def _whole(value: object) -> object:
    if isinstance(value, bool):
        raise RuleError(value, "is true/false, not a number", kind="not_a_number")
    return value


def _at_least(limit: int):
    def check(value: int) -> int:
        if value < limit:
            raise _rule(value, f"must be at least {limit}")
        return value

    return AfterValidator(check)


def _non_negative_time(value: float) -> float:
    if not value >= 0.0 or value == float("inf"):
        raise _rule(value, "must be a finite time of at least 0 s")
    return value


def _probability(value: float) -> float:
    if not 0.0 < value <= 1.0:
        raise _rule(value, "must be above 0 % and at most 100 %")
    return value


Count = Annotated[int, BeforeValidator(_whole), _at_least(0)]
Backoff = Annotated[TimeS, AfterValidator(_non_negative_time)]


class _Part(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)


class FaultPolicy(_Part):
    """How to handle one kind of instrument fault at a point."""

    retries: Count = 0
    backoff_s: Backoff = Field(0.0, alias="backoff")  # first wait; doubles with each retry, s
    reopens: Count = 0
    then: Literal["skip", "abort"] = "abort"


class SignalPolicy(_Part):
    """What a point still clipped after autorange, or with a signal below the noise, does to the run."""

    action: Literal["flag", "abort"] = "flag"


class WritePolicy(_Part):
    """A failed journal write: retries on the same file, then the run stops safely. The run also
    stops (safely, before a write can fail half-way) when the output folder's disk has less
    than min_free_mb left."""

    retries: Count = 0
    backoff_s: Backoff = Field(1.0, alias="backoff")  # real time, s
    min_free_mb: Count = 16  # MB (10^6 bytes)


def _with_defaults(kind: str):
    def merge(value: object) -> object:
        if value is None:
            return dict(_DEFAULTS[kind])
        if isinstance(value, dict):
            return {**_DEFAULTS[kind], **value}
        return value

    return BeforeValidator(merge)


class FaultPolicies(_Part):
    """The plan's `faults` section: one policy per fault kind."""

    timeout: Annotated[FaultPolicy, _with_defaults("timeout")] = Field(
        default_factory=lambda: FaultPolicy(**_DEFAULTS["timeout"]))
    connection_lost: Annotated[FaultPolicy, _with_defaults("connection_lost")] = Field(
        default_factory=lambda: FaultPolicy(**_DEFAULTS["connection_lost"]))
    malformed_response: Annotated[FaultPolicy, _with_defaults("malformed_response")] = Field(
        default_factory=lambda: FaultPolicy(**_DEFAULTS["malformed_response"]))
    scpi_error: Annotated[FaultPolicy, _with_defaults("scpi_error")] = Field(
        default_factory=lambda: FaultPolicy(**_DEFAULTS["scpi_error"]))
    clipping: Annotated[SignalPolicy, _with_defaults("clipping")] = Field(default_factory=SignalPolicy)
    low_signal: Annotated[SignalPolicy, _with_defaults("low_signal")] = Field(default_factory=SignalPolicy)
    write_failure: Annotated[WritePolicy, _with_defaults("write_failure")] = Field(default_factory=WritePolicy)
    # each-point: read every instrument's error queue after each point, so an error is caught
    # at the point (and the commands) that caused it, at one query per instrument per point.
    check_errors: Literal["configuration", "each-point"] = "configuration"

    def policy(self, kind: str) -> FaultPolicy:
        """The policy of an instrument fault kind (one of FAULT_KINDS)."""
        return getattr(self, kind)


class Injection(_Part):
    """One fault to inject on a simulated bench: at a chosen point, or at random with a seed."""

    kind: Literal[
        "timeout", "dropped_session", "scpi_error", "truncated_block", "corrupted_block", "slow_answer",
        "write_failure",
    ]
    role: Literal["source", "scope", "meter"] | None = None  # default: the measuring instrument
    at_point: Annotated[int, BeforeValidator(_whole), _at_least(0)] | None = None
    probability: Annotated[Fraction, AfterValidator(_probability)] | None = None
    seed: Count = 0
    times: Annotated[int, BeforeValidator(_whole), _at_least(1)] = 1  # at_point: messages hit in a row
    command: str = ""  # only messages containing this text (case-insensitive); default per kind
    code: int = -200  # scpi_error: the SCPI error code queued
    message: str = "Execution error"  # scpi_error: its text
    delay_s: Backoff = Field(1.0, alias="delay")  # slow_answer: how long the instrument is busy, s

    @model_validator(mode="after")
    def _when(self) -> Injection:
        findings = []
        if (self.at_point is None) == (self.probability is None):
            findings.append(Finding((), "give at_point or probability (one of them)", kind="conflict"))
        if self.kind == "write_failure":
            for name in ("role", "command"):
                if name in self.model_fields_set:
                    findings.append(Finding((name,), "does not apply to a write_failure", at="key", kind="conflict"))
            if self.probability is not None:
                findings.append(Finding(("probability",), "a write_failure is injected at_point only", at="key", kind="conflict"))
        if findings:
            raise_located(findings)
        return self
