"""Sweeps on the simulated bench for the analysis tests: a plan template and a runner.

Boards, serials and stations are invented. The simulated board's true part values are set
with bench.simulation.components; range_noise adds front-end noise (a fraction of each
channel's full-scale span, rms), so every point carries a real uncertainty and the fit's
intervals mean something.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd

from sweeper.plan import load_plan_text
from sweeper.run.runner import execute_run, sweep_only
from sweeper.run.spec import run_spec
from sweeper.sim.demo import PROBE_LOADING, RC_PARTS, demo_plan_text
from sweeper.store.runfile import points_frame, read_run

IDEAL_PROBES = "{source_resistance: 50 Ohm}"

SEEDS = range(1, 21)  # fixed in advance: seeds 1 to 20, nothing picked after the fact
RC_TRUE_C_F = 120e-9  # the simulated RC board's capacitor: +20 % on its 100 nF nominal (R nominal)
RL_TRUE_L_H, RL_TRUE_DCR_OHM = 12e-3, 15.0  # the simulated RL board: L +20 %, its DCR +25 % (R nominal)

RC = RC_PARTS
RL = "{R: {value: 470 Ohm, tolerance: 1 %}, L: {value: 10 mH, tolerance: 10 %}, RL: {value: 12 Ohm, tolerance: 20 %}}"
RLC = "{R: {value: 100 Ohm, tolerance: 1 %}, L: {value: 10 mH, tolerance: 5 %}, C: {value: 100 nF, tolerance: 5 %}}"


def plan_text(**fields: Any) -> str:
    """The demo plan filled in: defaults for an RC low-pass from 100 Hz to 100 kHz, 5 points per decade."""
    v: dict[str, Any] = {"serial": "ANX3-0001", "dialect": "a", "seed": 1, "range_noise": "0.2 %",
                         "true_parts": "{}", "start": "100 Hz", "stop": "100 kHz", "ppd": 5,
                         "circuit": "rc-lowpass", "components": RC, "loading": PROBE_LOADING}
    v.update(fields)
    return demo_plan_text(
        name="analysis-test", board="ANX-3 test fixture", serial=v["serial"], instrument=f"scope-{v['dialect']}",
        simulation=f"{{seed: {v['seed']}, range_noise: {v['range_noise']}, components: {v['true_parts']}}}",
        sweep=f"{{start: {v['start']}, stop: {v['stop']}, points_per_decade: {v['ppd']}}}",
        acquisition="{min_cycles: 8, min_samples: 2000, settle_cycles: 2, settle_time_constants: 6, averages: 1, "
                    "max_averages: 1}",
        circuit=v["circuit"], components=v["components"], loading=v["loading"],
        metadata="{operator: analysis test, station: STN-T9}")


def measure(**fields: Any) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The same sweep on the same simulated bench, wired as sweeper.run.runner.execute_run wires it,
    but without writing a journal and run file (the store costs more than the sweep here and is
    tested elsewhere): (points frame laid out as read_run gives it, metadata with the plan text)."""
    return measure_plan(load_plan_text(plan_text(**fields), "plan.yaml"))


def measure_plan(plan: Any) -> tuple[pd.DataFrame, dict[str, Any]]:
    """`measure` for a plan already loaded."""
    points = sweep_only(run_spec(plan)).points
    metadata = {"run_id": f"{plan.dut.serial}-measured", "plan_yaml": plan.source_text, "plan_name": plan.name,
                "model_files": plan.model_files,
                "dut": {"board": plan.dut.board, "serial": plan.dut.serial}, "coverage_factor": 2.0}
    return points_frame(points), metadata


def sweep(out_dir: Path, **fields: Any) -> tuple[pd.DataFrame, dict[str, Any], Path]:
    """Run a plan from `plan_text(**fields)` on the simulated bench; (points, metadata, run file)."""
    plan = load_plan_text(plan_text(**fields), str(out_dir / "plan.yaml"))
    outcome = execute_run(plan, out_dir)
    assert outcome.status == "complete", outcome.error
    frame, metadata = read_run(outcome.run_path)
    return frame, metadata, outcome.run_path
