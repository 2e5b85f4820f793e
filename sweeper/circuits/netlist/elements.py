"""A parsed netlist as plain data: elements with their nodes, values and tolerances.

Node names are compared without regard to case, as SPICE does; they are stored in lower case
("0" is ground, "gnd" is taken as ground too, common practice). Element names keep the
spelling they were written with; a subcircuit instance's elements are named
"<instance>.<element>" (X1.R2) and its inner nodes "<instance>.<node>".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

GROUND = "0"
GROUND_ALIASES = frozenset({"0", "gnd"})

# Element kinds and what they are.
RESISTOR = "R"
CAPACITOR = "C"
INDUCTOR = "L"
SOURCE = "V"  # the independent source: marks the input node, its value is irrelevant (H is a ratio)
VCVS = "E"  # voltage-controlled voltage source: nodes (n+, n-, c+, c-), value = gain
OPAMP = "opamp"  # built-in op-amp: nodes (in+, in-, out)

PART_KINDS = {RESISTOR: "resistance", CAPACITOR: "capacitance", INDUCTOR: "inductance"}
PART_UNITS = {RESISTOR: "Ohm", CAPACITOR: "F", INDUCTOR: "H"}


@dataclass(frozen=True)
class OpAmp:
    """A single-pole op-amp: A(s) = a0 / (1 + s a0 / (2 pi gbw)), then rout to its output.

    a0: DC open-loop gain (inf = ideal); gbw_hz: gain-bandwidth product, Hz (inf = no pole);
    rout_ohm: output resistance, Ohm (0 = none). With a0 and gbw both infinite the op-amp is
    ideal (a nullor: in+ = in-, no input current, any output current).
    """

    a0: float = math.inf
    gbw_hz: float = math.inf
    rout_ohm: float = 0.0

    @property
    def ideal(self) -> bool:
        return math.isinf(self.a0) and math.isinf(self.gbw_hz)


@dataclass(frozen=True)
class Element:
    """One element line, flattened out of its subcircuits.

    name: as written ("R1", "X2.C1"); kind: one of R, C, L, V, E, opamp; nodes: lower-case
    node names in SPICE order; value: Ohm, F or H for parts, the gain of an E, 0 for V and
    op-amps; tolerance_frac: the part's tolerance (0.01 = 1 %); line, column: where it was
    written (1-based, in the file the user reads).
    """

    name: str
    kind: str
    nodes: tuple[str, ...]
    value: float = 0.0
    tolerance_frac: float = 0.0
    opamp: OpAmp | None = None
    line: int = 0
    column: int = 0

    @property
    def is_part(self) -> bool:
        """A resistor, capacitor or inductor: a part with a value and a tolerance."""
        return self.kind in PART_KINDS


@dataclass(frozen=True)
class Netlist:
    """A validated netlist: its elements, the bench's input node and the measured output node.

    H = V(output) / V(input) with the input node driven by the bench. file: the file name shown
    in messages; input_line, output_line: where .input / .output (or the source) were written.
    """

    elements: tuple[Element, ...]
    input_node: str
    output_node: str
    file: str = "<netlist>"
    input_line: int = 0
    output_line: int = 0
    node_spelling: dict[str, str] = field(default_factory=dict)  # lower-case name -> as first written

    @property
    def parts(self) -> tuple[Element, ...]:
        """The R, L and C elements, in netlist order."""
        return tuple(e for e in self.elements if e.is_part)

    def part(self, name: str) -> Element:
        """The part of this name (KeyError when there is none)."""
        for element in self.parts:
            if element.name == name:
                return element
        raise KeyError(name)

    @property
    def nominal(self) -> dict[str, float]:
        """Nominal part values by name, SI (Ohm, F, H)."""
        return {e.name: e.value for e in self.parts}

    @property
    def tolerance(self) -> dict[str, float]:
        """Part tolerances by name, fractions (0.01 = 1 %)."""
        return {e.name: e.tolerance_frac for e in self.parts}

    @property
    def kinds(self) -> dict[str, str]:
        """Part kinds by name: "resistance", "capacitance" or "inductance"."""
        return {e.name: PART_KINDS[e.kind] for e in self.parts}

    @property
    def nodes(self) -> tuple[str, ...]:
        """Every node but ground, in order of first appearance (lower case)."""
        seen: dict[str, None] = {}
        for element in self.elements:
            for node in element.nodes:
                if node != GROUND:
                    seen.setdefault(node, None)
        return tuple(seen)
