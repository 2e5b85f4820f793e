"""Limits and verdicts: what a measured point is judged against, and how.

Limits at each frequency come from the predicted circuit's tolerance band (worst-case or
Monte Carlo), widened by a measurement allowance, or from fixed +-dB / +-degrees around the
model, and are narrowed by mask segments where a plan gives them. The decision rules follow
ILAC-G8:09/2019 and ISO 14253-1:2017: *simple acceptance* (pass when the measured value lies
inside the limits) and *guarded acceptance* (a clean pass needs the value inside by at least
the expanded uncertainty U = k u; a value within U of a limit, on either side, is reported as
uncertain, never as a clean pass or a clean fail).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweeper.measure.point import Verdict

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


@dataclass
class Limits:
    """Per-frequency acceptance limits and the model they surround (dB, degrees)."""

    frequency_hz: np.ndarray
    model_gain_db: np.ndarray
    model_phase_deg: np.ndarray
    gain_lo_db: np.ndarray
    gain_hi_db: np.ndarray
    phase_lo_deg: np.ndarray
    phase_hi_deg: np.ndarray

    def at(self, index: int) -> dict[str, float]:
        """The limits of one point as plain floats, keyed like Point fields."""
        return {
            "model_gain_db": float(self.model_gain_db[index]),
            "model_phase_deg": float(self.model_phase_deg[index]),
            "gain_lo_db": float(self.gain_lo_db[index]),
            "gain_hi_db": float(self.gain_hi_db[index]),
            "phase_lo_deg": float(self.phase_lo_deg[index]),
            "phase_hi_deg": float(self.phase_hi_deg[index]),
        }

    def as_arrays(self) -> dict[str, np.ndarray]:
        """All arrays by name, for the run file's prediction group."""
        return {
            "frequency_hz": self.frequency_hz,
            "model_gain_db": self.model_gain_db,
            "model_phase_deg": self.model_phase_deg,
            "gain_lo_db": self.gain_lo_db,
            "gain_hi_db": self.gain_hi_db,
            "phase_lo_deg": self.phase_lo_deg,
            "phase_hi_deg": self.phase_hi_deg,
        }


def wrap_deg(x: np.ndarray | float) -> np.ndarray:
    """Wrap angles to (-180, 180] degrees."""
    y = np.mod(np.asarray(x, dtype=float) + 180.0, 360.0) - 180.0
    return np.where(y == -180.0, 180.0, y)


def build_limits(
    frequency_hz: np.ndarray,
    model_gain_db: np.ndarray,
    model_phase_deg: np.ndarray,
    band: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None = None,
    allowance_gain_db: float = 0.0,
    allowance_phase_deg: float = 0.0,
    fixed_gain_db: float | None = None,
    fixed_phase_deg: float | None = None,
    masks: list[dict[str, float | None]] | None = None,
) -> Limits:
    """Combine band, allowance, fixed tolerances and masks into per-point limits.

    band: (gain_lo_db, gain_hi_db, phase_lo_deg, phase_hi_deg) of the tolerance band, or None.
    Fixed tolerances widen the limits to at least model +- fixed. Masks (dicts with from_hz,
    to_hz and optional gain_min_db, gain_max_db, phase_min_deg, phase_max_deg) narrow the limits
    inside their frequency range. Where nothing constrains a quantity its limits are +-inf.
    """
    f = np.asarray(frequency_hz, dtype=float)
    g0 = np.asarray(model_gain_db, dtype=float)
    p0 = np.asarray(model_phase_deg, dtype=float)
    glo, ghi = _base_limits(g0, None if band is None else band[0:2], allowance_gain_db, fixed_gain_db)
    plo, phi = _base_limits(p0, None if band is None else band[2:4], allowance_phase_deg, fixed_phase_deg)
    for mask in masks or []:
        inside = (f >= float(mask["from_hz"])) & (f <= float(mask["to_hz"]))
        if mask.get("gain_min_db") is not None:
            glo = np.where(inside, np.maximum(glo, float(mask["gain_min_db"])), glo)
        if mask.get("gain_max_db") is not None:
            ghi = np.where(inside, np.minimum(ghi, float(mask["gain_max_db"])), ghi)
        if mask.get("phase_min_deg") is not None:
            plo = np.where(inside, np.maximum(plo, float(mask["phase_min_deg"])), plo)
        if mask.get("phase_max_deg") is not None:
            phi = np.where(inside, np.minimum(phi, float(mask["phase_max_deg"])), phi)
    return Limits(f, g0, p0, np.asarray(glo), np.asarray(ghi), np.asarray(plo), np.asarray(phi))


def _base_limits(
    model: np.ndarray,
    band: tuple[np.ndarray, np.ndarray] | None,
    allowance: float,
    fixed: float | None,
) -> tuple[np.ndarray, np.ndarray]:
    """Limits of one quantity before masks: band +- allowance, widened to model +- fixed.

    With no band and no fixed tolerance, an allowance alone acts as a fixed tolerance; with
    none of the three the quantity is unconstrained (+-inf).
    """
    if band is not None:
        lo = np.asarray(band[0], dtype=float) - allowance
        hi = np.asarray(band[1], dtype=float) + allowance
    elif fixed is not None or allowance > 0:
        lo, hi = model - allowance, model + allowance
    else:
        return np.full_like(model, -np.inf), np.full_like(model, np.inf)
    if fixed is not None:
        lo = np.minimum(lo, model - fixed)
        hi = np.maximum(hi, model + fixed)
    return lo, hi


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
