"""The live page end to end in headless Chromium (Debian's package; `.ci/run` installs it when
missing): a screenshot taken while a background thread appends points to the journal must show
something (not a blank page), and once the run is complete the page must say so."""

from __future__ import annotations

import shutil
import subprocess
import threading
from pathlib import Path

import numpy as np
import pytest
from live_rig import Replay, recorded_run
from matplotlib.image import imread

from sweeper.live import make_server

CHROMIUM = shutil.which("chromium")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync")

pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (.ci/run installs it: "
                                "apt-get install -y chromium)")


def chromium(profile: Path, *args: str) -> subprocess.CompletedProcess:
    """Run headless Chromium with a new empty profile folder."""
    profile.mkdir()
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args], capture_output=True, text=True,
                          timeout=90, check=False)


def test_live_page_in_headless_chromium(tmp_path: Path) -> None:
    header, points, summary = recorded_run(tmp_path / "recorded")
    replay = Replay(tmp_path / "live.journal", header, points, summary, interval_s=0.25, first=4)
    server = make_server(replay.path)
    serving = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
    serving.start()
    try:
        replay.start()
        shot = tmp_path / "live.png"
        before = replay.appended
        result = chromium(tmp_path / "profile-1", f"--screenshot={shot}", "--window-size=1200,900", server.url)
        after = replay.appended
        replay.release.set()  # the last point was held back: the run was going all through the screenshot
        assert shot.exists(), result.stderr
        assert after > before  # and points kept arriving while Chromium loaded and drew the page
        image = imread(str(shot))
        assert image.shape[:2] == (900, 1200)
        # Non-blank: a blank page has zero variance; text and a plot give far more than 1e-3
        # (on the 0..1 scale of matplotlib's PNG reader), and draw on more than 2 % of the pixels.
        grey = image[..., :3].mean(axis=2)
        assert float(grey.var()) > 1e-3
        assert float(np.mean(grey < 0.9)) > 0.02

        assert replay.done.wait(timeout=60)
        # --virtual-time-budget lets the page's script run its polls (1 s apart) before the DOM is dumped.
        dom = chromium(tmp_path / "profile-2", "--virtual-time-budget=3000", "--dump-dom", server.url).stdout
        assert f"{len(points)} of {len(points)} points" in dom, dom[:2000]
        assert f"verdict {summary['verdict']}" in dom
        assert "FAIL: " in dom  # the verdict counts so far are listed
    finally:
        server.shutdown()
        server.server_close()
