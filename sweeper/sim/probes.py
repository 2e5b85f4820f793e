"""The bench's own scope probes: each one loads the DUT node it touches with its R parallel C.

A probe here is what the bench really has, whatever the plan's model assumes: with probes
given, the simulated DUT carries these instead of the probe loading its own `Loading` names.
Channel 1's probe sits on the DUT input node, channel 2's on the output node.

Attenuation (1x, 10x) is compensated by the scope's probe setting, so the volts a scope reads
are volts at the probe tip; what remains of it is that the scope's own front-end noise
(`SimConfig.noise_v`, referred to its input) appears multiplied by the attenuation at the tip.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np


@dataclass(frozen=True)
class Probe:
    """One probe: attenuation factor (1 for 1x, 10 for 10x), tip resistance (Ohm) and
    capacitance (F) to ground."""

    attenuation: float = 1.0
    resistance_ohm: float = math.inf
    capacitance_f: float = 0.0

    def __post_init__(self) -> None:
        if not (math.isfinite(self.attenuation) and self.attenuation >= 1.0):
            raise ValueError(f"probe attenuation: given {self.attenuation!r}, expected a factor >= 1 (1x, 10x)")
        if not (self.resistance_ohm > 0 and not math.isnan(self.resistance_ohm)):
            raise ValueError(f"probe resistance: given {self.resistance_ohm!r} Ohm, expected > 0 Ohm or inf")
        if not (math.isfinite(self.capacitance_f) and self.capacitance_f >= 0):
            raise ValueError(f"probe capacitance: given {self.capacitance_f!r} F, expected >= 0 F")

    def admittance_s(self, frequency_hz: float | np.ndarray) -> complex | np.ndarray:
        """Admittance of R parallel C, siemens: 1 / R + j 2 pi f C."""
        return 1.0 / self.resistance_ohm + 2j * math.pi * np.asarray(frequency_hz) * self.capacitance_f


class ProbedDut:
    """A sweeper.circuits.Circuit as the bench's probes load it (satisfies physics.DutModel).

    Channel 2's probe replaces the probe of the circuit's Loading at the output node, so the
    response and time constants are the circuit's own algebra with that shunt. The circuit
    puts the same probe across its input node too; the input admittance is corrected to
    channel 1's probe instead: Y_in = 1 / Z_in(circuit) - Y(probe 2) + Y(probe 1).
    """

    def __init__(self, circuit: object, input_probe: Probe, output_probe: Probe) -> None:
        loading = getattr(circuit, "loading", None)
        if loading is None:
            raise ValueError("bench probes need a sweeper.circuits.Circuit DUT (one with a Loading)")
        self.circuit = replace(  # type: ignore[type-var]
            circuit,
            loading=replace(
                loading,
                probe_resistance_ohm=output_probe.resistance_ohm,
                probe_capacitance_f=output_probe.capacitance_f,
            ),
        )
        self.input_probe = input_probe
        self.output_probe = output_probe

    @property
    def loading(self) -> object:
        """The loading the probed circuit is evaluated with (channel 2's probe as its probe)."""
        return self.circuit.loading

    def response(self, frequency_hz: float) -> complex:
        """V_out / V_in with channel 2's probe across the output."""
        return self.circuit.response(frequency_hz)

    def input_impedance_ohm(self, frequency_hz: float) -> complex:
        """Impedance at the DUT input node with channel 1's probe across it, Ohm (inf when open)."""
        z = complex(np.asarray(self.circuit.input_impedance_ohm(frequency_hz)).reshape(-1)[0])
        y = (0j if math.isinf(abs(z)) else 1.0 / z) - complex(self.output_probe.admittance_s(frequency_hz))
        y += complex(self.input_probe.admittance_s(frequency_hz))
        return complex(math.inf, 0.0) if y == 0 else 1.0 / y

    def slowest_time_constant_s(self) -> float:
        """Slowest time constant of the probed circuit, s."""
        return self.circuit.slowest_time_constant_s()
