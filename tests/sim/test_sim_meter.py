"""The gain-phase meter against the handbook RC low-pass and scipy.signal.freqs."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal
from sim_rig import CORNER_HZ, C_LOWPASS_F, R_LOWPASS_OHM, rc_lowpass

SOURCE_OHM = 50.0
FRONT_END_BANDWIDTH_HZ = 1e6  # SimConfig.meter_front_end_bandwidth_hz default (DIALECTS.md)


def detector_sigma_v(noise_v: float, bandwidth_hz: float, frequency_hz: float) -> float:
    """Per-quadrature noise of one reading, from the meter model documented in DIALECTS.md:
    integration time T = max(1 / (2 B), 1 / f), equivalent noise bandwidth 1 / (2 T)."""
    duration_s = max(1 / (2 * bandwidth_hz), 1 / frequency_hz)
    return noise_v * math.sqrt(2 * (1 / (2 * duration_s)) / FRONT_END_BANDWIDTH_HZ)


@pytest.mark.parametrize("frequency_hz", [CORNER_HZ / 10, CORNER_HZ, 10 * CORNER_HZ])
def test_meter_matches_the_rc_lowpass_response(open_rig, frequency_hz):
    noise_v = 0.5e-3
    rig = open_rig(rc_lowpass(), noise_v=noise_v, seed=11)
    rig.drive(frequency_hz, amplitude_vpp=2.0)
    m = rig.meter
    m.write("DET:WIDT 10")
    m.write("DET:RUN")
    assert m.query("*OPC?") == "1"
    gain_db = float(m.query("RESult:GAIN?"))
    phase_deg = float(m.query("RES:PHAS?"))
    amplitude_in_v = float(m.query("RES:PEAK1?"))
    amplitude_out_v = float(m.query("RESult:PEAK2?"))

    # Reference library: scipy.signal.freqs of H(s) = 1 / (R C s + 1) (handbook first-order low-pass).
    _, h = signal.freqs([1.0], [R_LOWPASS_OHM * C_LOWPASS_F, 1.0], worN=[2 * math.pi * frequency_hz])
    z_dut = R_LOWPASS_OHM + 1 / (2j * math.pi * frequency_hz * C_LOWPASS_F)  # series R, C
    v_in = abs(1.0 * z_dut / (z_dut + SOURCE_OHM))  # Ohm's law: 1 V peak EMF through 50 Ohm
    # Tolerance: 5 sigma of the documented detector noise on the smaller (output) amplitude.
    sigma = detector_sigma_v(noise_v, 10.0, frequency_hz)
    rel = math.hypot(sigma / v_in, sigma / (v_in * abs(h[0])))
    assert gain_db == pytest.approx(20 * math.log10(abs(h[0])), abs=5 * 20 / math.log(10) * rel)
    assert phase_deg == pytest.approx(math.degrees(np.angle(h[0])), abs=5 * math.degrees(rel))
    assert amplitude_in_v == pytest.approx(v_in, abs=5 * sigma)
    assert amplitude_out_v == pytest.approx(v_in * abs(h[0]), abs=5 * sigma)


def test_meter_noise_grows_with_bandwidth_and_narrow_bandwidth_takes_longer(open_rig):
    noise_v = 50e-3
    rig = open_rig(rc_lowpass(), noise_v=noise_v, seed=12)
    rig.drive(CORNER_HZ, amplitude_vpp=2.0)
    m = rig.meter
    spreads, durations = {}, {}
    for bandwidth_hz in (1.0, 1000.0):
        m.write(f"DETector:WIDTh {bandwidth_hz}")
        readings = []
        for _ in range(20):
            before = rig.bench.clock.now_s()
            m.write("DET:RUN")
            durations[bandwidth_hz] = rig.bench.clock.now_s() - before
            readings.append(float(m.query("RES:PEAK1?")))
        spreads[bandwidth_hz] = np.std(readings, ddof=1)
    # Noise density model: sigma ~ sqrt(B); sqrt(1000 / 1) = 31.6. With 20 readings a sample
    # standard deviation is within about 3 x 16 % of its true value, so the ratio lies in [20, 50].
    assert 20 < spreads[1000.0] / spreads[1.0] < 50
    assert spreads[1000.0] == pytest.approx(detector_sigma_v(noise_v, 1000.0, CORNER_HZ), rel=0.5)
    # Integration time max(1 / (2 B), one period) plus the 0.5 ms transaction latency.
    latency_s = 0.5e-3
    assert durations[1.0] == pytest.approx(0.5 + latency_s, rel=1e-9)
    assert durations[1000.0] == pytest.approx(1 / CORNER_HZ + latency_s, rel=1e-9)


def test_meter_fetch_before_a_measurement_is_stale(open_rig):
    rig = open_rig(rc_lowpass())
    m = rig.meter
    assert float(m.query("RES:GAIN?")) == 9.91e37  # SCPI "not a number"
    assert m.query("SYST:ERR?") == '-230,"Data corrupt or stale"'
