"""Evidence that cannot be laundered or lost (issue 11), as a user meets it: real processes on
real run files, journals and catalogs of the simulated demo bench."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import h5py
import pytest

REPO = Path(__file__).resolve().parents[2]
PLAN = REPO / "configs" / "rc-antialias.yaml"


def sweeper(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "COLUMNS": "250"}
    return subprocess.run([sys.executable, "-m", "sweeper", *args], capture_output=True, text=True, cwd=REPO,
                          timeout=300, env=env)


def filed_run(runs: Path, plan: Path = PLAN) -> Path:
    result = sweeper("run", str(plan), "--out", str(runs))
    assert result.returncode in (0, 1), result.stdout + result.stderr
    (h5,) = sorted(runs.glob("*.h5"))
    return h5


def edit_gain(h5: Path, index: int = 3, delta_db: float = 0.5) -> None:
    """What a person laundering a run would do: change one measured value in place."""
    with h5py.File(h5, "r+") as f:
        f["points/gain_db"][index] += delta_db


def test_an_edited_value_is_still_reported_after_catalog_rebuild(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    assert sweeper("verify", "--runs", str(runs)).returncode == 0
    edit_gain(h5)
    rebuilt = sweeper("catalog", "rebuild", "--runs", str(runs))
    assert rebuilt.returncode == 0
    assert "refused" in rebuilt.stdout and "seal broken" in rebuilt.stdout
    before = h5.read_bytes()
    checked = sweeper("verify", "--runs", str(runs))
    assert checked.returncode == 1, checked.stdout
    assert "seal broken" in checked.stdout and "differ from the journal" in checked.stdout
    assert h5.read_bytes() == before  # the evidence is left as it is


def test_resume_refuses_an_edited_complete_run(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    with h5py.File(h5, "r+") as f:  # a FAIL/PASS relabelled in the root attributes
        f.attrs["verdict_name"] = "FAIL"
    journal = h5.with_suffix(".journal")
    journal_before, h5_before = journal.read_bytes(), h5.read_bytes()
    result = sweeper("resume", str(journal))
    assert result.returncode == 3, result.stdout + result.stderr
    assert "refused" in result.stderr and "seal broken" in result.stderr
    assert journal.read_bytes() == journal_before and h5.read_bytes() == h5_before
    assert sweeper("verify", "--runs", str(runs)).returncode == 1


def test_report_and_export_of_an_edited_file_are_refused_or_marked(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    edit_gain(h5)
    html = tmp_path / "r.html"
    refused = sweeper("report", str(h5), "--out", str(html))
    assert refused.returncode == 3 and not html.exists()
    assert "--accept-broken-seal" in refused.stderr
    marked = sweeper("report", str(h5), "--out", str(html), "--accept-broken-seal")
    assert marked.returncode == 0, marked.stderr
    assert 'class="seal-warning"' in html.read_text() and "BROKEN SEAL" in html.read_text()
    csv = tmp_path / "p.csv"
    assert sweeper("export", str(h5), "--out", str(csv)).returncode == 3
    assert sweeper("export", str(h5), "--out", str(csv), "--accept-broken-seal").returncode == 0
    first = csv.read_text().splitlines()
    assert first[0].startswith("seal_warning,") and all("BROKEN SEAL" in line for line in first[1:])
    summary = json.loads(csv.with_name("p.summary.json").read_text())
    assert "BROKEN SEAL" in summary["seal_warning"]
    assert sweeper("diagnose", str(h5)).returncode == 3


def test_an_intact_run_is_sealed_and_read_without_warnings(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    shown = sweeper("show", str(h5))
    assert shown.returncode == 0 and "seal sealed" in shown.stdout
    html = tmp_path / "r.html"
    assert sweeper("report", str(h5), "--out", str(html)).returncode == 0
    assert "seal-warning" not in html.read_text()


def damage_line(journal: Path, number: int) -> None:
    """Flip one character inside record `number` (1-based), leaving its checksum stale."""
    lines = journal.read_bytes().split(b"\n")
    line = bytearray(lines[number - 1])
    at = line.index(b'"gain_db":') + len(b'"gain_db":') + 1
    line[at] = ord("7") if line[at] != ord("7") else ord("3")
    lines[number - 1] = bytes(line)
    journal.write_bytes(b"\n".join(lines))


def test_damaged_middle_journal_line_salvage_resume_finishes_and_verify_reports(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    journal = h5.with_suffix(".journal")
    damage_line(journal, 8)  # the header is line 1; line 8 is a point in the middle of the sweep
    damaged_tail = b"\n".join(journal.read_bytes().split(b"\n")[7:])
    plain = sweeper("resume", str(journal))
    assert plain.returncode == 2 and "--salvage" in plain.stderr, plain.stderr
    assert sweeper("verify", "--runs", str(runs)).returncode == 1  # verify finds the damage first
    salvaged = sweeper("resume", str(journal), "--salvage")
    assert salvaged.returncode in (0, 1), salvaged.stdout + salvaged.stderr
    (kept,) = runs.glob("*.damaged-*.bin")
    assert kept.read_bytes() == damaged_tail  # the damaged bytes, kept aside exactly
    assert list(runs.glob("*.h5.before-salvage"))
    checked = sweeper("verify", "--runs", str(runs))
    assert checked.returncode == 0, checked.stdout
    assert "salvaged at" in checked.stdout and kept.name in checked.stdout
    with h5py.File(h5, "r") as f:
        assert int(f["points"].attrs["count"]) == 21  # every planned point measured again


def test_show_and_report_rebuild_a_deleted_run_file_from_the_journal(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    with h5py.File(h5, "r") as f:
        gains = f["points/gain_db"][()]
    h5.unlink()
    shown = sweeper("show", str(h5))
    assert shown.returncode == 0, shown.stderr
    assert "rebuilt from its journal" in shown.stderr and h5.is_file()
    with h5py.File(h5, "r") as f:
        assert (f["points/gain_db"][()] == gains).all()  # bit for bit, from the journal
    h5.unlink()
    html = tmp_path / "r.html"
    rep = sweeper("report", str(h5), "--out", str(html))
    assert rep.returncode == 0 and html.is_file() and "rebuilt" in rep.stderr
    h5.write_bytes(b"not hdf5 at all")
    shown = sweeper("show", str(h5))
    assert shown.returncode == 0 and "unreadable" in shown.stderr
    assert list(runs.glob("*.unreadable-*"))  # the unreadable bytes are kept, not overwritten
    assert shown.stderr.count("cannot read run file") <= 1  # said once, not doubled


@pytest.mark.parametrize("command", ["report", "export", "diagnose"])
def test_unreadable_run_without_journal_reads_once_located(tmp_path: Path, command: str) -> None:
    bad = tmp_path / "x.h5"
    bad.write_bytes(b"junk")
    result = sweeper(command, str(bad))
    assert result.returncode == 3
    assert result.stderr.count("cannot read run file") <= 1 and "Traceback" not in result.stderr


def test_a_killed_run_is_listed_interrupted_with_its_resume_command_and_the_report_shows_the_gap(
        tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    plan = tmp_path / "long.yaml"  # 4x the demo's points, so the sweep outlasts a `runs` call
    text = PLAN.read_text()
    assert "points_per_decade: 5" in text
    plan.write_text(text.replace("points_per_decade: 5", "points_per_decade: 20"))
    env = {**os.environ, "COLUMNS": "250"}
    proc = subprocess.Popen([sys.executable, "-m", "sweeper", "run", str(plan), "--out", str(runs)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=REPO, env=env)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:  # kill -9 once three points are journalled
            journals = list(runs.glob("*.journal"))
            if journals and journals[0].read_bytes().count(b'"type":"point"') >= 3:
                break
            time.sleep(0.005)
        with sqlite3.connect(runs / "catalog.sqlite") as db:  # read as any SQLite client would
            running = db.execute("SELECT status FROM runs").fetchall()
        proc.send_signal(signal.SIGKILL)
        proc.wait(10)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert running == [("running",)]  # known from its first moment
    (journal,) = runs.glob("*.journal")
    listed = sweeper("runs", "--runs", str(runs))
    assert listed.returncode == 0
    assert "interrupted" in listed.stdout, listed.stdout
    assert f"sweeper resume {journal}" in listed.stdout
    resumed = sweeper("resume", str(journal))
    assert resumed.returncode in (0, 1), resumed.stdout + resumed.stderr
    h5 = journal.with_suffix(".h5")
    html = tmp_path / "r.html"
    assert sweeper("report", str(h5), "--out", str(html)).returncode == 0
    page = html.read_text()
    assert "Interruptions (1)" in page and "gap (s)" in page
    shown = sweeper("show", str(h5))
    assert "interruption 1" in shown.stdout and "gap" in shown.stdout
    assert sweeper("verify", "--runs", str(runs)).returncode == 0


def test_one_time_format_and_point_times_within_the_run(tmp_path: Path) -> None:
    """UTC ISO 8601 with Z and milliseconds everywhere (common practice for logs, RFC 3339 profile),
    and every point's time between the run's start and end, on the simulated bench's clock too."""
    import re
    from datetime import datetime

    runs = tmp_path / "runs"
    h5 = filed_run(runs)
    stamp = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$")
    with h5py.File(h5, "r") as f:
        start, end = f.attrs["start_utc"], f.attrs["end_utc"]
        times = list(f["points/time_utc"].asstr()[()])
    transcript = next(runs.glob("*.transcript.jsonl")).read_text().splitlines()
    journal = [json.loads(line)["record"] for line in h5.with_suffix(".journal").read_text().splitlines()]
    written = [start, end, *times, *(json.loads(t)["time_utc"] for t in transcript[:20]),
               *(r["time_utc"] for r in journal if "time_utc" in r), journal[0]["created_utc"]]
    assert all(stamp.match(t) for t in written), [t for t in written if not stamp.match(t)]
    when = [datetime.fromisoformat(t) for t in times]
    assert datetime.fromisoformat(start) <= min(when) and max(when) <= datetime.fromisoformat(end)


def test_an_edited_transcript_is_reported_by_verify(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    filed_run(runs)
    assert sweeper("verify", "--runs", str(runs)).returncode == 0
    (transcript,) = runs.glob("*.transcript.jsonl")
    transcript.write_text(transcript.read_text().replace('"role": "scope"', '"role": "sc0pe"', 1))
    assert '"role": "sc0pe"' in transcript.read_text()  # the edit took
    checked = sweeper("verify", "--runs", str(runs))
    assert checked.returncode == 1 and "transcript SHA-256" in checked.stdout, checked.stdout
