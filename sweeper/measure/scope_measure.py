"""Scope-measurement mode: the scope's own peak-to-peak and phase readings, repeated per point.

No waveform crosses the link: per reading the scope acquires once and reports the
peak-to-peak of both channels and the phase between them, so a point costs a few dozen bytes
instead of two records. The price is accuracy: a scope's peak-to-peak is max - min (biased
upwards by noise) and its phase comes from edge crossings (jittered by noise and quantisation).
The uncertainty is a GUM type A evaluation from at least three repeat readings, combined for
gain with the type B resolution of the peak-to-peak readings (an 8-bit reading often repeats
exactly, and zero scatter is not zero uncertainty).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from sweeper.instruments.roles import MeasuringScope, ScopeReading
from sweeper.measure.phasewrap import wrap_phase_deg
from sweeper.measure.autorange import AUTORANGE_TRIES, RANGE_SMALL, set_first_ranges, span_for
from sweeper.measure.budget import welch_satterthwaite
from sweeper.measure.point import Flag, Measurement
from sweeper.measure.settings import EngineSettings, EngineState

#: Fewest repeat readings per point: a type A standard deviation needs at least two, and three
#: keeps one odd reading from dominating (JCGM 100:2008, 4.2: the experimental standard deviation
#: of the mean, s / sqrt(n)).
MIN_READINGS = 3
#: A measured peak-to-peak at or above this fraction of the full-scale span means the trace
#: reached the screen edges: an 8-bit ADC spans 255 codes of 256, and a signal the autorange
#: aims at 90 % fill stays well below 98 % unless it clips (common practice: aim below full scale).
CLIP_FILL = 0.98


def type_a_gain_phase(gains_db: np.ndarray, phases_deg: np.ndarray) -> tuple[float, float, float, float]:
    """Mean gain (dB) and phase (degrees) of repeat readings with their type A standard
    uncertainties s / sqrt(n) (JCGM 100:2008, 4.2.3). Phases are averaged as deviations from the
    first reading, so readings either side of +-180 degrees average correctly."""
    gains = np.asarray(gains_db, dtype=float)
    phases = np.asarray(phases_deg, dtype=float)
    n = gains.size
    if n < 2:
        raise ValueError(f"a type A evaluation needs at least 2 readings, got {n}")
    deviations = (phases - phases[0] + 180.0) % 360.0 - 180.0
    return (
        float(gains.mean()),
        wrap_phase_deg(float(phases[0] + deviations.mean())),
        float(gains.std(ddof=1) / math.sqrt(n)),
        float(deviations.std(ddof=1) / math.sqrt(n)),
    )


def resolution_u_gain_db(vpp_in: float, vpp_out: float, span_in_v: float, span_out_v: float, bits: int) -> float:
    """Standard uncertainty (dB) of 20 log10(vpp_out / vpp_in) from the ADC resolution alone.

    Each peak-to-peak is a difference of two quantised extremes, each with a rectangular error of
    +-LSB/2, so u(Vpp) = sqrt(2) x LSB / sqrt(12) = LSB / sqrt(6) (JCGM 100:2008, F.2.2.1), with
    LSB = span / 2**bits; relative uncertainties add in quadrature and 1 (relative) = 20 / ln 10 dB.
    """
    terms = []
    for vpp, span in ((vpp_in, span_in_v), (vpp_out, span_out_v)):
        terms.append((span / 2.0**bits) / math.sqrt(6.0) / vpp)
    return float(20.0 / math.log(10.0) * math.hypot(*terms))


def _rerange(
    reading: ScopeReading, scope: MeasuringScope, offset_v: float, state_spans: list[float]
) -> bool:
    """Autorange one step from a reading: up when a channel filled the screen, down when it used
    less than RANGE_SMALL of it. Returns True when a range changed."""
    changed = False
    smallest, largest = min(scope.limits.full_scales_v), max(scope.limits.full_scales_v)
    for ch, vpp in enumerate((reading.amplitude_in_vpp, reading.amplitude_out_vpp)):
        span = reading.full_scale_v[ch]
        if not (math.isfinite(vpp) and math.isfinite(span)):
            continue
        if vpp >= CLIP_FILL * span and span < largest:
            state_spans[ch] = scope.set_range(ch + 1, min(span * 2.5, largest))
            changed = True
        elif vpp < RANGE_SMALL * span and span > smallest:
            new = scope.set_range(ch + 1, max(span_for(vpp / 2.0, offset_v), smallest))
            if new < span:
                state_spans[ch] = new
                changed = True
    return changed


def measure_with_scope_readings(
    f: float,
    settings: EngineSettings,
    scope: MeasuringScope,
    state: EngineState,
    model_response: Callable[[float], complex],
) -> Measurement:
    """Measure one frequency from the scope's own readings (capture window already set).

    settings: the engine's EngineSettings; state: its EngineState (ranges carried between
    points). Autoranges on the readings first, then takes max(MIN_READINGS, averages) readings
    on fixed ranges, and more (up to max_averages) while the target uncertainty is not met.
    """
    set_first_ranges(scope, f, settings, state, model_response)
    flags = 0
    reading = scope.measure()
    retries = 0
    while settings.autorange and retries < AUTORANGE_TRIES and _rerange(reading, scope, settings.offset_v, state.spans_v):
        retries += 1
        flags |= Flag.RETRIED
        reading = scope.measure()
    readings = [reading]
    n = max(MIN_READINGS, settings.averages)
    most = max(n, settings.max_averages)
    while True:
        while len(readings) < n:
            readings.append(scope.measure())
        vpp_in = np.array([r.amplitude_in_vpp for r in readings])
        vpp_out = np.array([r.amplitude_out_vpp for r in readings])
        phases = np.array([r.phase_deg for r in readings])
        usable = np.isfinite(vpp_in) & np.isfinite(vpp_out) & np.isfinite(phases) & (vpp_in > 0) & (vpp_out > 0)
        if usable.sum() < 2:
            gain_db = phase_deg = u_gain_db = u_phase_deg = math.nan
            u_type_a_gain = u_type_a_phase = u_resolution = dof = math.nan
            break
        gains = 20.0 * np.log10(vpp_out[usable] / vpp_in[usable])
        gain_db, phase_deg, u_gain_db, u_phase_deg = type_a_gain_phase(gains, phases[usable])
        u_type_a_gain, u_type_a_phase, dof = u_gain_db, u_phase_deg, float(usable.sum() - 1)
        u_resolution = resolution_u_gain_db(float(vpp_in[usable].mean()), float(vpp_out[usable].mean()),
                                            *reading.full_scale_v, scope.limits.bits)
        if math.isfinite(u_resolution):
            u_gain_db = math.hypot(u_gain_db, u_resolution)
        met = (settings.target_gain_db is None or u_gain_db <= settings.target_gain_db) and (
            settings.target_phase_deg is None or u_phase_deg <= settings.target_phase_deg
        )
        if met:
            break
        if len(readings) >= most:
            flags |= Flag.UNCERTAINTY_MISSED
            break
        n += 1
    if not math.isfinite(gain_db):
        flags |= Flag.LOW_SIGNAL
    span_in, span_out = reading.full_scale_v
    amp_in = float(np.nanmean(vpp_in)) / 2.0 if np.isfinite(vpp_in).any() else math.nan
    amp_out = float(np.nanmean(vpp_out)) / 2.0 if np.isfinite(vpp_out).any() else math.nan
    for vpp, span in ((amp_in * 2.0, span_in), (amp_out * 2.0, span_out)):
        if math.isfinite(vpp) and math.isfinite(span):
            if vpp >= CLIP_FILL * span:
                flags |= Flag.CLIPPED
            elif vpp < RANGE_SMALL * span:
                flags |= Flag.LOW_SIGNAL
    if amp_in > 0 and amp_out > 0:
        state.last_frequency_hz = f
        state.last_amplitudes_v = (amp_in, amp_out)
    window = state.window
    return Measurement(
        gain_db=gain_db,
        phase_deg=phase_deg,
        u_gain_db=u_gain_db,
        u_phase_deg=u_phase_deg,
        amplitude_in_v=amp_in,
        amplitude_out_v=amp_out,
        range_in_v=span_in,
        range_out_v=span_out,
        sample_rate_hz=window.sample_rate_hz if window is not None else math.nan,
        samples=int(window.samples) if window is not None else 0,
        captures=len(readings) + retries,
        flags=int(flags),
        dof_eff_gain=welch_satterthwaite([u_type_a_gain, u_resolution], [dof, math.inf]),
        dof_eff_phase=dof,
        u_gain_type_a_db=u_type_a_gain,
        u_phase_type_a_deg=u_type_a_phase,
        u_gain_converter_db=u_resolution,
    )
