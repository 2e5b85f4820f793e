"""The simulated scope's own measurements, computed from its quantised record as a scope would.

Pure functions on numpy arrays. They are deliberately the simple methods a scope's firmware
uses, not the best estimators: peak-to-peak is max - min (so noise biases it upwards), and
phase comes from the times of mid-level rising crossings (so noise jitters it).
"""

from __future__ import annotations

import math

import numpy as np

#: Hysteresis around the mid level, as a fraction of the half peak-to-peak: a crossing counts
#: only once the signal has been below (mid - band) and then above (mid + band), so noise on a
#: slow edge does not produce extra crossings (common practice in scope edge finding).
HYSTERESIS_FRAC = 0.1


def peak_to_peak(values: np.ndarray) -> float:
    """max - min of a record, in the record's units (NaN for an empty record)."""
    values = np.asarray(values, dtype=float)
    if values.size == 0:
        return math.nan
    return float(values.max() - values.min())


def rising_crossings(values: np.ndarray, hysteresis_frac: float = HYSTERESIS_FRAC) -> np.ndarray:
    """Fractional sample indices where the record rises through its mid level (max + min) / 2.

    A crossing is a passage from below (mid - band) to above (mid + band), band =
    hysteresis_frac x half the peak-to-peak; its time is interpolated linearly between the
    last sample below the band and the first sample above it.
    """
    v = np.asarray(values, dtype=float)
    if v.size < 2:
        return np.empty(0)
    lo, hi = float(v.min()), float(v.max())
    if hi <= lo:
        return np.empty(0)
    mid = 0.5 * (lo + hi)
    band = hysteresis_frac * 0.5 * (hi - lo)
    state = np.where(v > mid + band, 1, np.where(v < mid - band, -1, 0))
    marked = np.flatnonzero(state)
    if marked.size < 2:
        return np.empty(0)
    levels = state[marked]
    rising = np.flatnonzero((levels[:-1] == -1) & (levels[1:] == 1))
    below = marked[rising]  # last sample below the band
    above = marked[rising + 1]  # first sample above it
    v_below, v_above = v[below], v[above]
    return below + (mid - v_below) / (v_above - v_below) * (above - below)


def crossing_phase_deg(reference: np.ndarray, signal: np.ndarray) -> float:
    """Phase of signal relative to reference, degrees in (-180, 180], from rising crossings.

    The period is the median spacing of the reference's crossings; each reference crossing is
    paired with the next crossing of signal; a later signal crossing is a lag (negative phase).
    The per-crossing phases are averaged on the circle. NaN when either record has fewer than
    two crossings.
    """
    t_ref = rising_crossings(reference)
    t_sig = rising_crossings(signal)
    if t_ref.size < 2 or t_sig.size < 1:
        return math.nan
    period = float(np.median(np.diff(t_ref)))
    if not period > 0:
        return math.nan
    following = np.searchsorted(t_sig, t_ref)
    usable = following < t_sig.size
    if not usable.any():
        return math.nan
    delay = t_sig[following[usable]] - t_ref[usable]
    angles = -2.0 * math.pi * delay / period
    mean = math.degrees(math.atan2(float(np.mean(np.sin(angles))), float(np.mean(np.cos(angles)))))
    return 180.0 if mean <= -180.0 else mean
