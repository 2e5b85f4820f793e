"""`runs`, `show`, `verify`, `catalog rebuild`: the run catalog and its checks."""

from __future__ import annotations

import sys
from pathlib import Path

import click
from rich.text import Text
from rich.table import Table

from sweeper.cli import main
from sweeper.cli.common import (
    RUNS_OPTION,
    console,
    err_console,
    open_catalog,
    read_or_exit,
    rebuild_if_needed,
    styled,
)
from sweeper.measure.point import Verdict
from sweeper.plan import format_quantity
from sweeper.run.outcome import ExitCode
from sweeper.verdict import VERDICT_LABELS


@main.command("runs")
@RUNS_OPTION
@click.option("--serial", help="DUT serial number.")
@click.option("--verdict", help="PASS, PASS?, FAIL?, FAIL or NOT_JUDGED.")
@click.option("--since", help="Start date or time, ISO 8601 (UTC unless an offset is given).")
@click.option("--until", help="End date or time, ISO 8601.")
@click.option("--plan", help="Plan name, or a plan SHA-256 prefix (8+ hex digits).")
@click.option("--station", help="Station name.")
@click.option("--limit", type=int, default=50, show_default=True)
def runs_command(runs_dir, serial, verdict, since, until, plan, station, limit) -> None:
    """List filed runs, newest first, with filters."""
    from sweeper.store.catalog import refresh_unfinished

    with open_catalog(runs_dir) as catalog:
        refresh_unfinished(catalog)
        try:
            records = catalog.find(serial=serial, verdict=verdict, since=since, until=until, plan=plan,
                                   station=station, limit=limit)
        except ValueError as exc:
            err_console.print(f"runs: {exc}", markup=False)
            sys.exit(ExitCode.BAD_INPUT)
        journals = {r.run_id: catalog.resolve(r).with_suffix(".journal") for r in records}
    table = Table()
    for col in ("run id", "start (UTC)", "serial", "plan", "station", "verdict", "status"):
        table.add_column(col)
    for r in records:
        table.add_row(r.run_id, r.start_utc, r.serial, r.plan_name, r.station, r.verdict, r.status)
    console.print(table)
    console.print(f"{len(records)} run(s)")
    for r in records:
        if r.status in ("interrupted", "error") and journals[r.run_id].is_file():
            console.print(f"{r.status} {r.run_id}: sweeper resume {journals[r.run_id]}", markup=False,
                          soft_wrap=True, highlight=False)


@main.command()
@click.argument("run")
@RUNS_OPTION
def show(run: str, runs_dir: str) -> None:
    """Print a run's metadata and summary (RUN: a run file, or a run id or unique prefix)."""
    from sweeper.store.runfile import read_run

    path = Path(run)
    if not path.is_file() and not (path.suffix == ".h5" and path.with_suffix(".journal").is_file()):
        with open_catalog(runs_dir) as catalog:
            try:
                path = catalog.resolve(catalog.get(run))
            except KeyError as exc:
                err_console.print(f"show: {exc}", markup=False)
                sys.exit(ExitCode.BAD_INPUT)
    rebuild_if_needed(path)
    frame, meta = read_or_exit(path, read_run)
    from sweeper.store.seal import check_run

    seal = check_run(path)
    table = Table(show_header=False, title=str(path))
    for key in ("run_id", "plan_name", "plan_sha256", "start_utc", "end_utc", "station", "operator", "host",
                "verdict_name", "finished"):
        table.add_row(key, str(meta.get(key, "")))
    dut = meta.get("dut", {})
    table.add_row("dut", f"{dut.get('board', '')} serial {dut.get('serial', '')}")
    for ident in meta.get("instruments", []):
        table.add_row(f"instrument ({ident.get('role')})", f"{ident.get('resource')}  {ident.get('idn')}  "
                                                             f"{ident.get('driver')}")
    table.add_row("points", f"{len(frame)}")
    table.add_row("seal", Text(seal.describe()))
    for n, gap in enumerate((meta.get("summary") or {}).get("interruptions") or [], start=1):
        table.add_row(f"interruption {n}", Text(f"last write {gap.get('interrupted_utc')}, resumed "
                                                  f"{gap.get('resumed_utc')}, gap {gap.get('gap_s')} s: "
                                                  f"{gap.get('reason')}"))
    console.print(table)
    if len(frame):
        failing = frame[frame["verdict"] >= int(Verdict.FAIL_UNCERTAIN)]
        console.print(f"failing points: {len(failing)}")
        for _, row in failing.iterrows():
            console.print(f"  {format_quantity(row['frequency_hz'], 'frequency')}: gain {row['gain_db']:.3f} dB, "
                          f"phase {row['phase_deg']:.2f}°, {VERDICT_LABELS[Verdict(int(row['verdict']))]}",
                          markup=False)


@main.command()
@RUNS_OPTION
def verify(runs_dir: str) -> None:
    """Re-hash every catalogued run file; report missing, altered or unreadable ones (exit 1 if any)."""
    from sweeper.store.catalog import verify as verify_catalog

    with open_catalog(runs_dir) as catalog:
        results = verify_catalog(catalog)
    bad = [r for r in results if r.state != "ok"]
    for r in results:
        style = "green" if r.state == "ok" else "bold red"
        console.print(styled((f"{r.state:10}", style), f" {r.run_id}  {r.path}  {r.detail}"))
    console.print(f"{len(results)} file(s) checked, {len(bad)} problem(s)")
    sys.exit(ExitCode.FAIL if bad else ExitCode.PASS)


@main.group()
def catalog() -> None:
    """Maintain the run catalog."""


@catalog.command("rebuild")
@RUNS_OPTION
def catalog_rebuild(runs_dir: str) -> None:
    """Re-create the catalog from the run files on disk."""
    from sweeper.store.catalog import default_catalog_path, rebuild

    skipped: list[str] = []
    cat = rebuild(default_catalog_path(runs_dir), runs_dir, on_skip=lambda p, why: skipped.append(f"{p}: {why}"))
    with cat:
        console.print(f"catalog rebuilt: {cat.count()} run(s)")
    for line in skipped:
        console.print(f"skipped {line}", markup=False)


