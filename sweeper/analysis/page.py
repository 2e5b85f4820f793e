"""HTML for analysis results: the extraction table of a run (for the report) and a
self-contained comparison page (overlay, difference to a golden run, batch spread, drift).

Same rules as the report page (`sweeper.report.html`): plots inline as SVG, styles inline,
no scripts and nothing fetched from outside; every string from run metadata escaped.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sweeper.analysis.compare import (
    batch_spread,
    difference_summary,
    drift,
    response_of,
)
from sweeper.analysis.extract import (
    HELD,
    IN_TOLERANCE,
    NOT_DETERMINED,
    OUT_OF_TOLERANCE,
    Extraction,
    ExtractionError,
    extract,
    format_value,
)
from sweeper.analysis.plots import drift_figure, spread_figure
from sweeper.verdict import VERDICT_LABELS
from sweeper.report.figures import format_hz
from sweeper.report.html import CSS, esc, inline_svg
from sweeper.report.plot import difference_figure, figure_svg, overlay_figure, run_names
from sweeper.report.runinfo import failing_mask, run_verdict_of

Run = tuple[pd.DataFrame, Mapping[str, Any]]

# Verdict colours as inline styles (the report's CSS variables), so the table needs no extra CSS.
VERDICT_STYLE = {
    IN_TOLERANCE: "color: var(--pass); font-weight: 600",
    OUT_OF_TOLERANCE: "color: var(--fail); font-weight: 600",
    NOT_DETERMINED: "color: var(--none)",
    HELD: "color: var(--none)",
}
UNDECIDED_STYLE = "color: var(--failu); font-weight: 600"
FINDING_STYLE = "border-left: 6px solid var(--rule); padding: .4rem .7rem; background: var(--zebra)"


def _interval(low: float, high: float, unit: str) -> str:
    if not (math.isfinite(low) and math.isfinite(high)):
        return "\u2014"
    return f"{esc(format_value(low, unit, 5))} \u2026 {esc(format_value(high, unit, 5))}"


def _deviation(p) -> str:
    if p.kind == "reference" or not math.isfinite(p.deviation_frac):
        return "\u2014"
    return f"{p.deviation_frac:+.3g} dB" if p.unit == "dB" else f"{p.deviation_frac * 100:+.3g} %"


def extraction_table_html(extraction: Extraction) -> str:
    """The fitted parameters as an HTML table, then the fit quality and the finding in words."""
    rows = []
    for p in extraction.parameters:
        name = p.name + (f" ({p.condition})" if p.condition else "")
        value = esc(format_value(p.value, p.unit, 5))
        style = VERDICT_STYLE.get(p.verdict, UNDECIDED_STYLE)
        rows.append(
            f'<tr data-name="{esc(p.name)}"><th scope="row">{esc(name)}</th><td class="num">{value}</td>'
            f'<td class="num">{_interval(p.low, p.high, p.unit)}</td>'
            f'<td class="num">{esc(format_value(p.nominal, p.unit, 5))}</td>'
            f'<td class="num">{_interval(p.tolerance_low, p.tolerance_high, p.unit)}</td>'
            f'<td class="num">{esc(_deviation(p))}</td><td class="verdict" style="{style}">{esc(p.verdict)}</td></tr>'
        )
    pct = f"{extraction.level * 100:g} %"
    head = (f'<thead><tr><th>parameter</th><th class="num">fitted</th><th class="num">{pct} interval</th>'
            '<th class="num">nominal</th><th class="num">tolerance range</th><th class="num">deviation</th>'
            "<th>verdict</th></tr></thead>")
    quality = (
        f"Weighted least squares on {extraction.points} points (gain and phase, each weighted by its standard "
        f"uncertainty): chi-square {extraction.chi2:.4g} for {extraction.dof} degrees of freedom (reduced "
        f"{extraction.reduced_chi2:.3g}); intervals k = {extraction.coverage_factor:.3g}"
        + (f", uncertainties scaled by {extraction.scale:.3g} for the scatter seen" if extraction.scale > 1 else "")
        + f". {extraction.reference} is held at nominal: a sweep identifies only ratios of impedances."
    )
    return (
        f'<table class="figures extraction">{head}<tbody>{"".join(rows)}</tbody></table>'
        + f'<p class="finding" style="{FINDING_STYLE}">{esc(extraction.finding)}</p><p class="note">{esc(quality)}</p>'
    )


def extraction_section_html(frame: pd.DataFrame, metadata: Mapping[str, Any]) -> str:
    """The report's parameter-extraction block for one run; a note instead when the run cannot
    be fitted (no readable plan, no component model, too few points)."""
    try:
        extraction = extract(frame, metadata)
    except (ExtractionError, ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
        return f'<p class="note">Parameter extraction not available: {esc(exc)}</p>'
    return extraction_table_html(extraction)


def _figure(fig, prefix: str, label: str, caption: str) -> str:
    return (f'<figure class="plot">{inline_svg(figure_svg(fig), prefix, label)}'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def _num(value: float, fmt: str) -> str:
    return "\u2014" if not math.isfinite(value) else format(value, fmt).replace("-", "\u2212")


def render_comparison_html(
    runs: Sequence[Run],
    *,
    golden_index: int | None = None,
    at_hz: Sequence[float] = (),
    title: str | None = None,
) -> str:
    """A self-contained page comparing runs: a table of the runs, all runs overlaid, each run
    minus the golden run (when given), the spread of the batch (two runs or more) and drift at
    the chosen frequencies (when given)."""
    if not runs:
        raise ValueError("no runs to compare")
    names = run_names(runs)
    responses = [response_of(frame, md, names[i]) for i, (frame, md) in enumerate(runs)]
    golden = responses[golden_index] if golden_index is not None else None
    ids_shown = names == [str(md.get("run_id") or "") for _, md in runs]  # names are the run ids already
    rows = []
    for i, (frame, md) in enumerate(runs):
        verdict = VERDICT_LABELS[run_verdict_of(frame, md)]
        diff = ""
        if golden is not None:
            if i == golden_index:
                diff = '<td colspan="2">golden run</td>'
            else:
                d = difference_summary(responses[i], golden)
                diff = (f'<td class="num">{_num(d["max_gain_difference_db"], "+.4f")} dB at '
                        f'{esc(format_hz(d["at_gain_hz"]))}</td><td class="num">'
                        f'{_num(d["max_phase_difference_deg"], "+.3f")}\u00b0 at {esc(format_hz(d["at_phase_hz"]))}</td>')
        id_cell = "" if ids_shown else f"<td>{esc(md.get('run_id'))}</td>"
        rows.append(
            f"<tr><td>{esc(names[i])}</td>{id_cell}<td>{esc(md.get('start_utc'))}</td>"
            f"<td>{esc(verdict)}</td><td class=\"num\">{int(np.count_nonzero(failing_mask(frame)))} of {len(frame)}"
            f"</td>{diff}</tr>"
        )
    diff_head = ('<th class="num">largest gain difference</th><th class="num">largest phase difference</th>'
                 if golden is not None else "")
    parts = [
        f"<h1>{esc(title or f'Comparison of {len(runs)} runs')}</h1>",
        ('<table class="runs"><thead><tr><th>run</th>' + ("" if ids_shown else "<th>run id</th>")
         + '<th>start (UTC)</th><th>verdict</th>'
         f'<th class="num">failing points</th>{diff_head}</tr></thead><tbody>{"".join(rows)}</tbody></table>'),
        "<h2>Overlay</h2>",
        _figure(overlay_figure(runs, golden_index), "ov-", "all runs overlaid",
                "All runs on one Bode plot; tolerance band of the "
                + ("golden run." if golden_index is not None else "first run.")),
    ]
    if golden_index is not None and len(runs) > 1:
        parts += ["<h2>Difference to the golden run</h2>",
                  _figure(difference_figure(runs, golden_index), "df-", "difference to the golden run",
                          "Each run minus the golden run, interpolated in log frequency; bars: expanded "
                          "uncertainty of the difference.")]
    if len(runs) > 1:
        spread = batch_spread(responses, None)
        parts += ["<h2>Spread of the batch</h2>",
                  _figure(spread_figure(spread), "sp-", "spread of the batch",
                          "Median per frequency and the band from the lowest to the highest run, on the first "
                          "run's frequencies (others interpolated in log frequency).")]
    if at_hz:
        d = drift(responses, at_hz)
        k = float(runs[0][1].get("coverage_factor") or 2.0)
        head = "".join(f'<th class="num">{esc(format_hz(f))}: gain (dB)</th><th class="num">phase (\u00b0)</th>'
                       for f in d.at_hz)
        body = "".join(
            f"<tr><td>{esc(d.start_utc[i].isoformat())}</td><td>{esc(d.names[i])}</td>"
            + "".join(f'<td class="num">{_num(d.gain_db[i, j], ".4f")}</td>'
                      f'<td class="num">{_num(d.phase_deg[i, j], ".3f")}</td>' for j in range(d.at_hz.size))
            + "</tr>" for i in range(len(d.names)))
        parts += ["<h2>Drift at chosen frequencies</h2>",
                  _figure(drift_figure(d, coverage_factor=k), "dr-", "drift against time",
                          "Change from the first run at each chosen frequency, against run start time."),
                  (f'<table class="drift"><thead><tr><th>start (UTC)</th><th>run</th>{head}</tr></thead>'
                   f"<tbody>{body}</tbody></table>")]
    page_title = title or f"Comparison of {len(runs)} runs"
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{esc(page_title)}</title><style>{CSS}</style></head><body>\n"
        + "\n".join(parts) + "\n</body></html>\n"
    )


def write_comparison_html(runs: Sequence[Run], path: str | Path, **options: Any) -> Path:
    """Write `render_comparison_html(runs, **options)` to `path` (UTF-8); returns the path."""
    path = Path(path)
    path.write_text(render_comparison_html(runs, **options), encoding="utf-8")
    return path
