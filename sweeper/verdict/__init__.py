"""The verdict: what a board should do (prediction), the limits around it, and the decision
rules (ILAC-G8, ISO 14253-1) that judge each measured point and the run."""

from sweeper.verdict.decision import (
    VERDICT_LABELS,
    VERDICT_MEANINGS,
    PointJudge,
    decide,
    judge_point,
    margin,
    phase_margin,
    run_verdict,
)
from sweeper.verdict.limits import Limits, build_limits, wrap_deg

__all__ = [
    "VERDICT_LABELS",
    "VERDICT_MEANINGS",
    "Limits",
    "PointJudge",
    "build_limits",
    "decide",
    "judge_point",
    "margin",
    "phase_margin",
    "run_verdict",
    "wrap_deg",
]
