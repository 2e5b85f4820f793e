"""Per-point uncertainty budget (JCGM 100:2008, the GUM): pure functions, no I/O.

Components are standard uncertainties (k = 1) in the quantity's own unit (dB or degrees), each
with its degrees of freedom (math.inf for a type B value taken as exactly known, GUM G.4.2).
They combine in quadrature (uncorrelated inputs, GUM 5.1.2); the effective degrees of freedom
follow Welch-Satterthwaite (GUM G.4.1, eq. G.2b); the coverage factor is Student's t at the
coverage probability for those degrees of freedom (GUM G.3, table G.2).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from scipy import stats

#: Coverage probability of the expanded uncertainty when a plan gives none (GUM 6.2.2: 95 %).
DEFAULT_COVERAGE_PROBABILITY = 0.95

_DB_PER_NEPER = 20.0 / math.log(10.0)


def combined_u(components: Sequence[float]) -> float:
    """Combined standard uncertainty of uncorrelated components (root sum of squares), same unit."""
    return math.sqrt(sum(float(u) ** 2 for u in components if math.isfinite(u)))


def welch_satterthwaite(components: Sequence[float], dofs: Sequence[float]) -> float:
    """Effective degrees of freedom nu_eff = u_c^4 / sum(u_i^4 / nu_i) (GUM G.4.1, eq. G.2b).

    components: standard uncertainties u_i (same unit); dofs: their degrees of freedom nu_i
    (math.inf for exactly known type B values). math.inf when every finite-nu term is zero.
    """
    uc = combined_u(components)
    denominator = 0.0
    for u, nu in zip(components, dofs, strict=True):
        if math.isfinite(u) and u > 0 and math.isfinite(nu):
            denominator += u**4 / max(float(nu), 1.0)
    if denominator == 0.0:
        return math.inf
    return uc**4 / denominator


def student_k(dof: float, probability: float = DEFAULT_COVERAGE_PROBABILITY) -> float:
    """Coverage factor k = t_p(nu): the two-sided Student's t quantile for probability p and nu
    degrees of freedom (GUM G.3, table G.2); the normal quantile when nu is infinite or NaN."""
    if not 0.0 < probability < 1.0:
        raise ValueError(f"coverage probability {probability!r} must lie strictly between 0 and 1")
    q = 0.5 * (1.0 + probability)
    if not math.isfinite(dof):
        return float(stats.norm.ppf(q))
    return float(stats.t.ppf(q, max(float(dof), 1.0)))


def quantisation_u_v(full_scale_v: float, bits: int) -> float:
    """Standard uncertainty of one sample from an ideal converter's rounding, V: the step
    q = full scale / 2^bits over sqrt(12) (uniform distribution, GUM 4.3.7; IEEE Std 1057)."""
    return float(full_scale_v) / (2.0 ** int(bits)) / math.sqrt(12.0)


def amplitude_bias_u_db(amplitude_v: float, full_scale_v: float, bits: int, nonlinearity_lsb: float,
                        captures: int) -> float:
    """Type B standard uncertainty (dB) of a fitted amplitude from the converter's systematic
    error: rounding that is correlated with the signal (no dither) plus integral nonlinearity.

    An undithered converter's rounding error is a deterministic function of the waveform; its
    projection on the fundamental is bounded by about half a step (q/2) and, treated as a
    rectangular distribution, has u = q / (2 sqrt 3) (GUM 4.3.7). Captures at independent trigger
    phases sample different code transitions, so the bias averages down as 1/sqrt(captures).
    The nonlinearity term is nonlinearity_lsb steps, rectangular, and is not reduced by averaging.
    amplitude_v: fitted peak amplitude, V; full_scale_v: range span, V.
    """
    if not (amplitude_v > 0 and full_scale_v > 0 and bits > 0):
        return 0.0
    q = float(full_scale_v) / (2.0 ** int(bits))
    rounding = q / (2.0 * math.sqrt(3.0)) / math.sqrt(max(int(captures), 1))
    nonlinear = nonlinearity_lsb * q / math.sqrt(3.0)
    return _DB_PER_NEPER * math.hypot(rounding, nonlinear) / float(amplitude_v)


def gain_frequency_u_db(slope_db_per_hz: float, u_frequency_hz: float) -> float:
    """Standard uncertainty (dB) from the frequency's uncertainty: |dG/df| u(f) (GUM 5.1.3)."""
    return abs(float(slope_db_per_hz)) * float(u_frequency_hz)


__all__ = [
    "DEFAULT_COVERAGE_PROBABILITY",
    "amplitude_bias_u_db",
    "combined_u",
    "gain_frequency_u_db",
    "quantisation_u_v",
    "student_k",
    "welch_satterthwaite",
]
