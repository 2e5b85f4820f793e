"""`report` and `export`: HTML reports and data export of filed runs."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from sweeper.cli import main
from sweeper.cli.common import (
    ACCEPT_BROKEN_SEAL,
    RUNS_OPTION,
    console,
    err_console,
    read_or_exit,
    run_paths,
    sealed_or_exit,
)
from sweeper.run.outcome import ExitCode


@main.command()
@click.argument("runs", nargs=-1, required=True)
@RUNS_OPTION
@click.option("--out", "out_path", type=click.Path(dir_okay=False), help="HTML file to write.")
@ACCEPT_BROKEN_SEAL
def report(runs: tuple[str, ...], runs_dir: str, out_path: str | None, accept_broken_seal: bool) -> None:
    """Write one self-contained HTML report for one or more runs (files or run ids)."""
    from sweeper.report.html import mark_html, write_html
    from sweeper.report.load import load_runs

    paths = run_paths(runs, runs_dir)
    warning = sealed_or_exit(paths, accept_broken_seal, "report")
    loaded = read_or_exit(paths[0], lambda _p: load_runs(paths))
    target = Path(out_path) if out_path else paths[0].with_suffix(".html")
    write_html(loaded, target)
    if warning:
        mark_html(target, warning)
    console.print(f"report: {target}")


@main.command()
@click.argument("run")
@RUNS_OPTION
@click.option("--to", "fmt", type=click.Choice(["csv", "parquet", "json"]), default="csv", show_default=True)
@click.option("--out", "out_path", type=click.Path(dir_okay=False), help="File to write (default beside the run).")
@ACCEPT_BROKEN_SEAL
def export(run: str, runs_dir: str, fmt: str, out_path: str | None, accept_broken_seal: bool) -> None:
    """Export a run's points (units in the column names) and a JSON summary."""
    from sweeper.report.export import export_points, write_summary_json
    from sweeper.report.load import load_run

    path = run_paths((run,), runs_dir)[0]
    warning = sealed_or_exit([path], accept_broken_seal, "export")
    frame, meta, sha = read_or_exit(path, load_run)
    target = Path(out_path) if out_path else path.with_suffix(f".{fmt}")
    try:
        export_points(frame, meta, target, fmt, warning=warning)
    except (ImportError, RuntimeError, ValueError) as exc:
        err_console.print(f"export: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    summary = target.with_name(target.stem + ".summary.json")
    write_summary_json(frame, meta, summary, file_sha256=sha, warning=warning)
    console.print(f"points: {target}\nsummary: {summary}")
