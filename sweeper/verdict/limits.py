"""Acceptance limits: what a measured point is judged against.

Limits at each frequency come from the predicted circuit's tolerance band (worst-case or
Monte Carlo), widened by a measurement allowance, or from fixed +-dB / +-degrees around the
model, and are narrowed by mask segments where a plan gives them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweeper.measure.phasewrap import wrap_phase_deg


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


#: Wrap angles to (-180, 180] degrees (the one implementation lives with the numerics).
wrap_deg = wrap_phase_deg


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
