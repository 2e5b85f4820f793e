"""The run catalog (sweeper.store.catalog): real SQLite files, real HDF5 run files written by
RunWriter, real OS processes for the concurrent-writer check.

External references: hashlib.sha256 over the file's bytes (FIPS 180-4) is the oracle for file
checksums; Python's datetime (ISO 8601 with UTC offsets) is the oracle for date filters; the
SQLite documentation (from memory: "database is locked" is SQLITE_BUSY, WAL readers do not block
writers) for the concurrency expectations.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
import os
import sqlite3
import subprocess
import sys
import textwrap
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from sweeper.measure.point import Point, Verdict
from sweeper.store.catalog import (
    CATALOG_NAME,
    Catalog,
    CatalogError,
    RunRecord,
    default_catalog_path,
    rebuild,
    record_from_runfile,
    verify,
)
from sweeper.store.runfile import RunWriter

PLAN_YAML = (Path(__file__).resolve().parents[2] / "configs" / "rc-antialias.yaml").read_text(encoding="utf-8")
PLANNED_HZ = np.geomspace(10.0, 100e3, 9)


def record(run_id: str, start_utc: str, **changes: Any) -> RunRecord:
    """An invented catalog row (no file behind it)."""
    base = RunRecord(
        run_id=run_id, start_utc=start_utc, end_utc=start_utc, board="DLF-7 anti-alias stage",
        serial="DLF7-0001", plan_name="rc-antialias", plan_sha256="ab" * 32, station="STN-A3",
        operator="bench technician", verdict="PASS", status="complete", file_path=f"{run_id}.h5",
        file_sha256="cd" * 32, campaign="", retest=False, points_measured=9, points_planned=9,
    )
    return dataclasses.replace(base, **changes)


def write_run(folder: Path, run_id: str, serial: str, start_utc: str, verdict: Verdict = Verdict.PASS,
              finished: bool = True, **extra: Any) -> Path:
    """A real run file of the demo plan with len(PLANNED_HZ) points, as the runner writes it."""
    path = folder / f"{run_id}.h5"
    metadata = {
        "run_id": run_id, "plan_name": "rc-antialias", "plan_yaml": PLAN_YAML, "start_utc": start_utc,
        "dut": {"board": "DLF-7 anti-alias stage", "serial": serial, "description": "invented"},
        "station": "STN-A3", "operator": "bench technician", **extra,
    }
    with RunWriter(path, metadata, PLANNED_HZ, {"model_gain_db": np.zeros_like(PLANNED_HZ)}) as writer:
        writer.extend(Point(i, float(f), -0.1 * i, -4.0 * i, 0.01, 0.1, 1.0, 0.9, verdict=int(verdict))
                      for i, f in enumerate(PLANNED_HZ))
        if finished:
            writer.finish({"status": "complete", "verdict": verdict.name, "points_planned": len(PLANNED_HZ)},
                          end_utc=start_utc.replace(":00Z", ":42Z"))
    return path


def as_set(catalog: Catalog) -> set[tuple[Any, ...]]:
    return {dataclasses.astuple(r) for r in catalog.find()}


# -- rows and filters -------------------------------------------------------------------------

ROWS = [
    record("R01", "2024-05-01T08:00:00Z", serial="S-1", verdict="PASS", station="STN-A3"),
    record("R02", "2024-05-01T09:30:00+00:00", serial="S-2", verdict="FAIL", station="STN-B1"),
    record("R03", "2024-05-02T01:30:00+02:00", serial="S-1", verdict="PASS_UNCERTAIN", station="STN-B1",
           campaign="qual-1"),  # 2024-05-01T23:30Z: still 1 May in UTC
    record("R04", "2024-05-02T10:00:00Z", serial="S-3", verdict="FAIL_UNCERTAIN", plan_name="rlc-bandpass",
           plan_sha256="0123456789" + "f" * 54, campaign="qual-1"),
    record("R05", "2024-05-03T10:00:00Z", serial="S-2", verdict="NOT_JUDGED", status="interrupted",
           station="STN-A3", retest=True),
]


def utc(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text).astimezone(dt.timezone.utc)


@pytest.fixture
def filled(tmp_path: Path) -> Iterator[Catalog]:
    with Catalog(default_catalog_path(tmp_path)) as catalog:
        for row in ROWS:
            catalog.add(row)
        yield catalog


def ids(records: list[RunRecord]) -> list[str]:
    return [r.run_id for r in records]


def newest_first(rows: list[RunRecord]) -> list[str]:
    """Reference ordering computed with datetime, independent of the catalog's key."""
    return [r.run_id for r in sorted(rows, key=lambda r: (utc(r.start_utc), r.run_id), reverse=True)]


def test_default_path_and_round_trip(tmp_path: Path, filled: Catalog) -> None:
    assert default_catalog_path(tmp_path) == tmp_path / CATALOG_NAME
    assert filled.count() == len(ROWS)
    assert {dataclasses.astuple(r) for r in ROWS} == as_set(filled)
    assert ids(filled.find()) == newest_first(ROWS)


def test_each_filter_matches_a_python_reference(filled: Catalog) -> None:
    def ref(pred: Any) -> list[str]:
        return newest_first([r for r in ROWS if pred(r)])

    assert ids(filled.find(serial="S-1")) == ref(lambda r: r.serial == "S-1")
    assert ids(filled.find(station="STN-B1")) == ref(lambda r: r.station == "STN-B1")
    assert ids(filled.find(campaign="qual-1")) == ref(lambda r: r.campaign == "qual-1")
    assert ids(filled.find(plan="rlc-bandpass")) == ["R04"]
    assert ids(filled.find(plan="0123456789")) == ["R04"]  # plan_sha256 prefix
    assert ids(filled.find(verdict="FAIL")) == ["R02"]
    assert ids(filled.find(verdict="fail?")) == ["R04"]  # display form of FAIL_UNCERTAIN
    assert ids(filled.find(verdict=["FAIL", Verdict.FAIL_UNCERTAIN])) == ["R04", "R02"]
    assert ids(filled.find(serial="S-2", station="STN-A3")) == ["R05"]
    assert ids(filled.find(limit=2)) == newest_first(ROWS)[:2]
    assert filled.find(serial="nobody") == []
    with pytest.raises(ValueError, match="not a verdict"):
        filled.find(verdict="MAYBE")


def test_date_range_compares_instants_not_text(filled: Catalog) -> None:
    # R03 is written with a +02:00 offset; by datetime it starts on 1 May UTC.
    day1 = dt.date(2024, 5, 1)
    assert ids(filled.find(since="2024-05-01", until="2024-05-01")) == newest_first(
        [r for r in ROWS if utc(r.start_utc).date() == day1])
    assert "R03" in ids(filled.find(until="2024-05-01"))
    assert "R03" not in ids(filled.find(since="2024-05-02"))
    # A datetime bound is inclusive, and offsets are honoured: 10:00Z == 12:00+02:00.
    assert ids(filled.find(since="2024-05-02T12:00:00+02:00")) == ["R05", "R04"]
    assert ids(filled.find(since=dt.datetime(2024, 5, 1, 9, 30, tzinfo=dt.timezone.utc),
                           until=dt.datetime(2024, 5, 2, 10, 0, tzinfo=dt.timezone.utc))) == ["R04", "R03", "R02"]


def test_add_replaces_by_run_id_and_serial_seen(filled: Catalog) -> None:
    filled.add(dataclasses.replace(ROWS[1], verdict="PASS", retest=True))
    assert filled.count() == len(ROWS)
    assert filled.get("R02").verdict == "PASS" and filled.get("R02").retest is True
    assert filled.serial_seen("S-3") and not filled.serial_seen("S-9")
    with pytest.raises(ValueError, match="status"):
        filled.add(record("R09", "2024-05-01T08:00:00Z", status="aborted"))
    with pytest.raises(ValueError, match="ISO 8601"):
        filled.add(record("R09", "yesterday"))


def test_prefix_lookup(tmp_path: Path) -> None:
    with Catalog(tmp_path / "c.sqlite") as catalog:
        for run_id in ("20240501T080000Z-S1-a1f0", "20240501T080000Z-S1-a1f1", "20240502T090000Z-S2-77aa"):
            catalog.add(record(run_id, "2024-05-01T08:00:00Z"))
        assert catalog.get("20240502").run_id == "20240502T090000Z-S2-77aa"
        assert catalog.get("20240501T080000Z-S1-a1f1").run_id == "20240501T080000Z-S1-a1f1"
        with pytest.raises(KeyError) as ambiguous:
            catalog.get("20240501T080000Z-S1-a1f")
        assert "several" in str(ambiguous.value) and "a1f0" in str(ambiguous.value) and "a1f1" in str(ambiguous.value)
        with pytest.raises(KeyError, match="no run"):
            catalog.get("2023")


def test_file_paths_are_relative_inside_the_folder(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    runs.mkdir()
    with Catalog(default_catalog_path(runs)) as catalog:
        inside = catalog.add(record("A", "2024-05-01T08:00:00Z", file_path=str(runs / "sub" / "A.h5")))
        outside = catalog.add(record("B", "2024-05-01T08:00:00Z", file_path=str(tmp_path / "B.h5")))
        assert inside.file_path == "sub/A.h5"
        assert outside.file_path == str((tmp_path / "B.h5").resolve())
        assert catalog.resolve(inside) == (runs / "sub" / "A.h5").resolve()


# -- run files --------------------------------------------------------------------------------


def test_record_from_runfile_reads_metadata_and_hashes(tmp_path: Path) -> None:
    path = write_run(tmp_path, "RUN-1", "DLF7-000123-Ωµ", "2024-05-01T08:00:00Z", Verdict.FAIL_UNCERTAIN,
                     campaign_id="revC-qual")
    rec = record_from_runfile(path)
    assert rec.file_sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # FIPS 180-4 via hashlib
    assert (rec.run_id, rec.serial, rec.board, rec.campaign) == ("RUN-1", "DLF7-000123-Ωµ",
                                                                 "DLF-7 anti-alias stage", "revC-qual")
    assert rec.plan_sha256 == hashlib.sha256(PLAN_YAML.encode("utf-8")).hexdigest()
    assert (rec.verdict, rec.status, rec.retest) == ("FAIL_UNCERTAIN", "complete", False)
    assert (rec.points_measured, rec.points_planned) == (len(PLANNED_HZ), len(PLANNED_HZ))
    assert (rec.start_utc, rec.end_utc) == ("2024-05-01T08:00:00Z", "2024-05-01T08:00:42Z")

    crashed = record_from_runfile(write_run(tmp_path, "RUN-2", "S", "2024-05-01T09:00:00Z", finished=False,
                                            campaign="runner-style"))
    assert (crashed.status, crashed.verdict, crashed.end_utc, crashed.campaign) == (
        "interrupted", "NOT_JUDGED", "", "runner-style")

    (tmp_path / "junk.h5").write_bytes(b"not an HDF5 file" * 10)
    with pytest.raises(CatalogError, match="junk.h5"):
        record_from_runfile(tmp_path / "junk.h5")


def test_add_runfile_marks_retests_of_a_seen_serial(tmp_path: Path) -> None:
    with Catalog(default_catalog_path(tmp_path)) as catalog:
        first = catalog.add_runfile(write_run(tmp_path, "R1", "S-7", "2024-05-01T08:00:00Z", Verdict.FAIL))
        second = catalog.add_runfile(write_run(tmp_path, "R2", "S-7", "2024-05-01T09:00:00Z"))
        other = catalog.add_runfile(write_run(tmp_path, "R3", "S-8", "2024-05-01T10:00:00Z"))
        stated = catalog.add_runfile(write_run(tmp_path, "R4", "S-9", "2024-05-01T11:00:00Z", retest=True))
        assert [first.retest, second.retest, other.retest, stated.retest] == [False, True, False, True]
        assert first.file_path == "R1.h5"
        assert catalog.add_runfile(tmp_path / "R1.h5").retest is False  # re-filing does not count itself


def test_verify_detects_flipped_byte_deleted_and_unreadable_files(tmp_path: Path) -> None:
    with Catalog(default_catalog_path(tmp_path)) as catalog:
        paths = [write_run(tmp_path, f"V{i}", f"S-{i}", f"2024-05-0{i + 1}T08:00:00Z") for i in range(4)]
        for path in paths:
            catalog.add_runfile(path)
        junk = tmp_path / "V9.h5"
        junk.write_bytes(b"\x00" * 4096)
        catalog.add(record("V9", "2024-05-09T08:00:00Z", file_path="V9.h5",
                           file_sha256=hashlib.sha256(junk.read_bytes()).hexdigest()))
        assert {r.state for r in verify(catalog)} == {"ok", "unreadable"}

        data = bytearray(paths[1].read_bytes())
        middle = len(data) // 2
        data[middle] ^= 0x01  # one bit of one byte in the middle of the file
        paths[1].write_bytes(bytes(data))
        paths[2].unlink()
        states = {r.run_id: r.state for r in verify(catalog)}
        assert states == {"V0": "ok", "V1": "altered", "V2": "missing", "V3": "ok", "V9": "unreadable"}
        by_id = {r.run_id: r for r in verify(catalog)}
        assert hashlib.sha256(bytes(data)).hexdigest() in by_id["V1"].detail
        assert by_id["V2"].path == (tmp_path / "V2.h5").resolve()


def test_rebuild_from_disk_equals_the_original(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    (runs / "line-2").mkdir(parents=True)
    catalog_path = default_catalog_path(runs)
    files = [
        write_run(runs, "B1", "S-1", "2024-05-01T08:00:00Z", Verdict.FAIL, campaign_id="qual-1"),
        write_run(runs, "B2", "S-1", "2024-05-01T09:00:00+01:00", Verdict.PASS, campaign_id="qual-1"),
        write_run(runs / "line-2", "B3", "S-2", "2024-05-02T08:00:00Z", Verdict.PASS_UNCERTAIN, campaign="c-9"),
        write_run(runs, "B4", "S-3", "2024-05-02T09:00:00Z", retest=True),
        write_run(runs, "B5", "S-1", "2024-05-03T08:00:00Z", finished=False),
    ]
    with Catalog(catalog_path) as original:
        for path in files:
            original.add_runfile(path)
        before = as_set(original)
    assert {r[0]: r[14] for r in before} == {"B1": False, "B2": True, "B3": False, "B4": True, "B5": True}

    (runs / "stray.h5").write_bytes(b"scratch")  # not a run file: skipped and reported
    catalog_path.write_bytes(b"\xff" * 8192)  # the old catalog is damaged; rebuild must not need it
    skipped: list[Path] = []
    with rebuild(catalog_path, runs, on_skip=lambda p, why: skipped.append(p)) as rebuilt:
        assert as_set(rebuilt) == before
        assert {r.state for r in verify(rebuilt)} == {"ok"}
    assert skipped == [runs / "stray.h5"]
    assert sorted(p.name for p in runs.iterdir() if p.name.startswith(".")) == []  # no temp files left


# -- damage and concurrency -------------------------------------------------------------------


def test_corrupted_or_foreign_catalog_gives_a_clear_error(tmp_path: Path) -> None:
    garbage = tmp_path / "garbage.sqlite"
    garbage.write_bytes(os.urandom(4096))
    with pytest.raises(CatalogError, match=r"garbage\.sqlite.*damaged or not a catalog.*rebuild"):
        Catalog(garbage)

    damaged = tmp_path / "damaged.sqlite"
    with Catalog(damaged, journal_mode="delete") as catalog:
        catalog.add_many(record(f"D{i:04d}", "2024-05-01T08:00:00Z") for i in range(300))
    data = bytearray(damaged.read_bytes())
    page = 4096  # SQLite's default page size; every page after the first (schema) is overwritten
    data[page:] = b"\xa5" * (len(data) - page)
    damaged.write_bytes(bytes(data))
    with pytest.raises(CatalogError, match="damaged or not a catalog"):
        with Catalog(damaged) as catalog:
            catalog.find()

    foreign = tmp_path / "foreign.sqlite"
    with sqlite3.connect(foreign) as db:
        db.execute("CREATE TABLE parts (name TEXT)")
    db.close()
    with pytest.raises(CatalogError, match="not a run catalog"):
        Catalog(foreign)


WRITER = textwrap.dedent("""
    import json, sys, time
    from pathlib import Path
    from sweeper.store.catalog import Catalog, RunRecord
    path, tag, count, mode, ready, go = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4], Path(sys.argv[5]), Path(sys.argv[6])
    with Catalog(path, journal_mode=mode) as catalog:
        ready.touch()
        while not go.exists():
            time.sleep(0.001)
        first = time.time()
        for i in range(count):
            catalog.add(RunRecord(f"{tag}-{i:04d}", "2024-05-01T08:00:00Z", "", "board", f"S-{tag}-{i}", "plan",
                                  "0" * 64, tag, "role", "PASS", "complete", f"{tag}-{i:04d}.h5", "0" * 64))
        last = time.time()
    print(json.dumps([first, last]))
""")


@pytest.mark.parametrize("journal_mode", ["wal", "delete"])
def test_two_processes_filing_at_once_lose_none(tmp_path: Path, journal_mode: str) -> None:
    catalog_path = tmp_path / CATALOG_NAME
    Catalog(catalog_path, journal_mode=journal_mode).close()
    go = tmp_path / "go"
    procs = []
    for tag in ("STN-A", "STN-B"):
        args = [sys.executable, "-c", WRITER, str(catalog_path), tag, "200", journal_mode, str(tmp_path / f"{tag}.ready"),
                str(go)]
        procs.append(subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True))
    deadline = time.monotonic() + 30.0
    while not all((tmp_path / f"{tag}.ready").exists() for tag in ("STN-A", "STN-B")):
        assert time.monotonic() < deadline and all(p.poll() is None for p in procs), [p.communicate() for p in procs]
        time.sleep(0.01)
    go.touch()
    spans = []
    for proc in procs:
        out, err = proc.communicate(timeout=60)
        assert proc.returncode == 0, err
        spans.append(json.loads(out))
    # The two writers really overlapped in time (otherwise the check proves nothing).
    assert max(s[0] for s in spans) < min(s[1] for s in spans)
    with Catalog(catalog_path) as catalog:
        assert catalog.count() == 400
        assert set(ids(catalog.find())) == {f"{tag}-{i:04d}" for tag in ("STN-A", "STN-B") for i in range(200)}
