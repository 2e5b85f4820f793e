"""Checking a run's seal: the run file against its own digest, against its journal, and the
journal against its hash chain.

A run file's seal (`RunWriter.seal`) holds the journal's running hash after its last record
(`seal_journal_sha256`) and a digest of the file's content and metadata (`seal_content_sha256`,
`sweeper.store.runfile.content_digest`). `check_run` finds:

- "sealed": the digest matches, the journal's chain is intact and ends at the sealed value, and
  the file's points, finish state and verdict are the journal's;
- "behind": sealed and intact, but the journal has records written after the seal (a resume
  that has not finished yet), or its last record is torn: the run file is rebuilt from the
  journal, nothing was altered;
- "unsealed": a run file or journal written before seals existed, or a file that was never
  closed (a killed run); nothing can be said either way, and readers trust the journal;
- "broken": anything else (an edited value or attribute, a damaged journal, a journal that
  disagrees with the file, a transcript whose SHA-256 is not the one the journal's finish
  record holds). `problems` says what.

`notes` lists what the journal records about the run's history (salvaged damage).
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

from sweeper.store.journal import JournalError, read_journal
from sweeper.store.runfile import (
    SALVAGE_EVENT,
    finish_event_in_force,
    file_sha256,
    frames_identical,
    points_frame,
    read_run,
    read_seal,
)

SEAL_STATES: tuple[str, ...] = ("sealed", "behind", "unsealed", "broken")


@dataclasses.dataclass
class SealCheck:
    """What `check_run` found; `state` is one of SEAL_STATES."""

    state: str
    problems: list[str]
    notes: list[str]

    @property
    def broken(self) -> bool:
        return self.state == "broken"

    def describe(self) -> str:
        """One line: the state and its problems and notes."""
        return "; ".join([f"seal {self.state}", *self.problems, *self.notes])


def journal_for(runfile: str | os.PathLike[str]) -> Path:
    """The journal beside a run file (`<run_id>.journal` for `<run_id>.h5`)."""
    return Path(runfile).with_suffix(".journal")


def salvage_notes(events: list[dict]) -> list[str]:
    """Human-readable lines for the salvage events of a journal."""
    return [f"salvaged at {e.get('time_utc', '')}: journal line {e.get('line')} and after "
            f"({e.get('bytes')} bytes, SHA-256 {e.get('sha256')}) kept in {e.get('kept_in')}"
            for e in events if e.get("kind") == SALVAGE_EVENT]


def transcript_problems(journal: Path, done: dict) -> list[str]:
    """The transcript against the SHA-256 the journal's finish record holds for it (if any)."""
    summary = done.get("summary") or {}
    want, name = summary.get("transcript_sha256"), summary.get("transcript")
    if not want or not name:
        return []
    path = journal.with_name(str(name))
    if not path.is_file():
        return [f"{path}: the transcript is missing"]
    got = file_sha256(path)
    return [] if got == want else [f"{path}: transcript SHA-256 {got} differs from the journal's {want}"]


def check_journal(journal: str | os.PathLike[str]) -> SealCheck:
    """A journal on its own: its checksums and hash chain."""
    try:
        contents = read_journal(journal)
    except JournalError as exc:
        return SealCheck("broken", [f"journal: {exc}"], [])
    done = finish_event_in_force(contents.events)
    problems = transcript_problems(Path(journal), done) if done is not None else []
    if problems:
        return SealCheck("broken", problems, salvage_notes(contents.events))
    return SealCheck("sealed" if contents.sealed else "unsealed", [], salvage_notes(contents.events))


def check_run(runfile: str | os.PathLike[str], journal: str | os.PathLike[str] | None = None) -> SealCheck:
    """Check a run file's seal against itself and its journal (default: the one beside it)."""
    runfile = Path(runfile)
    journal = Path(journal) if journal is not None else journal_for(runfile)
    problems: list[str] = []
    try:
        chain, stored, actual = read_seal(runfile)
        frame, meta = read_run(runfile)
    except Exception as exc:  # noqa: BLE001 - an unreadable run file is reported, not raised
        return SealCheck("broken", [f"run file unreadable: {exc}"], [])
    if stored and stored != actual:
        problems.append(f"run file content digest {actual} differs from its seal {stored} (the file was altered)")
    contents = None
    if journal.is_file():
        try:
            contents = read_journal(journal)
        except JournalError as exc:
            problems.append(f"journal: {exc}")
    elif chain:
        problems.append(f"{journal}: the sealed run's journal is missing")
    notes = salvage_notes(contents.events) if contents is not None else []
    if contents is not None:
        if meta.get("run_id") != contents.header.get("metadata", {}).get("run_id"):
            problems.append("the journal belongs to another run")
        elif chain and chain == contents.chain_sha256:
            if not frames_identical(frame, points_frame(contents.points)):
                problems.append("the run file's points differ from the journal's")
            done = finish_event_in_force(contents.events)
            if bool(meta.get("finished")) != (done is not None):
                problems.append("the run file's finish state differs from the journal's")
            elif done is not None:
                verdict = (done.get("summary") or {}).get("verdict")
                if verdict is not None and str(verdict) != str(meta.get("verdict_name")):
                    problems.append(f"the run file says {meta.get('verdict_name')}, the journal {verdict}")
                problems += transcript_problems(journal, done)
        elif chain and chain not in contents.chain_values and contents.torn_tail and not problems:
            notes.append("the journal's last record is torn (a crash); the seal refers to a record after its last "
                         "complete one, so the run file is rebuilt from the journal")
            return SealCheck("behind", problems, notes)
        elif chain and chain not in contents.chain_values:
            problems.append(f"the seal's journal hash {chain} is not one the journal ever had")
        elif chain:
            return SealCheck("broken" if problems else "behind", problems, notes)
    if problems:
        return SealCheck("broken", problems, notes)
    return SealCheck("sealed" if chain and stored else "unsealed", [], notes)


__all__ = ["SEAL_STATES", "SealCheck", "check_journal", "check_run", "journal_for", "salvage_notes"]
