"""Circuit models: transfer functions of catalogued topologies, bench loading, derived figures
and tolerance bands. Pure numerics on numpy arrays; SI units throughout."""

from sweeper.circuits.bands import Band, monte_carlo_band, worst_case_band
from sweeper.circuits.catalog import COMPONENTS
from sweeper.circuits.circuit import Circuit, build_circuit
from sweeper.circuits.figures import figures
from sweeper.circuits.loading import Loading

__all__ = [
    "COMPONENTS",
    "Band",
    "Circuit",
    "Loading",
    "build_circuit",
    "figures",
    "monte_carlo_band",
    "worst_case_band",
]
