"""The circuit topologies sweeper knows, and the components each one takes.

Kept apart from the maths so the plan loader can check component names without
building a circuit.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class ComponentSpec:
    """One named component of a topology."""

    name: str
    kind: str  # "resistance" (Ohm) | "capacitance" (F) | "inductance" (H)
    required: bool = True
    default: float = 0.0  # used when not required and not given (e.g. inductor DCR 0 Ohm)


R = "resistance"
C = "capacitance"
L = "inductance"

COMPONENTS: dict[str, tuple[ComponentSpec, ...]] = {
    # Resistive divider: R1 from input to output, R2 from output to ground.
    "divider": (ComponentSpec("R1", R), ComponentSpec("R2", R)),
    # First-order RC low-pass: series R, shunt C (output across C).
    "rc-lowpass": (ComponentSpec("R", R), ComponentSpec("C", C)),
    # First-order CR high-pass: series C, shunt R (output across R).
    "cr-highpass": (ComponentSpec("C", C), ComponentSpec("R", R)),
    # RL high-pass: series R, shunt L (output across L); RL is the inductor's series resistance.
    "rl-highpass": (ComponentSpec("R", R), ComponentSpec("L", L), ComponentSpec("RL", R, False, 0.0)),
    # LR low-pass: series L (with its series resistance RL), shunt R (output across R).
    "lr-lowpass": (ComponentSpec("L", L), ComponentSpec("R", R), ComponentSpec("RL", R, False, 0.0)),
    # Series R-L-C driven from the input; output across R, C, L, or L+C in turn.
    "rlc-bandpass": (ComponentSpec("R", R), ComponentSpec("L", L), ComponentSpec("C", C)),
    "rlc-lowpass": (ComponentSpec("R", R), ComponentSpec("L", L), ComponentSpec("C", C)),
    "rlc-highpass": (ComponentSpec("R", R), ComponentSpec("L", L), ComponentSpec("C", C)),
    # Notch: output across L+C; RL (optional) is the inductor's series resistance, which sets
    # a finite notch depth.
    "rlc-notch": (
        ComponentSpec("R", R),
        ComponentSpec("L", L),
        ComponentSpec("C", C),
        ComponentSpec("RL", R, False, 0.0),
    ),
    # LC supply filter: series L (DCR RL), shunt C (ESR RC), load RLOAD across C.
    "lc-supply": (
        ComponentSpec("L", L),
        ComponentSpec("C", C),
        ComponentSpec("RL", R, False, 0.0),
        ComponentSpec("RC", R, False, 0.0),
        ComponentSpec("RLOAD", R, False, float("inf")),
    ),
    # General rational H(s) from zeros, poles (Hz, s-plane / 2 pi) and gain: no components.
    "rational": (),
}


# How each topology splits into a divider: (series arm, shunt arm); the output is taken
# across the shunt arm, and loading (probe, load resistor) sits in parallel with it.
# An arm is a component name or a nested ("series" | "parallel", arm, arm, ...).
Arm = str | tuple

ARMS: dict[str, tuple[Arm, Arm]] = {
    "divider": ("R1", "R2"),
    "rc-lowpass": ("R", "C"),
    "cr-highpass": ("C", "R"),
    "rl-highpass": ("R", ("series", "L", "RL")),
    "lr-lowpass": (("series", "L", "RL"), "R"),
    "rlc-bandpass": (("series", "L", "C"), "R"),
    "rlc-lowpass": (("series", "R", "L"), "C"),
    "rlc-highpass": (("series", "R", "C"), "L"),
    "rlc-notch": ("R", ("series", "L", "C", "RL")),
    "lc-supply": (("series", "L", "RL"), ("parallel", ("series", "C", "RC"), "RLOAD")),
}
