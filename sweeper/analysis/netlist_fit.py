"""Which part of a netlist board explains a measured deviation: fits over the netlist's parts.

The parameters are the natural logarithms of the toleranced parts' values relative to nominal
(parts without a tolerance are held); residuals are (gain - model) / u_gain and
wrap(phase - model) / u_phase as in `sweeper.analysis.extract`, the model being the netlist
under the plan's bench loading (sweeper.circuits.netlist, solved for all perturbed part sets of
a Jacobian at once). Every fit keeps each part within a factor of 10 of nominal (FACTOR): a
part further off is a different board, and the bound keeps directions the sweep cannot see
(an active stage's impedance level, untouched by the response but for its loading) from
running away.

A netlist usually has more parts than a sweep identifies (each buffered stage can be scaled in
impedance without changing H), so no part is held as a reference. Instead:

- the free fit gives the smallest chi-square, the scale (Birge ratio, as in extract) and the
  number of identified directions r: it moves only along the directions the sweep identifies
  (singular vectors of the weighted Jacobian at nominal with singular value above IDENTIFIED),
  so it is fast and does not chase noise along the ones it cannot see; its chi-square is then
  at most slightly above the true minimum, which only makes the test below more conservative;
- can parts within tolerance explain the response? the best fit inside the tolerance box
  against the free fit, a likelihood-ratio test at the 95 % point of chi-square with r degrees
  of freedom (as in extract; with the bounds it is conservative);
- if not, one part at a time: that part free, the others within tolerance; a part whose
  hypothesis passes the same test could alone explain the response, and the likely culprit is
  the one that needs the fewest multiples of its own tolerance when the others are nominal;
- every part is reported as fitted alone, the others nominal, with its 95 % interval (from that
  one-parameter fit's Jacobian, scaled and with the coverage factor of extract): the value the
  part would need to have to explain the sweep by itself.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from scipy import optimize, stats

from sweeper.analysis.extract import (
    HELD,
    IN_TOLERANCE,
    LEVEL,
    OUT_OF_TOLERANCE,
    Extraction,
    ExtractionError,
    FittedParameter,
    PartHypothesis,
    _clean,
    _Data,
    _finding,
    _percent,
    coverage_factor,
    format_value,
    verdict_of,
)
from sweeper.circuits.bands import wrap_deg
from sweeper.circuits.netlist import mna
from sweeper.circuits.netlist.elements import PART_UNITS
from sweeper.circuits.netlist.model import NetlistCircuit

FACTOR = 10.0  # every fit keeps each part within nominal / FACTOR .. nominal * FACTOR
_STEP = 1e-6  # central-difference step in ln(part value)
IDENTIFIED = 1.0  # singular value (chi units per unit ln part) above which a direction counts as identified
_CONDITION = "if the other parts are nominal"


class _Model:
    """Weighted residuals of a netlist for log multipliers on some of its parts."""

    def __init__(self, circuit: NetlistCircuit, data: _Data, parts: Sequence[str]) -> None:
        self.circuit = circuit
        self.data = data
        self.parts = list(parts)
        self.system = circuit.system
        self.base = circuit.part_values()[0]
        self.column = {name: self.system.parts.index(name) for name in parts}

    def residuals_batch(self, names: Sequence[str], ys: np.ndarray) -> np.ndarray:
        """Residuals (K, 2N) for K sets of log multipliers (K, len(names))."""
        values = np.repeat(self.base[None, :], ys.shape[0], axis=0)
        for i, name in enumerate(names):
            values[:, self.column[name]] *= np.exp(ys[:, i])
        h, _ = mna.solve(self.system, values, self.data.frequency_hz)
        d = self.data
        with np.errstate(divide="ignore", invalid="ignore"):
            gain = 20.0 * np.log10(np.abs(h))
            phase = np.degrees(np.angle(h))
        r = np.concatenate([(d.gain_db - gain) / d.u_gain_db, wrap_deg(d.phase_deg - phase) / d.u_phase_deg], axis=1)
        return np.where(np.isfinite(r), r, 1e6)

    def residuals(self, names: Sequence[str], y: np.ndarray) -> np.ndarray:
        return self.residuals_batch(names, np.atleast_2d(y))[0]

    def jacobian(self, names: Sequence[str], y: np.ndarray) -> np.ndarray:
        """Central-difference Jacobian (2N, len(names)), all perturbed sets solved together."""
        q = len(names)
        if q == 0:
            return np.zeros((2 * self.data.frequency_hz.size, 0))
        steps = np.concatenate([np.eye(q), -np.eye(q)]) * _STEP
        r = self.residuals_batch(names, y[None, :] + steps)
        return ((r[:q] - r[q:]) / (2 * _STEP)).T

    def chi2(self, names: Sequence[str], y: np.ndarray) -> float:
        return float(np.sum(self.residuals(names, y) ** 2))

    def fit(self, names: Sequence[str], lower: np.ndarray, upper: np.ndarray,
            start: np.ndarray | None = None) -> np.ndarray:
        """Least squares over the log multipliers of `names` within [lower, upper], from `start`
        (nominal by default)."""
        if not names:
            return np.zeros(0)
        start = np.clip(np.zeros(len(names)) if start is None else start, lower, upper)
        result = optimize.least_squares(lambda y: self.residuals(names, y), start,
                                        jac=lambda y: self.jacobian(names, y), bounds=(lower, upper), method="trf",
                                        xtol=1e-8, ftol=1e-8, gtol=1e-8, max_nfev=200 * (len(names) + 1))
        return np.asarray(result.x, dtype=float)


def fit_netlist_parts(
    frequency_hz: np.ndarray,
    gain_db: np.ndarray,
    phase_deg: np.ndarray,
    u_gain_db: np.ndarray,
    u_phase_deg: np.ndarray,
    circuit: NetlistCircuit,
    *,
    flags: np.ndarray | None = None,
    level: float = LEVEL,
) -> Extraction:
    """Fit a netlist's toleranced parts to measured gain (dB) and phase (degrees) at frequency_hz
    (Hz), weighted by the standard uncertainties u_gain_db, u_phase_deg (floored as in
    `sweeper.analysis.extract`); circuit: the nominal netlist under the plan's loading. Returns
    the parts fitted one at a time with `level` intervals, the in-tolerance test and the culprit."""
    netlist = circuit.netlist
    tolerance = netlist.tolerance
    parts = [name for name in netlist.nominal if tolerance[name] > 0]
    if not parts:
        raise ExtractionError("netlist: no part has a tolerance (tol=...), so there is nothing to fit")
    data = _clean(frequency_hz, gain_db, phase_deg, u_gain_db, u_phase_deg, flags)
    m = 2 * data.frequency_hz.size
    if data.frequency_hz.size < 2:
        raise ExtractionError(f"{data.frequency_hz.size} usable points: too few to fit the netlist's parts")
    model = _Model(circuit, data, parts)
    wide = math.log(FACTOR)
    # The sweep's identified directions: singular vectors of the weighted Jacobian at nominal whose
    # singular value exceeds IDENTIFIED (a change of one in log part values, a factor e, moves
    # chi-square by more than 1 along them). The free fit moves along those only; along the others
    # the data say next to nothing, and a fit there would only chase the noise.
    _, singular, vt = np.linalg.svd(model.jacobian(parts, np.zeros(len(parts))), full_matrices=False)
    basis = vt[singular > IDENTIFIED].T
    rank = basis.shape[1]
    z = optimize.least_squares(lambda z: model.residuals(parts, basis @ z), np.zeros(rank),
                               jac=lambda z: model.jacobian(parts, basis @ z) @ basis, bounds=(-wide, wide),
                               method="trf", xtol=1e-10, ftol=1e-10, gtol=1e-10,
                               max_nfev=200 * (rank + 1)).x if rank else np.zeros(0)

    def box(name: str) -> tuple[float, float]:
        t = tolerance[name]
        return max(math.log(1 - t), -wide), min(math.log(1 + t), wide)

    def best_chi2(free: str | None, start: np.ndarray | None = None) -> float:
        """Smallest chi-square with every part within its tolerance, but `free` within FACTOR."""
        lower = np.array([-wide if p == free else box(p)[0] for p in parts])
        upper = np.array([wide if p == free else box(p)[1] for p in parts])
        return model.chi2(parts, model.fit(parts, lower, upper, start=start))

    in_tolerance_chi2 = best_chi2(None)
    # Every fit below has the free fit's freedom or less, so none can do better than the true
    # free minimum: the smallest chi-square met so far stands for it (a safeguard for a free fit
    # stopped early in a long valley).
    chi2 = min(model.chi2(parts, np.clip(basis @ z, -wide, wide)), in_tolerance_chi2,
               model.chi2(parts, np.zeros(len(parts))))
    dof = max(1, m - rank)
    reduced = chi2 / dof
    scale = math.sqrt(max(1.0, reduced))
    k = coverage_factor(reduced, dof, level)
    threshold = scale**2 * float(stats.chi2.ppf(level, max(1, rank)))

    def excess(free: str | None, start: np.ndarray | None = None) -> float:
        return best_chi2(free, start) - chi2

    in_tolerance_excess = in_tolerance_chi2 - chi2
    explained = in_tolerance_excess <= threshold

    params: list[FittedParameter] = []
    alone: dict[str, tuple[float, float, float]] = {}
    for name in parts:
        y = model.fit([name], np.array([-wide]), np.array([wide]))
        jac = model.jacobian([name], y)
        norm = float(np.linalg.norm(jac))
        sd = scale / norm if norm > 0 else math.inf
        nominal = netlist.nominal[name]
        value = nominal * math.exp(float(y[0]))
        low, high = (value * math.exp(-k * sd), value * math.exp(k * sd)) if math.isfinite(sd) else (math.nan, math.nan)
        alone[name] = (value, low, high)
        t = tolerance[name]
        params.append(FittedParameter(name, "component", PART_UNITS[netlist.part(name).kind], value, low, high,
                                      nominal, nominal * (1 - t), nominal * (1 + t),
                                      verdict_of(low, high, nominal * (1 - t), nominal * (1 + t)), _CONDITION))
    for name, value in netlist.nominal.items():
        if name not in parts:
            params.append(FittedParameter(name, "reference", PART_UNITS[netlist.part(name).kind], value, math.nan,
                                          math.nan, value, value, value, HELD, "no tolerance given"))

    hypotheses: list[PartHypothesis] = []
    if not explained:
        for name in parts:
            value, low, high = alone[name]
            start = np.array([math.log(value / netlist.nominal[name]) if p == name else 0.0 for p in parts])
            ex = excess(name, start)  # from the part's own explanation, the others nominal
            hypotheses.append(PartHypothesis(name, PART_UNITS[netlist.part(name).kind], value, low, high,
                                             netlist.nominal[name], tolerance[name], ex, ex <= threshold))
    candidates = [h for h in hypotheses if h.consistent]
    culprit = min(candidates, key=lambda h: h.tolerances_off).part if candidates else ""
    if explained or culprit:
        finding = _finding(params, hypotheses, explained, culprit, "", tolerance)
    else:
        off = [p for p in params if p.kind == "component" and p.verdict == OUT_OF_TOLERANCE]
        listed = ", ".join(f"{p.name} {format_value(p.value, p.unit)} ({_percent(p.deviation_frac)})" for p in off)
        finding = ("No single part explains the response: more than one part is off."
                   + (f" Each alone would have to be: {listed}." if listed else ""))
    x = np.clip(basis @ z, -wide, wide)
    values = {name: netlist.nominal[name] * math.exp(float(xi)) for name, xi in zip(parts, x)}
    return Extraction(
        topology="netlist", reference="", parameters=tuple(params), values={**netlist.nominal, **values},
        points=int(data.frequency_hz.size), chi2=chi2, dof=dof, coverage_factor=k, scale=scale,
        in_tolerance_excess_chi2=in_tolerance_excess, threshold_chi2=threshold, explained_in_tolerance=explained,
        hypotheses=tuple(hypotheses), culprit=culprit, finding=finding, level=level,
    )


__all__ = ["FACTOR", "IN_TOLERANCE", "fit_netlist_parts"]
