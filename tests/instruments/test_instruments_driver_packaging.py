"""The demo driver files ship in the wheel: a non-editable install runs the demo plan from
another folder, finding its drivers inside the installed package (drivers/ stays the source).

Slow (a wheel build and an install into a fresh venv, about 30 s here), so it is marked; CI
runs it all the same. The packages come from the machine's configured package index.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]


def run(command: list[str], cwd: Path, env: dict[str, str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run(command, cwd=cwd, env=env, capture_output=True, text=True, timeout=240)


@pytest.mark.slow
def test_a_wheel_install_runs_the_demo_plan_from_another_folder(tmp_path: Path) -> None:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "SWEEPER_DRIVERS", "VIRTUAL_ENV")}
    # Build from a copy of the source tree, so the build leaves nothing in the checkout.
    source = tmp_path / "source"
    shutil.copytree(REPO, source, ignore=shutil.ignore_patterns(
        ".git", ".venv", "build", "dist", "runs", "*.egg-info", "__pycache__", ".pytest_cache", ".hypothesis"))
    wheels = tmp_path / "wheels"
    built = run([sys.executable, "-m", "pip", "wheel", str(source), "--no-deps", "-w", str(wheels), "-q"], tmp_path, env)
    assert built.returncode == 0, built.stderr
    (wheel,) = wheels.glob("sweeper-*.whl")
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, timeout=120)
    python, sweeper = venv / "bin" / "python", venv / "bin" / "sweeper"
    installed = run([str(python), "-m", "pip", "install", "-q", str(wheel)], tmp_path, env)
    assert installed.returncode == 0, installed.stderr
    elsewhere = tmp_path / "elsewhere"  # no drivers/ beside the plan, above it or in the working folder
    elsewhere.mkdir()
    shutil.copy(REPO / "configs" / "rc-antialias.yaml", elsewhere / "rc-antialias.yaml")
    where = run([str(python), "-c", "from sweeper.instruments.driverfile import repository_drivers_dir as d; "
                 "print(d())"], elsewhere, env)
    shipped = Path(where.stdout.strip())
    assert shipped.is_relative_to(venv) and shipped.parts[-2:] == ("sweeper", "drivers"), where.stdout + where.stderr
    assert sorted(p.name for p in shipped.glob("*.yaml")) == sorted(p.name for p in (REPO / "drivers").glob("*.yaml"))
    done = run([str(sweeper), "run", "rc-antialias.yaml", "--out", "runs"], elsewhere, env)
    assert done.returncode == 0, done.stdout + done.stderr  # exit 0: PASS (README, demo plans)
    assert "PASS" in done.stdout and len(list((elsewhere / "runs").glob("*.h5"))) == 1
