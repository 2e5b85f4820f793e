"""What a running sweep looks like right now, read from its journal.

The journal (`sweeper.store.journal`) is the file to follow while a run is going: the HDF5
run file is held open and locked by the writer, while the journal is an append-only file
that `read_journal` reads at any moment (it ignores a torn last line). A finished run whose
journal is gone can still be shown from its run file.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sweeper.verdict import VERDICT_LABELS
from sweeper.measure.point import Verdict
from sweeper.store.journal import read_journal
from sweeper.store.runfile import FINISH_EVENT, RESUMED_EVENT, points_frame, read_run

JOURNAL_SUFFIX = ".journal"
RUNFILE_SUFFIX = ".h5"


@dataclass(frozen=True)
class Snapshot:
    """A run as far as it has got: points frame, metadata (with its prediction) and progress."""

    frame: pd.DataFrame
    metadata: dict[str, Any]
    points: int
    planned: int
    finished: bool
    status: str  # "running", or the finish summary's status ("complete", "interrupted", "error")
    version: int  # grows whenever the source grows (records read, or 1 for a run file)
    torn_tail: bool = False
    error: str = ""
    verdicts: dict[str, int] = field(default_factory=dict)  # verdict label -> points so far

    def as_json(self) -> dict[str, Any]:
        """Plain JSON data for the page: identity, progress, verdict counts and the last point."""
        md = self.metadata
        dut = md.get("dut") or {}
        last: dict[str, Any] = {}
        if self.points:
            row = self.frame.iloc[-1]
            verdict = VERDICT_LABELS.get(Verdict(int(row["verdict"])), "") if "verdict" in row else ""
            last = {"frequency_hz": _finite(row["frequency_hz"]), "gain_db": _finite(row["gain_db"]),
                    "phase_deg": _finite(row["phase_deg"]), "verdict": verdict}
        summary = md.get("summary") or {}
        return {
            "run_id": str(md.get("run_id") or ""),
            "board": str(dut.get("board") or ""),
            "serial": str(dut.get("serial") or ""),
            "plan": str(md.get("plan_name") or ""),
            "points": self.points,
            "planned": self.planned,
            "finished": self.finished,
            "status": self.status,
            "run_verdict": str(summary.get("verdict") or ""),
            "verdicts": dict(self.verdicts),
            "last": last,
            "version": self.version,
            "error": self.error,
            "interruptions": [{k: (v if isinstance(v, (int, float)) else str(v)) for k, v in i.items()
                               if k in ("interrupted_utc", "resumed_utc", "gap_s", "reason")}
                              for i in (md.get("interruptions") or summary.get("interruptions") or [])
                              if isinstance(i, dict)],
        }


def _finite(value: Any) -> float | None:
    v = float(value)
    return v if np.isfinite(v) else None


def _verdict_counts(frame: pd.DataFrame) -> dict[str, int]:
    values = frame["verdict"].to_numpy(dtype=np.int64) if "verdict" in frame else np.zeros(0, dtype=np.int64)
    return {VERDICT_LABELS[v]: int(np.count_nonzero(values == int(v))) for v in Verdict}


def journal_snapshot(path: str | os.PathLike[str]) -> Snapshot:
    """Read a run's journal as it stands (raises JournalError when it cannot be read)."""
    contents = read_journal(path)
    header = contents.header
    metadata = dict(header.get("metadata") or {})
    planned = [float(f) for f in header.get("planned_frequency_hz") or []]
    prediction = {name: np.asarray(values, dtype=float) for name, values in (header.get("prediction") or {}).items()}
    prediction["frequency_hz"] = np.asarray(planned, dtype=float)
    metadata["prediction"] = prediction
    metadata.setdefault("start_utc", contents.created_utc)
    finish = next((e for e in reversed(contents.events) if e.get("kind") == FINISH_EVENT), None)
    metadata["summary"] = dict(finish.get("summary") or {}) if finish else {}
    metadata["finished"] = finish is not None
    if finish:
        metadata["end_utc"] = finish.get("time_utc", "")
    metadata["interruptions"] = [{k: v for k, v in e.items() if k != "kind"} for e in contents.events
                                 if e.get("kind") == RESUMED_EVENT]
    frame = points_frame(contents.points)
    status = str(metadata["summary"].get("status") or "finished") if finish else "running"
    return Snapshot(frame, metadata, len(contents.points), len(planned), finish is not None, status,
                    contents.records, contents.torn_tail, "", _verdict_counts(frame))


def runfile_snapshot(path: str | os.PathLike[str]) -> Snapshot:
    """A finished run read from its run file (for a run whose journal is not at hand)."""
    frame, metadata = read_run(path)
    planned = int(np.size((metadata.get("prediction") or {}).get("frequency_hz", [])))
    finished = bool(metadata.get("finished"))
    summary = metadata.get("summary") or {}
    status = str(summary.get("status") or ("finished" if finished else "unfinished"))
    return Snapshot(frame, metadata, len(frame), planned, finished, status, 1, False, "", _verdict_counts(frame))


def read_snapshot(path: str | os.PathLike[str]) -> Snapshot:
    """A journal (any name) or, for a `.h5` path, a run file."""
    return runfile_snapshot(path) if Path(path).suffix == RUNFILE_SUFFIX else journal_snapshot(path)


def source_for(path: str | os.PathLike[str]) -> Path:
    """What to follow for a run given as a file: the journal beside a run file when it exists
    (the run may still be going), else the file itself."""
    path = Path(path)
    if path.suffix == RUNFILE_SUFFIX:
        journal = path.with_suffix(JOURNAL_SUFFIX)
        if journal.is_file():
            return journal
    return path


def find_source(run: str, runs_dir: str | os.PathLike[str]) -> Path | None:
    """A run given by file, by run id or by a unique run-id prefix in the runs folder (its
    journal, else its run file); None when nothing matches or a prefix is ambiguous."""
    path = Path(run)
    if path.is_file():
        return source_for(path)
    folder = Path(runs_dir)
    for suffix in (JOURNAL_SUFFIX, RUNFILE_SUFFIX):
        exact = folder / f"{run}{suffix}"
        if exact.is_file():
            return source_for(exact)
    if not folder.is_dir() or any(c in run for c in "*?[]/\\"):
        return None
    for suffix in (JOURNAL_SUFFIX, RUNFILE_SUFFIX):
        matches = sorted(folder.glob(f"{run}*{suffix}"))
        if len(matches) == 1:
            return source_for(matches[0])
        if len(matches) > 1:
            return None
    return None
