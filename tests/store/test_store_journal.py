"""Journal: exact round trip, torn tails forgiven, corruption anywhere else located."""

from __future__ import annotations

import json
import math
import zlib
from pathlib import Path

import numpy as np
import pytest
from store_samples import FLOAT_FIELDS, SPECIAL_FLOATS, assert_points_identical, bits_of, f64

from sweeper.store.journal import Journal, JournalError, dumps, loads, read_journal


def _write(path: Path, header: dict, points: list, events: int = 0) -> None:
    with Journal.create(path, header) as journal:
        for point in points:
            journal.append_point(point)
        for k in range(events):
            journal.append_event("note", k=k)


def test_points_round_trip_bit_exact(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points)
    contents = read_journal(path)
    assert not contents.torn_tail
    assert_points_identical(contents.points, points)
    # The same check phrased on numpy float64 bytes, as an archive reader would do it.
    for name in ("gain_db", "u_phase_deg", "margin_phase_deg"):
        want = np.array([getattr(p, name) for p in points], dtype=np.float64)
        got = np.array([getattr(p, name) for p in contents.points], dtype=np.float64)
        assert np.array_equal(want.view(np.uint64), got.view(np.uint64))


def test_header_round_trip(tmp_path, header):
    path = tmp_path / "run.journal"
    _write(path, header, [])
    got = read_journal(path).header
    assert got["metadata"]["dut"]["serial"] == "DLF7-000123-Ωµ-ü"
    assert got["metadata"] == header["metadata"]
    assert got["planned_frequency_hz"] == header["planned_frequency_hz"]
    for name, values in header["prediction"].items():
        # NaN != NaN, so compare the float64 bits (IEEE 754 encodings).
        assert np.array_equal(np.array(got["prediction"][name]).view(np.uint64), np.array(values).view(np.uint64))


def test_float_encoding_exact_for_any_bit_pattern():
    # 20000 arbitrary 64-bit patterns: every exponent, subnormals, NaNs with any payload and sign.
    rng = np.random.default_rng(42)
    raw = rng.integers(0, 2**64, size=20000, dtype=np.uint64)
    values = [f64(int(b)) for b in raw] + list(SPECIAL_FLOATS)
    back = loads(dumps(values))
    assert [bits_of(v) for v in back] == [int(b) for b in raw] + [bits_of(v) for v in SPECIAL_FLOATS]
    # JSON (RFC 8259) has no NaN/Infinity literals: the text must be strict JSON.
    json.loads(dumps(values), parse_constant=lambda name: pytest.fail(f"non-standard constant {name}"))


def test_events_round_trip(tmp_path, header, points):
    path = tmp_path / "run.journal"
    with Journal.create(path, header) as journal:
        journal.append_point(points[0])
        started = journal.append_event("fault", role="scope", detail="timeout — retried", count=np.int64(2),
                                       level=math.inf)
        journal.append_point(points[1])
        done = journal.append_event("finished", summary={"verdict": 1}, time_utc="2024-05-01T12:30:00Z")
    contents = read_journal(path)
    assert contents.events == [started, done]
    assert started["count"] == 2 and started["level"] == math.inf and started["time_utc"].endswith("Z")
    assert done["time_utc"] == "2024-05-01T12:30:00Z"
    assert_points_identical(contents.points, points[:2])


def test_every_record_is_json_with_a_crc32_of_its_payload(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points[:3], events=1)
    lines = path.read_bytes().split(b"\n")
    assert lines[-1] == b"" and len(lines) == 1 + 3 + 1 + 1
    for seq, line in enumerate(lines[:-1]):
        record = json.loads(line)
        payload = line[line.index(b'"record":') + len(b'"record":') : -1]
        assert record["crc32"] == f"{zlib.crc32(payload):08x}"  # zlib CRC-32 (ISO 3309 / ITU-T V.42)
        assert record["record"]["seq"] == seq


def test_create_refuses_an_existing_file(tmp_path, header):
    path = tmp_path / "run.journal"
    _write(path, header, [])
    with pytest.raises(JournalError, match="already exists"):
        Journal.create(path, header)


def test_torn_last_record_at_every_byte_offset(tmp_path, header, points):
    full = tmp_path / "full.journal"
    _write(full, header, points[:5])
    data = full.read_bytes()
    last_start = data.rindex(b"\n", 0, len(data) - 1) + 1
    cut_path = tmp_path / "cut.journal"
    for cut in range(last_start, len(data) + 1):
        cut_path.write_bytes(data[:cut])
        contents = read_journal(cut_path)
        complete = cut == len(data)
        assert_points_identical(contents.points, points[: 5 if complete else 4])
        assert contents.torn_tail == (last_start < cut < len(data))
        assert contents.torn_bytes == (0 if complete else cut - last_start)


def test_open_append_cuts_a_torn_tail_and_continues(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points[:5])
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - 17])  # crash in the middle of the 5th point's write
    with Journal.open_append(path) as journal:
        assert journal.contents.torn_tail
        assert_points_identical(journal.contents.points, points[:4])
        journal.append_event("resumed")
        journal.append_point(points[4])
        journal.append_point(points[5])
    contents = read_journal(path)
    assert not contents.torn_tail
    assert_points_identical(contents.points, points[:6])
    assert [e["kind"] for e in contents.events] == ["resumed"]


def test_a_second_writer_is_refused(tmp_path, header):
    path = tmp_path / "run.journal"
    with Journal.create(path, header):
        with pytest.raises(JournalError, match="another process"):
            Journal.open_append(path)
    Journal.open_append(path).close()


@pytest.mark.parametrize(
    ("damage", "message"),
    [
        (lambda line: line.replace(b'"index":2', b'"index":7'), "checksum mismatch"),  # a flipped digit
        (lambda line: line[:40] + line[41:], "checksum mismatch"),  # a lost byte
        (lambda line: b"garbage", "malformed record"),
        (lambda line: b"", "malformed record"),  # an empty line
    ],
)
def test_corruption_in_the_middle_is_an_error_with_its_line(tmp_path, header, points, damage, message):
    path = tmp_path / "run.journal"
    _write(path, header, points[:5])
    lines = path.read_bytes().split(b"\n")
    lines[3] = damage(lines[3])  # line 4 holds the point with index 2
    path.write_bytes(b"\n".join(lines))
    with pytest.raises(JournalError, match=message) as info:
        read_journal(path)
    assert info.value.line == 4 and f"{path}:4:" in str(info.value)
    with pytest.raises(JournalError):
        Journal.open_append(path)


def test_a_missing_record_is_detected(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points[:5])
    lines = path.read_bytes().split(b"\n")
    del lines[2]
    path.write_bytes(b"\n".join(lines))
    with pytest.raises(JournalError, match="sequence") as info:
        read_journal(path)
    assert info.value.line == 3


def test_a_damaged_last_complete_line_is_not_forgiven(tmp_path, header, points):
    # Only a line without its newline can be a torn write; a complete bad line is corruption.
    path = tmp_path / "run.journal"
    _write(path, header, points[:3])
    data = bytearray(path.read_bytes())
    data[-10] ^= 0x01
    path.write_bytes(bytes(data))
    with pytest.raises(JournalError, match="line|checksum|malformed"):
        read_journal(path)


def test_a_torn_header_is_an_error(tmp_path, header):
    path = tmp_path / "run.journal"
    _write(path, header, [])
    path.write_bytes(path.read_bytes()[:50])
    with pytest.raises(JournalError, match="no complete header"):
        read_journal(path)


def test_a_point_with_a_wrong_field_is_rejected_on_read(tmp_path, header, points):
    path = tmp_path / "run.journal"
    _write(path, header, points[:2])
    lines = path.read_bytes().split(b"\n")
    record = json.loads(lines[2])["record"]
    record["point"]["samples"] = "many"
    body = json.dumps(record, separators=(",", ":")).encode()
    lines[2] = b'{"crc32":"%08x","record":%s}' % (zlib.crc32(body), body)
    path.write_bytes(b"\n".join(lines))
    with pytest.raises(JournalError, match="samples: expected int") as info:
        read_journal(path)
    assert info.value.line == 3


def test_sample_points_hold_every_edge_value(points):
    # Guard the fixture itself: the round-trip tests above only mean something if the edge values are in it.
    seen = {bits_of(getattr(p, name)) for p in points for name in FLOAT_FIELDS}
    assert {bits_of(v) for v in SPECIAL_FLOATS} <= seen
