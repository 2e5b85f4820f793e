"""Bench loading (source resistance, probes, load resistor) against hand-written circuit formulas."""

from __future__ import annotations

import numpy as np
import pytest

from sweeper.circuits import Loading, build_circuit

R, C = 1.6e3, 100e-9
FREQUENCY_HZ = np.geomspace(10.0, 1e6, 201)
W = 2 * np.pi * FREQUENCY_HZ
# Tolerance for every comparison below: closed forms evaluated in float64 against the divider
# arithmetic, rounding only (~1e-15 relative); 1e-12 leaves margin yet catches any wrong term.
RTOL = 1e-12


def test_rc_input_impedance_unloaded_is_r_plus_capacitor() -> None:
    # Handbook: series impedance Z = R + 1 / (j w C).
    z_in = build_circuit("rc-lowpass", {"R": R, "C": C}).input_impedance_ohm(FREQUENCY_HZ)
    np.testing.assert_allclose(z_in, R + 1 / (1j * W * C), rtol=RTOL)


def test_rc_input_impedance_with_probes() -> None:
    # Handbook: parallel admittances add. Output probe (Rp || Cp) across C, that branch in
    # series with R, and the channel-1 probe across the whole input.
    rp, cp = 1e6, 15e-12
    circuit = build_circuit(
        "rc-lowpass", {"R": R, "C": C}, Loading(probe_resistance_ohm=rp, probe_capacitance_f=cp)
    )
    y_probe = 1 / rp + 1j * W * cp
    z_branch = R + 1 / (1j * W * C + y_probe)
    np.testing.assert_allclose(
        circuit.input_impedance_ohm(FREQUENCY_HZ), 1 / (1 / z_branch + y_probe), rtol=RTOL
    )


def test_rc_probe_loading_adds_capacitance_and_conductance() -> None:
    # Handbook: with Rp || Cp across C, H = 1 / (1 + R / Rp + j w R (C + Cp)).
    rp, cp = 1e6, 15e-12
    circuit = build_circuit(
        "rc-lowpass", {"R": R, "C": C}, Loading(probe_resistance_ohm=rp, probe_capacitance_f=cp)
    )
    expected = 1 / (1 + R / rp + 1j * W * R * (C + cp))
    np.testing.assert_allclose(circuit.response(FREQUENCY_HZ), expected, rtol=RTOL)


def test_source_reference_adds_the_source_resistance_in_series() -> None:
    # Handbook (Thevenin): an ideal-probe RC low-pass driven through Rs sees
    # H = V_out / EMF = 1 / (1 + j w (R + Rs) C); measured against the DUT input, Rs drops out.
    rs = 50.0
    source = build_circuit(
        "rc-lowpass", {"R": R, "C": C}, Loading(source_resistance_ohm=rs, reference="source")
    )
    at_input = build_circuit("rc-lowpass", {"R": R, "C": C}, Loading(source_resistance_ohm=rs))
    np.testing.assert_allclose(source.response(FREQUENCY_HZ), 1 / (1 + 1j * W * (R + rs) * C), rtol=RTOL)
    np.testing.assert_allclose(at_input.response(FREQUENCY_HZ), 1 / (1 + 1j * W * R * C), rtol=RTOL)


def test_source_reference_is_input_reference_times_source_divider() -> None:
    # Handbook voltage divider: V_in = EMF * Z_in / (Z_in + Rs), the relation the simulated bench
    # uses; so H_source = H_input * Z_in / (Z_in + Rs) for any topology and loading.
    rs = 600.0
    values = {"R": 100.0, "L": 10e-3, "C": 100e-9}
    common = {
        "source_resistance_ohm": rs,
        "probe_resistance_ohm": 1e6,
        "probe_capacitance_f": 20e-12,
        "load_resistance_ohm": 5e3,
    }
    at_input = build_circuit("rlc-bandpass", values, Loading(**common))
    source = build_circuit("rlc-bandpass", values, Loading(**common, reference="source"))
    z_in = at_input.input_impedance_ohm(FREQUENCY_HZ)
    expected = at_input.response(FREQUENCY_HZ) * z_in / (z_in + rs)
    np.testing.assert_allclose(source.response(FREQUENCY_HZ), expected, rtol=1e-11)  # rounding only


def test_divider_load_resistor_sits_across_r2() -> None:
    # Handbook: R2 || RLOAD = R2 RLOAD / (R2 + RLOAD); divider ratio (R2 || RLOAD) / (R1 + R2 || RLOAD).
    r1, r2, r_load = 1e3, 2e3, 2e3
    circuit = build_circuit("divider", {"R1": r1, "R2": r2}, Loading(load_resistance_ohm=r_load))
    parallel = r2 * r_load / (r2 + r_load)
    np.testing.assert_allclose(circuit.response(FREQUENCY_HZ), parallel / (r1 + parallel), rtol=RTOL)
    np.testing.assert_allclose(circuit.input_impedance_ohm(FREQUENCY_HZ), r1 + parallel, rtol=RTOL)


def test_rational_block_input_impedance_is_the_channel_1_probe() -> None:
    # The rational model is an ideal block (infinite input impedance): only the probe loads the node.
    ideal = build_circuit("rational", {}, poles_hz=(-1e3,), gain=2 * np.pi * 1e3)
    assert np.all(np.isinf(ideal.input_impedance_ohm(FREQUENCY_HZ).real))
    probed = build_circuit(
        "rational", {}, Loading(probe_resistance_ohm=1e6), poles_hz=(-1e3,), gain=2 * np.pi * 1e3
    )
    np.testing.assert_allclose(probed.input_impedance_ohm(FREQUENCY_HZ), 1e6, rtol=RTOL)


@pytest.mark.parametrize(
    "field, value",
    [
        ("source_resistance_ohm", -1.0),
        ("probe_resistance_ohm", 0.0),
        ("probe_capacitance_f", -1e-12),
        ("load_resistance_ohm", float("nan")),
        ("reference", "emf"),
    ],
)
def test_bad_loading_is_rejected_naming_the_field(field: str, value: object) -> None:
    with pytest.raises(ValueError, match=field):
        Loading(**{field: value})
