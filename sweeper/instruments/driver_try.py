"""`sweeper driver try`: a short self-test of a driver file against a live instrument.

Steps: open the session with the driver's connection settings, check *IDN? against the
identify patterns (nothing more is sent to an instrument the driver does not recognise), run
the init sequence, then per role: a source sets a frequency and reads it back (its output is
never switched on, and is switched off at the end); a scope sets ranges and a window, captures
once and reports samples and scaling (and its own measurements when the driver has them); a
meter measures once. Last, the error queue is read. Each step reports ok, failed or skipped.
"""

from __future__ import annotations

import math
import re
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from sweeper.instruments import scales
from sweeper.instruments.driver_roles import DriverMeter, DriverScope, DriverSource, make_role
from sweeper.instruments.driverfile import LoadedDriver
from sweeper.instruments.interpreter import DriverSession
from sweeper.instruments.link import Link
from sweeper.instruments.transport import prepare_session

OK, FAILED, SKIPPED = "ok", "failed", "skipped"
#: Scope full-scale span asked for the test capture, V: large enough not to clip a typical
#: bench signal of a few volts (common practice: start on a coarse range).
TRY_FULL_SCALE_V = 10.0
#: Test capture window: 1 MSa/s, 10,000 samples (clamped into the driver's limits).
TRY_SAMPLE_RATE_HZ = 1e6
TRY_SAMPLES = 10_000
#: Read-back frequency must agree within this relative amount (a generator stores it to far
#: better than 1 ppm; the text round trip is exact for our number format).
READBACK_RTOL = 1e-6


@dataclass
class TryStep:
    """One step of the self-test."""

    name: str
    status: str  # ok | failed | skipped
    detail: str
    seconds: float = 0.0


class _Steps:
    """Runs steps in order, recording each; after a failed 'gate' step the rest are skipped."""

    def __init__(self) -> None:
        self.done: list[TryStep] = []
        self.blocked = ""

    def run(self, name: str, action: Callable[[], str], gate: bool = False) -> bool:
        if self.blocked:
            self.done.append(TryStep(name, SKIPPED, self.blocked))
            return False
        start = time.perf_counter()
        try:
            detail = action()
            status = OK
        except Exception as exc:  # noqa: BLE001 - every failure is a result here, never a crash
            detail, status = _describe(exc), FAILED
        self.done.append(TryStep(name, status, detail, time.perf_counter() - start))
        if status == FAILED and gate:
            self.blocked = f"not run: step '{name}' failed"
        return status == OK

    def skip(self, name: str, why: str) -> None:
        self.done.append(TryStep(name, SKIPPED, why))


def _describe(exc: Exception) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text.splitlines()[0] if len(text) < 400 else text[:397] + "..."


def _span(low: float, high: float, unit: str) -> str:
    return f"{low:.4g} .. {high:.4g} {unit}"


def try_driver(
    loaded: LoadedDriver,
    rm: Any,
    resource: str,
    *,
    timeout_s: float | None = None,
    frequency_hz: float = 1e3,
) -> list[TryStep]:
    """Self-test one driver file on one resource of a resource manager; the steps, in order."""
    driver = loaded.driver
    conn = driver.connection
    timeout = conn.timeout_s if timeout_s is None else timeout_s
    steps = _Steps()
    box: dict[str, Any] = {}

    def open_session() -> str:
        resource_obj = rm.open_resource(
            resource,
            read_termination=conn.read_termination,
            write_termination=conn.write_termination,
            timeout=max(1, int(round(timeout * 1000))),
            chunk_size=conn.chunk_size,
        )
        prepare_session(resource_obj)
        box["link"] = Link(resource_obj, driver.role)
        return (f"read termination {conn.read_termination!r}, write termination {conn.write_termination!r}, "
                f"timeout {timeout:g} s, chunk {conn.chunk_size} B")

    def identity() -> str:
        idn = box["link"].query("*IDN?").strip()
        if not driver.identify:
            return f"{idn!r} (the driver has no identify pattern: not checked)"
        matched = [p for p in driver.identify if re.search(p, idn)]
        if not matched:
            raise ValueError(f"answered {idn!r}; no identify pattern matches ({', '.join(driver.identify)})")
        return f"{idn!r} matches {matched[0]!r}"

    def init() -> str:
        session = DriverSession(loaded, box["link"])
        session.init()
        box["role"] = make_role(session)
        return f"{len(driver.init)} init step(s) sent, error queue empty"

    try:
        steps.run("open", open_session, gate=True)
        steps.run("identity", identity, gate=True)
        steps.run("init", init, gate=True)
        role = box.get("role")  # None when a step above failed: the role's steps are then listed as skipped
        if driver.role == "source":
            _try_source(steps, role, frequency_hz)
        elif driver.role == "scope":
            _try_scope(steps, role)
        else:
            _try_meter(steps, role, frequency_hz)
        steps.run("error queue", lambda: _error_queue(box["role"]))
    finally:
        if isinstance(box.get("role"), DriverSource):
            steps.blocked = ""
            steps.run("output off", lambda: (box["role"].set_output(False), "output switched off")[1])
        link = box.get("link")
        if link is not None:
            link.close()
    return steps.done


def _error_queue(role: Any) -> str:
    errors = role.drain_errors()
    if errors:
        raise ValueError("instrument reported " + "; ".join(f'{code},"{text}"' for code, text in errors))
    return "empty" if role.driver.driver.errors.query else "the driver has no error query: not checked"


def _try_source(steps: _Steps, source: DriverSource | None, frequency_hz: float) -> None:
    sent: list[float] = []

    def set_frequency() -> str:
        assert source is not None
        lim = source.limits
        f = scales.clamp(frequency_hz, lim.frequency_min_hz, lim.frequency_max_hz)
        source.set_frequency(f)
        sent.append(f)
        return f"{f:g} Hz sent (output stays off)"

    def read_back() -> str:
        assert source is not None
        got = source.session.run("get_frequency").get("frequency_hz")
        if not isinstance(got, (int, float)) or not math.isclose(got, sent[0], rel_tol=READBACK_RTOL):
            raise ValueError(f"read back {got!r}, sent {sent[0]:g} Hz")
        return f"{got:g} Hz"

    if not steps.run("set frequency", set_frequency) and not steps.blocked:
        steps.skip("read back frequency", "not run: setting the frequency failed")
    elif source is not None and not source.session.has("get_frequency"):
        steps.skip("read back frequency", "the driver has no get_frequency operation")
    else:
        steps.run("read back frequency", read_back)


def _try_scope(steps: _Steps, scope: DriverScope | None) -> None:
    def set_ranges() -> str:
        assert scope is not None
        span_wanted = min(TRY_FULL_SCALE_V, max(scope.limits.full_scales_v))
        spans = [scope.set_range(ch, span_wanted) for ch in (1, 2)]
        return f"full scale {spans[0]:g} V (channel 1), {spans[1]:g} V (channel 2)"

    def set_window() -> str:
        assert scope is not None
        rate, n = scope.set_window(TRY_SAMPLE_RATE_HZ, TRY_SAMPLES)
        return f"{rate:g} Sa/s x {n} samples"

    def capture() -> str:
        assert scope is not None
        cap = scope.capture()
        rows = cap.volts
        parts = [f"2 x {rows.shape[1]} samples, interval {cap.sample_interval_s:g} s"]
        for ch in (0, 1):
            parts.append(f"ch{ch + 1} {_span(float(rows[ch].min()), float(rows[ch].max()), 'V')}"
                         f"{' (clipped)' if cap.clipped[ch] else ''}")
        return "; ".join(parts)

    def scaling() -> str:
        assert scope is not None
        known = scope._scaling.get(1) or scope._read_scaling(1)  # what the capture used for channel 1
        return "channel 1: " + ", ".join(f"{k} {v:g}" for k, v in known.items())

    def measure() -> str:
        assert scope is not None
        reading = scope.measure()
        return (f"Vpp {reading.amplitude_in_vpp:g} V (ch1), {reading.amplitude_out_vpp:g} V (ch2), "
                f"phase {reading.phase_deg:g} deg")

    steps.run("set ranges", set_ranges)
    steps.run("set window", set_window)
    if not steps.run("capture", capture) and not steps.blocked:
        steps.skip("scaling", "not run: the capture failed")
    else:
        steps.run("scaling", scaling)
    if scope is not None and not scope.can_measure():
        steps.skip("scope measurements", "the driver has no measure_amplitude / measure_phase")
    else:
        steps.run("scope measurements", measure)


def _try_meter(steps: _Steps, meter: DriverMeter | None, frequency_hz: float) -> None:
    def measure() -> str:
        assert meter is not None
        lim = meter.limits
        f = scales.clamp(frequency_hz, lim.frequency_min_hz, lim.frequency_max_hz)
        reading = meter.measure(f)
        return f"at {f:g} Hz: gain {reading.gain_db:g} dB, phase {reading.phase_deg:g} deg"

    steps.run("measure", measure)


def any_failed(steps: list[TryStep]) -> bool:
    """True when a step failed (skipped steps do not count)."""
    return any(s.status == FAILED for s in steps)


__all__ = ["FAILED", "OK", "SKIPPED", "TryStep", "any_failed", "try_driver"]
