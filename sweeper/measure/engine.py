"""The stepped-sine sweep engine: per frequency, stimulate, settle, and measure in the plan's mode.

The engine talks to role interfaces only (source, scope or meter, clock) and hands each
finished point to a callback; it knows nothing of SCPI, files, terminals or limits (the run
judges each point it is handed: sweeper.verdict).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from datetime import datetime, timezone

from sweeper.instruments.roles import Capture, Scope, Source
from sweeper.measure.meter import measure_with_meter
from sweeper.measure.point import Measurement, Point
from sweeper.measure.schedule import Window, choose_window, incoherent_frequency_hz, settle_time_s
from sweeper.measure.scope_measure import measure_with_scope_readings
from sweeper.measure.settings import EngineSettings, EngineState, Instruments
from sweeper.measure.waveform import measure_with_scope

#: What changing the capture window costs in instrument transactions, s (a few LAN round trips:
#: common practice for SCPI over a network). The engine keeps a longer window when cheaper.
WINDOW_CHANGE_COST_S = 0.01


def _wall_utc() -> str:
    """Now, UTC ISO 8601 with milliseconds and Z."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


class SweepStopped(Exception):
    """Raised between points when the caller asked the sweep to stop."""


def prepare_source(source: Source, settings: EngineSettings) -> None:
    """Configure the sine stimulus and switch the output on."""
    source.configure_sine(settings.amplitude_vpp, settings.offset_v, settings.load_ohm)
    source.set_output(True)


def apply_window(f: float, settings: EngineSettings, scope: Scope, state: EngineState) -> Window:
    """Choose the capture window for f (Hz) and send it to the scope only when it changes."""
    window = choose_window(f, settings.min_cycles, settings.min_samples, scope.limits, state.window,
                           WINDOW_CHANGE_COST_S)
    if state.window is None or (state.window.sample_rate_hz, state.window.samples) != (
        window.sample_rate_hz, window.samples
    ):
        rate, samples = scope.set_window(window.sample_rate_hz, window.samples)
        state.window = Window(rate, samples, samples * f / rate)
    return state.window


def measure_point(
    f: float,
    settings: EngineSettings,
    instruments: Instruments,
    state: EngineState,
    model_response: Callable[[float], complex],
) -> tuple[Measurement, Capture | None]:
    """Measure one frequency f (Hz) in the settings' mode, stimulus already at f and settled."""
    if settings.mode == "meter":
        assert instruments.meter is not None
        return measure_with_meter(f, settings, instruments.meter), None
    assert instruments.scope is not None
    if settings.mode == "scope-measure":
        return measure_with_scope_readings(f, settings, instruments.scope, state, model_response), None
    return measure_with_scope(f, settings, instruments.scope, state, model_response)


def sweep(
    frequencies_hz: Sequence[float],
    settings: EngineSettings,
    instruments: Instruments,
    model_response: Callable[[float], complex],
    on_point: Callable[[Point, Capture | None], None],
    *,
    start_index: int = 0,
    should_stop: Callable[[], bool] | None = None,
    start_utc: datetime | None = None,
    elapsed_offset_s: float = 0.0,
    state: EngineState | None = None,
) -> EngineState:
    """Measure every frequency from start_index on, handing each finished (unjudged) point to on_point.

    model_response(f) gives the predicted complex response, used only to pick the first
    ranges of a point (autorange corrects any misprediction). Returns the engine state so a
    caller can continue. The source output is left as it was: the caller owns switching it off.
    A point records the frequency really used (a decade frequency may be nudged, IEEE Std
    1241 practice), which is the frequency it must be judged at. A point's time_utc is the wall
    clock when it was finished (start_utc is accepted for callers and not needed for that).
    """
    state = state or EngineState()
    t0 = instruments.clock.now_s() - elapsed_offset_s
    for index in range(start_index, len(frequencies_hz)):
        if should_stop is not None and should_stop():
            raise SweepStopped(f"stopped before point {index}")
        f = float(frequencies_hz[index])
        if instruments.scope is not None and settings.mode != "meter":
            window = apply_window(f, settings, instruments.scope, state)
            f = incoherent_frequency_hz(f, window.sample_rate_hz, window.samples)
        instruments.source.set_frequency(f)
        instruments.clock.sleep(
            settle_time_s(f, settings.settle_s, settings.settle_cycles, settings.settle_time_constants,
                          settings.slowest_time_constant_s)
        )
        measurement, capture = measure_point(f, settings, instruments, state, model_response)
        elapsed = instruments.clock.now_s() - t0
        point = Point(
            index=index,
            frequency_hz=f,
            elapsed_s=elapsed,
            time_utc=_wall_utc(),  # the wall clock: within the run's span on any bench clock, simulated too
            **measurement.fields(),
        )
        on_point(point, capture if settings.keep_waveforms else None)
    return state


__all__ = ["WINDOW_CHANGE_COST_S", "SweepStopped", "apply_window", "measure_point", "prepare_source", "sweep"]
