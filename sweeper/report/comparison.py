"""The comparison page: one self-contained HTML page over several runs (overlay, difference to
a golden run, batch spread, drift); the numbers come from sweeper.analysis.compare.

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
from sweeper.verdict import VERDICT_LABELS
from sweeper.report.comparison_plots import drift_figure, spread_figure
from sweeper.analysis.figures import format_hz
from sweeper.report.html import CSS, esc, inline_svg
from sweeper.report.plot import difference_figure, figure_svg, overlay_figure, run_names
from sweeper.report.runinfo import failing_mask, run_verdict_of

Run = tuple[pd.DataFrame, Mapping[str, Any]]

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
