"""What the board should do: the plan's nominal circuit, its tolerance band and the limits.

Bridges the plan (validated data) and the pure circuit maths; the engine, `sweeper check`
and the run file all take their prediction from here so they agree.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from sweeper.circuits import Circuit, Loading, build_circuit, monte_carlo_band, worst_case_band
from sweeper.verdict.limits import Limits, build_limits, wrap_deg

if TYPE_CHECKING:
    from sweeper.plan import Plan


def plan_loading(plan: "Plan", reference: str | None = None) -> Loading:
    """The plan's source and probe loading as a circuits.Loading (reference overridable)."""
    ld = plan.model.loading
    return Loading(
        source_resistance_ohm=ld.source_resistance_ohm,
        probe_resistance_ohm=ld.probe_resistance_ohm,
        probe_capacitance_f=ld.probe_capacitance_f,
        load_resistance_ohm=ld.load_resistance_ohm,
        reference=reference or ld.reference,
    )


def nominal_values(plan: "Plan") -> dict[str, float]:
    """Nominal component values of the plan's model, SI units."""
    return {name: comp.value for name, comp in plan.model.components.items()}


def tolerances(plan: "Plan") -> dict[str, float]:
    """Component tolerances of the plan's model as fractions (0.01 = 1 %)."""
    return {name: comp.tolerance_frac for name, comp in plan.model.components.items()}


def circuit_with(plan: "Plan", values: dict[str, float], reference: str | None = None) -> Circuit:
    """The plan's topology and loading with the given component values (SI)."""
    m = plan.model
    return build_circuit(
        m.circuit,
        values,
        plan_loading(plan, reference),
        zeros_hz=m.zeros_hz or (),
        poles_hz=m.poles_hz or (),
        gain=m.gain if m.gain is not None else 1.0,
    )


def nominal_circuit(plan: "Plan") -> Circuit:
    """The predicted circuit with nominal parts and the plan's loading."""
    return circuit_with(plan, nominal_values(plan))


def true_circuit(plan: "Plan", reference: str | None = None) -> Circuit:
    """The simulated board: nominal parts overridden by bench.simulation.components."""
    return circuit_with(plan, {**nominal_values(plan), **plan.bench.simulation.components}, reference)


def gain_phase_of(h: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB) and wrapped phase (degrees) of a complex response."""
    return 20 * np.log10(np.abs(h)), wrap_deg(np.degrees(np.angle(h)))


def predict_limits(plan: "Plan", frequency_hz: np.ndarray) -> Limits:
    """Model curve and acceptance limits at each frequency, from the plan's limits section."""
    circuit = nominal_circuit(plan)
    gain_db, phase_deg = gain_phase_of(circuit.response(frequency_hz))
    lim = plan.limits
    band = None
    toleranced = any(t > 0 for t in tolerances(plan).values())
    if lim.band != "none" and plan.model.circuit != "rational" and toleranced:
        common = dict(loading=plan_loading(plan))
        if lim.band == "worst-case":
            b = worst_case_band(plan.model.circuit, nominal_values(plan), tolerances(plan), frequency_hz, **common)
        else:
            mc = lim.monte_carlo
            b = monte_carlo_band(
                plan.model.circuit,
                nominal_values(plan),
                tolerances(plan),
                frequency_hz,
                samples=mc.samples,
                percentiles=tuple(mc.percentiles),
                seed=mc.seed,
                distribution=mc.distribution,
                **common,
            )
        band = (b.gain_lo_db, b.gain_hi_db, b.phase_lo_deg, b.phase_hi_deg)
        # The band's phases are unwrapped around the nominal; keep the model on the same branch.
        phase_deg = np.asarray(b.nominal_phase_deg, dtype=float)
        gain_db = np.asarray(b.nominal_gain_db, dtype=float)
    masks = [m.model_dump() for m in lim.masks]
    return build_limits(
        frequency_hz,
        gain_db,
        phase_deg,
        band=band,
        allowance_gain_db=lim.allowance_gain_db,
        allowance_phase_deg=lim.allowance_phase_deg,
        fixed_gain_db=lim.fixed_gain_db,
        fixed_phase_deg=lim.fixed_phase_deg,
        masks=masks,
    )
