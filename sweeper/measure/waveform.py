"""Waveform mode: both channels captured in one acquisition, each fitted at the known
frequency (IEEE Std 1057), autoranged, averaged until the target uncertainty is met."""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats

from sweeper.instruments.roles import Capture, Scope
from dataclasses import replace

from sweeper.measure.budget import combined_u, converter_u, random_noise_fraction, welch_satterthwaite
from sweeper.measure.autorange import AUTORANGE_TRIES, RANGE_SMALL, set_first_ranges, span_for
from sweeper.measure.gainphase import GainPhase, average_gain_phase, gain_phase
from sweeper.measure.point import Flag, Measurement
from sweeper.measure.schedule import HARMONICS, Window
from sweeper.measure.settings import EngineSettings, EngineState
from sweeper.measure.sinefit import SineFit, fit_sine, fit_sine_4

#: Default flag thresholds (the plan's acquisition.thd_flag and snr_flag override them): THD
#: above -40 dB (1 %: common practice for a linear DUT test); SNR below 20 dB.
THD_FLAG_DB = -40.0
SNR_FLAG_DB = 20.0
#: False-alarm probability of the distortion test per channel and point: harmonics count as
#: present only when their power exceeds what noise alone gives with this probability.
DISTORTION_FALSE_ALARM = 1e-3


def harmonics_significant(thd_db: float, snr_db: float, samples: int, harmonics: int,
                          false_alarm: float = DISTORTION_FALSE_ALARM) -> bool:
    """True when the fitted harmonics 2..H stand above the noise.

    With white noise of variance sigma^2, each fitted harmonic's cosine and sine coefficients
    are Gaussian with variance 2 sigma^2 / N (least squares over N samples), so noise alone
    gives sum_h A_h^2 ~ (2 sigma^2 / N) chi^2 with 2 (H - 1) degrees of freedom. Relative to the
    fundamental's A^2 = 2 sigma^2 SNR this is chi^2 / (N SNR); harmonics are significant when
    the THD power ratio exceeds the chi^2 quantile at 1 - false_alarm over N SNR.
    """
    count = harmonics - 1
    if count < 1 or samples < 1 or not math.isfinite(thd_db):
        return False
    snr = 10.0 ** (snr_db / 10.0)
    floor = float(stats.chi2.ppf(1.0 - false_alarm, 2 * count)) / (samples * snr)
    return 10.0 ** (thd_db / 10.0) > floor


_DB_PER_NEPER = 20.0 / math.log(10.0)


def noise_rms_v(fit: SineFit) -> float:
    """rms noise of a fitted channel, V, from its SNR (fitted harmonics removed)."""
    return fit.amplitude_v / math.sqrt(2.0) * 10.0 ** (-fit.snr_db / 20.0)


def random_part(fit: SineFit, full_scale_v: float, bits: int) -> SineFit:
    """The fit with its amplitude uncertainty cut to the noise that varies between captures
    (type A); the converter's fixed rounding error is the budget's type B term instead. The
    phase keeps the whole residual: its part of the rounding error is not a fixed bias the budget
    holds elsewhere (an incoherent record breaks the symmetry that would cancel it), and the
    coverage study (tests/measure/test_coverage.py) shows the whole residual is needed there."""
    r = random_noise_fraction(noise_rms_v(fit), full_scale_v, bits)
    return replace(fit, u_amplitude_v=fit.u_amplitude_v * r)


def harmonics_for(capture: Capture, frequency_hz: float) -> int:
    """Harmonics fitted (fundamental included): HARMONICS, or fewer below the Nyquist frequency."""
    nyquist_harmonics = int((0.5 / capture.sample_interval_s) / frequency_hz - 1e-9)
    return max(1, min(HARMONICS, nyquist_harmonics))


def fit_capture(capture: Capture, frequency_hz: float, settings: EngineSettings) -> list[SineFit]:
    """Fit both channels at the known frequency (three-parameter) or refine it (four-parameter)."""
    harmonics = harmonics_for(capture, frequency_hz)
    if settings.fit == "four-parameter":
        return [fit_sine_4(row, frequency_hz, capture.sample_interval_s) for row in capture.volts]
    return fit_sine(capture.volts, frequency_hz, capture.sample_interval_s, harmonics=harmonics)


def acquire(
    f: float, settings: EngineSettings, scope: Scope, state: EngineState, window: Window
) -> tuple[Capture, list[SineFit], int, int]:
    """One capture with autorange: (capture, its fits, re-captures used, flags).

    Hysteresis: a channel raised because it clipped is never lowered again within the same
    acquisition, so autorange cannot alternate between two ranges (the smaller clipping, the
    larger looking small); a capture still clipped at the end is flagged CLIPPED (not judged).
    """
    flags = 0
    retries = 0
    raised = [False, False]
    while True:
        capture = scope.capture()
        fits = fit_capture(capture, f, settings)
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
                    raised[ch] = True
                    changed = True
            elif not raised[ch] and 2 * fits[ch].amplitude_v < RANGE_SMALL * span and span > smallest:
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


def measure_with_scope(
    f: float,
    settings: EngineSettings,
    scope: Scope,
    state: EngineState,
    model_response: Callable[[float], complex],
) -> tuple[Measurement, Capture]:
    """Measure one frequency f (Hz) in waveform mode (window already set): autoranged captures,
    fits, averaging to the target uncertainty. Returns the measurement and the last capture."""
    window = state.window
    assert window is not None
    set_first_ranges(scope, f, settings, state, model_response)
    results: list[GainPhase] = []
    fits_all: list[list[SineFit]] = []
    flags = 0
    captures = 0
    capture: Capture | None = None
    while True:
        capture, fits, _retries, cflags = acquire(f, settings, scope, state, window)
        flags |= cflags
        captures += 1
        results.append(gain_phase(*(random_part(fit, capture.full_scale_v[ch], scope.limits.bits)
                                    for ch, fit in enumerate(fits))))
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
    harmonics = harmonics_for(capture, f)
    for fit in last:
        if fit.thd_db > settings.thd_flag_db and harmonics_significant(fit.thd_db, fit.snr_db, fit.samples, harmonics):
            flags |= Flag.HIGH_DISTORTION
        if fit.snr_db < settings.snr_flag_db:
            flags |= Flag.LOW_SIGNAL
    state.last_frequency_hz = f
    state.last_amplitudes_v = (amp_in, amp_out)
    bits = scope.limits.bits
    conv = [converter_u(fit.amplitude_v, capture.full_scale_v[ch], bits, noise_rms_v(fit)) for ch, fit in enumerate(last)]
    u_conv_gain_db = _DB_PER_NEPER * math.hypot(*conv)
    # A sine's rounding error F(A sin t) is symmetric about t = 90 degrees, so it has no cos t
    # component whatever the offset: an ideal converter biases the amplitude, not the phase.
    u_conv_phase_deg = 0.0
    u_gain = combined_u([gp.u_gain_db, u_conv_gain_db])
    u_phase = combined_u([gp.u_phase_deg, u_conv_phase_deg])
    measurement = Measurement(
        gain_db=gp.gain_db,
        phase_deg=gp.phase_deg,
        u_gain_db=u_gain,
        u_phase_deg=u_phase,
        dof_eff_gain=welch_satterthwaite([gp.u_gain_db, u_conv_gain_db], [gp.dof_gain, math.inf]),
        dof_eff_phase=welch_satterthwaite([gp.u_phase_deg, u_conv_phase_deg], [gp.dof_phase, math.inf]),
        u_gain_type_a_db=gp.u_gain_db,
        u_phase_type_a_deg=gp.u_phase_deg,
        u_gain_converter_db=u_conv_gain_db,
        u_phase_converter_deg=u_conv_phase_deg,
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
    return measurement, capture


__all__ = ["SNR_FLAG_DB", "THD_FLAG_DB", "acquire", "fit_capture", "harmonics_significant", "measure_with_scope"]
