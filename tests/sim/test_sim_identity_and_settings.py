"""Identity, settings read-back and the SCPI error queue, through real pyvisa sessions."""

from __future__ import annotations

import math

import pytest
from sim_rig import divider

# *IDN? answers from the table in sweeper/sim/DIALECTS.md (our contract).
IDENTITIES = {
    "gen": "Sweeper Sim,FG-1,SIM-FG-0001,1.0",
    "scope_a": "Sweeper Sim,DSO-A2,SIM-SA-0001,1.0",
    "scope_b": "Sweeper Sim,DSO-B2,SIM-SB-0001,1.0",
    "meter": "Sweeper Sim,GPM-1,SIM-GP-0001,1.0",
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
    g.write("SOURce:FUNCtion SIN")
    g.write("sour:freq 12345.5")  # short form, lower case
    g.write(":SOURCE:VOLTAGE 1.25")  # long form, leading colon
    g.write("SOUR:VOLT:OFFS -0.5")
    g.write("OUTP:LOAD 50")
    g.write("OUTP ON")
    assert g.query("SOUR:FUNC?") == "SIN"
    assert float(g.query("SOURce:FREQuency?")) == 12345.5
    assert float(g.query("SOUR:VOLT?")) == 1.25
    assert float(g.query("SOUR:VOLT:OFFS?")) == -0.5
    assert float(g.query("OUTPut:LOAD?")) == 50.0
    assert g.query("OUTP?") == "1"
    g.write("OUTP:LOAD INF")
    g.write("OUTPut OFF")
    assert g.query("OUTP:LOAD?") == "INF"
    assert g.query("OUTP?") == "0"
    assert g.query("SYST:ERR?") == '0,"No error"'
    # The bench state the scopes see is the same state.
    settings = rig.bench.generator
    assert (settings.frequency_hz, settings.amplitude_vpp, settings.offset_v) == (12345.5, 1.25, -0.5)
    assert math.isinf(settings.load_ohm) and not settings.output_on


def test_scope_settings_follow_their_steps(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    a, b = rig.scope_a, rig.scope_b
    a.write(":CHAN2:SCAL 0.3")  # not an R10 step (ISO 3): the next larger one is used
    assert float(a.query(":CHANnel2:SCALe?")) == 0.315
    a.write(":ACQ:SRAT 3e5")  # rounded down to a 1-2-5 step
    assert float(a.query(":ACQ:SRAT?")) == 2e5
    a.write(":ACQ:POIN 12345")
    assert int(a.query(":ACQ:POIN?")) == 12345
    b.write("CH1:VOL 0.07")
    assert float(b.query("CH1:VOLts?")) == 0.1
    b.write("HOR:SCA 2e-3")
    b.write("HOR:RECO 20000")
    # DIALECTS.md: sample interval = 10 * scale / record length.
    assert float(b.query("WFMO:XINCR?")) == pytest.approx(10 * 2e-3 / 20000, rel=1e-12)
    for session in (a, b):
        assert session.query("SYST:ERR?") == '0,"No error"'


def test_error_queue_fifo_unknown_header_and_out_of_range(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    g = rig.gen
    g.write("SOUR:FREQ 1e3")
    g.write("SOURce:FLUX 3")  # unknown header
    g.write("SOUR:FREQ 5e7")  # above the 20 MHz limit: clamped
    g.write("SOUR:VOLT lots")  # not a number
    # SCPI 1999: SYSTem:ERRor? pops the oldest entry first; 0,"No error" when empty.
    assert g.query("SYST:ERR?") == '-113,"Undefined header"'
    assert g.query("SYSTem:ERRor?") == '-222,"Data out of range"'
    assert g.query("syst:err?") == '-104,"Data type error"'
    assert g.query("SYST:ERR?") == '0,"No error"'
    assert float(g.query("SOUR:FREQ?")) == 20e6  # clamped to the limit
    assert float(g.query("SOUR:VOLT?")) == 0.1  # the bad value left the *RST amplitude alone


def test_error_queue_sets_event_status_and_clears(open_rig):
    rig = open_rig(divider(1e3, 1e3))
    a = rig.scope_a
    a.write(":CHAN1:BOGUS 1")
    a.write(":CHAN1:SCAL 1000")
    # IEEE 488.2 standard event status register: CME (bit 5, 32) for a command error,
    # EXE (bit 4, 16) for an execution error; reading clears it.
    assert int(a.query("*ESR?")) == 32 + 16
    assert int(a.query("*ESR?")) == 0
    a.write("*CLS")  # clears the error queue as well
    assert a.query("SYST:ERR?") == '0,"No error"'
    a.write(":CHAN3:SCAL 1")  # channel 3 does not exist
    assert a.query("SYST:ERR?") == '-114,"Header suffix out of range"'
