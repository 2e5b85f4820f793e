"""A netlist board as the simulated bench's DUT, with off-nominal parts from the plan.

References: the catalogue's RC low-pass (sweeper.circuits, checked against scipy.signal.freqs
elsewhere) for the DUT physics of the same circuit written as a netlist; and, for a whole
sweep, the netlist model itself with the simulated board's parts (its agreement with ngspice is
checked in tests/circuits/test_netlist_ngspice.py). Tolerances as the README's noise-free RC
claim: 0.01 dB and 0.1 degree (the 8-bit scope quantises; seen: 0.004 dB, 0.007 degree).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from sweeper.circuits import Loading, build_circuit
from sweeper.circuits.netlist import NetlistCircuit, parse_netlist
from sweeper.circuits.netlist.catalog import catalog_netlist
from sweeper.plan import load_plan_text
from sweeper.run.runner import execute_run
from sweeper.run.spec import sim_config
from sweeper.verdict.prediction import nominal_circuit, true_circuit
from sweeper.store.runfile import read_run
from sweeper.sim import physics

DEMO = (Path(__file__).resolve().parents[2] / "configs" / "aa4-netlist.yaml").read_text(encoding="utf-8")
LOADED = Loading(probe_resistance_ohm=1e6, probe_capacitance_f=15e-12)


@pytest.mark.parametrize("frequency_hz", [10.0, 995.0, 1.2e5])
def test_the_physics_of_a_netlist_dut_is_that_of_the_same_catalogued_circuit(frequency_hz: float) -> None:
    values = {"R": 1.6e3, "C": 100e-9}
    catalog = build_circuit("rc-lowpass", values, LOADED)
    netlist = NetlistCircuit(parse_netlist(catalog_netlist("rc-lowpass", values)), loading=LOADED)
    ours = physics.node_spectrum(netlist, frequency_hz, emf_peak_v=1.0, emf_dc_v=0.5)
    theirs = physics.node_spectrum(catalog, frequency_hz, emf_peak_v=1.0, emf_dc_v=0.5)
    np.testing.assert_allclose(ours.input_v, theirs.input_v, rtol=1e-9)
    np.testing.assert_allclose(ours.output_v, theirs.output_v, rtol=1e-9)
    assert ours.dc_output_v == pytest.approx(theirs.dc_output_v, rel=1e-9)
    assert netlist.slowest_time_constant_s() == pytest.approx(catalog.slowest_time_constant_s(), rel=1e-9)


def test_a_netlist_dut_that_is_open_at_dc_is_evaluated_just_above_it() -> None:
    # A series capacitor: H(0) cannot be solved (the output node floats at DC); the physics then
    # evaluates just above 0 Hz, as for the catalogue's high-pass (DC gain 0).
    netlist = NetlistCircuit(parse_netlist(".input in\n.output out\nC1 in out 100n\nR1 out 0 1k\n"))
    spectrum = physics.node_spectrum(netlist, 1e3, emf_peak_v=1.0, emf_dc_v=1.0)
    assert spectrum.dc_output_v == pytest.approx(0.0, abs=1e-9)


def test_the_simulated_board_is_the_netlist_with_the_plans_true_parts() -> None:
    plan = load_plan_text(DEMO.replace("components: {}", "components: {C3: 2.495 nF}"))
    board = sim_config(plan).circuit
    assert isinstance(board, NetlistCircuit) and board.loading.reference == "input"
    assert board.values["C3"] == pytest.approx(2.495e-9) and board.values["C1"] == pytest.approx(861.3e-12)
    assert nominal_circuit(plan.model).values["C3"] == pytest.approx(2.079e-9)


def test_a_noise_free_sweep_of_a_netlist_board_measures_its_true_response(tmp_path: Path) -> None:
    text = DEMO.replace("components: {}", "components: {C3: 2.495 nF}").replace("range_noise: 0.2 %", "range_noise: 0 %")
    plan = load_plan_text(text)
    outcome = execute_run(plan, tmp_path)
    assert outcome.status == "complete", outcome.error
    frame, metadata = read_run(outcome.run_path)
    assert metadata["model_files"] == {}  # an inline netlist lives in the plan text itself
    f = frame["frequency_hz"].to_numpy()
    h = true_circuit(plan.model, plan.bench.simulation.components).response(f)
    gain_error = frame["gain_db"].to_numpy() - 20 * np.log10(np.abs(h))
    phase_error = (frame["phase_deg"].to_numpy() - np.degrees(np.angle(h)) + 180) % 360 - 180
    assert np.max(np.abs(gain_error)) < 0.01 and np.max(np.abs(phase_error)) < 0.1
    # and the off part shows: the nominal board differs by far more near the corner
    nominal = nominal_circuit(plan.model).response(f)
    assert np.max(np.abs(frame["gain_db"].to_numpy() - 20 * np.log10(np.abs(nominal)))) > 0.5
