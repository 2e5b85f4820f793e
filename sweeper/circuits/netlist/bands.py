"""Tolerance bands of a netlist over its parts: worst case and Monte Carlo.

Worst case. The band is the envelope of the nominal response and of tolerance-box corners
(every toleranced part at nominal * (1 +- t)). Which corners: at each frequency, the corner the
sensitivities point to (each part at the limit that raises, or lowers, the gain or the phase:
sign of d gain / d ln p, from central differences), evaluated exactly, not extrapolated; and,
where affordable (2^n <= VERTEX_LIMIT for n toleranced parts), every corner (vertex search).
When the response is monotonic in each part over the box the extreme is a corner, and the
sensitivity corner finds it as long as no sensitivity changes sign inside the box; near a
resonance an interior point can reach further, as with the catalogued topologies.

Monte Carlo. `samples` random part sets (uniform within the tolerance, or normal with the
tolerance at 3 sigma, clipped), solved together, reduced to percentiles per frequency.
Phases are taken relative to the nominal response, as in `sweeper.circuits.bands`.
"""

from __future__ import annotations

import numpy as np

from sweeper.circuits.bands import Band, band_of_responses, check_monte_carlo, unit_draws
from sweeper.circuits.netlist import mna
from sweeper.circuits.netlist.model import NetlistCircuit

VERTEX_LIMIT = 1024  # evaluate every corner up to 10 toleranced parts
_STEP = 1e-4  # central-difference step in ln(part value) for the sensitivities


def _toleranced(circuit: NetlistCircuit) -> tuple[np.ndarray, np.ndarray]:
    """(indices into the system's parts, tolerance fractions) of the parts with a tolerance > 0."""
    tolerance = circuit.netlist.tolerance
    fractions = np.array([tolerance[name] for name in circuit.system.parts])
    index = np.flatnonzero(fractions > 0)
    return index, fractions[index]


def sensitivities(circuit: NetlistCircuit, frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """d gain_db / d ln(p) and d phase_deg / d ln(p) of every part at each frequency: arrays
    (F, P) in the system's part order, by central differences (step _STEP in ln p)."""
    f = np.asarray(frequency_hz, dtype=float)
    base = circuit.part_values()[0]
    parts = base.size
    steps = np.exp(np.concatenate([np.eye(parts), -np.eye(parts)]) * _STEP)
    h, _ = mna.solve(circuit.system, base[None, :] * steps, f)
    with np.errstate(divide="ignore", invalid="ignore"):
        up, down = h[:parts], h[parts:]
        gain = 20 * np.log10(np.abs(up / down)) / (2 * _STEP)
        phase = np.degrees(np.angle(up / down)) / (2 * _STEP)
    return gain.T, phase.T


def worst_case_band(circuit: NetlistCircuit, frequency_hz: np.ndarray) -> Band:
    """Band of a netlist from its tolerance box corners (module docstring), at frequency_hz (Hz)."""
    f = np.asarray(frequency_hz, dtype=float)
    index, fractions = _toleranced(circuit)
    base = circuit.part_values()[0]
    nominal_h = circuit.response(f)
    if index.size == 0:
        return band_of_responses(f, nominal_h, nominal_h[None, :], None)
    gain_s, phase_s = sensitivities(circuit, f)
    signs = [np.where(s[:, index] >= 0, 1.0, -1.0) for s in (gain_s, phase_s)]
    corners = np.concatenate([signs[0], -signs[0], signs[1], -signs[1]])
    if 2 ** index.size <= VERTEX_LIMIT:
        grid = np.array(np.meshgrid(*([[-1.0, 1.0]] * index.size), indexing="ij")).reshape(index.size, -1).T
        corners = np.concatenate([corners, grid])
    corners = np.unique(corners, axis=0)
    values = np.repeat(base[None, :], corners.shape[0], axis=0)
    values[:, index] *= 1.0 + corners * fractions
    h, _ = mna.solve(circuit.system, values, f)
    return band_of_responses(f, nominal_h, np.concatenate([nominal_h[None, :], h]), None)


def monte_carlo_band(
    circuit: NetlistCircuit,
    frequency_hz: np.ndarray,
    samples: int = 2000,
    percentiles: tuple[float, float] = (0.5, 99.5),
    seed: int = 0,
    distribution: str = "uniform",
) -> Band:
    """Band of a netlist from `samples` random part sets, the given percentiles (%) per frequency
    (Hz); deterministic for a given seed; parts without tolerance held at nominal."""
    lo, hi = check_monte_carlo(samples, percentiles, distribution)
    f = np.asarray(frequency_hz, dtype=float)
    index, fractions = _toleranced(circuit)
    rng = np.random.default_rng(seed)
    values = np.repeat(circuit.part_values(), samples, axis=0)
    for column, fraction in zip(index, fractions):
        values[:, column] *= 1.0 + fraction * unit_draws(rng, distribution, samples)
    h, _ = mna.solve(circuit.system, values, f)
    return band_of_responses(f, circuit.response(f), h, (lo, hi))
