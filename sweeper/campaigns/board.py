"""One board's plan: the plan with this board's serial and, on a simulated bench, its true parts.

Production mode and campaigns run one plan many times. Each run must carry the board's own
serial (the catalog's serial column comes from the run's `dut.serial`), while the plan text
stored in the run file stays the plan file's text, verbatim, with its SHA-256. `plan_for_board`
returns a copy of the plan with those two things changed and nothing else: `source_text`,
`sha256` and `path` are kept, so the run file still proves which plan file was used.

The simulated-board override is a documented demo and test hook, never a plan feature: it
changes the true part values of the *simulated* board for one run (for example a board with
a wrong capacitor fitted, or a capacitor that has drifted). It is refused on a visa bench,
and a run made with it records the values in its metadata (`SIM_OVERRIDE_KEY`), so a run
file never hides that its simulated board differed from the plan's.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

from sweeper.plan.units import parse_quantity

if TYPE_CHECKING:
    from sweeper.plan import Plan

SIM_OVERRIDE_KEY = "sim_components_override"


def sim_component_values(plan: Plan, components: Mapping[str, float | str]) -> dict[str, float]:
    """Part values for the plan's circuit in SI units (Ohm, F, H): numbers as given, text such as
    '120 nF' parsed with the component's unit kind. Raises ValueError for an unknown part name,
    a value of the wrong kind, or a non-positive value."""
    specs = {spec.name: spec for spec in plan.model.part_specs()}
    values: dict[str, float] = {}
    for name, value in components.items():
        spec = specs.get(name)
        if spec is None:
            raise ValueError(f"{name!r} is not a part of a {plan.model.circuit} circuit "
                             f"(expected one of: {', '.join(specs)})")
        number = parse_quantity(value, spec.kind) if isinstance(value, str) else float(value)
        if not number > 0:
            raise ValueError(f"{name}: {value!r} is not a positive {spec.kind}")
        values[name] = number
    return values


def plan_for_board(
    plan: Plan,
    serial: str | None = None,
    sim_components: Mapping[str, float | str] | None = None,
) -> Plan:
    """A copy of the plan for one board: `serial` replaces dut.serial; `sim_components`
    (simulated bench only; Ohm, F, H or text with units) are merged over
    bench.simulation.components. The plan's source text, SHA-256 and path are kept.
    Raises ValueError for an override on a visa bench or a bad part value."""
    update: dict[str, object] = {}
    if serial is not None:
        update["dut"] = plan.dut.model_copy(update={"serial": serial})
    if sim_components:
        if plan.bench.kind != "simulated":
            raise ValueError("a simulated-board override needs bench.kind: simulated")
        merged = {**plan.bench.simulation.components, **sim_component_values(plan, sim_components)}
        simulation = plan.bench.simulation.model_copy(update={"components": merged})
        update["bench"] = plan.bench.model_copy(update={"simulation": simulation})
    return plan.model_copy(update=update) if update else plan


def override_metadata(plan: Plan, sim_components: Mapping[str, float | str] | None) -> dict[str, object]:
    """Run metadata recording a simulated-board override ({} when there is none): part values in
    SI units under SIM_OVERRIDE_KEY."""
    if not sim_components:
        return {}
    return {SIM_OVERRIDE_KEY: sim_component_values(plan, sim_components)}
