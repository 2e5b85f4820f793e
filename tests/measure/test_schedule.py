"""Frequency grid, settle time and capture window (sweeper.measure.schedule).

References: numpy.geomspace / numpy.linspace as the reference grids; the sampling theorem
(rate above twice the highest harmonic fitted) as common practice.
"""

import math

import numpy as np
import pytest

from sweeper.instruments.roles import ScopeLimits
from sweeper.measure.schedule import (
    HARMONICS,
    capture_window,
    frequency_grid,
    samples_for_uncertainty,
    settle_time_s,
)

LIMITS = ScopeLimits(full_scales_v=(0.008, 0.016, 0.04), max_samples=100_000, max_sample_rate_hz=1e9,
                     min_sample_rate_hz=1e3)


def test_log_grid_points_per_decade_matches_numpy_geomspace():
    g = frequency_grid(10.0, 1e6, points_per_decade=10)
    assert np.allclose(g, np.geomspace(10.0, 1e6, 51), rtol=1e-12)  # numpy as the reference


def test_linear_and_down_and_explicit():
    assert np.allclose(frequency_grid(1e3, 2e3, points=11, spacing="linear"), np.linspace(1e3, 2e3, 11))
    assert np.allclose(frequency_grid(10.0, 100.0, points=3, direction="down"), [100.0, np.sqrt(1000.0), 10.0])
    assert np.allclose(frequency_grid(frequencies_hz=[300.0, 100.0, 300.0]), [100.0, 300.0])


def test_settle_is_largest_of_three():
    assert settle_time_s(1000.0, 0.001, 2, 5, 1e-5) == pytest.approx(0.002)  # 2 cycles at 1 kHz
    assert settle_time_s(1e5, 0.001, 2, 5, 1e-5) == pytest.approx(0.001)  # fixed time
    assert settle_time_s(1e5, 0.0, 2, 5, 1e-3) == pytest.approx(0.005)  # 5 time constants


@pytest.mark.parametrize("f", [1.0, 10.0, 1234.5, 1e5, 1e7])
def test_capture_window_meets_cycles_samples_and_nyquist(f):
    w = capture_window(f, min_cycles=8, min_samples=2000, limits=LIMITS)
    assert w.samples <= LIMITS.max_samples
    assert LIMITS.min_sample_rate_hz <= w.sample_rate_hz <= LIMITS.max_sample_rate_hz
    # Sampling theorem (common practice): above twice the highest fitted harmonic.
    assert w.sample_rate_hz > 2 * HARMONICS * f
    if w.samples < LIMITS.max_samples:
        assert w.cycles >= 8 - 1e-9 and w.samples >= 2000


def test_capture_window_caps_record_length():
    w = capture_window(0.01, min_cycles=8, min_samples=2000, limits=LIMITS)
    assert w.samples == LIMITS.max_samples and w.cycles < 8


def test_samples_for_uncertainty_from_cramer_rao():
    # Cramer-Rao bound of the sine fit (Andersson and Handel): var(phi) = 1/(SNR M) per channel;
    # two channels double it. For 0.01 deg at 40 dB SNR: M = 2 / (1e4 * (0.01 pi/180)^2) = 6565.6.
    m = samples_for_uncertainty(None, 0.01, 40.0)
    assert m == 6566
    # Gain: 0.001 dB is a relative amplitude of 0.001 ln(10)/20 = 1.1513e-4; M = 2/(1e4 * 1.3255e-8) = 15089.
    assert samples_for_uncertainty(0.001, None, 40.0) == math.ceil(2 / (1e4 * (0.001 * math.log(10) / 20) ** 2))


def test_settle_time_constants_follow_the_target_uncertainty():
    from sweeper.measure.schedule import time_constants_for_target

    # exp(-n) <= e  <=>  n >= ln(1/e) (first-order step response, handbook). 0.02 dB is a
    # relative amplitude of 0.02 ln(10)/20 = 2.3026e-3 -> n = ln(434.3) = 6.074.
    assert time_constants_for_target(5, 0.02, None) == pytest.approx(math.log(20 / (0.02 * math.log(10))))
    assert time_constants_for_target(8, 0.02, None) == 8  # the plan asked for more
    assert time_constants_for_target(5, None, None) == 5
    # 0.2 degree = 3.49e-3 rad -> ln(286.5) = 5.658; the tighter of the two targets wins.
    assert time_constants_for_target(5, 0.02, 0.2) == pytest.approx(6.074, abs=1e-3)
