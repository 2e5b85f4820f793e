"""Shared pieces of the command line: consoles, safety text, plan and run-file helpers."""

from __future__ import annotations

import sys
from pathlib import Path

import click
from rich.console import Console

from sweeper.measure.point import Flag, Verdict
from sweeper.plan import PlanError, load_plan
from sweeper.run.outcome import ExitCode

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False, soft_wrap=True)

SAFETY = (
    "Safety: mains-powered DUTs and instruments can carry lethal voltages. Most bench scopes tie "
    "every channel's ground to protective earth: a ground lead clipped to a mains-referenced node "
    "is a short circuit through protective earth. Use isolation transformers, differential or "
    "isolated probes; never defeat a protective earth; keep the source amplitude within what the "
    "DUT and probes are rated for. Follow local electrical codes and licensed practice."
)

VERDICT_STYLE = {
    Verdict.PASS: "bold black on green3",
    Verdict.PASS_UNCERTAIN: "bold black on yellow3",
    Verdict.FAIL_UNCERTAIN: "bold black on dark_orange",
    Verdict.FAIL: "bold white on red3",
    Verdict.NOT_JUDGED: "bold white on grey39",
}


def load_plan_or_exit(plan_path: str):
    """Load a plan, or print every located problem and exit 2."""
    try:
        return load_plan(plan_path)
    except PlanError as exc:
        for problem in exc.problems:
            err_console.print(str(problem), markup=False)
        err_console.print(f"{len(exc.problems)} problem(s) in {plan_path}; nothing was run.", markup=False)
        sys.exit(ExitCode.BAD_INPUT)


def checked_plan_or_exit(plan_path: str, station_path: str | None = None):
    """Load a plan (with the station file's instruments when one is named) and check the pair
    against the drivers; print every problem and exit 2 if any.

    Returns (plan, check report) for a sound plan.
    """
    from sweeper.run.check import check_plan

    plan = load_plan_or_exit(plan_path)
    if station_path:
        from sweeper.station import StationError, bench_with_station, load_station

        try:
            station = load_station(station_path)
        except StationError as exc:
            for problem in exc.problems:
                err_console.print(str(problem), markup=False)
            err_console.print(f"{len(exc.problems)} problem(s) in {station_path}; nothing was run.", markup=False)
            sys.exit(ExitCode.BAD_INPUT)
        plan.bench = bench_with_station(plan.bench, station)
        plan._station = station
    report = check_plan(plan)
    if report.problems:
        for problem in report.problems:
            err_console.print(problem, markup=False)
        err_console.print(f"{len(report.problems)} problem(s) in {plan_path}; nothing was run.", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    return plan, report


def flag_names(flags: int) -> str:
    """Comma list of a point's flag names, lower case."""
    return ",".join(f.name.lower() for f in Flag if f and f != Flag.NONE and flags & f) or ""


def open_catalog(runs_dir: str):
    """Open the catalog beside the runs, or exit 3 with the reason."""
    from sweeper.store.catalog import Catalog, CatalogError, default_catalog_path

    path = default_catalog_path(runs_dir)
    if not path.exists():
        err_console.print(f"{path}: no catalog here (expected one beside the runs; "
                          f"`sweeper catalog rebuild --runs {runs_dir}` makes one from the run files)", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    try:
        return Catalog(path)
    except CatalogError as exc:
        err_console.print(str(exc), markup=False)
        sys.exit(ExitCode.RUN_ERROR)


RUNS_OPTION = click.option("--runs", "runs_dir", default="runs", show_default=True,
                           type=click.Path(file_okay=False), help="Folder holding the run files and catalog.")


def read_or_exit(path: Path, reader):
    """Read a run file or exit 3 with a located message (never a traceback)."""
    try:
        return reader(path)
    except Exception as exc:  # an unreadable file is reported, not raised
        err_console.print(f"{path}: cannot read run file: {exc}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)


def run_paths(runs: tuple[str, ...], runs_dir: str) -> list[Path]:
    """Resolve RUN arguments: run files as given, else run ids (or unique prefixes) in the catalog."""
    paths: list[Path] = []
    for run in runs:
        path = Path(run)
        if path.is_file():
            paths.append(path)
            continue
        with open_catalog(runs_dir) as cat:
            try:
                paths.append(cat.resolve(cat.get(run)))
            except KeyError as exc:
                err_console.print(f"{run}: {exc}", markup=False)
                sys.exit(ExitCode.BAD_INPUT)
    return paths


