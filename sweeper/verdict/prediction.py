"""What the board should do: the nominal circuit of the plan's model, its tolerance band and
the limits around it.

Takes the plan's `model` and `limits` sections (small validated values), never the whole plan;
the engine's ranges, `sweeper check`, the run file and the judge all take their prediction from
here so they agree.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np

from sweeper.circuits import (
    Circuit,
    Loading,
    build_circuit,
    monte_carlo_band,
    worst_case_band,
)
from sweeper.circuits.file_models import (
    GoldenBandSettings,
    MonteCarloSettings,
    file_model_band,
    file_model_circuit,
    file_model_parts,
)
from sweeper.verdict.limits import Limits, build_limits, wrap_deg

if TYPE_CHECKING:
    from sweeper.plan.schema import Limits as LimitsSection
    from sweeper.plan.schema import Model


def model_loading(model: Model, reference: str | None = None) -> Loading:
    """The model's source and probe loading as a circuits.Loading (reference overridable)."""
    ld = model.loading
    return Loading(
        source_resistance_ohm=ld.source_resistance_ohm,
        probe_resistance_ohm=ld.probe_resistance_ohm,
        probe_capacitance_f=ld.probe_capacitance_f,
        load_resistance_ohm=ld.load_resistance_ohm,
        reference=reference or ld.reference,
    )


def _file_model(model: Model):
    """The model's netlist or golden curve, None for catalogued and rational models."""
    return model.parsed_netlist or model.golden_curve


def nominal_values(model: Model) -> dict[str, float]:
    """Nominal component values of the model, SI units (Ohm, F, H)."""
    if _file_model(model) is not None:
        return file_model_parts(_file_model(model))[0]
    return {name: comp.value for name, comp in model.components.items()}


def tolerances(model: Model) -> dict[str, float]:
    """Component tolerances of the model as fractions (0.01 = 1 %)."""
    if _file_model(model) is not None:
        return file_model_parts(_file_model(model))[1]
    return {name: comp.tolerance_frac for name, comp in model.components.items()}


def circuit_with(model: Model, values: Mapping[str, float], reference: str | None = None) -> Circuit:
    """The model's topology and loading with the given component values (SI)."""
    if _file_model(model) is not None:
        return file_model_circuit(_file_model(model), dict(values), model_loading(model, reference))
    return build_circuit(
        model.circuit,
        dict(values),
        model_loading(model, reference),
        zeros_hz=model.zeros_hz or (),
        poles_hz=model.poles_hz or (),
        gain=model.gain if model.gain is not None else 1.0,
    )


def nominal_circuit(model: Model) -> Circuit:
    """The predicted circuit with nominal parts and the model's loading."""
    return circuit_with(model, nominal_values(model))


def true_circuit(model: Model, true_values: Mapping[str, float], reference: str | None = None) -> Circuit:
    """A board whose parts differ from nominal: nominal values overridden by true_values (SI)."""
    return circuit_with(model, {**nominal_values(model), **true_values}, reference)


def gain_phase_of(h: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB) and wrapped phase (degrees) of a complex response."""
    return 20 * np.log10(np.abs(h)), wrap_deg(np.degrees(np.angle(h)))


def predict_limits(model: Model, limits: LimitsSection, frequency_hz: np.ndarray) -> Limits:
    """Model curve and acceptance limits at each frequency (Hz), from the plan's limits section."""
    circuit = nominal_circuit(model)
    gain_db, phase_deg = gain_phase_of(circuit.response(frequency_hz))
    band = None
    toleranced = any(t > 0 for t in tolerances(model).values())
    b = None
    if _file_model(model) is not None:
        g, mc = model.golden, limits.monte_carlo
        golden = GoldenBandSettings(g.band, g.coverage_factor, g.gain_db or 0.0, g.phase_deg or 0.0) if g else None
        settings = MonteCarloSettings(mc.samples, tuple(mc.percentiles), mc.seed, mc.distribution)
        b = file_model_band(circuit, frequency_hz, limits.band, settings, golden)
    elif limits.band != "none" and model.circuit != "rational" and toleranced:
        common = dict(loading=model_loading(model))
        if limits.band == "worst-case":
            b = worst_case_band(model.circuit, nominal_values(model), tolerances(model), frequency_hz, **common)
        else:
            mc = limits.monte_carlo
            b = monte_carlo_band(
                model.circuit,
                nominal_values(model),
                tolerances(model),
                frequency_hz,
                samples=mc.samples,
                percentiles=tuple(mc.percentiles),
                seed=mc.seed,
                distribution=mc.distribution,
                **common,
            )
    if b is not None:
        band = (b.gain_lo_db, b.gain_hi_db, b.phase_lo_deg, b.phase_hi_deg)
        # The band's phases are unwrapped around the nominal; keep the model on the same branch.
        phase_deg = np.asarray(b.nominal_phase_deg, dtype=float)
        gain_db = np.asarray(b.nominal_gain_db, dtype=float)
    masks = [m.model_dump() for m in limits.masks]
    return build_limits(
        frequency_hz,
        gain_db,
        phase_deg,
        band=band,
        allowance_gain_db=limits.allowance_gain_db,
        allowance_phase_deg=limits.allowance_phase_deg,
        fixed_gain_db=limits.fixed_gain_db,
        fixed_phase_deg=limits.fixed_phase_deg,
        masks=masks,
    )


def limits_function(model: Model, limits: LimitsSection):
    """The model and limits at one frequency f (Hz) as `Limits.at` gives them: what a point
    measured at f is judged against (the same prediction as `predict_limits`, evaluated at f)."""
    return lambda f: predict_limits(model, limits, np.array([float(f)])).at(0)


def model_response(circuit: Circuit):
    """The circuit's complex response at one frequency (Hz), as the engine's ranges want it."""
    return lambda f: complex(circuit.response(np.array([f]))[0])
