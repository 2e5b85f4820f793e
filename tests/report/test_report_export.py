"""Exports (sweeper.report.export): unit-bearing columns, bit-exact float round trips, summary JSON.

Round trips are read back with pandas itself (read_csv, read_json, read_parquet), and floats
compared bit for bit (int64 views), NaN positions compared separately.
"""

from __future__ import annotations

import importlib.util
import json

import numpy as np
import pandas as pd
import pytest

from sweeper.measure.point import POINT_FIELDS, Verdict
from sweeper.report.export import (
    EXPORT_COLUMNS,
    ExportError,
    column_name,
    export_points,
    read_points,
    summary_json,
    write_summary_json,
)

PANDAS_MAJOR = int(pd.__version__.split(".")[0])
CSV_OPTIONS = {"float_precision": "round_trip"} if PANDAS_MAJOR < 3 else {}  # pandas >= 3 parses exactly


def _awkward(frame: pd.DataFrame) -> pd.DataFrame:
    """Floats that catch lossy formatting: 0.1, 1/3, -0.0, the smallest subnormal, near max."""
    out = frame.copy()
    out.loc[0, "amplitude_in_v"] = 0.1
    out.loc[1, "amplitude_in_v"] = 1.0 / 3.0
    out.loc[2, "amplitude_in_v"] = -0.0
    out.loc[3, "amplitude_in_v"] = 5e-324
    out.loc[4, "amplitude_in_v"] = 1.7976931348623157e308
    out.loc[5, "thd_in_db"] = -123.456789012345678
    return out


def _assert_floats_identical(a: np.ndarray, b: np.ndarray) -> None:
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    assert a.shape == b.shape
    nan_a, nan_b = np.isnan(a), np.isnan(b)
    np.testing.assert_array_equal(nan_a, nan_b)
    np.testing.assert_array_equal(a[~nan_a].view(np.int64), b[~nan_b].view(np.int64))


def _as_json_keeps(values: np.ndarray) -> np.ndarray:
    """What JSON can hold of a float column: infinities become null, read back as NaN
    (documented in sweeper.report.export; e.g. an effective degrees of freedom of infinity)."""
    values = np.asarray(values, dtype=np.float64).copy()
    values[np.isinf(values)] = np.nan
    return values


def _float_fields(frame: pd.DataFrame) -> list[str]:
    return [c for c in frame.columns if frame[c].dtype == np.float64]


def test_column_names_carry_units() -> None:
    assert column_name("frequency_hz") == "frequency [Hz]"
    assert column_name("gain_db") == "gain [dB]"
    assert column_name("u_phase_deg") == "u_phase [degree]"
    assert column_name("amplitude_out_v") == "amplitude_out [V]"
    assert column_name("elapsed_s") == "elapsed [s]"
    assert column_name("verdict") == "verdict"
    assert len(set(EXPORT_COLUMNS.values())) == len(POINT_FIELDS)


def test_csv_round_trip_is_bit_exact(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    frame = _awkward(frame)
    frame.loc[6, "gain_hi_db"] = np.inf  # an unconstrained limit
    frame.loc[7, "gain_lo_db"] = -np.inf
    path = export_points(frame, metadata, tmp_path / "points.csv")
    back = pd.read_csv(path, keep_default_na=False, na_values=["NaN"], **CSV_OPTIONS)
    assert list(back.columns) == [EXPORT_COLUMNS[n] for n in POINT_FIELDS]
    for name in _float_fields(frame):
        _assert_floats_identical(frame[name].to_numpy(), back[EXPORT_COLUMNS[name]].to_numpy())
    np.testing.assert_array_equal(back["verdict"].to_numpy(), frame["verdict"].to_numpy())
    np.testing.assert_array_equal(back["time [ISO 8601 UTC]"].astype(str), frame["time_utc"].astype(str))
    again = read_points(path)
    assert list(again.columns) == list(POINT_FIELDS)
    for name in _float_fields(frame):
        _assert_floats_identical(frame[name].to_numpy(), again[name].to_numpy())
    assert again["flags"].dtype == np.int64


def test_json_round_trip_is_bit_exact(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    frame = _awkward(frame)
    path = export_points(frame, metadata, tmp_path / "points.json")
    text = path.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text  # standard JSON (RFC 8259) only
    records = json.loads(text)
    assert len(records) == len(frame) and records[0]["frequency [Hz]"] == frame.loc[0, "frequency_hz"]
    again = read_points(path)  # Python's json module underneath
    for name in _float_fields(frame):
        _assert_floats_identical(_as_json_keeps(frame[name].to_numpy()), again[name].to_numpy())
    np.testing.assert_array_equal(again["time_utc"].astype(str), frame["time_utc"].astype(str))


def test_json_read_back_by_pandas(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    frame = _awkward(frame)
    frame.loc[3, "amplitude_in_v"] = 2.2250738585072014e-308  # pandas' JSON reader refuses subnormals
    path = export_points(frame, metadata, tmp_path / "points.json")
    back = pd.read_json(path, orient="records", precise_float=True)
    for name in _float_fields(frame):
        _assert_floats_identical(_as_json_keeps(frame[name].to_numpy()),
                                 back[EXPORT_COLUMNS[name]].to_numpy(dtype=np.float64))


def test_json_writes_infinite_limits_as_null(passing_run, tmp_path) -> None:
    frame, metadata = passing_run
    frame = frame.copy()
    frame.loc[0, "gain_hi_db"] = np.inf
    records = json.loads(export_points(frame, metadata, tmp_path / "p.json").read_text())
    assert records[0]["gain_hi [dB]"] is None  # documented: JSON has no infinity


@pytest.mark.skipif(importlib.util.find_spec("pyarrow") is not None, reason="pyarrow is installed")
def test_parquet_without_pyarrow_says_what_is_missing(passing_run, tmp_path) -> None:
    frame, metadata = passing_run
    with pytest.raises(ExportError, match="pyarrow"):
        export_points(frame, metadata, tmp_path / "points.parquet")
    assert not (tmp_path / "points.parquet").exists()


def test_parquet_round_trip_is_bit_exact(failing_run, tmp_path) -> None:
    pytest.importorskip("pyarrow")
    frame, metadata = failing_run
    frame = _awkward(frame)
    frame.loc[6, "gain_hi_db"] = np.inf
    path = export_points(frame, metadata, tmp_path / "points.parquet")
    back = pd.read_parquet(path)
    for name in _float_fields(frame):
        _assert_floats_identical(frame[name].to_numpy(), back[EXPORT_COLUMNS[name]].to_numpy())
    import pyarrow.parquet as pq

    extra = json.loads(pq.read_schema(path).metadata[b"sweeper"])
    assert extra["run_id"] == metadata["run_id"] and extra["units"]["gain [dB]"] == "dB"


def test_unknown_format_is_refused(passing_run, tmp_path) -> None:
    frame, metadata = passing_run
    with pytest.raises(ExportError, match="xlsx"):
        export_points(frame, metadata, tmp_path / "points.xlsx")


def test_summary_json(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    summary = summary_json(frame, metadata, file_sha256="f" * 64)
    text = json.dumps(summary, allow_nan=False)  # plain standard JSON
    assert json.loads(text) == summary
    assert summary["verdict"] == "FAIL" and summary["verdict_label"] == "FAIL"
    assert summary["run_id"] == metadata["run_id"]
    assert summary["serial"] == metadata["dut"]["serial"]
    assert summary["plan_sha256"] == metadata["plan_sha256"]
    counts = summary["verdict_counts"]
    assert set(counts) == {v.name for v in Verdict}
    assert sum(counts.values()) == summary["points"] == len(frame)
    assert counts["FAIL"] == int((frame["verdict"] == Verdict.FAIL).sum()) == summary["points_failing"] == 2
    # Handbook corner 994.7 Hz; 1 % covers the 0.31 % interpolation bound and the 0.003 dB noise.
    assert summary["derived_figures"]["f_3db_hz"] == pytest.approx(994.7, rel=0.01)
    assert summary["model_figures"]["phase_at_f_3db_deg"] == pytest.approx(-45.0, abs=1.0)
    assert summary["figure_units"]["rolloff_db_per_decade"] == "dB/decade"
    path = write_summary_json(frame, metadata, tmp_path / "summary.json")
    assert json.loads(path.read_text(encoding="utf-8"))["verdict"] == "FAIL"


def test_summary_of_unfinished_run_takes_the_worst_point(failing_run) -> None:
    # An unfinished run file states verdict 0 and finished False (sweeper.store.runfile layout);
    # its verdict then comes from the points (sweeper.verdict.run_verdict).
    frame, metadata = failing_run
    unfinished = {k: v for k, v in metadata.items() if k not in ("verdict", "status")}
    unfinished.update(finished=False, verdict=0, verdict_name="NOT_JUDGED")
    summary = summary_json(frame, unfinished)
    assert summary["verdict"] == "FAIL" and summary["status"] == "unfinished"
    # A figure the sweep never reaches is null, not NaN.
    short = frame[frame["frequency_hz"] < 200].reset_index(drop=True)
    assert summary_json(short, unfinished)["derived_figures"]["f_3db_hz"] is None
