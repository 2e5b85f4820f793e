"""Gain, phase, their uncertainties and averaging, checked against handbook values, scipy.signal,
the GUM and Monte Carlo draws (numpy)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from sweeper.measure.gainphase import GainPhase, average_gain_phase, gain_phase, unwrap_phase_deg, wrap_phase_deg
from sweeper.measure.sinefit import SineFit, fit_sine

SAMPLE_INTERVAL_S = 1e-6


def fit_of(amplitude_v: float, phase_deg: float, u_amplitude_v: float = 0.0, u_phase_deg: float = 0.0) -> SineFit:
    """A SineFit with chosen values (the rest neutral), for exercising the propagation alone."""
    return SineFit(
        frequency_hz=1e3,
        amplitude_v=amplitude_v,
        phase_deg=phase_deg,
        offset_v=0.0,
        residual_rms_v=0.0,
        u_amplitude_v=u_amplitude_v,
        u_phase_deg=u_phase_deg,
        u_offset_v=0.0,
        thd_db=-300.0,
        snr_db=300.0,
        samples=1000,
    )


def capture(
    samples: int, frequency_hz: float, amplitudes_v: tuple[float, float], phases_deg: tuple[float, float]
) -> np.ndarray:
    n = np.arange(samples)
    w = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S
    return np.stack([a * np.cos(w * n + np.radians(p)) for a, p in zip(amplitudes_v, phases_deg)])


def test_known_ratio_and_lag() -> None:
    # Output at half the input amplitude, lagging by 30 degrees: gain 20 log10(0.5) = -6.0206 dB.
    frequency_hz = 12_345.0
    volts = capture(8000, frequency_hz, (1.0, 0.5), (20.0, -10.0))
    fit_in, fit_out = fit_sine(volts, frequency_hz, SAMPLE_INTERVAL_S)
    result = gain_phase(fit_in, fit_out)
    # Noise-free synthetic capture: rounding-level tolerances (see test_sinefit).
    assert result.gain_db == pytest.approx(20 * math.log10(0.5), abs=1e-9)
    assert result.phase_deg == pytest.approx(-30.0, abs=1e-7)


@pytest.mark.parametrize("frequency_ratio", [0.1, 1.0, 10.0])
def test_rc_lowpass_against_scipy_freqs(frequency_ratio: float) -> None:
    # First-order RC low-pass H(s) = 1 / (1 + s R C) evaluated by scipy.signal.freqs (reference
    # library); at the corner it is the handbook -3.01 dB, -45 degrees.
    resistance_ohm, capacitance_f = 1.6e3, 100e-9
    corner_hz = 1 / (2 * math.pi * resistance_ohm * capacitance_f)
    frequency_hz = frequency_ratio * corner_hz
    _, response = signal.freqs([1.0], [resistance_ohm * capacitance_f, 1.0], worN=[2 * math.pi * frequency_hz])
    magnitude, angle_deg = abs(response[0]), math.degrees(np.angle(response[0]))
    dt = 1 / (200 * frequency_hz)  # 200 samples per cycle, 100 cycles
    angle = 2 * np.pi * frequency_hz * dt * np.arange(20_000)
    volts = np.stack([np.cos(angle), magnitude * np.cos(angle + math.radians(angle_deg))])
    result = gain_phase(*fit_sine(volts, frequency_hz, dt))
    assert result.gain_db == pytest.approx(20 * math.log10(magnitude), abs=1e-9)
    assert result.phase_deg == pytest.approx(angle_deg, abs=1e-7)
    if frequency_ratio == 1.0:
        # Handbook: |H(fc)| = -3.01 dB, phase -45 degrees (values to the printed digits).
        assert result.gain_db == pytest.approx(-3.01, abs=0.005)
        assert result.phase_deg == pytest.approx(-45.0, abs=1e-7)


@pytest.mark.parametrize(
    ("phase_in_deg", "phase_out_deg", "expected_deg"),
    [
        (-90.0, 90.0, 180.0),  # difference exactly +180 stays 180
        (90.0, -90.0, 180.0),  # difference exactly -180 becomes 180
        (-170.0, 170.0, -20.0),  # 340 wraps to -20
        (170.0, -170.0, 20.0),  # -340 wraps to 20
        (10.0, 10.0, 0.0),
    ],
)
def test_phase_difference_wraps_into_the_half_open_interval(
    phase_in_deg: float, phase_out_deg: float, expected_deg: float
) -> None:
    # Convention (project, common practice): phase of output relative to input, (-180, 180].
    result = gain_phase(fit_of(1.0, phase_in_deg), fit_of(1.0, phase_out_deg))
    assert result.phase_deg == pytest.approx(expected_deg, abs=1e-12)
    assert -180.0 < result.phase_deg <= 180.0


def test_wrap_phase_deg_values() -> None:
    given = np.array([180.0, -180.0, 540.0, -540.0, 0.0, 360.0, 181.0, -181.0, 179.5, -179.5, 725.0])
    expected = np.array([180.0, 180.0, 180.0, 180.0, 0.0, 0.0, -179.0, 179.0, 179.5, -179.5, 5.0])
    np.testing.assert_allclose(wrap_phase_deg(given), expected, atol=1e-12)
    assert wrap_phase_deg(-180.0) == 180.0
    assert isinstance(wrap_phase_deg(10.0), float)


def test_wrap_phase_deg_never_leaves_the_interval() -> None:
    rng = np.random.default_rng(3)
    odd_multiples_of_180 = 180.0 + 360.0 * np.arange(-20, 21)
    just_above_180 = np.array([np.nextafter(180.0, 181.0)])
    values = np.concatenate([rng.uniform(-1e4, 1e4, 10_000), odd_multiples_of_180, just_above_180])
    wrapped = wrap_phase_deg(values)
    assert np.all(wrapped > -180.0) and np.all(wrapped <= 180.0)
    # Same angle: the difference is a whole number of turns (up to rounding of 1e4-degree inputs).
    turns = (values - wrapped) / 360.0
    np.testing.assert_allclose(turns, np.round(turns), atol=1e-12)


def test_unwrap_phase_deg_removes_jumps() -> None:
    # A phase falling through -180 across a sweep, as a second-order low-pass does; values by hand.
    wrapped = np.array([-100.0, -150.0, 170.0, 150.0])
    np.testing.assert_allclose(unwrap_phase_deg(wrapped), [-100.0, -150.0, -190.0, -210.0])
    np.testing.assert_allclose(unwrap_phase_deg([170.0, -170.0, -150.0]), [170.0, 190.0, 210.0])


def test_uncertainty_propagation_matches_monte_carlo() -> None:
    # GUM (JCGM 100:2008) law of propagation for uncorrelated inputs, checked against a Monte
    # Carlo of the same measurement function (JCGM 101 style, numpy draws).
    fit_in = fit_of(1.0, 10.0, u_amplitude_v=0.01, u_phase_deg=0.3)
    fit_out = fit_of(0.3, -35.0, u_amplitude_v=0.004, u_phase_deg=0.5)
    result = gain_phase(fit_in, fit_out)
    rng = np.random.default_rng(12)
    draws = 200_000
    a_in = rng.normal(1.0, 0.01, draws)
    a_out = rng.normal(0.3, 0.004, draws)
    phi_in = rng.normal(10.0, 0.3, draws)
    phi_out = rng.normal(-35.0, 0.5, draws)
    gains_db = 20 * np.log10(a_out / a_in)
    phases_deg = wrap_phase_deg(phi_out - phi_in)
    # Tolerance: the Monte Carlo standard deviation from 2e5 draws is known to 0.16 %; the
    # linearisation of log10 at 1.3 % relative amplitude uncertainty is exact to ~1e-4. 1 % is
    # ample yet catches a missing term (which changes u by > 20 %).
    assert result.u_gain_db == pytest.approx(gains_db.std(), rel=0.01)
    assert result.u_phase_deg == pytest.approx(phases_deg.std(), rel=0.01)
    assert result.gain_db == pytest.approx(gains_db.mean(), abs=5 * gains_db.std() / math.sqrt(draws) + 1e-3)
    assert result.phase_deg == pytest.approx(-45.0, abs=1e-12)


def test_gain_needs_positive_amplitudes() -> None:
    with pytest.raises(ValueError):
        gain_phase(fit_of(0.0, 0.0), fit_of(1.0, 0.0))
    with pytest.raises(ValueError):
        gain_phase(fit_of(1.0, 0.0), fit_of(0.0, 0.0))


def test_average_of_identical_items_uses_the_propagated_uncertainty() -> None:
    # GUM 5.1.2: the mean of n independent items with equal u has u / sqrt(n); no scatter, so
    # the experimental standard deviation of the mean (GUM 4.2.3) is zero and loses.
    # (JCGM 100:2008; clause numbers quoted from memory.)
    item = GainPhase(gain_db=-3.0, phase_deg=-45.0, u_gain_db=0.02, u_phase_deg=0.2)
    result = average_gain_phase([item] * 4)
    assert result.gain_db == pytest.approx(-3.0)
    assert result.phase_deg == pytest.approx(-45.0)
    assert result.u_gain_db == pytest.approx(0.01)
    assert result.u_phase_deg == pytest.approx(0.1)


def test_average_with_scatter_uses_the_standard_deviation_of_the_mean() -> None:
    # GUM 4.2.3 (clause number from memory): s(q)/sqrt(n). Gains 0, 1, 2 dB: s = 1, so
    # u = 1/sqrt(3) (by hand).
    items = [GainPhase(gain_db=g, phase_deg=0.0, u_gain_db=0.01, u_phase_deg=0.01) for g in (0.0, 1.0, 2.0)]
    result = average_gain_phase(items)
    assert result.gain_db == pytest.approx(1.0)
    assert result.u_gain_db == pytest.approx(1 / math.sqrt(3))
    assert result.u_phase_deg == pytest.approx(0.01 / math.sqrt(3))


def test_average_phase_is_circular_across_the_wrap_point() -> None:
    # Circular mean (directional statistics): 170 and -170 degrees average to 180, not 0; their
    # deviations are -10 and +10, so s = 14.14 and u = s / sqrt(2) = 10 (by hand).
    items = [GainPhase(0.0, 170.0, 0.0, 0.0), GainPhase(0.0, -170.0, 0.0, 0.0)]
    result = average_gain_phase(items)
    assert result.phase_deg == pytest.approx(180.0)
    assert result.u_phase_deg == pytest.approx(10.0)


def test_average_of_one_item_is_the_item() -> None:
    item = GainPhase(gain_db=1.5, phase_deg=-179.0, u_gain_db=0.03, u_phase_deg=0.4)
    result = average_gain_phase([item])
    assert result.gain_db == item.gain_db
    assert result.phase_deg == pytest.approx(item.phase_deg)
    assert result.u_gain_db == item.u_gain_db
    assert result.u_phase_deg == item.u_phase_deg


def test_average_of_nothing_is_an_error() -> None:
    with pytest.raises(ValueError):
        average_gain_phase([])


def test_averaged_uncertainty_describes_repeated_noisy_measurements() -> None:
    # End to end with simulated noisy captures: the u of a 4-capture average must match the
    # scatter of many such averages (it is a standard uncertainty, k = 1).
    rng = np.random.default_rng(2024)
    samples, frequency_hz, sigma_v, repeats, captures = 2000, 23_456.0, 0.02, 400, 4
    clean = capture(samples, frequency_hz, (1.0, 0.25), (0.0, -60.0))
    noisy = clean[None, None] + sigma_v * rng.standard_normal((repeats, captures, 2, samples))
    fits = fit_sine(noisy.reshape(-1, samples), frequency_hz, SAMPLE_INTERVAL_S)
    per_capture = [gain_phase(fits[2 * i], fits[2 * i + 1]) for i in range(repeats * captures)]
    averages = [average_gain_phase(per_capture[r * captures : (r + 1) * captures]) for r in range(repeats)]
    scatter_gain = np.std([a.gain_db for a in averages], ddof=1)
    scatter_phase = np.std([a.phase_deg for a in averages], ddof=1)
    # The reported u is the larger of two estimates of the same scatter, so on average it sits
    # at or somewhat above the true scatter: between 0.9x (sampling of 400 repeats, 3.5 %) and
    # 1.4x (the max of two noisy estimates with 3 degrees of freedom for the type A one).
    assert 0.9 < np.mean([a.u_gain_db for a in averages]) / scatter_gain < 1.4
    assert 0.9 < np.mean([a.u_phase_deg for a in averages]) / scatter_phase < 1.4
