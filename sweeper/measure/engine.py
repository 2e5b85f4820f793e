"""The stepped-sine sweep engine: per frequency, stimulate, settle, autorange, capture, fit, judge.

The engine talks to role interfaces only (source, scope or meter, clock) and hands each
finished point to a callback; it knows nothing of SCPI, files or terminals.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone

import numpy as np

from sweeper.instruments.roles import Capture, Clock, Meter, Scope, Source
from sweeper.verdict import Limits, judge_point
from sweeper.measure.gainphase import GainPhase, average_gain_phase, gain_phase
from sweeper.measure.point import Flag, Point
from sweeper.measure.schedule import HARMONICS, Window, choose_window, incoherent_frequency_hz, settle_time_s
from sweeper.measure.sinefit import SineFit, fit_sine, fit_sine_4

#: Fraction of the vertical span the autorange aims the signal's peak-to-peak (plus offset) at.
RANGE_FILL = 0.9
#: Below this fraction of the span the signal is "too small" and a smaller range is tried.
RANGE_SMALL = 0.35
#: Autorange re-captures per acquisition before giving up and flagging.
AUTORANGE_TRIES = 6
#: THD above this (dB) flags a point as distorted (1 %: common practice for a linear DUT test).
THD_FLAG_DB = -40.0
#: SNR below this (dB) flags a channel as low signal.
SNR_FLAG_DB = 20.0
#: What changing the capture window costs in instrument transactions, s (a few LAN round trips:
#: common practice for SCPI over a network). The engine keeps a longer window when cheaper.
WINDOW_CHANGE_COST_S = 0.01


@dataclass(frozen=True)
class EngineSettings:
    """Everything the engine needs from the plan, as plain numbers (SI units)."""

    amplitude_vpp: float
    offset_v: float = 0.0
    load_ohm: float | None = None
    min_cycles: float = 8.0
    min_samples: int = 2000
    settle_s: float = 0.0
    settle_cycles: float = 2.0
    settle_time_constants: float = 5.0
    slowest_time_constant_s: float = 0.0
    averages: int = 1
    max_averages: int = 8
    target_gain_db: float | None = None
    target_phase_deg: float | None = None
    autorange: bool = True
    fit: str = "three-parameter"
    decision_rule: str = "guarded"
    coverage_factor: float = 2.0
    keep_waveforms: bool = False
    mode: str = "waveform"  # waveform | meter | scope-measure (the plan's bench.mode)


@dataclass
class Instruments:
    """The roles a sweep uses; scope for waveform mode, meter for meter mode."""

    source: Source
    clock: Clock
    scope: Scope | None = None
    meter: Meter | None = None


@dataclass
class EngineState:
    """What carries from one point to the next (ranges, last amplitudes, counts)."""

    spans_v: list[float] = field(default_factory=lambda: [math.nan, math.nan])
    window: Window | None = None
    last_frequency_hz: float = math.nan
    last_amplitudes_v: tuple[float, float] = (math.nan, math.nan)


class SweepStopped(Exception):
    """Raised between points when the caller asked the sweep to stop."""


def prepare_source(source: Source, settings: EngineSettings) -> None:
    """Configure the sine stimulus and switch the output on."""
    source.configure_sine(settings.amplitude_vpp, settings.offset_v, settings.load_ohm)
    source.set_output(True)


def expected_input_amplitude_v(settings: EngineSettings) -> float:
    """Upper estimate of the DUT input peak amplitude, V.

    With the source set for a 50 Ohm load and a high-impedance DUT the real voltage is up to
    twice the displayed one (common practice), so autorange starts from that.
    """
    factor = 2.0 if settings.load_ohm is not None else 1.0
    return settings.amplitude_vpp / 2 * factor


def span_for(amplitude_v: float, offset_v: float) -> float:
    """Vertical full-scale span (V) that puts a sine of this peak amplitude at RANGE_FILL."""
    return 2.0 * (abs(amplitude_v) + abs(offset_v)) / RANGE_FILL


def sweep(
    frequencies_hz: Sequence[float],
    settings: EngineSettings,
    instruments: Instruments,
    limits: Limits,
    model_response: Callable[[float], complex],
    on_point: Callable[[Point, Capture | None], None],
    *,
    start_index: int = 0,
    should_stop: Callable[[], bool] | None = None,
    start_utc: datetime | None = None,
    elapsed_offset_s: float = 0.0,
    state: EngineState | None = None,
) -> EngineState:
    """Measure every frequency from start_index on, handing each finished point to on_point.

    model_response(f) gives the predicted complex response, used only to pick the first
    ranges of a point (autorange corrects any misprediction). Returns the engine state so a
    caller can continue. The source output is left as it was: the caller owns switching it off.
    """
    state = state or EngineState()
    start_utc = start_utc or datetime.now(timezone.utc)
    t0 = instruments.clock.now_s() - elapsed_offset_s
    for index in range(start_index, len(frequencies_hz)):
        if should_stop is not None and should_stop():
            raise SweepStopped(f"stopped before point {index}")
        f = float(frequencies_hz[index])
        window = None
        if instruments.scope is not None:
            window = apply_window(f, settings, instruments.scope, state)
            f = incoherent_frequency_hz(f, window.sample_rate_hz, window.samples)
        instruments.source.set_frequency(f)
        instruments.clock.sleep(
            settle_time_s(f, settings.settle_s, settings.settle_cycles, settings.settle_time_constants,
                          settings.slowest_time_constant_s)
        )
        if window is None:
            assert instruments.meter is not None
            values, capture = measure_with_meter(f, settings, instruments.meter), None
        elif settings.mode == "scope-measure":
            from sweeper.measure.scope_measure import measure_with_scope_readings

            values, capture = measure_with_scope_readings(f, settings, instruments.scope, state, model_response), None
        else:
            assert instruments.scope is not None
            values, capture = measure_with_scope(f, settings, instruments.scope, state, model_response)
        elapsed = instruments.clock.now_s() - t0
        point = Point(
            index=index,
            frequency_hz=f,
            elapsed_s=elapsed,
            time_utc=(start_utc + timedelta(seconds=elapsed)).isoformat(timespec="milliseconds"),
            **values,
            **limits.at(index),
        )
        judged = judge_point(point.gain_db, point.phase_deg, point.u_gain_db, point.u_phase_deg,
                             limits.at(index), settings.decision_rule, settings.coverage_factor)
        point.verdict = int(judged["verdict"])
        point.margin_gain_db = float(judged["margin_gain_db"])
        point.margin_phase_deg = float(judged["margin_phase_deg"])
        on_point(point, capture if settings.keep_waveforms else None)
    return state


def _fit(capture: Capture, frequency_hz: float, settings: EngineSettings) -> list[SineFit]:
    """Fit both channels at the known frequency (three-parameter) or refine it (four-parameter)."""
    nyquist_harmonics = int((0.5 / capture.sample_interval_s) / frequency_hz - 1e-9)
    harmonics = max(1, min(HARMONICS, nyquist_harmonics))
    if settings.fit == "four-parameter":
        return [fit_sine_4(row, frequency_hz, capture.sample_interval_s) for row in capture.volts]
    return fit_sine(capture.volts, frequency_hz, capture.sample_interval_s, harmonics=harmonics)


def _first_spans(
    f: float, settings: EngineSettings, state: EngineState, model_response: Callable[[float], complex]
) -> list[float]:
    """Spans to start a point from: the previous point's amplitudes moved by the model's change."""
    if not math.isnan(state.last_frequency_hz) and all(a > 0 for a in state.last_amplitudes_v):
        a_in, a_out = state.last_amplitudes_v
        h_prev = abs(model_response(state.last_frequency_hz))
        h_now = abs(model_response(f))
        if h_prev > 0 and math.isfinite(h_now / h_prev):
            a_out = a_out * h_now / h_prev
        return [span_for(a_in, settings.offset_v), span_for(a_out, settings.offset_v)]
    a_in = expected_input_amplitude_v(settings)
    a_out = a_in * abs(model_response(f))
    return [span_for(a_in, settings.offset_v), span_for(max(a_out, 1e-6), settings.offset_v)]


def _acquire(
    f: float, settings: EngineSettings, scope: Scope, state: EngineState, window: Window
) -> tuple[Capture, list[SineFit], int, int]:
    """One capture with autorange: returns the capture, its fits, retries used and flags."""
    flags = 0
    retries = 0
    while True:
        capture = scope.capture()
        fits = _fit(capture, f, settings)
        if not settings.autorange:
            break
        changed = False
        smallest = min(scope.limits.full_scales_v)
        largest = max(scope.limits.full_scales_v)
        for ch in (0, 1):
            span = capture.full_scale_v[ch]
            if capture.clipped[ch]:
                if span < largest:
                    wanted = max(span * 2.5, span_for(fits[ch].amplitude_v, settings.offset_v))
                    state.spans_v[ch] = scope.set_range(ch + 1, min(wanted, largest))
                    changed = True
            elif 2 * fits[ch].amplitude_v < RANGE_SMALL * span and span > smallest:
                wanted = span_for(fits[ch].amplitude_v, settings.offset_v)
                new = scope.set_range(ch + 1, max(wanted, smallest))
                if new < span:
                    state.spans_v[ch] = new
                    changed = True
        if not changed or retries >= AUTORANGE_TRIES:
            break
        retries += 1
        flags |= Flag.RETRIED
    if any(capture.clipped):
        flags |= Flag.CLIPPED
    return capture, fits, retries, flags


def apply_window(f: float, settings: EngineSettings, scope: Scope, state: EngineState) -> Window:
    """Choose the capture window for f and send it to the scope only when it changes."""
    window = choose_window(f, settings.min_cycles, settings.min_samples, scope.limits, state.window,
                           WINDOW_CHANGE_COST_S)
    if state.window is None or (state.window.sample_rate_hz, state.window.samples) != (
        window.sample_rate_hz, window.samples
    ):
        rate, samples = scope.set_window(window.sample_rate_hz, window.samples)
        state.window = Window(rate, samples, samples * f / rate)
    return state.window


def measure_with_scope(
    f: float,
    settings: EngineSettings,
    scope: Scope,
    state: EngineState,
    model_response: Callable[[float], complex],
) -> tuple[dict, Capture]:
    """Measure one frequency in waveform mode (window already set): autoranged captures, fits,
    averaging to the target uncertainty."""
    window = state.window
    assert window is not None
    if settings.autorange or any(math.isnan(s) for s in state.spans_v):
        for ch, span in enumerate(_first_spans(f, settings, state, model_response)):
            if settings.autorange or math.isnan(state.spans_v[ch]):
                state.spans_v[ch] = scope.set_range(ch + 1, span)
    results: list[GainPhase] = []
    fits_all: list[list[SineFit]] = []
    flags = 0
    captures = 0
    capture: Capture | None = None
    while True:
        capture, fits, retries, cflags = _acquire(f, settings, scope, state, window)
        flags |= cflags
        captures += 1
        results.append(gain_phase(fits[0], fits[1]))
        fits_all.append(fits)
        if captures < settings.averages:
            continue
        gp = average_gain_phase(results) if len(results) > 1 else results[0]
        met = (settings.target_gain_db is None or gp.u_gain_db <= settings.target_gain_db) and (
            settings.target_phase_deg is None or gp.u_phase_deg <= settings.target_phase_deg
        )
        if met:
            break
        if captures >= settings.max_averages:
            flags |= Flag.UNCERTAINTY_MISSED
            break
    last = fits_all[-1]
    amp_in = float(np.mean([fs[0].amplitude_v for fs in fits_all]))
    amp_out = float(np.mean([fs[1].amplitude_v for fs in fits_all]))
    for fit in last:
        if fit.thd_db > THD_FLAG_DB:
            flags |= Flag.HIGH_DISTORTION
        if fit.snr_db < SNR_FLAG_DB:
            flags |= Flag.LOW_SIGNAL
    state.last_frequency_hz = f
    state.last_amplitudes_v = (amp_in, amp_out)
    values = dict(
        gain_db=gp.gain_db,
        phase_deg=gp.phase_deg,
        u_gain_db=gp.u_gain_db,
        u_phase_deg=gp.u_phase_deg,
        amplitude_in_v=amp_in,
        amplitude_out_v=amp_out,
        thd_in_db=last[0].thd_db,
        thd_out_db=last[1].thd_db,
        snr_in_db=last[0].snr_db,
        snr_out_db=last[1].snr_db,
        range_in_v=capture.full_scale_v[0],
        range_out_v=capture.full_scale_v[1],
        sample_rate_hz=1.0 / capture.sample_interval_s,
        samples=int(capture.volts.shape[1]),
        captures=captures,
        flags=int(flags),
    )
    return values, capture


def measure_with_meter(f: float, settings: EngineSettings, meter: Meter) -> dict:
    """Measure one frequency with a gain-phase meter; uncertainty from repeat readings (GUM type A)."""
    n = max(3, settings.averages)
    readings = [meter.measure(f) for _ in range(n)]
    gains = np.array([r.gain_db for r in readings])
    phases = np.array([r.phase_deg for r in readings])
    ref = phases[0]
    rel = (phases - ref + 180.0) % 360.0 - 180.0
    phase = float(((ref + rel.mean()) + 180.0) % 360.0 - 180.0)
    return dict(
        gain_db=float(gains.mean()),
        phase_deg=180.0 if phase == -180.0 else phase,
        u_gain_db=float(gains.std(ddof=1) / math.sqrt(n)),
        u_phase_deg=float(rel.std(ddof=1) / math.sqrt(n)),
        amplitude_in_v=float(np.nanmean([r.amplitude_in_v for r in readings])) if any(
            math.isfinite(r.amplitude_in_v) for r in readings) else math.nan,
        amplitude_out_v=float(np.nanmean([r.amplitude_out_v for r in readings])) if any(
            math.isfinite(r.amplitude_out_v) for r in readings) else math.nan,
        captures=n,
        flags=0,
    )
