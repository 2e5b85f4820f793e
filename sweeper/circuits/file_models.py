"""Models built from files, a netlist or a golden curve, as circuits and tolerance bands.

The plan-facing side (sweeper.verdict.prediction) asks the same three things of every model: the
circuit with given part values under the bench loading, the nominal values and tolerances of
its parts, and its band. These functions answer them for the two file-based models, so the
prediction needs only a branch per question.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from sweeper.circuits.bands import Band
from sweeper.circuits.golden import GoldenCurve, golden_band
from sweeper.circuits.loading import Loading
from sweeper.circuits.netlist.bands import monte_carlo_band, worst_case_band
from sweeper.circuits.netlist.elements import Netlist
from sweeper.circuits.netlist.model import NetlistCircuit

FileModel = Netlist | GoldenCurve


@dataclass(frozen=True)
class MonteCarloSettings:
    """Monte Carlo band settings: samples, percentiles (%), seed, distribution."""

    samples: int = 2000
    percentiles: tuple[float, float] = (0.5, 99.5)
    seed: int = 0
    distribution: str = "uniform"


@dataclass(frozen=True)
class GoldenBandSettings:
    """A golden curve's band: "uncertainty" (+- k u) or "fixed" (+- gain dB, +- phase degrees)."""

    band: str = "uncertainty"
    coverage_factor: float = 2.0
    gain_db: float = 0.0
    phase_deg: float = 0.0


def file_model_circuit(model: FileModel, values: Mapping[str, float], loading: Loading) -> NetlistCircuit | GoldenCurve:
    """The model as a circuit: a netlist with the given part values (SI) under the loading, or
    the golden curve itself (it has no parts; it was measured with its own loading)."""
    if isinstance(model, GoldenCurve):
        if values:
            raise ValueError(f"golden curve: part {next(iter(values))!r}: a golden curve has no parts")
        return model
    return NetlistCircuit(model, dict(values), loading)


def file_model_parts(model: FileModel) -> tuple[dict[str, float], dict[str, float]]:
    """(nominal values SI, tolerances as fractions) of the model's parts; empty for a golden curve."""
    if isinstance(model, GoldenCurve):
        return {}, {}
    return model.nominal, model.tolerance


def file_model_band(
    circuit: NetlistCircuit | GoldenCurve,
    frequency_hz: np.ndarray,
    band: str,
    monte_carlo: MonteCarloSettings | None = None,
    golden: GoldenBandSettings | None = None,
) -> Band | None:
    """The model's band at frequency_hz (Hz): band "worst-case" or "monte-carlo" for a netlist
    (None when no part has a tolerance), the golden settings for a golden curve; None for "none"."""
    if band == "none":
        return None
    if isinstance(circuit, GoldenCurve):
        g = golden or GoldenBandSettings()
        return golden_band(circuit, frequency_hz, g.band, g.coverage_factor, g.gain_db, g.phase_deg)
    if not any(t > 0 for t in circuit.netlist.tolerance.values()):
        return None
    if band == "worst-case":
        return worst_case_band(circuit, frequency_hz)
    mc = monte_carlo or MonteCarloSettings()
    return monte_carlo_band(circuit, frequency_hz, mc.samples, tuple(mc.percentiles), mc.seed, mc.distribution)
