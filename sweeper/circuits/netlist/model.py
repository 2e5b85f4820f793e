"""A netlist as a circuit model: its response under bench loading, input impedance and poles.

`NetlistCircuit` answers what the rest of sweeper asks of a catalogued `Circuit` (response,
input impedance, slowest time constant, derived figures), so predictions, limits, the
simulated bench and `sweeper check` take either.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from sweeper.circuits.circuit import slowest_time_constant_s
from sweeper.circuits.loading import Loading
from sweeper.circuits.netlist import mna
from sweeper.circuits.netlist.elements import Netlist

TOPOLOGY = "netlist"
_SPAN_DECADES = 3  # scan this far beyond the outermost natural frequencies


@dataclass(frozen=True, eq=False)
class NetlistCircuit:
    """A netlist with part values (SI, by part name; missing ones nominal) and bench loading."""

    netlist: Netlist
    values: dict[str, float] = field(default_factory=dict)
    loading: Loading = field(default_factory=Loading)
    topology: str = TOPOLOGY

    def __post_init__(self) -> None:
        unknown = [name for name in self.values if name not in self.netlist.nominal]
        if unknown:
            raise ValueError(f"netlist: part {unknown[0]!r}: unknown, expected one of: "
                             f"{', '.join(self.netlist.nominal) or 'no parts'}")
        for name, value in self.values.items():
            if not (isinstance(value, (int, float)) and 0 < value < math.inf):
                raise ValueError(f"netlist: part {name!r}: given {value!r}, expected a value > 0, finite")
        object.__setattr__(self, "values", {**self.netlist.nominal, **self.values})

    @cached_property
    def system(self) -> mna.System:
        """The MNA system under the loading and its reference."""
        return mna.compile_system(self.netlist, self.loading)

    @cached_property
    def _input_system(self) -> mna.System:
        return mna.compile_system(self.netlist, self.loading, reference="input")

    def part_values(self) -> np.ndarray:
        """The part values as a (1, P) array in the system's order."""
        return np.array([[self.values[name] for name in self.system.parts]])

    def with_values(self, values: Mapping[str, float]) -> NetlistCircuit:
        """The same netlist and loading with some part values changed."""
        return NetlistCircuit(self.netlist, {**self.values, **values}, self.loading)

    def response(self, frequency_hz: np.ndarray | float) -> np.ndarray | complex:
        """Complex H(j 2 pi f) for the loading's reference at each frequency (Hz >= 0); a scalar
        frequency gives a complex number. NaN where the equations are singular (e.g. 0 Hz with a
        node that only capacitors reach)."""
        f = np.asarray(frequency_hz, dtype=float)
        _check_frequencies(f)
        h, _ = mna.solve(self.system, self.part_values(), f.reshape(-1))
        return complex(h[0, 0]) if f.ndim == 0 else h[0].reshape(f.shape)

    def input_impedance_ohm(self, frequency_hz: np.ndarray | float) -> np.ndarray | complex:
        """Impedance into the DUT input node (output loaded, channel-1 probe across the input), Ohm."""
        f = np.asarray(frequency_hz, dtype=float)
        _check_frequencies(f)
        _, current = mna.solve(self._input_system, self.part_values(), f.reshape(-1))
        s = 2j * np.pi * f.reshape(-1)
        y = current[0] + self.loading.probe_conductance_s + s * self.loading.probe_capacitance_f
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(y == 0, complex(np.inf, 0.0), 1.0 / np.where(y == 0, 1.0, y))
        return complex(z[0]) if f.ndim == 0 else z.reshape(f.shape)

    def poles_rad_s(self) -> np.ndarray:
        """Natural frequencies of the circuit (rad/s, complex), modes at 0 Hz left out
        (`mna.poles_rad_s`)."""
        return mna.poles_rad_s(self.system, self.part_values())

    def slowest_time_constant_s(self) -> float:
        """1 / min |Re(pole)|, s: 0 without poles, inf with a pole on the imaginary axis."""
        return slowest_time_constant_s(self.poles_rad_s())

    def figures(self) -> dict[str, float]:
        """Derived figures (`sweeper.circuits.figures.response_figures`) over a range reaching
        three decades past every natural frequency; passband limits at 0 Hz and far above."""
        from sweeper.circuits.figures import response_figures

        low_hz, high_hz = self._span_hz()
        return response_figures(self.response, low_hz, high_hz, self.slowest_time_constant_s(),
                                limits_hz=(0.0, high_hz * 10**_SPAN_DECADES))

    def _span_hz(self) -> tuple[float, float]:
        """A frequency range (Hz) reaching well past every natural frequency."""
        poles = np.abs(self.poles_rad_s()) / (2 * np.pi)
        if poles.size == 0:
            return 1.0, 1e6
        return float(poles.min()) / 10**_SPAN_DECADES, float(poles.max()) * 10**_SPAN_DECADES


def _check_frequencies(f: np.ndarray) -> None:
    if not np.all(np.isfinite(f) & (f >= 0)):
        raise ValueError("frequency_hz: expected finite frequencies >= 0 Hz")

