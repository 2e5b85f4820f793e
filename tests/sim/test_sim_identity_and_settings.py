"""Identity, settings read-back and the SCPI error queue, through real pyvisa sessions."""

from __future__ import annotations

import math

import pytest
from sim_rig import divider

# *IDN? answers from the table in sweeper/sim/DIALECTS.md (our contract).
IDENTITIES = {
    "gen": "Sweeper Sim,STIM-1,SIM-ST-0001,1.0",
    "scope_a": "Sweeper Sim,CAP-2A,SIM-CA-0001,1.0",
    "scope_b": "Sweeper Sim,SNAP-2B,SIM-SN-0001,1.0",
    "meter": "Sweeper Sim,RATIO-1,SIM-RA-0001,1.0",
}


@pytest.mark.parametrize("role", sorted(IDENTITIES))
def test_idn_of_each_instrument(open_rig, role):
    rig = open_rig(divider(1e3, 1e3))
    session = getattr(rig, role)
    assert session.query("*IDN?") == IDENTITIES[role]
    # SCPI 1999 / IEEE 488.2: headers are case-insensitive.
    assert session.query("*idn?") == IDENTITIES[role]
    assert session.query("*OPC?") == "1"


def test_generator_settings_read_back(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    g = rig.gen
    g.write("STIMulus:FORM SINE")
    g.write("stim:tone 12345.5")  # short form, lower case
    g.write(":STIMULUS:SWING 1.25")  # long form, leading colon
    g.write("STIM:BIAS -0.5")
    g.write("DRIV:INTO 50")
    g.write("DRIV:ENAB ON")
    assert g.query("STIM:FORM?") == "SINE"
    assert float(g.query("STIMulus:TONE?")) == 12345.5
    assert float(g.query("STIM:SWIN?")) == 1.25
    assert float(g.query("STIM:BIAS?")) == -0.5
    assert float(g.query("DRIVe:INTO?")) == 50.0
    assert g.query("DRIV:ENAB?") == "1"
    g.write("DRIV:INTO HIZ")
    g.write("DRIVe:ENABle OFF")
    assert g.query("DRIV:INTO?") == "HIZ"
    assert g.query("DRIV:ENAB?") == "0"
    assert g.query("SYST:ERR?") == '0,"No error"'
    # The bench state the scopes see is the same state.
    settings = rig.bench.generator
    assert (settings.frequency_hz, settings.amplitude_vpp, settings.offset_v) == (12345.5, 1.25, -0.5)
    assert math.isinf(settings.load_ohm) and not settings.output_on


def test_scope_settings_follow_their_steps(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    a, b = rig.scope_a, rig.scope_b
    a.write("LANE2:DIV 0.3")  # not an R10 step (ISO 3): the next larger one is used
    assert float(a.query("LANE2:DIVision?")) == 0.315
    a.write("CAPT:RATE 3e5")  # rounded down to a 1-2-5 step
    assert float(a.query("CAPT:RATE?")) == 2e5
    a.write("CAPT:LENG 12345")
    assert int(a.query("CAPT:LENG?")) == 12345
    b.write("VIEW1:SENS 0.07")
    assert float(b.query("VIEW1:SENSitivity?")) == 0.1
    b.write("FRAM:PITC 2e-3")
    b.write("FRAM:DOTS 20000")
    # DIALECTS.md: sample interval = 10 * scale / record length.
    assert float(b.query("KEY:TICK?")) == pytest.approx(10 * 2e-3 / 20000, rel=1e-12)
    for session in (a, b):
        assert session.query("SYST:ERR?") == '0,"No error"'


def test_error_queue_fifo_unknown_header_and_out_of_range(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    g = rig.gen
    g.write("STIM:TONE 1e3")
    g.write("STIMulus:FLUX 3")  # unknown header
    g.write("STIM:TONE 5e7")  # above the 20 MHz limit: clamped
    g.write("STIM:SWIN lots")  # not a number
    # SCPI 1999: SYSTem:ERRor? pops the oldest entry first; 0,"No error" when empty.
    assert g.query("SYST:ERR?") == '-113,"Undefined header"'
    assert g.query("SYSTem:ERRor?") == '-222,"Data out of range"'
    assert g.query("syst:err?") == '-104,"Data type error"'
    assert g.query("SYST:ERR?") == '0,"No error"'
    assert float(g.query("STIM:TONE?")) == 20e6  # clamped to the limit
    assert float(g.query("STIM:SWIN?")) == 0.1  # the bad value left the *RST amplitude alone


def test_error_queue_sets_event_status_and_clears(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    a = rig.scope_a
    a.write("LANE1:BOGUS 1")
    a.write("LANE1:DIV 1000")
    # IEEE 488.2 standard event status register: CME (bit 5, 32) for a command error,
    # EXE (bit 4, 16) for an execution error; reading clears it.
    assert int(a.query("*ESR?")) == 32 + 16
    assert int(a.query("*ESR?")) == 0
    a.write("*CLS")  # clears the error queue as well
    assert a.query("SYST:ERR?") == '0,"No error"'
    a.write("LANE3:DIV 1")  # channel 3 does not exist
    assert a.query("SYST:ERR?") == '-114,"Header suffix out of range"'
