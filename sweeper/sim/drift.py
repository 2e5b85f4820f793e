"""Slow drift of the simulated DUT with bench time: a warm-up plus a linear drift.

Closed form, with t the bench time in s (how long the bench has been on, see
`SimConfig.bench_age_s`) and tau the warm-up time constant:

    gain factor  g(t)   = 1 + w (1 - exp(-t / tau)) + r t / 3600
    phase change phi(t) = w_phase (1 - exp(-t / tau)) + r_phase t / 3600      (degrees)

w and w_phase are what the warm-up adds once complete, r and r_phase the drift per hour.
The DUT output node carries H g(t) exp(j phi(t)): the measured gain moves by
20 log10 g(t) dB and the phase by phi(t) degrees. A record is short against tau, so one
acquisition sees the drift at its start only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

SECONDS_PER_HOUR = 3600.0


@dataclass(frozen=True)
class Drift:
    """Warm-up and drift of the DUT's gain (fractions) and phase (degrees); all zero = none."""

    warmup_frac: float = 0.0  # gain change the warm-up adds once complete, fraction (0.002 = +0.2 %)
    warmup_time_s: float = 0.0  # warm-up time constant, s (0: the warm-up is complete at once)
    per_hour_frac: float = 0.0  # linear gain drift, fraction per hour
    warmup_phase_deg: float = 0.0  # phase change the warm-up adds once complete, degrees
    phase_per_hour_deg: float = 0.0  # linear phase drift, degrees per hour

    def __post_init__(self) -> None:
        values = (self.warmup_frac, self.warmup_time_s, self.per_hour_frac, self.warmup_phase_deg,
                  self.phase_per_hour_deg)
        if not all(math.isfinite(v) for v in values) or self.warmup_time_s < 0:
            raise ValueError(f"drift: given {self}, expected finite values and a warm-up time >= 0 s")


def warmed_fraction(drift: Drift, bench_time_s: float) -> float:
    """How far the warm-up has come at a bench time: 1 - exp(-t / tau) (1 when tau is 0)."""
    if drift.warmup_time_s == 0:
        return 1.0
    return -math.expm1(-max(bench_time_s, 0.0) / drift.warmup_time_s)


def gain_factor(drift: Drift, bench_time_s: float) -> float:
    """g(t) of the module docstring: the DUT's gain relative to its cold, undrifted value."""
    hours = bench_time_s / SECONDS_PER_HOUR
    return 1.0 + drift.warmup_frac * warmed_fraction(drift, bench_time_s) + drift.per_hour_frac * hours


def phase_change_deg(drift: Drift, bench_time_s: float) -> float:
    """phi(t) of the module docstring, degrees."""
    hours = bench_time_s / SECONDS_PER_HOUR
    return drift.warmup_phase_deg * warmed_fraction(drift, bench_time_s) + drift.phase_per_hour_deg * hours


def output_factor(drift: Drift | None, bench_time_s: float) -> complex:
    """The complex factor g(t) exp(j phi(t)) on the DUT output node (1 without drift)."""
    if drift is None:
        return 1.0 + 0.0j
    phase_rad = math.radians(phase_change_deg(drift, bench_time_s))
    return gain_factor(drift, bench_time_s) * complex(math.cos(phase_rad), math.sin(phase_rad))
