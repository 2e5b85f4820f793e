"""A plan saved with a UTF-8 byte-order mark: `check` and `run` agree, and the plan's hash is of
the bytes as read (the rule in the README's archive section)."""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
from pathlib import Path

import h5py

from sweeper.plan import load_plan

REPO = Path(__file__).resolve().parents[2]
PLAN = REPO / "configs" / "rc-antialias.yaml"


def test_bom_plan_checks_runs_and_hashes_its_bytes(tmp_path: Path) -> None:
    data = b"\xef\xbb\xbf" + PLAN.read_bytes()
    plan_path = tmp_path / "bom.yaml"
    plan_path.write_bytes(data)
    plan = load_plan(plan_path)
    # the hash is hashlib's SHA-256 of the file's bytes, BOM included
    assert plan.sha256 == hashlib.sha256(data).hexdigest()
    env = {**os.environ, "COLUMNS": "200"}
    checked = subprocess.run([sys.executable, "-m", "sweeper", "check", str(plan_path)], capture_output=True,
                             text=True, env=env, timeout=120)
    assert checked.returncode == 0, checked.stderr
    assert f"plan sha256 {plan.sha256[:12]}" in checked.stdout
    runs = tmp_path / "runs"
    ran = subprocess.run([sys.executable, "-m", "sweeper", "run", str(plan_path), "--out", str(runs)],
                         capture_output=True, text=True, env=env, timeout=120)
    assert ran.returncode == 0, ran.stdout + ran.stderr
    assert "RunFileError" not in ran.stdout + ran.stderr
    (run_file,) = runs.glob("*.h5")
    with h5py.File(run_file, "r") as f:
        stored = f["plan/yaml"][()].decode("utf-8")
        assert f.attrs["plan_sha256"] == plan.sha256
    assert stored.encode("utf-8") == data  # verbatim, mark kept
