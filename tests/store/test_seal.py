"""The seal: the journal's hash chain, the run file's digest, and checks of one against the other."""

from __future__ import annotations

import hashlib
import json
import os
import zlib
from pathlib import Path

import h5py
import pytest

from sweeper.store.journal import CHAIN_START, Journal, JournalError, dumps, loads, read_journal
from sweeper.store.runfile import rebuild_runfile
from sweeper.store.seal import check_journal, check_run


def _write(path: Path, header: dict, points: list) -> None:
    with Journal.create(path, header) as journal:
        for point in points:
            journal.append_point(point)
        journal.append_event("finished", summary={"status": "complete", "verdict": "NOT_JUDGED"})


def test_each_record_carries_the_sha256_of_the_lines_before_it(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points[:5])
    lines = path.read_bytes().splitlines(keepends=True)
    # Recomputed with hashlib alone (SHA-256, FIPS 180-4), by the rule the module docstring states.
    running = "0" * 64
    for line in lines:
        assert json.loads(line)["record"]["chain"] == running
        running = hashlib.sha256(bytes.fromhex(running) + line).hexdigest()
    contents = read_journal(path)
    assert contents.sealed and contents.chain_sha256 == running
    assert contents.chain_values[-1] == running and len(contents.chain_values) == len(lines)


def test_an_edited_record_with_a_fresh_checksum_breaks_the_chain(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points[:5])
    lines = path.read_bytes().splitlines(keepends=True)
    record = loads(lines[2])["record"]
    record["point"]["index"] = 99  # an edit a CRC alone cannot catch once the CRC is redone
    body = dumps(record).encode()
    lines[2] = b'{"crc32":"%08x","record":%s}\n' % (zlib.crc32(body), body)
    path.write_bytes(b"".join(lines))
    with pytest.raises(JournalError, match="hash chain broken") as caught:
        read_journal(path)
    assert caught.value.line == 4  # the record after the edited one no longer chains
    assert check_journal(path).broken


def test_exactly_one_fsync_per_append(tmp_path, header, points, monkeypatch):
    path = tmp_path / "run.journal"
    journal = Journal.create(path, header)
    calls: list[int] = []
    real_fsync = os.fsync

    def spy(fd: int) -> None:  # counts, then really syncs: the journal stays a real file
        calls.append(fd)
        real_fsync(fd)

    monkeypatch.setattr(os, "fsync", spy)
    for k, point in enumerate(points[:4], start=1):
        journal.append_point(point)
        assert len(calls) == k
    journal.append_event("note", k=1)
    assert len(calls) == 5
    journal.close()


def _version1_journal(path: Path, header: dict) -> None:
    """A journal as format_version 1 wrote it (no chain), built line by line from its documented layout."""
    records = [{"type": "header", "seq": 0, "format": "sweeper-journal", "format_version": 1,
                "created_utc": "2026-01-01T00:00:00.000Z", "header": header},
               {"type": "event", "seq": 1, "kind": "note", "time_utc": "2026-01-01T00:00:01.000Z", "data": {}}]
    out = b""
    for record in records:
        body = dumps(record).encode()
        out += b'{"crc32":"%08x","record":%s}\n' % (zlib.crc32(body), body)
    path.write_bytes(out)


def test_a_version1_journal_reads_as_unsealed_and_stays_so(tmp_path, header):
    path = tmp_path / "old.journal"
    _version1_journal(path, header)
    contents = read_journal(path)
    assert not contents.sealed and contents.chain_sha256 == CHAIN_START and len(contents.events) == 1
    assert check_journal(path).state == "unsealed"
    with Journal.open_append(path) as journal:
        journal.append_event("note", k=2)
    assert len(read_journal(path).events) == 2 and "chain" not in path.read_text().splitlines()[-1]


def test_rebuilt_run_file_is_sealed_then_behind_then_broken(tmp_path, header, points):
    journal, h5 = tmp_path / "r.journal", tmp_path / "r.h5"
    with Journal.create(journal, header) as j:
        for point in points[:6]:
            j.append_point(point)
    rebuild_runfile(journal, h5)
    assert check_run(h5, journal).state == "sealed"
    with Journal.open_append(journal) as j:  # a resume wrote on; the file is merely behind
        j.append_point(points[6])
    assert check_run(h5, journal).state == "behind"
    rebuild_runfile(journal, h5)
    with h5py.File(h5, "r+") as f:
        f.attrs["station"] = "bench 9"  # metadata is sealed too, not only the points
    check = check_run(h5, journal)
    assert check.broken and "altered" in check.describe()
