"""Coverage factor of the expanded uncertainty U = k u, and its use in guarded decisions.

Outside references: JCGM 100:2008 (GUM) annex G, table G.2 (Student's t for a 95.45 % and
95 % level; 2 degrees of freedom at 95 %: t = 4.30), eq. G.2b (Welch-Satterthwaite), with
scipy.stats.t as the numerical reference; ISO 14253-1:2017 guarded acceptance (w = U).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from sweeper.measure.budget import student_k, welch_satterthwaite
from sweeper.measure.point import Point, Verdict
from sweeper.verdict import PointJudge, build_limits


def test_three_readings_at_95_percent_give_k_4_30():
    # GUM table G.2: nu = 2, p = 95 % -> t = 4.30 (printed to 3 figures, so 0.005 tolerance).
    assert student_k(2, 0.95) == pytest.approx(4.30, abs=0.005)
    assert student_k(2, 0.95) == pytest.approx(stats.t.ppf(0.975, 2), rel=1e-12)
    # Infinite degrees of freedom: the normal quantile (GUM G.3.2, 1.960 at 95 %).
    assert student_k(math.inf, 0.95) == pytest.approx(stats.norm.ppf(0.975), rel=1e-12)


def test_welch_satterthwaite_matches_the_gum_formula():
    # GUM G.4.1, eq. G.2b, computed here by hand: u = (1.0, 2.0), nu = (4, inf) ->
    # nu_eff = (1 + 4)^2 / (1 / 4) = 100.
    assert welch_satterthwaite([1.0, 2.0], [4.0, math.inf]) == pytest.approx(100.0)
    assert welch_satterthwaite([1.0, 2.0], [math.inf, math.inf]) == math.inf


def _point(gain_db: float, u_gain_db: float, dof: float) -> Point:
    return Point(index=0, frequency_hz=1000.0, gain_db=gain_db, phase_deg=0.0, u_gain_db=u_gain_db,
                 u_phase_deg=0.0, amplitude_in_v=1.0, amplitude_out_v=1.0, dof_eff_gain=dof, dof_eff_phase=dof)


def _judge(k: float | None) -> PointJudge:
    limits = build_limits(np.array([1000.0]), np.array([0.0]), np.array([0.0]), fixed_gain_db=1.0,
                          fixed_phase_deg=5.0)
    return PointJudge(limits, "guarded", k)


@pytest.mark.parametrize("k", [2.0, 3.0])
def test_a_point_between_u_and_k_u_of_a_limit_is_uncertain(k: float):
    # ISO 14253-1: inside by more than u but less than U = k u -> conformance not proven (PASS?).
    # A judge that ignored k (U = u) would call this PASS, so the test sees it.
    u = 0.01
    inside_by = 0.5 * (1.0 + k) * u  # strictly between u and k u
    point = _point(1.0 - inside_by, u, math.inf)
    judged = _judge(k)(point)
    assert judged.verdict == Verdict.PASS_UNCERTAIN
    assert judged.k_gain == k and judged.expanded_u_gain_db == pytest.approx(k * u)
    # and outside by the same amount: FAIL?, not FAIL
    assert _judge(k)(_point(1.0 + inside_by, u, math.inf)).verdict == Verdict.FAIL_UNCERTAIN
    # beyond k u inside: a clean PASS
    assert _judge(k)(_point(1.0 - 1.01 * k * u, u, math.inf)).verdict == Verdict.PASS


def test_student_k_from_degrees_of_freedom_decides():
    # No explicit k: 2 degrees of freedom give k = 4.30 (GUM table G.2), so a point 3 u inside
    # its limit is PASS? although k = 2 would have passed it.
    u = 0.01
    judged = _judge(None)(_point(1.0 - 3.0 * u, u, 2.0))
    assert judged.k_gain == pytest.approx(stats.t.ppf(0.975, 2))
    assert judged.verdict == Verdict.PASS_UNCERTAIN
    assert _judge(2.0)(_point(1.0 - 3.0 * u, u, 2.0)).verdict == Verdict.PASS
