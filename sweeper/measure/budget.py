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


def quantisation_bias_u(amplitude_v: float, full_scale_v: float, bits: int) -> float:
    """Standard uncertainty, as a fraction of the amplitude, of a fitted amplitude's (or, in
    radians, a fitted phase's) systematic error from an undithered ideal converter, when the
    record visits its phases evenly (the engine's incoherent frequency).

    The rounding error of a sine of amplitude A (in steps q) has a fundamental component
    2 q sum_n J1(2 pi n A / q) / (pi n) (the Fourier-Bessel series of the sawtooth error; a
    textbook result, quoted from memory). Over the unknown fraction of a step at which A falls,
    J1(x) has rms 1 / sqrt(pi x) for large x, so the error's rms is
    (2 q / pi) sqrt(zeta(3) / (2 pi^2 A / q)) = 0.157 q / sqrt(A / q): relative 0.157 (q / A)^1.5
    (a type B evaluation, GUM 4.3: the error is fixed for one amplitude, unknown between them).
    """
    if not (amplitude_v > 0 and full_scale_v > 0 and bits > 0):
        return 0.0
    a_steps = float(amplitude_v) / (float(full_scale_v) / 2.0 ** int(bits))
    return 0.157 / max(a_steps, 1.0) ** 1.5


def converter_u(amplitude_v: float, full_scale_v: float, bits: int, noise_rms_v: float,
                nonlinearity_lsb: float = 0.0) -> float:
    """Type B relative standard uncertainty of a fitted amplitude (and, in radians, of a fitted
    phase) from the converter: the quantisation bias, shrunk where the channel's own noise
    dithers the converter, and integral nonlinearity (rectangular, GUM 4.3.7: u = a / sqrt 3).

    Noise of rms sigma smooths the rounding error's harmonics by exp(-2 (pi sigma / q)^2)
    (the characteristic function of Gaussian dither; Widrow's quantisation theorem, from
    memory). noise_rms_v: the channel's noise rms, V (it includes the rounding error itself,
    q / sqrt 12, of which only the excess dithers). The simulated converters are ideal and the
    driver files state no nonlinearity, so nonlinearity_lsb defaults to 0.
    """
    if not (amplitude_v > 0 and full_scale_v > 0 and bits > 0):
        return 0.0
    q = float(full_scale_v) / 2.0 ** int(bits)
    sigma = math.sqrt(max(float(noise_rms_v) ** 2 - q * q / 12.0, 0.0)) if math.isfinite(noise_rms_v) else 0.0
    dither = math.exp(-2.0 * (math.pi * sigma / q) ** 2)
    bias = quantisation_bias_u(amplitude_v, full_scale_v, bits) * dither
    nonlinear = nonlinearity_lsb * q / float(amplitude_v) / math.sqrt(3.0)
    return math.hypot(bias, nonlinear)


def random_noise_fraction(noise_rms_v: float, full_scale_v: float, bits: int) -> float:
    """The part (ratio of rms values) of a fit's residual noise that varies from capture to
    capture: analog noise sigma_a plus the rounding error only as far as that noise decorrelates
    it, sigma_eff^2 = sigma_a^2 + (q^2 / 12) (1 - d), d = exp(-2 (pi sigma_a / q)^2) (Widrow's
    quantisation theorem, from memory: with sigma_a >> q rounding is white noise of q^2 / 12;
    with sigma_a << q it is a fixed function of the signal, whose fundamental part is the bias
    of `quantisation_bias_u` and whose rest leaves the fit). noise_rms_v: the residual rms, V."""
    if not (full_scale_v > 0 and bits > 0 and noise_rms_v > 0 and math.isfinite(noise_rms_v)):
        return 1.0
    q = float(full_scale_v) / 2.0 ** int(bits)
    total = float(noise_rms_v) ** 2
    analog = max(total - q * q / 12.0, 0.0)
    d = math.exp(-2.0 * math.pi**2 * analog / (q * q))
    effective = analog + q * q / 12.0 * (1.0 - d)
    return min(math.sqrt(effective / total), 1.0)


def gain_frequency_u_db(slope_db_per_hz: float, u_frequency_hz: float) -> float:
    """Standard uncertainty (dB) from the frequency's uncertainty: |dG/df| u(f) (GUM 5.1.3)."""
    return abs(float(slope_db_per_hz)) * float(u_frequency_hz)


__all__ = [
    "DEFAULT_COVERAGE_PROBABILITY",
    "combined_u",
    "converter_u",
    "gain_frequency_u_db",
    "quantisation_bias_u",
    "quantisation_u_v",
    "random_noise_fraction",
    "student_k",
    "welch_satterthwaite",
]
