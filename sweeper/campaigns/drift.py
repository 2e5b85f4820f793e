"""Drift over a campaign: how far each sweep moved from the first one, per frequency.

Pure functions on the sweeps' point tables (pandas DataFrames laid out as
`sweeper.store.runfile.read_run` returns them); no file or catalog access here.

Points are matched across sweeps by their plan index (the `index` column), so a sweep that
was cut short simply has fewer points to compare, and the stimulus frequency the engine
actually used (which may differ slightly from the planned one) does not have to be equal to
the last digit. The frequency reported for a point is the first sweep's.

Gain change = gain_db(sweep k) - gain_db(first sweep), dB. Phase change = the same difference
of phase_deg wrapped to (-180, 180], degrees. "Largest" means largest in magnitude; the
signed value is reported, with the sweep that showed it (its 1-based number in the campaign,
run id, start time and offset on the campaign clock). Ties go to the earlier sweep.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sweeper.measure.phasewrap import wrap_phase_deg

DRIFT_COLUMNS: tuple[str, ...] = (
    "frequency_hz",
    "reference_gain_db",
    "reference_phase_deg",
    "gain_change_db",
    "gain_change_sweep",
    "gain_change_run_id",
    "gain_change_utc",
    "gain_change_offset_s",
    "phase_change_deg",
    "phase_change_sweep",
    "phase_change_run_id",
    "phase_change_utc",
    "phase_change_offset_s",
    "sweeps_compared",
)


@dataclass(frozen=True)
class Sweep:
    """One sweep of a campaign: its run id, start time (ISO 8601 UTC), start offset on the
    campaign clock (s; NaN when unknown) and its points (columns index, frequency_hz,
    gain_db, phase_deg at least)."""

    run_id: str
    start_utc: str
    frame: pd.DataFrame
    offset_s: float = math.nan


@dataclass(frozen=True)
class Extreme:
    """The largest change of one quantity over the whole campaign and where it happened."""

    quantity: str  # "gain" (dB) or "phase" (degrees)
    change: float
    frequency_hz: float
    sweep: int  # 1-based number of the sweep in the campaign
    run_id: str
    time_utc: str
    offset_s: float


def _aligned(reference: pd.DataFrame, frame: pd.DataFrame, column: str) -> np.ndarray:
    """`frame[column]` at the reference's point indexes (NaN where the sweep has no such point)."""
    values = pd.Series(frame[column].to_numpy(dtype=float), index=frame["index"].to_numpy())
    values = values[~values.index.duplicated(keep="last")]
    return values.reindex(reference["index"].to_numpy()).to_numpy(dtype=float)


def _largest(changes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per column of changes (sweeps x points): the signed change of largest magnitude and the
    row it came from (NaN and -1 where every row is NaN). The first row wins ties."""
    if changes.shape[0] == 0:
        return np.full(changes.shape[1], np.nan), np.full(changes.shape[1], -1)
    magnitude = np.where(np.isnan(changes), -np.inf, np.abs(changes))
    rows = np.argmax(magnitude, axis=0)
    picked = changes[rows, np.arange(changes.shape[1])]
    return picked, np.where(np.isnan(picked), -1, rows)


def _who(later: Sequence[Sweep], rows: np.ndarray) -> tuple[np.ndarray, list[str], list[str], np.ndarray]:
    """For each row number (-1: none): the 1-based sweep number (0: none), run id, start time and
    offset (s) of the later sweep it points at."""
    chosen = [later[r] if r >= 0 else None for r in rows]
    numbers = np.array([r + 2 if r >= 0 else 0 for r in rows], dtype=np.int64)
    run_ids = [s.run_id if s else "" for s in chosen]
    times = [s.start_utc if s else "" for s in chosen]
    offsets = np.array([s.offset_s if s else math.nan for s in chosen], dtype=float)
    return numbers, run_ids, times, offsets


def drift_table(sweeps: Sequence[Sweep]) -> pd.DataFrame:
    """Per frequency of the first sweep: its gain (dB) and phase (degrees), and the largest
    gain change (dB) and phase change (degrees) of any later sweep against it, with the
    sweep that showed each (number, run id, start time, offset s). Columns DRIFT_COLUMNS, one
    row per point of the first sweep in its measurement order. With a single sweep the
    changes are NaN and sweeps_compared is 0. Raises ValueError when there is no sweep."""
    if not sweeps:
        raise ValueError("a drift table needs at least one sweep")
    reference = sweeps[0].frame.reset_index(drop=True)
    later = list(sweeps[1:])
    shape = (len(later), len(reference))
    ref_gain = reference["gain_db"].to_numpy(dtype=float)
    ref_phase = reference["phase_deg"].to_numpy(dtype=float)
    gain = np.array([_aligned(reference, s.frame, "gain_db") for s in later], dtype=float).reshape(shape)
    phase = np.array([_aligned(reference, s.frame, "phase_deg") for s in later], dtype=float).reshape(shape)
    gain_change, gain_rows = _largest(gain - ref_gain)
    phase_change, phase_rows = _largest(np.asarray(wrap_phase_deg(phase - ref_phase), dtype=float).reshape(shape))
    g_sweep, g_run, g_utc, g_offset = _who(later, gain_rows)
    p_sweep, p_run, p_utc, p_offset = _who(later, phase_rows)
    table = pd.DataFrame({
        "frequency_hz": reference["frequency_hz"].to_numpy(dtype=float),
        "reference_gain_db": ref_gain,
        "reference_phase_deg": ref_phase,
        "gain_change_db": gain_change,
        "gain_change_sweep": g_sweep,
        "gain_change_run_id": g_run,
        "gain_change_utc": g_utc,
        "gain_change_offset_s": g_offset,
        "phase_change_deg": phase_change,
        "phase_change_sweep": p_sweep,
        "phase_change_run_id": p_run,
        "phase_change_utc": p_utc,
        "phase_change_offset_s": p_offset,
        "sweeps_compared": np.sum(~np.isnan(gain), axis=0).astype(np.int64),
    })
    return table[list(DRIFT_COLUMNS)]


def largest_changes(table: pd.DataFrame) -> tuple[Extreme | None, Extreme | None]:
    """The campaign's largest gain change (dB) and largest phase change (degrees) over every
    frequency of a `drift_table`; None for a quantity with nothing compared."""
    found: list[Extreme | None] = []
    for quantity, column in (("gain", "gain_change_db"), ("phase", "phase_change_deg")):
        values = table[column].to_numpy(dtype=float)
        if not len(values) or np.all(np.isnan(values)):
            found.append(None)
            continue
        i = int(np.nanargmax(np.abs(values)))
        row = table.iloc[i]
        found.append(Extreme(quantity, float(values[i]), float(row["frequency_hz"]), int(row[f"{quantity}_change_sweep"]),
                             str(row[f"{quantity}_change_run_id"]), str(row[f"{quantity}_change_utc"]),
                             float(row[f"{quantity}_change_offset_s"])))
    return found[0], found[1]
