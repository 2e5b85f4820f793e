"""Benchmark: the three measurement modes on the same RC sweep.

Run:  .venv/bin/python bench/bench_modes.py [--socket] [--noise 0.5e-3] [--seed 7]

One RC low-pass (1.6 kOhm, 100 nF, probed by 1 MOhm || 15 pF; corner near 1 kHz), swept 10 Hz
to 100 kHz at 5 points per decade with a 2 Vpp stimulus, measured three ways:

- waveform:      scope A captures both channels and sweeper fits sines to the records;
- scope-measure: scope A reports its own peak-to-peak (max - min) and crossing phase;
- meter:         the gain-phase meter measures ratio and phase itself.

For each mode: the largest |gain error| (dB) and |phase error| (degrees) against
scipy.signal.freqs (the outside reference), answer bytes read per point, transactions per
point, simulated bench time per point (what the instruments would take: acquisitions, meter
integration, settling, 0.5 ms per message) and the computer's wall time per point. Transactions
and bytes count the sweep only (opening the bench and configuring the source are left out).
With --socket the instruments are the loopback SCPI servers, reached through pyvisa-py;
wall time then includes the sockets and the engine's real settling waits, and the bench time is
the served bench's simulated clock (which also advances with the wall clock between messages).
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
from pathlib import Path

import numpy as np
from scipy import signal

from sweeper.plan import load_plan_text
from sweeper.run.runner import sweep_only
from sweeper.run.spec import run_spec, sim_config
from sweeper.sim.demo import demo_plan_text

R_OHM, C_F, RP_OHM, CP_F = 1.6e3, 100e-9, 1e6, 15e-12

MODES = {"waveform": "scope-a", "scope-measure": "scope-a", "meter": "meter"}  # mode -> instrument


def reference(frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB), phase (degrees) of the probed RC from scipy.signal.freqs (handbook divider)."""
    b = [1.0 / R_OHM]
    a = [C_F + CP_F, 1.0 / R_OHM + 1.0 / RP_OHM]
    _, h = signal.freqs(b, a, worN=2 * np.pi * frequency_hz)
    return 20 * np.log10(np.abs(h)), np.degrees(np.angle(h))


def make_plan(mode: str, folder: Path, seed: int, noise_v: float, resources: dict[str, str] | None):
    """The demo RC plan in one mode; on the served bench's sockets when resources are given."""
    instrument = MODES[mode]
    served = {} if resources is None else dict(
        kind="visa", visa_library="@py", source_resource=resources["generator"],
        instrument_resource=resources[instrument])
    text = demo_plan_text(
        name="bench-modes", board="BM-1 benchmark fixture", serial="BM1-0001", mode=mode, instrument=instrument,
        simulation=f"{{seed: {seed}, noise: {noise_v} V}}",
        stimulus="{amplitude: 2 Vpp, load: high-z, max_amplitude: 5 Vpp}",
        sweep="{start: 10 Hz, stop: 100 kHz, points_per_decade: 5}",
        acquisition="{min_cycles: 8, min_samples: 4000, settle_cycles: 2, settle_time_constants: 6, averages: 1, "
                    "max_averages: 8, target_uncertainty: {gain: 0.02 dB, phase: 0.2 deg}}",
        limits="{band: worst-case, allowance: {gain: 0.1 dB, phase: 1 deg}, decision_rule: guarded}", **served)
    return load_plan_text(text, str(folder / f"{mode}.yaml"))


def measure(plan, sim_clock=None) -> dict[str, float]:
    """Run the plan's sweep through the engine; figures per point. sim_clock: the served bench's
    simulated clock (a visa bench runs on the real clock, which says nothing of the instruments)."""
    result = sweep_only(run_spec(plan), clock=sim_clock)
    points = result.points
    n = len(points)
    f = np.array([p.frequency_hz for p in points])
    gain_ref, phase_ref = reference(f)
    gain_err = np.abs(np.array([p.gain_db for p in points]) - gain_ref)
    phase_err = np.abs((np.array([p.phase_deg for p in points]) - phase_ref + 180) % 360 - 180)
    return dict(points=n, gain_err_db=float(gain_err.max()), phase_err_deg=float(phase_err.max()),
                u_gain_db=float(np.median([p.u_gain_db for p in points])),
                u_phase_deg=float(np.median([p.u_phase_deg for p in points])),
                bytes=result.bytes_read / n, transactions=result.transactions / n, bench_s=result.bench_s / n,
                wall_s=result.wall_s / n)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--socket", action="store_true", help="use the loopback SCPI servers through pyvisa-py")
    parser.add_argument("--noise", type=float, default=0.5e-3, help="scope channel noise, V rms")
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args()
    rows = {}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for mode in MODES:
            if args.socket:
                from sweeper.sim.serve import serve_bench

                dut = make_plan(mode, folder, args.seed, args.noise, None)
                with serve_bench(sim_config(dut)) as served:
                    rows[mode] = measure(make_plan(mode, folder, args.seed, args.noise, served.resources),
                                         served.bench.clock)
            else:
                rows[mode] = measure(make_plan(mode, folder, args.seed, args.noise, None))
    where = "loopback SCPI servers via pyvisa-py" if args.socket else "pyvisa-sim bench"
    print(f"RC low-pass 1.6 kOhm / 100 nF, 10 Hz .. 100 kHz, 21 points, noise {args.noise * 1e3:g} mV rms, "
          f"seed {args.seed}, {where}")
    header = (f"{'mode':<14}{'max|dG| dB':>11}{'max|dP| deg':>12}{'med u(G) dB':>12}{'med u(P) deg':>13}"
              f"{'bytes/pt':>10}{'trans/pt':>9}{'bench s/pt':>11}{'wall ms/pt':>11}")
    print(header)
    for mode, r in rows.items():
        print(f"{mode:<14}{r['gain_err_db']:>11.4f}{r['phase_err_deg']:>12.3f}{r['u_gain_db']:>12.4f}"
              f"{r['u_phase_deg']:>13.3f}{r['bytes']:>10.0f}{r['transactions']:>9.1f}{r['bench_s']:>11.3f}"
              f"{r['wall_s'] * 1e3:>11.1f}")
    return 0 if all(math.isfinite(r["gain_err_db"]) for r in rows.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
