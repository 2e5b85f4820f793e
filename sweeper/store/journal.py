"""The run journal: an append-only JSON Lines file that survives a crash at any instant.

Every record is one line, written with one `os.write` call and made durable with `os.fsync`
before `append_*` returns, so a record that was reported written is on disk. A crash can only
leave the last line torn (no terminating newline); readers ignore such a tail and
`Journal.open_append` cuts it off before appending again. Anything wrong before the tail
(bad checksum, bad JSON, missing or reordered record) is corruption and raises `JournalError`
naming the line.

Line format (each line is itself valid JSON)::

    {"crc32":"<8 lower-case hex digits>","record":<payload>}\\n

The checksum is CRC-32 (zlib) of the payload's UTF-8 bytes exactly as they appear in the line.
Payloads (``seq`` counts records from 0 and must match the line number - 1):

- header, first line only: ``{"type":"header","seq":0,"format":"sweeper-journal",
  "format_version":2,"created_utc":...,"header":{...caller's header...}}``
- point: ``{"type":"point","seq":n,"point":{<every Point field>}}``
- event: ``{"type":"event","seq":n,"kind":...,"time_utc":...,"data":{...}}``

Hash chain (format_version 2): every payload also carries ``"chain"``, the running SHA-256
(lower-case hex) of the complete lines before it: ``chain_0`` = 64 zeros (the header's) and
``chain_{n+1} = SHA-256(bytes.fromhex(chain_n) + line_n)``, line_n being record n's full line
bytes, newline included. The journal's final value (`JournalContents.chain_sha256`) is the chain
after its last complete record; the run file's seal carries it. A record whose ``chain`` is not
the running value is corruption, like a bad checksum. Version-1 journals (no chain) still read,
as unsealed (`JournalContents.sealed` False).

Floats: finite values are JSON numbers written with Python's shortest round-trip repr, so
float64 values come back bit for bit. JSON has no NaN or infinity; a non-finite float is written
as ``{"$float": token}`` with token ``"inf"``, ``"-inf"``, ``"nan"`` (the default quiet NaN
0x7ff8000000000000), ``"-nan"`` (0xfff8000000000000) or ``"nan:<16 hex digits>"`` (any other
NaN, by its bits). A dict whose only key is ``"$float"`` is therefore reserved.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import enum
import hashlib
import json
import math
import os
import struct
import zlib
from pathlib import Path
from typing import Any

import numpy as np

from sweeper.measure.point import Point
from sweeper.store.fields import PointValueError, point_from_values, point_values

try:
    import fcntl
except ImportError:  # pragma: no cover - non-POSIX hosts: no advisory lock
    fcntl = None  # type: ignore[assignment]

JOURNAL_FORMAT = "sweeper-journal"
JOURNAL_FORMAT_VERSION = 2
READABLE_JOURNAL_VERSIONS = (1, 2)
CHAIN_START = "0" * 64

_PREFIX = b'{"crc32":"'
_MIDDLE = b'","record":'
_PAYLOAD_START = len(_PREFIX) + 8 + len(_MIDDLE)
_FLOAT_TAG = "$float"
_NAN_BITS = 0x7FF8000000000000
_NEG_NAN_BITS = 0xFFF8000000000000


class JournalError(ValueError):
    """A journal that cannot be read or written as asked; `line` is 1-based when known."""

    def __init__(self, path: str | os.PathLike[str], message: str, line: int | None = None) -> None:
        self.path = str(path)
        self.line = line
        where = f"{self.path}:{line}" if line is not None else self.path
        super().__init__(f"{where}: {message}")


@dataclasses.dataclass
class JournalContents:
    """What a journal holds: the caller's header, the points and events in file order."""

    header: dict[str, Any]
    points: list[Point]
    events: list[dict[str, Any]]  # each {"kind": str, "time_utc": str, **data}
    torn_tail: bool  # the file ended in an incomplete record, which was ignored
    torn_bytes: int = 0  # length of that ignored tail, bytes
    created_utc: str = ""  # when the journal was created (ISO 8601 UTC)
    records: int = 0  # complete records read, header included
    sealed: bool = False  # the journal carries a hash chain (format_version 2)
    chain_sha256: str = CHAIN_START  # running SHA-256 after the last complete record
    chain_values: list[str] = dataclasses.field(default_factory=list)  # after each record, in order
    good_bytes: int = 0  # length of the complete, valid part


def utc_now_iso() -> str:
    """Current time as ISO 8601 UTC with milliseconds, e.g. '2024-05-01T12:00:00.000Z'."""
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def next_chain(chain: str, line: bytes) -> str:
    """The running hash after `line` (a full journal line, newline included), lower-case hex."""
    return hashlib.sha256(bytes.fromhex(chain) + line).hexdigest()


def _float_token(value: float) -> Any:
    if math.isfinite(value):
        return value
    if math.isinf(value):
        return {_FLOAT_TAG: "inf" if value > 0 else "-inf"}
    bits = struct.unpack("<Q", struct.pack("<d", value))[0]
    if bits == _NAN_BITS:
        return {_FLOAT_TAG: "nan"}
    if bits == _NEG_NAN_BITS:
        return {_FLOAT_TAG: "-nan"}
    return {_FLOAT_TAG: f"nan:{bits:016x}"}


def _float_from_token(token: Any) -> float:
    if token == "inf":
        return math.inf
    if token == "-inf":
        return -math.inf
    if token == "nan":
        bits = _NAN_BITS
    elif token == "-nan":
        bits = _NEG_NAN_BITS
    elif isinstance(token, str) and token.startswith("nan:") and len(token) == 20:
        bits = int(token[4:], 16)
    else:
        raise ValueError(f"unknown float token {token!r}")
    return struct.unpack("<d", struct.pack("<Q", bits))[0]


def to_json_value(obj: Any) -> Any:
    """A JSON-ready copy of obj: numpy scalars and arrays, enums, dataclasses and paths become
    plain values; non-finite floats become ``{"$float": token}`` (see the module docstring)."""
    if obj is None or isinstance(obj, (str, bool)):
        return obj
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return _float_token(float(obj))
    if isinstance(obj, enum.Enum):
        return to_json_value(obj.value)
    if isinstance(obj, np.ndarray):
        return [to_json_value(v) for v in obj.tolist()]
    if isinstance(obj, dict):
        out = {}
        for key, value in obj.items():
            if not isinstance(key, str):
                raise TypeError(f"journal keys must be strings, got {key!r}")
            out[key] = to_json_value(value)
        if set(out) == {_FLOAT_TAG}:
            raise ValueError(f"a dict with the single key {_FLOAT_TAG!r} is reserved")
        return out
    if isinstance(obj, (list, tuple)):
        return [to_json_value(v) for v in obj]
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return to_json_value(dataclasses.asdict(obj))
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    raise TypeError(f"cannot store {type(obj).__name__} in a journal: {obj!r}")


def _object_hook(obj: dict[str, Any]) -> Any:
    if len(obj) == 1 and _FLOAT_TAG in obj:
        return _float_from_token(obj[_FLOAT_TAG])
    return obj


def _reject_constant(name: str) -> Any:
    raise ValueError(f"non-standard JSON constant {name}")


def dumps(obj: Any) -> str:
    """Compact JSON text of obj using the journal's float encoding."""
    return json.dumps(to_json_value(obj), ensure_ascii=False, allow_nan=False, separators=(",", ":"))


def loads(text: str | bytes) -> Any:
    """Inverse of `dumps`: non-finite float tokens come back as floats with their bits."""
    return json.loads(text, object_hook=_object_hook, parse_constant=_reject_constant)


def _encode_line(payload: dict[str, Any]) -> bytes:
    body = dumps(payload).encode("utf-8")
    return b"%s%08x%s%s}\n" % (_PREFIX, zlib.crc32(body), _MIDDLE, body)


def _decode_line(path: Path, number: int, line: bytes) -> dict[str, Any]:
    if len(line) < _PAYLOAD_START + 2 or not line.startswith(_PREFIX) or not line.endswith(b"}"):
        raise JournalError(path, "malformed record (not a checksummed journal line)", number)
    crc_text = line[len(_PREFIX) : len(_PREFIX) + 8]
    if line[len(_PREFIX) + 8 : _PAYLOAD_START] != _MIDDLE:
        raise JournalError(path, "malformed record (not a checksummed journal line)", number)
    try:
        crc = int(crc_text, 16)
    except ValueError:
        raise JournalError(path, f"malformed checksum {crc_text!r}", number) from None
    body = line[_PAYLOAD_START:-1]
    if zlib.crc32(body) != crc:
        raise JournalError(path, f"checksum mismatch (stored {crc:08x}, computed {zlib.crc32(body):08x})", number)
    try:
        payload = loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise JournalError(path, f"bad record payload: {exc}", number) from None
    if not isinstance(payload, dict):
        raise JournalError(path, "record payload is not an object", number)
    if payload.get("seq") != number - 1:
        raise JournalError(path, f"record sequence {payload.get('seq')!r} where {number - 1} was expected", number)
    return payload


def _parse(path: Path, data: bytes, stop_at_damage: bool = False) -> tuple[JournalContents, int]:
    """Parse journal bytes; returns the contents and the length of the complete part.

    With stop_at_damage, the first damaged record ends the parse instead of raising (when the
    header itself is sound): the contents are those of the good records before it, and the
    returned length is where the damage starts (salvage)."""
    end = data.rfind(b"\n") + 1
    tail = len(data) - end
    lines = data[:end].split(b"\n")[:-1] if end else []
    if not lines:
        raise JournalError(path, "no complete header record (empty or torn journal)")
    header: dict[str, Any] = {}
    created = ""
    points: list[Point] = []
    events: list[dict[str, Any]] = []
    chain = CHAIN_START
    chains: list[str] = []
    sealed = False
    good = 0
    for number, line in enumerate(lines, start=1):
        try:
            payload = _decode_line(path, number, line)
            kind = payload.get("type")
            if number == 1:
                if kind != "header" or payload.get("format") != JOURNAL_FORMAT:
                    raise JournalError(path, f"first record is not a {JOURNAL_FORMAT} header", number)
                if payload.get("format_version") not in READABLE_JOURNAL_VERSIONS:
                    raise JournalError(
                        path, f"unsupported journal format_version {payload.get('format_version')!r}", number
                    )
                sealed = payload.get("format_version") >= 2
            if sealed and payload.get("chain") != chain:
                raise JournalError(path, f"hash chain broken (record carries {payload.get('chain')!r}, "
                                         f"the records before it hash to {chain})", number)
            _take(path, number, payload, kind, points, events)
        except JournalError:
            if not stop_at_damage or number == 1:
                raise
            contents = JournalContents(header, points, events, False, 0, created, number - 1, sealed, chain,
                                       chains, good)
            return contents, good
        if number == 1:
            header = payload.get("header")
            created = payload.get("created_utc", "")
        if sealed:
            chain = next_chain(chain, line + b"\n")
            chains.append(chain)
        good += len(line) + 1
    contents = JournalContents(header, points, events, tail > 0, tail, created, len(lines), sealed, chain, chains,
                               good)
    return contents, end


def _take(path: Path, number: int, payload: dict[str, Any], kind: Any, points: list[Point],
          events: list[dict[str, Any]]) -> None:
    """Check one decoded record and add its point or event."""
    if number == 1:
        if not isinstance(payload.get("header"), dict):
            raise JournalError(path, "header record holds no header object", number)
        return
    if kind == "point":
        values = payload.get("point")
        if not isinstance(values, dict):
            raise JournalError(path, "point record holds no point object", number)
        try:
            points.append(point_from_values(values))
        except PointValueError as exc:
            raise JournalError(path, f"bad point: {exc}", number) from None
    elif kind == "event":
        data_ = payload.get("data")
        if not isinstance(payload.get("kind"), str) or not isinstance(data_, dict):
            raise JournalError(path, "event record without kind or data", number)
        events.append({"kind": payload["kind"], "time_utc": payload.get("time_utc", ""), **data_})
    else:
        raise JournalError(path, f"unexpected record type {kind!r}", number)


def read_journal(path: str | os.PathLike[str]) -> JournalContents:
    """Read a journal. A torn last line is ignored (`torn_tail`); other damage raises JournalError."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise JournalError(path, f"cannot read journal: {exc.strerror or exc}") from None
    return _parse(path, data)[0]


@dataclasses.dataclass
class Damage:
    """The damaged part of a journal found by `find_damage`: from the first bad record on."""

    line: int  # 1-based line number of the first bad record
    offset: int  # byte offset where it starts
    message: str  # why it is bad
    data: bytes  # every byte from `offset` to the end of the file


def find_damage(path: str | os.PathLike[str]) -> tuple[JournalContents, Damage | None]:
    """Read a journal as far as its records are good: the contents of the good records and the
    damage after them (None when the whole journal reads). A bad header still raises."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise JournalError(path, f"cannot read journal: {exc.strerror or exc}") from None
    try:
        return _parse(path, data)[0], None
    except JournalError as exc:
        if exc.line is None or exc.line == 1:
            raise
        contents, good = _parse(path, data, stop_at_damage=True)
        return contents, Damage(exc.line, good, str(exc), data[good:])


def cut_damage(path: str | os.PathLike[str], damage: Damage, keep: str | os.PathLike[str]) -> None:
    """Move a journal's damaged bytes aside: write them to `keep` (fsync'ed; must not exist),
    then cut the journal back to its last good record."""
    keep = Path(keep)
    fd = os.open(keep, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o444)
    try:
        view = memoryview(damage.data)
        while view:
            view = view[os.write(fd, view):]
        os.fsync(fd)
    finally:
        os.close(fd)
    _fsync_dir(keep)
    fd = os.open(path, os.O_RDWR)
    try:
        os.ftruncate(fd, damage.offset)
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(path: Path) -> None:
    """Make a new or renamed directory entry durable (no-op where directories cannot be opened)."""
    try:
        fd = os.open(path.parent, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _lock(path: Path, fd: int) -> None:
    if fcntl is None:
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        raise JournalError(path, "journal is open for writing by another process") from None


def journal_in_use(path: str | os.PathLike[str]) -> bool:
    """True while a process holds the journal's advisory write lock (its run is going on)."""
    if fcntl is None:
        return False
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        return True
    finally:
        os.close(fd)  # closing drops a lock taken here
    return False


class Journal:
    """An open journal for appending. Build with `Journal.create` or `Journal.open_append`."""

    def __init__(self, path: Path, fd: int, size: int, contents: JournalContents) -> None:
        self._path = path
        self._fd: int | None = fd
        self._size = size
        self._seq = contents.records
        self._sealed = contents.sealed
        self._chain = contents.chain_sha256
        self.contents = contents
        """What the journal held when opened (for `create`: the header only)."""

    @property
    def path(self) -> Path:
        return self._path

    @property
    def chain(self) -> str:
        """The running SHA-256 after the last record written (CHAIN_START for an unsealed journal)."""
        return self._chain

    @property
    def sealed(self) -> bool:
        """The journal carries a hash chain (format_version 2)."""
        return self._sealed

    @property
    def closed(self) -> bool:
        return self._fd is None

    @classmethod
    def create(cls, path: str | os.PathLike[str], header: dict[str, Any]) -> Journal:
        """Create a new journal whose first record is `header`; fails if the file exists."""
        path = Path(path)
        line = _encode_line(
            {
                "type": "header",
                "seq": 0,
                "chain": CHAIN_START,
                "format": JOURNAL_FORMAT,
                "format_version": JOURNAL_FORMAT_VERSION,
                "created_utc": (created := utc_now_iso()),
                "header": header,
            }
        )
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_APPEND, 0o644)
        except FileExistsError:
            raise JournalError(path, "journal already exists") from None
        _lock(path, fd)
        journal = cls(path, fd, 0, JournalContents(loads(dumps(header)), [], [], False, 0, created, 0, True))
        try:
            journal._write(line)
        except BaseException:
            journal.close()
            path.unlink(missing_ok=True)
            raise
        _fsync_dir(path)
        return journal

    @classmethod
    def open_append(cls, path: str | os.PathLike[str]) -> Journal:
        """Open an existing journal to resume appending; a torn last line is cut off first.

        The journal is validated as by `read_journal`; what it held is in `journal.contents`.
        """
        path = Path(path)
        try:
            fd = os.open(path, os.O_RDWR | os.O_APPEND)
        except OSError as exc:
            raise JournalError(path, f"cannot open journal: {exc.strerror or exc}") from None
        _lock(path, fd)
        try:
            with open(fd, "rb", closefd=False) as stream:
                data = stream.read()
            contents, end = _parse(path, data)
            if end != len(data):
                os.ftruncate(fd, end)
                os.fsync(fd)
        except BaseException:
            os.close(fd)
            raise
        return cls(path, fd, end, contents)

    def _write(self, line: bytes) -> None:
        if self._fd is None:
            raise JournalError(self._path, "journal is closed")
        view = memoryview(line)
        try:
            while view:
                written = os.write(self._fd, view)
                view = view[written:]
            os.fsync(self._fd)
        except BaseException:
            # Leave no partial record in the middle of the file: cut back to the last good record.
            try:
                os.ftruncate(self._fd, self._size)
            except OSError:
                pass
            raise
        self._size += len(line)
        self._seq += 1
        if self._sealed:
            self._chain = next_chain(self._chain, line)

    def _payload(self, payload: dict[str, Any]) -> dict[str, Any]:
        return {**payload, "chain": self._chain} if self._sealed else payload

    def append_point(self, point: Point) -> None:
        """Append one point; on return it is on disk (written and fsync'ed)."""
        try:
            values = point_values(point)
        except PointValueError as exc:
            raise JournalError(self._path, f"bad point: {exc}") from None
        self._write(_encode_line(self._payload({"type": "point", "seq": self._seq, "point": values})))

    def append_event(self, kind: str, **data: Any) -> dict[str, Any]:
        """Append an event (e.g. "started", "fault", "interrupted", "finished") with JSON-able data.

        `time_utc` defaults to now; pass it in `data` to set it. Returns the event as
        `read_journal` will return it: ``{"kind": kind, "time_utc": ..., **data}``.
        """
        if not isinstance(kind, str) or not kind:
            raise ValueError("event kind must be a non-empty string")
        time_utc = data.pop("time_utc", None) or utc_now_iso()
        if not isinstance(time_utc, str):
            raise TypeError("time_utc must be an ISO 8601 string")
        payload = self._payload({"type": "event", "seq": self._seq, "kind": kind, "time_utc": time_utc, "data": data})
        line = _encode_line(payload)
        self._write(line)
        return {"kind": kind, "time_utc": time_utc, **loads(dumps(data))}

    def close(self) -> None:
        """Close the journal (idempotent); everything appended is already durable."""
        fd = getattr(self, "_fd", None)
        if fd is not None:
            self._fd = None
            os.close(fd)

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __del__(self) -> None:
        self.close()
