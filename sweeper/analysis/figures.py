"""Derived figures of a measured response, found from the points alone (no circuit model).

Meant for low-pass and high-pass responses: the passband is the side of the sweep with the
higher gain at its end point, and the -3 dB frequency is where the gain first falls
10 log10(1/2) = -3.0103 dB below that end point's gain (half power), found by linear
interpolation of gain in log10(frequency). The roll-off is the least-squares slope of gain
against log10(frequency) over the points at least `ROLLOFF_DEPTH_DB` below the passband, on
the far side of the -3 dB frequency. Figures that a sweep does not reach are NaN.

Everything here is a pure function of numpy arrays, apart from `derived_figures`, which
takes the points frame of a run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sweeper.verdict import wrap_deg

HALF_POWER_DB = 10.0 * math.log10(0.5)  # -3.0103 dB: |H| = passband / sqrt(2)
ROLLOFF_DEPTH_DB = 20.0  # roll-off fitted only this far below the passband, dB (well past the corner)
ROLLOFF_MIN_POINTS = 3  # fewer points than this give no roll-off figure
FEATURE_MIN_DB = -HALF_POWER_DB  # a peak or dip must stand out of both ends by this much, dB

FIGURE_KEYS: tuple[str, ...] = (
    "passband_gain_db",
    "f_3db_hz",
    "phase_at_f_3db_deg",
    "rolloff_db_per_decade",
    "peak_gain_db",
    "peak_frequency_hz",
)

FIGURE_LABELS: dict[str, tuple[str, str]] = {
    "passband_gain_db": ("passband gain", "dB"),
    "f_3db_hz": ("-3 dB frequency", "Hz"),
    "phase_at_f_3db_deg": ("phase at the -3 dB frequency", "degree"),
    "rolloff_db_per_decade": ("roll-off beyond the corner", "dB/decade"),
    "peak_gain_db": ("peak gain", "dB"),
    "peak_frequency_hz": ("frequency of the peak gain", "Hz"),
}
"""Human label and unit of each derived figure, keyed like `derived_figures`."""


def unwrap_deg(phase_deg: np.ndarray) -> np.ndarray:
    """Remove 360-degree jumps between neighbours (degrees); NaN entries stay NaN and are skipped."""
    phase = np.asarray(phase_deg, dtype=float)
    out = phase.copy()
    finite = np.isfinite(phase)
    if finite.any():
        out[finite] = np.unwrap(phase[finite], period=360.0)
    return out


def sorted_finite(frequency_hz: np.ndarray, *values: np.ndarray) -> tuple[np.ndarray, ...]:
    """Sort by frequency and keep rows where the frequency (> 0 Hz) and every value are finite."""
    f = np.asarray(frequency_hz, dtype=float)
    vs = [np.asarray(v, dtype=float) for v in values]
    keep = np.isfinite(f) & (f > 0)
    for v in vs:
        keep &= np.isfinite(v)
    order = np.argsort(f[keep], kind="stable")
    return (f[keep][order], *(v[keep][order] for v in vs))


def interpolate_log_f(at_hz: np.ndarray | float, frequency_hz: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Linear interpolation of `values` in log10(frequency) at `at_hz`; NaN outside the range.

    `frequency_hz` must be sorted ascending and positive, Hz.
    """
    at = np.atleast_1d(np.asarray(at_hz, dtype=float))
    f = np.asarray(frequency_hz, dtype=float)
    v = np.asarray(values, dtype=float)
    out = np.full(at.shape, np.nan)
    if f.size == 0:
        return out
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.log10(at)
    inside = np.isfinite(x) & (at >= f[0]) & (at <= f[-1])
    if f.size == 1:
        out[inside] = v[0]
    else:
        out[inside] = np.interp(x[inside], np.log10(f), v)
    return out


def passband_side(gain_db: np.ndarray) -> str:
    """'low' when the lowest-frequency gain is at least the highest-frequency gain, else 'high'.

    `gain_db` is sorted by frequency.
    """
    return "low" if gain_db[0] >= gain_db[-1] else "high"


def half_power_frequency(frequency_hz: np.ndarray, gain_db: np.ndarray, side: str) -> float:
    """First frequency (Hz) where the gain falls HALF_POWER_DB below the passband end point.

    Arrays sorted by frequency and finite. side 'low': passband at the lowest frequency, the
    search runs upward; 'high': the reverse. Linear interpolation of dB in log10(f); NaN when
    the gain never falls that far.
    """
    f, g = np.asarray(frequency_hz, dtype=float), np.asarray(gain_db, dtype=float)
    if side == "high":
        f, g = f[::-1], g[::-1]
    elif side != "low":
        raise ValueError(f"side must be 'low' or 'high', not {side!r}")
    if g.size < 2:
        return math.nan
    level = g[0] + HALF_POWER_DB
    below = np.flatnonzero(g < level)
    if below.size == 0:
        return math.nan
    i = int(below[0])
    x0, x1 = math.log10(f[i - 1]), math.log10(f[i])
    g0, g1 = g[i - 1], g[i]
    x = x0 + (level - g0) * (x1 - x0) / (g1 - g0)
    return float(10.0**x)


def rolloff_slope(
    frequency_hz: np.ndarray, gain_db: np.ndarray, passband_gain_db: float, side: str, f_3db_hz: float
) -> float:
    """Least-squares slope (dB/decade) of gain against log10(f) well past the corner.

    Uses the points at least ROLLOFF_DEPTH_DB below the passband and beyond `f_3db_hz`
    (above it for side 'low', below it for 'high'); NaN with fewer than ROLLOFF_MIN_POINTS.
    """
    f, g = np.asarray(frequency_hz, dtype=float), np.asarray(gain_db, dtype=float)
    if not math.isfinite(f_3db_hz):
        return math.nan
    beyond = f > f_3db_hz if side == "low" else f < f_3db_hz
    use = beyond & (g <= passband_gain_db - ROLLOFF_DEPTH_DB)
    if np.count_nonzero(use) < ROLLOFF_MIN_POINTS:
        return math.nan
    slope, _ = np.polyfit(np.log10(f[use]), g[use], 1)
    return float(slope)


def figures_from_arrays(frequency_hz: np.ndarray, gain_db: np.ndarray, phase_deg: np.ndarray) -> dict[str, float]:
    """Derived figures (keys FIGURE_KEYS) of a response given as arrays (Hz, dB, degrees).

    Rows with a non-finite frequency or gain are ignored; the phase is unwrapped over the
    remaining points (in frequency order) before it is interpolated, and reported wrapped.
    """
    f, g = sorted_finite(frequency_hz, gain_db)
    out = dict.fromkeys(FIGURE_KEYS, math.nan)
    if f.size < 2:
        return out
    side = passband_side(g)
    passband = float(g[0] if side == "low" else g[-1])
    f3 = half_power_frequency(f, g, side)
    ipk = int(np.argmax(g))
    out.update(
        passband_gain_db=passband,
        f_3db_hz=f3,
        rolloff_db_per_decade=rolloff_slope(f, g, passband, side, f3),
        peak_gain_db=float(g[ipk]),
        peak_frequency_hz=float(f[ipk]),
    )
    fp, p = sorted_finite(frequency_hz, phase_deg)
    if math.isfinite(f3) and fp.size >= 2:
        out["phase_at_f_3db_deg"] = float(wrap_deg(interpolate_log_f(f3, fp, unwrap_deg(p))[0]))
    return out


def derived_figures(frame: pd.DataFrame) -> dict[str, float]:
    """Derived figures of a run's measured points (columns frequency_hz, gain_db, phase_deg).

    Keys (units by suffix): passband_gain_db, f_3db_hz, phase_at_f_3db_deg,
    rolloff_db_per_decade, peak_gain_db, peak_frequency_hz. NaN where the sweep does not show it.
    """
    return figures_from_arrays(
        frame["frequency_hz"].to_numpy(dtype=float),
        frame["gain_db"].to_numpy(dtype=float),
        frame["phase_deg"].to_numpy(dtype=float),
    )


@dataclass(frozen=True)
class ResponseFeature:
    """The landmark of a response worth marking on a plot."""

    kind: str  # "corner" (-3 dB point of a low- or high-pass), "peak" or "dip"
    frequency_hz: float
    gain_db: float


def response_feature(frequency_hz: np.ndarray, gain_db: np.ndarray) -> ResponseFeature | None:
    """The corner, resonance peak or dip of a (model) response; None for a flat one.

    A peak or dip counts when it lies inside the sweep and stands out of both end points by
    more than 3.01 dB; otherwise a response whose ends differ by more than 3.01 dB is a
    low- or high-pass, and its half-power point relative to the higher end is the corner.
    """
    f, g = sorted_finite(frequency_hz, gain_db)
    if f.size < 3:
        return None
    ends_hi, ends_lo = max(g[0], g[-1]), min(g[0], g[-1])
    ipk, idip = int(np.argmax(g)), int(np.argmin(g))
    if 0 < ipk < f.size - 1 and g[ipk] - ends_hi > FEATURE_MIN_DB:
        return ResponseFeature("peak", float(f[ipk]), float(g[ipk]))
    if 0 < idip < f.size - 1 and ends_lo - g[idip] > FEATURE_MIN_DB:
        return ResponseFeature("dip", float(f[idip]), float(g[idip]))
    if ends_hi - ends_lo <= FEATURE_MIN_DB:
        return None
    side = passband_side(g)
    f3 = half_power_frequency(f, g, side)
    if not math.isfinite(f3):
        return None
    return ResponseFeature("corner", f3, float(interpolate_log_f(f3, f, g)[0]))


_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"))


def format_hz(frequency_hz: float, digits: int = 4) -> str:
    """A frequency for people, e.g. 994.7 Hz, 1.592 kHz; 'n/a' when not finite."""
    if not math.isfinite(frequency_hz):
        return "n/a"
    for scale, prefix in _PREFIXES:
        if abs(frequency_hz) >= scale:
            return f"{frequency_hz / scale:.{digits}g} {prefix}Hz"
    return f"{frequency_hz:.{digits}g} Hz"


def difference_to_reference(
    frequency_hz: np.ndarray,
    gain_db: np.ndarray,
    phase_deg: np.ndarray,
    reference_frequency_hz: np.ndarray,
    reference_gain_db: np.ndarray,
    reference_phase_deg: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB) and phase (degrees, wrapped) minus a reference response at the same frequencies.

    The reference is interpolated linearly in log10(f) (its phase unwrapped first); points
    outside the reference's frequency range get NaN.
    """
    rf, rg = sorted_finite(reference_frequency_hz, reference_gain_db)
    pf, rp = sorted_finite(reference_frequency_hz, reference_phase_deg)
    f = np.asarray(frequency_hz, dtype=float)
    d_gain = np.asarray(gain_db, dtype=float) - interpolate_log_f(f, rf, rg)
    d_phase = wrap_deg(np.asarray(phase_deg, dtype=float) - interpolate_log_f(f, pf, unwrap_deg(rp)))
    return d_gain, d_phase
