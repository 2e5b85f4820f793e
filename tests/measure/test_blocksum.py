"""Blocked exponential sums checked against the plain sums evaluated sample by sample (numpy)."""

from __future__ import annotations

import numpy as np
import pytest

from sweeper.measure.blocksum import block_layout, dirichlet_sums, power_sums, project, sum_of_squares

# Record lengths: shorter than one block, exact multiples of the block, and with a remainder.
LENGTHS = [4, 17, 1000, 1024, 10007]


@pytest.mark.parametrize("samples", LENGTHS)
def test_layout_covers_every_sample_once(samples: int) -> None:
    layout = block_layout(samples)
    assert layout.blocks * layout.block + layout.tail == samples
    assert 0 <= layout.tail < layout.block
    assert layout.starts[-1] + (layout.tail or layout.block) == samples


@pytest.mark.parametrize("samples", LENGTHS)
@pytest.mark.parametrize("angle_rad", [0.031, 1.1])
def test_projection_matches_direct_sums(samples: int, angle_rad: float) -> None:
    # Reference: numpy evaluating exp(j k theta n) at every sample and summing (matrix product).
    rng = np.random.default_rng(samples)
    rows = rng.standard_normal((3, samples))
    n = np.arange(samples)
    waves = np.exp(1j * np.outer(n, angle_rad * np.arange(1, 4)))
    got = project(rows, angle_rad, harmonics=3, ramp=True)
    # Tolerance: both sides round the angle k theta n (up to 3.3e4 rad here) at about 1e-16
    # relative, i.e. ~1e-11 rad per term; over sqrt(N)-scaled sums that is < 1e-9 of sqrt(N).
    scale = np.sqrt(samples)
    np.testing.assert_allclose(got.total, rows.sum(axis=1), rtol=0, atol=1e-12 * samples)
    np.testing.assert_allclose(got.exp, rows @ waves, rtol=0, atol=1e-9 * scale)
    np.testing.assert_allclose(got.ramp_exp, (rows * n) @ waves, rtol=0, atol=1e-9 * scale * samples)


@pytest.mark.parametrize("samples", LENGTHS)
@pytest.mark.parametrize("power", [0, 1, 2])
def test_power_sums_match_direct_sums(samples: int, power: int) -> None:
    # Reference: sum_n n**p exp(j theta n) evaluated term by term with numpy.
    angles = np.array([0.0, 1e-7, 0.02, 1.0, np.pi, 2 * np.pi - 1e-4, 2 * np.pi, 7.5])
    n = np.arange(samples, dtype=np.float64)
    expected = ((n**power)[:, None] * np.exp(1j * np.outer(n, angles))).sum(axis=0)
    # Tolerance: the largest angle, 7.5 rad x 1e4 samples, is rounded at ~1e-11 rad per term in
    # the reference; relative to the largest possible sum N**(p+1) that stays below 1e-10.
    tolerance = 1e-10 * samples ** (power + 1)
    np.testing.assert_allclose(power_sums(samples, angles, power), expected, rtol=0, atol=tolerance)


@pytest.mark.parametrize("samples", LENGTHS)
def test_sum_of_squares_matches_numpy(samples: int) -> None:
    rows = np.random.default_rng(samples).standard_normal((2, samples))
    # Reference: numpy's element-wise square and sum; both are float64 sums of N positive
    # terms, so they agree to ~N x 1e-16 relative.
    np.testing.assert_allclose(sum_of_squares(rows), (rows**2).sum(axis=1), rtol=1e-12)


def test_dirichlet_sum_at_multiples_of_two_pi_is_the_length() -> None:
    # sum of exp(j 2 pi k n) over n is N for integer k (geometric series with ratio 1).
    np.testing.assert_allclose(dirichlet_sums(1000, np.array([0.0, 2 * np.pi, -4 * np.pi])), 1000.0, rtol=1e-12)


def test_power_sums_reject_other_powers() -> None:
    with pytest.raises(ValueError):
        power_sums(10, np.array([0.1]), 3)
