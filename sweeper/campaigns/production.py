"""Production mode: one plan, board after board, each verdict on record, with a running tally.

A shift reads serial numbers one line at a time (typed, or from a barcode scanner that types
the code and Enter). For each serial it checks the catalog beside the runs: a serial already
tested (in an earlier shift or this one) is only tested again after an explicit "y" to the
retest question, and that run is recorded as a retest (run metadata ``retest``: true; a
first test carries ``retest``: false, so the catalog never has to guess). It then runs the
plan's sweep with the board's serial (`sweeper.campaigns.board.plan_for_board`: the run file keeps the
plan file's text and hash; the catalog's serial column is the board's), files the run, and
reports the result and the tally.

The shift ends on an empty line, "end" (any case), the end of the input, or a stop request;
an interrupted sweep also ends it. Serials with control characters or longer than
MAX_SERIAL_CHARS are refused with a message; surrounding spaces and the scanner's CR/LF are
stripped.

Tally (`tally`, a pure function of the tests, so an exported summary re-creates it):
tested = runs made; boards = distinct serials; passed = runs with a clean PASS; failed =
complete runs without one (FAIL, and the guard-band verdicts PASS? and FAIL?: conformance not
proven is not a pass on a production line); errors = runs that did not complete (instrument
fault, interruption); retests = runs answered "y" to the retest question; first-pass yield =
boards passing on their first test / boards tested for the first time (NaN when none).

Demo and test hook: `sim_board(serial, attempt)` gives the simulated board's true part values
for this serial's `attempt`-th test in the shift (0 = its first; None keeps the plan's). It
exists so one shift on the simulated bench can hold a failing board and its rework; it is
refused on a visa bench and recorded in each run it changes (see `sweeper.campaigns.board`).
"""

from __future__ import annotations

import csv
import json
import math
import secrets
import unicodedata
from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass, field, fields
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, TextIO

from sweeper.campaigns.board import override_metadata, plan_for_board
from sweeper.measure.point import Point, Verdict
from sweeper.run.outcome import RunOutcome
from sweeper.run.runner import execute_run
from sweeper.store.catalog import Catalog, CatalogError, RunRecord, default_catalog_path

if TYPE_CHECKING:
    from sweeper.plan import Plan

MAX_SERIAL_CHARS = 64
END_WORDS = frozenset({"", "end"})
YES_WORDS = frozenset({"y", "yes"})
SUMMARY_FORMAT = "sweeper-shift-summary"
SUMMARY_SUFFIXES = (".csv", ".json")

SimBoard = Callable[[str, int], Mapping[str, float | str] | None]


def serial_problem(serial: str) -> str | None:
    """Why a (stripped) serial is refused, or None when it is acceptable."""
    if len(serial) > MAX_SERIAL_CHARS:
        return f"is {len(serial)} characters long (at most {MAX_SERIAL_CHARS})"
    for position, char in enumerate(serial, start=1):
        if unicodedata.category(char).startswith("C"):
            return f"holds a control character (U+{ord(char):04X}) at position {position}"
    return None


@dataclass
class BoardTest:
    """One test of one board in a shift. `result` is "PASS", "FAIL" or "ERROR"; `verdict` the
    run verdict's name; `failing_hz` the frequencies (Hz) judged FAIL or FAIL?."""

    serial: str
    run_id: str
    run_file: str
    time_utc: str
    result: str
    verdict: str
    status: str
    retest: bool
    failing_hz: list[float] = field(default_factory=list)
    error: str = ""


@dataclass(frozen=True)
class Tally:
    """Counts of a shift (see the module notes for the definitions)."""

    tested: int
    boards: int
    passed: int
    failed: int
    errors: int
    retests: int
    first_tests: int
    first_tests_passed: int

    @property
    def first_pass_yield(self) -> float:
        """Boards passing on their first test / boards tested for the first time (NaN when none)."""
        return self.first_tests_passed / self.first_tests if self.first_tests else math.nan


def tally(tests: Sequence[BoardTest]) -> Tally:
    """The tally of a shift's tests."""
    first = [t for t in tests if not t.retest]
    return Tally(
        tested=len(tests),
        boards=len({t.serial for t in tests}),
        passed=sum(t.result == "PASS" for t in tests),
        failed=sum(t.result == "FAIL" for t in tests),
        errors=sum(t.result == "ERROR" for t in tests),
        retests=len(tests) - len(first),
        first_tests=len(first),
        first_tests_passed=sum(t.result == "PASS" for t in first),
    )


@dataclass
class ShiftSummary:
    """A shift: who/what/when and its tests in order. `ended_by`: "operator" (empty line or
    "end"), "end of input", "stop request" or "interrupted"."""

    shift_id: str
    plan_name: str
    plan_sha256: str
    station: str
    start_utc: str
    end_utc: str = ""
    ended_by: str = ""
    tests: list[BoardTest] = field(default_factory=list)

    @property
    def tally(self) -> Tally:
        """The shift's tally, computed from its tests."""
        return tally(self.tests)


def new_shift_id(when: datetime | None = None) -> str:
    """A sortable, unique shift id: 'shift-' + UTC time + a random suffix."""
    when = when or datetime.now(UTC)
    return f"shift-{when.strftime('%Y%m%dT%H%M%SZ')}-{secrets.token_hex(3)}"


def result_of(outcome: RunOutcome) -> str:
    """"PASS" for a complete run with a clean pass, "ERROR" for a run that did not complete,
    else "FAIL"."""
    if outcome.status != "complete":
        return "ERROR"
    return "PASS" if outcome.verdict == Verdict.PASS else "FAIL"


def failing_points(points: Sequence[Point]) -> list[Point]:
    """The points judged FAIL or FAIL?, in measurement order."""
    return [p for p in points if p.verdict in (Verdict.FAIL, Verdict.FAIL_UNCERTAIN)]


def board_test(serial: str, retest: bool, outcome: RunOutcome) -> BoardTest:
    """The shift's record of one board's run (time: now, UTC)."""
    return BoardTest(
        serial=serial,
        run_id=outcome.run_id,
        run_file=str(outcome.run_path),
        time_utc=datetime.now(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z"),
        result=result_of(outcome),
        verdict=Verdict(outcome.verdict).name,
        status=outcome.status,
        retest=retest,
        failing_hz=[float(p.frequency_hz) for p in failing_points(outcome.points)],
        error=outcome.error or "",
    )


def previous_test(out_dir: Path, serial: str) -> tuple[RunRecord | None, str]:
    """The latest catalogued run of this serial (None when there is none) and a warning ("" when
    the catalog was read; else why not, and the caller relies on the shift's own memory)."""
    path = default_catalog_path(out_dir)
    if not path.exists():
        return None, ""
    try:
        with Catalog(path) as catalog:
            found = catalog.find(serial=serial, limit=1)
    except CatalogError as exc:
        return None, f"catalog not readable, relying on this shift's own list: {exc}"
    return (found[0] if found else None), ""


def stream_reader(stream: TextIO) -> Callable[[str], str | None]:
    """An `ask` for run_shift that reads one line from `stream` per question (the prompt is
    not printed); None at the end of input."""

    def ask(prompt: str) -> str | None:
        line = stream.readline()
        return None if line == "" else line

    return ask


def run_shift(
    plan: Plan,
    out_dir: str | Path,
    ask: Callable[[str], str | None],
    *,
    tell: Callable[[str], None] | None = None,
    on_start: Callable[[str, bool], None] | None = None,
    on_result: Callable[[BoardTest, RunOutcome, Tally], None] | None = None,
    on_point: Callable[[Point], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
    keep_waveforms: bool = False,
    sim_board: SimBoard | Mapping[str, Mapping[str, float | str]] | None = None,
) -> ShiftSummary:
    """Test boards until the shift ends; every run is filed in the catalog beside the runs.

    ask(prompt) returns the next input line (None at the end of input); tell(message) shows
    refusals and notes; on_start(serial, retest) runs before each sweep; on_result(test,
    outcome, tally) after it. should_stop() ends the shift (a running sweep is interrupted,
    its points kept, the source switched off); so does KeyboardInterrupt (Ctrl-C), ending it
    as "interrupted" with the tally kept. sim_board: the demo/test hook in the module notes, a
    callable (serial, attempt) or a mapping serial -> part values for every attempt.
    """
    out_dir = Path(out_dir)
    tell = tell or (lambda message: None)
    stop = should_stop or (lambda: False)
    board_parts = _board_hook(sim_board)
    if board_parts is not None and plan.bench.kind != "simulated":
        raise ValueError("sim_board needs a plan with bench.kind: simulated")
    start = datetime.now(UTC)
    summary = ShiftSummary(new_shift_id(start), plan.name, plan.sha256, plan.metadata.station,
                           start.isoformat(timespec="milliseconds").replace("+00:00", "Z"))
    attempts: dict[str, int] = {}
    try:
        while not summary.ended_by:
            if stop():
                summary.ended_by = "stop request"
                break
            line = ask("Serial (scan or type; empty line or 'end' ends the shift): ")
            if line is None:
                summary.ended_by = "end of input"
                break
            serial = line.strip()
            if serial.lower() in END_WORDS:
                summary.ended_by = "operator"
                break
            problem = serial_problem(serial)
            if problem:
                tell(f"serial refused: {serial[:MAX_SERIAL_CHARS]!r} {problem}; scan or type it again")
                continue
            last, warning = previous_test(out_dir, serial)
            if warning:
                tell(warning)
            retest = last is not None or serial in attempts
            if retest:
                when = f"last tested {last.start_utc}, {last.verdict}" if last else "tested earlier in this shift"
                answer = ask(f"{serial} was tested before ({when}). Retest it? [y/N] ")
                if answer is None:
                    summary.ended_by = "end of input"
                    break
                if answer.strip().lower() not in YES_WORDS:
                    tell(f"{serial} not retested (answer was not 'y')")
                    continue
            attempt = attempts.get(serial, 0)
            attempts[serial] = attempt + 1
            parts = board_parts(serial, attempt) if board_parts else None
            if on_start:
                on_start(serial, retest)
            metadata = {"retest": retest, "shift_id": summary.shift_id, **override_metadata(plan, parts)}
            outcome = execute_run(plan_for_board(plan, serial, parts), out_dir, on_point=on_point, should_stop=stop,
                                  keep_waveforms=keep_waveforms, extra_metadata=metadata)
            test = board_test(serial, retest, outcome)
            summary.tests.append(test)
            if outcome.catalog_error:
                tell(f"{outcome.run_id}: run file kept, but not filed in the catalog: {outcome.catalog_error}")
            if on_result:
                on_result(test, outcome, summary.tally)
            if outcome.status == "interrupted":
                summary.ended_by = "interrupted"
    except KeyboardInterrupt:  # Ctrl-C at a prompt or between boards ends the shift, tally kept
        summary.ended_by = "interrupted"
    summary.end_utc = datetime.now(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")
    return summary


def _board_hook(sim_board: SimBoard | Mapping[str, Mapping[str, float | str]] | None) -> SimBoard | None:
    if sim_board is None or callable(sim_board):
        return sim_board
    table = dict(sim_board)
    return lambda serial, attempt: table.get(serial)


# -- the end-of-shift summary as a file ---------------------------------------------------------

_TEST_FIELDS = tuple(f.name for f in fields(BoardTest))
_HEADER_FIELDS = ("shift_id", "plan_name", "plan_sha256", "station", "start_utc", "end_utc", "ended_by")


def summary_dict(summary: ShiftSummary) -> dict:
    """The summary as JSON-ready data: format, the shift's header fields, the tally (with the
    first-pass yield, null when undefined) and the tests."""
    counts = asdict(summary.tally)
    fpy = summary.tally.first_pass_yield
    counts["first_pass_yield"] = None if math.isnan(fpy) else fpy
    return {
        "format": SUMMARY_FORMAT,
        "format_version": 1,
        **{name: getattr(summary, name) for name in _HEADER_FIELDS},
        "tally": counts,
        "tests": [asdict(t) for t in summary.tests],
    }


def write_shift_summary(summary: ShiftSummary, path: str | Path) -> None:
    """Write the summary: JSON (header, tally, tests) for .json; CSV for .csv, one row per test
    with the shift's header fields repeated on every row and the failing frequencies (Hz) as a
    ';'-separated list. Raises ValueError for another suffix."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix == ".json":
        path.write_text(json.dumps(summary_dict(summary), indent=2) + "\n", encoding="utf-8")
        return
    if suffix != ".csv":
        raise ValueError(f"{path}: summary format from the suffix: expected one of {', '.join(SUMMARY_SUFFIXES)}")
    with open(path, "w", newline="", encoding="utf-8") as stream:
        writer = csv.writer(stream)
        writer.writerow(_HEADER_FIELDS + _TEST_FIELDS)
        header = [getattr(summary, name) for name in _HEADER_FIELDS]
        for t in summary.tests:
            row = asdict(t)
            row["failing_hz"] = ";".join(repr(f) for f in t.failing_hz)
            row["retest"] = "true" if t.retest else "false"
            writer.writerow(header + [row[name] for name in _TEST_FIELDS])


def read_shift_summary(path: str | Path) -> ShiftSummary:
    """Read a summary written by write_shift_summary (.json or .csv). A CSV of a shift with no
    tests holds no header values, so they come back empty. Raises ValueError for a file that
    is not a shift summary."""
    path = Path(path)
    if path.suffix.lower() == ".json":
        data = json.loads(path.read_text(encoding="utf-8"))
        if not isinstance(data, dict) or data.get("format") != SUMMARY_FORMAT:
            raise ValueError(f"{path}: not a shift summary (format {SUMMARY_FORMAT!r} expected)")
        summary = ShiftSummary(**{name: data.get(name, "") for name in _HEADER_FIELDS})
        summary.tests = [BoardTest(**{name: t[name] for name in _TEST_FIELDS}) for t in data.get("tests", [])]
        return summary
    with open(path, newline="", encoding="utf-8") as stream:
        reader = csv.DictReader(stream)
        if reader.fieldnames is None or set(_HEADER_FIELDS + _TEST_FIELDS) - set(reader.fieldnames):
            raise ValueError(f"{path}: not a shift summary (columns missing)")
        rows = list(reader)
    summary = ShiftSummary(**{name: rows[0][name] if rows else "" for name in _HEADER_FIELDS})
    for row in rows:
        values = {name: row[name] for name in _TEST_FIELDS}
        values["retest"] = row["retest"] == "true"
        values["failing_hz"] = [float(f) for f in row["failing_hz"].split(";") if f]
        summary.tests.append(BoardTest(**values))
    return summary
