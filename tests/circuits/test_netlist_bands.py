"""Tolerance bands over a netlist's parts.

References: the catalogue's own bands (sweeper.circuits.bands, every corner of the tolerance
box, and a seeded Monte Carlo drawing parts in the same order) for the catalogued topologies
written as netlists; and brute force (thousands of random in-tolerance boards) for an active
filter, whose response must stay inside its worst-case band.
"""

from __future__ import annotations

import numpy as np
import pytest
from netlist_examples import butterworth_sallen_key
from test_circuits_scipy_reference import EXAMPLES

from sweeper.circuits import monte_carlo_band as catalog_monte_carlo
from sweeper.circuits import worst_case_band as catalog_worst_case
from sweeper.circuits.netlist import NetlistCircuit, mna, parse_netlist
from sweeper.circuits.netlist import bands
from sweeper.circuits.netlist.catalog import catalog_netlist

TOLERANCES = {"R": 0.01, "L": 0.05, "C": 0.05}
# Same float64 responses through different arithmetic (see test_netlist_catalog): 1e-7 dB and
# 1e-6 degrees are far below any band width (tenths of a dB) and far above rounding.
GAIN_DB, PHASE_DEG = 1e-7, 1e-6


def _pair(topology: str) -> tuple[NetlistCircuit, dict, dict]:
    values = EXAMPLES[topology]
    tolerance = {name: TOLERANCES[name[0]] for name in values}
    netlist = NetlistCircuit(parse_netlist(catalog_netlist(topology, values, tolerance)))
    return netlist, values, tolerance


def _assert_same(ours, theirs) -> None:
    for name in ("nominal_gain_db", "gain_lo_db", "gain_hi_db"):
        np.testing.assert_allclose(getattr(ours, name), getattr(theirs, name), atol=GAIN_DB, rtol=0)
    for name in ("nominal_phase_deg", "phase_lo_deg", "phase_hi_deg"):
        np.testing.assert_allclose(getattr(ours, name), getattr(theirs, name), atol=PHASE_DEG, rtol=0)


@pytest.mark.parametrize("topology", ["rc-lowpass", "rl-highpass", "rlc-lowpass", "rlc-bandpass"])
def test_a_netlists_worst_case_band_is_the_catalogues(topology: str) -> None:
    netlist, values, tolerance = _pair(topology)
    f = np.geomspace(10, 1e6, 200)
    _assert_same(bands.worst_case_band(netlist, f), catalog_worst_case(topology, values, tolerance, f))


@pytest.mark.parametrize("topology", ["rc-lowpass", "rlc-lowpass", "cr-highpass", "rl-highpass"])
def test_a_netlists_monte_carlo_band_is_the_catalogues_for_the_same_seed(topology: str) -> None:
    netlist, values, tolerance = _pair(topology)  # parts in catalogue order, so the draws match
    f = np.geomspace(10, 1e6, 200)
    ours = bands.monte_carlo_band(netlist, f, samples=500, seed=4, distribution="normal")
    theirs = catalog_monte_carlo(topology, values, tolerance, f, samples=500, seed=4, distribution="normal")
    _assert_same(ours, theirs)


def test_the_sensitivity_corners_alone_find_the_vertex_band_of_a_monotonic_circuit(monkeypatch) -> None:
    netlist, _, _ = _pair("rlc-lowpass")
    f = np.geomspace(10, 1e6, 200)
    full = bands.worst_case_band(netlist, f)
    monkeypatch.setattr(bands, "VERTEX_LIMIT", 1)  # no vertex search: sensitivity corners only
    _assert_same(bands.worst_case_band(netlist, f), full)


def test_random_in_tolerance_boards_stay_inside_an_active_filters_worst_case_band() -> None:
    # Brute force: 5000 uniform random part sets of a 4th-order Sallen-Key board (8 parts, R 1 %,
    # C 5 %); every one of them must lie inside the band (seen: 0.0038 dB and 0.088 degrees to
    # spare at the closest; a band that missed a corner would be exceeded by tenths of a dB).
    circuit = NetlistCircuit(parse_netlist(butterworth_sallen_key(4, 10e3, "a0=1e5 gbw=10meg", tolerance="1%,5%")))
    f = np.geomspace(1e3, 1e5, 100)
    band = bands.worst_case_band(circuit, f)
    rng = np.random.default_rng(2026)
    base = circuit.part_values()[0]
    tolerance = np.array([circuit.netlist.tolerance[name] for name in circuit.system.parts])
    h, _ = mna.solve(circuit.system, base * (1 + tolerance * rng.uniform(-1, 1, (5000, base.size))), f)
    gain = 20 * np.log10(np.abs(h))
    phase = band.nominal_phase_deg + np.degrees(np.angle(h / circuit.response(f)))
    assert np.all(gain >= band.gain_lo_db - 1e-9) and np.all(gain <= band.gain_hi_db + 1e-9)
    assert np.all(phase >= band.phase_lo_deg - 1e-9) and np.all(phase <= band.phase_hi_deg + 1e-9)


def test_a_monte_carlo_band_is_deterministic_for_a_seed_and_inside_the_worst_case_band() -> None:
    circuit = NetlistCircuit(parse_netlist(butterworth_sallen_key(4, 10e3, tolerance="1%,5%")))
    f = np.geomspace(1e3, 1e5, 60)
    first = bands.monte_carlo_band(circuit, f, samples=400, seed=9)
    again = bands.monte_carlo_band(circuit, f, samples=400, seed=9)
    np.testing.assert_array_equal(first.gain_hi_db, again.gain_hi_db)
    worst = bands.worst_case_band(circuit, f)
    assert np.all(first.gain_hi_db <= worst.gain_hi_db + 1e-9) and np.all(first.gain_lo_db >= worst.gain_lo_db - 1e-9)


def test_a_netlist_without_tolerances_has_a_zero_width_band() -> None:
    circuit = NetlistCircuit(parse_netlist(butterworth_sallen_key(4, 10e3)))
    f = np.geomspace(1e3, 1e5, 20)
    band = bands.worst_case_band(circuit, f)
    np.testing.assert_array_equal(band.gain_lo_db, band.gain_hi_db)
