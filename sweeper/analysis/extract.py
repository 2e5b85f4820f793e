"""Parameter extraction: fit the circuit model's part values to a measured response.

The fit is weighted least squares (scipy.optimize.least_squares) on the residuals
(gain - model gain) / u_gain and wrap(phase - model phase) / u_phase, with the model from
`sweeper.circuits.build_circuit` under the plan's bench loading. Parameters are the natural
logarithms of the part values relative to nominal, so every value stays positive and
intervals on products and ratios come out symmetric in log space.

What a sweep can identify. Every topology here is a divider, and a divider's transfer
function does not change when every impedance is scaled by the same factor (R and L times
k, C divided by k). Only the probe and load resistor break that symmetry, and weakly: a 1 MOhm
probe beside a 1.6 kOhm resistor moves the gain by 0.014 dB, less than a bench scope's channel
gain accuracy (typically 1 to 2 %, 0.1 to 0.2 dB; common practice, from memory), so the
extraction never leans on it: every comparison of hypotheses below maps part values to their
equivalent with the reference part at nominal first. So n parts give at most n - 1
identifiable quantities: an RC low-pass identifies R C but not R
and C apart; an RL high-pass with its DCR identifies L / (R + RL) and RL / (R + RL); a
series RLC identifies f0 and Q. The fit therefore holds one part at nominal, the *reference*
(the one with the tightest tolerance, a resistor on ties), and fits the others; their values
are stated "if the reference is nominal". The quantities that do not depend on that choice
(RC product, corner frequency, f0, Q, passband gain) are reported with their own intervals.

Intervals (95 %): covariance (J^T J)^-1 of the log parameters from the Jacobian of the
weighted residuals at the solution, propagated to derived quantities to first order (GUM,
JCGM 100:2008, 5.1.2). When the reduced chi-square exceeds 1, the stated point uncertainties
were too small for the scatter actually seen (or the model misses something), so the
covariance is scaled by it (the Birge ratio squared, common practice in data analysis) and
the coverage factor is Student's t with the fit's degrees of freedom (GUM G.3, the scale is
estimated); otherwise the point uncertainties are taken as stated and k = 1.960 (normal).
A chi-square below 1 does not shrink the intervals: the stated uncertainties are the
measurement's own evaluation and a quiet sweep is no reason to distrust them.

Which part is off. First: can parts within tolerance explain the response at all? A fit
with every part bounded to its tolerance is compared with the free fit; its excess
chi-square, over the scale above, beyond the 95 % point of chi-square with as many degrees
of freedom as identified quantities, says no (a likelihood-ratio test; with the bounds it is
conservative, so it is slow to call a board out of tolerance). If they cannot, one part at a
time: that part free, the others bounded to their tolerance; the parts whose hypothesis
passes the same test could each alone explain the response. Among them the likely culprit is the one
that needs the fewest multiples of its own tolerance when the others are nominal (an RC
product 30 % high is a 5 % capacitor six tolerances off sooner than a 1 % resistor thirty).

Everything here is pure numerics on numpy arrays and plain values, apart from `extract`,
which takes a run's points frame and metadata (the plan is re-read from its text there).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import optimize, stats

from sweeper.circuits import COMPONENTS, Loading, build_circuit
from sweeper.circuits.figures import corner_analytic_hz, f0_hz, q_factor
from sweeper.measure.point import Flag
from sweeper.verdict import wrap_deg

LEVEL = 0.95  # confidence level of every interval
U_FLOOR_GAIN_DB = 1e-4  # smallest gain uncertainty used as a weight, dB (a noise-free simulated sweep reports ~0)
U_FLOOR_PHASE_DEG = 1e-3  # smallest phase uncertainty used as a weight, degrees
_GRADIENT_STEP = 1e-6  # central-difference step in log parameters (relative 1e-6: well above float noise)
_RANK_TOLERANCE = 1e-9  # singular values below this fraction of the largest count as zero (not determined)
_EXCLUDED_FLAGS = int(Flag.SKIPPED)

KIND_UNITS = {"resistance": "Ohm", "capacitance": "F", "inductance": "H"}
_KIND_PREFERENCE = {"resistance": 0, "inductance": 1, "capacitance": 2}

IN_TOLERANCE = "in tolerance"
OUT_OF_TOLERANCE = "out of tolerance"
UNDECIDED = "undecided"
NOT_DETERMINED = "not determined"
HELD = "held at nominal"
_NAN2 = (math.nan, math.nan)
# Two single-part explanations needing tolerance multiples within this factor of each other are
# reported together: nothing in the sweep prefers one (e.g. a divider's R1 9 % low or R2 10 % high).
TIE_FACTOR = 2.0


class ExtractionError(ValueError):
    """A run or model the extraction cannot work on (no component model, too few points...)."""


@dataclass(frozen=True)
class Quantity:
    """An identifiable quantity of a topology: a closed-form function of the part values."""

    name: str
    unit: str  # "s", "Hz", "dB" or "" (dimensionless)
    function: Callable[[Mapping[str, float]], float]
    logarithmic: bool = True  # positive quantity: interval symmetric in log space; dB ones are not


@dataclass(frozen=True)
class FittedParameter:
    """One reported parameter: fitted value, 95 % interval, nominal and tolerance range, verdict.

    kind: "component" (a part value, stated as if the reference part were nominal), "figure"
    (a quantity identifiable from the sweep whatever the reference) or "reference" (the part
    held at nominal). Values are SI (unit given); NaN where not determined.
    """

    name: str
    kind: str
    unit: str
    value: float
    low: float
    high: float
    nominal: float
    tolerance_low: float
    tolerance_high: float
    verdict: str
    condition: str = ""  # e.g. "if R is nominal"

    @property
    def deviation_frac(self) -> float:
        """Fitted value relative to nominal, minus 1 (0.3 = 30 % high); for dB quantities, dB."""
        if self.unit == "dB":
            return self.value - self.nominal
        return self.value / self.nominal - 1.0 if self.nominal else math.nan


@dataclass(frozen=True)
class PartHypothesis:
    """The hypothesis that this part alone is off: its value with the others nominal, and whether
    the data allow it."""

    part: str
    unit: str
    value: float  # fitted with every other part nominal
    low: float
    high: float
    nominal: float
    tolerance_frac: float
    excess_chi2: float  # chi-square above the free fit with this part free and the others within tolerance
    consistent: bool  # the excess passes the test (this part alone can explain the response)

    @property
    def deviation_frac(self) -> float:
        return self.value / self.nominal - 1.0

    @property
    def tolerances_off(self) -> float:
        """How many of its own tolerances the part is off (inf for a zero tolerance)."""
        dev = abs(self.deviation_frac)
        if self.tolerance_frac > 0:
            return dev / self.tolerance_frac
        return 0.0 if dev == 0 else math.inf


@dataclass(frozen=True)
class Extraction:
    """The outcome of a fit; `finding` says in words what it means."""

    topology: str
    reference: str  # the part held at nominal ("" when none)
    parameters: tuple[FittedParameter, ...]
    values: dict[str, float]  # best-fit part values (reference at nominal), SI
    points: int  # frequency points used
    chi2: float
    dof: int
    coverage_factor: float  # k of the 95 % intervals
    scale: float  # sqrt(max(1, reduced chi-square)), applied to every standard uncertainty
    in_tolerance_excess_chi2: float  # best within-tolerance fit minus the free fit
    threshold_chi2: float  # excess allowed (scaled), 95 % point
    explained_in_tolerance: bool
    hypotheses: tuple[PartHypothesis, ...] = ()
    culprit: str = ""  # the likely out-of-tolerance part, "" when none or no single one
    finding: str = ""
    level: float = LEVEL

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else math.nan

    def parameter(self, name: str) -> FittedParameter:
        """The reported parameter with this name (KeyError if none)."""
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)


# ----------------------------------------------------------------------------------------- model


def _safe_db(x: float) -> float:
    return 20.0 * math.log10(x) if x > 0 else -math.inf


def _figure(fn: Callable[..., float], topology: str) -> Callable[[Mapping[str, float]], float]:
    return lambda v: float(fn(build_circuit(topology, v)))


def identifiable_quantities(topology: str, values: Mapping[str, float]) -> tuple[Quantity, ...]:
    """Quantities of a topology that a sweep identifies whatever the absolute impedance level.

    Handbook forms, unloaded: RC (and CR): time constant R C, corner 1 / (2 pi R C); RL
    high-pass and LR low-pass: time constant L / (R + RL), corner as
    `sweeper.circuits.figures.corner_analytic_hz`, and the gain set by RL; series RLC and LC
    filters: f0 = 1 / (2 pi sqrt(L C)) and Q; divider: its gain R2 / (R1 + R2).
    """
    rl = values.get("RL", 0.0)
    if topology in ("rc-lowpass", "cr-highpass"):
        return (
            Quantity("RC product", "s", lambda v: v["R"] * v["C"]),
            Quantity("corner frequency 1/(2 pi R C)", "Hz", lambda v: 1.0 / (2 * math.pi * v["R"] * v["C"])),
        )
    if topology in ("rl-highpass", "lr-lowpass"):
        out = [
            Quantity("time constant L/(R+RL)", "s", lambda v: v["L"] / (v["R"] + v["RL"])),
            Quantity("corner frequency", "Hz", _figure(corner_analytic_hz, topology)),
        ]
        if topology == "rl-highpass" and rl > 0:
            out.append(Quantity("low-frequency gain RL/(R+RL)", "dB",
                                lambda v: _safe_db(v["RL"] / (v["R"] + v["RL"])), logarithmic=False))
        if topology == "lr-lowpass" and rl > 0:
            out.append(Quantity("passband gain R/(R+RL)", "dB",
                                lambda v: _safe_db(v["R"] / (v["R"] + v["RL"])), logarithmic=False))
        return tuple(out)
    if topology.startswith("rlc-") or topology == "lc-supply":
        return (
            Quantity("resonance f0", "Hz", _figure(f0_hz, topology)),
            Quantity("Q", "", _figure(q_factor, topology)),
        )
    if topology == "divider":
        return (Quantity("passband gain R2/(R1+R2)", "dB", lambda v: _safe_db(v["R2"] / (v["R1"] + v["R2"])),
                         logarithmic=False),)
    return ()


def _kinds(topology: str) -> dict[str, str]:
    return {spec.name: spec.kind for spec in COMPONENTS[topology]}


def fittable_parts(topology: str, nominal: Mapping[str, float]) -> list[str]:
    """Parts with a finite, positive nominal value (a zero DCR or an absent load is not fitted)."""
    return [name for name in _kinds(topology) if 0 < nominal.get(name, 0.0) < math.inf]


def choose_reference(topology: str, parts: Sequence[str], tolerance: Mapping[str, float]) -> str:
    """The part to hold at nominal: the tightest tolerance; on ties a resistor, then catalog order."""
    kinds = _kinds(topology)
    order = list(kinds)
    return min(parts, key=lambda p: (tolerance.get(p, 0.0), _KIND_PREFERENCE[kinds[p]], order.index(p)))


@dataclass(frozen=True)
class _Data:
    frequency_hz: np.ndarray
    gain_db: np.ndarray
    phase_deg: np.ndarray
    u_gain_db: np.ndarray
    u_phase_deg: np.ndarray


class _Model:
    """Weighted residuals of a topology with the reference part held at nominal.

    Any set of log multipliers y on named parts (others nominal) is mapped to the equivalent
    set with the reference at nominal, x_i = y_i - s_i s_ref y_ref, where s is the impedance-
    scaling direction (+1 for R and L, -1 for C): the two sets give the same response but for
    the weak loading effects, which are thereby never used to tell them apart.
    """

    def __init__(self, topology: str, nominal: Mapping[str, float], loading: Loading, data: _Data,
                 free: Sequence[str], reference: str) -> None:
        self.topology = topology
        self.nominal = dict(nominal)
        self.loading = loading
        self.data = data
        self.free = list(free)
        self.reference = reference
        kinds = _kinds(topology)
        self.sign = {name: (-1.0 if kind == "capacitance" else 1.0) for name, kind in kinds.items()}

    def values(self, x: np.ndarray) -> dict[str, float]:
        """Part values (SI) for log multipliers x of the free parts, the reference nominal."""
        v = dict(self.nominal)
        for name, xi in zip(self.free, x):
            v[name] = self.nominal[name] * math.exp(float(xi))
        return v

    def equivalent_x(self, names: Sequence[str], y: np.ndarray) -> np.ndarray:
        """Free-part log multipliers equivalent to multipliers y on `names` (the others nominal)."""
        given = dict(zip(names, (float(v) for v in y)))
        y_ref = given.get(self.reference, 0.0)
        s_ref = self.sign[self.reference]
        return np.array([given.get(n, 0.0) - self.sign[n] * s_ref * y_ref for n in self.free])

    def residuals(self, names: Sequence[str], y: np.ndarray) -> np.ndarray:
        d = self.data
        values = self.values(self.equivalent_x(names, y))
        h = build_circuit(self.topology, values, self.loading).response(d.frequency_hz)
        with np.errstate(divide="ignore", invalid="ignore"):
            gain = 20.0 * np.log10(np.abs(h))
            phase = np.degrees(np.angle(h))
        r = np.concatenate([(d.gain_db - gain) / d.u_gain_db, wrap_deg(d.phase_deg - phase) / d.u_phase_deg])
        return np.where(np.isfinite(r), r, 1e6)  # a non-finite model value counts as a very bad fit

    def chi2(self, names: Sequence[str], y: np.ndarray) -> float:
        return float(np.sum(self.residuals(names, y) ** 2))

    def fit(self, names: Sequence[str], lower: np.ndarray | None = None,
            upper: np.ndarray | None = None) -> np.ndarray:
        """Least squares over the log multipliers of `names`, from nominal (y = 0); returns y."""
        n = len(names)
        if n == 0:
            return np.zeros(0)
        fun = lambda y: self.residuals(names, y)
        if lower is None and upper is None:
            res = optimize.least_squares(fun, np.zeros(n), method="lm", xtol=1e-12, ftol=1e-12, gtol=1e-12,
                                         max_nfev=400 * (n + 1))
        else:
            lo = np.full(n, -np.inf) if lower is None else lower
            hi = np.full(n, np.inf) if upper is None else upper
            res = optimize.least_squares(fun, np.zeros(n), bounds=(lo, hi), method="trf", xtol=1e-12, ftol=1e-12,
                                         gtol=1e-12, max_nfev=400 * (n + 1))
        return np.asarray(res.x, dtype=float)

    def jacobian(self, names: Sequence[str], y: np.ndarray) -> np.ndarray:
        """Central-difference Jacobian of the weighted residuals in the log multipliers."""
        cols = []
        for i in range(len(names)):
            step = np.zeros(len(names))
            step[i] = _GRADIENT_STEP
            cols.append((self.residuals(names, y + step) - self.residuals(names, y - step)) / (2 * _GRADIENT_STEP))
        return np.column_stack(cols) if cols else np.zeros((2 * self.data.frequency_hz.size, 0))


# ------------------------------------------------------------------------------------ statistics


def _inverse_spectrum(jac: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(V, 1/s^2) of the Jacobian's SVD; directions with a negligible singular value get inf."""
    if jac.shape[1] == 0:
        return np.zeros((0, 0)), np.zeros(0)
    _, s, vt = np.linalg.svd(jac, full_matrices=False)
    tiny = s <= _RANK_TOLERANCE * (s.max() if s.size else 0.0)
    with np.errstate(divide="ignore"):
        inv_s2 = np.where(tiny, np.inf, 1.0 / np.where(tiny, 1.0, s) ** 2)
    return vt.T, inv_s2


def _variance(gradient: np.ndarray, v: np.ndarray, inv_s2: np.ndarray) -> float:
    """gradient^T (J^T J)^-1 gradient, from the SVD; inf when it leans on an undetermined direction."""
    if gradient.size == 0:
        return 0.0
    proj = gradient @ v
    scale = max(float(np.max(np.abs(gradient))), 1e-300)
    proj = np.where(np.abs(proj) <= 1e-9 * scale, 0.0, proj)
    terms = np.where(proj == 0.0, 0.0, proj**2 * inv_s2)
    return float(np.sum(terms))


def coverage_factor(reduced_chi2: float, dof: int, level: float = LEVEL) -> float:
    """k for a two-sided interval at `level`: normal when the point uncertainties are taken as
    stated (reduced chi-square <= 1), Student's t with dof degrees of freedom when they were
    rescaled by the observed scatter (GUM G.3)."""
    q = 0.5 + level / 2
    if dof > 0 and math.isfinite(reduced_chi2) and reduced_chi2 > 1.0:
        return float(stats.t.ppf(q, dof))
    return float(stats.norm.ppf(q))


def verdict_of(low: float, high: float, tolerance_low: float, tolerance_high: float) -> str:
    """In, out or undecided: the interval inside the tolerance range, wholly outside it, or across a limit."""
    if not (math.isfinite(low) and math.isfinite(high)):
        return NOT_DETERMINED
    if tolerance_low <= low and high <= tolerance_high:
        return IN_TOLERANCE
    if high < tolerance_low or low > tolerance_high:
        return OUT_OF_TOLERANCE
    return UNDECIDED


def tolerance_range(function: Callable[[Mapping[str, float]], float], nominal: Mapping[str, float],
                    tolerance: Mapping[str, float], parts: Sequence[str]) -> tuple[float, float]:
    """Smallest and largest value of a quantity with every part at nominal or a tolerance limit
    (worst case over the corners of the tolerance box; the quantities here are monotonic in each part)."""
    toleranced = [p for p in parts if tolerance.get(p, 0.0) > 0]
    values = [function(nominal)]
    for signs in itertools.product((-1.0, 1.0), repeat=len(toleranced)):
        v = dict(nominal)
        for p, s in zip(toleranced, signs):
            v[p] = nominal[p] * (1.0 + s * tolerance[p])
        values.append(function(v))
    finite = [x for x in values if math.isfinite(x)]
    return (min(finite), max(finite)) if finite else (math.nan, math.nan)


# ---------------------------------------------------------------------------------------- wording


_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p"),
             (1e-15, "f"))


def _prefix(magnitude: float) -> tuple[float, str]:
    for scale, prefix in _PREFIXES:
        if magnitude >= scale * 0.9995:
            return scale, prefix
    return _PREFIXES[-1]


def format_value(value: float, unit: str, digits: int = 4) -> str:
    """A value with an engineering prefix: 130 nF, 1.6 kOhm, 994.7 Hz; '-' when not finite."""
    if not math.isfinite(value):
        return "-"
    if unit in ("", "dB"):
        return f"{value:.{digits}g}{' dB' if unit == 'dB' else ''}"
    scale, prefix = _prefix(abs(value))
    return f"{value / scale:.{digits}g} {prefix}{unit}"


def format_range(low: float, high: float, unit: str, digits: int = 5) -> str:
    """Two values sharing one prefix and unit: '129.99 .. 130.03 nF'; '-' when either is not finite."""
    if not (math.isfinite(low) and math.isfinite(high)):
        return "-"
    if unit in ("", "dB"):
        return f"{low:.{digits}g} .. {high:.{digits}g}{' dB' if unit == 'dB' else ''}"
    scale, prefix = _prefix(max(abs(low), abs(high)))
    return f"{low / scale:.{digits}g} .. {high / scale:.{digits}g} {prefix}{unit}"


def _percent(frac: float) -> str:
    return f"{frac * 100:+.3g} %"


def _join(items: Sequence[str], word: str = "and") -> str:
    """'a', 'a and b', 'a, b and c'."""
    items = list(items)
    if len(items) <= 2:
        return f" {word} ".join(items)
    return f"{', '.join(items[:-1])} {word} {items[-1]}"


def _finding(ex_parts: Sequence[FittedParameter], hypotheses: Sequence[PartHypothesis], explained: bool,
             culprit: str, reference: str, tolerance: Mapping[str, float]) -> str:
    figures = [p for p in ex_parts if p.kind == "figure"]
    lead = next((p for p in figures if p.verdict == OUT_OF_TOLERANCE), figures[0] if figures else None)
    if explained:
        what = (f"{lead.name} {format_value(lead.value, lead.unit)} ({_percent(lead.deviation_frac)} from nominal)"
                if lead is not None and lead.unit != "dB" else "the response")
        return f"No part found out of tolerance: {what} is explained by parts within their tolerances."
    head = ""
    if lead is not None:
        span = (f"in-tolerance parts give {format_value(lead.tolerance_low, lead.unit)} to "
                f"{format_value(lead.tolerance_high, lead.unit)}")
        dev = (f"{lead.value - lead.nominal:+.3g} dB" if lead.unit == "dB" else _percent(lead.deviation_frac))
        head = f"{lead.name} {dev} ({format_value(lead.value, lead.unit)}; {span}). "
    by_part = {h.part: h for h in hypotheses}
    if culprit:
        h = by_part[culprit]
        others = [p for p in by_part if p != culprit]
        within = _join([f"{p} within {tolerance.get(p, 0.0) * 100:g} %" for p in others])
        rivals = [g for g in hypotheses if g.consistent and g.part != culprit
                  and g.tolerances_off <= TIE_FACTOR * h.tolerances_off]
        who = _join([culprit, *(g.part for g in rivals)], "or")
        verb = "is the likely cause" + ("; this sweep cannot tell them apart" if rivals else "")
        cause = f"With {within}, {who} {verb}" if within and not rivals else f"{who} {verb}"
        tail = (f" ({culprit} fitted {format_value(h.value, h.unit)} if "
                f"{_join(others) or 'the rest'} {'is' if len(others) == 1 else 'are'} nominal, "
                f"{_percent(h.deviation_frac)}, {h.tolerances_off:.3g} times its {h.tolerance_frac * 100:g} % tolerance)")
        alternatives = [g for g in hypotheses if g.consistent and g.part != culprit]
        alt = "".join(
            f"; {g.part} alone would have to be {format_value(g.value, g.unit)} ({_percent(g.deviation_frac)}, "
            f"{g.tolerances_off:.3g} times its tolerance)" for g in alternatives
        )
        return f"{head}{cause}{tail}{alt}."
    off = [p for p in ex_parts if p.kind == "component" and p.verdict == OUT_OF_TOLERANCE]
    listed = ", ".join(f"{p.name} {format_value(p.value, p.unit)} ({_percent(p.deviation_frac)})" for p in off)
    more = f" If {reference} is nominal: {listed}." if listed else ""
    return f"{head}No single part explains the response: more than one part is off.{more}"


# ------------------------------------------------------------------------------------------- fit


def _clean(frequency_hz: np.ndarray, gain_db: np.ndarray, phase_deg: np.ndarray, u_gain_db: np.ndarray,
           u_phase_deg: np.ndarray, flags: np.ndarray | None) -> _Data:
    f = np.asarray(frequency_hz, dtype=float)
    arrays = [np.asarray(a, dtype=float) for a in (gain_db, phase_deg, u_gain_db, u_phase_deg)]
    keep = np.isfinite(f) & (f > 0)
    for a in arrays[:2]:
        keep &= np.isfinite(a)
    if flags is not None:
        keep &= (np.asarray(flags).astype(np.int64) & _EXCLUDED_FLAGS) == 0
    g, p, ug, up = (a[keep] for a in arrays)
    ug = np.where(np.isfinite(ug), np.maximum(ug, U_FLOOR_GAIN_DB), U_FLOOR_GAIN_DB)
    up = np.where(np.isfinite(up), np.maximum(up, U_FLOOR_PHASE_DEG), U_FLOOR_PHASE_DEG)
    return _Data(f[keep], g, p, ug, up)


def fit_parts(
    frequency_hz: np.ndarray,
    gain_db: np.ndarray,
    phase_deg: np.ndarray,
    u_gain_db: np.ndarray,
    u_phase_deg: np.ndarray,
    topology: str,
    nominal: Mapping[str, float],
    tolerance: Mapping[str, float],
    loading: Loading | None = None,
    *,
    flags: np.ndarray | None = None,
    reference: str | None = None,
    level: float = LEVEL,
) -> Extraction:
    """Fit a topology's part values to measured gain (dB) and phase (degrees) at frequency_hz (Hz).

    u_gain_db, u_phase_deg: standard uncertainties (k = 1) of each point, the weights (floored
    at U_FLOOR_GAIN_DB and U_FLOOR_PHASE_DEG). nominal: part values (Ohm, F, H), as the plan
    gives them; tolerance: fractions (0.05 = 5 %). loading: the bench loading the model was
    predicted with. flags: points flagged SKIPPED are left out. reference: the part held at
    nominal (default: `choose_reference`). Returns the fitted parameters with `level`
    intervals, the in-tolerance test and the likely culprit.
    """
    if topology not in COMPONENTS or topology == "rational":
        raise ExtractionError(f"topology {topology!r}: no component model to fit (expected a catalogued "
                              "topology other than 'rational')")
    loading = loading if loading is not None else Loading()
    full_nominal = dict(build_circuit(topology, nominal, loading).values)
    parts = fittable_parts(topology, full_nominal)
    if not parts:
        raise ExtractionError(f"{topology}: no part with a finite, positive nominal value to fit")
    reference = reference or choose_reference(topology, parts, tolerance)
    if reference not in parts:
        raise ExtractionError(f"reference {reference!r}: expected one of {', '.join(parts)}")
    free = [p for p in parts if p != reference]
    data = _clean(frequency_hz, gain_db, phase_deg, u_gain_db, u_phase_deg, flags)
    m = 2 * data.frequency_hz.size
    if m <= len(free) or data.frequency_hz.size < 2:
        raise ExtractionError(f"{data.frequency_hz.size} usable points: too few to fit {len(free)} parameter(s)")
    model = _Model(topology, full_nominal, loading, data, free, reference)

    x = model.fit(free)
    chi2 = model.chi2(free, x)
    dof = m - len(free)
    reduced = chi2 / dof
    scale = math.sqrt(max(1.0, reduced))
    k = coverage_factor(reduced, dof, level)
    v, inv_s2 = _inverse_spectrum(model.jacobian(free, x))
    values = model.values(x)
    kinds = _kinds(topology)

    params: list[FittedParameter] = []
    cond = f"if {reference} is nominal"
    for i, name in enumerate(free):
        grad = np.zeros(len(free))
        grad[i] = 1.0
        sd = math.sqrt(_variance(grad, v, inv_s2)) * scale
        nom = full_nominal[name]
        lo, hi = (values[name] * math.exp(-k * sd), values[name] * math.exp(k * sd)) if math.isfinite(sd) else _NAN2
        t = tolerance.get(name, 0.0)
        params.append(FittedParameter(name, "component", KIND_UNITS[kinds[name]], values[name], lo, hi, nom,
                                      nom * (1 - t), nom * (1 + t), verdict_of(lo, hi, nom * (1 - t), nom * (1 + t)),
                                      cond))
    ref_t = tolerance.get(reference, 0.0)
    ref_nom = full_nominal[reference]
    params.append(FittedParameter(reference, "reference", KIND_UNITS[kinds[reference]], ref_nom, math.nan, math.nan,
                                  ref_nom, ref_nom * (1 - ref_t), ref_nom * (1 + ref_t), HELD))
    for q in identifiable_quantities(topology, full_nominal):
        value = q.function(values)
        grad = np.zeros(len(free))
        for i in range(len(free)):
            step = np.zeros(len(free))
            step[i] = _GRADIENT_STEP
            up_v, down_v = q.function(model.values(x + step)), q.function(model.values(x - step))
            if q.logarithmic:
                up_v, down_v = math.log(up_v), math.log(down_v)
            grad[i] = (up_v - down_v) / (2 * _GRADIENT_STEP)
        sd = math.sqrt(_variance(grad, v, inv_s2)) * scale
        if not math.isfinite(sd):
            lo, hi = _NAN2
        elif q.logarithmic:
            lo, hi = value * math.exp(-k * sd), value * math.exp(k * sd)
        else:
            lo, hi = value - k * sd, value + k * sd
        tlo, thi = tolerance_range(q.function, full_nominal, tolerance, parts)
        params.append(FittedParameter(q.name, "figure", q.unit, value, lo, hi, q.function(full_nominal), tlo, thi,
                                      verdict_of(lo, hi, tlo, thi)))

    # Can parts within tolerance explain the response? Likelihood-ratio test against the free fit.
    threshold = scale**2 * float(stats.chi2.ppf(level, max(1, len(free))))
    box_parts = [p for p in parts if tolerance.get(p, 0.0) > 0]

    def bounds(p: str) -> tuple[float, float]:
        t = tolerance.get(p, 0.0)
        return (math.log(1 - t) if t < 1 else -np.inf), math.log(1 + t)

    def excess(names: list[str], lower: np.ndarray, upper: np.ndarray) -> float:
        return model.chi2(names, model.fit(names, lower, upper)) - chi2

    in_tol_excess = excess(box_parts, np.array([bounds(p)[0] for p in box_parts]),
                           np.array([bounds(p)[1] for p in box_parts]))
    explained = in_tol_excess <= threshold

    hypotheses: list[PartHypothesis] = []
    if not explained:
        for part in parts:
            ya = model.fit([part])
            va, sa = _inverse_spectrum(model.jacobian([part], ya))
            sd = math.sqrt(_variance(np.ones(1), va, sa)) * scale
            value = full_nominal[part] * math.exp(float(ya[0]))
            lo, hi = (value * math.exp(-k * sd), value * math.exp(k * sd)) if math.isfinite(sd) else _NAN2
            others = [p for p in box_parts if p != part]
            ex = excess([part, *others], np.array([-np.inf] + [bounds(p)[0] for p in others]),
                        np.array([np.inf] + [bounds(p)[1] for p in others]))
            hypotheses.append(PartHypothesis(part, KIND_UNITS[kinds[part]], value, lo, hi, full_nominal[part],
                                             tolerance.get(part, 0.0), ex, ex <= threshold))
    candidates = [h for h in hypotheses if h.consistent]
    culprit = min(candidates, key=lambda h: h.tolerances_off).part if candidates else ""
    finding = _finding(params, hypotheses, explained, culprit, reference, tolerance)
    return Extraction(
        topology=topology, reference=reference, parameters=tuple(params), values=values,
        points=int(data.frequency_hz.size), chi2=chi2, dof=dof, coverage_factor=k, scale=scale,
        in_tolerance_excess_chi2=in_tol_excess, threshold_chi2=threshold, explained_in_tolerance=explained,
        hypotheses=tuple(hypotheses), culprit=culprit, finding=finding, level=level,
    )


def extraction_rows(extraction: Extraction) -> list[dict[str, Any]]:
    """The parameters as plain rows (for tables and JSON): name, kind, unit, value, low, high,
    nominal, tolerance_low, tolerance_high, deviation_frac, verdict, condition."""
    return [
        {"name": p.name, "kind": p.kind, "unit": p.unit, "value": p.value, "low": p.low, "high": p.high,
         "nominal": p.nominal, "tolerance_low": p.tolerance_low, "tolerance_high": p.tolerance_high,
         "deviation_frac": p.deviation_frac, "verdict": p.verdict, "condition": p.condition}
        for p in extraction.parameters
    ]


__all__ = [
    "Extraction",
    "ExtractionError",
    "FittedParameter",
    "PartHypothesis",
    "Quantity",
    "choose_reference",
    "coverage_factor",
    "extraction_rows",
    "fit_parts",
    "fittable_parts",
    "format_range",
    "format_value",
    "identifiable_quantities",
    "tolerance_range",
    "verdict_of",
]
