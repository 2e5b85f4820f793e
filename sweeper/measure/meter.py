"""Meter mode: an instrument that measures gain and phase itself; the uncertainty comes from
repeat readings (GUM type A)."""

from __future__ import annotations

import math

import numpy as np

from sweeper.instruments.roles import Meter
from sweeper.measure.point import Measurement
from sweeper.measure.settings import EngineSettings


def measure_with_meter(f: float, settings: EngineSettings, meter: Meter) -> Measurement:
    """Measure one frequency f (Hz) with a gain-phase meter; uncertainty from repeat readings
    (GUM type A, s / sqrt(n))."""
    n = max(3, settings.averages)
    readings = [meter.measure(f) for _ in range(n)]
    gains = np.array([r.gain_db for r in readings])
    phases = np.array([r.phase_deg for r in readings])
    ref = phases[0]
    rel = (phases - ref + 180.0) % 360.0 - 180.0
    phase = float(((ref + rel.mean()) + 180.0) % 360.0 - 180.0)
    return Measurement(
        gain_db=float(gains.mean()),
        phase_deg=180.0 if phase == -180.0 else phase,
        u_gain_db=float(gains.std(ddof=1) / math.sqrt(n)),
        u_phase_deg=float(rel.std(ddof=1) / math.sqrt(n)),
        amplitude_in_v=_mean_finite([r.amplitude_in_v for r in readings]),
        amplitude_out_v=_mean_finite([r.amplitude_out_v for r in readings]),
        captures=n,
        flags=0,
    )


def _mean_finite(values: list[float]) -> float:
    finite = [v for v in values if math.isfinite(v)]
    return float(np.mean(finite)) if finite else math.nan


__all__ = ["measure_with_meter"]
