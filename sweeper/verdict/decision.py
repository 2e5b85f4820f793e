"""Decision rules and verdicts: how a measured point is judged against its limits.

The decision rules follow ILAC-G8:09/2019 and ISO 14253-1:2017: *simple acceptance* (pass when
the measured value lies inside the limits) and *guarded acceptance* (a clean pass needs the value
inside by at least the expanded uncertainty U = k u; a value within U of a limit, on either
side, is reported as uncertain, never as a clean pass or a clean fail).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from sweeper.measure.point import Point, Verdict
from sweeper.verdict.limits import Limits, wrap_deg

VERDICT_LABELS: dict[int, str] = {
    Verdict.NOT_JUDGED: "NOT JUDGED",
    Verdict.PASS: "PASS",
    Verdict.PASS_UNCERTAIN: "PASS?",
    Verdict.FAIL_UNCERTAIN: "FAIL?",
    Verdict.FAIL: "FAIL",
}

VERDICT_MEANINGS: dict[int, str] = {
    Verdict.NOT_JUDGED: "no limits apply or nothing was measured",
    Verdict.PASS: "inside every limit",
    Verdict.PASS_UNCERTAIN: "inside the limits, but by less than the expanded uncertainty: conformance not proven",
    Verdict.FAIL_UNCERTAIN: "outside a limit, but by less than the expanded uncertainty: non-conformance not proven",
    Verdict.FAIL: "outside a limit",
}


def margin(value: float, lo: float, hi: float) -> float:
    """Signed distance to the nearest limit: positive inside, negative outside (same unit as value)."""
    return float(min(value - lo, hi - value))


def phase_margin(phase_deg: float, model_deg: float, lo_deg: float, hi_deg: float) -> float:
    """Margin of a wrapped phase against limits around the model, immune to the +-180 cut."""
    d = float(wrap_deg(phase_deg - model_deg))
    return margin(d, lo_deg - model_deg, hi_deg - model_deg)


def decide(margin_value: float, expanded_u: float, rule: str) -> Verdict:
    """Verdict for one quantity from its margin (>0 inside) and expanded uncertainty U = k u.

    rule "simple": PASS when margin >= 0, else FAIL (ILAC-G8 simple acceptance, w = 0).
    rule "guarded": PASS when margin >= U, FAIL when margin <= -U, otherwise the uncertain
    states (ISO 14253-1: conformance or non-conformance not proven).
    """
    if np.isnan(margin_value):
        return Verdict.NOT_JUDGED
    if np.isinf(margin_value) and margin_value > 0:
        return Verdict.PASS
    if rule == "simple":
        return Verdict.PASS if margin_value >= 0 else Verdict.FAIL
    if rule != "guarded":
        raise ValueError(f"unknown decision rule {rule!r} (expected 'simple' or 'guarded')")
    u = 0.0 if np.isnan(expanded_u) else abs(expanded_u)
    if margin_value >= u:
        return Verdict.PASS
    if margin_value <= -u:
        return Verdict.FAIL
    return Verdict.PASS_UNCERTAIN if margin_value >= 0 else Verdict.FAIL_UNCERTAIN


def judge_point(
    gain_db: float,
    phase_deg: float,
    u_gain_db: float,
    u_phase_deg: float,
    limits: dict[str, float],
    rule: str,
    coverage_factor: float,
) -> dict[str, float | int]:
    """Judge one point against its limits: verdict (worst of gain and phase) and both margins."""
    mg = margin(gain_db, limits["gain_lo_db"], limits["gain_hi_db"])
    mp = phase_margin(phase_deg, limits["model_phase_deg"], limits["phase_lo_deg"], limits["phase_hi_deg"])
    vg = decide(mg, coverage_factor * u_gain_db, rule)
    vp = decide(mp, coverage_factor * u_phase_deg, rule)
    return {"verdict": int(max(vg, vp)), "margin_gain_db": mg, "margin_phase_deg": mp}


def run_verdict(point_verdicts: list[int] | np.ndarray) -> Verdict:
    """The run's verdict: its worst point (FAIL > FAIL? > PASS? > PASS); NOT_JUDGED if none judged."""
    judged = [int(v) for v in point_verdicts if int(v) != Verdict.NOT_JUDGED]
    return Verdict(max(judged)) if judged else Verdict.NOT_JUDGED


@dataclass(frozen=True)
class PointJudge:
    """Judges measured points: fills in a point's model, limits, verdict and margins.

    limits: the run's limits at its planned frequencies; rule: 'simple' or 'guarded';
    coverage_factor: k of the expanded uncertainty U = k u.
    """

    limits: Limits
    rule: str
    coverage_factor: float

    def __call__(self, point: Point) -> Point:
        """The point judged (a new Point; the one given is not changed)."""
        at = self.limits.at(point.index)
        result = judge_point(point.gain_db, point.phase_deg, point.u_gain_db, point.u_phase_deg, at, self.rule,
                             self.coverage_factor)
        return replace(point, **at, verdict=int(result["verdict"]), margin_gain_db=float(result["margin_gain_db"]),
                       margin_phase_deg=float(result["margin_phase_deg"]))
