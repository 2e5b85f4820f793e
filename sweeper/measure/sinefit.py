"""Least-squares sine fits to sampled records (IEEE Std 1057 three- and four-parameter fits).

Model, with t = n dt from the first sample (n = 0..N-1):

    x(t) = A cos(2 pi f t + phi) + C = a cos(theta n) + b sin(theta n) + C,

theta = 2 pi f dt (rad/sample), a = A cos(phi), b = -A sin(phi). A is the peak amplitude (V),
phi is reported in degrees wrapped to (-180, 180].

The fit never builds a full-length waveform. All it needs are the sums of the record against
cos/sin of the fundamental and its harmonics (one blocked matrix product, see `blocksum`), the
record energy sum x^2, and the Gram matrix of the basis, whose entries are Dirichlet-kernel
sums sum_n exp(j k theta n) evaluated in O(sqrt(N)). The residual energy comes from the
least-squares energy identity ||x - D p||^2 = ||x||^2 - p^T D^T x, so its floor is set by
rounding of ||x||^2: residuals below about 1e-8 of the signal rms (SNR above about 150 dB) are
not resolved, and a large offset raises that floor in proportion to (C/A)^2.

Pure numerics on numpy arrays: no I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from sweeper.measure.blocksum import Projections, power_sums, project
from sweeper.measure.phasewrap import wrap_phase_deg

THD_FLOOR_DB = -300.0  # reported THD when no harmonic power is found or none can be fitted
SNR_CEILING_DB = 300.0  # reported SNR when the residual noise power is zero
MIN_SAMPLES = 4  # three parameters plus at least one degree of freedom for the noise
_MAX_CONDITION = 1e12  # of the unit-diagonal Gram matrix of [cos, sin, 1]
_PSEUDO_INVERSE_CUTOFF = 1e-13  # relative eigenvalue below which a direction is dropped


@dataclass(frozen=True)
class SineFit:
    """Result of a sine fit to one channel.

    frequency_hz: frequency used (three-parameter) or refined (four-parameter), Hz.
    amplitude_v: peak amplitude A, V. phase_deg: phi at the first sample, degrees, (-180, 180].
    offset_v: C, V. residual_rms_v: rms of x minus the fitted sine and offset, V.
    u_*: standard uncertainties (k = 1) from the least-squares covariance, same units.
    thd_db: power of harmonics 2..H over the fundamental, dB (THD_FLOOR_DB when none).
    snr_db: fundamental power A^2/2 over the residual noise power per sample, with the
    fitted harmonics removed from the residual, dB. samples: record length N.
    u_frequency_hz: standard uncertainty of frequency_hz, Hz; 0 when it was given (known).
    """

    frequency_hz: float
    amplitude_v: float
    phase_deg: float
    offset_v: float
    residual_rms_v: float
    u_amplitude_v: float
    u_phase_deg: float
    u_offset_v: float
    thd_db: float
    snr_db: float
    samples: int
    u_frequency_hz: float = 0.0


class ConvergenceError(RuntimeError):
    """The four-parameter iteration did not settle within its iteration limit."""


def _as_rows(volts: np.ndarray) -> np.ndarray:
    """Volts as a float64 (C, N) array; checks shape and length."""
    rows = np.ascontiguousarray(volts, dtype=np.float64)
    if rows.ndim == 1:
        rows = rows[None, :]
    if rows.ndim != 2:
        raise ValueError(f"volts must have shape (N,) or (C, N), got shape {np.shape(volts)}")
    if rows.shape[0] < 1:
        raise ValueError("volts has no channels")
    if rows.shape[1] < MIN_SAMPLES:
        raise ValueError(f"a sine fit needs at least {MIN_SAMPLES} samples, got {rows.shape[1]}")
    return rows


def _angle_per_sample(frequency_hz: float, sample_interval_s: float) -> float:
    """theta = 2 pi f dt (rad/sample); rejects non-positive values and f at or above Nyquist."""
    if not (math.isfinite(sample_interval_s) and sample_interval_s > 0.0):
        raise ValueError(f"sample_interval_s must be positive, got {sample_interval_s}")
    if not (math.isfinite(frequency_hz) and frequency_hz > 0.0):
        raise ValueError(f"frequency_hz must be positive, got {frequency_hz}")
    cycles = frequency_hz * sample_interval_s
    if cycles >= 0.5:
        nyquist_hz = 0.5 / sample_interval_s
        raise ValueError(f"frequency {frequency_hz:g} Hz is at or above the Nyquist frequency {nyquist_hz:g} Hz")
    return 2.0 * math.pi * cycles


def _harmonic_count(theta: float, harmonics: int, samples: int) -> int:
    """Highest harmonic order to fit: at most `harmonics`, below Nyquist, and leaving at least
    one degree of freedom for the noise (2 H + 1 parameters < N)."""
    if isinstance(harmonics, bool) or int(harmonics) != harmonics or harmonics < 1:
        raise ValueError(f"harmonics must be an integer >= 1, got {harmonics}")
    below_nyquist = int(math.ceil(math.pi / theta)) - 1
    room = (samples - 2) // 2
    return max(1, min(int(harmonics), below_nyquist, room))


def _columns(count: int) -> tuple[np.ndarray, np.ndarray]:
    """Harmonic order and sin flag of each basis column: [cos 1, sin 1, 1, cos 2, sin 2, ...]."""
    order = [1, 1, 0] + [k for k in range(2, count + 1) for _ in (0, 1)]
    is_sin = [False, True, False] + [s for _ in range(2, count + 1) for s in (False, True)]
    return np.array(order), np.array(is_sin)


def _gram(samples: int, theta: float, count: int) -> np.ndarray:
    """Gram matrix D^T D of the basis of `_columns(count)` over n = 0..N-1, from the sums
    S(m theta) = sum_n exp(j m theta n) and the product-to-sum identities."""
    sums = power_sums(samples, theta * np.arange(2 * count + 1), 0)
    order, is_sin = _columns(count)
    diff = order[:, None] - order[None, :]
    s_diff = np.where(diff >= 0, sums[np.abs(diff)], np.conj(sums[np.abs(diff)]))
    s_sum = sums[order[:, None] + order[None, :]]
    sin_i = is_sin[:, None]
    sin_j = is_sin[None, :]
    cos_cos = 0.5 * (s_diff.real + s_sum.real)
    sin_sin = 0.5 * (s_diff.real - s_sum.real)
    cos_sin = 0.5 * (s_sum.imag - s_diff.imag)  # row cos, column sin
    sin_cos = 0.5 * (s_sum.imag + s_diff.imag)  # row sin, column cos
    return np.where(sin_i, np.where(sin_j, sin_sin, sin_cos), np.where(sin_j, cos_sin, cos_cos))


def _rhs(total: np.ndarray, exp: np.ndarray, count: int) -> np.ndarray:
    """D^T x per channel, columns ordered as `_columns(count)`; shape (C, 2 count + 1)."""
    parts = [exp[:, 0].real, exp[:, 0].imag, total]
    for k in range(1, count):
        parts += [exp[:, k].real, exp[:, k].imag]
    return np.stack(parts, axis=1)


def _inverse(gram: np.ndarray, strict: bool = True) -> np.ndarray:
    """Inverse of a symmetric Gram matrix through the eigen-decomposition of its unit-diagonal
    (Jacobi-scaled) form. strict: refuse a numerically singular matrix (too few cycles) with
    ValueError; otherwise return the pseudo-inverse (min-norm least squares)."""
    scale = np.sqrt(np.diag(gram))
    unit = gram / np.outer(scale, scale)
    values, vectors = np.linalg.eigh(unit)
    largest = values[-1]
    if strict:
        if not values[0] * _MAX_CONDITION > largest:
            condition = largest / values[0] if values[0] > 0 else math.inf
            raise ValueError(
                f"sine fit is ill-conditioned (condition number {condition:.3g}): the record holds "
                "too few cycles to separate the sine from the offset"
            )
        keep = np.ones(values.size, dtype=bool)
    else:
        keep = values > largest * _PSEUDO_INVERSE_CUTOFF
    kept = vectors[:, keep]
    return ((kept / values[keep]) @ kept.T) / np.outer(scale, scale)


def _checked_energy(proj: Projections) -> np.ndarray:
    """sum x^2 per row (V^2) from projections taken with_energy; rejects non-finite samples."""
    energy = proj.energy
    if energy is None or not np.all(np.isfinite(energy)) or not np.all(np.isfinite(proj.total)):
        raise ValueError("volts contains non-finite samples (nan or inf)")
    return energy


def _db(ratio: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 10.0 * np.log10(ratio)


def _summarise(
    rows: np.ndarray,
    frequency_hz: float,
    sample_interval_s: float,
    harmonics: int,
    four_parameter: tuple[float, float] | None = None,
) -> list[SineFit]:
    """Fit [cos, sin, 1] (IEEE Std 1057 three-parameter) and, for the diagnostics, the joint
    model with harmonics 2..H at frequency_hz; `four_parameter` = (a, b) switches the covariance
    to the four-parameter one (frequency estimated)."""
    samples = rows.shape[1]
    theta = _angle_per_sample(frequency_hz, sample_interval_s)
    count = _harmonic_count(theta, harmonics, samples)
    proj = project(rows, theta, count, with_energy=True)
    energy = _checked_energy(proj)
    gram = _gram(samples, theta, count)
    rhs = _rhs(proj.total, proj.exp, count)

    inverse3 = _inverse(gram[:3, :3])
    coef3 = rhs[:, :3] @ inverse3  # inverse3 is symmetric
    a, b, offset = coef3[:, 0], coef3[:, 1], coef3[:, 2]
    residual3 = np.maximum(energy - np.einsum("cp,cp->c", coef3, rhs[:, :3]), 0.0)

    # Joint fit with the harmonics: by the Frisch-Waugh-Lovell theorem its harmonic coefficients
    # are the projection of the three-parameter residual onto the harmonic columns (made
    # orthogonal to [cos, sin, 1]), so leakage between non-integer-cycle components is handled.
    coef = rhs @ _inverse(gram, strict=False) if count > 1 else coef3
    parameters = gram.shape[0]
    dof = samples - parameters
    covariance = inverse3
    u_theta_unit = 0.0
    if four_parameter is not None:
        dof -= 1
        covariance, u_theta_unit = _four_parameter_covariance(samples, theta, *four_parameter)
    residual = np.maximum(energy - np.einsum("cp,cp->c", coef, rhs), 0.0)
    noise_var = residual / max(dof, 1)

    amplitude = np.hypot(a, b)
    phase = np.arctan2(-b, a)
    with np.errstate(divide="ignore", invalid="ignore"):
        g_aa, g_ab, g_bb = covariance[0, 0], covariance[0, 1], covariance[1, 1]
        var_amplitude = noise_var * (a * a * g_aa + 2 * a * b * g_ab + b * b * g_bb) / amplitude**2
        var_phase = noise_var * (b * b * g_aa - 2 * a * b * g_ab + a * a * g_bb) / amplitude**4
        var_amplitude = np.where(amplitude > 0, var_amplitude, noise_var * 0.5 * (g_aa + g_bb))
        var_phase = np.where(amplitude > 0, var_phase, np.inf)

    fundamental = coef[:, 0] ** 2 + coef[:, 1] ** 2
    harmonic_power = (coef[:, 3:] ** 2).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        thd = np.where(count > 1, _db(np.maximum(harmonic_power / fundamental, 1e-30)), THD_FLOOR_DB)
        snr = np.where(noise_var > 0, _db(0.5 * fundamental / noise_var), SNR_CEILING_DB)
    snr = np.minimum(snr, SNR_CEILING_DB)
    u_frequency_hz = math.sqrt(u_theta_unit) / (2.0 * math.pi * sample_interval_s)
    phase_deg = wrap_phase_deg(np.degrees(phase))
    return [
        SineFit(
            frequency_hz=frequency_hz,
            amplitude_v=float(amplitude[c]),
            phase_deg=float(phase_deg[c]),
            offset_v=float(offset[c]),
            residual_rms_v=float(math.sqrt(residual3[c] / samples)),
            u_amplitude_v=float(np.sqrt(var_amplitude[c])),
            u_phase_deg=float(np.degrees(np.sqrt(var_phase[c]))),
            u_offset_v=float(np.sqrt(noise_var[c] * covariance[2, 2])),
            thd_db=float(thd[c]),
            snr_db=float(snr[c]),
            samples=samples,
            u_frequency_hz=float(u_frequency_hz * np.sqrt(noise_var[c])),
        )
        for c in range(rows.shape[0])
    ]


def fit_sine(
    volts: np.ndarray, frequency_hz: float, sample_interval_s: float, harmonics: int = 5
) -> list[SineFit]:
    """IEEE Std 1057 three-parameter least-squares sine fit at a known frequency, per channel.

    volts: shape (N,) or (C, N), V; frequency_hz: the known frequency, Hz, below Nyquist;
    sample_interval_s: s; harmonics: highest harmonic order H for THD and for the noise
    estimate (orders at or above Nyquist are skipped). Returns one SineFit per row.

    Uncertainties are sigma^2 G^-1 of the [cos, sin, 1] fit mapped to amplitude and phase, with
    sigma^2 the residual noise variance after the fundamental, offset and harmonics 2..H are
    removed (unbiased: divided by N minus the number of fitted parameters). For white noise this
    matches the Cramer-Rao bound u(A) = sigma sqrt(2/N), u(phi) = sigma sqrt(2/N) / A.
    """
    rows = _as_rows(volts)
    _angle_per_sample(frequency_hz, sample_interval_s)
    return _summarise(rows, frequency_hz, sample_interval_s, harmonics)


def _four_parameter_covariance(samples: int, theta: float, a: float, b: float) -> tuple[np.ndarray, float]:
    """Unscaled covariance (G^-1) of (a, b, C) and of theta from the four-parameter Gram matrix."""
    gram = _four_parameter_gram(samples, theta, a, b)
    inverse = _inverse(gram)
    return inverse[:3, :3], float(inverse[3, 3])


def _four_parameter_gram(samples: int, theta: float, a: float, b: float) -> np.ndarray:
    """Gram matrix of [cos(theta n), sin(theta n), 1, n (b cos(theta n) - a sin(theta n))]."""
    angles = np.array([0.0, theta, 2.0 * theta])
    s0 = power_sums(samples, angles, 0)
    s1 = power_sums(samples, angles, 1)
    s2 = power_sums(samples, angles, 2)
    n = float(samples)
    cc = 0.5 * (n + s0[2].real)
    ss = 0.5 * (n - s0[2].real)
    cs = 0.5 * s0[2].imag
    c1, s1_ = s0[1].real, s0[1].imag
    # sums of n cos^2, n sin^2, n sin cos, n cos, n sin
    n_cc = 0.5 * (s1[0].real + s1[2].real)
    n_ss = 0.5 * (s1[0].real - s1[2].real)
    n_cs = 0.5 * s1[2].imag
    d_c = b * n_cc - a * n_cs
    d_s = b * n_cs - a * n_ss
    d_1 = b * s1[1].real - a * s1[1].imag
    nn_cc = 0.5 * (s2[0].real + s2[2].real)
    nn_ss = 0.5 * (s2[0].real - s2[2].real)
    nn_cs = 0.5 * s2[2].imag
    d_d = b * b * nn_cc + a * a * nn_ss - 2.0 * a * b * nn_cs
    return np.array(
        [
            [cc, cs, c1, d_c],
            [cs, ss, s1_, d_s],
            [c1, s1_, n, d_1],
            [d_c, d_s, d_1, d_d],
        ]
    )


def fit_sine_4(
    volts_1d: np.ndarray,
    frequency_guess_hz: float,
    sample_interval_s: float,
    max_iterations: int = 20,
    tolerance: float = 1e-10,
    harmonics: int = 5,
) -> SineFit:
    """IEEE Std 1057 four-parameter sine fit: amplitude, phase, offset and frequency.

    Starts from the three-parameter fit at frequency_guess_hz and refines the frequency by
    Gauss-Newton steps (the derivative column n (b cos - a sin) added to [cos, sin, 1]) until a
    step changes the frequency by less than `tolerance` (relative). The guess should be within a
    fraction of one DFT bin, 1 / (N sample_interval_s) Hz, of the true frequency. Amplitude,
    phase and offset are those of the three-parameter fit at the refined frequency; their
    uncertainties and u_frequency_hz come from the four-parameter covariance.
    Raises ConvergenceError when the iteration does not settle.
    """
    if np.ndim(volts_1d) != 1:
        raise ValueError(f"fit_sine_4 takes one channel of shape (N,), got shape {np.shape(volts_1d)}")
    rows = _as_rows(volts_1d)
    theta = _angle_per_sample(frequency_guess_hz, sample_interval_s)
    samples = rows.shape[1]
    proj = project(rows, theta, ramp=True, with_energy=True)
    _checked_energy(proj)
    a, b = (_rhs(proj.total, proj.exp, 1) @ _inverse(_gram(samples, theta, 1)))[0, :2]
    for _ in range(max_iterations):
        gram = _four_parameter_gram(samples, theta, a, b)
        ramp = b * proj.ramp_exp[0, 0].real - a * proj.ramp_exp[0, 0].imag
        rhs = np.concatenate([_rhs(proj.total, proj.exp, 1)[0], [ramp]])
        step = float((rhs @ _inverse(gram, strict=False))[3])
        theta += step
        if not 0.0 < theta < math.pi:
            raise ConvergenceError("four-parameter fit: the frequency left the band (0, Nyquist)")
        proj = project(rows, theta, ramp=True)
        a, b = (_rhs(proj.total, proj.exp, 1) @ _inverse(_gram(samples, theta, 1)))[0, :2]
        if abs(step) <= tolerance * theta:
            break
    else:
        raise ConvergenceError(f"four-parameter fit did not converge in {max_iterations} iterations")
    frequency_hz = theta / (2.0 * math.pi * sample_interval_s)
    return _summarise(rows, frequency_hz, sample_interval_s, harmonics, four_parameter=(a, b))[0]
