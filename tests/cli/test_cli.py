"""The command line as a user meets it: real processes, real files, exit codes, no tracebacks."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest

REPO = Path(__file__).resolve().parents[2]
CONFIGS = sorted((REPO / "configs").glob("*.yaml"))


def sweeper(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    env = {**os.environ, "COLUMNS": "200"}  # rich wraps tables to the terminal width
    return subprocess.run([sys.executable, "-m", "sweeper", *args], capture_output=True, text=True,
                          cwd=cwd or REPO, timeout=300, env=env)


@pytest.mark.parametrize("plan", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_check_every_demo_plan(plan: Path) -> None:
    result = sweeper("check", str(plan))
    assert result.returncode == 0, result.stderr
    assert "plan is sound" in result.stdout and "Safety" in result.stdout
    assert "estimated duration" in result.stdout


def test_check_bad_plan_lists_every_problem_located(tmp_path: Path) -> None:
    text = (REPO / "configs" / "rc-antialias.yaml").read_text()
    text = text.replace("stop: 100 kHz", "stop: 10 kF").replace("amplitude: 2 Vpp", "amplitude: 7 Vpp")
    text = text.replace("min_cycles: 8", "min_cycels: 8")
    bad = tmp_path / "bad.yaml"
    bad.write_text(text)
    result = sweeper("check", str(bad))
    assert result.returncode == 2
    assert "Traceback" not in result.stderr + result.stdout
    lines = result.stderr.splitlines()
    assert any(f"{bad}:" in ln and "sweep.stop: '10 kF' is not a frequency" in ln for ln in lines)
    assert any("stimulus.amplitude" in ln for ln in lines)
    assert any("min_cycels" in ln for ln in lines)


def test_check_refuses_a_request_outside_the_drivers_limits(tmp_path: Path) -> None:
    text = (REPO / "configs" / "rc-antialias.yaml").read_text().replace("stop: 100 kHz", "stop: 50 MHz")
    plan = tmp_path / "fast.yaml"
    plan.write_text(text)
    result = sweeper("check", str(plan))
    assert result.returncode == 2
    assert "source's" in result.stderr and "Traceback" not in result.stderr


def test_run_demo_then_catalog_report_and_export(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    ok = sweeper("run", str(REPO / "configs" / "rc-antialias.yaml"), "--out", str(runs))
    assert ok.returncode == 0, ok.stdout + ok.stderr
    assert "PASS" in ok.stdout
    bad = sweeper("run", str(REPO / "configs" / "rc-antialias-wrong-cap.yaml"), "--out", str(runs))
    assert bad.returncode == 1
    assert "Failing frequencies" in bad.stdout and "FAIL" in bad.stdout

    listed = sweeper("runs", "--runs", str(runs))
    assert listed.returncode == 0 and "DLF7-000123" in listed.stdout and "DLF7-000199" in listed.stdout
    failed = sweeper("runs", "--runs", str(runs), "--verdict", "FAIL")
    assert "DLF7-000199" in failed.stdout and "DLF7-000123" not in failed.stdout

    h5 = sorted(runs.glob("*DLF7-000199*.h5"))[0]
    shown = sweeper("show", str(h5))
    assert shown.returncode == 0 and "failing points" in shown.stdout

    assert sweeper("verify", "--runs", str(runs)).returncode == 0

    html = tmp_path / "report.html"
    rep = sweeper("report", str(h5), "--out", str(html))
    assert rep.returncode == 0, rep.stderr

    class Text(HTMLParser):
        def __init__(self) -> None:
            super().__init__()
            self.text: list[str] = []

        def handle_data(self, data: str) -> None:
            self.text.append(data)

    parser = Text()
    parser.feed(html.read_text())
    assert "FAIL" in " ".join(parser.text)

    csv = tmp_path / "points.csv"
    exp = sweeper("export", str(h5), "--to", "csv", "--out", str(csv))
    assert exp.returncode == 0, exp.stderr
    frame = pd.read_csv(csv)
    assert any("[Hz]" in c for c in frame.columns) and len(frame) == 21

    # A flipped byte is found by verify (exit 1).
    data = bytearray(h5.read_bytes())
    data[len(data) // 2] ^= 0xFF
    h5.write_bytes(bytes(data))
    assert sweeper("verify", "--runs", str(runs)).returncode == 1


def test_missing_plan_file_is_bad_input(tmp_path: Path) -> None:
    result = sweeper("run", str(tmp_path / "nope.yaml"))
    assert result.returncode == 2 and "Traceback" not in result.stderr


@pytest.mark.parametrize("command", ["check", "run"])
def test_a_50_ohm_setting_into_a_high_impedance_dut_is_capped_at_what_the_dut_receives(tmp_path: Path,
                                                                                         command: str) -> None:
    # 3 Vpp set for a 50 Ohm load is 6 Vpp at a high-impedance DUT (the source's 50 Ohm output
    # impedance and the load form a divider of 1/2: common practice), above a 5 Vpp cap.
    text = (REPO / "configs" / "rc-antialias.yaml").read_text()
    text = re.sub(r"stimulus:.*?\nsweep:", "stimulus:\n  amplitude: 3 Vpp\n  load: 50 Ohm\n  max_amplitude: 5 Vpp\n"
                  "sweep:", text, flags=re.S)
    plan = tmp_path / "doubled.yaml"
    plan.write_text(text)
    args = [command, str(plan)] + (["--out", str(tmp_path / "runs")] if command == "run" else [])
    result = sweeper(*args)
    assert result.returncode == 2, result.stdout + result.stderr
    assert "Traceback" not in result.stderr + result.stdout
    located = [ln for ln in result.stderr.splitlines() if f"{plan}:" in ln and "stimulus.amplitude" in ln]
    assert located and "6 Vpp" in located[0] and "max_amplitude" in located[0], result.stderr
    assert not (tmp_path / "runs").exists() or not any((tmp_path / "runs").glob("*.h5"))
