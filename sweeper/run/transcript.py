"""The run's transcript: every instrument transaction, one JSON object per line, beside the run.

``<run_id>.transcript.jsonl``; each line holds ``time_utc`` (ISO 8601 UTC, when the transaction
started), ``role``, ``command`` (cut to TEXT_LIMIT characters), ``answer`` (cut the same way by
the transaction layer; "" for a write; "<block of N bytes>" for a binary block), ``duration_s``
and ``error`` (null, or what went wrong). A line with a ``note`` instead marks a moment of the
run (started, resumed, a fault's handling).

It is diagnostics, not the record of truth (that is the journal): lines are written with line
buffering and not fsync'ed, and a transcript that cannot be written (a full disk) stops itself
and says why in `error`, never stopping the run.
"""

from __future__ import annotations

import json
import os
from datetime import datetime, timezone
from pathlib import Path

TEXT_LIMIT = 200


def _cut(text: str) -> str:
    return text if len(text) <= TEXT_LIMIT else text[:TEXT_LIMIT] + f"... ({len(text)} chars)"


def transcript_path(out_dir: str | os.PathLike[str], run_id: str) -> Path:
    """Where the transcript of a run goes: beside its run file."""
    return Path(out_dir) / f"{run_id}.transcript.jsonl"


class Transcript:
    """An open transcript; call it as a Link observer, `note` moments, `close` at the end."""

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.path = Path(path)
        self.lines = 0
        self.error: str | None = None
        self._stream = open(self.path, "a", encoding="utf-8", buffering=1)  # line buffered

    def __call__(self, time_utc: str, role: str, command: str, answer: str, duration_s: float,
                 error: str | None) -> None:
        self._write({"time_utc": time_utc, "role": role, "command": _cut(command), "answer": _cut(answer),
                     "duration_s": round(float(duration_s), 6), "error": error})

    def note(self, text: str) -> None:
        """Mark a moment of the run (e.g. 'resumed at point 12')."""
        now = datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")
        self._write({"time_utc": now, "note": _cut(text)})

    def _write(self, record: dict) -> None:
        if self._stream is None:
            return
        try:
            self._stream.write(json.dumps(record, ensure_ascii=False) + "\n")
            self.lines += 1
        except (OSError, ValueError) as exc:
            self.error = f"transcript stopped after {self.lines} lines: {exc}"
            self.close()

    @property
    def closed(self) -> bool:
        return self._stream is None

    def close(self) -> None:
        """Flush and close (idempotent; never raises)."""
        stream, self._stream = self._stream, None
        if stream is not None:
            try:
                stream.close()
            except OSError as exc:
                self.error = self.error or f"transcript could not be closed: {exc}"


def read_transcript(path: str | os.PathLike[str]) -> list[dict]:
    """The transcript's records in order (a torn last line, from a crash, is left out)."""
    records = []
    with open(path, encoding="utf-8") as stream:
        for line in stream:
            if not line.endswith("\n"):
                break
            records.append(json.loads(line))
    return records
