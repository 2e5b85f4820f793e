"""`repeat` and `drift`: campaigns of repeated sweeps and how far they drifted."""

from __future__ import annotations

import math
import signal
import sys
from pathlib import Path

import click
import pandas as pd
from rich import box
from rich.table import Table

from sweeper.cli import main
from sweeper.cli.common import (
    RUNS_OPTION,
    checked_plan_or_exit,
    console,
    err_console,
    styled,
)
from sweeper.measure.point import Verdict
from sweeper.plan import format_quantity, parse_quantity
from sweeper.run.outcome import ExitCode
from sweeper.verdict import VERDICT_LABELS


def offset_text(seconds: float) -> str:
    """A campaign-clock offset as '+1 h 20 min', '+10 min', '+12.3 s' ('' when unknown)."""
    if not math.isfinite(seconds):
        return ""
    if seconds < 60:
        return f"+{seconds:.1f} s"
    hours, minutes = divmod(round(seconds / 60), 60)
    if not hours:
        return f"+{minutes} min"
    return f"+{hours} h" + (f" {minutes} min" if minutes else "")


def _time_option(text: str | None, option: str) -> float | None:
    if text is None:
        return None
    try:
        return parse_quantity(text, "time")
    except ValueError as exc:
        err_console.print(f"{option}: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)


def render_drift(table: pd.DataFrame, sweeps: int, campaign_id: str) -> None:
    """The drift table (rich) and the campaign's largest changes."""
    from sweeper.campaigns.drift import largest_changes

    out = Table(title=f"Drift against sweep 1: campaign {campaign_id}, {sweeps} sweep(s)", box=box.SIMPLE_HEAD,
                caption="Δ: the largest change of any later sweep; sweep: its number and start on the campaign clock")
    for col in ("frequency", "gain dB", "Δgain dB", "sweep", "phase °", "Δphase °", "sweep"):
        out.add_column(col, justify="right")

    def where(sweep: int, offset_s: float) -> str:
        return f"{sweep} {offset_text(offset_s)}".strip() if sweep else "-"

    for _, row in table.iterrows():
        out.add_row(
            format_quantity(row["frequency_hz"], "frequency"),
            f"{row['reference_gain_db']:.3f}",
            "-" if math.isnan(row["gain_change_db"]) else f"{row['gain_change_db']:+.4f}",
            where(row["gain_change_sweep"], row["gain_change_offset_s"]),
            f"{row['reference_phase_deg']:.2f}",
            "-" if math.isnan(row["phase_change_deg"]) else f"{row['phase_change_deg']:+.3f}",
            where(row["phase_change_sweep"], row["phase_change_offset_s"]),
        )
    console.print(out)
    gain, phase = largest_changes(table)
    if gain is None:
        console.print("Only one sweep: nothing to compare against.")
        return
    for extreme, unit, digits in ((gain, "dB", 4), (phase, "°", 3)):
        console.print(
            f"largest {extreme.quantity} change: {extreme.change:+.{digits}f} {unit} at "
            f"{format_quantity(extreme.frequency_hz, 'frequency')}, sweep {extreme.sweep} "
            f"({extreme.run_id}, started {extreme.time_utc} {offset_text(extreme.offset_s)})",
            markup=False,
        )


def _write_csv(table: pd.DataFrame, path: str) -> None:
    from sweeper.campaigns.campaign import write_drift_csv

    try:
        write_drift_csv(table, path)
    except OSError as exc:
        err_console.print(f"{path}: cannot write the drift CSV: {exc.strerror or exc}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    console.print(f"drift table written to {path}")


@main.command()
@click.argument("plan_path", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", default="runs", show_default=True, type=click.Path(file_okay=False),
              help="Folder for run files, journals and the catalog.")
@click.option("--count", type=click.IntRange(min=1), help="Number of sweeps.")
@click.option("--every", help="Time from one sweep's start to the next, e.g. '10 min'.")
@click.option("--for", "for_", help="Total duration; no sweep starts after it, e.g. '8 h'.")
@click.option("--drift-csv", type=click.Path(dir_okay=False), help="Also write the drift table as CSV.")
@click.option("--waveforms/--no-waveforms", default=False, help="Also store every capture's raw waveforms.")
def repeat(plan_path: str, out_dir: str, count: int | None, every: str | None, for_: str | None,
           drift_csv: str | None, waveforms: bool) -> None:
    """Sweep a plan repeatedly as one campaign (warm-up, drift), then summarise the drift.

    Give --count N and/or --for D; --every T spaces the sweep starts (without it the sweeps run
    back to back). Ctrl-C (or SIGTERM) ends the campaign after the current sweep; a second one
    stops the current sweep at once (source off, points kept). On a simulated bench that is
    not in real time, the waits between sweeps are skipped. Exit 0 when every sweep passed,
    1 when one did not pass cleanly, 3 on a run error, 130 when stopped.
    """
    from sweeper.campaigns.campaign import (
        CampaignReadError,
        Schedule,
        SkippingClock,
        clock_for,
        new_campaign_id,
        result_sweeps,
        run_campaign,
    )
    from sweeper.campaigns.drift import drift_table

    every_s, duration_s = _time_option(every, "--every"), _time_option(for_, "--for")
    try:
        schedule = Schedule(count=count, every_s=every_s, duration_s=duration_s)
    except ValueError as exc:
        err_console.print(f"repeat: {exc} (use --count N, or --every T --for D)", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    plan, report = checked_plan_or_exit(plan_path)
    campaign_id = new_campaign_id()
    clock = clock_for(plan)
    planned = schedule.planned_sweeps()
    console.print(styled((plan.name, "bold"), f"  campaign {campaign_id}: "
                  f"{planned if planned is not None else 'as many'} sweep(s)"
                  + (f", one every {format_quantity(every_s, 'time')}" if every_s else ", back to back")
                  + (f", for {format_quantity(duration_s, 'time')}" if duration_s else "")
                  + f"; each sweep about {report.duration_text}"))
    if isinstance(clock, SkippingClock):
        console.print("simulated bench: waits between sweeps are skipped (campaign clock jumps ahead)")
    requests = {"count": 0}

    def on_signal(signum, frame):
        requests["count"] += 1
        if requests["count"] == 1:
            err_console.print("stop requested: the campaign ends after this sweep "
                              "(again to stop the sweep now)", markup=False)

    old_handlers = {sig: signal.signal(sig, on_signal) for sig in (signal.SIGINT, signal.SIGTERM)}

    def on_sweep_start(number: int, due_s: float, started_s: float) -> None:
        late = f", {started_s - due_s:.0f} s late" if started_s - due_s > 1.0 else ""
        console.print(f"sweep {number}{'/' + str(planned) if planned else ''} starting at "
                      f"{offset_text(started_s)}{late}", markup=False)

    def on_sweep_end(sweep) -> None:
        o = sweep.outcome
        label = VERDICT_LABELS[Verdict(o.verdict)]
        error = f"  {o.error}" if o.error else ""
        console.print(f"  {o.run_id}  {label}  {o.status}, {len(o.points)} point(s){error}", markup=False)
        if o.catalog_error:
            err_console.print(f"  run file kept, but not filed in the catalog: {o.catalog_error}", markup=False)

    try:
        result = run_campaign(plan, Path(out_dir), schedule, campaign_id=campaign_id, clock=clock,
                              stop_after_run=lambda: requests["count"] >= 1,
                              stop_now=lambda: requests["count"] >= 2,
                              on_sweep_start=on_sweep_start, on_sweep_end=on_sweep_end, keep_waveforms=waveforms)
    finally:
        for sig, handler in old_handlers.items():
            signal.signal(sig, handler)
    if result.skipped_slots:
        console.print(f"{result.skipped_slots} slot(s) skipped because a sweep overran its interval")
    console.print(f"campaign {campaign_id}: {len(result.sweeps)} sweep(s), ended by {result.ended_by}")
    try:
        sweeps = result_sweeps(result)
    except CampaignReadError as exc:
        err_console.print(f"drift: {exc}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    if sweeps:
        table = drift_table(sweeps)
        render_drift(table, len(sweeps), campaign_id)
        if drift_csv:
            _write_csv(table, drift_csv)
    console.print(f"`sweeper drift {campaign_id} --runs {out_dir}` shows this summary again")
    sys.exit(result.exit_code)


@main.command()
@click.argument("campaign_id")
@RUNS_OPTION
@click.option("--csv", "csv_path", type=click.Path(dir_okay=False), help="Also write the drift table as CSV.")
def drift(campaign_id: str, runs_dir: str, csv_path: str | None) -> None:
    """Largest change in gain and phase against a campaign's first sweep, per frequency
    (CAMPAIGN_ID: a campaign id or a unique prefix of one)."""
    from sweeper.campaigns.campaign import (
        CampaignError,
        CampaignReadError,
        campaign_drift,
        campaign_records,
    )

    try:
        records = campaign_records(runs_dir, campaign_id)
        table, sweeps = campaign_drift(runs_dir, records[0][0].campaign)
    except CampaignReadError as exc:
        err_console.print(f"drift: {exc}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    except CampaignError as exc:
        err_console.print(f"drift: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    render_drift(table, len(sweeps), records[0][0].campaign)
    if csv_path:
        _write_csv(table, csv_path)
