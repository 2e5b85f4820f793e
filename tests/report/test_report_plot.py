"""Bode plots (sweeper.report.plot): files written, axes shared, points marked, phase unwrapped.

The runs come from the handbook RC low-pass (conftest); the corner check uses the handbook
fc = 1/(2 pi R C) and the third-order Butterworth response comes from scipy.signal.
"""

from __future__ import annotations

import sys
import xml.etree.ElementTree as ET

import matplotlib.image
import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from scipy import signal

from sweeper.report.plot import bode_figure, difference_figure, overlay_figure, save_bode


FC_HZ = 1.0 / (2.0 * np.pi * 1.6e3 * 100e-9)  # handbook corner of the conftest RC low-pass, 994.7 Hz


def _pyplot_figures() -> list[int]:
    plt = sys.modules.get("matplotlib.pyplot")
    return list(plt.get_fignums()) if plt is not None else []


def test_png_and_svg_files(tmp_path, failing_run) -> None:
    frame, metadata = failing_run
    before = _pyplot_figures()
    png = save_bode(frame, metadata, tmp_path / "bode.png")
    svg = save_bode(frame, metadata, tmp_path / "bode.SVG")
    assert _pyplot_figures() == before  # no figure left in pyplot's global registry
    assert png.stat().st_size > 10_000 and svg.stat().st_size > 10_000
    pixels = matplotlib.image.imread(png)
    assert pixels.ndim == 3 and pixels.shape[0] > 500 and pixels.shape[1] > 500
    assert float(np.var(pixels[..., :3])) > 0.0  # not a blank image
    root = ET.parse(svg).getroot()  # well-formed XML
    assert root.tag.endswith("svg")
    with pytest.raises(ValueError, match="png or .svg"):
        save_bode(frame, metadata, tmp_path / "bode.jpg")


def test_two_log_axes_sharing_frequency(failing_run) -> None:
    frame, metadata = failing_run
    fig = bode_figure(frame, metadata)
    assert isinstance(fig.canvas, FigureCanvasAgg)
    ax_gain, ax_phase = fig.axes
    assert ax_gain.get_shared_x_axes().joined(ax_gain, ax_phase)
    assert ax_gain.get_xscale() == "log" and ax_phase.get_xscale() == "log"
    assert "gain (dB)" in ax_gain.get_ylabel() and "phase (degrees)" in ax_phase.get_ylabel()
    assert "frequency (Hz)" in ax_phase.get_xlabel()


def test_failing_points_marked_and_counted(failing_run) -> None:
    frame, metadata = failing_run
    n_fail = int(np.count_nonzero(frame["verdict"].to_numpy() >= 3))
    assert n_fail == 2  # the fixture's two points pushed 1 dB outside the band
    fig = bode_figure(frame, metadata)
    ax_gain = fig.axes[0]
    legend_texts = [t.get_text() for lg in fig.legends for t in lg.get_texts()]
    assert "FAIL: 2 points" in legend_texts
    assert any(t.get_text() == "2 failing points" for t in ax_gain.texts)
    # The FAIL markers sit on the failing points' gains (they failed on gain: negative gain margin).
    failing = frame[frame["verdict"] == 4]
    offsets = [c.get_offsets() for c in ax_gain.collections if c.get_label() == "FAIL: 2 points"]
    assert len(offsets) == 1
    np.testing.assert_array_equal(np.sort(offsets[0][:, 1]), np.sort(failing["gain_db"].to_numpy()))
    assert "verdict FAIL" in fig.get_suptitle()


def test_corner_annotated_at_handbook_frequency(passing_run) -> None:
    frame, metadata = passing_run
    fig = bode_figure(frame, metadata)
    ax_gain = fig.axes[0]
    vertical = [ln for ln in ax_gain.get_lines() if ln.get_linestyle() == "--"]
    assert len(vertical) == 1
    x = vertical[0].get_xdata()[0]
    # Found on the model curve drawn through 60 points (0.068 decade apart): the linear-
    # interpolation bound is 0.31 % (see test_analysis_figures); 1 % is the accuracy a marker
    # on a log axis needs.
    assert x == pytest.approx(FC_HZ, rel=0.01)
    assert any("corner" in t.get_text() for t in ax_gain.texts)
    assert not any("failing" in t.get_text() for t in ax_gain.texts)


def test_phase_is_unwrapped_for_display(passing_run) -> None:
    # Third-order Butterworth (scipy.signal.butter): phase reaches -270 degrees, stored wrapped.
    _, metadata = passing_run
    f = np.geomspace(10.0, 100e3, 50)
    b, a = signal.butter(3, 2 * np.pi * 1e3, analog=True)
    _, h = signal.freqs(b, a, worN=2 * np.pi * f)
    wrapped = np.degrees(np.angle(h))
    assert wrapped.max() > 90 and wrapped.min() < -170  # the stored phase does wrap
    frame = pd.DataFrame({
        "frequency_hz": f[::-1], "gain_db": 20 * np.log10(np.abs(h))[::-1], "phase_deg": wrapped[::-1],
        "u_gain_db": 0.01, "u_phase_deg": 0.1, "verdict": 0,
    })  # measured downward, no model: the points are unwrapped on their own
    fig = bode_figure(frame, {**metadata, "prediction": {}})
    ax_phase = fig.axes[1]
    data = [ln for ln in ax_phase.get_lines() if ln.get_marker() == "o"][0]
    x, y = np.asarray(data.get_xdata()), np.asarray(data.get_ydata())
    y = y[np.argsort(x)]
    assert np.all(np.abs(np.diff(y)) < 90)  # no 360-degree jumps between neighbours
    # Low-frequency end near 0 and the high-frequency end near -270 (3 poles x -90), within
    # 5 degrees: at 100 kHz (two decades above the corner) the phase is -268.3 degrees.
    assert y[0] == pytest.approx(0.0, abs=5.0)
    assert y[-1] == pytest.approx(-270.0, abs=5.0)


def test_overlay_and_difference(run_factory) -> None:
    make_run = run_factory
    golden = make_run(points=60, serial="DLF7-000200")
    other = make_run(points=37, serial="DLF7-000201")
    shifted = make_run(points=60, serial="DLF7-000202", gain_offsets_db={i: 0.5 for i in range(60)})
    runs = [golden, other, shifted]
    fig = overlay_figure(runs, golden_index=0)
    labels = [t.get_text() for lg in fig.legends for t in lg.get_texts()]
    assert any(lab.startswith("golden DLF7-000200") for lab in labels)
    assert any(lab.startswith("DLF7-000201") for lab in labels) and len(fig.axes) == 2

    diff = difference_figure(runs, golden_index=0)
    ax_gain = diff.axes[0]
    # errorbar keeps each run's label on its container; lines[0] is the data line.
    by_run = {c.get_label().split(":")[0]: np.asarray(c.lines[0].get_ydata()) for c in ax_gain.containers}
    assert set(by_run) == {"DLF7-000201", "DLF7-000202"}
    # Same model, different sampling: the golden's values, interpolated linearly in log f,
    # err by at most h^2/8 * 23.0 dB/decade^2 = 0.0132 dB (h = 0.0678 decade; see
    # test_analysis_figures), so the differences stay within that.
    assert np.nanmax(np.abs(by_run["DLF7-000201"])) <= 0.0133
    # +0.5 dB on every point, same frequencies: exactly 0.5 dB up to rounding.
    np.testing.assert_allclose(by_run["DLF7-000202"], 0.5, atol=1e-9)
    with pytest.raises(ValueError):
        difference_figure(runs, golden_index=3)
