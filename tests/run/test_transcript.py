"""The run's transcript: every instrument transaction, beside the run file, named in its
metadata; answers cut to a readable length; faults and their handling visible in it."""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path

from run_rig import load, plan_text

from sweeper.instruments.link import ANSWER_PREVIEW
from sweeper.run.runner import execute_run
from sweeper.store.runfile import read_run
from sweeper.run.transcript import TEXT_LIMIT, Transcript, read_transcript


def test_transcript_records_every_transaction_beside_the_run(tmp_path: Path) -> None:
    outcome = execute_run(load(plan_text(points=6), tmp_path), tmp_path / "runs")
    path = outcome.transcript_path
    assert path == outcome.run_path.with_name(f"{outcome.run_id}.transcript.jsonl") and path.is_file()
    _, meta = read_run(outcome.run_path)
    assert meta["transcript"] == path.name and meta["summary"]["transcript"] == path.name
    records = read_transcript(path)
    transactions = [r for r in records if "command" in r]
    # Every transaction of the sweep is there (the count the bench kept), plus the closing ones.
    assert len(transactions) >= outcome.transactions > 0
    for r in transactions:
        assert set(r) == {"time_utc", "role", "command", "answer", "duration_s", "error"}
        datetime.fromisoformat(r["time_utc"])  # ISO 8601
        assert r["duration_s"] >= 0 and r["error"] is None
        assert len(r["answer"]) <= ANSWER_PREVIEW + 40  # cut, with a note of the full length
    # It opens with each instrument's identity query, answered as the run file records it.
    identities = {i["role"]: i["idn"] for i in meta["instruments"]}
    first = {}
    for r in transactions:
        first.setdefault(r["role"], r)
    assert {role: r["command"] for role, r in first.items()} == {"source": "*IDN?", "scope": "*IDN?"}
    assert {role: r["answer"] for role, r in first.items()} == identities
    # Waveform blocks are summarised, not dumped.
    assert any(r["answer"].startswith("<block of ") for r in transactions)
    # And it closes with the source switched off.
    switching = [r["command"] for r in transactions if r["role"] == "source" and r["command"].startswith("DRIV:ENAB")]
    assert switching[-1] == "DRIV:ENAB OFF" and "DRIV:ENAB ON" in switching


def test_transcript_shows_a_fault_and_its_handling(tmp_path: Path) -> None:
    plan = load(plan_text(points=6, injections="[{kind: timeout, at_point: 2}]"), tmp_path)
    outcome = execute_run(plan, tmp_path / "runs")
    records = read_transcript(outcome.transcript_path)
    failed = [r for r in records if r.get("error")]
    assert len(failed) == 1 and "no complete answer" in failed[0]["error"]
    notes = [r["note"] for r in records if "note" in r]
    assert notes == ["fault at point 2: timeout on scope: retry"]
    # After the fault, the scope was cleared and the point measured again.
    after = records[records.index(failed[0]) + 1:]
    assert any(r.get("command") == "SYST:ERR?" for r in after)


def test_long_text_is_cut_and_a_failing_transcript_never_stops_anything(tmp_path: Path) -> None:
    transcript = Transcript(tmp_path / "t.jsonl")
    transcript("2024-01-01T00:00:00.000+00:00", "scope", "X" * 1000, "Y" * 1000, 0.001, None)
    transcript.close()
    (record,) = read_transcript(tmp_path / "t.jsonl")
    assert record["command"].startswith("X" * TEXT_LIMIT) and record["command"].endswith("(1000 chars)")
    # A transcript that cannot be written stops itself and says why.
    broken = Transcript(tmp_path / "u.jsonl")
    broken._stream.close()  # as a vanished disk would leave it
    broken("2024-01-01T00:00:00.000+00:00", "scope", "*IDN?", "", 0.0, None)
    assert broken.closed and broken.error and "transcript stopped" in broken.error
    json.dumps(broken.error)
