"""Command line: parse, call, render. Each command is a thin wrapper over a library call."""

from __future__ import annotations

import math
import signal
import sys
from pathlib import Path

import click
import numpy as np
from rich.console import Console
from rich.panel import Panel
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn
from rich.table import Table

from sweeper.judge import VERDICT_LABELS, VERDICT_MEANINGS
from sweeper.measure.point import Flag, Point, Verdict
from sweeper.plan import PlanError, format_quantity, load_plan

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


def _load_or_exit(plan_path: str):
    """Load a plan, or print every located problem and exit 2."""
    try:
        return load_plan(plan_path)
    except PlanError as exc:
        for problem in exc.problems:
            err_console.print(str(problem), markup=False)
        err_console.print(f"{len(exc.problems)} problem(s) in {plan_path}; nothing was run.", markup=False)
        sys.exit(2)


def flag_names(flags: int) -> str:
    """Comma list of a point's flag names, lower case."""
    return ",".join(f.name.lower() for f in Flag if f and f != Flag.NONE and flags & f) or ""


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="sweeper")
def main() -> None:
    """sweeper: stepped-sine frequency-response sweeps, judged against the design."""


@main.command()
@click.argument("plan_path", type=click.Path(dir_okay=False))
def check(plan_path: str) -> None:
    """Validate a test plan and show what the board should do and how long the sweep takes."""
    from sweeper.checking import check_plan

    plan = _load_or_exit(plan_path)
    report = check_plan(plan)
    if report.problems:
        for problem in report.problems:
            err_console.print(problem, markup=False)
        err_console.print(f"{len(report.problems)} problem(s) in {plan_path}; nothing was run.", markup=False)
        sys.exit(2)
    console.print(f"[bold]{plan.name}[/]  {plan.dut.board} ({plan.dut.serial})  plan sha256 {plan.sha256[:12]}")
    console.print(
        f"{report.points} points, {format_quantity(report.start_hz, 'frequency')} to "
        f"{format_quantity(report.stop_hz, 'frequency')}, {plan.bench.kind} bench, {plan.bench.mode} mode; "
        f"estimated duration {report.duration_text}"
    )
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
    console.print(Panel(SAFETY, title="Safety", border_style="yellow"))
    console.print("[green]plan is sound[/]")


@main.command()
@click.argument("plan_path", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", default="runs", show_default=True, type=click.Path(file_okay=False),
              help="Folder for run files and journals.")
@click.option("--waveforms/--no-waveforms", default=False, help="Also store every capture's raw waveforms.")
def run(plan_path: str, out_dir: str, waveforms: bool) -> None:
    """Run a test plan's sweep, judge it and file the run."""
    from sweeper.checking import check_plan
    from sweeper.runner import execute_run

    plan = _load_or_exit(plan_path)
    report = check_plan(plan)
    if report.problems:
        for problem in report.problems:
            err_console.print(problem, markup=False)
        sys.exit(2)
    console.print(f"[bold]{plan.name}[/]  {plan.dut.board} ({plan.dut.serial})  {report.points} points, "
                  f"estimated {report.duration_text}")
    stop_requested = {"flag": False}

    def on_term(signum, frame):  # noqa: ARG001 - signal handler signature
        stop_requested["flag"] = True

    signal.signal(signal.SIGTERM, on_term)
    progress = Progress(
        TextColumn("[bold]{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TextColumn("{task.fields[freq]}"),
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
    sys.exit(outcome.exit_code)


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
    console.print(Panel(f"{VERDICT_LABELS[v]}  —  {VERDICT_MEANINGS[v]}", style=VERDICT_STYLE[v],
                        title=f"verdict ({outcome.status})"))
    console.print(f"run file: {outcome.run_path}")
    console.print(f"journal:  {outcome.journal_path}")


def _open_catalog(runs_dir: str):
    """Open the catalog beside the runs, or exit 3 with the reason."""
    from sweeper.store.catalog import Catalog, CatalogError, default_catalog_path

    path = default_catalog_path(runs_dir)
    if not path.exists():
        err_console.print(f"{path}: no catalog here (expected one beside the runs; "
                          f"`sweeper catalog rebuild --runs {runs_dir}` makes one from the run files)", markup=False)
        sys.exit(2)
    try:
        return Catalog(path)
    except CatalogError as exc:
        err_console.print(str(exc), markup=False)
        sys.exit(3)


RUNS_OPTION = click.option("--runs", "runs_dir", default="runs", show_default=True,
                           type=click.Path(file_okay=False), help="Folder holding the run files and catalog.")


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
    with _open_catalog(runs_dir) as catalog:
        try:
            records = catalog.find(serial=serial, verdict=verdict, since=since, until=until, plan=plan,
                                   station=station, limit=limit)
        except ValueError as exc:
            err_console.print(f"runs: {exc}", markup=False)
            sys.exit(2)
    table = Table()
    for col in ("run id", "start (UTC)", "serial", "plan", "station", "verdict", "status"):
        table.add_column(col)
    for r in records:
        table.add_row(r.run_id, r.start_utc, r.serial, r.plan_name, r.station, r.verdict, r.status)
    console.print(table)
    console.print(f"{len(records)} run(s)")


@main.command()
@click.argument("run")
@RUNS_OPTION
def show(run: str, runs_dir: str) -> None:
    """Print a run's metadata and summary (RUN: a run file, or a run id or unique prefix)."""
    from sweeper.store.runfile import read_run

    path = Path(run)
    if not path.is_file():
        with _open_catalog(runs_dir) as catalog:
            try:
                path = catalog.resolve(catalog.get(run))
            except KeyError as exc:
                err_console.print(f"show: {exc}", markup=False)
                sys.exit(2)
    frame, meta = _read_or_exit(path, read_run)
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
    console.print(table)
    if len(frame):
        failing = frame[frame["verdict"] >= int(Verdict.FAIL_UNCERTAIN)]
        console.print(f"failing points: {len(failing)}")
        for _, row in failing.iterrows():
            console.print(f"  {format_quantity(row['frequency_hz'], 'frequency')}: gain {row['gain_db']:.3f} dB, "
                          f"phase {row['phase_deg']:.2f}°, {VERDICT_LABELS[Verdict(int(row['verdict']))]}",
                          markup=False)


def _read_or_exit(path: Path, reader):
    """Read a run file or exit 3 with a located message (never a traceback)."""
    try:
        return reader(path)
    except Exception as exc:  # an unreadable file is reported, not raised
        err_console.print(f"{path}: cannot read run file: {exc}", markup=False)
        sys.exit(3)


@main.command()
@RUNS_OPTION
def verify(runs_dir: str) -> None:
    """Re-hash every catalogued run file; report missing, altered or unreadable ones (exit 1 if any)."""
    from sweeper.store.catalog import verify as verify_catalog

    with _open_catalog(runs_dir) as catalog:
        results = verify_catalog(catalog)
    bad = [r for r in results if r.state != "ok"]
    for r in results:
        style = "green" if r.state == "ok" else "bold red"
        console.print(f"[{style}]{r.state:10}[/] {r.run_id}  {r.path}  {r.detail}")
    console.print(f"{len(results)} file(s) checked, {len(bad)} problem(s)")
    sys.exit(1 if bad else 0)


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


def _run_paths(runs: tuple[str, ...], runs_dir: str) -> list[Path]:
    """Resolve RUN arguments: run files as given, else run ids (or unique prefixes) in the catalog."""
    paths: list[Path] = []
    for run in runs:
        path = Path(run)
        if path.is_file():
            paths.append(path)
            continue
        with _open_catalog(runs_dir) as cat:
            try:
                paths.append(cat.resolve(cat.get(run)))
            except KeyError as exc:
                err_console.print(f"{run}: {exc}", markup=False)
                sys.exit(2)
    return paths


@main.command()
@click.argument("runs", nargs=-1, required=True)
@RUNS_OPTION
@click.option("--out", "out_path", type=click.Path(dir_okay=False), help="HTML file to write.")
def report(runs: tuple[str, ...], runs_dir: str, out_path: str | None) -> None:
    """Write one self-contained HTML report for one or more runs (files or run ids)."""
    from sweeper.report.html import write_html
    from sweeper.report.load import load_runs

    paths = _run_paths(runs, runs_dir)
    loaded = _read_or_exit(paths[0], lambda _p: load_runs(paths))
    target = Path(out_path) if out_path else paths[0].with_suffix(".html")
    write_html(loaded, target)
    console.print(f"report: {target}")


@main.command()
@click.argument("run")
@RUNS_OPTION
@click.option("--to", "fmt", type=click.Choice(["csv", "parquet", "json"]), default="csv", show_default=True)
@click.option("--out", "out_path", type=click.Path(dir_okay=False), help="File to write (default beside the run).")
def export(run: str, runs_dir: str, fmt: str, out_path: str | None) -> None:
    """Export a run's points (units in the column names) and a JSON summary."""
    from sweeper.report.export import export_points, write_summary_json
    from sweeper.report.load import load_run

    path = _run_paths((run,), runs_dir)[0]
    frame, meta, sha = _read_or_exit(path, load_run)
    target = Path(out_path) if out_path else path.with_suffix(f".{fmt}")
    try:
        export_points(frame, meta, target, fmt)
    except (ImportError, RuntimeError, ValueError) as exc:
        err_console.print(f"export: {exc}", markup=False)
        sys.exit(2)
    summary = target.with_name(target.stem + ".summary.json")
    write_summary_json(frame, meta, summary, file_sha256=sha)
    console.print(f"points: {target}\nsummary: {summary}")
