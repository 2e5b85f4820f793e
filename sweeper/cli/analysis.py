"""`compare` and `diagnose`: runs side by side, and which part of a board is off."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import click
import numpy as np
from rich import box
from rich.table import Table
from rich.text import Text

from sweeper.cli import main
from sweeper.cli.common import (
    ACCEPT_BROKEN_SEAL,
    RUNS_OPTION,
    console,
    err_console,
    styled,
    read_or_exit,
    run_paths,
    sealed_or_exit,
)
from sweeper.run.outcome import ExitCode

PLOT_SUFFIXES = (".png", ".svg")


def _frequency(text: str) -> float:
    from sweeper.plan import parse_quantity

    try:
        value = parse_quantity(text, "frequency")
    except ValueError as exc:
        raise click.BadParameter(f"{text!r}: {exc}") from None
    if not (math.isfinite(value) and value > 0):
        raise click.BadParameter(f"{text!r}: expected a frequency > 0 Hz, e.g. '1 kHz'")
    return value


def _load(paths: list[Path]) -> list[tuple]:
    from sweeper.store.runfile import read_run

    return [read_or_exit(p, read_run) for p in paths]


def _plot_paths(out: Path, kinds: list[str]) -> dict[str, Path]:
    """The overlay goes to `out`; the other plots beside it: <stem>-<kind><suffix>."""
    return {kind: out if kind == "overlay" else out.with_name(f"{out.stem}-{kind}{out.suffix}") for kind in kinds}


@main.command()
@click.argument("runs", nargs=-1, required=True)
@RUNS_OPTION
@click.option("--golden", "golden", help="The golden run (file or run id) to difference the others against.")
@click.option("--at", "at", multiple=True, help="A frequency to follow over time (drift), e.g. --at 1kHz; repeatable.")
@click.option("--out", "out_path", type=click.Path(dir_okay=False),
              help="Write an HTML page (.html) or plots (.png, .svg: overlay there, the others beside it).")
@ACCEPT_BROKEN_SEAL
def compare(runs: tuple[str, ...], runs_dir: str, golden: str | None, at: tuple[str, ...], out_path: str | None,
            accept_broken_seal: bool) -> None:
    """Compare runs (files or run ids): overlay, difference to a golden run, batch spread, drift."""
    from sweeper.analysis.compare import (
        batch_spread,
        difference_summary,
        drift,
        response_of,
    )
    from sweeper.analysis.figures import format_hz
    from sweeper.report.plot import run_names
    from sweeper.report.runinfo import failing_mask, run_verdict_of
    from sweeper.verdict import VERDICT_LABELS

    at_hz = [_frequency(text) for text in at]
    out = Path(out_path) if out_path else None
    if out is not None and out.suffix.lower() not in (".html", *PLOT_SUFFIXES):
        err_console.print(f"--out {out}: unknown format {out.suffix or '(none)'!r}; expected .html, .png or .svg",
                          markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    paths = run_paths(runs, runs_dir)
    warning = sealed_or_exit(paths + (run_paths((golden,), runs_dir) if golden else []), accept_broken_seal,
                             "compare")
    if warning:
        console.print(warning, style="bold red")
    golden_index = None
    if golden is not None:
        golden_path = run_paths((golden,), runs_dir)[0]
        same = [i for i, p in enumerate(paths) if p.resolve() == golden_path.resolve()]
        if same:
            golden_index = same[0]
        else:
            paths.insert(0, golden_path)
            golden_index = 0
    loaded = _load(paths)
    names = run_names(loaded)
    responses = [response_of(frame, md, names[i]) for i, (frame, md) in enumerate(loaded)]

    table = Table(title=f"{len(loaded)} run(s)", box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("run", "start (UTC)", "verdict", "failing"):
        table.add_column(col)
    if golden_index is not None:
        table.add_column("max gain diff", justify="right")
        table.add_column("max phase diff", justify="right")
    for i, (frame, md) in enumerate(loaded):
        start = responses[i].start_utc
        row = [names[i], start.strftime("%Y-%m-%d %H:%M:%S") if start else "", VERDICT_LABELS[run_verdict_of(frame, md)],
               f"{int(failing_mask(frame).sum())} of {len(frame)}"]
        if golden_index is not None:
            if i == golden_index:
                row += ["golden", "golden"]
            else:
                d = difference_summary(responses[i], responses[golden_index])
                row += [f"{d['max_gain_difference_db']:+.4f} dB @ {format_hz(d['at_gain_hz'])}",
                        f"{d['max_phase_difference_deg']:+.3f} deg @ {format_hz(d['at_phase_hz'])}"]
        table.add_row(*row)
    console.print(table)

    if len(loaded) > 1:
        spread = batch_spread(responses)
        if np.isfinite(spread.gain_range_db).any():
            i = int(np.nanargmax(spread.gain_range_db))
            j = int(np.nanargmax(spread.phase_range_deg))
            console.print(f"spread of the batch: widest gain range {spread.gain_range_db[i]:.4f} dB at "
                          f"{format_hz(spread.frequency_hz[i])} (median {spread.gain_median_db[i]:.4f} dB); "
                          f"widest phase range {spread.phase_range_deg[j]:.3f} deg at "
                          f"{format_hz(spread.frequency_hz[j])}", markup=False)
    drift_result = None
    if at_hz:
        try:
            drift_result = drift(responses, at_hz)
        except ValueError as exc:
            err_console.print(f"--at: {exc}", markup=False)
            sys.exit(ExitCode.BAD_INPUT)
        dt = Table(title="drift at chosen frequencies: value (change from the first run)", box=box.SIMPLE_HEAD,
                   pad_edge=False)
        dt.add_column("start (UTC)")
        dt.add_column("run")
        for f in drift_result.at_hz:
            dt.add_column(f"{format_hz(f)}: gain dB", justify="right")
            dt.add_column("phase deg", justify="right")
        for r in range(len(drift_result.names)):
            cells = []
            for c in range(drift_result.at_hz.size):
                cells += [f"{drift_result.gain_db[r, c]:.4f} ({drift_result.gain_change_db[r, c]:+.4f})",
                          f"{drift_result.phase_deg[r, c]:.3f} ({drift_result.phase_change_deg[r, c]:+.3f})"]
            dt.add_row(drift_result.start_utc[r].strftime("%Y-%m-%d %H:%M:%S"), drift_result.names[r], *cells)
        console.print(dt)

    if out is None:
        return
    if out.suffix.lower() == ".html":
        from sweeper.report.comparison import write_comparison_html

        write_comparison_html(loaded, out, golden_index=golden_index, at_hz=at_hz)
        if warning:
            from sweeper.report.html import mark_html

            mark_html(out, warning)
        console.print(f"comparison: {out}")
        return
    from sweeper.report.comparison_plots import drift_figure, spread_figure
    from sweeper.report.plot import difference_figure, overlay_figure, save_figure

    figures = {"overlay": overlay_figure(loaded, golden_index)}
    if golden_index is not None and len(loaded) > 1:
        figures["difference"] = difference_figure(loaded, golden_index)
    if len(loaded) > 1:
        figures["spread"] = spread_figure(batch_spread(responses))
    if drift_result is not None:
        figures["drift"] = drift_figure(drift_result, coverage_factor=float(loaded[0][1].get("coverage_factor") or 2))
    for kind, path in _plot_paths(out, list(figures)).items():
        if warning:
            figures[kind].text(0.01, 0.995, warning[:300], color="#b00020", fontsize=6, va="top", wrap=True)
        save_figure(figures[kind], path)
        console.print(f"{kind}: {path}")


@main.command()
@click.argument("run")
@RUNS_OPTION
@ACCEPT_BROKEN_SEAL
def diagnose(run: str, runs_dir: str, accept_broken_seal: bool) -> None:
    """Fit the model's part values to a run and name the likely out-of-tolerance part.

    Exit 0 when parts within tolerance explain the response, 1 when they do not, 2 when the
    run cannot be fitted (no component model, too few points), 3 when it cannot be read.
    """
    from sweeper.analysis.extract import (
        HELD,
        IN_TOLERANCE,
        OUT_OF_TOLERANCE,
        ExtractionError,
        format_range,
        format_value,
    )
    from sweeper.analysis.run_fit import extract
    from sweeper.store.runfile import read_run

    path = run_paths((run,), runs_dir)[0]
    warning = sealed_or_exit([path], accept_broken_seal, "diagnose")
    if warning:
        console.print(warning, style="bold red")
    frame, meta = read_or_exit(path, read_run)
    try:
        ex = extract(frame, meta)
    except ExtractionError as exc:
        err_console.print(f"{path}: cannot fit: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    dut = meta.get("dut") or {}
    who = f"{dut.get('board') or ''} {dut.get('serial') or ''}"
    console.print(styled((who, "bold"), f"  run {meta.get('run_id')}  model {ex.topology}"))
    styles = {IN_TOLERANCE: "green", OUT_OF_TOLERANCE: "bold red", HELD: "dim"}
    rows = []
    for p in ex.parameters:
        if p.kind == "reference" or not math.isfinite(p.deviation_frac):
            dev = "-"
        else:
            dev = f"{p.deviation_frac:+.3g} dB" if p.unit == "dB" else f"{p.deviation_frac * 100:+.3g} %"
        rows.append((p.name + (f" ({p.condition})" if p.condition else ""), format_value(p.value, p.unit, 5),
                     format_range(p.low, p.high, p.unit), format_value(p.nominal, p.unit, 5),
                     format_range(p.tolerance_low, p.tolerance_high, p.unit), dev,
                     Text(p.verdict, style=styles.get(p.verdict, "yellow"))))
    title = f"fitted parameters ({ex.level * 100:g} % intervals)"
    if console.width >= 110:
        table = Table(title=title, box=box.SIMPLE_HEAD, pad_edge=False)
        for col, justify in (("parameter", "left"), ("fitted", "right"), ("interval", "right"),
                             ("nominal", "right"), ("tolerance range", "right"), ("deviation", "right"),
                             ("verdict", "left")):
            table.add_column(col, justify=justify)
        for row in rows:
            table.add_row(*row)
        console.print(table)
    else:
        console.print(title)
        for p, (name, value, interval, nominal, tol, dev, verdict) in zip(ex.parameters, rows):
            if p.kind == "reference":
                console.print(f"  {name}: {verdict} {nominal} ({tol})")
            else:
                console.print(f"  {name}: {value} ({interval}); nominal {nominal} ({tol}); {dev}: {verdict}")
    console.print(
        f"fit: {ex.points} points, chi-square {ex.chi2:.4g} for {ex.dof} degrees of freedom (reduced "
        f"{ex.reduced_chi2:.3g}); k = {ex.coverage_factor:.3g}"
        + (f"; uncertainties scaled by {ex.scale:.3g} for the scatter seen" if ex.scale > 1 else "")
        + (f"; {ex.reference} held at nominal (a sweep identifies only ratios of impedances)" if ex.reference
           else "; each part fitted alone, the others nominal"),
        markup=False,
    )
    console.print(f"finding: {ex.finding}", markup=False)
    sys.exit(ExitCode.PASS if ex.explained_in_tolerance else ExitCode.FAIL)
