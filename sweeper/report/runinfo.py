"""What a report needs to know about one run, read from its points frame and metadata dict.

A run's metadata comes from `sweeper.store.runfile.read_run` (or is built the same way): the
run verdict may sit in the finish summary (a Verdict name), in `verdict` (a name or an int)
or in `verdict_name`; an unfinished run states none, and its verdict is then the worst of
its points (`sweeper.verdict.run_verdict`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from sweeper.verdict import VERDICT_LABELS, run_verdict
from sweeper.measure.point import Flag, Verdict

FAILING_VERDICTS: tuple[Verdict, ...] = (Verdict.FAIL_UNCERTAIN, Verdict.FAIL)

PREDICTION_KEYS: tuple[str, ...] = (
    "model_gain_db",
    "model_phase_deg",
    "gain_lo_db",
    "gain_hi_db",
    "phase_lo_deg",
    "phase_hi_deg",
)

_BY_LABEL = {label: Verdict(v) for v, label in VERDICT_LABELS.items()}


def as_verdict(value: Any) -> Verdict | None:
    """A Verdict from its name ('FAIL_UNCERTAIN'), label ('FAIL?') or int; None when not one."""
    if isinstance(value, bool):
        return None
    if isinstance(value, str):
        if value in Verdict.__members__:
            return Verdict[value]
        return _BY_LABEL.get(value)
    if isinstance(value, (int, np.integer)):
        try:
            return Verdict(int(value))
        except ValueError:
            return None
    return None


def point_verdicts(frame: pd.DataFrame) -> np.ndarray:
    """The per-point verdicts as ints (Verdict values)."""
    if "verdict" not in frame:
        return np.zeros(len(frame), dtype=np.int64)
    return frame["verdict"].fillna(0).to_numpy().astype(np.int64)


def run_verdict_of(frame: pd.DataFrame, metadata: Mapping[str, Any]) -> Verdict:
    """The run's verdict: the one the run file states, else the worst of its points."""
    summary = metadata.get("summary") or {}
    stated = as_verdict(summary.get("verdict"))
    if stated is not None:
        return stated
    if metadata.get("finished", True):
        for key in ("verdict_name", "verdict"):
            stated = as_verdict(metadata.get(key))
            if stated is not None:
                return stated
    return run_verdict(point_verdicts(frame))


def run_status(metadata: Mapping[str, Any]) -> str:
    """'complete', 'interrupted', 'error', 'unfinished'... or '' when the metadata does not say."""
    summary = metadata.get("summary") or {}
    for source in (summary, metadata):
        status = source.get("status")
        if isinstance(status, str) and status:
            return status
    finished = metadata.get("finished")
    if finished is None:
        return ""
    return "finished" if finished else "unfinished"


def end_time(metadata: Mapping[str, Any]) -> str:
    """When the run ended (ISO 8601 UTC), '' when unknown."""
    summary = metadata.get("summary") or {}
    return str(metadata.get("end_utc") or summary.get("end_utc") or "")


def failing_mask(frame: pd.DataFrame) -> np.ndarray:
    """True for points judged FAIL or FAIL? (outside a limit)."""
    return np.isin(point_verdicts(frame), [int(v) for v in FAILING_VERDICTS])


def verdict_counts(frame: pd.DataFrame) -> dict[str, int]:
    """Number of points per verdict, keyed by Verdict name, every verdict present (0 when none)."""
    values = point_verdicts(frame)
    return {v.name: int(np.count_nonzero(values == int(v))) for v in Verdict}


def flag_names(bits: int) -> str:
    """The names of the set Flag bits, comma separated; '' for none."""
    return ", ".join(f.name for f in Flag if f.value and int(bits) & f.value)


def prediction_of(frame: pd.DataFrame, metadata: Mapping[str, Any]) -> dict[str, np.ndarray]:
    """Model and limits over frequency (Hz, dB, degrees), sorted by frequency.

    From metadata["prediction"] (the planned frequencies) when it holds frequencies, else
    from the model and limit columns of the measured points. Missing arrays are NaN.
    """
    pred = metadata.get("prediction") or {}
    if "frequency_hz" in pred and np.size(pred["frequency_hz"]) > 0:
        source: Mapping[str, Any] = pred
    else:
        source = {k: frame[k].to_numpy(dtype=float) for k in ("frequency_hz", *PREDICTION_KEYS) if k in frame}
    f = np.asarray(source.get("frequency_hz", []), dtype=float)
    order = np.argsort(f, kind="stable")
    out = {"frequency_hz": f[order]}
    for key in PREDICTION_KEYS:
        values = source.get(key)
        out[key] = np.full(f.shape, np.nan) if values is None else np.asarray(values, dtype=float)[order]
    return out


def text(value: Any) -> str:
    """Any metadata value as plain text ('' for None)."""
    if value is None:
        return ""
    if isinstance(value, (list, tuple)):
        return ", ".join(text(v) for v in value)
    return str(value)
