"""Reports of runs: Bode plots (PNG, SVG), a self-contained HTML page, derived figures and exports.

Every function takes a run as its points frame (columns `sweeper.measure.point.POINT_FIELDS`)
and its metadata dict, as `sweeper.store.runfile.read_run` returns them.
"""

from sweeper.report.export import export_points, read_points, summary_json, write_summary_json
from sweeper.analysis.figures import derived_figures
from sweeper.report.html import render_html, write_html
from sweeper.report.load import load_run, load_runs
from sweeper.report.plot import bode_figure, difference_figure, overlay_figure, save_bode, save_figure

__all__ = [
    "bode_figure",
    "derived_figures",
    "difference_figure",
    "export_points",
    "load_run",
    "load_runs",
    "overlay_figure",
    "read_points",
    "render_html",
    "save_bode",
    "save_figure",
    "summary_json",
    "write_html",
    "write_summary_json",
]
