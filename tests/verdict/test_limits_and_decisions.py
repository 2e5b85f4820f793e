"""Limits and decision rules (sweeper.verdict).

Outside references: ILAC-G8:09/2019 (guidelines on decision rules and statements of
conformity) and ISO 14253-1:2017 (decision rules for verifying conformity): simple acceptance
(guard band w = 0) and guarded acceptance (acceptance zone shrunk by w = U = k u). The cases
below are worked by hand from those definitions.
"""

import numpy as np
import pytest

from sweeper.verdict import build_limits, decide, judge_point, phase_margin, run_verdict, wrap_deg
from sweeper.measure.point import Verdict


@pytest.mark.parametrize(
    "margin_value, u_expanded, rule, expected",
    [
        # ILAC-G8 simple acceptance: inside (margin >= 0) passes whatever the uncertainty.
        (0.01, 0.5, "simple", Verdict.PASS),
        (-0.01, 0.5, "simple", Verdict.FAIL),
        (0.0, 0.5, "simple", Verdict.PASS),
        # ISO 14253-1 guarded acceptance: conformance proven only beyond U inside the limit.
        (0.6, 0.5, "guarded", Verdict.PASS),
        (0.5, 0.5, "guarded", Verdict.PASS),
        (0.2, 0.5, "guarded", Verdict.PASS_UNCERTAIN),
        (-0.2, 0.5, "guarded", Verdict.FAIL_UNCERTAIN),
        (-0.5, 0.5, "guarded", Verdict.FAIL),
        (-0.7, 0.5, "guarded", Verdict.FAIL),
    ],
)
def test_decision_rules(margin_value, u_expanded, rule, expected):
    assert decide(margin_value, u_expanded, rule) == expected


def test_unknown_rule_is_refused():
    with pytest.raises(ValueError, match="decision rule"):
        decide(0.1, 0.1, "lenient")


def test_judge_point_takes_worst_quantity_and_margins():
    limits = {"model_gain_db": -3.0, "model_phase_deg": -45.0, "gain_lo_db": -3.5, "gain_hi_db": -2.5,
              "phase_lo_deg": -47.0, "phase_hi_deg": -43.0}
    # Gain 0.4 dB inside its nearest limit with U = 2 * 0.01 -> PASS; phase 1 deg outside -> FAIL.
    out = judge_point(-2.9, -48.0, 0.01, 0.05, limits, "guarded", 2.0)
    assert out["verdict"] == Verdict.FAIL
    assert out["margin_gain_db"] == pytest.approx(0.4)
    assert out["margin_phase_deg"] == pytest.approx(-1.0)


def test_phase_margin_across_the_180_cut():
    # Model at 179 deg with +-3 deg limits; a measurement of -179 deg is 2 deg from the model,
    # inside by 1 deg. Naive subtraction would put it 358 deg away.
    assert phase_margin(-179.0, 179.0, 176.0, 182.0) == pytest.approx(1.0)


def test_wrap_deg_interval():
    # (-180, 180] convention (GUIDE.md): -180 maps to +180.
    assert np.allclose(wrap_deg(np.array([-180.0, 180.0, 190.0, -190.0, 540.0])), [180.0, 180.0, -170.0, 170.0, 180.0])


def test_limits_band_allowance_fixed_and_masks():
    f = np.array([10.0, 100.0, 1000.0])
    g0 = np.array([0.0, -1.0, -10.0])
    p0 = np.array([-5.0, -30.0, -80.0])
    band = (g0 - 0.2, g0 + 0.1, p0 - 2.0, p0 + 2.0)
    lim = build_limits(f, g0, p0, band=band, allowance_gain_db=0.05, allowance_phase_deg=0.5)
    assert np.allclose(lim.gain_lo_db, g0 - 0.25) and np.allclose(lim.gain_hi_db, g0 + 0.15)
    assert np.allclose(lim.phase_lo_deg, p0 - 2.5) and np.allclose(lim.phase_hi_deg, p0 + 2.5)
    # Fixed tolerance widens to at least model +- fixed.
    lim = build_limits(f, g0, p0, band=band, fixed_gain_db=0.5)
    assert np.allclose(lim.gain_lo_db, g0 - 0.5) and np.allclose(lim.gain_hi_db, g0 + 0.5)
    # A mask narrows inside its range only.
    lim = build_limits(f, g0, p0, fixed_gain_db=1.0, fixed_phase_deg=10.0,
                       masks=[{"from_hz": 50.0, "to_hz": 200.0, "gain_max_db": -0.5}])
    assert np.allclose(lim.gain_hi_db, [1.0, -0.5, -9.0])
    # Nothing given: unconstrained.
    lim = build_limits(f, g0, p0)
    assert np.all(np.isinf(lim.gain_lo_db)) and np.all(np.isinf(lim.phase_hi_deg))
    assert judge_point(5.0, 0.0, 0.0, 0.0, lim.at(0), "guarded", 2.0)["verdict"] == Verdict.PASS


def test_run_verdict_is_worst_point():
    assert run_verdict([Verdict.PASS, Verdict.PASS_UNCERTAIN, Verdict.PASS]) == Verdict.PASS_UNCERTAIN
    assert run_verdict([Verdict.PASS, Verdict.FAIL, Verdict.FAIL_UNCERTAIN]) == Verdict.FAIL
    assert run_verdict([]) == Verdict.NOT_JUDGED
    assert run_verdict([Verdict.NOT_JUDGED, Verdict.PASS]) == Verdict.PASS
