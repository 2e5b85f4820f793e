"""Sweeps on the simulated bench for the analysis tests: a plan template and a runner.

Boards, serials and stations are invented. The simulated board's true part values are set
with bench.simulation.components; range_noise adds front-end noise (a fraction of each
channel's full-scale span, rms), so every point carries a real uncertainty and the fit's
intervals mean something.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sweeper.instruments.bench import open_bench
from sweeper.measure.engine import Instruments, prepare_source
from sweeper.measure.engine import sweep as engine_sweep
from sweeper.plan import load_plan_text
from sweeper.verdict.prediction import nominal_circuit, predict_limits
from sweeper.run.runner import engine_settings, execute_run, plan_frequencies
from sweeper.store.runfile import points_frame, read_run

PLAN = """
plan: 1
name: analysis-test
dut: {{board: ANX-3 test fixture, serial: {serial}}}
bench:
  kind: simulated
  mode: waveform
  source: {{resource: "TCPIP0::sim-gen::5025::SOCKET", driver: sim-generator.yaml}}
  scope: {{resource: "TCPIP0::sim-scope-{dialect}::5025::SOCKET", driver: sim-scope-{dialect}.yaml}}
  simulation:
    seed: {seed}
    range_noise: {range_noise}
    components: {true_parts}
stimulus: {{amplitude: 2 Vpp, load: high-z, max_amplitude: 10 Vpp}}
sweep: {{start: {start}, stop: {stop}, points_per_decade: {ppd}}}
acquisition:
  min_cycles: 8
  min_samples: 2000
  settle_cycles: 2
  settle_time_constants: 6
  averages: 1
  max_averages: 1
model:
  circuit: {circuit}
  components: {components}
  loading: {loading}
limits:
  band: worst-case
  allowance: {{gain: 0.05 dB, phase: 0.5 deg}}
  decision_rule: guarded
metadata: {{operator: analysis test, station: STN-T9}}
"""

PROBE_LOADING = "{source_resistance: 50 Ohm, probe_resistance: 1 MOhm, probe_capacitance: 15 pF}"
IDEAL_PROBES = "{source_resistance: 50 Ohm}"

SEEDS = range(1, 21)  # fixed in advance: seeds 1 to 20, nothing picked after the fact
RC_TRUE_C_F = 120e-9  # the simulated RC board's capacitor: +20 % on its 100 nF nominal (R nominal)
RL_TRUE_L_H, RL_TRUE_DCR_OHM = 12e-3, 15.0  # the simulated RL board: L +20 %, its DCR +25 % (R nominal)

RC = "{R: {value: 1.6 kOhm, tolerance: 1 %}, C: {value: 100 nF, tolerance: 5 %}}"
RL = "{R: {value: 470 Ohm, tolerance: 1 %}, L: {value: 10 mH, tolerance: 10 %}, RL: {value: 12 Ohm, tolerance: 20 %}}"
RLC = "{R: {value: 100 Ohm, tolerance: 1 %}, L: {value: 10 mH, tolerance: 5 %}, C: {value: 100 nF, tolerance: 5 %}}"


def plan_text(**fields: Any) -> str:
    """PLAN filled in: defaults for an RC low-pass from 100 Hz to 100 kHz, 5 points per decade."""
    values: dict[str, Any] = {"serial": "ANX3-0001", "dialect": "a", "seed": 1, "range_noise": "0.2 %",
                              "true_parts": "{}", "start": "100 Hz", "stop": "100 kHz", "ppd": 5,
                              "circuit": "rc-lowpass", "components": RC, "loading": PROBE_LOADING}
    values.update(fields)
    return PLAN.format(**values)


def measure(**fields: Any) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The same sweep on the same simulated bench, wired as sweeper.run.runner.execute_run wires it,
    but without writing a journal and run file (the store costs more than the sweep here and is
    tested elsewhere): (points frame laid out as read_run gives it, metadata with the plan text)."""
    plan = load_plan_text(plan_text(**fields), "plan.yaml")
    frequencies = plan_frequencies(plan)
    limits = predict_limits(plan, frequencies)
    settings = engine_settings(plan)
    model = nominal_circuit(plan)
    points = []
    with open_bench(plan) as bench:
        prepare_source(bench.source, settings)
        try:
            engine_sweep(frequencies, settings, Instruments(bench.source, bench.clock, bench.scope, bench.meter),
                         limits, lambda f: complex(model.response(np.array([f]))[0]),
                         lambda point, capture: points.append(point), start_utc=datetime.now(UTC))
        finally:
            bench.source.set_output(False)
    metadata = {"run_id": f"{plan.dut.serial}-measured", "plan_yaml": plan.source_text, "plan_name": plan.name,
                "dut": {"board": plan.dut.board, "serial": plan.dut.serial}, "coverage_factor": 2.0}
    return points_frame(points), metadata


def sweep(out_dir: Path, **fields: Any) -> tuple[pd.DataFrame, dict[str, Any], Path]:
    """Run a plan from `plan_text(**fields)` on the simulated bench; (points, metadata, run file)."""
    plan = load_plan_text(plan_text(**fields), str(out_dir / "plan.yaml"))
    outcome = execute_run(plan, out_dir)
    assert outcome.status == "complete", outcome.error
    frame, metadata = read_run(outcome.run_path)
    return frame, metadata, outcome.run_path
