"""The catalogued topologies written as netlists agree with the catalogue's own circuits
(sweeper.circuits.Circuit, checked in turn against scipy.signal.freqs in
test_circuits_scipy_reference), under every bench loading: response, input impedance and
slowest time constant.

Tolerances: the two are independent float64 computations (complex impedance arithmetic vs
modified nodal analysis with a sparse LU). The test frequencies reach three decades past
every natural frequency, probe-capacitance poles included (up to 1e14 Hz), where the nodal
equations are ill-conditioned (condition numbers near 1e6 there): a one-off evaluation of the
same equations in 40-digit arithmetic (mpmath, while this was written; not repeated here) put
our error at 2e-9 relative at worst; 1e-8 keeps a factor of 5 of margin, while a wrong stamp changes H by
far more. Input impedances are a difference of nearly equal currents at those extremes (Z_in
of an RLC high-pass at 130 MHz is 220 + 8e5 j Ohm), good to 1.4e-7 relative seen: 1e-6.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_circuits_scipy_reference import EXAMPLES, LOADINGS, _frequencies

from sweeper.circuits import build_circuit
from sweeper.circuits.figures import figures
from sweeper.circuits.netlist import NetlistCircuit, parse_netlist
from sweeper.circuits.netlist.catalog import catalog_netlist


@pytest.mark.parametrize("loading_name", sorted(LOADINGS))
@pytest.mark.parametrize("topology", sorted(EXAMPLES))
def test_a_catalogued_topology_as_a_netlist_has_the_catalogue_response(topology: str, loading_name: str) -> None:
    loading = LOADINGS[loading_name]
    circuit = build_circuit(topology, EXAMPLES[topology], loading)
    netlist = NetlistCircuit(parse_netlist(catalog_netlist(topology, EXAMPLES[topology])), loading=loading)
    f = _frequencies(circuit)
    np.testing.assert_allclose(netlist.response(f), circuit.response(f), rtol=1e-8)
    z_catalog, z_netlist = circuit.input_impedance_ohm(f), netlist.input_impedance_ohm(f)
    finite = np.isfinite(z_catalog)
    assert np.array_equal(finite, np.isfinite(z_netlist))
    np.testing.assert_allclose(z_netlist[finite], z_catalog[finite], rtol=1e-6)
    assert netlist.slowest_time_constant_s() == pytest.approx(circuit.slowest_time_constant_s(), rel=1e-9)


@pytest.mark.parametrize("topology", ["rc-lowpass", "lr-lowpass", "cr-highpass", "rl-highpass"])
def test_a_first_order_netlist_has_the_catalogue_corner_and_passband(topology: str) -> None:
    circuit = build_circuit(topology, EXAMPLES[topology])
    netlist = NetlistCircuit(parse_netlist(catalog_netlist(topology, EXAMPLES[topology])))
    ours, theirs = figures(netlist), figures(circuit)
    assert ours["corner_hz"] == pytest.approx(theirs["corner_hz"], rel=1e-9)
    assert ours["passband_gain_db"] == pytest.approx(theirs["passband_gain_db"], abs=1e-9)


def test_optional_parts_at_their_absent_values_are_left_out_of_the_netlist() -> None:
    text = catalog_netlist("lc-supply", {"L": 10e-6, "C": 47e-6})  # RL = RC = 0, RLOAD = inf
    names = [line.split()[0] for line in text.splitlines() if line and line[0] not in "*."]
    assert names == ["L", "C"]
    with pytest.raises(ValueError, match="divider topologies"):
        catalog_netlist("rational", {})
