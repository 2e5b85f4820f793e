"""Benchmark: statistical efficiency of gain and phase from two noisy channels.

Run:  /tmp/venv/bin/python bench/bench_efficiency.py [--trials 2000]

Both channels of a simulated capture carry white Gaussian noise of the same sigma: channel 1
the DUT input (A_in = 1 V), channel 2 its output (A_out = 0.5 V, -6.02 dB, lagging 60 deg).
SNR is that of the input channel, (A_in^2 / 2) / sigma^2, at 20, 40 and 60 dB. For each SNR
the trials are fitted with `fit_sine` and turned into gain and phase with `gain_phase`; the
table shows the measured variance over the dual-channel Cramer-Rao bound (1.00 = efficient)
and the mean reported standard uncertainty over the measured standard deviation.

Dual-channel bound, derived from the single-channel ones. For one channel with M samples and
noise sigma (Andersson and Handel, three-parameter IEEE Std 1057 fit),
var(A) >= 2 sigma^2 / M and var(phi) >= 2 sigma^2 / (A^2 M), and for a whole number of cycles
(or many cycles) A and phi are uncoupled in the Fisher information. The two channels' noises
are independent, so the Fisher information of (A_in, phi_in, A_out, phi_out) is block diagonal
and its inverse holds the single-channel bounds. For a function g of the parameters the bound
is grad(g) I^-1 grad(g)^T (transformation of parameters, e.g. Kay, Fundamentals of Statistical
Signal Processing vol. I, ch. 3, cited from memory), and with the off-diagonal blocks zero it
is the sum of the channels' terms:
  gain_db = 20 log10(A_out / A_in):
    var >= (20 / ln 10)^2 (var(A_in) / A_in^2 + var(A_out) / A_out^2)
        = (20 / ln 10)^2 (2 sigma^2 / M) (1 / A_in^2 + 1 / A_out^2)   [dB^2]
  phase = phi_out - phi_in:
    var >= var(phi_in) + var(phi_out) = (2 sigma^2 / M) (1 / A_in^2 + 1 / A_out^2)   [rad^2]
"""

from __future__ import annotations

import argparse
import math

import numpy as np

from sweeper.measure.gainphase import gain_phase
from sweeper.measure.sinefit import fit_sine

SAMPLES = 4096
SAMPLE_INTERVAL_S = 1e-6
CYCLES = 40.3  # not a whole number: the usual case on a bench
AMPLITUDE_IN_V = 1.0
AMPLITUDE_OUT_V = 0.5
LAG_DEG = -60.0
SNRS_DB = (20.0, 40.0, 60.0)


def dual_channel_bounds(sigma_v: float) -> tuple[float, float]:
    """Cramer-Rao bounds on var(gain_db) (dB^2) and var(phase) (deg^2); see the module docstring."""
    per_channel = 2 * sigma_v**2 / SAMPLES * (1 / AMPLITUDE_IN_V**2 + 1 / AMPLITUDE_OUT_V**2)
    return (20 / math.log(10)) ** 2 * per_channel, math.degrees(1.0) ** 2 * per_channel


def run(snr_db: float, trials: int, rng: np.random.Generator) -> dict[str, float]:
    sigma_v = math.sqrt(AMPLITUDE_IN_V**2 / 2 / 10 ** (snr_db / 10))
    frequency_hz = CYCLES / (SAMPLES * SAMPLE_INTERVAL_S)
    angle = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S * np.arange(SAMPLES)
    lag_rad = math.radians(LAG_DEG)
    clean = np.stack([AMPLITUDE_IN_V * np.cos(angle + 0.5), AMPLITUDE_OUT_V * np.cos(angle + 0.5 + lag_rad)])
    volts = clean[None] + sigma_v * rng.standard_normal((trials, 2, SAMPLES))
    fits = fit_sine(volts.reshape(2 * trials, SAMPLES), frequency_hz, SAMPLE_INTERVAL_S)
    results = [gain_phase(fits[2 * i], fits[2 * i + 1]) for i in range(trials)]
    gains = np.array([r.gain_db for r in results])
    phases = np.array([r.phase_deg for r in results])
    bound_gain, bound_phase = dual_channel_bounds(sigma_v)
    return {
        "snr_db": snr_db,
        "gain_ratio": float(gains.var(ddof=1) / bound_gain),
        "phase_ratio": float(phases.var(ddof=1) / bound_phase),
        "u_gain_ratio": float(np.mean([r.u_gain_db for r in results]) / gains.std(ddof=1)),
        "u_phase_ratio": float(np.mean([r.u_phase_deg for r in results]) / phases.std(ddof=1)),
        "std_gain_db": float(gains.std(ddof=1)),
        "std_phase_deg": float(phases.std(ddof=1)),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=2000)
    parser.add_argument("--seed", type=int, default=1057)
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    relative_sd = math.sqrt(2 / (args.trials - 1))
    print(f"{args.trials} trials, {SAMPLES} samples, {CYCLES} cycles; "
          f"a variance ratio is known to +-{relative_sd:.1%} (1 sd)")
    header = (
        f"{'SNR dB':>7} {'var(gain)/CRB':>14} {'var(phase)/CRB':>15} {'u/sd gain':>10} {'u/sd phase':>11}"
        f" {'sd gain dB':>11} {'sd phase deg':>13}"
    )
    print(header)
    for snr_db in SNRS_DB:
        row = run(snr_db, args.trials, rng)
        print(
            f"{row['snr_db']:7.0f} {row['gain_ratio']:14.3f} {row['phase_ratio']:15.3f} "
            f"{row['u_gain_ratio']:10.3f} {row['u_phase_ratio']:11.3f} "
            f"{row['std_gain_db']:11.2e} {row['std_phase_deg']:13.2e}"
        )


if __name__ == "__main__":
    main()
