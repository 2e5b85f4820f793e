"""What a real bench adds to the simulator: channel gain and phase errors, inter-channel skew,
the bench's own probes, DUT drift with bench time, and per-sweep seeds. Each is checked through
real pyvisa sessions against a formula from outside the project.

Scope tolerances are 5 standard deviations of the fitted quantity (Cramer-Rao bound of a sine
fit, sqrt(2 / M) sigma, sigma = noise and quantisation noise lsb / sqrt(12); 10 mV of noise
dithers the 8-bit quantiser, see test_sim_scope_capture.py). Meter readings without noise are
exact to rounding: 1e-9 relative.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal
from sim_rig import amplitude_sigma_v, divider, fit_phasor, fit_sine

from sweeper.circuits import Loading, build_circuit
from sweeper.run.spec import bench_for_run, bench_spec, sim_config
from sweeper.plan import PlanError, load_plan_text
from sweeper.sim import Drift, Probe

NOISE_V = 10e-3  # V rms: dither for the 8-bit quantiser
SOURCE_OHM = 50.0  # the source's internal resistance (DIALECTS.md)
POINTS = 20_000
LSB_V = 8 * 0.5 / 256  # scope A at 0.5 V/div


def phase_of(z_in: complex, z_out: complex) -> float:
    """Phase of out relative to in, degrees in (-180, 180]."""
    return math.degrees(np.angle(z_out / z_in))


def gain_of(z_in: complex, z_out: complex) -> float:
    """20 log10 |out / in|, dB."""
    return 20 * math.log10(abs(z_out / z_in))


def ratio_rel_sigma(a_in: float, a_out: float, samples: int = POINTS) -> float:
    """Relative standard deviation of an amplitude ratio (= phase standard deviation in rad)."""
    sigma = amplitude_sigma_v(NOISE_V, LSB_V, samples)
    return math.hypot(sigma / a_in, sigma / a_out)


def scope_a_ratio(rig, frequency_hz: float, rate_hz: float) -> tuple[complex, complex]:
    """Drive 2 Vpp at frequency_hz and fit both lanes of one scope-A capture: peak phasors, V."""
    rig.drive(frequency_hz, amplitude_vpp=2.0)
    volts, dt = rig.capture_a((0.5, 0.5), sample_rate_hz=rate_hz, points=POINTS)
    return fit_phasor(volts[0], dt, frequency_hz), fit_phasor(volts[1], dt, frequency_hz)


@pytest.mark.parametrize("frequency_hz", [1.0007e3, 10.0007e3, 40.0007e3])
def test_skew_adds_minus_360_f_tau_to_the_phase_on_both_scopes(open_rig, frequency_hz):
    skew_s = 2e-6
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=31, skew_s=skew_s)
    z_in, z_out = scope_a_ratio(rig, frequency_hz, rate_hz=1e6)
    # Handbook: a time delay tau is a phase of -360 f tau degrees (the divider itself has 0).
    expected_deg = -360.0 * frequency_hz * skew_s
    rel = ratio_rel_sigma(abs(z_in), abs(z_out))
    assert phase_of(z_in, z_out) == pytest.approx(expected_deg, abs=5 * math.degrees(rel))
    # The gain is untouched by a delay: the divider's 1/2 (Ohm's law).
    assert gain_of(z_in, z_out) == pytest.approx(20 * math.log10(0.5), abs=5 * 20 / math.log(10) * rel)
    # Scope B (10 divisions; 1 ms/div over 10000 dots = 1 us per dot) sees the same skew.
    volts, dt, _ = rig.capture_b((0.5, 0.5), seconds_per_div=1e-3, record=10_000)
    b_in, b_out = fit_phasor(volts[0], dt, frequency_hz), fit_phasor(volts[1], dt, frequency_hz)
    rel_b = math.hypot(amplitude_sigma_v(NOISE_V, 10 * 0.5 / 256, 10_000) / abs(b_in),
                       amplitude_sigma_v(NOISE_V, 10 * 0.5 / 256, 10_000) / abs(b_out))
    assert phase_of(b_in, b_out) == pytest.approx(expected_deg, abs=5 * math.degrees(rel_b))


def test_channel_gain_and_phase_errors_add_to_the_measured_ratio_and_the_meter_is_free_of_them(open_rig):
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=32,
                   channel_gain_db=(-0.2, 0.5), channel_phase_deg=(0.3, -1.0))
    frequency_hz = 997.0
    z_in, z_out = scope_a_ratio(rig, frequency_hz, rate_hz=1e5)
    rel = ratio_rel_sigma(abs(z_in), abs(z_out))
    # Divider formula 20 log10(R2 / (R1 + R2)), plus channel 2's error minus channel 1's.
    assert gain_of(z_in, z_out) == pytest.approx(20 * math.log10(0.5) + 0.5 + 0.2, abs=5 * 20 / math.log(10) * rel)
    assert phase_of(z_in, z_out) == pytest.approx(-1.0 - 0.3, abs=5 * math.degrees(rel))
    # Channel 1 alone: Ohm's law through the 50 Ohm source, times 10^(-0.2 / 20).
    expected_in_v = 1.0 * 2000 / 2050 * 10 ** (-0.2 / 20)
    assert abs(z_in) == pytest.approx(expected_in_v, abs=5 * amplitude_sigma_v(NOISE_V, LSB_V, POINTS))
    # The gain-phase meter has channels of its own: it sees the divider only.
    m = rig.meter
    m.write("DET:WIDT 10")
    gain_db, phase_deg, _, _ = (float(x) for x in m.query("DET:RUN;RES:ALL?").split(","))
    assert gain_db == pytest.approx(20 * math.log10(0.5), abs=1e-3)  # detector noise ~1e-5 dB here
    assert phase_deg == pytest.approx(0.0, abs=1e-2)


# An RC low-pass with a small capacitor, so that a probe's capacitance moves its corner.
R_OHM, C_F = 10e3, 1e-9
PROBE_IN = Probe(attenuation=10, resistance_ohm=10e6, capacitance_f=12e-12)  # a typical 10x probe
PROBE_OUT = Probe(attenuation=1, resistance_ohm=1e6, capacitance_f=100e-12)  # a 1x probe with its cable


def test_the_bench_probes_load_the_dut_as_a_shunt_r_parallel_c(open_rig):
    # The DUT model names a different probe (1 MOhm || 15 pF); the bench's own replace it.
    circuit = build_circuit("rc-lowpass", {"R": R_OHM, "C": C_F},
                            Loading(probe_resistance_ohm=1e6, probe_capacitance_f=15e-12))
    rig = open_rig(circuit, probes=(PROBE_IN, PROBE_OUT))
    frequencies_hz = np.array([1e3, 1.4e4, 5e4, 2e5])
    # Reference: the RC low-pass with the output probe's Rp || Cp as extra shunt (handbook
    # divider algebra), H(s) = 1 / (s R (C + Cp) + 1 + R / Rp), by scipy.signal.freqs.
    _, h = signal.freqs([1.0], [R_OHM * (C_F + PROBE_OUT.capacitance_f), 1 + R_OHM / PROBE_OUT.resistance_ohm],
                        worN=2 * np.pi * frequencies_hz)
    m = rig.meter
    m.write("DET:WIDT 10")
    for f, h_ref in zip(frequencies_hz, h):
        rig.drive(float(f), amplitude_vpp=2.0)
        gain_db, phase_deg, peak_in_v, peak_out_v = (float(x) for x in m.query("DET:RUN;RES:ALL?").split(","))
        assert gain_db == pytest.approx(20 * math.log10(abs(h_ref)), abs=1e-9)
        assert phase_deg == pytest.approx(math.degrees(np.angle(h_ref)), abs=1e-9)
        # The input node: the DUT loaded at its output, in parallel with channel 1's probe, fed
        # by the 1 V peak EMF through the source's 50 Ohm (Ohm's law).
        w = 2 * math.pi * f
        z_dut = R_OHM + 1 / (1j * w * (C_F + PROBE_OUT.capacitance_f) + 1 / PROBE_OUT.resistance_ohm)
        z_node = 1 / (1 / z_dut + 1 / PROBE_IN.resistance_ohm + 1j * w * PROBE_IN.capacitance_f)
        assert peak_in_v == pytest.approx(abs(z_node / (z_node + SOURCE_OHM)), rel=1e-9)
        assert peak_out_v == pytest.approx(peak_in_v * abs(h_ref), rel=1e-9)
    # The loading is far from negligible: at 200 kHz the probe's 100 pF against the DUT's 1 nF
    # moves the response by 0.6 dB against the unloaded RC (same formula with Cp = 0, Rp = inf).
    _, bare = signal.freqs([1.0], [R_OHM * C_F, 1.0], worN=[2 * np.pi * 2e5])
    assert 20 * math.log10(abs(bare[0]) / abs(h[-1])) > 0.5


def test_a_10x_probe_multiplies_the_scope_noise_seen_at_its_tip(open_rig):
    noise_v = 2e-3
    rig = open_rig(divider(1e3, 1e3), noise_v=noise_v, seed=33,
                   probes=(Probe(attenuation=10, resistance_ohm=10e6), Probe(attenuation=1, resistance_ohm=1e6)))
    frequency_hz = 997.0
    rig.drive(frequency_hz, amplitude_vpp=2.0)
    volts, dt = rig.capture_a((0.5, 0.5), sample_rate_hz=1e5, points=POINTS)
    residual_rms = []
    for row in volts:
        phasors, dc = fit_sine(row, dt, frequency_hz)
        w_t = 2 * math.pi * frequency_hz * dt * np.arange(row.size)
        fitted = phasors[0].real * np.sin(w_t) + phasors[0].imag * np.cos(w_t) + dc
        residual_rms.append(float(np.std(row - fitted)))
    # Channel 1: 10 x 2 mV of noise plus quantisation lsb / sqrt(12) (uniform, Widrow);
    # channel 2: 2 mV plus the same. The rms of 20000 residuals is within 1 / sqrt(2 M) = 0.5 %
    # (one sigma) of its true value; 5 % is 10 sigma.
    quantisation_v = LSB_V / math.sqrt(12)
    assert residual_rms[0] == pytest.approx(math.hypot(10 * noise_v, quantisation_v), rel=0.05)
    assert residual_rms[1] == pytest.approx(math.hypot(noise_v, quantisation_v), rel=0.05)


def closed_form_drift(t_s: float, w: float, tau_s: float, r_per_h: float, wp_deg: float, rp_deg_per_h: float):
    """Warm-up plus linear drift, the closed form of sweeper/sim/drift.py written out again:
    gain factor 1 + w (1 - exp(-t / tau)) + r t / 3600, phase wp (1 - exp(-t / tau)) + rp t / 3600."""
    warmed = 1 - math.exp(-t_s / tau_s)
    return 1 + w * warmed + r_per_h * t_s / 3600, wp_deg * warmed + rp_deg_per_h * t_s / 3600


def test_drift_follows_the_warm_up_closed_form_with_bench_time(open_rig):
    drift = Drift(warmup_frac=0.01, warmup_time_s=900.0, per_hour_frac=-0.002, warmup_phase_deg=0.5,
                  phase_per_hour_deg=0.2)
    age_s = 300.0  # the bench had been on for 5 minutes when it was opened
    rig = open_rig(divider(1e3, 1e3), drift=drift, bench_age_s=age_s)
    m = rig.meter
    m.write("DET:WIDT 10")
    readings = []
    for until_s in (10.0, 1200.0, 7200.0):
        rig.bench.clock.sleep(until_s - rig.bench.clock.now_s())
        rig.drive(997.0, amplitude_vpp=2.0)  # drive() waits 1 s before the measurement
        measured_at_s = age_s + rig.bench.clock.now_s() + 0.5e-3  # + the message's latency
        gain_db, phase_deg, _, _ = (float(x) for x in m.query("DET:RUN;RES:ALL?").split(","))
        readings.append((measured_at_s, gain_db, phase_deg))
    for t_s, gain_db, phase_deg in readings:
        g, p = closed_form_drift(t_s, 0.01, 900.0, -0.002, 0.5, 0.2)
        # Divider 1/2 (Ohm's law) times the drift factor; exact to rounding.
        assert gain_db == pytest.approx(20 * math.log10(0.5 * g), abs=1e-9)
        assert phase_deg == pytest.approx(p, abs=1e-9)
    # Warm-up: the gain rises by most of 1 % within the first hour, then the linear drift pulls it back.
    assert readings[1][1] > readings[0][1] + 0.03 and readings[2][1] < readings[1][1] + 0.05


def test_the_scope_sees_the_same_drift(open_rig):
    drift = Drift(warmup_frac=0.05, warmup_time_s=60.0)
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=34, drift=drift)
    rig.bench.clock.sleep(600.0)  # ten time constants: warm
    z_in, z_out = scope_a_ratio(rig, 997.0, rate_hz=1e5)
    rel = ratio_rel_sigma(abs(z_in), abs(z_out))
    g, _ = closed_form_drift(601.0, 0.05, 60.0, 0.0, 0.0, 0.0)
    assert gain_of(z_in, z_out) == pytest.approx(20 * math.log10(0.5 * g), abs=5 * 20 / math.log(10) * rel)


def capture_codes(open_rig, **config) -> np.ndarray:
    rig = open_rig(divider(1e3, 1e3), noise_v=NOISE_V, seed=5, **config)
    rig.drive(997.0, amplitude_vpp=1.0)
    a = rig.scope_a
    a.write("CAPT:RATE 1e5;CAPT:LENG 2000;CAPT:WIDT 8")
    assert a.query("CAPT:TAKE;*OPC?") == "1"
    return a.query_binary_values("LANE1:BLOC?", datatype="b", container=np.array)


def test_sweep_seeds_make_sweeps_differ_and_each_reproducible(open_rig):
    today = capture_codes(open_rig)
    assert np.array_equal(capture_codes(open_rig, sweep_seed=0), today)  # the default is today's bench
    second, third = capture_codes(open_rig, sweep_seed=2), capture_codes(open_rig, sweep_seed=3)
    assert not np.array_equal(second, today) and not np.array_equal(second, third)
    assert np.array_equal(capture_codes(open_rig, sweep_seed=2), second)  # reproducible from the seed


PLAN = """\
plan: 1
name: real-bench-fields
dut: {board: TB-9 filter test coupon, serial: TB9-0077}
bench:
  kind: simulated
  source: {resource: "TCPIP0::sim-gen::5025::SOCKET", driver: sim-generator.yaml}
  scope: {resource: "TCPIP0::sim-scope-a::5025::SOCKET", driver: sim-scope-a.yaml}
  simulation:
    seed: 3
    channel_gain: [0 dB, 0.05 dB]
    channel_phase: [0 deg, -0.2 deg]
    skew: 2 ns
    probes:
      - {attenuation: 10, resistance: 10 MOhm, capacitance: 12 pF}
      - {resistance: 1 MOhm, capacitance: 100 pF}
    drift: {warmup: 0.2 %, warmup_time: 20 min, per_hour: -0.01 %, warmup_phase: 0.05 deg}
stimulus: {amplitude: 2 Vpp}
sweep: {start: 100 Hz, stop: 10 kHz, points_per_decade: 2}
model:
  circuit: rc-lowpass
  components:
    R: {value: 1.6 kOhm, tolerance: 1 %}
    C: {value: 100 nF, tolerance: 5 %}
"""


def test_plan_fields_reach_the_simulator_and_a_campaign_run_sets_seed_and_age() -> None:
    plan = load_plan_text(PLAN, "real.yaml")
    config = bench_for_run(bench_spec(plan), {"campaign_sweep": 4, "campaign_offset_s": 1800.0}).sim
    assert config.channel_gain_db == (0.0, 0.05) and config.channel_phase_deg == (0.0, -0.2)
    assert config.skew_s == pytest.approx(2e-9, rel=1e-12)
    assert config.probes == (Probe(10.0, 10e6, 12e-12), Probe(1.0, 1e6, 100e-12))
    assert config.drift == Drift(warmup_frac=0.002, warmup_time_s=1200.0, per_hour_frac=-1e-4,
                                 warmup_phase_deg=0.05)
    assert (config.sweep_seed, config.bench_age_s) == (4, 1800.0)
    ideal = sim_config(load_plan_text(PLAN.split("    channel_gain")[0] + PLAN.split("warmup_phase: 0.05 deg}\n")[1],
                                      "ideal.yaml"))
    assert (ideal.probes, ideal.drift, ideal.skew_s, ideal.sweep_seed, ideal.bench_age_s) == (None, None, 0.0, 0, 0.0)
    assert ideal.channel_gain_db == (0.0, 0.0) and ideal.channel_phase_deg == (0.0, 0.0)


def test_bad_real_bench_fields_are_located() -> None:
    bad = PLAN.replace("{attenuation: 10,", "{attenuation: 0.5,").replace("skew: 2 ns", "skew: 2 nF")
    with pytest.raises(PlanError) as info:
        load_plan_text(bad, "bad.yaml")
    assert str(info.value).splitlines() == [
        "bad.yaml:12:11: bench.simulation.skew: '2 nF' is not a time (expected s, ms, us, ns, min or h, e.g. '1 ms')",
        "bad.yaml:14:23: bench.simulation.probes[0].attenuation: 0.5 must be at least 1",
    ]
