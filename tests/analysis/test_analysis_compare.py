"""Comparison numerics: batch spread against numpy's median and extremes, drift at chosen
frequencies, differences to a golden run. Responses are the handbook first-order RC low-pass
H = 1 / (1 + j 2 pi f R C) (circuit handbook) evaluated here."""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from sweeper.analysis.compare import (
    Response,
    batch_spread,
    difference_summary,
    drift,
    parse_utc,
    values_at,
)

F_HZ = np.geomspace(10.0, 1e5, 21)  # 5 points per decade
T0 = datetime(2025, 3, 1, 20, 0, tzinfo=UTC)


def rc(rc_s: float, f_hz: np.ndarray = F_HZ) -> tuple[np.ndarray, np.ndarray]:
    """Handbook RC low-pass: gain (dB) and phase (degrees)."""
    h = 1.0 / (1.0 + 1j * 2 * np.pi * f_hz * rc_s)
    return 20 * np.log10(np.abs(h)), np.degrees(np.angle(h))


def response(name: str, rc_s: float, f_hz: np.ndarray = F_HZ, start: datetime | None = None,
             gain_offset_db: float = 0.0) -> Response:
    g, p = rc(rc_s, f_hz)
    u = np.full(f_hz.size, 0.01)
    return Response(name, f_hz, g + gain_offset_db, p, u, 10 * u, start)


def test_spread_is_numpy_median_and_extremes_on_a_shared_grid() -> None:
    products = [150e-6, 158e-6, 160e-6, 163e-6, 171e-6]
    runs = [response(f"B{i}", t) for i, t in enumerate(products)]
    spread = batch_spread(runs)
    gains = np.array([rc(t)[0] for t in products])
    phases = np.array([rc(t)[1] for t in products])
    # numpy is the reference; the same grid means no interpolation, so equal to rounding (1e-12).
    np.testing.assert_allclose(spread.gain_median_db, np.median(gains, axis=0), atol=1e-12)
    np.testing.assert_allclose(spread.gain_min_db, gains.min(axis=0), atol=1e-12)
    np.testing.assert_allclose(spread.gain_max_db, gains.max(axis=0), atol=1e-12)
    np.testing.assert_allclose(spread.phase_median_deg, np.median(phases, axis=0), atol=1e-12)
    np.testing.assert_allclose(spread.phase_range_deg, phases.max(axis=0) - phases.min(axis=0), atol=1e-12)
    assert np.all(spread.runs == 5)


def test_spread_interpolates_runs_measured_at_nudged_frequencies() -> None:
    # The engine may move a frequency by up to 1/samples (1e-4 relative here) against coherent
    # sampling. Identical boards must then show (almost) no spread: linear interpolation in x =
    # log10 f between nodes x0 < x < x1 errs by at most (x - x0)(x1 - x)/2 * max|g''|, with
    # |g''| <= 10 ln 10 dB/decade^2 for this response (second derivative of -10 log10(1 + (f/fc)^2)).
    nudged = F_HZ * (1 + 1e-4)
    spread = batch_spread([response("A", 160e-6), response("B", 160e-6, nudged)])
    x_offset = math.log10(1 + 1e-4)
    bound = x_offset * (0.2 - x_offset) / 2 * 10 * math.log(10)
    inside = spread.runs == 2
    assert inside[1:].all() and not inside[0]  # the nudged run starts just above the grid's first frequency
    assert np.nanmax(spread.gain_range_db[inside]) <= bound


def test_spread_aligns_phases_unwrapped_from_different_branches() -> None:
    # A run whose recorded phases sit a whole turn away (as wrapped phases of a second-order
    # section can, around -180 degrees) must not spread by 360 degrees.
    a = response("A", 160e-6)
    b = Response("B", a.frequency_hz, a.gain_db, a.phase_deg + 360.0, a.u_gain_db, a.u_phase_deg)
    spread = batch_spread([a, b])
    assert np.nanmax(spread.phase_range_deg) < 1e-9


def test_drift_sorts_runs_by_start_time_and_reports_change_from_the_first() -> None:
    at = [F_HZ[10], F_HZ[15]]  # on the grid: values_at returns the points themselves
    runs = [response("late", 160e-6, start=T0 + timedelta(hours=8), gain_offset_db=0.04),
            response("first", 160e-6, start=T0),
            response("middle", 160e-6, start=T0 + timedelta(hours=4), gain_offset_db=0.02),
            response("untimed", 160e-6)]
    d = drift(runs, at)
    assert d.names == ("first", "middle", "late")  # sorted by time; the untimed run left out
    np.testing.assert_allclose(d.gain_change_db, [[0, 0], [0.02, 0.02], [0.04, 0.04]], atol=1e-12)
    np.testing.assert_allclose(d.gain_db[0], rc(160e-6)[0][[10, 15]], atol=1e-12)
    np.testing.assert_allclose(d.elapsed_s, [0, 4 * 3600, 8 * 3600])
    assert np.all(d.phase_change_deg == 0)
    with pytest.raises(ValueError, match="start time"):
        drift([response("untimed", 160e-6)], at)
    with pytest.raises(ValueError, match="positive"):
        drift(runs, [0.0])


def test_values_at_interpolates_in_log_frequency_and_never_extrapolates() -> None:
    g, _ = rc(160e-6)
    mid = math.sqrt(F_HZ[3] * F_HZ[4])  # halfway in log f: the mean of the neighbours
    assert values_at(mid, F_HZ, g)[0] == pytest.approx((g[3] + g[4]) / 2, abs=1e-12)
    assert math.isnan(values_at(5.0, F_HZ, g)[0]) and math.isnan(values_at(2e5, F_HZ, g)[0])


def test_difference_summary_finds_the_largest_departure_from_the_golden_run() -> None:
    golden = response("G", 160e-6)
    run = response("R", 160e-6)
    run.gain_db[7] += 0.25
    run.phase_deg[12] -= 1.5
    d = difference_summary(run, golden)
    assert d["max_gain_difference_db"] == pytest.approx(0.25, abs=1e-12) and d["at_gain_hz"] == F_HZ[7]
    assert d["max_phase_difference_deg"] == pytest.approx(-1.5, abs=1e-12) and d["at_phase_hz"] == F_HZ[12]


def test_parse_utc_reads_iso_8601_and_refuses_the_rest() -> None:
    assert parse_utc("2025-03-01T20:00:00Z") == T0
    assert parse_utc("2025-03-01T20:00:00+00:00") == T0
    assert parse_utc("2025-03-01T20:00:00") == T0  # naive: taken as UTC
    assert parse_utc("yesterday") is None and parse_utc("") is None
