"""The golden-curve model: reading its CSV with located problems, interpolating it honestly,
and its bands. Reference curves come from scipy.signal (butter, freqs)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from sweeper.circuits.golden import GoldenError, golden_band, read_golden_text

CSV = """# golden board AAF4-000001, invented
frequency_hz,gain_db,phase_deg,u_gain_db,u_phase_deg,flags
100,0.0,-1.0,0.001,0.01,0
1000,-0.5,-170.0,0.002,0.02,0
10000,-20.0,170.0,0.003,0.03,0
"""


def test_a_golden_csv_reads_with_comments_extra_columns_and_phase_unwrapped() -> None:
    curve = read_golden_text(CSV, "golden.csv")
    np.testing.assert_array_equal(curve.frequency_hz, [100, 1000, 10000])
    np.testing.assert_allclose(curve.phase_deg, [-1.0, -170.0, -190.0])  # 170 is -190 on the same branch
    assert curve.has_uncertainty
    h = curve.response(np.array([1000.0]))
    assert 20 * math.log10(abs(h[0])) == pytest.approx(-0.5) and math.degrees(np.angle(h[0])) == pytest.approx(-170.0)
    assert curve.input_impedance_ohm(1e3) == complex(math.inf, 0)


@pytest.mark.parametrize(("text", "kind", "line", "column"), [
    ("frequency_hz,gain_db\n1,2\n", "missing_column", 1, 1),
    ("frequency_hz,gain_db,phase_deg\n100,0,0\n200,x,0\n", "bad_value", 3, 5),
    ("frequency_hz,gain_db,phase_deg\n100,0,0\n200,NaN,0\n", "bad_value", 3, 5),
    ("frequency_hz,gain_db,phase_deg\n100,0,0\n100,0,0\n", "not_increasing", 3, 1),
    ("frequency_hz,gain_db,phase_deg,u_gain_db,u_phase_deg\n100,0,0,-1,0\n200,0,0,0,0\n", "bad_value", 2, 9),
    ("frequency_hz,gain_db,phase_deg\n100,0,0\n", "too_few_points", 1, 1),
    ("frequency_hz,gain_db,phase_deg,gain_db\n100,0,0,0\n200,0,0,0\n", "duplicate_column", 1, 32),
    ("frequency_hz,gain_db,phase_deg\n100,0\n200,0,0\n", "missing_value", 2, 6),
])
def test_golden_file_problems_are_located(text: str, kind: str, line: int, column: int) -> None:
    with pytest.raises(GoldenError) as caught:
        read_golden_text(text, "golden.csv")
    problem = next(p for p in caught.value.problems if p.kind == kind)
    assert (problem.file, problem.line, problem.column) == ("golden.csv", line, column)
    assert str(problem).startswith(f"golden.csv:{line}:{column}: ")


def test_a_skipped_point_in_a_golden_file_is_explained() -> None:
    with pytest.raises(GoldenError, match="skipped point"):
        read_golden_text("frequency_hz,gain_db,phase_deg\n100,0,0\n200,NaN,0\n300,0,0\n")


@pytest.mark.parametrize(("order", "per_decade"), [(2, 5), (4, 10), (4, 20), (6, 10)])
def test_the_interpolation_uncertainty_covers_the_true_curve_between_golden_points(order: int, per_decade: int) -> None:
    # Reference: scipy.signal.butter / freqs, sampled as a golden curve and checked at the
    # geometric midpoints, where linear interpolation is worst. A stated 2 u must cover the
    # true curve at every midpoint (seen: the error reaches at most 1.34 u, so 2 u has margin).
    b, a = signal.butter(order, 2 * np.pi * 1e4, analog=True)
    grid = np.geomspace(100, 1e6, 4 * per_decade + 1)
    _, h = signal.freqs(b, a, 2 * np.pi * grid)
    lines = ["frequency_hz,gain_db,phase_deg"]
    lines += [f"{float(f)!r},{20 * math.log10(abs(x))!r},{math.degrees(np.angle(x))!r}" for f, x in zip(grid, h)]
    curve = read_golden_text("\n".join(lines) + "\n")
    middle = np.sqrt(grid[1:] * grid[:-1])
    _, truth = signal.freqs(b, a, 2 * np.pi * middle)
    band = golden_band(curve, middle, "uncertainty", coverage_factor=2.0)
    true_gain = 20 * np.log10(np.abs(truth))
    true_phase = band.nominal_phase_deg + np.degrees(np.angle(truth * np.exp(-1j * np.radians(band.nominal_phase_deg))))
    slack = 1e-9  # where the curve is straight the bound is 0 and rounding is all that is left
    assert np.all(true_gain >= band.gain_lo_db - slack) and np.all(true_gain <= band.gain_hi_db + slack)
    assert np.all(true_phase >= band.phase_lo_deg - slack) and np.all(true_phase <= band.phase_hi_deg + slack)
    at_points = golden_band(curve, grid, "uncertainty")  # no point uncertainties: zero width at the points
    np.testing.assert_allclose(at_points.gain_hi_db - at_points.gain_lo_db, 0.0, atol=1e-12)


def test_an_uncertainty_band_is_k_times_the_points_u_and_a_fixed_band_is_as_given() -> None:
    curve = read_golden_text(CSV)
    f = np.array([100.0, 1000.0, 10000.0])
    band = golden_band(curve, f, "uncertainty", coverage_factor=3.0)
    np.testing.assert_allclose(band.gain_hi_db - band.nominal_gain_db, [0.003, 0.006, 0.009])
    np.testing.assert_allclose(band.phase_hi_deg - band.nominal_phase_deg, [0.03, 0.06, 0.09])
    fixed = golden_band(curve, f, "fixed", gain_db=0.1, phase_deg=1.0)
    np.testing.assert_allclose(fixed.gain_lo_db, fixed.nominal_gain_db - 0.1)
    np.testing.assert_allclose(fixed.phase_hi_deg, fixed.nominal_phase_deg + 1.0)


def test_a_first_order_golden_curve_settles_with_its_time_constant() -> None:
    # Handbook: an RC low-pass has group delay RC / (1 + (w RC)^2), RC at DC. Sampled at 20 points
    # per decade from 1 Hz, the first step's group delay is within 1 % of RC.
    rc = 1.6e3 * 100e-9
    f = np.geomspace(1.0, 1e5, 101)
    h = 1 / (1 + 2j * np.pi * f * rc)
    text = "frequency_hz,gain_db,phase_deg\n" + "".join(
        f"{float(x)!r},{20 * math.log10(abs(y))!r},{math.degrees(np.angle(y))!r}\n" for x, y in zip(f, h))
    assert read_golden_text(text).slowest_time_constant_s() == pytest.approx(rc, rel=0.01)
