"""Shared pieces of the command line: consoles, safety text, plan and run-file helpers."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import click
from rich.console import Console
from rich.text import Text

from sweeper.measure.point import Flag, Verdict
from sweeper.plan import PlanError, load_plan
from sweeper.run.outcome import ExitCode

# The one place consoles are made. Text from plans, serials, operators, instruments and files is
# data: no console reads markup (`[bold]`, `[/]`) or emoji codes (`:x:`) in what it prints. Styles
# are given as rich Text objects (`styled`), never spelled inside a string.
console = Console(highlight=False, markup=False, emoji=False)
err_console = Console(stderr=True, highlight=False, soft_wrap=True, markup=False, emoji=False)


def styled(*parts: str | tuple[str, str]) -> Text:
    """A line of literal text pieces, each a str or (text, style); nothing is read as markup."""
    return Text.assemble(*parts)

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
        text = str(exc)
        err_console.print(text if text.startswith(str(path)) else f"{path}: cannot read run file: {text}",
                          markup=False)
        sys.exit(ExitCode.RUN_ERROR)


def exit_after_run(outcome) -> None:
    """Exit with the run's code. After a run-file write failed half-way the HDF5 library holds
    state it can never write, and its clean-up at interpreter exit can crash the process (h5py
    issue 914): every record is already durable (journal fsync'ed, catalog committed, run file
    closed as far as it would), so the process then leaves without that clean-up."""
    code = int(outcome.exit_code)
    if getattr(outcome, "hdf5_write_failed", False):
        console.file.flush()
        err_console.file.flush()
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    sys.exit(code)


ACCEPT_BROKEN_SEAL = click.option(
    "--accept-broken-seal", "accept_broken_seal", is_flag=True,
    help="Go on with a run whose seal or journal disagrees; every page and file written is then marked.")


def rebuild_if_needed(path: Path) -> None:
    """A missing or unreadable run file is rebuilt from the journal beside it (an unreadable one
    is first kept aside as <name>.unreadable-<UTC time>); says so on stderr; exits 3 when it cannot."""
    from datetime import datetime, timezone

    from sweeper.store.runfile import ensure_runfile, read_run
    from sweeper.store.seal import journal_for

    journal = journal_for(path)
    if not journal.is_file():
        return
    try:
        read_run(path)
        return
    except Exception as exc:  # noqa: BLE001 - any failure to read means: rebuild from the journal
        why = "missing" if not path.exists() else f"unreadable ({exc})"
    try:
        if path.exists():
            stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
            os.replace(path, path.with_name(f"{path.name}.unreadable-{stamp}"))
        ensure_runfile(journal, path)
    except Exception as exc:  # noqa: BLE001 - reported, never a traceback
        err_console.print(f"{path}: run file {why}; it could not be rebuilt from {journal}: {exc}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    err_console.print(f"{path}: run file {why}; rebuilt from its journal {journal}", markup=False)


def sealed_or_exit(paths: list[Path], accept_broken: bool, command: str) -> str:
    """Rebuild missing run files, then check each run's seal (sweeper.store.seal.check_run).
    Returns "" when every seal holds (or the run predates seals); with a broken one, exits 3
    unless accept_broken, and then returns the warning every written page and file must carry."""
    from sweeper.store.seal import check_run

    warnings = []
    for path in paths:
        rebuild_if_needed(path)
        check = check_run(path)
        if check.broken:
            warnings.append(f"{path.name}: {check.describe()}")
    if not warnings:
        return ""
    for line in warnings:
        err_console.print(line, markup=False)
    if not accept_broken:
        err_console.print(f"{command}: refused (a broken seal); --accept-broken-seal goes on and marks "
                          "everything written", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    return "BROKEN SEAL - this evidence disagrees with its seal or journal: " + " | ".join(warnings)


def run_paths(runs: tuple[str, ...], runs_dir: str) -> list[Path]:
    """Resolve RUN arguments: run files as given, else run ids (or unique prefixes) in the catalog."""
    paths: list[Path] = []
    for run in runs:
        path = Path(run)
        if path.is_file() or (path.suffix == ".h5" and path.with_suffix(".journal").is_file()):
            paths.append(path)  # a missing run file beside its journal is rebuilt by the reader
            continue
        with open_catalog(runs_dir) as cat:
            try:
                paths.append(cat.resolve(cat.get(run)))
            except KeyError as exc:
                err_console.print(f"{run}: {exc}", markup=False)
                sys.exit(ExitCode.BAD_INPUT)
    return paths


