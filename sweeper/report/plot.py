"""Bode plots of runs: gain (dB) and phase (degrees) against log frequency, one shared axis.

Figures are built on `matplotlib.figure.Figure` with the Agg canvas and never touch pyplot's
global state. The look is ours: hues from a colour-blind-safe set (after Okabe and Ito),
and every series also differs by marker shape, fill or line style, so the plots read in
grey-scale too.
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import MultipleLocator
from scipy.interpolate import PchipInterpolator

from sweeper.verdict import VERDICT_LABELS, wrap_deg
from sweeper.measure.point import Verdict
from sweeper.analysis.figures import (
    difference_to_reference,
    format_hz,
    interpolate_log_f,
    response_feature,
    sorted_finite,
    unwrap_deg,
)
from sweeper.report.runinfo import failing_mask, point_verdicts, prediction_of, run_verdict_of

Run = tuple[pd.DataFrame, Mapping[str, Any]]

COLOURS: dict[str, str] = {
    "measured": "#0072B2",  # blue
    "model": "#1B1B1B",  # near black
    "band": "#56B4E9",  # sky blue
    "band_edge": "#2B6F96",  # darker sky blue, for the hatching and the band's edges
    "fail": "#D55E00",  # vermillion
    "fail_uncertain": "#E69F00",  # orange
    "pass_uncertain": "#009E73",  # bluish green
    "feature": "#CC79A7",  # reddish purple
    "grid": "#D9D9D9",
}

SERIES_COLOURS: tuple[str, ...] = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#7F7F7F")
SERIES_MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P", "h", "<", ">")
SERIES_LINES: tuple[Any, ...] = ("-", "--", "-.", ":", (0, (6, 2, 1, 2, 1, 2)), (0, (1, 3)))

# How each judged state stands out besides its colour: marker shape and fill.
VERDICT_MARKERS: dict[Verdict, dict[str, Any]] = {
    Verdict.FAIL: {"marker": "X", "s": 70, "colour": COLOURS["fail"]},
    Verdict.FAIL_UNCERTAIN: {"marker": "D", "s": 42, "colour": COLOURS["fail_uncertain"]},
    Verdict.PASS_UNCERTAIN: {"marker": "s", "s": 30, "colour": COLOURS["pass_uncertain"]},
}

FIGURE_SIZE_IN = (8.0, 6.6)
SMOOTH_POINTS_PER_DECADE = 200  # model curve drawn through its points on this many points per decade
FONT_SMALL = 7.5
FONT = 9.0


def new_figure(size_in: tuple[float, float] = FIGURE_SIZE_IN) -> tuple[Figure, Axes, Axes]:
    """A figure with gain above phase, sharing a log frequency axis."""
    fig = Figure(figsize=size_in)
    FigureCanvasAgg(fig)
    ax_gain, ax_phase = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 2]})
    ax_gain.set_xscale("log")
    for ax in (ax_gain, ax_phase):
        ax.grid(True, which="major", color=COLOURS["grid"], linewidth=0.8)
        ax.grid(True, which="minor", axis="x", color=COLOURS["grid"], linewidth=0.4, linestyle=":")
        ax.tick_params(labelsize=FONT_SMALL + 0.5)
        ax.set_axisbelow(True)
    ax_gain.set_ylabel("gain (dB)", fontsize=FONT)
    ax_phase.set_ylabel("phase (degrees)", fontsize=FONT)
    ax_phase.set_xlabel("frequency (Hz)", fontsize=FONT)
    ax_gain.tick_params(labelbottom=False)
    return fig, ax_gain, ax_phase


_MARGINS_IN = {"left": 0.85, "right": 0.25, "top": 0.5, "bottom": 0.6}
_LEGEND_ROW_IN = 0.21


def finish_figure(fig: Figure, title: str, ncols: int, fontsize: float) -> None:
    """Title above, legend below the axes; the figure grows by the legend's height.

    Margins are fixed in inches (cheaper and steadier than an automatic layout).
    """
    labelled = [h for ax in fig.axes for h, lab in zip(*ax.get_legend_handles_labels()) if lab]
    rows = math.ceil(len(labelled) / ncols) if labelled else 0
    width, height = fig.get_size_inches()
    legend_in = rows * _LEGEND_ROW_IN * fontsize / 8.0 + (0.1 if rows else 0.0)
    height += legend_in
    fig.set_size_inches(width, height)
    bottom_in = _MARGINS_IN["bottom"] + legend_in
    fig.subplots_adjust(
        left=_MARGINS_IN["left"] / width, right=1 - _MARGINS_IN["right"] / width,
        top=1 - _MARGINS_IN["top"] / height, bottom=bottom_in / height, hspace=0.08,
    )
    if rows:
        fig.legend(loc="lower center", bbox_to_anchor=(0.5, 0.08 / height), ncols=ncols, fontsize=fontsize,
                   frameon=False)
    fig.suptitle(title, fontsize=FONT + 1, y=1 - 0.12 / height, va="top")


def _smooth(frequency_hz: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A monotone cubic (PCHIP) curve through sorted points in log10(f): never overshoots them."""
    f, v = sorted_finite(frequency_hz, values)
    f, first = np.unique(f, return_index=True)
    v = v[first]
    if f.size < 3:
        return f, v
    x = np.log10(f)
    n = max(int((x[-1] - x[0]) * SMOOTH_POINTS_PER_DECADE), f.size)
    xs = np.linspace(x[0], x[-1], n)
    return 10.0**xs, PchipInterpolator(x, v)(xs)


def _unwrapped_prediction(pred: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Model phase unwrapped over frequency, and the phase limits moved by the same turns."""
    model = pred["model_phase_deg"]
    shift = unwrap_deg(model) - model
    return {
        "model_phase_deg": model + shift,
        "phase_lo_deg": pred["phase_lo_deg"] + shift,
        "phase_hi_deg": pred["phase_hi_deg"] + shift,
    }


def display_phase_deg(
    frequency_hz: np.ndarray, phase_deg: np.ndarray, model_frequency_hz: np.ndarray, model_unwrapped_deg: np.ndarray
) -> np.ndarray:
    """Measured phases (degrees) placed on the same turn as the unwrapped model, for display.

    Where the model does not reach a point, the measured phases are unwrapped on their own
    (in frequency order).
    """
    f = np.asarray(frequency_hz, dtype=float)
    p = np.asarray(phase_deg, dtype=float)
    order = np.argsort(f, kind="stable")
    out = np.full(p.shape, np.nan)
    out[order] = unwrap_deg(p[order])
    mf, mp = sorted_finite(model_frequency_hz, model_unwrapped_deg)
    if mf.size:
        ref = interpolate_log_f(f, mf, mp)
        near = np.isfinite(ref) & np.isfinite(p)
        out[near] = ref[near] + wrap_deg(p[near] - ref[near])
    return out


def _draw_band(ax: Axes, f: np.ndarray, lo: np.ndarray, hi: np.ndarray, label: str | None) -> None:
    """The tolerance band: light fill, hatching and dotted edges (visible in grey-scale too)."""
    ok = np.isfinite(f) & np.isfinite(lo) & np.isfinite(hi)
    if np.count_nonzero(ok) < 2:
        return
    ax.fill_between(
        f, np.where(ok, lo, np.nan), np.where(ok, hi, np.nan), where=ok, facecolor=COLOURS["band"], alpha=0.28,
        edgecolor=COLOURS["band_edge"], hatch="////", linewidth=0.0, label=label, zorder=1,
    )
    for edge in (lo, hi):
        ax.plot(f[ok], edge[ok], color=COLOURS["band_edge"], linewidth=0.7, linestyle=":", zorder=1.5)


def set_limits(ax: Axes, values: Sequence[np.ndarray], min_span: float) -> None:
    """Y range from the data and model (not the band, which may be very wide), padded."""
    finite = [np.asarray(v, dtype=float)[np.isfinite(v)] for v in values]
    finite = [v for v in finite if v.size]
    if not finite:
        return
    lo = min(float(v.min()) for v in finite)
    hi = max(float(v.max()) for v in finite)
    pad = max(0.08 * (hi - lo), min_span / 2)
    ax.set_ylim(lo - pad, hi + pad)


def phase_ticks(ax: Axes) -> None:
    lo, hi = ax.get_ylim()
    span = hi - lo
    if span >= 45:
        ax.yaxis.set_major_locator(MultipleLocator(45 if span <= 360 else 90 if span <= 900 else 180))


def plain(text: str) -> str:
    """Text shown as typed: '$' would otherwise start matplotlib's math mode."""
    return text.replace("$", r"\$")


def _verdict_title(frame: pd.DataFrame, metadata: Mapping[str, Any], title: str | None) -> str:
    if title is not None:
        return plain(title)
    dut = metadata.get("dut") or {}
    who = " ".join(str(x) for x in (dut.get("board"), dut.get("serial")) if x)
    verdict = VERDICT_LABELS[run_verdict_of(frame, metadata)]
    parts = [p for p in (who, str(metadata.get("run_id") or ""), f"verdict {verdict}") if p]
    return plain("  |  ".join(parts))


def _culprit_masks(frame: pd.DataFrame, chosen: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Which chosen points to mark on the gain and on the phase axis.

    A failing point is marked where its margin is negative; a point whose margins are not
    known (or a PASS? point, inside on both) is marked on both axes.
    """
    mg = frame["margin_gain_db"].to_numpy(dtype=float) if "margin_gain_db" in frame else np.full(len(frame), np.nan)
    mp = frame["margin_phase_deg"].to_numpy(dtype=float) if "margin_phase_deg" in frame else np.full(len(frame), np.nan)
    gain_bad = mg < 0
    phase_bad = mp < 0
    neither = ~(gain_bad | phase_bad)
    return chosen & (gain_bad | neither), chosen & (phase_bad | neither)


def _annotate_feature(ax_gain: Axes, ax_phase: Axes, f_model: np.ndarray, g_model: np.ndarray) -> None:
    feature = response_feature(f_model, g_model)
    if feature is None:
        return
    words = {"corner": "corner (model)", "peak": "resonance (model)", "dip": "dip (model)"}
    for ax in (ax_gain, ax_phase):
        ax.axvline(feature.frequency_hz, color=COLOURS["feature"], linestyle="--", linewidth=1.2, zorder=2)
    ax_gain.annotate(
        f"{words[feature.kind]}: {format_hz(feature.frequency_hz)}",
        xy=(feature.frequency_hz, 1.0), xycoords=("data", "axes fraction"), xytext=(4, -4),
        textcoords="offset points", rotation=90, ha="left", va="top", fontsize=FONT_SMALL,
        color="black", bbox={"boxstyle": "square,pad=0.15", "facecolor": "white", "edgecolor": "none", "alpha": 0.85},
        zorder=5,
    )


_TEXT_SPOTS = ((0.03, 0.06, "left", "bottom"), (0.97, 0.06, "right", "bottom"), (0.03, 0.94, "left", "top"),
               (0.97, 0.94, "right", "top"), (0.5, 0.06, "center", "bottom"), (0.5, 0.94, "center", "top"),
               (0.25, 0.5, "center", "center"), (0.75, 0.5, "center", "center"))
_CLEARANCE = 0.15


def _text_spot(ax: Axes, xs: np.ndarray, ys: np.ndarray, target: tuple[float, float]) -> tuple[float, float, str, str]:
    """A text position (axes fraction) clear of the data points, as near the target as can be.

    Among the candidate spots at least `_CLEARANCE` (axes fraction) from every point, the one
    nearest the target point; when none is that clear, the clearest.
    """
    x0, x1 = (math.log10(v) for v in ax.get_xlim())
    y0, y1 = ax.get_ylim()
    ok = np.isfinite(xs) & (xs > 0) & np.isfinite(ys)
    if not ok.any() or x1 == x0 or y1 == y0:
        return _TEXT_SPOTS[0]
    fx = (np.log10(xs[ok]) - x0) / (x1 - x0)
    fy = (ys[ok] - y0) / (y1 - y0)
    tx = (math.log10(target[0]) - x0) / (x1 - x0)
    ty = (target[1] - y0) / (y1 - y0)
    clearance = np.array([np.min(np.hypot(fx - sx, fy - sy)) for sx, sy, _, _ in _TEXT_SPOTS])
    distance = np.array([math.hypot(tx - sx, ty - sy) for sx, sy, _, _ in _TEXT_SPOTS])
    clear = clearance >= _CLEARANCE
    best = int(np.argmin(np.where(clear, distance, np.inf))) if clear.any() else int(np.argmax(clearance))
    return _TEXT_SPOTS[best]


def _annotate_failures(
    ax: Axes, f: np.ndarray, y: np.ndarray, worst: int, count: int, avoid_x: np.ndarray, avoid_y: np.ndarray
) -> None:
    """Say how many points fail, in the emptiest corner of the axes, pointing at the worst one."""
    if not (np.isfinite(f[worst]) and np.isfinite(y[worst])):
        return
    sx, sy, ha, va = _text_spot(ax, avoid_x, avoid_y, (f[worst], y[worst]))
    ax.annotate(
        f"{count} failing point{'s' if count != 1 else ''}",
        xy=(f[worst], y[worst]), xytext=(sx, sy), textcoords="axes fraction", ha=ha, va=va,
        fontsize=FONT, fontweight="bold", color=COLOURS["fail"],
        arrowprops={"arrowstyle": "->", "color": COLOURS["fail"], "linewidth": 1.0, "shrinkB": 6},
        bbox={"boxstyle": "round,pad=0.3", "facecolor": "white", "edgecolor": COLOURS["fail"], "linewidth": 0.8},
        zorder=6,
    )


def bode_figure(frame: pd.DataFrame, metadata: Mapping[str, Any], *, title: str | None = None) -> Figure:
    """Bode plot of one run: measured points with k*u bars, model curve, tolerance band.

    Points judged FAIL, FAIL? and PASS? get their own filled markers; the worst failing
    point is annotated with the failing count; the model's corner, resonance peak or dip
    is marked with a dashed vertical line. Phase is unwrapped for display. k is the run's
    coverage factor (2 when not stated).
    """
    fig, ax_gain, ax_phase = new_figure()
    k = float(metadata.get("coverage_factor") or 2.0)
    pred = prediction_of(frame, metadata)
    pf = pred["frequency_hz"]
    unwrapped = _unwrapped_prediction(pred)

    _draw_band(ax_gain, pf, pred["gain_lo_db"], pred["gain_hi_db"], "tolerance band (limits)")
    _draw_band(ax_phase, pf, unwrapped["phase_lo_deg"], unwrapped["phase_hi_deg"], None)
    fg, gm = _smooth(pf, pred["model_gain_db"])
    fp, pm = _smooth(pf, unwrapped["model_phase_deg"])
    ax_gain.plot(fg, gm, color=COLOURS["model"], linewidth=1.6, label="model (predicted)", zorder=3)
    ax_phase.plot(fp, pm, color=COLOURS["model"], linewidth=1.6, zorder=3)

    f = frame["frequency_hz"].to_numpy(dtype=float)
    gain = frame["gain_db"].to_numpy(dtype=float)
    phase = display_phase_deg(f, frame["phase_deg"].to_numpy(dtype=float), pf, unwrapped["model_phase_deg"])
    u_gain = np.nan_to_num(frame["u_gain_db"].to_numpy(dtype=float) * k, nan=0.0)
    u_phase = np.nan_to_num(frame["u_phase_deg"].to_numpy(dtype=float) * k, nan=0.0)
    style = {
        "fmt": "o", "markersize": 4.5, "markerfacecolor": "white", "markeredgecolor": COLOURS["measured"],
        "markeredgewidth": 1.1, "ecolor": COLOURS["measured"], "elinewidth": 0.9, "capsize": 2.0, "zorder": 4,
    }
    ax_gain.errorbar(f, gain, yerr=u_gain, label=f"measured, bars \u00b1{k:g}u", **style)
    ax_phase.errorbar(f, phase, yerr=u_phase, **style)

    verdicts = point_verdicts(frame)
    for verdict, look in VERDICT_MARKERS.items():
        chosen = verdicts == int(verdict)
        count = int(np.count_nonzero(chosen))
        if not count:
            continue
        on_gain, on_phase = _culprit_masks(frame, chosen)
        label = f"{VERDICT_LABELS[verdict]}: {count} point{'s' if count != 1 else ''}"
        for ax, mask, y, lab in ((ax_gain, on_gain, gain, label), (ax_phase, on_phase, phase, None)):
            ax.scatter(
                f[mask], y[mask], marker=look["marker"], s=look["s"], facecolor=look["colour"],
                edgecolor="black", linewidth=0.6, zorder=5, label=lab,
            )

    set_limits(ax_gain, [gain - u_gain, gain + u_gain, gm], 1.0)
    set_limits(ax_phase, [phase - u_phase, phase + u_phase, pm], 10.0)
    phase_ticks(ax_phase)
    xs = np.concatenate([f[np.isfinite(f) & (f > 0)], pf[np.isfinite(pf) & (pf > 0)]])
    if xs.size:
        ax_gain.set_xlim(xs.min() / 1.15, xs.max() * 1.15)
    _annotate_feature(ax_gain, ax_phase, fg, gm)

    failing = (verdicts == int(Verdict.FAIL)) | (verdicts == int(Verdict.FAIL_UNCERTAIN))
    if failing.any():
        on_gain, on_phase = _culprit_masks(frame, failing)
        if on_gain.any():
            margins = frame["margin_gain_db"].to_numpy(dtype=float) if "margin_gain_db" in frame else None
            ax, y, mask = ax_gain, gain, on_gain
        else:
            margins = frame["margin_phase_deg"].to_numpy(dtype=float) if "margin_phase_deg" in frame else None
            ax, y, mask = ax_phase, phase, on_phase
        candidates = np.flatnonzero(mask)
        if margins is not None and np.isfinite(margins[candidates]).any():
            worst = int(candidates[np.nanargmin(margins[candidates])])
        else:
            worst = int(candidates[0])
        curve_f, curve_y = (fg, gm) if ax is ax_gain else (fp, pm)
        _annotate_failures(ax, f, y, worst, int(np.count_nonzero(failing)),
                           np.concatenate([f, curve_f]), np.concatenate([y, curve_y]))

    finish_figure(fig, _verdict_title(frame, metadata, title), 3, FONT_SMALL + 0.5)
    return fig


def run_names(runs: Sequence[Run]) -> list[str]:
    """Short names that tell runs apart: DUT serials when unique, else run ids."""
    serials = [str((md.get("dut") or {}).get("serial") or "") for _, md in runs]
    if all(serials) and len(set(serials)) == len(serials):
        return serials
    return [str(md.get("run_id") or f"run {i + 1}") for i, (_, md) in enumerate(runs)]



def _run_label(name: str, frame: pd.DataFrame, metadata: Mapping[str, Any]) -> str:
    label = f"{plain(name)}: {VERDICT_LABELS[run_verdict_of(frame, metadata)]}"
    failing = int(np.count_nonzero(failing_mask(frame)))
    return f"{label} ({failing} failing)" if failing else label


def series_style(i: int) -> dict[str, Any]:
    return {
        "color": SERIES_COLOURS[i % len(SERIES_COLOURS)],
        "marker": SERIES_MARKERS[i % len(SERIES_MARKERS)],
        "linestyle": SERIES_LINES[i % len(SERIES_LINES)],
        "markersize": 4.0,
        "linewidth": 1.0,
        "markerfacecolor": "white" if (i // len(SERIES_COLOURS)) % 2 == 0 else SERIES_COLOURS[i % len(SERIES_COLOURS)],
    }


def _sorted_run(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    f = frame["frequency_hz"].to_numpy(dtype=float)
    order = np.argsort(f, kind="stable")
    g = frame["gain_db"].to_numpy(dtype=float)[order]
    p = unwrap_deg(frame["phase_deg"].to_numpy(dtype=float)[order])
    return f[order], g, p


def overlay_figure(runs: Sequence[Run], golden_index: int | None = None, *, title: str | None = None) -> Figure:
    """Several runs on one Bode plot (a batch or an overnight series).

    Each run has its own colour, marker and line style; the golden run (if given) is drawn
    as a heavy black line, and its tolerance band (or the first run's) is shaded.
    """
    if not runs:
        raise ValueError("overlay_figure needs at least one run")
    if golden_index is not None and not 0 <= golden_index < len(runs):
        raise ValueError(f"golden_index {golden_index} is out of range for {len(runs)} runs")
    fig, ax_gain, ax_phase = new_figure()
    band_run = runs[golden_index if golden_index is not None else 0]
    pred = prediction_of(*band_run)
    unwrapped = _unwrapped_prediction(pred)
    _draw_band(ax_gain, pred["frequency_hz"], pred["gain_lo_db"], pred["gain_hi_db"], "tolerance band")
    _draw_band(ax_phase, pred["frequency_hz"], unwrapped["phase_lo_deg"], unwrapped["phase_hi_deg"], None)
    gains, phases = [], []
    names = run_names(runs)
    for i, (frame, metadata) in enumerate(runs):
        f, g, p = _sorted_run(frame)
        p = display_phase_deg(f, p, pred["frequency_hz"], unwrapped["model_phase_deg"])
        label = _run_label(names[i], frame, metadata)
        if i == golden_index:
            style: dict[str, Any] = {"color": "black", "linewidth": 2.4, "linestyle": "-", "marker": None, "zorder": 4}
            label = f"golden {label}"
        else:
            style = {**series_style(i if golden_index is None or i < golden_index else i - 1), "zorder": 3}
        ax_gain.plot(f, g, label=label, **style)
        ax_phase.plot(f, p, **style)
        gains.append(g)
        phases.append(p)
    set_limits(ax_gain, gains, 1.0)
    set_limits(ax_phase, phases, 10.0)
    phase_ticks(ax_phase)
    finish_figure(fig, plain(title) if title else f"{len(runs)} runs overlaid", 3 if len(runs) > 2 else 2, FONT_SMALL)
    return fig


def difference_figure(
    runs: Sequence[Run], golden_index: int = 0, *, title: str | None = None, coverage_factor: float | None = None
) -> Figure:
    """Each run minus the golden run: gain difference (dB) and phase difference (degrees).

    The golden run is interpolated in log10(f) onto each run's frequencies (no extrapolation);
    bars are the expanded uncertainty of the difference, k * sqrt(u_run^2 + u_golden^2), with
    k the golden run's coverage factor unless given (2 when neither says).
    """
    if not 0 <= golden_index < len(runs):
        raise ValueError(f"golden_index {golden_index} is out of range for {len(runs)} runs")
    golden, golden_md = runs[golden_index]
    k = float(coverage_factor or golden_md.get("coverage_factor") or 2.0)
    if np.count_nonzero(np.isfinite(golden["gain_db"].to_numpy(dtype=float))) < 2:
        raise ValueError("the golden run needs at least two measured points")
    fig, ax_gain, ax_phase = new_figure()
    ax_gain.set_ylabel("gain difference (dB)", fontsize=FONT)
    ax_phase.set_ylabel("phase difference (degrees)", fontsize=FONT)
    gf, gg, gp = _sorted_run(golden)
    order = np.argsort(golden["frequency_hz"].to_numpy(dtype=float), kind="stable")
    gu_gain = golden["u_gain_db"].to_numpy(dtype=float)[order]
    gu_phase = golden["u_phase_deg"].to_numpy(dtype=float)[order]
    for ax in (ax_gain, ax_phase):
        ax.axhline(0.0, color="black", linewidth=1.4, zorder=2)
    all_g, all_p = [np.zeros(1)], [np.zeros(1)]
    n = 0
    names = run_names(runs)
    for i, (frame, metadata) in enumerate(runs):
        if i == golden_index:
            continue
        f, g, p = _sorted_run(frame)
        dg, dp = difference_to_reference(f, g, p, gf, gg, gp)
        order_i = np.argsort(frame["frequency_hz"].to_numpy(dtype=float), kind="stable")
        ug = np.hypot(frame["u_gain_db"].to_numpy(dtype=float)[order_i],
                      interpolate_log_f(f, *sorted_finite(gf, gu_gain)))
        up = np.hypot(frame["u_phase_deg"].to_numpy(dtype=float)[order_i],
                      interpolate_log_f(f, *sorted_finite(gf, gu_phase)))
        style = series_style(n)
        bars = {"elinewidth": 0.7, "capsize": 1.5, "zorder": 3}
        ax_gain.errorbar(f, dg, yerr=np.nan_to_num(k * ug), label=_run_label(names[i], frame, metadata),
                         **style, **bars)
        ax_phase.errorbar(f, dp, yerr=np.nan_to_num(k * up), **style, **bars)
        all_g.append(dg)
        all_p.append(dp)
        n += 1
    set_limits(ax_gain, all_g, 0.2)
    set_limits(ax_phase, all_p, 2.0)
    golden_name = names[golden_index]
    finish_figure(fig, plain(title or f"difference to the golden run {golden_name} (bars \u00b1{k:g}u)"), 3,
            FONT_SMALL)
    return fig


def figure_svg(fig: Figure) -> str:
    """The figure as SVG text, without a date stamp (text drawn as paths under matplotlib's default
    svg.fonttype, so the file needs no fonts)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None})
    return buf.getvalue().decode("utf-8")


def figure_png(fig: Figure, dpi: float = 150.0) -> bytes:
    """The figure as PNG bytes."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def save_figure(fig: Figure, path: str | Path, dpi: float = 150.0) -> Path:
    """Write a figure as PNG or SVG, chosen by the file suffix."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix == ".png":
        path.write_bytes(figure_png(fig, dpi))
    elif suffix == ".svg":
        path.write_text(figure_svg(fig), encoding="utf-8")
    else:
        raise ValueError(f"{path}: unknown plot format {path.suffix!r} (expected .png or .svg)")
    return path


def save_bode(
    frame: pd.DataFrame, metadata: Mapping[str, Any], path: str | Path, *, title: str | None = None, dpi: float = 150.0
) -> Path:
    """Draw `bode_figure` and write it as PNG or SVG by the file suffix; returns the path."""
    return save_figure(bode_figure(frame, metadata, title=title), path, dpi)
