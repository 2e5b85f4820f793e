"""How a run ended: its outcome record, and the process exit codes every command uses."""

from __future__ import annotations

import enum
from dataclasses import dataclass, field
from pathlib import Path

from sweeper.measure.point import Point, Verdict


class ExitCode(enum.IntEnum):
    """Process exit codes, the same for every command (README, DEVELOPERS.md)."""

    PASS = 0  # done, and the verdict (if any) is a clean pass
    FAIL = 1  # a verdict other than a clean pass
    BAD_INPUT = 2  # a plan, file or argument that cannot be used; nothing was run
    RUN_ERROR = 3  # an instrument, transport or storage fault ended the run (data kept)
    INTERRUPTED = 130  # stopped by the operator (Ctrl-C, a stop request)


EXIT_PASS = ExitCode.PASS
EXIT_FAIL = ExitCode.FAIL
EXIT_BAD_INPUT = ExitCode.BAD_INPUT
EXIT_RUN_ERROR = ExitCode.RUN_ERROR
EXIT_INTERRUPTED = ExitCode.INTERRUPTED


@dataclass
class RunOutcome:
    """What a run produced: where it is, how it was judged, how it ended.

    error_kind: the class name of what ended the run when it did not complete (e.g.
    'RunAborted', 'ConnectionLost', 'KeyboardInterrupt'), '' otherwise.
    """

    run_id: str
    run_path: Path
    journal_path: Path
    status: str  # "complete" | "interrupted" | "error"
    verdict: Verdict
    points: list[Point] = field(default_factory=list)
    error: str | None = None
    error_kind: str = ""
    transactions: int = 0
    catalog_error: str | None = None
    transcript_path: Path | None = None
    faults: dict = field(default_factory=dict)  # fault kind -> faults met (sweeper.run.supervise)
    output_off: bool | None = None  # the source took 'output off' as the bench closed
    sim_output_on: bool | None = None  # a simulated bench's generator output after the run
    hdf5_write_failed: bool = False  # a run-file write failed half-way: HDF5's own exit clean-up may crash

    @property
    def exit_code(self) -> ExitCode:
        """Process exit code: 0 pass, 1 not a clean pass, 3 run error, 130 interrupted."""
        if self.status == "interrupted":
            return ExitCode.INTERRUPTED
        if self.status == "error":
            return ExitCode.RUN_ERROR
        return ExitCode.PASS if self.verdict == Verdict.PASS else ExitCode.FAIL
