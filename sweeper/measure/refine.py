"""Adaptive frequency grid: where to add points so that a Bode plot read between its points is
right to within a stated tolerance, and so that no limit crossing hides between two points.

Pure numerics on numpy arrays, no I/O. The grid is refined in log frequency: gain (dB) and
phase (degrees) are read between points by straight lines in log10(f), as the report's plots
draw them. The error of that reading at an interval's middle is estimated from the curvature
of the quadratic through three neighbouring points (the second divided difference), for a
smooth response |y''| h^2 / 8 with h the interval's width in decades (the textbook error bound
of linear interpolation). An interval whose estimate exceeds the tolerance gets its geometric
midpoint measured; the loop stops when no interval does, when the next midpoint would come
closer than `min_ratio` to its neighbours, or at `max_points`.

Noise: the curvature of noisy points is partly noise. An interval is refined for curvature only
when its estimate also exceeds `noise_factor` times the larger standard uncertainty of its
three points scaled the same way, so a noisy flat response is not refined forever.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class RefineSettings:
    """Tolerances and bounds of the adaptive grid.

    gain_tol_db, phase_tol_deg: largest interpolation error allowed between points (dB,
    degrees); min_ratio: neighbouring frequencies never closer than this ratio (> 1);
    max_points: the grid never grows beyond this many points; noise_factor: see the module
    docstring; limit_u_factor: an interval is also split when a point at either end lies
    within this many expanded uncertainties of a limit (margin <= factor x U).
    """

    gain_tol_db: float
    phase_tol_deg: float
    min_ratio: float = 1.002
    max_points: int = 1000
    noise_factor: float = 2.0
    limit_u_factor: float = 1.0


def midpoint_errors(frequency_hz: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Estimated error of straight-line reading in log10(f) at each interval's midpoint, in
    the values' unit: max over the two triples that contain the interval of |y''| h^2 / 8.

    frequency_hz strictly increasing (Hz); returns one value per interval (len - 1); zeros for
    fewer than three points (no curvature can be seen)."""
    f = np.asarray(frequency_hz, dtype=float)
    y = np.asarray(values, dtype=float)
    if f.size < 3:
        return np.zeros(max(f.size - 1, 0))
    x = np.log10(f)
    h = np.diff(x)
    slope = np.diff(y) / h
    second = np.abs(2.0 * np.diff(slope) / (x[2:] - x[:-2]))  # y'' at each interior point
    left = np.concatenate([[0.0], second])  # the triple ending at the interval's right point
    right = np.concatenate([second, [0.0]])  # the triple starting at its left point
    return np.maximum(left, right) * h**2 / 8.0


def _noise_allowance(frequency_hz: np.ndarray, u: np.ndarray | None, factor: float) -> np.ndarray:
    """Per interval: the midpoint error that noise of standard uncertainty u alone would show.

    The second divided difference of three points with independent noise u has a standard
    deviation of about 2u / (h_left h_right)^(1/2) / mean-width (propagation of uncertainty);
    scaled like the estimate (h^2 / 8), that is about u / 2 for evenly spaced points. The
    allowance is factor x u_max / 2 with u_max the largest u of the interval's neighbourhood."""
    n = np.asarray(frequency_hz).size
    if u is None or n < 2:
        return np.zeros(max(n - 1, 0))
    uu = np.nan_to_num(np.asarray(u, dtype=float), nan=0.0)
    padded = np.concatenate([[uu[0]], uu, [uu[-1]]])
    window = np.maximum.reduce([padded[:-3], padded[1:-2], padded[2:-1], padded[3:]])
    return factor * window / 2.0


def refine_points(
    frequency_hz: np.ndarray,
    gain_db: np.ndarray,
    phase_deg: np.ndarray,
    settings: RefineSettings,
    *,
    u_gain_db: np.ndarray | None = None,
    u_phase_deg: np.ndarray | None = None,
    margin_db: np.ndarray | None = None,
    margin_deg: np.ndarray | None = None,
    expanded_gain_db: np.ndarray | None = None,
    expanded_phase_deg: np.ndarray | None = None,
) -> np.ndarray:
    """The frequencies (Hz, increasing) to measure next: geometric midpoints of the intervals
    whose estimated interpolation error exceeds the tolerance (and the noise allowance), or
    with a point at either end within limit_u_factor x U of a limit.

    Inputs are the points measured so far in increasing frequency (phase unwrapped along the
    grid); margins are distances to the nearest limit (positive inside, dB and degrees) with
    U the expanded uncertainties. Returns an empty array when nothing needs adding."""
    f = np.asarray(frequency_hz, dtype=float)
    if f.size < 2:
        return np.empty(0)
    if np.any(np.diff(f) <= 0):
        raise ValueError("frequencies must be strictly increasing")
    phase_deg = np.degrees(np.unwrap(np.radians(np.asarray(phase_deg, dtype=float))))
    gain_bad = midpoint_errors(f, gain_db) > np.maximum(
        settings.gain_tol_db, _noise_allowance(f, u_gain_db, settings.noise_factor))
    phase_bad = midpoint_errors(f, phase_deg) > np.maximum(
        settings.phase_tol_deg, _noise_allowance(f, u_phase_deg, settings.noise_factor))
    bad = gain_bad | phase_bad
    for margin, expanded in ((margin_db, expanded_gain_db), (margin_deg, expanded_phase_deg)):
        if margin is None:
            continue
        m = np.asarray(margin, dtype=float)
        big_u = np.zeros_like(m) if expanded is None else np.nan_to_num(np.asarray(expanded, dtype=float))
        near = np.isfinite(m) & (m <= settings.limit_u_factor * big_u)
        # split the intervals on both sides of a point near a limit, unless the sign of the
        # margin is the same and far from 0 at both ends (nothing can cross there)
        bad |= near[:-1] | near[1:]
    ratio_ok = f[1:] / f[:-1] >= settings.min_ratio**2  # a midpoint keeps min_ratio to both sides
    bad &= ratio_ok
    mids = np.sqrt(f[:-1] * f[1:])[bad]
    room = settings.max_points - f.size
    if room <= 0:
        return np.empty(0)
    if mids.size > room:
        # the worst intervals first when the cap bites
        worst = np.maximum(midpoint_errors(f, gain_db) / settings.gain_tol_db,
                           midpoint_errors(f, phase_deg) / settings.phase_tol_deg)[bad]
        mids = np.sort(mids[np.argsort(-worst)[:room]])
    return mids


def adaptive_grid(
    measure: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]],
    coarse_hz: np.ndarray,
    settings: RefineSettings,
    *,
    max_rounds: int = 30,
) -> np.ndarray:
    """Refine a coarse grid by repeated `refine_points` against a response `measure(f) ->
    (gain_db, phase_deg)` (a model, or a bench that measures); returns the final grid (Hz).

    For planning and benchmarks; a run measures each round's points on the bench itself."""
    f = np.unique(np.asarray(coarse_hz, dtype=float))
    g, p = measure(f)
    for _ in range(max_rounds):
        new = refine_points(f, g, p, settings)
        if new.size == 0:
            break
        ng, np_ = measure(new)
        f = np.concatenate([f, new])
        g = np.concatenate([g, ng])
        p = np.concatenate([p, np_])
        order = np.argsort(f)
        f, g, p = f[order], g[order], p[order]
    return f


__all__ = ["RefineSettings", "adaptive_grid", "midpoint_errors", "refine_points"]
