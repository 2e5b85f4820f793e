"""Parameter-extraction figures on the simulated bench (issue: reports and analysis).

Prints, over many seeded sweeps of boards with off-nominal parts (0.2 % range noise):
- how often the reported 95 % interval holds the true value (the coverage; 95 % when the
  intervals are right), for the RC product of an RC low-pass (C 120 nF for 100 nF) and for L and
  the DCR of an RL high-pass (L 12 mH for 10 mH, DCR 15 Ohm for 12 Ohm);
- the rms of (truth - fit) / standard uncertainty (1 when the intervals are right) and the mean
  reduced chi-square (1 when the points' uncertainties match their scatter);
- how often the likely culprit is named as expected (C for the RC board);
- the time per extraction.

Run: .venv/bin/python bench/bench_extraction.py [runs per board, default 100]
"""

from __future__ import annotations

import math
import sys
import time

import numpy as np

from sweeper.analysis import extract
from sweeper.plan import load_plan_text
from sweeper.run.runner import sweep_only
from sweeper.run.spec import run_spec
from sweeper.sim.demo import demo_plan_text
from sweeper.store.runfile import points_frame

def plan_text(seed: int, dialect: str, circuit: str, start: str, stop: str, true_parts: str, components: str) -> str:
    """The demo plan for one seeded sweep of a board."""
    return demo_plan_text(
        name="extraction-bench", board="ANX-3 bench fixture", serial=f"ANX3-B{seed:04d}", instrument=f"scope-{dialect}",
        simulation=f"{{seed: {seed}, range_noise: 0.2 %, components: {true_parts}}}",
        sweep=f"{{start: {start}, stop: {stop}, points_per_decade: 5}}",
        acquisition="{min_cycles: 8, min_samples: 2000, settle_cycles: 2, settle_time_constants: 6, max_averages: 1}",
        circuit=circuit, components=components, limits="{band: worst-case, allowance: {gain: 0.05 dB, phase: 0.5 deg}}")


BOARDS = {
    "RC low-pass, C 120 nF": dict(
        dialect="a", circuit="rc-lowpass", start="100 Hz", stop="100 kHz", true_parts="{C: 120 nF}",
        components="{R: {value: 1.6 kOhm, tolerance: 1 %}, C: {value: 100 nF, tolerance: 5 %}}",
        truth={"RC product": 1.6e3 * 120e-9}, culprit="C"),
    "RL high-pass, L 12 mH, DCR 15 Ohm": dict(
        dialect="b", circuit="rl-highpass", start="100 Hz", stop="1 MHz", true_parts="{L: 12 mH, RL: 15 Ohm}",
        components="{R: {value: 470 Ohm, tolerance: 1 %}, L: {value: 10 mH, tolerance: 10 %}, "
                   "RL: {value: 12 Ohm, tolerance: 20 %}}",
        truth={"L": 12e-3, "RL": 15.0}, culprit=None),
}


def measure(text: str):
    """One sweep on the simulated bench (as the runner wires it, without the store)."""
    plan = load_plan_text(text)
    return points_frame(sweep_only(run_spec(plan)).points), {"run_id": "bench", "plan_yaml": plan.source_text}


def main(runs: int) -> None:
    for name, board in BOARDS.items():
        truth, culprit = board["truth"], board["culprit"]
        fields = {k: v for k, v in board.items() if k not in ("truth", "culprit")}
        inside = {k: 0 for k in truth}
        z: list[float] = []
        chi2, named, seconds = [], 0, 0.0
        for seed in range(1, runs + 1):
            frame, metadata = measure(plan_text(seed=seed, **fields))
            t0 = time.perf_counter()
            ex = extract(frame, metadata)
            seconds += time.perf_counter() - t0
            chi2.append(ex.reduced_chi2)
            named += culprit is not None and ex.culprit == culprit
            for key, value in truth.items():
                p = ex.parameter(key)
                inside[key] += p.low <= value <= p.high
                z.append(math.log(value / p.value) / (math.log(p.high / p.value) / ex.coverage_factor))
        print(f"{name}: {runs} seeded sweeps, {len(frame)} points each")
        for key, n in inside.items():
            print(f"  {key}: true value inside the 95 % interval in {n} of {runs} ({100 * n / runs:.1f} %)")
        print(f"  rms (truth - fit) / u: {math.sqrt(np.mean(np.square(z))):.3f}; mean reduced chi-square "
              f"{np.mean(chi2):.3f}; extraction {1000 * seconds / runs:.0f} ms per run")
        if culprit is not None:
            print(f"  likely culprit named {culprit}: {named} of {runs}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100)
