"""Benches do not share state; the fault hook sees every message and can break things."""

from __future__ import annotations

import numpy as np
import pytest
from pyvisa import constants
from pyvisa.errors import VisaIOError
from sim_rig import TERMINATION, divider, rc_lowpass

from sweeper.sim import GENERATOR_RESOURCE, METER_RESOURCE, SCOPE_A_RESOURCE, FaultPlan


def capture_codes(rig) -> np.ndarray:
    rig.drive(997.0, amplitude_vpp=1.0)
    a = rig.scope_a
    a.write("CAPT:RATE 1e5")
    a.write("CAPT:LENG 2000")
    a.write("CAPTure:TAKE")
    a.write("CAPT:WIDT 8")
    return a.query_binary_values("LANE1:BLOC?", datatype="b", container=np.array)


def test_two_benches_do_not_share_state(open_rig):
    one = open_rig(divider(1e3, 1e3))
    two = open_rig(divider(1e3, 1e3))
    assert one.bench is not two.bench
    assert one.gen.visalib is not two.gen.visalib
    one.gen.write("STIM:TONE 5000")
    one.gen.write("NOT:A:COMMAND")
    one.bench.clock.sleep(10.0)
    assert float(two.gen.query("STIM:TONE?")) == 1000.0  # *RST default, untouched
    assert two.gen.query("SYST:ERR?") == '0,"No error"'
    assert one.gen.query("SYST:ERR?") == '-113,"Undefined header"'
    assert two.bench.clock.now_s() < 1.0
    assert one.bench.counters[GENERATOR_RESOURCE] == 3
    assert two.bench.counters[GENERATOR_RESOURCE] == 2


def test_same_seed_same_capture_other_seed_other_noise(open_rig):
    first = capture_codes(open_rig(divider(1e3, 1e3), noise_v=20e-3, seed=5))
    again = capture_codes(open_rig(divider(1e3, 1e3), noise_v=20e-3, seed=5))
    other = capture_codes(open_rig(divider(1e3, 1e3), noise_v=20e-3, seed=6))
    assert np.array_equal(first, again)
    assert not np.array_equal(first, other)


def test_hook_is_consulted_for_every_message_and_counters_count_them(open_rig):
    seen = []

    def hook(resource: str, message: str):
        seen.append((resource, message))
        return None

    rig = open_rig(divider(1e3, 1e3), faults=hook)
    rig.gen.write("STIM:TONE 2000")
    rig.gen.query("STIM:TONE?")
    rig.meter.query("*IDN?")
    rig.gen.write("BAD")
    assert seen == [
        (GENERATOR_RESOURCE, "STIM:TONE 2000"),
        (GENERATOR_RESOURCE, "STIM:TONE?"),
        (METER_RESOURCE, "*IDN?"),
        (GENERATOR_RESOURCE, "BAD"),
    ]
    assert rig.bench.counters == {GENERATOR_RESOURCE: 3, METER_RESOURCE: 1}


def test_fault_queues_an_scpi_error(open_rig):
    plan = FaultPlan().queue_error(GENERATOR_RESOURCE, -310, "System error", contains="TONE")
    rig = open_rig(divider(1e3, 1e3), faults=plan)
    rig.gen.write("STIM:TONE 2000")
    assert float(rig.gen.query("STIM:TONE?")) == 2000.0  # the message still ran
    assert rig.gen.query("SYST:ERR?") == '-310,"System error"'
    assert rig.gen.query("SYST:ERR?") == '0,"No error"'  # one-shot


def test_fault_truncates_the_next_block(open_rig):
    plan = FaultPlan().truncate_block(SCOPE_A_RESOURCE, keep_fraction=0.5)
    rig = open_rig(rc_lowpass(), faults=plan)
    a = rig.scope_a
    a.timeout = 500  # ms
    assert a.query("CAPT:WIDT?") == "16"  # not a block: the rule stays armed
    rig.drive(997.0, amplitude_vpp=1.0)
    a.write("CAPT:LENG 2000")
    a.write("CAPTure:TAKE")
    before = rig.bench.clock.now_s()
    with pytest.raises(VisaIOError) as info:
        a.query_binary_values("LANE1:BLOC?", datatype="h", container=np.array)
    assert info.value.error_code == constants.StatusCode.error_timeout
    assert rig.bench.clock.now_s() - before >= 0.5  # the wait for the missing half, in simulated time
    a.clear()
    intact = a.query_binary_values("LANE1:BLOC?", datatype="h", container=np.array)
    assert len(intact) == 2000


def test_fault_delays_the_answer(open_rig):
    plan = FaultPlan().delay_answer(GENERATOR_RESOURCE, 0.3, contains="TONE?")
    plan.delay_answer(GENERATOR_RESOURCE, 5.0, contains="SWIN?")
    rig = open_rig(divider(1e3, 1e3), faults=plan)
    g = rig.gen
    g.timeout = 1000  # ms
    before = rig.bench.clock.now_s()
    assert float(g.query("STIM:TONE?")) == 1000.0  # late but within the timeout
    assert rig.bench.clock.now_s() - before >= 0.3
    with pytest.raises(VisaIOError) as info:
        g.query("STIM:SWIN?")  # 5 s late: the read times out after 1 s
    assert info.value.error_code == constants.StatusCode.error_timeout
    rig.bench.clock.sleep(5.0)
    assert float(g.read()) == 0.1  # the late answer is still there for whoever reads next


def test_fault_drops_the_session_and_a_new_one_works(open_rig):
    plan = FaultPlan().drop_session(METER_RESOURCE, contains="DET:RUN")
    rig = open_rig(divider(1e3, 1e3), faults=plan)
    rig.meter.write("DET:WIDT 100")
    with pytest.raises(VisaIOError) as info:
        rig.meter.write("DET:RUN")
    assert info.value.error_code == constants.StatusCode.error_connection_lost
    with pytest.raises(VisaIOError):
        rig.meter.query("*IDN?")
    rig.meter.close()
    meter = rig.gen.visalib.resource_manager.open_resource(METER_RESOURCE, **TERMINATION)
    assert float(meter.query("DET:WIDT?")) == 100.0  # the instrument kept its settings


def test_fault_drops_an_answer_and_corrupts_a_block(open_rig):
    plan = FaultPlan().drop_answer(GENERATOR_RESOURCE).corrupt_block(SCOPE_A_RESOURCE, flip_bytes=4)
    rig = open_rig(divider(1e3, 1e3), faults=plan)
    rig.gen.timeout = 200
    with pytest.raises(VisaIOError):
        rig.gen.query("*IDN?")
    assert rig.gen.query("*IDN?").startswith("Sweeper Sim,STIM-1")
    rig.drive(997.0, amplitude_vpp=1.0)
    a = rig.scope_a
    a.write("CAPT:LENG 1000")
    a.write("CAPTure:TAKE")
    a.write("CAPT:WIDT 8")
    corrupted = a.query_binary_values("LANE1:BLOC?", datatype="b", container=np.array)
    clean = a.query_binary_values("LANE1:BLOC?", datatype="b", container=np.array)
    assert np.count_nonzero(corrupted != clean) == 4
