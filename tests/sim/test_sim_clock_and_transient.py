"""The simulated clock: acquisitions cost their record duration, transactions their latency;
the DUT transient follows the RC charging law."""

from __future__ import annotations

import time

import numpy as np
import pytest
from sim_rig import R_LOWPASS_OHM, divider, rc_lowpass

from sweeper.sim import SimClock

LATENCY_S = 0.5e-3  # SimConfig default


def test_sim_clock_advances_instantly_and_optionally_in_real_time():
    clock = SimClock()
    started = time.perf_counter()
    clock.sleep(3600.0)
    assert clock.now_s() == 3600.0
    assert time.perf_counter() - started < 0.1  # an hour of simulated time, at once
    with pytest.raises(ValueError):
        clock.sleep(-1.0)
    real = SimClock(realtime=True)
    started = time.perf_counter()
    real.sleep(0.05)
    assert real.now_s() == 0.05
    assert time.perf_counter() - started >= 0.045  # time.sleep may end up to ~ms early on some systems


def test_scope_a_single_advances_the_clock_by_the_record_duration(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    rig.drive(997.0, amplitude_vpp=1.0)
    a = rig.scope_a
    a.write("CAPT:RATE 1e5")
    a.write("CAPT:LENG 10000")
    before = rig.bench.clock.now_s()
    a.write("CAPTure:TAKE")
    elapsed = rig.bench.clock.now_s() - before - LATENCY_S
    record_s = 10_000 / 1e5
    # The trigger fires within one period of the generator, then the record runs.
    assert record_s <= elapsed <= record_s + 1 / 997.0


def test_scope_b_acquisition_advances_the_clock_by_ten_divisions(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    rig.drive(997.0, amplitude_vpp=1.0)
    b = rig.scope_b
    b.write("FRAM:PITC 2e-3")
    b.write("FRAM:DOTS 5000")
    before = rig.bench.clock.now_s()
    b.write("SNAP:GO")
    elapsed = rig.bench.clock.now_s() - before - LATENCY_S
    assert 10 * 2e-3 <= elapsed <= 10 * 2e-3 + 1 / 997.0


def test_each_transaction_costs_the_configured_latency(open_rig):
    rig = open_rig(divider(1e3, 1e3), transaction_latency_s=2e-3)
    before = rig.bench.clock.now_s()
    for _ in range(5):
        rig.gen.query("STIM:TONE?")
    rig.scope_b.write("VIEW1:SENS 1")
    assert rig.bench.clock.now_s() - before == pytest.approx(6 * 2e-3, rel=1e-12)


def step_into_rc(open_rig, transient: bool) -> tuple[np.ndarray, float]:
    """Switch a 1 V DC step into an RC low-pass (tau = 1.6 ms) and capture the output at once."""
    rig = open_rig(rc_lowpass(capacitance_f=1e-6), transient=transient)
    g = rig.gen
    g.write("STIM:SWIN 0.001")  # the smallest sine: 0.5 mV peak, under a tenth of an LSB here
    g.write("STIM:BIAS 1")
    a = rig.scope_a
    a.write("LANE2:DIV 0.2")
    a.write("LANE2:CENT 0.5")  # screen -0.3 V .. 1.3 V
    a.write("CAPT:RATE 1e5")
    a.write("CAPT:LENG 2000")  # 20 ms, about 12 time constants
    g.write("DRIV:ENAB ON")
    a.write("CAPTure:TAKE")
    a.write("CAPT:WIDT 16")
    fields = a.query("LANE2:LEG?").split(",")
    codes = a.query_binary_values("LANE2:BLOC?", datatype="h", container=np.array)
    # DIALECTS.md: volts = (count - reference count) * volts per count + volts at reference
    return (codes - float(fields[3])) * float(fields[2]) + float(fields[4]), float(fields[1])


def test_dc_step_charges_the_rc_with_its_time_constant(open_rig):
    volts, dt = step_into_rc(open_rig, transient=True)
    tau_s = R_LOWPASS_OHM * 1e-6
    lsb_v = 8 * 0.2 / 256
    # Handbook RC charging: v(t) = V (1 - exp(-t / RC)), V = 1 V here (no DC current, no drop
    # across the 50 Ohm source). The last quarter of the record is > 9 tau in: settled within 1 LSB.
    final_v = volts[-500:].mean()
    assert final_v == pytest.approx(1.0, abs=lsb_v)
    # ln(V - v) falls with slope -1 / tau. Fit where V - v > 0.1 V: a half-LSB error (3.1 mV) is at
    # most 3 % in the logarithm there, and bounded errors d over a span of ln(10) tau move an LS slope
    # by at most 3 d / span = 4 %; tolerance 5 %.
    remaining = 1.0 - volts
    use = remaining > 0.1
    assert use.sum() > 100  # the capture did see the transient
    t = dt * np.arange(volts.size)
    slope, _ = np.polyfit(t[use], np.log(remaining[use]), 1)
    assert -1 / slope == pytest.approx(tau_s, rel=0.05)


def test_without_the_transient_model_the_output_steps_at_once(open_rig):
    volts, _ = step_into_rc(open_rig, transient=False)
    assert np.all(np.abs(volts - 1.0) <= 8 * 0.2 / 256)  # every sample within 1 LSB of the final value
