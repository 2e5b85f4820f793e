"""One self-contained HTML page for a run or a set of runs.

Everything the page shows is inside the file: plots as inline SVG (or base64 PNG), styles
inline, no scripts, fonts or links to anything outside the page, so it opens offline and
prints to PDF from a browser (each run starts on a new page; table rows do not split).
Every string taken from run metadata is HTML-escaped.

Per run: the verdict banner (text and colour), the Bode plot, derived figures (measured and
model), the traceability record (DUT, plan and its SHA-256, instruments and their
identities, software versions, times, run-file SHA-256) and the per-point table, failing
rows marked. A set of runs opens with a summary table and an overlay plot.
"""

from __future__ import annotations

import base64
import math
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from sweeper.verdict import VERDICT_LABELS, VERDICT_MEANINGS, run_verdict
from sweeper.measure.point import Verdict
from sweeper.report.extraction import extraction_section_html
from sweeper.analysis.figures import FIGURE_KEYS, FIGURE_LABELS, derived_figures, figures_from_arrays
from sweeper.report.plot import bode_figure, difference_figure, figure_png, figure_svg, overlay_figure, run_names
from sweeper.report.html_text import esc
from sweeper.report.runinfo import (
    as_verdict,
    end_time,
    failing_mask,
    flag_names,
    point_verdicts,
    prediction_of,
    run_status,
    run_verdict_of,
    text,
)

ReportRun = tuple[pd.DataFrame, Mapping[str, Any], str]

VERDICT_CLASSES: dict[Verdict, str] = {
    Verdict.NOT_JUDGED: "v-none",
    Verdict.PASS: "v-pass",
    Verdict.PASS_UNCERTAIN: "v-pass-u",
    Verdict.FAIL_UNCERTAIN: "v-fail-u",
    Verdict.FAIL: "v-fail",
}
VERDICT_SIGNS: dict[Verdict, str] = {
    Verdict.NOT_JUDGED: "\u2013",
    Verdict.PASS: "\u2713",
    Verdict.PASS_UNCERTAIN: "\u2713?",
    Verdict.FAIL_UNCERTAIN: "\u2717?",
    Verdict.FAIL: "\u2717",
}

_SHOWN_KEYS = frozenset({
    "run_id", "campaign", "campaign_id", "status", "verdict", "verdict_name", "decision_rule", "coverage_factor",
    "dut", "plan_name", "plan_sha256", "plan_yaml", "operator", "station", "project", "tags", "host", "start_utc",
    "end_utc", "instruments", "software", "prediction", "summary", "waveform_indexes", "json_attributes",
    "finished", "format", "format_version",
})

CSS = """
:root { --ink: #1b1b1b; --muted: #5a5a5a; --rule: #c9c9c9; --zebra: #f4f6f8;
  --pass: #00795a; --pass-bg: #dff3ec; --passu: #4d6b00; --passu-bg: #f1f6dc;
  --failu: #8a5200; --failu-bg: #fdf0d5; --fail: #a63f00; --fail-bg: #fbe3d6; --none: #555; --none-bg: #ececec; }
* { box-sizing: border-box; }
body { font-family: system-ui, "Segoe UI", "Helvetica Neue", Arial, sans-serif; color: var(--ink);
  margin: 0 auto; max-width: 62rem; padding: 1.2rem 1.4rem 3rem; line-height: 1.4; font-size: 14px; }
h1 { font-size: 1.45rem; margin: 0 0 .6rem; }
h2 { font-size: 1.1rem; margin: 1.6rem 0 .5rem; border-bottom: 1px solid var(--rule); padding-bottom: .2rem; }
h3 { font-size: .98rem; margin: 1.1rem 0 .35rem; }
.run-head { font-size: 1.3rem; margin: 0 0 .5rem; }
.banner { display: flex; flex-wrap: wrap; align-items: center; gap: .4rem 1rem; padding: .7rem 1rem;
  border: 2px solid; border-left-width: 12px; border-radius: 4px; margin: .4rem 0 1rem;
  -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.banner .sign { font-size: 1.6rem; font-weight: 700; }
.banner .label { font-size: 1.6rem; font-weight: 800; letter-spacing: .05em; }
.banner .meaning { flex: 1 1 18rem; }
.banner .counts { font-weight: 600; }
.v-pass.banner { color: var(--pass); background: var(--pass-bg); border-color: var(--pass); }
.v-pass-u.banner { color: var(--passu); background: var(--passu-bg); border-color: var(--passu); border-style: dashed; }
.v-fail-u.banner { color: var(--failu); background: var(--failu-bg); border-color: var(--failu); border-style: dashed; }
.v-fail.banner { color: var(--fail); background: var(--fail-bg); border-color: var(--fail); border-style: double;
  border-width: 6px 6px 6px 14px; }
.v-none.banner { color: var(--none); background: var(--none-bg); border-color: var(--none); border-style: dotted; }
figure.plot { margin: .4rem 0 1rem; text-align: center; break-inside: avoid; page-break-inside: avoid; }
figure.plot svg, figure.plot img { width: 100%; height: auto; max-width: 56rem; }
figure.plot figcaption { color: var(--muted); font-size: .85rem; }
table { border-collapse: collapse; width: 100%; margin: .3rem 0 .8rem; font-size: .86rem; }
th, td { border: 1px solid var(--rule); padding: .22rem .45rem; vertical-align: top; text-align: left; }
thead th { background: #e8ebef; -webkit-print-color-adjust: exact; print-color-adjust: exact; }
table.meta th { width: 13rem; background: var(--zebra); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.hash { font-family: ui-monospace, "Cascadia Mono", Menlo, Consolas, monospace; font-size: .8rem;
  word-break: break-all; }
table.points tbody tr:nth-child(even) { background: var(--zebra); }
table.points tr.failing td { font-weight: 600; }
table.points tr.v-fail { background: var(--fail-bg) !important; }
table.points tr.v-fail td:first-child { border-left: 6px double var(--fail); }
table.points tr.v-fail-u { background: var(--failu-bg) !important; }
table.points tr.v-fail-u td:first-child { border-left: 6px dashed var(--failu); }
table.points tr.v-pass-u td:first-child { border-left: 4px dotted var(--passu); }
table.points td.verdict { white-space: nowrap; }
table.points th.group { text-align: center; }
.failing td, .v-fail, .v-fail-u { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.note { color: var(--muted); font-size: .85rem; }
details pre { background: var(--zebra); padding: .6rem; overflow-x: auto; font-size: .8rem; white-space: pre-wrap; }
nav.toc a { color: inherit; }
@page { margin: 14mm 12mm; }
@page points { size: landscape; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  section.run { break-before: page; page-break-before: always; }
  section.run.first { break-before: auto; page-break-before: auto; }
  h1, h2, h3, p.note, .banner { break-after: avoid; page-break-after: avoid; }
  .banner, figure.plot, table.figures, table.meta, table.instruments, table.software {
    break-inside: avoid; page-break-inside: avoid; }
  thead { display: table-header-group; }
  tr { break-inside: avoid; page-break-inside: avoid; }
  .points-part { page: points; }
  table.points { font-size: 8pt; }
  table.points th, table.points td { padding: .1rem .25rem; }
  details > pre { display: block; }
  nav.toc a { text-decoration: none; }
}
"""


def _num(value: float, digits: int = 5, fixed: int | None = None) -> str:
    """A number for a table cell: fixed decimals or significant digits; dash for NaN."""
    v = float(value)
    if math.isnan(v):
        return "\u2014"
    if math.isinf(v):
        return "+\u221e" if v > 0 else "\u2212\u221e"
    s = f"{v:.{fixed}f}" if fixed is not None else f"{v:.{digits}g}"
    return s.replace("-", "\u2212")


_SVG_ID = re.compile(r'\bid="([^"]+)"')
_SVG_HREF = re.compile(r'(href=")#([^"]+)"')
_SVG_URL = re.compile(r"url\(#([^)]+)\)")


def inline_svg(svg: str, prefix: str, label: str) -> str:
    """Matplotlib SVG text made fit to sit inside an HTML page.

    Drops the XML prologue, comments, the metadata block, namespace declarations (the HTML
    parser supplies them) and the fixed size; prefixes every id so that several plots on one
    page do not clash.
    """
    svg = svg[svg.index("<svg"):]
    svg = re.sub(r"<!--.*?-->|<metadata>.*?</metadata>", "", svg, flags=re.S)
    head_end = svg.index(">")
    head = re.sub(r'\s(?:xmlns(?::\w+)?|width|height)="[^"]*"', "", svg[:head_end])
    svg = f'{head} role="img" aria-label="{esc(label)}"{svg[head_end:]}'
    svg = _SVG_ID.sub(lambda m: f'id="{prefix}{m.group(1)}"', svg)
    svg = _SVG_HREF.sub(lambda m: f'{m.group(1)}#{prefix}{m.group(2)}"', svg)
    svg = _SVG_URL.sub(lambda m: f"url(#{prefix}{m.group(1)})", svg)
    return re.sub(r"\n\s*", "\n", svg).strip()


def _figure_html(fig: Figure, prefix: str, label: str, image_format: str, caption: str) -> str:
    if image_format == "svg":
        body = inline_svg(figure_svg(fig), prefix, label)
    elif image_format == "png":
        data = base64.b64encode(figure_png(fig)).decode("ascii")
        body = f'<img alt="{esc(label)}" src="data:image/png;base64,{data}">'
    else:
        raise ValueError(f"image_format must be 'svg' or 'png', not {image_format!r}")
    return f'<figure class="plot">{body}<figcaption>{esc(caption)}</figcaption></figure>'


def _banner(verdict: Verdict, detail: str) -> str:
    return (
        f'<div class="banner {VERDICT_CLASSES[verdict]}" role="status">'
        f'<span class="sign" aria-hidden="true">{VERDICT_SIGNS[verdict]}</span>'
        f'<span class="label">{esc(VERDICT_LABELS[verdict])}</span>'
        f'<span class="meaning">{esc(VERDICT_MEANINGS[verdict])}</span>'
        f'<span class="counts">{esc(detail)}</span></div>'
    )


def _rows(pairs: Sequence[tuple[str, str, str]]) -> str:
    """Table rows from (header, cell html, cell class)."""
    out = []
    for header, cell, cls in pairs:
        attr = f' class="{cls}"' if cls else ""
        out.append(f"<tr><th scope=\"row\">{esc(header)}</th><td{attr}>{cell}</td></tr>")
    return "".join(out)


def _figures_table(frame: pd.DataFrame, metadata: Mapping[str, Any]) -> str:
    measured = derived_figures(frame)
    pred = prediction_of(frame, metadata)
    model = figures_from_arrays(pred["frequency_hz"], pred["model_gain_db"], pred["model_phase_deg"])
    rows = []
    for key in FIGURE_KEYS:
        label, unit = FIGURE_LABELS[key]
        rows.append(
            f'<tr data-key="{key}"><th scope="row">{esc(label)}</th><td class="num">{_num(measured[key])}</td>'
            f'<td class="num">{_num(model[key])}</td><td>{esc(unit)}</td></tr>'
        )
    return (
        '<table class="figures"><thead><tr><th>figure</th><th class="num">measured</th>'
        '<th class="num">model (predicted)</th><th>unit</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table>"
        '<p class="note">Measured figures come from the points alone: -3 dB relative to the passband end of the '
        "sweep, interpolated in log frequency; roll-off fitted at least 20 dB below the passband. A dash: not reached "
        "by the sweep.</p>"
    )


def _extraction_html(frame: pd.DataFrame, metadata: Mapping[str, Any]) -> str:
    """Fitted part values and figures with intervals."""
    return extraction_section_html(frame, metadata)


def _meta_table(frame: pd.DataFrame, metadata: Mapping[str, Any], file_sha256: str) -> str:
    dut = metadata.get("dut") or {}
    planned = int(np.size((metadata.get("prediction") or {}).get("frequency_hz", [])))
    summary = metadata.get("summary") or {}
    k = metadata.get("coverage_factor", summary.get("coverage_factor"))
    rule = metadata.get("decision_rule", summary.get("decision_rule"))
    pairs: list[tuple[str, str, str]] = [
        ("run id", esc(metadata.get("run_id")), ""),
        ("campaign", esc(metadata.get("campaign") or metadata.get("campaign_id")), ""),
        ("status", esc(run_status(metadata)), ""),
        ("points measured", f"{len(frame)} of {planned} planned" if planned else str(len(frame)), ""),
        ("decision rule", esc(rule), ""),
        ("coverage factor k", esc(k), ""),
        ("DUT board", esc(dut.get("board")), ""),
        ("DUT serial", esc(dut.get("serial")), ""),
        ("DUT description", esc(dut.get("description")), ""),
        ("plan", esc(metadata.get("plan_name")), ""),
        ("plan SHA-256", esc(metadata.get("plan_sha256")), "hash"),
        ("operator", esc(metadata.get("operator")), ""),
        ("station", esc(metadata.get("station")), ""),
        ("project", esc(metadata.get("project")), ""),
        ("tags", esc(metadata.get("tags")), ""),
        ("host", esc(metadata.get("host")), ""),
        ("start (UTC)", esc(metadata.get("start_utc")), ""),
        ("end (UTC)", esc(end_time(metadata)), ""),
        ("run file SHA-256", esc(file_sha256) if file_sha256 else "not given", "hash"),
    ]
    for key in sorted(set(metadata) - _SHOWN_KEYS):
        value = metadata[key]
        if isinstance(value, (str, int, float, bool, list, tuple)) or value is None:
            pairs.append((key.replace("_", " "), esc(value), ""))
    error = summary.get("error")
    if error:
        pairs.append(("error", esc(error), ""))
    return f'<table class="meta"><tbody>{_rows(pairs)}</tbody></table>'


def _instruments_table(metadata: Mapping[str, Any]) -> str:
    instruments = metadata.get("instruments") or []
    if not instruments:
        return '<p class="note">No instrument identities recorded.</p>'
    rows = []
    for inst in instruments:
        inst = inst if isinstance(inst, Mapping) else {"idn": inst}
        rows.append(
            f"<tr><td>{esc(inst.get('role'))}</td><td>{esc(inst.get('resource'))}</td><td>{esc(inst.get('idn'))}</td>"
            f"<td>{esc(inst.get('driver'))}</td><td class=\"hash\">{esc(inst.get('driver_sha256'))}</td></tr>"
        )
    return (
        '<table class="instruments"><thead><tr><th>role</th><th>VISA resource</th><th>identity (*IDN?)</th>'
        "<th>driver file</th><th>driver SHA-256</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>"
    )


def _software_table(metadata: Mapping[str, Any]) -> str:
    software = metadata.get("software") or {}
    if not isinstance(software, Mapping) or not software:
        return '<p class="note">No software versions recorded.</p>'
    rows = "".join(f"<tr><td>{esc(name)}</td><td>{esc(version)}</td></tr>" for name, version in software.items())
    head = "<thead><tr><th>software</th><th>version</th></tr></thead>"
    return f'<table class="software">{head}<tbody>{rows}</tbody></table>'


def _limits(lo: float, hi: float, fixed: int) -> str:
    return f"{_num(lo, fixed=fixed)} \u2026 {_num(hi, fixed=fixed)}"


def _points_table(frame: pd.DataFrame, metadata: Mapping[str, Any]) -> str:
    """One row per point in frequency order: value, expanded uncertainty, limits and margin of
    gain and of phase, the verdict in words and the flags; failing rows carry class "failing"."""
    k = float(metadata.get("coverage_factor") or 2.0)
    order = np.argsort(frame["frequency_hz"].to_numpy(dtype=float), kind="stable")
    verdicts = point_verdicts(frame)
    failing = failing_mask(frame)
    cols = {name: frame[name].to_numpy() if name in frame else np.full(len(frame), np.nan) for name in (
        "index", "frequency_hz", "gain_db", "u_gain_db", "gain_lo_db", "gain_hi_db", "margin_gain_db", "phase_deg",
        "u_phase_deg", "phase_lo_deg", "phase_hi_deg", "margin_phase_deg", "flags")}
    rows = []
    for i in order:
        v = as_verdict(int(verdicts[i])) or Verdict.NOT_JUDGED
        classes = VERDICT_CLASSES[v] + (" failing" if failing[i] else "")
        flags = cols["flags"][i]
        flags_text = flag_names(int(flags)) if np.isfinite(float(flags)) else ""
        rows.append(
            f'<tr class="{classes}">'
            f'<td class="num">{esc(cols["index"][i])}</td>'
            f'<td class="num">{_num(cols["frequency_hz"][i], 6)}</td>'
            f'<td class="num">{_num(cols["gain_db"][i], fixed=4)}</td>'
            f'<td class="num">{_num(k * float(cols["u_gain_db"][i]), fixed=4)}</td>'
            f'<td class="num">{_limits(cols["gain_lo_db"][i], cols["gain_hi_db"][i], 3)}</td>'
            f'<td class="num">{_num(cols["margin_gain_db"][i], fixed=4)}</td>'
            f'<td class="num">{_num(cols["phase_deg"][i], fixed=3)}</td>'
            f'<td class="num">{_num(k * float(cols["u_phase_deg"][i]), fixed=3)}</td>'
            f'<td class="num">{_limits(cols["phase_lo_deg"][i], cols["phase_hi_deg"][i], 2)}</td>'
            f'<td class="num">{_num(cols["margin_phase_deg"][i], fixed=3)}</td>'
            f'<td class="verdict">{VERDICT_SIGNS[v]} {esc(VERDICT_LABELS[v])}</td>'
            f"<td>{esc(flags_text)}</td></tr>"
        )
    sub = (f'<th class="num">value</th><th class="num">U (k={k:g})</th><th class="num">limits</th>'
           '<th class="num">margin</th>')
    head = (
        '<tr><th class="num" rowspan="2">#</th><th class="num" rowspan="2">frequency (Hz)</th>'
        '<th colspan="4" class="group">gain (dB)</th><th colspan="4" class="group">phase (degrees)</th>'
        '<th rowspan="2">verdict</th><th rowspan="2">flags</th></tr>'
        f"<tr>{sub}{sub}</tr>"
    )
    return f'<table class="points"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table>'


def _counts_text(frame: pd.DataFrame) -> str:
    n = len(frame)
    failing = int(np.count_nonzero(failing_mask(frame)))
    return f"{failing} of {n} point{'s' if n != 1 else ''} failing"


def _interruptions_html(metadata: Mapping[str, Any]) -> str:
    """The run's interruptions (from its summary, written by `sweeper resume`): when the last
    record was written, when the run went on, the gap (s) and why; "" when there were none."""
    found = (metadata.get("summary") or {}).get("interruptions") or []
    if not isinstance(found, list) or not found:
        return ""
    rows = "".join(
        f"<tr><td>{esc(i.get('interrupted_utc'))}</td><td>{esc(i.get('resumed_utc'))}</td>"
        f"<td>{esc(i.get('gap_s'))}</td><td>{esc(i.get('points_before'))}</td><td>{esc(i.get('reason'))}</td></tr>"
        for i in found if isinstance(i, dict))
    return (f'<h2 class="interruptions">Interruptions ({len(found)})</h2><table><tr><th>last write (UTC)</th>'
            f"<th>resumed (UTC)</th><th>gap (s)</th><th>points before</th><th>reason</th></tr>{rows}</table>")


def _run_section(index: int, frame: pd.DataFrame, metadata: Mapping[str, Any], file_sha256: str,
                 image_format: str, first_page: bool) -> str:
    verdict = run_verdict_of(frame, metadata)
    dut = metadata.get("dut") or {}
    heading = " ".join(x for x in (text(dut.get("board")), text(dut.get("serial"))) if x)
    heading = heading or text(metadata.get("run_id"))
    plan_yaml = metadata.get("plan_yaml")
    plan_block = (
        f"<details><summary>plan text (YAML), SHA-256 {esc(metadata.get('plan_sha256'))}</summary>"
        f"<pre>{esc(plan_yaml)}</pre></details>" if plan_yaml else ""
    )
    fig = bode_figure(frame, metadata)
    caption = (
        "Gain and phase against frequency: measured points with expanded-uncertainty bars, model curve, tolerance "
        "band hatched; failing points drawn as filled crosses (FAIL) and diamonds (FAIL?); phase unwrapped."
    )
    return (
        f'<section class="run{" first" if first_page else ""}" id="run-{index + 1}">'
        f'<h1 class="run-head">{esc(heading)}</h1><p class="note">run {esc(metadata.get("run_id"))}</p>'
        + _banner(verdict, _counts_text(frame))
        + _figure_html(fig, f"r{index + 1}-", f"Bode plot of run {text(metadata.get('run_id'))}", image_format,
                       caption)
        + "<h2>Derived figures</h2>" + _figures_table(frame, metadata)
        + "<h2>Parameter extraction</h2>" + _extraction_html(frame, metadata)
        + _interruptions_html(metadata)
        + "<h2>Run record</h2>" + _meta_table(frame, metadata, file_sha256)
        + "<h3>Instruments</h3>" + _instruments_table(metadata)
        + "<h3>Software</h3>" + _software_table(metadata)
        + plan_block
        + f'<div class="points-part"><h2>Points ({len(frame)})</h2>' + _points_table(frame, metadata) + "</div>"
        + "</section>"
    )


def _set_header(runs: Sequence[ReportRun], golden_index: int | None, image_format: str) -> str:
    pairs = [(frame, md) for frame, md, _ in runs]
    verdicts = [run_verdict_of(frame, md) for frame, md in pairs]
    overall = run_verdict([int(v) for v in verdicts])
    n_fail = sum(v in (Verdict.FAIL, Verdict.FAIL_UNCERTAIN) for v in verdicts)
    names = run_names(pairs)
    rows = []
    for i, ((frame, md), v) in enumerate(zip(pairs, verdicts)):
        rows.append(
            f'<tr class="{VERDICT_CLASSES[v]}"><td><a href="#run-{i + 1}">{esc(names[i])}</a></td>'
            f"<td>{esc(md.get('run_id'))}</td><td>{esc(md.get('start_utc'))}</td>"
            f"<td>{VERDICT_SIGNS[v]} {esc(VERDICT_LABELS[v])}</td>"
            f'<td class="num">{int(np.count_nonzero(failing_mask(frame)))} of {len(frame)}</td></tr>'
        )
    parts = [
        f"<header><h1>Sweep report: {len(runs)} runs</h1>",
        _banner(overall, f"{n_fail} of {len(runs)} runs failing"),
        '<nav class="toc"><table class="runs"><thead><tr><th>run</th><th>run id</th><th>start (UTC)</th>'
        '<th>verdict</th><th class="num">failing points</th></tr></thead><tbody>'
        + "".join(rows) + "</tbody></table></nav>",
        _figure_html(overlay_figure(pairs, golden_index), "overlay-", "all runs overlaid", image_format,
                     "All runs overlaid on one Bode plot; tolerance band of the "
                     + ("golden run." if golden_index is not None else "first run.")),
    ]
    if golden_index is not None:
        parts.append(_figure_html(difference_figure(pairs, golden_index), "diff-", "difference to the golden run",
                                  image_format, "Each run minus the golden run, interpolated in log frequency."))
    parts.append("</header>")
    return "".join(parts)


def render_html(
    runs: Sequence[ReportRun],
    *,
    title: str | None = None,
    golden_index: int | None = None,
    image_format: str = "svg",
) -> str:
    """The report page for one run or a set of runs: (points frame, metadata, run-file SHA-256).

    image_format "svg" inlines the plots as SVG, "png" embeds them as base64 PNG. With more
    than one run the page opens with a summary and an overlay plot (and a difference plot
    when `golden_index` names the golden run).
    """
    if not runs:
        raise ValueError("render_html needs at least one run")
    if title is None:
        if len(runs) == 1:
            frame, md, _ = runs[0]
            title = f"Sweep report {text(md.get('run_id'))}: {VERDICT_LABELS[run_verdict_of(frame, md)]}"
        else:
            title = f"Sweep report: {len(runs)} runs"
    body = [] if len(runs) == 1 else [_set_header(runs, golden_index, image_format)]
    body += [_run_section(i, frame, md, sha, image_format, len(runs) == 1) for i, (frame, md, sha) in enumerate(runs)]
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{esc(title)}</title><style>{CSS}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n"
    )


def mark_html(path: str | Path, warning: str) -> None:
    """Put a warning banner at the top of a written page (e.g. a broken seal), text escaped."""
    path = Path(path)
    page = path.read_text(encoding="utf-8")
    banner = (f'<p class="seal-warning" style="background:#b00020;color:#fff;padding:.6em;font-weight:bold">'
              f"{esc(warning)}</p>\n")
    path.write_text(page.replace("<body>\n", "<body>\n" + banner, 1), encoding="utf-8")


def write_html(
    runs: Sequence[ReportRun],
    path: str | Path,
    *,
    title: str | None = None,
    golden_index: int | None = None,
    image_format: str = "svg",
) -> Path:
    """Write `render_html(...)` to `path` as UTF-8; returns the path."""
    path = Path(path)
    path.write_text(render_html(runs, title=title, golden_index=golden_index, image_format=image_format),
                    encoding="utf-8")
    return path
