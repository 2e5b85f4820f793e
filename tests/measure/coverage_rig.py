"""Coverage of the stated uncertainty against an outside reference, pooled over seeded sweeps.

One probed RC low-pass (1.6 kOhm, 100 nF; 1 MOhm || 15 pF probe), a few points per sweep, on the
simulated bench with realtime off, many seeds. The reference is the handbook divider evaluated
with scipy.signal.freqs at the frequency each point was measured at. Shared by
tests/measure/test_coverage.py and bench/bench_coverage.py.
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import signal

from sweeper.plan import load_plan_text
from sweeper.run.runner import sweep_only
from sweeper.run.spec import run_spec
from sweeper.sim.demo import demo_plan_text

R_OHM, C_F, RP_OHM, CP_F = 1.6e3, 100e-9, 1e6, 15e-12


def reference(frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB), phase (degrees) of the probed RC from scipy.signal.freqs (handbook divider)."""
    _, h = signal.freqs([1.0 / R_OHM], [C_F + CP_F, 1.0 / R_OHM + 1.0 / RP_OHM], worN=2 * np.pi * frequency_hz)
    return 20 * np.log10(np.abs(h)), np.degrees(np.angle(h))


@dataclass
class Coverage:
    """Pooled normalised errors: err / u and err / U of gain and phase, every point of every sweep."""

    z: np.ndarray  # err / u
    w: np.ndarray  # err / U

    @property
    def values(self) -> int:
        return int(self.z.size)

    @property
    def inside(self) -> float:
        """Fraction of errors within U."""
        return float(np.mean(np.abs(self.w) <= 1.0))

    @property
    def rms_z(self) -> float:
        return float(np.sqrt(np.mean(self.z**2)))


def coverage(mode: str, instrument: str, range_noise_pct: float, seeds: range, *, noise_v: float = 0.0,
             points: int = 5, averages: int = 1, max_averages: int = 4) -> Coverage:
    """Run one seeded sweep per seed; pool err/u and err/U of gain and phase."""
    z: list[float] = []
    w: list[float] = []
    with tempfile.TemporaryDirectory() as tmp:
        for seed in seeds:
            text = demo_plan_text(
                name="coverage", board="CV-1 coverage fixture", serial="CV1-0001", mode=mode, instrument=instrument,
                simulation=f"{{seed: {seed}, noise: {noise_v} V, range_noise: {range_noise_pct} %, transient: false}}",
                stimulus="{amplitude: 2 Vpp, load: high-z, max_amplitude: 5 Vpp}",
                sweep=f"{{start: 150 Hz, stop: 15 kHz, points: {points}, spacing: log}}",
                acquisition=f"{{min_cycles: 8, min_samples: 2000, settle_cycles: 2, settle_time_constants: 6, "
                            f"averages: {averages}, max_averages: {max_averages}}}",
                limits="{band: worst-case, allowance: {gain: 0.1 dB, phase: 1 deg}, decision_rule: guarded}")
            plan = load_plan_text(text, str(Path(tmp) / f"cv-{seed}.yaml"))
            for p in sweep_only(run_spec(plan)).points:
                g, ph = reference(np.array([p.frequency_hz]))
                eg = p.gain_db - float(g[0])
                ep = (p.phase_deg - float(ph[0]) + 180.0) % 360.0 - 180.0
                z += [eg / p.u_gain_db, ep / p.u_phase_deg]
                w += [eg / p.expanded_u_gain_db, ep / p.expanded_u_phase_deg]
    return Coverage(np.array(z), np.array(w))
