"""The run catalog: an embedded SQLite index with one row per run file.

The catalog lives beside the runs (`default_catalog_path`) and records who ran what, when, on
which DUT, with which verdict, and where the run file is with its SHA-256. It is an index, not
the evidence: `rebuild` recreates it from the run files on disk, and `verify` re-hashes the
files against it.

Concurrency: several processes (two stations writing into one folder) may file runs at once.
Every write is one short `BEGIN IMMEDIATE` transaction; a busy database is waited for
(`busy_timeout`) and retried until `timeout_s` has passed. The default WAL journal mode lets
readers run beside a writer, but SQLite's WAL needs all processes on one host (shared memory);
for a catalog on a network share open it with ``journal_mode="delete"``.

Times are ISO 8601 strings as the run files hold them; filters and ordering use them
normalised to UTC, so "Z", "+00:00" and other offsets compare correctly.

Retest flag: a run is a retest when its file says so (root or summary attribute ``retest``);
otherwise when an earlier run (by start time, then run id) of the same DUT serial is known.
`Catalog.add_runfile` and `rebuild` apply the same rule, so a rebuilt catalog matches.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import os
import random
import sqlite3
import time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar

import h5py
import numpy as np

from sweeper.measure.point import Verdict
from sweeper.store.journal import journal_in_use
from sweeper.store.seal import check_journal, check_run

CATALOG_NAME = "catalog.sqlite"
CATALOG_FORMAT = "sweeper-catalog"
SCHEMA_VERSION = 1
STATUSES: tuple[str, ...] = ("complete", "interrupted", "error", "running")
VERIFY_STATES: tuple[str, ...] = ("ok", "missing", "altered", "unreadable", "seal broken")

_T = TypeVar("_T")
_SQLITE_BUSY, _SQLITE_LOCKED = 5, 6
_HASH_BLOCK = 1 << 20

_COLUMNS: tuple[str, ...] = (
    "run_id", "start_utc", "end_utc", "board", "serial", "plan_name", "plan_sha256", "station",
    "operator", "verdict", "status", "file_path", "file_sha256", "campaign", "retest",
    "points_measured", "points_planned",
)
_RETEST = _COLUMNS.index("retest")
_SCHEMA = """
CREATE TABLE IF NOT EXISTS catalog_schema (
    format TEXT NOT NULL,
    version INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS runs (
    run_id TEXT PRIMARY KEY,
    start_utc TEXT NOT NULL,
    end_utc TEXT NOT NULL,
    start_key TEXT NOT NULL,
    board TEXT NOT NULL,
    serial TEXT NOT NULL,
    plan_name TEXT NOT NULL,
    plan_sha256 TEXT NOT NULL,
    station TEXT NOT NULL,
    operator TEXT NOT NULL,
    verdict TEXT NOT NULL,
    status TEXT NOT NULL,
    file_path TEXT NOT NULL,
    file_sha256 TEXT NOT NULL,
    campaign TEXT NOT NULL,
    retest INTEGER NOT NULL,
    points_measured INTEGER NOT NULL,
    points_planned INTEGER NOT NULL
);
CREATE INDEX IF NOT EXISTS runs_by_serial ON runs (serial, start_key);
CREATE INDEX IF NOT EXISTS runs_by_start ON runs (start_key);
CREATE INDEX IF NOT EXISTS runs_by_plan ON runs (plan_name, start_key);
CREATE INDEX IF NOT EXISTS runs_by_plan_hash ON runs (plan_sha256);
CREATE INDEX IF NOT EXISTS runs_by_station ON runs (station, start_key);
CREATE INDEX IF NOT EXISTS runs_by_campaign ON runs (campaign, start_key);
"""


class CatalogError(RuntimeError):
    """The catalog file cannot be opened, read or written (damaged, foreign, or locked too long)."""


class RunNotFoundError(KeyError):
    """No run, or more than one run, matches a run id or prefix."""

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else "run not found"


@dataclass
class RunRecord:
    """One catalog row. Times are ISO 8601 UTC strings ("" when unknown); `verdict` is a
    `Verdict` member name; `file_path` is relative to the catalog's folder when inside it."""

    run_id: str
    start_utc: str
    end_utc: str
    board: str
    serial: str
    plan_name: str
    plan_sha256: str
    station: str
    operator: str
    verdict: str
    status: str
    file_path: str
    file_sha256: str
    campaign: str = ""
    retest: bool = False
    points_measured: int = 0
    points_planned: int = 0


@dataclass(frozen=True)
class VerifyResult:
    """What `verify` found for one catalogued run file; `state` is one of VERIFY_STATES."""

    run_id: str
    path: Path
    state: str
    detail: str


def default_catalog_path(runs_dir: str | os.PathLike[str]) -> Path:
    """The catalog beside the runs: `runs_dir/catalog.sqlite`."""
    return Path(runs_dir) / CATALOG_NAME


def file_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes (lower-case hex), read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(_HASH_BLOCK), b""):
            digest.update(block)
    return digest.hexdigest()


def time_key(value: str | _dt.datetime) -> str:
    """An ISO 8601 time as a sortable UTC key "YYYY-MM-DDTHH:MM:SS.ffffffZ"; naive times are UTC.
    "" stays "" (unknown time). Raises ValueError on text that is not ISO 8601."""
    if isinstance(value, str):
        if not value.strip():
            return ""
        moment = _dt.datetime.fromisoformat(value.strip())
    else:
        moment = value
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=_dt.timezone.utc)
    return moment.astimezone(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def verdict_name(value: str | int | Verdict) -> str:
    """A verdict as its `Verdict` member name; accepts names in any case, the display forms
    "PASS?"/"FAIL?"/"NOT JUDGED", ints and members. Raises ValueError otherwise."""
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        try:
            return Verdict(int(value)).name
        except ValueError:
            raise ValueError(f"{value!r} is not a verdict") from None
    text = str(value).strip().upper().replace("?", "_UNCERTAIN").replace(" ", "_").replace("-", "_")
    if text not in Verdict.__members__:
        names = ", ".join(Verdict.__members__)
        raise ValueError(f"{value!r} is not a verdict (expected one of {names})")
    return text


def _bound_key(value: str | _dt.date | _dt.datetime, upper: bool) -> tuple[str, bool]:
    """Key of a since/until bound and whether it is inclusive. A bare date means the whole day:
    `since` from its start, `until` up to (not including) the next day's start."""
    if isinstance(value, str):
        text = value.strip()
        if len(text) == 10:
            value = _dt.date.fromisoformat(text)
        else:
            return time_key(text), True
    if isinstance(value, _dt.datetime):
        return time_key(value), True
    day = value + _dt.timedelta(days=1) if upper else value
    return time_key(_dt.datetime(day.year, day.month, day.day, tzinfo=_dt.timezone.utc)), not upper


def _is_busy(exc: sqlite3.Error) -> bool:
    code = getattr(exc, "sqlite_errorcode", None)
    if code is not None:
        return code & 0xFF in (_SQLITE_BUSY, _SQLITE_LOCKED)
    text = str(exc).lower()
    return "locked" in text or "busy" in text


class Catalog:
    """The run catalog in one SQLite file, created when missing. Use as a context manager.

    `timeout_s` (s) bounds how long one operation waits for other writers; `journal_mode`
    is "wal" (default, one host) or "delete" (a catalog on a network share).
    Raises CatalogError when the file is not a catalog, is damaged, or is newer than this code.
    """

    def __init__(self, path: str | os.PathLike[str], *, timeout_s: float = 30.0,
                 journal_mode: str = "wal") -> None:
        if journal_mode not in ("wal", "delete"):
            raise ValueError(f"journal_mode must be 'wal' or 'delete', not {journal_mode!r}")
        self._path = Path(path)
        self._folder = self._path.resolve().parent
        self._timeout_s = float(timeout_s)
        if not self._path.parent.is_dir():
            raise CatalogError(f"{self._path}: folder {self._path.parent} does not exist")
        try:
            self._db = sqlite3.connect(self._path, timeout=self._timeout_s, isolation_level=None)
        except sqlite3.Error as exc:
            raise self._error("cannot open", exc) from None
        try:
            self._db.execute(f"PRAGMA busy_timeout = {int(self._timeout_s * 1000)}")
            self._retry(lambda: self._set_journal_mode(journal_mode))
            self._db.execute("PRAGMA synchronous = NORMAL" if journal_mode == "wal" else "PRAGMA synchronous = FULL")
            self._write(self._create_schema)
        except BaseException:
            self._db.close()
            raise

    # -- plumbing -----------------------------------------------------------------------

    def _error(self, doing: str, exc: BaseException) -> CatalogError:
        if isinstance(exc, sqlite3.DatabaseError) and not _is_busy(exc):
            return CatalogError(
                f"{self._path}: {doing}: the catalog is damaged or not a catalog ({exc}); "
                "the run files are the evidence: rebuild the catalog from them"
            )
        return CatalogError(f"{self._path}: {doing}: {exc}")

    def _set_journal_mode(self, mode: str) -> None:
        got = self._db.execute(f"PRAGMA journal_mode = {mode}").fetchone()[0]
        if str(got).lower() != mode:
            raise CatalogError(f"{self._path}: could not switch to journal_mode={mode} (got {got})")

    def _create_schema(self, db: sqlite3.Connection) -> None:
        tables = {row[0] for row in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if tables and "catalog_schema" not in tables:
            raise CatalogError(f"{self._path}: an SQLite file but not a run catalog (tables: {', '.join(sorted(tables))})")
        for statement in _SCHEMA.split(";"):
            if statement.strip():
                db.execute(statement)
        rows = db.execute("SELECT format, version FROM catalog_schema").fetchall()
        if not rows:
            db.execute("INSERT INTO catalog_schema (format, version) VALUES (?, ?)", (CATALOG_FORMAT, SCHEMA_VERSION))
        elif rows[0][0] != CATALOG_FORMAT:
            raise CatalogError(f"{self._path}: not a run catalog (format {rows[0][0]!r})")
        elif rows[0][1] != SCHEMA_VERSION:
            raise CatalogError(
                f"{self._path}: catalog schema version {rows[0][1]}, this sweeper reads version "
                f"{SCHEMA_VERSION}; rebuild the catalog from the run files"
            )

    def _retry(self, action: Callable[[], _T]) -> _T:
        """Run `action`, retrying with jittered back-off while the database is busy."""
        deadline = time.monotonic() + self._timeout_s
        delay_s = 0.002
        while True:
            try:
                return action()
            except sqlite3.Error as exc:
                if _is_busy(exc) and time.monotonic() < deadline:
                    time.sleep(delay_s * (0.5 + random.random()))
                    delay_s = min(delay_s * 2.0, 0.1)
                    continue
                raise self._error("busy too long" if _is_busy(exc) else "query failed", exc) from None

    def _write(self, body: Callable[[sqlite3.Connection], _T]) -> _T:
        """Run `body` in one BEGIN IMMEDIATE transaction, retried whole while busy."""

        def attempt() -> _T:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                result = body(self._db)
                self._db.execute("COMMIT")
            except BaseException:
                if self._db.in_transaction:
                    self._db.execute("ROLLBACK")
                raise
            return result

        return self._retry(attempt)

    def _query(self, sql: str, params: Iterable[Any] = ()) -> list[tuple[Any, ...]]:
        return self._retry(lambda: self._db.execute(sql, tuple(params)).fetchall())

    # -- records ------------------------------------------------------------------------

    @property
    def path(self) -> Path:
        """The catalog file."""
        return self._path

    @property
    def folder(self) -> Path:
        """The folder relative file paths are resolved against."""
        return self._folder

    def relative_path(self, file_path: str | os.PathLike[str]) -> str:
        """A run file's path as stored: relative (POSIX separators) when inside the catalog's
        folder, absolute otherwise. Relative input is taken as relative to the folder already."""
        path = Path(file_path)
        if not path.is_absolute():
            return path.as_posix()
        absolute = path.resolve()
        try:
            return absolute.relative_to(self._folder).as_posix()
        except ValueError:
            return str(absolute)

    def resolve(self, record: RunRecord) -> Path:
        """Absolute path of a record's run file."""
        path = Path(record.file_path)
        return path if path.is_absolute() else self._folder / path

    def _row(self, record: RunRecord) -> tuple[Any, ...]:
        if not isinstance(record.run_id, str) or not record.run_id:
            raise ValueError("run_id: a non-empty string is required")
        if record.status not in STATUSES:
            raise ValueError(f"{record.run_id}: status {record.status!r} is not one of {', '.join(STATUSES)}")
        try:
            start_key = time_key(record.start_utc)
        except ValueError:
            raise ValueError(f"{record.run_id}: start_utc {record.start_utc!r} is not ISO 8601") from None
        values = dataclasses.replace(
            record, verdict=verdict_name(record.verdict), file_path=self.relative_path(record.file_path),
            retest=int(bool(record.retest)), points_measured=int(record.points_measured),
            points_planned=int(record.points_planned),
        )
        row = tuple(getattr(values, name) for name in _COLUMNS)
        return row[:3] + (start_key,) + row[3:]

    def add(self, record: RunRecord) -> RunRecord:
        """Insert a run, or replace the one with the same run_id; returns it as stored."""
        row = self._row(record)
        self._write(lambda db: db.execute(f"INSERT OR REPLACE INTO runs VALUES ({', '.join('?' * len(row))})", row))
        return self._record(row[:3] + row[4:])

    def add_many(self, records: Iterable[RunRecord]) -> int:
        """Insert or replace many runs in one transaction; returns how many."""
        rows = [self._row(r) for r in records]
        if rows:
            sql = f"INSERT OR REPLACE INTO runs VALUES ({', '.join('?' * len(rows[0]))})"
            self._write(lambda db: db.executemany(sql, rows))
        return len(rows)

    def add_runfile(self, path: str | os.PathLike[str]) -> RunRecord:
        """Read and hash a run file and file it. Without a retest flag in the file, the run is a
        retest when the catalog already holds an earlier run of the same serial."""
        record, retest_known = _read_runfile(Path(path))
        row = self._row(record)
        sql = f"INSERT OR REPLACE INTO runs VALUES ({', '.join('?' * len(row))})"

        def body(db: sqlite3.Connection) -> tuple[Any, ...]:
            final = row
            if not retest_known:
                earlier = bool(record.serial) and db.execute(
                    "SELECT 1 FROM runs WHERE serial = ? AND run_id != ? AND "
                    "(start_key < ? OR (start_key = ? AND run_id < ?)) LIMIT 1",
                    (record.serial, record.run_id, row[3], row[3], record.run_id),
                ).fetchone() is not None
                index = _RETEST + 1  # the row holds start_key after end_utc
                final = row[:index] + (int(earlier),) + row[index + 1:]
            db.execute(sql, final)
            return final

        final = self._write(body)
        return self._record(final[:3] + final[4:])

    @staticmethod
    def _record(values: tuple[Any, ...]) -> RunRecord:
        return RunRecord(*values[:_RETEST], bool(values[_RETEST]), *values[_RETEST + 1:])

    def find(
        self,
        serial: str | None = None,
        verdict: str | Verdict | Iterable[str | Verdict] | None = None,
        since: str | _dt.date | _dt.datetime | None = None,
        until: str | _dt.date | _dt.datetime | None = None,
        plan: str | None = None,
        station: str | None = None,
        campaign: str | None = None,
        limit: int | None = None,
        status: str | None = None,
    ) -> list[RunRecord]:
        """Runs matching every filter given, newest first (start time, then run id).

        `verdict` is one verdict or several (any matches); `since`/`until` bound the start time
        (ISO 8601 text or datetime: inclusive; a bare date: the whole day); `plan` matches the
        plan name or, given 8+ hex digits, a plan_sha256 prefix; `limit` keeps the newest n.
        """
        where: list[str] = []
        params: list[Any] = []
        for column, value in (("serial", serial), ("station", station), ("campaign", campaign),
                              ("status", status)):
            if value is not None:
                where.append(f"{column} = ?")
                params.append(value)
        if verdict is not None:
            wanted = [verdict] if isinstance(verdict, (str, int, Verdict)) else list(verdict)
            names = sorted({verdict_name(v) for v in wanted})
            where.append(f"verdict IN ({', '.join('?' * len(names))})")
            params.extend(names)
        if since is not None:
            key, inclusive = _bound_key(since, upper=False)
            where.append("start_key >= ?" if inclusive else "start_key > ?")
            params.append(key)
        if until is not None:
            key, inclusive = _bound_key(until, upper=True)
            where.append("start_key <= ?" if inclusive else "start_key < ?")
            params.append(key)
        if plan is not None:
            text = plan.strip()
            if len(text) >= 8 and all(c in "0123456789abcdefABCDEF" for c in text):
                where.append("(plan_name = ? OR plan_sha256 BETWEEN ? AND ?)")
                params.extend([plan, text.lower(), text.lower() + "g"])
            else:
                where.append("plan_name = ?")
                params.append(plan)
        sql = f"SELECT {', '.join(_COLUMNS)} FROM runs"
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY start_key DESC, run_id DESC"
        if limit is not None:
            sql += " LIMIT ?"
            params.append(int(limit))
        return [self._record(row) for row in self._query(sql, params)]

    def __iter__(self) -> Iterator[RunRecord]:
        return iter(self.find())

    def get(self, run_id: str) -> RunRecord:
        """The run with this id, or the only run whose id starts with it.
        Raises RunNotFoundError (a KeyError) when none or several match."""
        sql = f"SELECT {', '.join(_COLUMNS)} FROM runs"
        exact = self._query(sql + " WHERE run_id = ?", (run_id,))
        if exact:
            return self._record(exact[0])
        if not run_id:
            raise RunNotFoundError("an empty run id matches no run")
        upper = run_id[:-1] + chr(ord(run_id[-1]) + 1)
        rows = self._query(sql + " WHERE run_id >= ? AND run_id < ? ORDER BY run_id LIMIT 6", (run_id, upper))
        if not rows:
            raise RunNotFoundError(f"no run in {self._path} has an id starting with {run_id!r}")
        if len(rows) > 1:
            shown = ", ".join(r[0] for r in rows[:5]) + (", ..." if len(rows) > 5 else "")
            raise RunNotFoundError(f"{run_id!r} matches several runs ({shown}); give more of the id")
        return self._record(rows[0])

    def count(self) -> int:
        """Number of runs in the catalog."""
        return int(self._query("SELECT COUNT(*) FROM runs")[0][0])

    def serial_seen(self, serial: str) -> bool:
        """True when the catalog holds any run of this DUT serial."""
        return bool(self._query("SELECT 1 FROM runs WHERE serial = ? LIMIT 1", (serial,)))

    def remove(self, run_id: str) -> bool:
        """Delete the run with exactly this id; True when there was one."""
        return self._write(lambda db: db.execute("DELETE FROM runs WHERE run_id = ?", (run_id,)).rowcount) > 0

    def close(self) -> None:
        """Close the connection (idempotent)."""
        self._db.close()

    def __enter__(self) -> Catalog:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


# -- run files ------------------------------------------------------------------------------


def _text(value: Any) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if isinstance(value, np.ndarray) and value.shape == ():
        value = value[()]
    if isinstance(value, np.generic):
        value = value.item()
    return "" if value is None else str(value)


def _attrs(attrs: h5py.AttributeManager) -> dict[str, Any]:
    """Attributes as Python values, the ones named in `json_attributes` decoded from JSON."""
    json_names = {_text(n) for n in attrs.get("json_attributes", [])}
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if isinstance(value, bytes):
            value = value.decode("utf-8")
        elif isinstance(value, np.generic):
            value = value.item()
        if key in json_names and isinstance(value, str):
            try:
                value = json.loads(value)
            except ValueError:
                pass
        out[key] = value
    return out


def _flag(value: Any) -> bool | None:
    if value is None or value == "":
        return None
    if isinstance(value, str):
        return value.strip().lower() in ("1", "true", "yes")
    return bool(value)


def _read_runfile(path: Path) -> tuple[RunRecord, bool]:
    """The record of a run file and whether the file states the retest flag itself."""
    try:
        with h5py.File(path, "r") as f:
            root = _attrs(f.attrs)
            summary = _attrs(f["summary"].attrs) if "summary" in f else {}
            measured = int(f["points"].attrs.get("count", 0)) if "points" in f else 0
            planned = int(f["prediction/frequency_hz"].shape[0]) if "prediction/frequency_hz" in f else 0
    except (OSError, KeyError, ValueError, TypeError) as exc:
        raise CatalogError(f"{path}: cannot read the run file's metadata: {exc}") from None
    if _text(root.get("format")) != "sweeper-run":
        raise CatalogError(f"{path}: not a sweeper run file (format={root.get('format')!r})")
    run_id = _text(root.get("run_id"))
    if not run_id:
        raise CatalogError(f"{path}: the run file has no run_id")
    try:
        time_key(_text(root.get("start_utc")))
    except ValueError:
        raise CatalogError(f"{path}: start_utc {root.get('start_utc')!r} is not ISO 8601") from None
    dut = root.get("dut") if isinstance(root.get("dut"), dict) else {}
    finished = bool(root.get("finished", bool(summary)))
    status = _text(summary.get("status")) or ("complete" if finished else unfinished_status(path))
    if status not in STATUSES:
        status = "error"
    try:
        verdict = verdict_name(root.get("verdict_name") or summary.get("verdict") or root.get("verdict", 0))
    except ValueError:
        verdict = Verdict.NOT_JUDGED.name
    if not planned:
        planned = int(summary.get("points_planned", 0) or 0)
    retest = _flag(root.get("retest"))
    if retest is None:
        retest = _flag(summary.get("retest"))
    try:
        digest = file_sha256(path)
    except OSError as exc:
        raise CatalogError(f"{path}: cannot hash the run file: {exc}") from None
    record = RunRecord(
        run_id=run_id,
        start_utc=_text(root.get("start_utc")),
        end_utc=_text(root.get("end_utc")) or _text(summary.get("end_utc")),
        board=_text(dut.get("board")),
        serial=_text(dut.get("serial")),
        plan_name=_text(root.get("plan_name")),
        plan_sha256=_text(root.get("plan_sha256")),
        station=_text(root.get("station")),
        operator=_text(root.get("operator")),
        verdict=verdict,
        status=status,
        file_path=str(path.resolve()),
        file_sha256=digest,
        campaign=_text(root.get("campaign_id")) or _text(root.get("campaign")),
        retest=bool(retest),
        points_measured=measured,
        points_planned=planned,
    )
    return record, retest is not None


def unfinished_status(runfile: Path) -> str:
    """"running" while a process holds the run's journal, else "interrupted"."""
    return "running" if journal_in_use(runfile.with_suffix(".journal")) else "interrupted"


def refresh_unfinished(catalog: Catalog) -> None:
    """Mark catalogued runs whose process is gone (killed, power lost) as interrupted."""
    for record in catalog.find(status="running"):
        path = catalog.resolve(record)
        if unfinished_status(path) == "interrupted":
            catalog.add(dataclasses.replace(record, status="interrupted", file_path=str(path)))


def record_from_runfile(path: str | os.PathLike[str]) -> RunRecord:
    """The catalog record of a run file: its root metadata and summary, and its SHA-256.

    Status comes from the summary ("complete" when finished without one, "interrupted" when
    never finished); the campaign from `campaign_id` (or `campaign`); `file_path` is absolute
    (`Catalog.add` makes it relative to the catalog's folder). `retest` is False unless the
    file says otherwise. Raises CatalogError when the file cannot be read as a run file.
    """
    return _read_runfile(Path(path))[0]


def _hdf5_problem(path: Path) -> str:
    """'' when h5py opens the file and finds the run-file format attribute, else why not."""
    try:
        with h5py.File(path, "r") as f:
            if _text(f.attrs.get("format")) != "sweeper-run":
                return "HDF5 file without the sweeper-run format attribute"
    except Exception as exc:  # noqa: BLE001 - any failure to open means unreadable
        return f"HDF5 cannot open it: {exc}"
    return ""


def verify(catalog: Catalog) -> list[VerifyResult]:
    """Re-hash every catalogued run file, in catalog order (newest first), and check its seal
    against the file and its journal (`sweeper.store.seal.check_run`); then check every run
    file and journal in the catalog's folder that the catalog does not hold.

    "missing": no file at the path; "altered": its SHA-256 differs from the catalogued one;
    "unreadable": the bytes cannot be read, or they match but HDF5 cannot open them; "seal
    broken": the file or its journal disagrees with the seal; else "ok" (the detail says
    whether it is sealed, and any salvage the journal records).
    """
    results = [_with_seal(r) for r in _verify_hashes(catalog)]
    known = {r.run_id for r in results}
    for journal in sorted(catalog.folder.rglob("*.journal")):
        run_id = journal.stem
        if run_id in known or journal.name.startswith("."):
            continue
        known.add(run_id)
        h5 = journal.with_suffix(".h5")
        check = check_run(h5, journal) if h5.is_file() else check_journal(journal)
        state = "seal broken" if check.broken else "ok"
        results.append(VerifyResult(run_id, h5 if h5.is_file() else journal, state,
                                    f"not in the catalog; {check.describe()}"))
    for h5 in sorted(catalog.folder.rglob("*.h5")):
        if h5.stem in known or h5.name.startswith(".") or _hdf5_problem(h5):
            continue  # an HDF5 file that is no run file, and has no journal, is no evidence
        check = check_run(h5)
        state = "seal broken" if check.broken else "ok"
        results.append(VerifyResult(h5.stem, h5, state, f"not in the catalog; {check.describe()}"))
    return results


def _with_seal(result: VerifyResult) -> VerifyResult:
    if result.state not in ("ok", "altered"):
        return result
    check = check_run(result.path)
    state = "seal broken" if check.broken and result.state == "ok" else result.state
    return VerifyResult(result.run_id, result.path, state, f"{result.detail}; {check.describe()}")


def _verify_hashes(catalog: Catalog) -> list[VerifyResult]:
    results: list[VerifyResult] = []
    for record in catalog.find():
        path = catalog.resolve(record)
        if not path.is_file():
            results.append(VerifyResult(record.run_id, path, "missing", "no file at this path"))
            continue
        try:
            digest = file_sha256(path)
        except OSError as exc:
            results.append(VerifyResult(record.run_id, path, "unreadable", f"cannot read the file: {exc}"))
            continue
        problem = _hdf5_problem(path)
        if record.status in ("running", "interrupted") and not problem:
            results.append(VerifyResult(record.run_id, path, "ok", f"unfinished ({record.status}): the file grows "
                                        "with the run and is rebuilt from its journal"))
            continue
        if digest != record.file_sha256:
            detail = f"SHA-256 {digest} differs from the catalogued {record.file_sha256}"
            results.append(VerifyResult(record.run_id, path, "altered", detail + (f"; {problem}" if problem else "")))
        elif problem:
            results.append(VerifyResult(record.run_id, path, "unreadable", problem))
        else:
            results.append(VerifyResult(record.run_id, path, "ok", f"SHA-256 {digest}"))
    return results


def _remove_sidecars(path: Path) -> None:
    for suffix in ("-wal", "-shm", "-journal"):
        Path(f"{path}{suffix}").unlink(missing_ok=True)


def rebuild(
    catalog_path: str | os.PathLike[str],
    runs_dir: str | os.PathLike[str],
    *,
    on_skip: Callable[[Path, str], None] | None = None,
    journal_mode: str = "wal",
) -> Catalog:
    """A fresh catalog of every readable run file (*.h5, subfolders included) under `runs_dir`.

    Built in a temporary file and moved over `catalog_path` with os.replace; the old catalog
    (even a damaged one) is not read. Retest flags and campaigns come from the files; a run
    without a retest flag is a retest when an earlier run of its serial is on disk. Files that
    are not readable run files are skipped and reported to `on_skip(path, reason)`.
    A file whose seal or journal disagrees (`sweeper.store.seal.check_run`) is never
    catalogued: it is reported to `on_skip` and left untouched, for `verify` to report.
    Run it while no other process has the catalog open. Returns the new catalog, open.
    """
    catalog_path = Path(catalog_path)
    runs_dir = Path(runs_dir)
    if not runs_dir.is_dir():
        raise CatalogError(f"{runs_dir}: not a folder")
    found: list[tuple[RunRecord, bool]] = []
    for file in sorted(runs_dir.rglob("*.h5")):
        if file.name.startswith(".") or not file.is_file():
            continue
        check = check_run(file)
        if check.broken:
            if on_skip is not None:
                on_skip(file, f"refused, left as it is: {check.describe()}")
            continue
        try:
            found.append(_read_runfile(file))
        except CatalogError as exc:
            if on_skip is not None:
                on_skip(file, str(exc))
    by_serial: dict[str, list[tuple[str, str]]] = {}
    for record, _ in found:
        if record.serial:
            by_serial.setdefault(record.serial, []).append((time_key(record.start_utc), record.run_id))
    for record, retest_known in found:
        if not retest_known and record.serial:
            mine = (time_key(record.start_utc), record.run_id)
            record.retest = any(other < mine for other in by_serial[record.serial])
    tmp = catalog_path.with_name(f".{catalog_path.name}.{os.getpid()}.rebuild")
    _remove_sidecars(tmp)
    tmp.unlink(missing_ok=True)
    try:
        with Catalog(tmp, journal_mode="delete") as fresh:
            fresh.add_many(record for record, _ in found)
        _remove_sidecars(catalog_path)
        os.replace(tmp, catalog_path)
    except BaseException:
        _remove_sidecars(tmp)
        tmp.unlink(missing_ok=True)
        raise
    return Catalog(catalog_path, journal_mode=journal_mode)
