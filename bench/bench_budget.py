"""Benchmark: the per-point uncertainty budget and its coverage, per mode.

Run:  .venv/bin/python bench/bench_budget.py [--seeds 100]

1. A worked budget: one RC low-pass point (1.6 kOhm, 100 nF, probed; 4.74 kHz, one capture, 2000
   samples, scope A, 8-bit) at about 40 and about 60 dB SNR of analog noise: each component
   (type A; type B converter quantisation), the combined u, nu_eff, k and U, and the error
   against scipy.signal.freqs.
2. Coverage pooled over seeded sweeps (5 points each, gain and phase): the fraction of errors
   within U and rms(err / u), waveform mode on both dialects at about 40 and 60 dB, noise-free,
   meter mode (20 readings) and scope-measure mode.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "measure"))
from coverage_rig import coverage, reference  # noqa: E402

from sweeper.plan import load_plan_text  # noqa: E402
from sweeper.run.runner import sweep_only  # noqa: E402
from sweeper.run.spec import run_spec  # noqa: E402
from sweeper.sim.demo import demo_plan_text  # noqa: E402


def worked(range_noise_pct: float) -> None:
    text = demo_plan_text(simulation=f"{{seed: 1, noise: 0 V, range_noise: {range_noise_pct} %, transient: false}}",
                          sweep="{frequencies: [4.74 kHz]}", acquisition="{min_samples: 2000, averages: 1}")
    p = sweep_only(run_spec(load_plan_text(text, "budget.yaml"))).points[0]
    g, ph = reference(np.array([p.frequency_hz]))
    print(f"  range noise {range_noise_pct} % FS (SNR of the fit {p.snr_out_db:.0f} dB, output "
          f"{p.amplitude_out_v * 1e3:.0f} mV on a {p.range_out_v:.2f} V span):")
    print(f"    gain : type A {p.u_gain_type_a_db:.5f} dB, converter {p.u_gain_converter_db:.5f} dB -> "
          f"u {p.u_gain_db:.5f} dB, nu_eff {p.dof_eff_gain:.3g}, k {p.k_gain:.3f}, U {p.expanded_u_gain_db:.5f} dB; "
          f"error {p.gain_db - g[0]:+.5f} dB")
    print(f"    phase: type A {p.u_phase_type_a_deg:.5f} deg, converter {p.u_phase_converter_deg:.5f} deg -> "
          f"u {p.u_phase_deg:.5f} deg, k {p.k_phase:.3f}, U {p.expanded_u_phase_deg:.5f} deg; "
          f"error {(p.phase_deg - ph[0] + 180) % 360 - 180:+.5f} deg")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=100)
    args = parser.parse_args()
    print("Worked budget, RC low-pass at 4.74 kHz, scope A:")
    for noise in (0.25, 0.025):
        worked(noise)
    seeds = range(args.seeds)
    print(f"\nCoverage, {args.seeds} seeded sweeps x 5 points x (gain, phase):")
    print(f"{'case':<34}{'values':>7}{'within U':>10}{'rms(err/u)':>12}")
    cases = [
        ("waveform scope-a ~40 dB", ("waveform", "scope-a", 0.25), {}),
        ("waveform scope-b ~40 dB", ("waveform", "scope-b", 0.25), {}),
        ("waveform scope-a ~60 dB", ("waveform", "scope-a", 0.025), {}),
        ("waveform scope-b ~60 dB", ("waveform", "scope-b", 0.025), {}),
        ("waveform scope-a noise-free", ("waveform", "scope-a", 0.0), {}),
        ("meter, 20 readings", ("meter", "meter", 0.0), dict(noise_v=2e-3, averages=20, max_averages=20)),
        ("scope-measure scope-a ~40 dB", ("scope-measure", "scope-a", 0.25), {}),
    ]
    for name, pos, kw in cases:
        c = coverage(*pos, seeds, **kw)
        print(f"{name:<34}{c.values:>7}{c.inside:>10.3f}{c.rms_z:>12.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
