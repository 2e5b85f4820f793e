"""Sine fits checked against numpy least squares, the Cramer-Rao bounds and the THD/SNR definitions."""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweeper.measure.sinefit import SineFit, fit_sine, fit_sine_4

SAMPLE_INTERVAL_S = 1e-6  # 1 MSa/s


def sine(samples: int, frequency_hz: float, amplitude_v: float, phase_deg: float, offset_v: float = 0.0) -> np.ndarray:
    """A cos(2 pi f n dt + phi) + C, the model of IEEE Std 1057, n = 0..N-1."""
    n = np.arange(samples)
    return amplitude_v * np.cos(2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S * n + np.radians(phase_deg)) + offset_v


def lstsq_reference(volts: np.ndarray, frequency_hz: float) -> tuple[float, float, float]:
    """Amplitude (V), phase (rad) and offset (V) by np.linalg.lstsq on the explicit
    [cos, sin, 1] design matrix: the IEEE Std 1057 three-parameter fit written out plainly."""
    n = np.arange(volts.size)
    angle = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S * n
    design = np.column_stack([np.cos(angle), np.sin(angle), np.ones(volts.size)])
    (a, b, offset), *_ = np.linalg.lstsq(design, volts, rcond=None)
    return math.hypot(a, b), math.atan2(-b, a), offset


def phase_error_rad(got_deg: float, want_rad: float) -> float:
    return abs(math.remainder(math.radians(got_deg) - want_rad, 2 * math.pi))


# (samples, cycles in the record, amplitude V, phase deg, offset V): whole and non-whole cycle
# counts, few cycles, a block-aligned length, lengths with a remainder block, offsets, phases
# near the wrap point.
NOISE_FREE_CASES = [
    (1000, 10.0, 1.0, 0.0, 0.0),
    (1000, 10.37, 1.3, 40.0, 0.2),
    (4000, 1.3, 0.01, -170.0, 1.0),
    (250, 2.5, 2.0, 179.9, -0.5),
    (4, 1.1, 1.0, 30.0, 0.0),
    (10007, 123.456, 0.5, -90.0, 0.05),
    (200003, 777.77, 0.5, 179.99, 0.0),
]


@pytest.mark.parametrize(("samples", "cycles", "amplitude_v", "phase_deg", "offset_v"), NOISE_FREE_CASES)
def test_noise_free_sine_is_recovered_and_matches_numpy_lstsq(
    samples: int, cycles: float, amplitude_v: float, phase_deg: float, offset_v: float
) -> None:
    frequency_hz = cycles / (samples * SAMPLE_INTERVAL_S)
    volts = sine(samples, frequency_hz, amplitude_v, phase_deg, offset_v)
    fit = fit_sine(volts, frequency_hz, SAMPLE_INTERVAL_S)[0]
    ref_amplitude, ref_phase, ref_offset = lstsq_reference(volts, frequency_hz)
    # Tolerance 1e-9 relative: float64 rounds the sample angles at ~1e-16 x (2 pi cycles) rad and
    # the normal equations amplify that by the condition number of the scaled Gram matrix
    # (< 1e3 for >= 1 cycle), far below 1e-9; any formula slip shows up at 1e-3 or more.
    tol = 1e-9
    assert fit.amplitude_v == pytest.approx(amplitude_v, rel=tol)
    assert phase_error_rad(fit.phase_deg, math.radians(phase_deg)) < tol
    assert fit.offset_v == pytest.approx(offset_v, abs=tol * (amplitude_v + abs(offset_v)))
    # Outside reference: numpy's SVD-based least squares on the explicit design matrix.
    assert fit.amplitude_v == pytest.approx(ref_amplitude, rel=tol)
    assert phase_error_rad(fit.phase_deg, ref_phase) < tol
    assert fit.offset_v == pytest.approx(ref_offset, abs=tol * (amplitude_v + abs(offset_v)))
    assert -180.0 < fit.phase_deg <= 180.0
    assert fit.frequency_hz == frequency_hz
    assert fit.samples == samples
    # A noise-free record leaves only rounding in the residual (energy identity floor ~1e-8 rms).
    assert fit.residual_rms_v < 1e-6 * (amplitude_v + abs(offset_v))


def test_rows_are_fitted_independently() -> None:
    samples, frequency_hz = 5003, 3210.0
    rng = np.random.default_rng(11)
    rows = np.stack([sine(samples, frequency_hz, 1.0, 10.0), sine(samples, frequency_hz, 0.3, -75.0, 0.1)])
    rows += 0.01 * rng.standard_normal(rows.shape)
    together = fit_sine(rows, frequency_hz, SAMPLE_INTERVAL_S)
    apart = [fit_sine(row, frequency_hz, SAMPLE_INTERVAL_S)[0] for row in rows]
    assert len(together) == 2
    for joint, single in zip(together, apart):
        # Same arithmetic on the same row; only summation order may differ (1e-12 relative).
        assert joint.amplitude_v == pytest.approx(single.amplitude_v, rel=1e-12)
        assert joint.phase_deg == pytest.approx(single.phase_deg, abs=1e-9)
        assert joint.u_amplitude_v == pytest.approx(single.u_amplitude_v, rel=1e-9)


def test_white_noise_variances_sit_at_the_cramer_rao_bound() -> None:
    # Cramer-Rao bounds for the three-parameter fit with white Gaussian noise sigma and M samples
    # (Andersson and Handel, analysis of the IEEE Std 1057 sine fit):
    #   var(A) >= 2 sigma^2 / M,  var(phi) >= 2 sigma^2 / (A^2 M).
    # The least-squares fit is efficient here, so the measured variances must sit close to them.
    trials, samples, sigma_v, amplitude_v = 2000, 1000, 0.05, 1.0
    frequency_hz = 10.37 / (samples * SAMPLE_INTERVAL_S)
    rng = np.random.default_rng(20240601)
    volts = sine(samples, frequency_hz, amplitude_v, 30.0, 0.2) + sigma_v * rng.standard_normal((trials, samples))
    fits = fit_sine(volts, frequency_hz, SAMPLE_INTERVAL_S)
    amplitudes = np.array([f.amplitude_v for f in fits])
    phases = np.radians([f.phase_deg for f in fits])
    bound_amplitude = 2 * sigma_v**2 / samples
    bound_phase = 2 * sigma_v**2 / (amplitude_v**2 * samples)
    # Tolerance: a sample variance over 2000 trials has relative standard deviation
    # sqrt(2/1999) = 3.2 %; the finite-record bound with 10.37 cycles differs from the asymptotic
    # one by ~1 %. [0.8, 1.2] is about 6 standard deviations either side.
    assert 0.8 < amplitudes.var(ddof=1) / bound_amplitude < 1.2
    assert 0.8 < phases.var(ddof=1) / bound_phase < 1.2
    # The reported standard uncertainties must describe the scatter: the empirical standard
    # deviation over 2000 trials is known to ~1.6 %, so 10 % is a generous but telling window.
    mean_u_amplitude = np.mean([f.u_amplitude_v for f in fits])
    mean_u_phase = np.radians(np.mean([f.u_phase_deg for f in fits]))
    assert mean_u_amplitude == pytest.approx(amplitudes.std(ddof=1), rel=0.10)
    assert mean_u_phase == pytest.approx(phases.std(ddof=1), rel=0.10)
    # And agree with the bound's closed forms u(A) = sigma sqrt(2/M), u(phi) = u(A)/A.
    assert mean_u_amplitude == pytest.approx(sigma_v * math.sqrt(2 / samples), rel=0.05)


def test_thd_of_known_harmonics() -> None:
    # THD definition (IEEE Std 1241, quoted from memory): power of harmonics 2..H over the
    # fundamental, THD = 10 log10((a2^2 + a3^2) / a1^2) for peak amplitudes a_k.
    samples, cycles = 4096, 20.3
    frequency_hz = cycles / (samples * SAMPLE_INTERVAL_S)
    a1, a2, a3 = 1.0, 0.01, 0.003
    n = np.arange(samples)
    w = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S
    volts = a1 * np.cos(w * n + 0.4) + a2 * np.cos(2 * w * n - 1.0) + a3 * np.cos(3 * w * n + 2.0) + 0.1
    fit = fit_sine(volts, frequency_hz, SAMPLE_INTERVAL_S)[0]
    # Noise-free: the joint fit is exact up to rounding, 1e-6 dB is ~1e-7 relative in power.
    assert fit.thd_db == pytest.approx(10 * math.log10((a2**2 + a3**2) / a1**2), abs=1e-6)
    only_second = fit_sine(volts, frequency_hz, SAMPLE_INTERVAL_S, harmonics=2)[0]
    # With H = 2 the unfitted 3rd harmonic stays in the noise, so only a2 counts. The record
    # holds 20.3 cycles, so a3 leaks into the 2nd-harmonic estimate through the Dirichlet kernel
    # 20.3 bins away: at most a3 / (pi x 20.3) = 1.6 % of a3 = 0.5 % of a2, i.e. 0.04 dB.
    assert only_second.thd_db == pytest.approx(20 * math.log10(a2 / a1), abs=0.06)
    # The harmonics are modelled, so they do not count as noise (rounding floor only).
    assert fit.snr_db > 120.0
    # The three-parameter residual keeps them: its rms is that of the harmonics,
    # sqrt((a2^2 + a3^2) / 2), within the ~0.1 % leakage of 20.3 cycles (1 % tolerance).
    assert fit.residual_rms_v == pytest.approx(math.sqrt((a2**2 + a3**2) / 2), rel=0.01)


def test_thd_floor_for_a_pure_sine_and_harmonics_above_nyquist_are_skipped() -> None:
    samples = 2000
    frequency_hz = 0.2 / SAMPLE_INTERVAL_S  # 2nd harmonic at 0.4 fs, 3rd and up at or above Nyquist
    n = np.arange(samples)
    w = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S
    pure = fit_sine(np.cos(w * n), frequency_hz, SAMPLE_INTERVAL_S)[0]
    assert pure.thd_db < -200.0  # nothing but rounding
    distorted = fit_sine(np.cos(w * n) + 0.02 * np.sin(2 * w * n), frequency_hz, SAMPLE_INTERVAL_S)[0]
    # Definition as above with one harmonic: 20 log10(a2/a1); noise-free, rounding-level tolerance.
    assert distorted.thd_db == pytest.approx(20 * math.log10(0.02), abs=1e-6)


def test_snr_with_known_noise() -> None:
    # SNR = 10 log10((A^2 / 2) / sigma^2): sine power over the noise power per sample.
    samples, sigma_v, amplitude_v = 100_000, 0.01, 1.0
    frequency_hz = 1234.5 / (samples * SAMPLE_INTERVAL_S)
    rng = np.random.default_rng(7)
    n = np.arange(samples)
    w = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S
    volts = amplitude_v * np.cos(w * n) + 0.01 * np.cos(3 * w * n) + sigma_v * rng.standard_normal(samples)
    fit = fit_sine(volts, frequency_hz, SAMPLE_INTERVAL_S)[0]
    expected_db = 10 * math.log10((amplitude_v**2 / 2) / sigma_v**2)
    # Tolerance: the noise power estimated from N samples has relative standard deviation
    # sqrt(2/N) = 0.45 %, i.e. 4.34 x 0.0045 = 0.019 dB; allow 5 of those (0.1 dB).
    assert fit.snr_db == pytest.approx(expected_db, abs=5 * (10 / math.log(10)) * math.sqrt(2 / samples))
    # The fitted 3rd harmonic (-40 dBc) is excluded from the noise; were it counted, the SNR
    # would drop by 10 log10(1 + 0.5e-4 / 1e-4) = 1.8 dB.


def test_four_parameter_fit_recovers_a_frequency_offset_of_a_tenth_of_a_percent() -> None:
    samples, cycles = 4000, 50.3
    guess_hz = cycles / (samples * SAMPLE_INTERVAL_S)
    true_hz = guess_hz * 1.001
    volts = sine(samples, true_hz, 0.7, -120.0, 0.3)
    fit = fit_sine_4(volts, guess_hz, SAMPLE_INTERVAL_S)
    # Noise-free: only rounding limits the estimate (see the three-parameter tolerance).
    assert fit.frequency_hz == pytest.approx(true_hz, rel=1e-9)
    assert fit.amplitude_v == pytest.approx(0.7, rel=1e-9)
    assert phase_error_rad(fit.phase_deg, math.radians(-120.0)) < 1e-8
    assert fit.offset_v == pytest.approx(0.3, abs=1e-9)
    # The three-parameter fit at the wrong frequency is visibly off (the check can fail).
    wrong = fit_sine(volts, guess_hz, SAMPLE_INTERVAL_S)[0]
    assert abs(wrong.amplitude_v - 0.7) > 1e-3


def test_four_parameter_fit_with_noise_is_efficient_and_reports_its_uncertainty() -> None:
    # Cramer-Rao bounds with unknown frequency, phase referred to the first sample (Kay,
    # Fundamentals of Statistical Signal Processing vol. I, sinusoidal parameter estimation;
    # quoted from memory), with eta = A^2 / (2 sigma^2):
    #   var(omega) >= 12 / (eta N (N^2 - 1)),  var(phi) >= 2 (2N - 1) / (eta N (N + 1)).
    trials, samples, sigma_v, amplitude_v = 300, 1000, 0.05, 1.0
    guess_hz = 10.37 / (samples * SAMPLE_INTERVAL_S)
    true_hz = guess_hz * 1.001
    rng = np.random.default_rng(99)
    clean = sine(samples, true_hz, amplitude_v, 30.0)
    noisy = clean + sigma_v * rng.standard_normal((trials, samples))
    fits = [fit_sine_4(row, guess_hz, SAMPLE_INTERVAL_S) for row in noisy]
    omega = 2 * np.pi * SAMPLE_INTERVAL_S * np.array([f.frequency_hz for f in fits])
    phases = np.radians([f.phase_deg for f in fits])
    eta = amplitude_v**2 / (2 * sigma_v**2)
    bound_omega = 12 / (eta * samples * (samples**2 - 1))
    bound_phase = 2 * (2 * samples - 1) / (eta * samples * (samples + 1))
    # Tolerance: a variance over 300 trials has relative standard deviation sqrt(2/299) = 8 %;
    # [0.7, 1.35] is about 4 standard deviations either side.
    assert 0.7 < omega.var(ddof=1) / bound_omega < 1.35
    assert 0.7 < phases.var(ddof=1) / bound_phase < 1.35
    # The reported u follow the scatter (standard deviation known to ~4 % over 300 trials).
    u_frequency_hz = np.mean([f.u_frequency_hz for f in fits])
    assert u_frequency_hz == pytest.approx(np.std([f.frequency_hz for f in fits], ddof=1), rel=0.15)
    assert np.radians(np.mean([f.u_phase_deg for f in fits])) == pytest.approx(phases.std(ddof=1), rel=0.15)


def test_three_parameter_fit_reports_frequency_as_known() -> None:
    fit = fit_sine(sine(100, 1e4, 1.0, 0.0), 1e4, SAMPLE_INTERVAL_S)[0]
    assert isinstance(fit, SineFit)
    assert fit.u_frequency_hz == 0.0


@pytest.mark.parametrize("samples", [0, 1, 3])
def test_too_few_samples_is_an_error(samples: int) -> None:
    with pytest.raises(ValueError, match="at least 4 samples"):
        fit_sine(np.ones(samples), 1e3, SAMPLE_INTERVAL_S)


def test_four_samples_are_enough() -> None:
    fit = fit_sine(sine(4, 1e5, 1.0, 10.0), 1e5, SAMPLE_INTERVAL_S)[0]
    assert fit.amplitude_v == pytest.approx(1.0, rel=1e-9)


@pytest.mark.parametrize("frequency_hz", [0.5 / SAMPLE_INTERVAL_S, 0.6 / SAMPLE_INTERVAL_S, 0.0, -1e3, math.nan])
def test_frequency_at_or_above_nyquist_or_not_positive_is_an_error(frequency_hz: float) -> None:
    with pytest.raises(ValueError):
        fit_sine(np.ones(100), frequency_hz, SAMPLE_INTERVAL_S)
    with pytest.raises(ValueError):
        fit_sine_4(np.ones(100), frequency_hz, SAMPLE_INTERVAL_S)


def test_just_below_nyquist_is_accepted() -> None:
    frequency_hz = 0.49 / SAMPLE_INTERVAL_S
    fit = fit_sine(sine(1000, frequency_hz, 1.0, 20.0), frequency_hz, SAMPLE_INTERVAL_S)[0]
    assert fit.amplitude_v == pytest.approx(1.0, rel=1e-9)


@pytest.mark.parametrize(
    "volts",
    [np.ones((2, 3, 100)), np.array([1.0, 2.0, np.nan, 4.0, 5.0]), np.array([1.0, np.inf, 0.0, 1.0])],
    ids=["3-d", "nan", "inf"],
)
def test_bad_records_are_errors(volts: np.ndarray) -> None:
    with pytest.raises(ValueError):
        fit_sine(volts, 1e3, SAMPLE_INTERVAL_S)


def test_bad_arguments_are_errors() -> None:
    volts = sine(100, 1e4, 1.0, 0.0)
    with pytest.raises(ValueError):
        fit_sine(volts, 1e4, 0.0)
    with pytest.raises(ValueError):
        fit_sine(volts, 1e4, SAMPLE_INTERVAL_S, harmonics=0)
    with pytest.raises(ValueError):
        fit_sine_4(np.stack([volts, volts]), 1e4, SAMPLE_INTERVAL_S)


def test_far_too_few_cycles_is_an_error() -> None:
    # 1e-4 of a cycle cannot be told apart from an offset: refuse rather than return noise.
    samples = 1000
    frequency_hz = 1e-4 / (samples * SAMPLE_INTERVAL_S)
    with pytest.raises(ValueError, match="too few cycles"):
        fit_sine(sine(samples, frequency_hz, 1.0, 0.0), frequency_hz, SAMPLE_INTERVAL_S)
