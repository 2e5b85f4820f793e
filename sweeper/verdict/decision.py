"""Decision rules and verdicts: how a measured point is judged against its limits.

The decision rules follow ILAC-G8:09/2019 and ISO 14253-1:2017: *simple acceptance* (pass when
the measured value lies inside the limits) and *guarded acceptance* (a clean pass needs the value
inside by at least the expanded uncertainty U = k u; a value within U of a limit, on either
side, is reported as uncertain, never as a clean pass or a clean fail).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from sweeper.measure.budget import DEFAULT_COVERAGE_PROBABILITY, student_k
from sweeper.measure.point import Flag, Point, Verdict
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
    coverage_factor_phase: float | None = None,
) -> dict[str, float | int]:
    """Judge one point against its limits: verdict (worst of gain and phase) and both margins.

    coverage_factor: k of the gain's U = k u; coverage_factor_phase: k of the phase's (the gain's
    when None)."""
    k_phase = coverage_factor if coverage_factor_phase is None else coverage_factor_phase
    mg = margin(gain_db, limits["gain_lo_db"], limits["gain_hi_db"])
    mp = phase_margin(phase_deg, limits["model_phase_deg"], limits["phase_lo_deg"], limits["phase_hi_deg"])
    vg = decide(mg, coverage_factor * u_gain_db, rule)
    vp = decide(mp, k_phase * u_phase_deg, rule)
    return {"verdict": int(max(vg, vp)), "margin_gain_db": mg, "margin_phase_deg": mp}


def run_verdict(point_verdicts: list[int] | np.ndarray) -> Verdict:
    """The run's verdict: its worst point (FAIL > FAIL? > PASS? > PASS); NOT_JUDGED if none judged."""
    judged = [int(v) for v in point_verdicts if int(v) != Verdict.NOT_JUDGED]
    return Verdict(max(judged)) if judged else Verdict.NOT_JUDGED


@dataclass(frozen=True)
class PointJudge:
    """Judges measured points: fills in a point's model, limits, coverage factors, expanded
    uncertainties, verdict and margins.

    limits: the run's limits at its planned frequencies; rule: 'simple' or 'guarded';
    coverage_factor: an explicit k of U = k u (the plan's override), or None for Student's t at
    coverage_probability with the point's effective degrees of freedom (GUM G.3, G.4);
    limits_at: the model and limits at any frequency (Hz), keyed like `Limits.at`. A point
    measured away from its planned frequency (nudged for coherence) is judged at the frequency
    it was measured at, through limits_at; without it (or at the planned frequency exactly) the
    planned limits are used. A point whose final capture clipped is NOT_JUDGED.
    """

    limits: Limits
    rule: str
    coverage_factor: float | None = None
    coverage_probability: float = DEFAULT_COVERAGE_PROBABILITY
    limits_at: Callable[[float], dict[str, float]] | None = None

    def limits_for(self, point: Point) -> dict[str, float]:
        """The model and limits at the frequency the point was measured at."""
        index = point.index
        planned = float(self.limits.frequency_hz[index]) if 0 <= index < len(self.limits.frequency_hz) else None
        if self.limits_at is None or planned == point.frequency_hz or not np.isfinite(point.frequency_hz):
            return self.limits.at(index)
        return self.limits_at(float(point.frequency_hz))

    def coverage_factors(self, point: Point) -> tuple[float, float]:
        """(k of gain, k of phase) for this point."""
        if self.coverage_factor is not None:
            return float(self.coverage_factor), float(self.coverage_factor)
        return (student_k(point.dof_eff_gain, self.coverage_probability),
                student_k(point.dof_eff_phase, self.coverage_probability))

    def __call__(self, point: Point) -> Point:
        """The point judged (a new Point; the one given is not changed)."""
        at = self.limits_for(point)
        k_gain, k_phase = self.coverage_factors(point)
        result = judge_point(point.gain_db, point.phase_deg, point.u_gain_db, point.u_phase_deg, at, self.rule,
                             k_gain, k_phase)
        verdict = int(result["verdict"])
        if point.flags & Flag.CLIPPED:
            verdict = int(Verdict.NOT_JUDGED)  # a clipped capture's gain says nothing of the board
        return replace(point, **at, verdict=verdict, margin_gain_db=float(result["margin_gain_db"]),
                       margin_phase_deg=float(result["margin_phase_deg"]), k_gain=k_gain, k_phase=k_phase,
                       expanded_u_gain_db=k_gain * point.u_gain_db, expanded_u_phase_deg=k_phase * point.u_phase_deg)
