"""`check` and `run`: validate a plan, then run its sweep."""

from __future__ import annotations

import math
import signal
from pathlib import Path

import click
import numpy as np
from rich.panel import Panel
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    TextColumn,
    TimeElapsedColumn,
    TimeRemainingColumn,
)
from rich.table import Table
from rich.text import Text

from sweeper.cli import main
from sweeper.cli.common import (
    SAFETY,
    VERDICT_STYLE,
    checked_plan_or_exit,
    console,
    err_console,
    exit_after_run,
    flag_names,
    styled,
)
from sweeper.measure.point import Flag, Point, Verdict
from sweeper.plan import format_quantity
from sweeper.verdict import VERDICT_LABELS, VERDICT_MEANINGS


@main.command()
@click.argument("plan_path", type=click.Path(dir_okay=False))
@click.option("--station", "station_path", envvar="SWEEPER_STATION", default=None, type=click.Path(dir_okay=False),
              help="Station file giving the instruments by role (also $SWEEPER_STATION).")
def check(plan_path: str, station_path: str | None) -> None:
    """Validate a test plan and show what the board should do and how long the sweep takes."""

    plan, report = checked_plan_or_exit(plan_path, station_path)
    console.print(styled((plan.name, "bold"), f"  {plan.dut.board} ({plan.dut.serial})  plan sha256 {plan.sha256[:12]}"))
    console.print(
        f"{report.points} points, {format_quantity(report.start_hz, 'frequency')} to "
        f"{format_quantity(report.stop_hz, 'frequency')}, {plan.bench.kind} bench, {plan.bench.mode} mode; "
        f"estimated duration {report.duration_text}"
    )
    for warning in report.warnings:
        err_console.print(f"warning: {warning}", style="yellow")
    for key, value in report.figures.items():
        if isinstance(value, float) and math.isfinite(value):
            console.print(f"  {key}: {value:.6g}")
    table = Table(title="Prediction (model and acceptance limits)")
    for col in ("frequency", "gain dB", "gain limits dB", "phase deg", "phase limits deg"):
        table.add_column(col, justify="right")
    for row in report.table:
        table.add_row(
            format_quantity(row["frequency_hz"], "frequency"),
            f"{row['model_gain_db']:.3f}",
            f"{row['gain_lo_db']:.3f} .. {row['gain_hi_db']:.3f}",
            f"{row['model_phase_deg']:.2f}",
            f"{row['phase_lo_deg']:.2f} .. {row['phase_hi_deg']:.2f}",
        )
    console.print(table)
    console.print(Panel(SAFETY, title=Text("Safety"), border_style="yellow"))
    console.print("plan is sound", style="green")


@main.command()
@click.argument("plan_path", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", default="runs", show_default=True, type=click.Path(file_okay=False),
              help="Folder for run files and journals.")
@click.option("--waveforms/--no-waveforms", default=False, help="Also store every capture's raw waveforms.")
@click.option("--station", "station_path", envvar="SWEEPER_STATION", default=None, type=click.Path(dir_okay=False),
              help="Station file giving the instruments by role (also $SWEEPER_STATION).")
def run(plan_path: str, out_dir: str, waveforms: bool, station_path: str | None) -> None:
    """Run a test plan's sweep, judge it and file the run."""
    from sweeper.run.runner import execute_run

    plan, report = checked_plan_or_exit(plan_path, station_path)
    console.print(styled((plan.name, "bold"), f"  {plan.dut.board} ({plan.dut.serial})  {report.points} points, "
                                              f"estimated {report.duration_text}"))
    stop_requested = {"flag": False}

    def on_term(signum, frame):  # noqa: ARG001 - signal handler signature
        stop_requested["flag"] = True

    signal.signal(signal.SIGTERM, on_term)
    progress = Progress(
        TextColumn("{task.description}", style="bold", markup=False),
        BarColumn(),
        MofNCompleteColumn(),
        TextColumn("{task.fields[freq]}", markup=False),
        TimeElapsedColumn(),
        TimeRemainingColumn(),
        console=console,
        transient=True,
    )
    task = progress.add_task("sweep", total=report.points, freq="")

    def on_point(p: Point) -> None:
        label = VERDICT_LABELS[Verdict(p.verdict)]
        flags = flag_names(p.flags)
        progress.console.print(
            f"{p.index + 1:4d}  {format_quantity(p.frequency_hz, 'frequency'):>10}  "
            f"{p.gain_db:9.3f} dB ±{p.u_gain_db:.3f}  {p.phase_deg:8.2f}° ±{p.u_phase_deg:.2f}  "
            f"{label:5}  {flags}",
            markup=False,
        )
        progress.update(task, advance=1, freq=format_quantity(p.frequency_hz, "frequency"))

    with progress:
        outcome = execute_run(plan, Path(out_dir), on_point=on_point, keep_waveforms=waveforms,
                              should_stop=lambda: stop_requested["flag"])
    render_outcome(outcome)
    exit_after_run(outcome)


def render_outcome(outcome) -> None:
    """Summary table, the failing points and the run verdict."""
    pts = outcome.points
    if pts:
        gains = np.array([p.gain_db for p in pts])
        table = Table(title=f"Run {outcome.run_id}")
        table.add_column("points")
        table.add_column("pass", justify="right")
        table.add_column("pass?", justify="right")
        table.add_column("fail?", justify="right")
        table.add_column("fail", justify="right")
        table.add_column("gain range dB", justify="right")
        counts = {v: sum(1 for p in pts if p.verdict == v) for v in Verdict}
        table.add_row(str(len(pts)), str(counts[Verdict.PASS]), str(counts[Verdict.PASS_UNCERTAIN]),
                      str(counts[Verdict.FAIL_UNCERTAIN]), str(counts[Verdict.FAIL]),
                      f"{gains.min():.2f} .. {gains.max():.2f}")
        console.print(table)
        bad = [p for p in pts if p.verdict in (Verdict.FAIL, Verdict.FAIL_UNCERTAIN)]
        if bad:
            console.print("Failing frequencies:")
            for p in bad:
                which = "gain" if p.margin_gain_db < p.margin_phase_deg else "phase"
                console.print(
                    f"  {format_quantity(p.frequency_hz, 'frequency'):>10}: gain {p.gain_db:.3f} dB "
                    f"(limits {p.gain_lo_db:.3f} .. {p.gain_hi_db:.3f}), phase {p.phase_deg:.2f}° "
                    f"(limits {p.phase_lo_deg:.2f} .. {p.phase_hi_deg:.2f}); worst: {which}",
                    markup=False,
                )
    if outcome.error:
        err_console.print(f"run {outcome.status}: {outcome.error}", markup=False)
    v = Verdict(outcome.verdict)
    meaning = VERDICT_MEANINGS[v]
    if outcome.status != "complete" and outcome.journal_path.exists():
        measured = sum(1 for p in pts if not (p.flags & Flag.SKIPPED))
        meaning = (f"run {outcome.status} after {measured} measured point(s); "
                   f"finish it with: sweeper resume {outcome.journal_path}")
    console.print(Panel(f"{VERDICT_LABELS[v]}  —  {meaning}", style=VERDICT_STYLE[v],
                        title=Text(f"verdict ({outcome.status})")))
    output_doubt(outcome)
    if outcome.journal_path.exists():
        console.print(f"run file: {outcome.run_path}")
        console.print(f"journal:  {outcome.journal_path}")
    else:
        console.print("nothing was written: the run stopped before its first record")




def output_doubt(outcome) -> None:
    """Say in red when the source's output could not be confirmed off at the end of the run."""
    if outcome.output_off is False or outcome.sim_output_on:
        err_console.print("source: the generator did not confirm 'output off' at the end of the run; its output "
                          "may still be ON. Switch it off at the instrument before touching the DUT.",
                          style="bold red")
