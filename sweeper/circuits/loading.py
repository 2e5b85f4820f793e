"""What the bench adds around the DUT: source resistance, probes and a load resistor."""

from __future__ import annotations

import math
from dataclasses import dataclass

REFERENCES = ("input", "source")


@dataclass(frozen=True)
class Loading:
    """Bench loading of a DUT (SI units: Ohm, F).

    source_resistance_ohm: the source's internal resistance, in series with its EMF.
    probe_resistance_ohm, probe_capacitance_f: each scope probe (R parallel C); one loads the
        DUT output, the other (channel 1) the DUT input.
    load_resistance_ohm: a resistor across the DUT output (infinite = none).
    reference: "input" gives H = V_out / V_in at the DUT input node, as a two-channel
        measurement with channel 1 at the DUT input sees it; "source" gives H = V_out / source
        EMF, the source resistance in series.
    """

    source_resistance_ohm: float = 0.0
    probe_resistance_ohm: float = math.inf
    probe_capacitance_f: float = 0.0
    load_resistance_ohm: float = math.inf
    reference: str = "input"

    def __post_init__(self) -> None:
        checks = (
            ("source_resistance_ohm", self.source_resistance_ohm, False, True, "a resistance >= 0 Ohm"),
            ("probe_resistance_ohm", self.probe_resistance_ohm, True, False, "a resistance > 0 Ohm or inf"),
            ("probe_capacitance_f", self.probe_capacitance_f, False, True, "a capacitance >= 0 F"),
            ("load_resistance_ohm", self.load_resistance_ohm, True, False, "a resistance > 0 Ohm or inf"),
        )
        for name, value, infinite_ok, zero_ok, expected in checks:
            ok = isinstance(value, (int, float)) and not math.isnan(value)
            ok = ok and (value > 0 or (zero_ok and value == 0))
            ok = ok and (infinite_ok or math.isfinite(value))
            if not ok:
                raise ValueError(f"loading: {name}: given {value!r}, expected {expected}")
        if self.reference not in REFERENCES:
            raise ValueError(
                f"loading: reference: given {self.reference!r}, expected one of {', '.join(REFERENCES)}"
            )

    @property
    def probe_conductance_s(self) -> float:
        """Conductance of one probe's resistance, siemens (0 for an ideal probe)."""
        return 1.0 / self.probe_resistance_ohm

    @property
    def output_conductance_s(self) -> float:
        """Resistive conductance across the DUT output: probe plus load resistor, siemens."""
        return 1.0 / self.probe_resistance_ohm + 1.0 / self.load_resistance_ohm
