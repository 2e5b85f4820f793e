"""Derived figures of a circuit: passband gain, corners, resonance and Q.

Corners are found numerically on the loaded response (`Circuit.response`) with a bracketing
root finder; f0, Q and the analytic corner are textbook formulas on the component values
alone (bench loading not included), so the two can be compared.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import numpy as np
from scipy.optimize import brentq

from sweeper.circuits.circuit import Circuit

HALF_POWER_DB = 10 * math.log10(0.5)  # -3.0103 dB: |H| = passband / sqrt(2)

# Which side of the response is the passband, per topology.
RESPONSE_KIND = {
    "divider": "flat",
    "rc-lowpass": "lowpass",
    "lr-lowpass": "lowpass",
    "rlc-lowpass": "lowpass",
    "lc-supply": "lowpass",
    "cr-highpass": "highpass",
    "rl-highpass": "highpass",
    "rlc-highpass": "highpass",
    "rlc-bandpass": "bandpass",
    "rlc-notch": "notch",
    "rational": "general",
}

FIGURE_KEYS = (
    "passband_gain_db",
    "corner_hz",
    "corner_analytic_hz",
    "corner_low_hz",
    "corner_high_hz",
    "bandwidth_hz",
    "f0_hz",
    "q",
    "notch_depth_db",
    "slowest_time_constant_s",
)

_GRID_POINTS_PER_DECADE = 50
_SPAN_DECADES = 4  # scan this far beyond the outermost natural frequencies


def gain_db(circuit: Circuit, frequency_hz: np.ndarray) -> np.ndarray:
    """20 log10 |H| at each frequency (Hz), dB; -inf where H = 0."""
    with np.errstate(divide="ignore"):
        return 20 * np.log10(np.abs(circuit.response(frequency_hz)))


def _limit_magnitude(b: np.ndarray, a: np.ndarray, at_infinity: bool) -> float:
    """|H| as s -> 0 or s -> infinity from the coefficients."""
    if at_infinity:
        if b.size > a.size:
            return math.inf
        return abs(b[0] / a[0]) if b.size == a.size else 0.0
    if a[-1] == 0:
        return math.inf if b[-1] != 0 else math.nan
    return abs(b[-1] / a[-1])


def passband_gain_db(circuit: Circuit) -> float:
    """Passband gain, dB: DC gain for low-pass, flat and notch topologies; the high-frequency
    limit for high-pass ones (probe capacitance left out, since it would roll that limit off);
    the gain at f0 for the band-pass; NaN for "rational"."""
    kind = RESPONSE_KIND[circuit.topology]
    if kind == "general":
        return math.nan
    if kind == "bandpass":
        return float(gain_db(circuit, np.array([f0_hz(circuit)]))[0])
    if kind == "highpass":
        no_capacitance = dataclasses.replace(circuit.loading, probe_capacitance_f=0.0)
        b, a = dataclasses.replace(circuit, loading=no_capacitance).ba()
        magnitude = _limit_magnitude(b, a, at_infinity=True)
    else:
        b, a = circuit.ba()
        magnitude = _limit_magnitude(b, a, at_infinity=False)
    with np.errstate(divide="ignore"):
        return float(20 * np.log10(magnitude))


def _natural_span_hz(circuit: Circuit) -> tuple[float, float]:
    """A frequency range (Hz) reaching well past every non-zero pole and zero."""
    b, a = circuit.ba()
    roots = np.concatenate([np.roots(b), np.roots(a)]) if b.size > 1 else np.roots(a)
    magnitudes = np.abs(roots)
    magnitudes = magnitudes[magnitudes > 0] / (2 * np.pi)
    if magnitudes.size == 0:
        return math.nan, math.nan
    return magnitudes.min() / 10**_SPAN_DECADES, magnitudes.max() * 10**_SPAN_DECADES


def _crossing_hz(circuit: Circuit, level_db: float, low_hz: float, high_hz: float) -> float:
    """Frequency (Hz) in [low_hz, high_hz] where the gain crosses level_db, by Brent's method
    on log frequency; the endpoints must bracket the crossing, else NaN."""

    def excess(log_f: float) -> float:
        return float(gain_db(circuit, np.array([10.0**log_f]))[0]) - level_db

    lo, hi = math.log10(low_hz), math.log10(high_hz)
    excess_lo, excess_hi = excess(lo), excess(hi)
    if not (math.isfinite(excess_lo) and math.isfinite(excess_hi)) or excess_lo * excess_hi > 0:
        return math.nan
    return 10.0 ** brentq(excess, lo, hi, xtol=1e-14, rtol=4 * np.finfo(float).eps)


def _first_crossing_hz(circuit: Circuit, level_db: float, rising: bool) -> float:
    """Lowest frequency (Hz) where the gain crosses level_db in the given direction, NaN if none."""
    low_hz, high_hz = _natural_span_hz(circuit)
    if not math.isfinite(level_db) or math.isnan(low_hz):
        return math.nan
    decades = math.log10(high_hz / low_hz)
    grid = np.geomspace(low_hz, high_hz, int(decades * _GRID_POINTS_PER_DECADE) + 2)
    above = gain_db(circuit, grid) > level_db
    steps = np.flatnonzero(above[1:] & ~above[:-1]) if rising else np.flatnonzero(~above[1:] & above[:-1])
    if steps.size == 0:
        return math.nan
    i = steps[0]
    return _crossing_hz(circuit, level_db, grid[i], grid[i + 1])


def corner_hz(circuit: Circuit) -> float:
    """-3.01 dB corner (Hz) of a low-pass or high-pass: the lowest frequency where the loaded
    gain crosses the passband gain minus 3.01 dB (half power); NaN for other topologies."""
    kind = RESPONSE_KIND[circuit.topology]
    if kind not in ("lowpass", "highpass"):
        return math.nan
    level_db = passband_gain_db(circuit) + HALF_POWER_DB
    return _first_crossing_hz(circuit, level_db, rising=kind == "highpass")


def corner_analytic_hz(circuit: Circuit) -> float:
    """Unloaded -3.01 dB corner (Hz) of a first-order topology, closed form; NaN otherwise.

    RC and CR: 1 / (2 pi R C). LR low-pass: (R + RL) / (2 pi L) (relative to its DC gain).
    RL high-pass: sqrt((R + RL)^2 - 2 RL^2) / (2 pi L) (relative to its high-frequency gain 1;
    NaN when RL is so large that the gain never falls 3.01 dB).
    """
    v = circuit.values
    if circuit.topology in ("rc-lowpass", "cr-highpass"):
        return 1 / (2 * math.pi * v["R"] * v["C"])
    if circuit.topology == "lr-lowpass":
        return (v["R"] + v["RL"]) / (2 * math.pi * v["L"])
    if circuit.topology == "rl-highpass":
        square = (v["R"] + v["RL"]) ** 2 - 2 * v["RL"] ** 2
        return math.sqrt(square) / (2 * math.pi * v["L"]) if square > 0 else math.nan
    return math.nan


def f0_hz(circuit: Circuit) -> float:
    """Resonant frequency 1 / (2 pi sqrt(L C)), Hz, for RLC and LC topologies; NaN otherwise."""
    v = circuit.values
    if "L" in v and "C" in v:
        return 1 / (2 * math.pi * math.sqrt(v["L"] * v["C"]))
    return math.nan


def q_factor(circuit: Circuit) -> float:
    """Quality factor, dimensionless: sqrt(L/C) / R for series RLC topologies (R + RL for the
    notch); for lc-supply, sqrt(a0 a2) / a1 of its unloaded denominator a2 s^2 + a1 s + a0,
    which is sqrt(L/C) / (RL + RC) without a load resistor. NaN for other topologies."""
    v = circuit.values
    if circuit.topology.startswith("rlc-"):
        return math.sqrt(v["L"] / v["C"]) / (v["R"] + v.get("RL", 0.0))
    if circuit.topology == "lc-supply":
        g = 1 / v["RLOAD"]
        a2 = v["L"] * v["C"] * (1 + v["RC"] * g)
        a1 = v["L"] * g + v["RL"] * v["C"] * (1 + v["RC"] * g) + v["RC"] * v["C"]
        a0 = 1 + v["RL"] * g
        return math.sqrt(a0 * a2) / a1 if a1 > 0 else math.inf
    return math.nan


def figures(circuit: Circuit) -> dict[str, float]:
    """All derived figures, keyed by name with unit suffix (FIGURE_KEYS); NaN where not defined.
    A netlist or golden-curve model gives its own (`response_figures`)."""
    if not isinstance(circuit, Circuit):
        return circuit.figures()
    result = dict.fromkeys(FIGURE_KEYS, math.nan)
    kind = RESPONSE_KIND[circuit.topology]
    result["passband_gain_db"] = passband_gain_db(circuit)
    result["corner_hz"] = corner_hz(circuit)
    result["corner_analytic_hz"] = corner_analytic_hz(circuit)
    result["f0_hz"] = f0_hz(circuit)
    result["q"] = q_factor(circuit)
    if kind == "bandpass":
        f0 = result["f0_hz"]
        level_db = result["passband_gain_db"] + HALF_POWER_DB
        span = 10.0 ** (2 * _SPAN_DECADES)
        result["corner_low_hz"] = _crossing_hz(circuit, level_db, f0 / span, f0)
        result["corner_high_hz"] = _crossing_hz(circuit, level_db, f0, f0 * span)
        result["bandwidth_hz"] = result["corner_high_hz"] - result["corner_low_hz"]
    if kind == "notch":
        f0_gain_db = float(gain_db(circuit, np.array([result["f0_hz"]]))[0])
        result["notch_depth_db"] = f0_gain_db - result["passband_gain_db"]
    result["slowest_time_constant_s"] = circuit.slowest_time_constant_s()
    return result


def response_figures(
    response: Callable[[np.ndarray | float], np.ndarray | complex],
    low_hz: float,
    high_hz: float,
    slowest_time_constant_s: float,
    limits_hz: tuple[float, float] | None = None,
) -> dict[str, float]:
    """Derived figures of any response function (complex H of Hz) scanned from low_hz to high_hz:
    the passband gain (the low end of a low-pass-like response, the high end of a high-pass-like
    one, else the peak), the -3.01 dB corner from it, and the given slowest time constant; NaN for
    the rest. limits_hz: where to take the passband gain of a low-pass (e.g. 0 Hz) and of a
    high-pass instead of the scan's ends, when the response is finite there."""
    result = dict.fromkeys(FIGURE_KEYS, math.nan)
    result["slowest_time_constant_s"] = slowest_time_constant_s
    points = int(math.log10(high_hz / low_hz) * _GRID_POINTS_PER_DECADE) + 2
    grid = np.geomspace(low_hz, high_hz, points)

    def level_db(frequency_hz: np.ndarray | float) -> np.ndarray:
        with np.errstate(divide="ignore"):
            return 20 * np.log10(np.abs(np.asarray(response(frequency_hz))))

    gain = level_db(grid)
    if not np.all(np.isfinite(gain)):
        return result
    peak = float(gain.max())
    if gain[0] >= peak - 0.5 and gain[0] > gain[-1] + 3:
        falling, end = True, 0
    elif gain[-1] >= peak - 0.5 and gain[-1] > gain[0] + 3:
        falling, end = False, -1
    else:
        result["passband_gain_db"] = peak
        return result
    passband = float(gain[end])
    if limits_hz is not None:
        at_limit = float(level_db(limits_hz[0 if falling else 1]))
        passband = at_limit if math.isfinite(at_limit) else passband
    result["passband_gain_db"] = passband
    level = passband + HALF_POWER_DB
    below = gain < level
    steps = np.flatnonzero(below[1:] & ~below[:-1]) if falling else np.flatnonzero(~below[1:] & below[:-1])
    if steps.size:
        i = steps[0] if falling else steps[-1]
        result["corner_hz"] = 10.0 ** brentq(lambda x: float(level_db(10.0**x)) - level, math.log10(grid[i]),
                                             math.log10(grid[i + 1]), xtol=1e-14)
    return result
