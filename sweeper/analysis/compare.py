"""Comparison of runs: spread of a batch per frequency, drift at chosen frequencies over time.

Runs rarely share their frequencies bit for bit (the engine nudges a frequency to avoid
coherent sampling), so every run is brought onto a common grid by linear interpolation in
log10(frequency), with its phase unwrapped first; a run never extrapolates (NaN outside its
range). Everything here is a pure function of numpy arrays and plain values.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np

from sweeper.analysis.figures import interpolate_log_f, sorted_finite, unwrap_deg
from sweeper.verdict import wrap_deg


@dataclass(frozen=True)
class Response:
    """One run's measured response: frequency (Hz), gain (dB), phase (degrees) and their standard
    uncertainties (k = 1, NaN when unknown), plus a name and when the run started (UTC)."""

    name: str
    frequency_hz: np.ndarray
    gain_db: np.ndarray
    phase_deg: np.ndarray
    u_gain_db: np.ndarray
    u_phase_deg: np.ndarray
    start_utc: datetime | None = None


@dataclass(frozen=True)
class Spread:
    """A batch per frequency: median and extremes of gain (dB) and phase (degrees), and how many
    runs reach each frequency. Phases are unwrapped (continuous over frequency)."""

    frequency_hz: np.ndarray
    gain_median_db: np.ndarray
    gain_min_db: np.ndarray
    gain_max_db: np.ndarray
    phase_median_deg: np.ndarray
    phase_min_deg: np.ndarray
    phase_max_deg: np.ndarray
    runs: np.ndarray  # runs with a value at each frequency
    names: tuple[str, ...]

    @property
    def gain_range_db(self) -> np.ndarray:
        """max - min of gain per frequency, dB."""
        return self.gain_max_db - self.gain_min_db

    @property
    def phase_range_deg(self) -> np.ndarray:
        """max - min of phase per frequency, degrees."""
        return self.phase_max_deg - self.phase_min_deg


@dataclass(frozen=True)
class Drift:
    """Values at chosen frequencies, run by run in time order.

    Arrays are (runs, frequencies): gain (dB), phase (degrees, kept on the first run's turn),
    their standard uncertainties, and the change from the first run.
    """

    at_hz: np.ndarray
    start_utc: tuple[datetime, ...]
    names: tuple[str, ...]
    gain_db: np.ndarray
    phase_deg: np.ndarray
    u_gain_db: np.ndarray
    u_phase_deg: np.ndarray

    @property
    def gain_change_db(self) -> np.ndarray:
        """Gain minus the first run's gain at the same frequency, dB."""
        return self.gain_db - self.gain_db[:1]

    @property
    def phase_change_deg(self) -> np.ndarray:
        """Phase minus the first run's phase at the same frequency, degrees (wrapped)."""
        return wrap_deg(self.phase_deg - self.phase_deg[:1])

    @property
    def elapsed_s(self) -> np.ndarray:
        """Seconds since the first run started."""
        t0 = self.start_utc[0]
        return np.array([(t - t0).total_seconds() for t in self.start_utc])


def parse_utc(text: str) -> datetime | None:
    """An ISO 8601 time ('2025-03-01T08:15:00Z', '+00:00' or naive = UTC) as an aware datetime; None if unreadable."""
    if not isinstance(text, str) or not text:
        return None
    try:
        when = datetime.fromisoformat(text)  # Python 3.11+ reads a trailing Z too
    except ValueError:
        return None
    return when if when.tzinfo else when.replace(tzinfo=UTC)


def values_at(at_hz: np.ndarray | float, frequency_hz: np.ndarray, values: np.ndarray, *,
              phase: bool = False) -> np.ndarray:
    """A run's values interpolated at `at_hz` (Hz), linear in log10(f); phases (degrees) unwrapped
    before and returned unwrapped; NaN outside the run's frequency range."""
    f, v = sorted_finite(frequency_hz, values)
    if phase:
        v = unwrap_deg(v)
    return interpolate_log_f(at_hz, f, v)


def common_grid(responses: Sequence[Response], reference: int = 0) -> np.ndarray:
    """The frequencies to compare on: the reference run's measured frequencies, sorted (Hz)."""
    if not responses:
        raise ValueError("no runs to compare")
    f, = sorted_finite(responses[reference].frequency_hz)
    return np.unique(f)


def batch_spread(responses: Sequence[Response], frequency_hz: np.ndarray | None = None) -> Spread:
    """Median, minimum and maximum of gain and phase per frequency over a batch of runs.

    frequency_hz: the grid (Hz); default the first run's frequencies. Each run is interpolated
    onto it (`values_at`); its phase is then moved by whole turns onto the first run's branch,
    so that a run unwrapped from a different start does not spread by 360 degrees. Statistics
    ignore the runs that do not reach a frequency (NaN when none does).
    """
    grid = common_grid(responses) if frequency_hz is None else np.asarray(frequency_hz, dtype=float)
    gains = np.array([values_at(grid, r.frequency_hz, r.gain_db) for r in responses])
    phases = np.array([values_at(grid, r.frequency_hz, r.phase_deg, phase=True) for r in responses])
    anchor = phases[0]
    for i in range(1, len(phases)):
        both = np.isfinite(phases[i]) & np.isfinite(anchor)
        if both.any():
            turns = np.round(np.median(phases[i][both] - anchor[both]) / 360.0)
            phases[i] -= 360.0 * turns
    present = np.isfinite(gains)
    counts = present.sum(axis=0)

    def stat(fn, a: np.ndarray) -> np.ndarray:
        out = np.full(a.shape[1], np.nan)
        cols = np.isfinite(a).any(axis=0)
        if cols.any():
            out[cols] = fn(a[:, cols], axis=0)
        return out

    return Spread(
        frequency_hz=grid,
        gain_median_db=stat(np.nanmedian, gains), gain_min_db=stat(np.nanmin, gains),
        gain_max_db=stat(np.nanmax, gains),
        phase_median_deg=stat(np.nanmedian, phases), phase_min_deg=stat(np.nanmin, phases),
        phase_max_deg=stat(np.nanmax, phases),
        runs=counts, names=tuple(r.name for r in responses),
    )


def drift(responses: Sequence[Response], at_hz: Sequence[float]) -> Drift:
    """Gain and phase at the chosen frequencies (Hz) for each run, sorted by start time.

    Runs without a start time are left out (they cannot be placed in time); raises ValueError
    when none is left or a frequency is not positive. Uncertainties are interpolated like the
    values (a neighbouring point's u stands for the point in between).
    """
    at = np.asarray(list(at_hz), dtype=float)
    if at.size == 0 or not np.all(np.isfinite(at) & (at > 0)):
        raise ValueError(f"drift frequencies must be positive and finite, got {list(at_hz)!r}")
    timed = sorted((r for r in responses if r.start_utc is not None), key=lambda r: r.start_utc)
    if not timed:
        raise ValueError("no run states its start time, so none can be placed in time")
    gain = np.array([values_at(at, r.frequency_hz, r.gain_db) for r in timed])
    phase = np.array([values_at(at, r.frequency_hz, r.phase_deg, phase=True) for r in timed])
    phase = phase[0] + wrap_deg(phase - phase[0]) if len(timed) > 1 else phase
    u_gain = np.array([values_at(at, r.frequency_hz, r.u_gain_db) for r in timed])
    u_phase = np.array([values_at(at, r.frequency_hz, r.u_phase_deg) for r in timed])
    return Drift(at, tuple(r.start_utc for r in timed), tuple(r.name for r in timed), gain, phase, u_gain, u_phase)


def difference_summary(response: Response, golden: Response) -> dict[str, float]:
    """Largest |gain difference| (dB) and |phase difference| (degrees) of a run from the golden
    run, compared on the run's frequencies inside the golden run's range, and where they occur (Hz)."""
    g_ref = values_at(response.frequency_hz, golden.frequency_hz, golden.gain_db)
    p_ref = values_at(response.frequency_hz, golden.frequency_hz, golden.phase_deg, phase=True)
    dg = np.asarray(response.gain_db, dtype=float) - g_ref
    dp = wrap_deg(np.asarray(response.phase_deg, dtype=float) - p_ref)
    out = {"max_gain_difference_db": math.nan, "at_gain_hz": math.nan,
           "max_phase_difference_deg": math.nan, "at_phase_hz": math.nan}
    f = np.asarray(response.frequency_hz, dtype=float)
    if np.isfinite(dg).any():
        i = int(np.nanargmax(np.abs(dg)))
        out.update(max_gain_difference_db=float(dg[i]), at_gain_hz=float(f[i]))
    if np.isfinite(dp).any():
        j = int(np.nanargmax(np.abs(dp)))
        out.update(max_phase_difference_deg=float(dp[j]), at_phase_hz=float(f[j]))
    return out


def response_of(frame, metadata, name: str | None = None) -> Response:
    """A run's points frame and metadata (as `read_run` gives them) as a Response."""
    n = len(frame)

    def col(key: str) -> np.ndarray:
        return frame[key].to_numpy(dtype=float) if key in frame else np.full(n, np.nan)

    dut = metadata.get("dut") or {}
    label = name or str(dut.get("serial") or metadata.get("run_id") or "run")
    return Response(label, col("frequency_hz"), col("gain_db"), col("phase_deg"), col("u_gain_db"),
                    col("u_phase_deg"), parse_utc(str(metadata.get("start_utc") or "")))
