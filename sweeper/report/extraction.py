"""The report's parameter-extraction block: fitted part values with their intervals, the fit
quality and the finding, as HTML (the fit itself is sweeper.analysis.extract)."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from sweeper.analysis.extract import (
    HELD,
    IN_TOLERANCE,
    NOT_DETERMINED,
    OUT_OF_TOLERANCE,
    Extraction,
    ExtractionError,
    format_value,
)
from sweeper.analysis.run_fit import extract
from sweeper.report.html_text import esc

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
        + (f". {esc(extraction.reference)} is held at nominal: a sweep identifies only ratios of impedances."
           if extraction.reference else ". Each part is fitted alone, the others nominal.")
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


