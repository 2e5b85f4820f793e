"""Reports from a real run file: written by sweeper.store.runfile, read by sweeper.report.load."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from sweeper.measure.point import POINT_FIELDS, Point
from sweeper.report import load_run, render_html, summary_json
from sweeper.store.runfile import RunWriter

RESERVED = ("verdict", "end_utc", "prediction", "status")


def test_report_of_a_written_run_file(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    path = tmp_path / "run.h5"
    prediction = dict(metadata["prediction"])
    planned = prediction.pop("frequency_hz")
    with RunWriter(path, {k: v for k, v in metadata.items() if k not in RESERVED}, planned, prediction) as writer:
        for row in frame.to_dict(orient="records"):
            writer.append(Point(**{name: row[name] for name in POINT_FIELDS}))
        writer.finish({"status": "complete", "verdict": "FAIL", "points_measured": len(frame),
                       "points_planned": len(planned), "end_utc": "2025-03-01T08:16:02Z", "error": ""})

    read_frame, read_metadata, sha = load_run(path)
    assert sha == hashlib.sha256(path.read_bytes()).hexdigest()
    np.testing.assert_array_equal(read_frame["gain_db"].to_numpy(), frame["gain_db"].to_numpy())

    summary = summary_json(read_frame, read_metadata, file_sha256=sha)
    assert summary["verdict"] == "FAIL" and summary["status"] == "complete"
    assert summary["points_failing"] == 2 and summary["run_file_sha256"] == sha
    assert summary["serial"] == metadata["dut"]["serial"]
    json.dumps(summary, allow_nan=False)

    text = render_html([(read_frame, read_metadata, sha)], image_format="png")
    assert sha in text and metadata["plan_sha256"] in text
    assert metadata["instruments"][1]["idn"] in text
    assert 'class="banner v-fail"' in text
    assert text.count('class="v-fail failing"') == 2


def test_unfinished_run_file_is_reported_from_its_points(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    path = tmp_path / "partial.h5"
    prediction = dict(metadata["prediction"])
    planned = prediction.pop("frequency_hz")
    writer = RunWriter(path, {k: v for k, v in metadata.items() if k not in RESERVED}, planned, prediction)
    try:
        for row in frame.iloc[:40].to_dict(orient="records"):
            writer.append(Point(**{name: row[name] for name in POINT_FIELDS}))
    finally:
        writer.close()
    read_frame, read_metadata, sha = load_run(path)
    summary = summary_json(read_frame, read_metadata, file_sha256=sha)
    # 40 of 60 points, not finished: the verdict is the worst point's (two FAIL among the first 40).
    assert summary["points"] == 40 and summary["status"] == "unfinished"
    assert summary["verdict"] == "FAIL"
    assert summary["end_utc"] == ""
    with pytest.raises(KeyError):
        read_metadata["summary"]["verdict"]
