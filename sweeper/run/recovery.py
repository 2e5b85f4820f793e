"""Bringing a bench back after a fault, or after a restart: clear or reopen sessions, re-apply
the configuration a sweep relies on, and rebuild the engine's carried state from stored points.

Used by the supervised sweep (sweeper.run.supervise) between attempts at a point, and by
`sweeper resume` (sweeper.run.resume) before it continues an interrupted run.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from sweeper.instruments.errors import ConnectionLost, IdentityMismatch
from sweeper.instruments.scales import tidy
from sweeper.instruments.transport import prepare_session
from sweeper.measure.engine import prepare_source
from sweeper.measure.settings import EngineSettings, EngineState, Instruments
from sweeper.measure.point import Flag, Point
from sweeper.measure.schedule import Window

ROLES = ("source", "scope", "meter")


def role_adapters(bench: Any) -> dict[str, Any]:
    """The bench's open role adapters by role name."""
    return {role: getattr(bench, role) for role in ROLES if getattr(bench, role, None) is not None}


def clear_session(adapter: Any) -> None:
    """Device clear (VISA viClear: drop unread answers and pending input), then read the error
    queue empty, so a late answer cannot be taken for the next query's. ConnectionLost when the
    session cannot even do that."""
    link = adapter.link
    try:
        link.resource.clear()
    except Exception as exc:  # noqa: BLE001 - any failure here means the session is unusable
        raise ConnectionLost(link.role, link.resource_name, "device clear", f"device clear failed: {exc}") from None
    adapter.drain_errors()


def reopen_session(bench: Any, role: str) -> None:
    """Close the role's VISA session and open a new one to the same resource, in place (the
    role adapter and its Link stay the same objects): *IDN? must give the identity the bench
    opened with (IdentityMismatch otherwise), then the driver's init steps run and every
    cached setting is forgotten."""
    adapter = role_adapters(bench)[role]
    link = adapter.link
    conn = adapter.driver.driver.connection
    try:
        timeout_s = link.timeout_s
    except Exception:  # noqa: BLE001 - a dead session may not tell its timeout
        timeout_s = conn.timeout_s
    link.close()
    try:
        resource = bench.resource_manager.open_resource(
            link.resource_name,
            read_termination=conn.read_termination,
            write_termination=conn.write_termination,
            timeout=max(1, int(round(timeout_s * 1000))),
            chunk_size=conn.chunk_size,
        )
    except Exception as exc:  # noqa: BLE001 - reported as the fault it is
        raise ConnectionLost(role, link.resource_name, "", f"could not reopen the session ({exc})") from None
    prepare_session(resource)  # raw sockets: no delayed-ACK stalls, a clear that ends (instruments.transport)
    link.resource = resource
    link.closed = False
    idn = link.query("*IDN?").strip()
    expected = next((i.idn for i in bench.identities if i.role == role), None)
    if expected is not None and idn != expected:
        raise IdentityMismatch(role, link.resource_name, "*IDN?",
                               f"answered {idn!r} after reopening, not {expected!r}: another instrument")
    adapter.session.init()
    forget(adapter)


def forget(adapter: Any) -> None:
    """Forget every setting the adapter cached, so the next request of each is sent again."""
    drop = getattr(adapter, "_forget", None)  # the driver roles' cache reset (no reset sent)
    if drop is not None:
        drop()


def reapply(instruments: Instruments, settings: EngineSettings, state: EngineState) -> None:
    """Send again everything the next point relies on: the source's sine and output on, the
    scope's capture window and vertical ranges from the engine state (caches forgotten first,
    so the instruments really get them)."""
    for adapter in (instruments.source, instruments.scope, instruments.meter):
        if adapter is not None:
            forget(adapter)
    prepare_source(instruments.source, settings)
    scope = instruments.scope
    if scope is None:
        return
    if state.window is not None:
        rate_hz, samples = scope.set_window(state.window.sample_rate_hz, state.window.samples)
        state.window = Window(rate_hz, samples, state.window.cycles)
    for channel in (1, 2):
        span = state.spans_v[channel - 1]
        if math.isfinite(span) and span > 0:
            state.spans_v[channel - 1] = scope.set_range(channel, span)


def engine_state_from_points(points: Sequence[Point], planned_frequency_hz: Sequence[float]) -> EngineState:
    """The engine state after the last measured (not skipped) point: its ranges, capture window
    (rate tidied to 12 digits: the stored rate is 1 / sample interval, which can differ from the
    rate by an ulp), frequency and fitted amplitudes; a fresh state when there is none."""
    state = EngineState()
    measured = [p for p in points if not p.flags & Flag.SKIPPED]
    if not measured:
        return state
    last = measured[-1]
    state.spans_v = [float(last.range_in_v), float(last.range_out_v)]
    state.last_frequency_hz = float(last.frequency_hz)
    state.last_amplitudes_v = (float(last.amplitude_in_v), float(last.amplitude_out_v))
    if last.samples > 0 and math.isfinite(last.sample_rate_hz) and last.sample_rate_hz > 0:
        rate_hz = tidy(float(last.sample_rate_hz))
        nominal_hz = float(planned_frequency_hz[last.index]) if last.index < len(planned_frequency_hz) else last.frequency_hz
        state.window = Window(rate_hz, int(last.samples), int(last.samples) * nominal_hz / rate_hz)
    return state


__all__ = [
    "clear_session",
    "engine_state_from_points",
    "forget",
    "reapply",
    "reopen_session",
    "role_adapters",
]
