"""Sweep-engine figures on the simulated bench (issue: the main job end to end).

Prints, for a 200-point RC sweep on the simulated clock:
- software overhead per point (engine, autorange, fits, judging), apart from the instrument
  transactions (the simulator's own cost and pyvisa's: everything inside the one transaction
  path, sweeper.instruments.link.Link) and apart from storage (journal fsync + HDF5 append);
- SCPI transactions per point after the first, for each scope dialect;
- planned sweep time against the physical minimum: per point, the settle time the model
  demands for the target uncertainty plus the shortest capture that meets the plan's cycles,
  samples and target uncertainty at the SNR measured there.

Run: .venv/bin/python bench/bench_engine.py
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from sweeper.measure.schedule import samples_for_uncertainty, settle_time_s, time_constants_for_target
from sweeper.plan import load_plan_text
from sweeper.run.runner import execute_run, sweep_only
from sweeper.run.spec import run_spec

REPO = Path(__file__).resolve().parents[1]


def plan_for(scope: str, points: int = 200, settle_cycles: float = 2):
    text = (REPO / "configs" / "rc-antialias.yaml").read_text()
    text = text.replace("points_per_decade: 5", f"points: {points}")
    text = text.replace("settle_cycles: 2", f"settle_cycles: {settle_cycles}")
    text = text.replace("sim-scope-a", scope)
    return load_plan_text(text, str(REPO / "configs" / "bench-engine.yaml"))


def engine_only(plan) -> dict[str, float]:
    """One sweep through the engine with no storage; wall time split into I/O and the rest."""
    spec = run_spec(plan)
    result = sweep_only(spec)
    n = len(result.points)
    per_point = np.diff(result.transactions_after)
    return {
        "points": n,
        "wall_s": result.wall_s,
        "io_s": result.io_s,
        "overhead_ms_per_point": 1e3 * (result.wall_s - result.io_s) / n,
        "transactions_median": float(np.median(per_point)),
        "transactions_mean": float(np.mean(per_point)),
        "sim_seconds": result.bench_s,
        "points_list": result.points,
        "settings": spec.settings,
        "tau": spec.model.slowest_time_constant_s(),
    }


def planned_vs_minimum(plan, result) -> tuple[float, float]:
    """Total planned settle+capture time and the physical minimum, s."""
    s = result["settings"]
    a = plan.acquisition
    tau = result["tau"]
    n_tau = time_constants_for_target(0.0, a.target_gain_db, a.target_phase_deg)
    max_rate = 1e9  # both simulated scopes' fastest rate
    planned = minimum = 0.0
    for p in result["points_list"]:
        planned += settle_time_s(p.frequency_hz, s.settle_s, s.settle_cycles, s.settle_time_constants, tau)
        planned += p.captures * p.samples / p.sample_rate_hz
        snr = min(p.snr_in_db, p.snr_out_db)
        m_u = samples_for_uncertainty(a.target_gain_db, a.target_phase_deg, snr)
        capture_min = max(a.min_cycles / p.frequency_hz, max(a.min_samples, m_u) / max_rate)
        minimum += max(n_tau * tau, a.settle_s) + capture_min
    return planned, minimum


def storage_cost(plan) -> float:
    """Extra wall time per point of the full runner (journal fsync + HDF5 append + catalog), ms."""
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        outcome = execute_run(plan, Path(tmp))
        wall = time.perf_counter() - t0
    return wall, len(outcome.points)


def main() -> None:
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}")
    for scope in ("sim-scope-a", "sim-scope-b"):
        plan = plan_for(scope)
        runs = [engine_only(plan) for _ in range(3)]
        best = min(runs, key=lambda r: r["overhead_ms_per_point"])
        planned, minimum = planned_vs_minimum(plan, best)
        wall_full, n = storage_cost(plan)
        print(f"\n{scope}: {best['points']} points, 10 Hz to 100 kHz, simulated sweep time {best['sim_seconds']:.2f} s")
        print(f"  software overhead per point (engine+fit+judge, no I/O, no storage): "
              f"{statistics.median(r['overhead_ms_per_point'] for r in runs):.3f} ms median of 3 "
              f"(best {best['overhead_ms_per_point']:.3f} ms)")
        print(f"  instrument transactions incl. simulator: {1e3 * best['io_s'] / best['points']:.3f} ms per point")
        print(f"  full run incl. journal fsync, HDF5 and catalog: {1e3 * wall_full / n:.3f} ms per point wall")
        print(f"  SCPI transactions per point after the first: median {best['transactions_median']:.0f}, "
              f"mean {best['transactions_mean']:.2f}")
        print(f"  planned settle+capture {planned:.3f} s vs physical minimum {minimum:.3f} s: "
              f"ratio {planned / minimum:.3f} (demo plan: settle_cycles 2)")
        lean = plan_for(scope, settle_cycles=0)
        lean_run = engine_only(lean)
        planned, minimum = planned_vs_minimum(lean, lean_run)
        print(f"  same with settle_cycles 0 (settling from the model alone): planned {planned:.3f} s vs "
              f"minimum {minimum:.3f} s: ratio {planned / minimum:.3f}")


if __name__ == "__main__":
    main()
