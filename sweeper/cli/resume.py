"""`resume`: finish an interrupted run from its next unmeasured point (sweeper.run.resume)."""

from __future__ import annotations

import signal
import sys

import click

from sweeper.cli import main
from sweeper.cli.common import RUNS_OPTION, console, err_console, exit_after_run, flag_names, styled
from sweeper.measure.point import Point, Verdict
from sweeper.plan import format_quantity
from sweeper.verdict import VERDICT_LABELS


@main.command()
@click.argument("run")
@RUNS_OPTION
@click.option("--plan", "plan_path", default=None, type=click.Path(dir_okay=False),
              help="The plan file the run was started with: refused unless its SHA-256 is the run's.")
@click.option("--salvage", is_flag=True,
              help="Go on from the last good journal record when a later one is damaged (the damaged bytes are "
                   "kept in a file beside the journal and the salvage is recorded in the run).")
def resume(run: str, runs_dir: str, plan_path: str | None, salvage: bool) -> None:
    """Finish an interrupted run (RUN: its .journal or .h5 file, or its run id in --runs).

    Checks the plan (by hash) and the instruments (by *IDN? and driver file), records the
    interruption in the run, then measures the remaining points into the same run file.
    """
    from sweeper.cli.sweeps import render_outcome
    from sweeper.run.resume import ResumeRefused, resume_run

    stop_requested = {"flag": False}

    def on_term(signum, frame):  # noqa: ARG001 - signal handler signature
        stop_requested["flag"] = True

    signal.signal(signal.SIGTERM, on_term)

    def on_start(run_id: str, freqs, resumed_at: int) -> None:
        console.print(styled((f"resuming {run_id}", "bold"), f" at point {resumed_at + 1} of {len(freqs)}"))

    def on_point(p: Point) -> None:
        label = VERDICT_LABELS[Verdict(p.verdict)]
        console.print(
            f"{p.index + 1:4d}  {format_quantity(p.frequency_hz, 'frequency'):>10}  "
            f"{p.gain_db:9.3f} dB ±{p.u_gain_db:.3f}  {p.phase_deg:8.2f}° ±{p.u_phase_deg:.2f}  "
            f"{label:5}  {flag_names(p.flags)}",
            markup=False,
        )

    try:
        result = resume_run(run, runs_dir, plan_path=plan_path, on_start=on_start, on_point=on_point,
                            should_stop=lambda: stop_requested["flag"], salvage=salvage)
    except ResumeRefused as exc:
        err_console.print(f"cannot resume {run}: {exc}", markup=False)
        sys.exit(exc.exit_code)
    outcome = result.outcome
    if result.already_complete:
        console.print(f"{outcome.run_id} is already complete ({len(outcome.points)} points); nothing to measure.")
    elif result.interruption:
        gap = result.interruption["gap_s"]
        console.print(f"interruption recorded: {result.interruption['reason']}; last write "
                      f"{result.interruption['interrupted_utc']}, resumed after {gap:.0f} s", markup=False,
                      soft_wrap=True)
    if outcome.faults:
        console.print("faults handled: " + ", ".join(f"{kind} x{count}" for kind, count in outcome.faults.items()),
                      markup=False, soft_wrap=True)
    render_outcome(outcome)
    exit_after_run(outcome)
