"""Plots of comparisons: the spread of a batch and drift against time.

Same look as `sweeper.report.plot` (its figure layout, palette and series styles): every
series differs by colour and by marker or line style, so the plots read in grey-scale too.
"""

from __future__ import annotations

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter
from matplotlib.figure import Figure

from sweeper.analysis.compare import Drift, Spread
from sweeper.analysis.figures import format_hz
from sweeper.report.plot import (
    FONT,
    FONT_SMALL,
    COLOURS,
    finish_figure,
    new_figure,
    phase_ticks,
    series_style,
    set_limits,
    plain,
)


def spread_figure(spread: Spread, *, title: str | None = None) -> Figure:
    """Median of a batch as a line with markers, the extremes (min to max) as a shaded band
    with dashed edges, per frequency; gain above, phase (unwrapped) below."""
    fig, ax_gain, ax_phase = new_figure()
    f = spread.frequency_hz
    n = len(spread.names)
    pairs = ((ax_gain, spread.gain_min_db, spread.gain_max_db, spread.gain_median_db),
             (ax_phase, spread.phase_min_deg, spread.phase_max_deg, spread.phase_median_deg))
    for i, (ax, lo, hi, med) in enumerate(pairs):
        ok = np.isfinite(lo) & np.isfinite(hi)
        ax.fill_between(f, lo, hi, where=ok, facecolor=COLOURS["band"], alpha=0.35, edgecolor=COLOURS["band_edge"],
                        hatch="\\\\\\\\", linewidth=0.0, label=f"extremes of {n} runs (min to max)" if i == 0 else None,
                        zorder=1)
        for edge in (lo, hi):
            ax.plot(f, edge, color=COLOURS["band_edge"], linestyle="--", linewidth=0.8, zorder=2)
        ax.plot(f, med, color=COLOURS["model"], marker="o", markersize=3.5, markerfacecolor="white", linewidth=1.5,
                label="median" if i == 0 else None, zorder=3)
    set_limits(ax_gain, [spread.gain_min_db, spread.gain_max_db], 1.0)
    set_limits(ax_phase, [spread.phase_min_deg, spread.phase_max_deg], 10.0)
    phase_ticks(ax_phase)
    finite = f[np.isfinite(f) & (f > 0)]
    if finite.size:
        ax_gain.set_xlim(finite.min() / 1.15, finite.max() * 1.15)
    worst = np.nanargmax(np.where(np.isfinite(spread.gain_range_db), spread.gain_range_db, -np.inf)) \
        if np.isfinite(spread.gain_range_db).any() else None
    if worst is not None:
        ax_gain.annotate(
            f"widest: {spread.gain_range_db[worst]:.3g} dB at {format_hz(f[worst])}",
            xy=(f[worst], spread.gain_max_db[worst]), xytext=(0.03, 0.06), textcoords="axes fraction",
            fontsize=FONT_SMALL, ha="left", va="bottom",
            arrowprops={"arrowstyle": "->", "color": "black", "linewidth": 0.8},
            bbox={"boxstyle": "round,pad=0.25", "facecolor": "white", "edgecolor": "#777777", "linewidth": 0.6},
        )
    finish_figure(fig, plain(title or f"spread of a batch of {n} runs: median and extremes per frequency"), 2, FONT_SMALL)
    return fig


def drift_figure(drift: Drift, *, coverage_factor: float = 2.0, title: str | None = None) -> Figure:
    """Change of gain (dB) and phase (degrees) from the first run, at each chosen frequency,
    against run start time (UTC); bars are +-k u of each run's value."""
    fig = Figure(figsize=(8.0, 6.0))
    FigureCanvasAgg(fig)
    ax_gain, ax_phase = fig.subplots(2, 1, sharex=True)
    times = [t.replace(tzinfo=None) for t in drift.start_utc]
    for ax in (ax_gain, ax_phase):
        ax.grid(True, color=COLOURS["grid"], linewidth=0.8)
        ax.axhline(0.0, color="black", linewidth=1.0, zorder=1)
        ax.tick_params(labelsize=FONT_SMALL + 0.5)
    k = coverage_factor
    for j, f in enumerate(drift.at_hz):
        style = {**series_style(j), "zorder": 3}
        first_g, first_p = drift.gain_db[0, j], drift.phase_deg[0, j]
        label = f"{format_hz(f)} (first run: {first_g:.4g} dB, {first_p:.4g} degrees)"
        ax_gain.errorbar(times, drift.gain_change_db[:, j], yerr=np.nan_to_num(k * drift.u_gain_db[:, j]),
                         label=label, capsize=2.0, elinewidth=0.7, **style)
        ax_phase.errorbar(times, drift.phase_change_deg[:, j], yerr=np.nan_to_num(k * drift.u_phase_deg[:, j]),
                          capsize=2.0, elinewidth=0.7, **style)
    locator = AutoDateLocator()
    ax_phase.xaxis.set_major_locator(locator)
    ax_phase.xaxis.set_major_formatter(ConciseDateFormatter(locator))
    ax_gain.set_ylabel("gain change (dB)", fontsize=FONT)
    ax_phase.set_ylabel("phase change (degrees)", fontsize=FONT)
    ax_phase.set_xlabel("run start time (UTC)", fontsize=FONT)
    ax_gain.tick_params(labelbottom=False)
    set_limits(ax_gain, [drift.gain_change_db], 0.02)
    set_limits(ax_phase, [drift.phase_change_deg], 0.2)
    finish_figure(fig, plain(title or f"drift over {len(times)} runs at chosen frequencies (bars \u00b1{k:g}u)"), 1,
            FONT_SMALL)
    return fig
