"""Scope-measurement mode: the simulated scope's own Vpp and phase, and the engine path over them."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from transport_rig import C_F, CP_F, R_OHM, RP_OHM, phase_difference_deg, rc_plan, rc_reference

from sweeper.run.check import check_plan
from sweeper.run.spec import sim_config
from sweeper.measure.scope_measure import resolution_u_gain_db, type_a_gain_phase
from sweeper.sim import GENERATOR_RESOURCE, SCOPE_A_RESOURCE, open_sim_resource_manager
from sweeper.sim.instruments.scope_measurements import crossing_phase_deg, peak_to_peak, rising_crossings


def test_crossing_phase_of_known_sines() -> None:
    t = np.arange(20_000) / 1e6  # 1 MSa/s, 20 ms: 20 cycles of 1 kHz
    reference = np.sin(2 * np.pi * 1e3 * t)
    for phase_deg in (-150.0, -45.0, -0.5, 0.0, 30.0, 170.0):
        signal = 0.01 * np.sin(2 * np.pi * 1e3 * t + np.radians(phase_deg)) + 0.002  # small, offset
        # Noise-free and 1000 samples per period: linear interpolation of a sine's crossing is
        # exact to second order, far below 0.01 degree (numpy sine as the reference).
        assert crossing_phase_deg(reference, signal) == pytest.approx(phase_deg, abs=0.01)
    # 20 periods, but the rise at sample 0 has no sample below the band before it: 19 crossings.
    assert len(rising_crossings(reference)) == 19
    assert math.isnan(crossing_phase_deg(np.zeros(100), reference[:100]))  # no crossings: no phase


def test_peak_to_peak_is_max_minus_min_and_biased_by_noise() -> None:
    t = np.arange(10_000) / 1e6
    clean = 0.5 * np.sin(2 * np.pi * 1e3 * t)
    assert peak_to_peak(clean) == pytest.approx(1.0, rel=1e-6)  # 2 x amplitude (handbook)
    noisy = clean + np.random.default_rng(1).normal(0.0, 0.01, clean.size)
    # max - min grows with noise: for 10,000 Gaussian samples the extremes sit about 3.5 to 4
    # sigma out, and near the sine's flat tops they add, so the bias is several sigma (common practice).
    assert 1.0 + 0.04 < peak_to_peak(noisy) < 1.0 + 0.10


def test_type_a_evaluation_follows_the_gum() -> None:
    gains = np.array([-3.01, -3.03, -3.02, -3.05])
    phases = np.array([179.5, -179.7, 179.9, -179.9])  # straddling +-180
    gain, phase, u_gain, u_phase = type_a_gain_phase(gains, phases)
    # JCGM 100:2008 4.2.1 and 4.2.3: mean, and s(q)/sqrt(n) with s the experimental std (n - 1).
    assert gain == pytest.approx(gains.mean())
    assert u_gain == pytest.approx(np.std(gains, ddof=1) / 2.0)
    unwrapped = np.array([179.5, 180.3, 179.9, 180.1])
    assert phase_difference_deg(phase, unwrapped.mean()) == pytest.approx(0.0, abs=1e-9)
    assert u_phase == pytest.approx(np.std(unwrapped, ddof=1) / 2.0)
    with pytest.raises(ValueError):
        type_a_gain_phase(gains[:1], phases[:1])


def test_resolution_uncertainty_matches_its_formula() -> None:
    # Equal 1 Vpp readings on 1 V spans of an 8-bit ADC: LSB = 1/256 V; each Vpp carries
    # LSB/sqrt(6) (two rectangular +-LSB/2 errors, JCGM 100:2008 F.2.2.1); the ratio adds both.
    lsb = 1.0 / 256
    expected = 20 / math.log(10) * math.sqrt(2) * lsb / math.sqrt(6)
    assert resolution_u_gain_db(1.0, 1.0, 1.0, 1.0, 8) == pytest.approx(expected, rel=1e-12)


def test_simulated_scope_a_measures_its_own_acquisition(tmp_path: Path) -> None:
    config = sim_config(rc_plan(tmp_path / "dut.yaml", noise="0 V"))
    rm, _bench = open_sim_resource_manager(config)
    try:
        term = dict(read_termination="\n", write_termination="\n")
        gen = rm.open_resource(GENERATOR_RESOURCE, **term)
        scope = rm.open_resource(SCOPE_A_RESOURCE, **term)
        assert scope.query("GAUG:SWIN? LANE1") == "9.91E+37"  # no acquisition yet (DIALECTS.md)
        assert scope.query("SYST:ERR?") == '-230,"Data corrupt or stale"'
        gen.write("STIM:SWIN 2;STIM:TONE 1000;DRIV:ENAB ON")
        scope.write("LANE1:DIV 0.25;LANE2:DIV 0.25;CAPT:RATE 1e6;CAPT:LENG 20000")
        assert scope.query("CAPT:TAKE;*OPC?") == "1"
        vpp_in = float(scope.query("GAUG:SWIN? LANE1"))
        vpp_out = float(scope.query("GAUG:SWIN? LANE2"))
        phase = float(scope.query("GAUG:PHAS? LANE1,LANE2"))
        assert scope.query("SYST:ERR?") == '0,"No error"'
    finally:
        rm.close()
    gain_ref, phase_ref = rc_reference(np.array([1000.0]))  # scipy.signal.freqs
    # Handbook divider: the 2 Vpp EMF reaches the input node through the generator's 50 Ohm,
    # V_in = EMF Z_in / (Z_in + 50) with Z_in = R + (C + Cp) || Rp at 1 kHz.
    w = 2 * math.pi * 1e3
    z_in = R_OHM + 1 / (1j * w * (C_F + CP_F) + 1 / RP_OHM)
    # Noise-free 8-bit record on a 2 V span: max and min each within half an LSB (7.8 mV) of the
    # true peaks, so Vpp is within one LSB of the true 2 x amplitude.
    assert vpp_in == pytest.approx(2.0 * abs(z_in / (z_in + 50.0)), abs=2.0 / 256)
    assert 20 * math.log10(vpp_out / vpp_in) == pytest.approx(gain_ref[0], abs=0.1)
    # Crossings on a quantised, noise-free record: about an LSB of slope error, 0.3 degree.
    assert phase == pytest.approx(phase_ref[0], abs=0.3)


def test_scope_measure_mode_needs_a_measuring_scope_driver(tmp_path: Path) -> None:
    plan = rc_plan(tmp_path / "plan.yaml", mode="scope-measure", instrument="TCPIP0::sim-scope-b::5025::SOCKET",
                   driver="sim-scope-b.yaml")
    report = check_plan(plan)
    assert any("measure_amplitude" in problem and "bench.scope.driver" in problem for problem in report.problems)
    assert check_plan(rc_plan(tmp_path / "ok.yaml", mode="scope-measure")).problems == []
