"""Run file: points, metadata and prediction round trip; unfinished files; rebuild from the journal."""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import importlib.metadata
import shutil
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
from store_samples import FLOAT_FIELDS, PLAN_PATH, assert_points_identical, identities, sample_metadata

from sweeper.measure.point import POINT_FIELDS, Point, Verdict, units_of
from sweeper.store.journal import Journal
from sweeper.store.runfile import (
    FINISH_EVENT,
    RunFileError,
    RunWriter,
    ensure_runfile,
    file_sha256,
    frames_identical,
    points_frame,
    read_run,
    read_waveforms,
    rebuild_runfile,
)


def _frame_points(frame: pd.DataFrame) -> list[Point]:
    return [Point(**{k: (v.item() if hasattr(v, "item") else v) for k, v in row.items()})
            for row in frame.to_dict("records")]


def _write_run(path: Path, header: dict, points: list[Point], summary: dict | None = None) -> None:
    with RunWriter.from_header(path, header) as writer:
        for point in points:
            writer.append(point)
        if summary is not None:
            writer.finish(summary, end_utc="2024-05-01T12:40:00.000000Z")


def test_points_round_trip_bit_exact(tmp_path, header, points):
    path = tmp_path / "run.h5"
    _write_run(path, header, points, {"verdict": Verdict.FAIL})
    frame, _ = read_run(path)
    assert list(frame.columns) == list(POINT_FIELDS)
    assert_points_identical(_frame_points(frame), points)
    for name in FLOAT_FIELDS:  # float64 bytes, as the brief asks: numpy array_equal on the raw bits
        want = np.array([getattr(p, name) for p in points], dtype=np.float64)
        assert frame[name].dtype == np.float64
        assert np.array_equal(frame[name].to_numpy().view(np.uint64), want.view(np.uint64)), name
    for name in ("index", "samples", "captures", "flags", "verdict"):
        assert frame[name].dtype == np.int64
    assert pd.api.types.is_string_dtype(frame["time_utc"].dtype)
    assert list(frame["time_utc"]) == [p.time_utc for p in points]


def test_hdf5_layout_units_and_types(tmp_path, header, points):
    path = tmp_path / "run.h5"
    _write_run(path, header, points[:3])
    with h5py.File(path, "r") as f:
        assert f.attrs["format"] == "sweeper-run" and f.attrs["format_version"] == 2
        assert f["points"].attrs["count"] == 3
        for name in POINT_FIELDS:
            ds = f["points"][name]
            assert ds.attrs["units"] == units_of(name), name
            assert ds.shape == (3,) and ds.maxshape == (None,) and ds.chunks is not None
        assert f["points/frequency_hz"].attrs["units"] == "Hz" and f["points/phase_deg"].attrs["units"] == "degree"
        assert h5py.check_string_dtype(f["points/time_utc"].dtype).encoding == "utf-8"
        for name, ds in f["prediction"].items():
            assert ds.attrs["units"] == units_of(name) and ds.shape == (21,)
        # Nested metadata are JSON text attributes, and say so.
        assert set(f.attrs["json_attributes"]) >= {"dut", "instruments", "software", "tags"}
        assert isinstance(f.attrs["dut"], str)


def test_metadata_present_and_decoded(tmp_path, header, points):
    path = tmp_path / "run.h5"
    _write_run(path, header, points[:2], {"verdict": int(Verdict.PASS_UNCERTAIN), "points": 2, "worst": {"f_hz": 1e3}})
    _, md = read_run(path)
    plan_text = PLAN_PATH.read_text(encoding="utf-8")
    assert md["plan_yaml"] == plan_text
    assert md["plan_sha256"] == hashlib.sha256(PLAN_PATH.read_bytes()).hexdigest()  # FIPS 180-4 via hashlib
    assert md["run_id"] == "STN-A3-20240501-0007" and md["campaign_id"] == "DLF7-revC-qual"
    assert md["plan_name"] == "rc-antialias" and md["station"] == "STN-A3" and md["mode"] == "waveform"
    assert md["dut"] == {"board": "DLF-7 anti-alias stage", "serial": "DLF7-000123-Ωµ-ü",
                         "description": "RC low-pass, fc ≈ 1 kHz"}
    assert md["instruments"] == [dataclasses.asdict(i) for i in identities()]
    assert md["tags"] == ["demo", "anti-alias", "Prüfung"]
    for package in ("numpy", "scipy", "h5py", "pyvisa", "pyvisa-sim", "pandas", "pydantic", "sweeper"):
        assert md["software"][package] == importlib.metadata.version(package)
    assert md["software"]["python"].count(".") == 2 and md["host"]
    start = dt.datetime.fromisoformat(md["start_utc"])
    end = dt.datetime.fromisoformat(md["end_utc"])
    assert start.utcoffset() == dt.timedelta(0) and end.utcoffset() == dt.timedelta(0)
    assert md["finished"] is True and md["verdict"] == Verdict.PASS_UNCERTAIN and md["verdict_name"] == "PASS_UNCERTAIN"
    assert md["summary"] == {"verdict": 2, "points": 2, "worst": {"f_hz": 1000.0}}
    prediction = md["prediction"]
    assert set(prediction) == {"frequency_hz", *header["prediction"]}
    for name, values in header["prediction"].items():
        assert np.array_equal(prediction[name].view(np.uint64), np.array(values).view(np.uint64))


def test_unfinished_run_is_readable(tmp_path, header, points):
    path = tmp_path / "run.h5"
    writer = RunWriter.from_header(path, header)
    writer.extend(points[:7])
    writer.append(points[7])
    writer.close()  # the process "died" before finish
    frame, md = read_run(path)
    assert_points_identical(_frame_points(frame), points[:8])
    assert md["finished"] is False and md["end_utc"] == "" and md["verdict"] == Verdict.NOT_JUDGED
    assert md["summary"] == {}


def test_file_as_left_on_disk_by_a_live_writer_is_readable(tmp_path, header, points):
    # What a crash leaves: the bytes on disk after the last flush, with the writer never closed.
    path = tmp_path / "run.h5"
    snapshot = tmp_path / "snapshot.h5"
    with RunWriter.from_header(path, header) as writer:
        for point in points[:5]:
            writer.append(point)
        shutil.copyfile(path, snapshot)
        writer.append(points[5])
    frame, md = read_run(snapshot)
    assert_points_identical(_frame_points(frame), points[:5])
    assert md["finished"] is False


def test_waveforms_round_trip(tmp_path, header, points):
    path = tmp_path / "run.h5"
    volts = np.random.default_rng(3).normal(size=(2, 5000))
    with RunWriter.from_header(path, header) as writer:
        writer.append(points[0])
        writer.add_waveforms(0, volts, 2e-6)
        with pytest.raises(RunFileError, match=r"\(2, N\)"):
            writer.add_waveforms(1, volts[0], 2e-6)
    got, interval_s = read_waveforms(path, 0)
    assert np.array_equal(got, volts) and interval_s == 2e-6
    with h5py.File(path, "r") as f:
        assert f["waveforms/0/volts"].compression == "gzip" and f["waveforms/0/volts"].attrs["units"] == "V"
    assert read_run(path)[1]["waveform_indexes"] == [0]


def _journal_and_run(tmp_path: Path, header: dict, points: list[Point], finish: bool) -> tuple[Path, Path]:
    """Write the same run to a journal and a run file, the way the engine does."""
    journal_path, run_path = tmp_path / "r.journal", tmp_path / "r.h5"
    with Journal.create(journal_path, header) as journal, RunWriter.from_header(run_path, header) as writer:
        for point in points:
            journal.append_point(point)
            writer.append(point)
        if finish:
            event = journal.append_event(FINISH_EVENT, summary={"verdict": int(Verdict.FAIL), "failed": 3})
            writer.finish(event["summary"], end_utc=event["time_utc"])
        writer.seal(journal.chain)  # as finish_run does at the end of every run
    return journal_path, run_path


@pytest.mark.parametrize("finish", [True, False])
def test_rebuild_equals_the_directly_written_file(tmp_path, header, points, finish):
    journal_path, run_path = _journal_and_run(tmp_path, header, points, finish)
    rebuilt = tmp_path / "rebuilt.h5"
    rebuild_runfile(journal_path, rebuilt)
    direct_frame, direct_md = read_run(run_path)
    frame, md = read_run(rebuilt)
    pd.testing.assert_frame_equal(frame, direct_frame)  # pandas' own comparison (NaN == NaN there)
    assert frames_identical(frame, direct_frame)  # and bit for bit
    prediction, direct_prediction = md.pop("prediction"), direct_md.pop("prediction")
    assert md == direct_md
    for name in direct_prediction:
        assert np.array_equal(prediction[name].view(np.uint64), direct_prediction[name].view(np.uint64))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.h5", "r.journal", "rebuilt.h5"]  # no temp left


def test_ensure_runfile_rebuilds_missing_damaged_or_stale_files(tmp_path, header, points):
    journal_path, run_path = _journal_and_run(tmp_path, header, points[:6], finish=False)
    digest = file_sha256(run_path)
    assert ensure_runfile(journal_path, run_path) is False  # current: left alone
    assert file_sha256(run_path) == digest

    run_path.unlink()
    assert ensure_runfile(journal_path, run_path) is True
    assert frames_identical(read_run(run_path)[0], points_frame(points[:6]))

    run_path.write_bytes(b"\x89HDF\r\n\x1a\n" + bytes(1000))  # an HDF5 signature and nothing behind it
    assert ensure_runfile(journal_path, run_path) is True
    assert frames_identical(read_run(run_path)[0], points_frame(points[:6]))

    # Stale: the journal got two more points and the finish the run file never saw; waveforms kept.
    with RunWriter.resume(run_path) as writer:
        writer.add_waveforms(4, np.ones((2, 100)), 1e-5)
    with Journal.open_append(journal_path) as journal:
        journal.append_point(points[6])
        journal.append_point(points[7])
        journal.append_event(FINISH_EVENT, summary={"verdict": "PASS"})
    assert ensure_runfile(journal_path, run_path) is True
    frame, md = read_run(run_path)
    assert frames_identical(frame, points_frame(points[:8]))
    assert md["finished"] is True and md["verdict"] == Verdict.PASS and md["waveform_indexes"] == [4]
    assert ensure_runfile(journal_path, run_path) is False


def test_resume_appends_after_a_rebuild(tmp_path, header, points):
    journal_path, run_path = _journal_and_run(tmp_path, header, points[:3], finish=False)
    run_path.unlink()
    ensure_runfile(journal_path, run_path)
    with RunWriter.resume(run_path) as writer:
        assert writer.count == 3
        writer.append(points[3])
        writer.finish({"verdict": Verdict.PASS})
        with pytest.raises(RunFileError, match="finished"):
            writer.append(points[4])
    assert_points_identical(_frame_points(read_run(run_path)[0]), points[:4])
    with pytest.raises(RunFileError, match="finished"):
        RunWriter.resume(run_path)


def test_writer_refuses_bad_input(tmp_path, header):
    path = tmp_path / "run.h5"
    _write_run(path, header, [])
    with pytest.raises(RunFileError, match="cannot create"):
        RunWriter.from_header(path, header)
    freq = np.array(header["planned_frequency_hz"])
    with pytest.raises(RunFileError, match="run_id"):
        RunWriter(tmp_path / "a.h5", {"plan_yaml": ""}, freq, {})
    with pytest.raises(RunFileError, match="plan_sha256"):
        RunWriter(tmp_path / "b.h5", {**sample_metadata(), "plan_sha256": "0" * 64}, freq, {})
    with pytest.raises(RunFileError, match="shape"):
        RunWriter(tmp_path / "c.h5", sample_metadata(), freq, {"model_gain_db": freq[:-1]})
    with pytest.raises(RunFileError, match="reserved"):
        RunWriter(tmp_path / "d.h5", {**sample_metadata(), "finished": True}, freq, {})
    with pytest.raises(RunFileError, match="not a sweeper-run"):
        with h5py.File(tmp_path / "other.h5", "w") as f:
            f.attrs["format"] = "something else"
        read_run(tmp_path / "other.h5")
    with pytest.raises(RunFileError, match="cannot read"):
        read_run(tmp_path / "missing.h5")


def test_file_sha256_known_answer(tmp_path):
    # FIPS 180-2 appendix B.1 example: SHA-256("abc").
    path = tmp_path / "abc.bin"
    path.write_bytes(b"abc")
    assert file_sha256(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
