"""Export of a run's points (CSV, JSON, Parquet) and of its summary (JSON).

Column names carry their units: "frequency [Hz]", "gain [dB]", "u_gain [dB]", "phase
[degree]", "time [ISO 8601 UTC]"; dimensionless columns keep their names ("index", "flags",
"verdict"). Floats survive a round trip bit for bit (NaN as NaN):

* CSV: the shortest text that reads back to the same float (Python's repr), NaN as "NaN",
  +-inf as "inf"/"-inf". Read it with `read_points`, or pandas.read_csv(path,
  keep_default_na=False, na_values=["NaN"]) (pandas >= 3 parses floats exactly; older
  pandas needs float_precision="round_trip").
* JSON: standard JSON (RFC 8259), an array of one object per point. JSON has no NaN or
  infinity, so every non-finite value is written as null: NaN comes back as NaN, but an
  infinite limit (no limit on that side) or an infinite effective degrees of freedom (an
  uncertainty resting on type B terms and long fits only) also comes back as NaN. Read it with `read_points`
  (Python's json module) or pandas.read_json(path, orient="records", precise_float=True);
  pandas' reader (3.1) refuses subnormal numbers (below 2.2e-308) with a range error.
* Parquet: needs the optional package pyarrow; the run id, plan SHA-256 and column units are
  kept in the file's key-value metadata under "sweeper".
"""

from __future__ import annotations

import dataclasses
import json
import math
import typing
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sweeper.verdict import VERDICT_LABELS, VERDICT_MEANINGS
from sweeper.measure.point import POINT_FIELDS, Point, units_of
from sweeper.analysis.figures import FIGURE_KEYS, FIGURE_LABELS, derived_figures, figures_from_arrays
from sweeper.report.runinfo import end_time, failing_mask, prediction_of, run_status, run_verdict_of, verdict_counts

EXPORT_FORMATS: tuple[str, ...] = ("csv", "json", "parquet")
SUMMARY_FORMAT = "sweeper-summary"
SUMMARY_FORMAT_VERSION = 1

_HINTS = typing.get_type_hints(Point)
FIELD_KINDS: dict[str, type] = {f.name: _HINTS[f.name] for f in dataclasses.fields(Point)}
_PANDAS_MAJOR = int(pd.__version__.split(".")[0])
_CSV_READ_OPTIONS: dict[str, Any] = {"float_precision": "round_trip"} if _PANDAS_MAJOR < 3 else {}


class ExportError(ValueError):
    """An export that cannot be done as asked (unknown format, missing optional package)."""


def column_name(field: str) -> str:
    """The export column name of a point field: 'gain_db' -> 'gain [dB]', 'index' -> 'index'."""
    unit = units_of(field)
    if not unit:
        return field
    return f"{field.rsplit('_', 1)[0]} [{unit}]"


EXPORT_COLUMNS: dict[str, str] = {name: column_name(name) for name in POINT_FIELDS}
"""Point field -> export column name."""
_FIELDS_BY_COLUMN = {column: name for name, column in EXPORT_COLUMNS.items()}


def points_for_export(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of the points with unit-bearing column names (other columns renamed the same way)."""
    return frame.rename(columns={c: column_name(c) for c in frame.columns})


def _format_of(path: Path, fmt: str | None) -> str:
    chosen = (fmt or path.suffix.lstrip(".")).lower()
    if chosen not in EXPORT_FORMATS:
        raise ExportError(f"{path}: unknown export format {chosen!r} (expected one of {', '.join(EXPORT_FORMATS)})")
    return chosen


def _plain(value: Any) -> Any:
    """A value as plain JSON: numpy scalars unboxed, non-finite floats as None."""
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def _float_text(value: float) -> str:
    return repr(float(value))


def _require_pyarrow() -> Any:
    try:
        import pyarrow
        import pyarrow.parquet
    except ImportError:
        raise ExportError(
            "Parquet export needs the optional package pyarrow, which is not installed "
            "(pip install pyarrow); CSV and JSON export need nothing extra"
        ) from None
    return pyarrow


def export_points(
    frame: pd.DataFrame, metadata: Mapping[str, Any], path: str | Path, fmt: str | None = None,
    warning: str = "",
) -> Path:
    """Write the points with unit-bearing column names as CSV, JSON or Parquet; returns the path.

    fmt: "csv" | "json" | "parquet"; None takes it from the file suffix. A warning (a broken
    seal) goes into a first column `seal_warning` on every row.
    """
    path = Path(path)
    chosen = _format_of(path, fmt)
    table = points_for_export(frame)
    if warning:
        table.insert(0, "seal_warning", warning)
    if chosen == "csv":
        table.to_csv(path, index=False, float_format=_float_text, na_rep="NaN", lineterminator="\n")
    elif chosen == "json":
        records = [{k: _plain(v) for k, v in row.items()} for row in table.to_dict(orient="records")]
        lines = ",\n".join(json.dumps(r, allow_nan=False, ensure_ascii=False) for r in records)
        path.write_text(f"[\n{lines}\n]\n" if records else "[]\n", encoding="utf-8")
    else:
        pyarrow = _require_pyarrow()
        arrow = pyarrow.Table.from_pandas(table, preserve_index=False)
        extra = {
            "run_id": str(metadata.get("run_id") or ""),
            "plan_sha256": str(metadata.get("plan_sha256") or ""),
            "units": {column_name(c): units_of(c) for c in frame.columns},
        }
        merged = {**(arrow.schema.metadata or {}), b"sweeper": json.dumps(extra).encode("utf-8")}
        pyarrow.parquet.write_table(arrow.replace_schema_metadata(merged), path)
    return path


def _restore(table: pd.DataFrame) -> pd.DataFrame:
    """Field names and storage dtypes back from an exported table."""
    frame = table.rename(columns=_FIELDS_BY_COLUMN)
    for name in frame.columns:
        kind = FIELD_KINDS.get(name)
        if kind is float:
            frame[name] = frame[name].astype(np.float64)
        elif kind is int:
            frame[name] = frame[name].astype(np.int64)
        elif kind is str:
            frame[name] = frame[name].astype(object).where(frame[name].notna(), "").astype(str)
    return frame


def read_points(path: str | Path, fmt: str | None = None) -> pd.DataFrame:
    """Read points written by `export_points` back into a frame with Point field names."""
    path = Path(path)
    chosen = _format_of(path, fmt)
    text_columns = [c for n, c in EXPORT_COLUMNS.items() if FIELD_KINDS[n] is str]
    if chosen == "csv":
        table = pd.read_csv(path, keep_default_na=False, na_values=["NaN"], dtype={c: str for c in text_columns},
                            **_CSV_READ_OPTIONS)
    elif chosen == "json":
        records = json.loads(path.read_text(encoding="utf-8"))
        columns = list(records[0]) if records else list(EXPORT_COLUMNS.values())
        table = pd.DataFrame.from_records(records, columns=columns)
    else:
        _require_pyarrow()
        table = pd.read_parquet(path)
    return _restore(table)


def summary_json(frame: pd.DataFrame, metadata: Mapping[str, Any], *, file_sha256: str = "") -> dict[str, Any]:
    """The run's summary as plain JSON data: identity, verdict, counts and derived figures.

    Non-finite figures are None (null). Keys: format, format_version, run_id, plan_name,
    plan_sha256, dut {board, serial}, serial, status, start_utc, end_utc, decision_rule,
    coverage_factor, verdict (Verdict name), verdict_label, verdict_meaning, points,
    points_failing, verdict_counts {Verdict name: count}, derived_figures (measured, unit-
    suffixed keys), model_figures (same keys, from the predicted model), figure_units,
    run_file_sha256.
    """
    verdict = run_verdict_of(frame, metadata)
    dut = metadata.get("dut") or {}
    summary = metadata.get("summary") or {}
    pred = prediction_of(frame, metadata)
    model = figures_from_arrays(pred["frequency_hz"], pred["model_gain_db"], pred["model_phase_deg"])
    return _plain({
        "format": SUMMARY_FORMAT,
        "format_version": SUMMARY_FORMAT_VERSION,
        "run_id": str(metadata.get("run_id") or ""),
        "plan_name": str(metadata.get("plan_name") or ""),
        "plan_sha256": str(metadata.get("plan_sha256") or ""),
        "dut": {"board": str(dut.get("board") or ""), "serial": str(dut.get("serial") or "")},
        "serial": str(dut.get("serial") or ""),
        "status": run_status(metadata),
        "start_utc": str(metadata.get("start_utc") or ""),
        "end_utc": end_time(metadata),
        "decision_rule": str(metadata.get("decision_rule") or summary.get("decision_rule") or ""),
        "coverage_factor": metadata.get("coverage_factor", summary.get("coverage_factor")),
        "verdict": verdict.name,
        "verdict_label": VERDICT_LABELS[verdict],
        "verdict_meaning": VERDICT_MEANINGS[verdict],
        "points": len(frame),
        "points_failing": int(np.count_nonzero(failing_mask(frame))),
        "verdict_counts": verdict_counts(frame),
        "derived_figures": derived_figures(frame),
        "model_figures": model,
        "figure_units": {k: FIGURE_LABELS[k][1] for k in FIGURE_KEYS},
        "run_file_sha256": file_sha256,
    })


def write_summary_json(
    frame: pd.DataFrame, metadata: Mapping[str, Any], path: str | Path, *, file_sha256: str = "",
    warning: str = "",
) -> Path:
    """Write `summary_json` as indented standard JSON (UTF-8), with `seal_warning` first when
    given; returns the path."""
    path = Path(path)
    data = summary_json(frame, metadata, file_sha256=file_sha256)
    if warning:
        data = {"seal_warning": warning, **data}
    path.write_text(json.dumps(data, indent=2, allow_nan=False, ensure_ascii=False) + "\n", encoding="utf-8")
    return path

