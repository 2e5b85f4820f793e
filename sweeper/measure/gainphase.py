"""Gain and phase of a DUT from the sine fits of its input and output, with uncertainties.

Gain = 20 log10(A_out / A_in) in dB; phase = phi_out - phi_in in degrees, wrapped to
(-180, 180] (a capacitive lag is negative). Uncertainties follow the GUM (JCGM 100:2008):
standard uncertainties (k = 1), inputs treated as uncorrelated (the two channels' noise is
independent). Pure numerics: no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sweeper.measure.phasewrap import unwrap_phase_deg, wrap_phase_deg
from sweeper.measure.sinefit import SineFit

__all__ = ["GainPhase", "average_gain_phase", "gain_phase", "unwrap_phase_deg", "wrap_phase_deg"]

_DB_PER_NEPER = 20.0 / math.log(10.0)  # d(20 log10 r) / d(ln r), dB


@dataclass(frozen=True)
class GainPhase:
    """Gain (dB) and phase (degrees, (-180, 180]) of output relative to input, with standard
    uncertainties u_gain_db (dB) and u_phase_deg (degrees), k = 1, and their degrees of freedom
    (math.inf when they rest on a fit's thousands of residuals)."""

    gain_db: float
    phase_deg: float
    u_gain_db: float
    u_phase_deg: float
    dof_gain: float = math.inf
    dof_phase: float = math.inf


def gain_phase(fit_in: SineFit, fit_out: SineFit) -> GainPhase:
    """Gain and phase of `fit_out` relative to `fit_in` (fits of one simultaneous capture).

    GUM law of propagation for uncorrelated inputs:
    u_gain_db = (20 / ln 10) sqrt((u(A_in)/A_in)^2 + (u(A_out)/A_out)^2),
    u_phase_deg = sqrt(u(phi_in)^2 + u(phi_out)^2).
    Raises ValueError when either amplitude is not positive (gain undefined).
    """
    a_in, a_out = fit_in.amplitude_v, fit_out.amplitude_v
    if not (a_in > 0.0 and a_out > 0.0):
        raise ValueError(f"gain needs positive amplitudes, got A_in = {a_in} V, A_out = {a_out} V")
    gain_db = 20.0 * math.log10(a_out / a_in)
    phase_deg = wrap_phase_deg(fit_out.phase_deg - fit_in.phase_deg)
    u_gain_db = _DB_PER_NEPER * math.hypot(fit_in.u_amplitude_v / a_in, fit_out.u_amplitude_v / a_out)
    u_phase_deg = math.hypot(fit_in.u_phase_deg, fit_out.u_phase_deg)
    return GainPhase(gain_db=gain_db, phase_deg=phase_deg, u_gain_db=u_gain_db, u_phase_deg=u_phase_deg)


def average_gain_phase(items: Sequence[GainPhase]) -> GainPhase:
    """Average repeated gain-phase results of one frequency point.

    Gain: arithmetic mean (dB). Phase: circular mean, the angle of sum exp(j phi), wrapped to
    (-180, 180], so results on both sides of +-180 degrees average correctly.

    Uncertainty of each mean: the larger of two evaluations (GUM, JCGM 100:2008; clause
    numbers below quoted from memory).
    - Propagated (GUM 5.1.2, independent items): u = sqrt(sum u_i^2) / n, i.e. the rms of the
      individual u over sqrt(n). It rests on each capture's own noise estimate from its fit.
    - Experimental standard deviation of the mean (GUM 4.2.3, type A over captures):
      s / sqrt(n) with s the sample standard deviation of the n values (phase deviations taken
      from the circular mean, wrapped). It also sees what a single capture cannot: drift,
      source wander, interference, noise that is not white.
    With few captures s is itself poorly known (n - 1 degrees of freedom, GUM G.3) and can come
    out small by chance; the propagated value guards against that. When the scatter exceeds what
    the fits predict, the type A value reveals it. Taking the larger is therefore conservative.
    With n = 1 only the propagated value exists. Degrees of freedom: n - 1 where the type A
    value was taken (GUM G.3.3), else those of the propagated value.
    """
    if len(items) == 0:
        raise ValueError("average_gain_phase needs at least one item")
    gains = np.array([item.gain_db for item in items], dtype=np.float64)
    phases = np.array([item.phase_deg for item in items], dtype=np.float64)
    u_gains = np.array([item.u_gain_db for item in items], dtype=np.float64)
    u_phases = np.array([item.u_phase_deg for item in items], dtype=np.float64)
    count = gains.size

    gain_db = float(gains.mean())
    phasors = np.exp(1j * np.radians(phases))
    phase_deg = wrap_phase_deg(math.degrees(math.atan2(phasors.imag.sum(), phasors.real.sum())))

    u_gain_db = math.sqrt(float(np.sum(u_gains**2))) / count
    u_phase_deg = math.sqrt(float(np.sum(u_phases**2))) / count
    dof_gain = min(item.dof_gain for item in items)
    dof_phase = min(item.dof_phase for item in items)
    if count > 1:
        deviations_deg = wrap_phase_deg(phases - phase_deg)
        s_gain = float(gains.std(ddof=1)) / math.sqrt(count)
        s_phase = float(deviations_deg.std(ddof=1)) / math.sqrt(count)
        if s_gain > u_gain_db:
            u_gain_db, dof_gain = s_gain, float(count - 1)
        if s_phase > u_phase_deg:
            u_phase_deg, dof_phase = s_phase, float(count - 1)
    return GainPhase(gain_db=gain_db, phase_deg=phase_deg, u_gain_db=u_gain_db, u_phase_deg=u_phase_deg,
                     dof_gain=dof_gain, dof_phase=dof_phase)
