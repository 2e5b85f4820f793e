"""The catalogued divider topologies written as netlists.

Each topology of `sweeper.circuits.catalog` is a series arm from the input to the output and a
shunt arm from the output to ground (`ARMS`); the netlist follows that structure literally:
a series group is a chain through inner nodes, a parallel group shares its two nodes. Parts
keep their catalogue names (R, C, L, RL, ...), which all start with their SPICE letter. An
optional part at its "absent" value is left out: a series resistance of 0 Ohm (a short) and a
parallel one that is infinite (open).
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping

from sweeper.circuits.catalog import ARMS, COMPONENTS, Arm

INPUT, OUTPUT = "in", "out"


def catalog_netlist(topology: str, values: Mapping[str, float], tolerance: Mapping[str, float] | None = None) -> str:
    """Netlist text of a catalogued divider topology with the given part values (Ohm, F, H) and
    tolerances (fractions); ValueError for 'rational' (it has no parts) or an unknown topology."""
    if topology not in ARMS:
        raise ValueError(f"topology {topology!r}: expected one of {', '.join(ARMS)} (divider topologies)")
    tolerance = tolerance or {}
    specs = {spec.name: spec for spec in COMPONENTS[topology]}
    full = {name: float(values.get(name, spec.default)) for name, spec in specs.items()}
    names = _counter()
    lines = [f"* {topology} written as a netlist", f".input {INPUT}", f".output {OUTPUT}"]
    series, shunt = ARMS[topology]
    for arm, a, b in ((series, INPUT, OUTPUT), (shunt, OUTPUT, "0")):
        lines.extend(_arm(arm, a, b, full, tolerance, names))
    return "\n".join(lines) + "\n"


def _counter() -> Iterator[str]:
    i = 0
    while True:
        i += 1
        yield f"n{i}"


def _present(arm: Arm, values: Mapping[str, float], in_series: bool) -> bool:
    if isinstance(arm, str):
        value = values[arm]
        return not (value == 0 and in_series) and not (math.isinf(value) and not in_series)
    return True


def _arm(arm: Arm, a: str, b: str, values: Mapping[str, float], tolerance: Mapping[str, float],
         names: Iterator[str]) -> list[str]:
    """Element lines of an arm between nodes a and b."""
    if isinstance(arm, str):
        tol = tolerance.get(arm, 0.0)
        suffix = f" tol={tol * 100:.12g}%" if tol > 0 else ""
        return [f"{arm} {a} {b} {values[arm]!r}{suffix}"]
    operator, *parts = arm
    if operator == "parallel":
        kept = [p for p in parts if _present(p, values, in_series=False)]
        return [line for part in kept for line in _arm(part, a, b, values, tolerance, names)]
    kept = [p for p in parts if _present(p, values, in_series=True)]
    nodes = [a, *(next(names) for _ in kept[:-1]), b]
    return [line for part, x, y in zip(kept, nodes, nodes[1:]) for line in _arm(part, x, y, values, tolerance, names)]
