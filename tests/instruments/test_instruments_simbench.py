"""The instrument layer on the simulated bench: real pyvisa sessions (sweeper.sim's pyvisa-sim
extension), the shipped driver files, and the generic interpreter."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sweeper.instruments.bench import open_bench, open_role
from sweeper.instruments.driverfile import load_driver, repository_drivers_dir
from sweeper.instruments.errors import (
    IdentityMismatch,
    InstrumentTimeout,
    LimitError,
    MalformedResponse,
    ScpiError,
)
from sweeper.plan import load_plan, load_plan_text
from sweeper.run.spec import bench_spec
from sweeper.sim import SCOPE_B_RESOURCE, FaultPlan

R_OHM, C_F = 1.6e3, 100e-9
PROBE_R_OHM, PROBE_C_F = 1e6, 15e-12
F_HZ = 1000.0


def plan_text(scope: str = "sim-scope-a.yaml", mode: str = "waveform", noise: str = "10 mV",
              generator: str = "sim-generator.yaml") -> str:
    """A small plan of our own: an RC low-pass on an invented test board."""
    resource = "TCPIP0::sim-scope-b::5025::SOCKET" if "-b" in scope else "TCPIP0::sim-scope-a::5025::SOCKET"
    return f"""\
plan: 1
name: instrument-layer-test
dut: {{board: TB-9 filter test coupon, serial: TB9-0042}}
bench:
  kind: simulated
  mode: {mode}
  source: {{resource: "TCPIP0::sim-gen::5025::SOCKET", driver: {generator}}}
  scope: {{resource: "{resource}", driver: {scope}}}
  meter: {{resource: "TCPIP0::sim-meter::5025::SOCKET", driver: sim-meter.yaml}}
  simulation: {{seed: 11, noise: {noise}}}
stimulus: {{amplitude: 2 Vpp}}
sweep: {{start: 100 Hz, stop: 10 kHz, points_per_decade: 2}}
model:
  circuit: rc-lowpass
  components:
    R: {{value: 1.6 kOhm, tolerance: 1 %}}
    C: {{value: 100 nF, tolerance: 5 %}}
  loading:
    probe_resistance: 1 MOhm
    probe_capacitance: 15 pF
"""


def divider_h(frequency_hz: float) -> complex:
    """RC low-pass with the scope probe (R_p || C_p) across its output: the voltage-divider
    formula H = Z_shunt / (R + Z_shunt) = 1 / (1 + R Y_shunt) (circuit handbook)."""
    w = 2 * math.pi * frequency_hz
    y_shunt = 1j * w * C_F + 1 / PROBE_R_OHM + 1j * w * PROBE_C_F
    return 1 / (1 + R_OHM * y_shunt)


def fit_sine(volts: np.ndarray, interval_s: float, frequency_hz: float) -> complex:
    """Three-parameter sine fit at a known frequency (IEEE Std 1057), by numpy least squares:
    returns the complex amplitude A e^{j phi} of A sin(w t + phi)."""
    t = np.arange(volts.size) * interval_s
    w = 2 * math.pi * frequency_hz
    design = np.column_stack([np.sin(w * t), np.cos(w * t), np.ones_like(t)])
    (a_sin, a_cos, _), *_ = np.linalg.lstsq(design, volts, rcond=None)
    return complex(a_sin, a_cos)


def prepared(bench, span_v: float = 2.5, rate_hz: float = 100e3, samples: int = 5000):
    bench.source.configure_sine(2.0, 0.0, None)
    bench.source.set_output(True)
    bench.source.set_frequency(F_HZ)
    bench.scope.set_range(1, span_v)
    bench.scope.set_range(2, span_v)
    bench.scope.set_window(rate_hz, samples)
    bench.clock.sleep(0.01)  # > 60 DUT time constants (RC = 0.16 ms): the transient is gone


def test_both_dialects_capture_the_same_signal() -> None:
    # One simulated bench, both scopes on the same DUT nodes, one code path.
    plan = load_plan_text(plan_text(noise="10 mV"), "t.yaml")
    with open_bench(bench_spec(plan)) as bench:
        prepared(bench)
        scope_b, identity_b, _ = open_role(
            bench.resource_manager, "scope", SCOPE_B_RESOURCE, load_driver(repository_drivers_dir() / "sim-scope-b.yaml")
        )
        assert identity_b.idn == "Sweeper Sim,SNAP-2B,SIM-SN-0001,1.0"
        scope_b.set_range(1, 2.5)
        scope_b.set_range(2, 2.5)
        assert scope_b.set_window(100e3, 5000) == (100e3, 5000)  # 5 ms/div x 10 div / 5000 samples
        captures = {"A": bench.scope.capture(), "B": scope_b.capture()}
    amplitudes = {}
    for name, capture in captures.items():
        assert capture.volts.shape == (2, 5000)
        assert capture.sample_interval_s == pytest.approx(1e-5, rel=1e-12)
        assert capture.clipped == (False, False)
        v_in = fit_sine(capture.volts[0], capture.sample_interval_s, F_HZ)
        v_out = fit_sine(capture.volts[1], capture.sample_interval_s, F_HZ)
        amplitudes[name] = (abs(v_in), abs(v_out))
        h = v_out / v_in
        # Against the handbook divider formula. Tolerances: 10 mV rms noise (which also dithers
        # the 8-bit quantisation) plus quantisation gives sigma ~ 11 mV per sample; the fitted
        # amplitude then has a standard deviation of sigma * sqrt(2/N) = 0.22 mV (Handel's bound
        # for the 3-parameter fit, N = 5000), i.e. 2.2e-4 of the ~1 V input and 3.1e-4 of the
        # ~0.7 V output: 3.8e-4 on the ratio and 3.8e-4 rad (0.022 deg) on the phase.
        # 2e-3 and 0.12 deg are about 5 sigma.
        assert abs(h) == pytest.approx(abs(divider_h(F_HZ)), rel=2e-3)
        assert math.degrees(np.angle(h)) == pytest.approx(math.degrees(np.angle(divider_h(F_HZ))), abs=0.12)
    full_scale = {"A": captures["A"].full_scale_v, "B": captures["B"].full_scale_v}
    assert full_scale == {"A": (2.52, 2.52), "B": (5.0, 5.0)}  # 0.315 V/div (R10) x 8; 0.5 V/div x 10
    # Same amplitude from both dialects. Per-sample error: 10 mV noise plus quantisation
    # (LSB 15.6 mV for A, 19.5 mV for B, LSB^2/12 each), giving 0.22 and 0.23 mV per fitted
    # amplitude, 0.32 mV on their difference; 1.5 mV is about 5 sigma (and under one LSB).
    for channel in (0, 1):
        assert amplitudes["A"][channel] == pytest.approx(amplitudes["B"][channel], abs=1.5e-3)


def test_transactions_per_capture_and_per_point() -> None:
    # Dialect A names the lane in the fetch and legend queries themselves; dialect B selects
    # the view and fetches (or asks its four key queries) in one compound message (IEEE 488.2
    # message units). Either way a steady-state point is 4 transactions.
    for scope, first, steady, point in (("sim-scope-a.yaml", 5, 3, 4), ("sim-scope-b.yaml", 5, 3, 4)):
        plan = load_plan_text(plan_text(scope=scope), "t.yaml")
        with open_bench(bench_spec(plan)) as bench:
            prepared(bench)
            stats, sim = bench.stats, bench.sim
            scope_resource = bench.identities[1].resource

            def count() -> int:
                return stats.writes + stats.queries

            before, sim_before = count(), sim.counters[scope_resource]
            bench.scope.capture()  # first after a change: scaling is read for both channels
            assert count() - before == first
            assert sim.counters[scope_resource] - sim_before == first  # the simulator saw the same
            for _ in range(3):
                before = count()
                bench.scope.capture()
                # A: take;*OPC? + two fetches.  B: go;*OPC? + two select;fetch
                assert count() - before == steady
            # settings equal to the current ones are not resent
            before = count()
            bench.scope.set_range(1, 2.5)
            bench.scope.set_range(2, 2.2)  # same range (smallest >= 2.2 is the one in use)
            bench.scope.set_window(100e3, 5000)
            bench.source.set_frequency(F_HZ)
            bench.source.configure_sine(2.0, 0.0, None)
            bench.source.set_output(True)
            assert count() == before
            # one steady-state point: new frequency;*OPC?, then a capture
            bench.source.set_frequency(2 * F_HZ)
            bench.scope.capture()
            assert count() - before == point


def test_window_limits_and_rounding() -> None:
    with open_bench(bench_spec(load_plan_text(plan_text(scope="sim-scope-a.yaml"), "t.yaml"))) as bench:
        prepared(bench)
        # dialect A rounds a rate down to 1-2-5 and says so in CAPT:RATE?
        assert bench.scope.set_window(150e3, 4000) == (100e3, 4000)
        assert bench.scope.capture().sample_interval_s == pytest.approx(1e-5, rel=1e-12)
        assert bench.scope.set_window(1e12, 10) == (1e9, 1000)  # clamped to the driver's limits
    with open_bench(bench_spec(load_plan_text(plan_text(scope="sim-scope-b.yaml"), "t.yaml"))) as bench:
        prepared(bench)
        # dialect B: 4000 / (150 kSa/s x 10 div) = 2.67 ms/div -> 5 ms/div -> 80 kSa/s
        assert bench.scope.set_window(150e3, 4000) == (80e3, 4000)
        # the scope's own KEY:TICK? answer agrees with our timebase arithmetic
        assert bench.scope.capture().sample_interval_s == pytest.approx(1 / 80e3, rel=1e-12)
        assert bench.scope.limits.full_scales_v[0] == pytest.approx(0.01)  # 1 mV/div x 10
        assert bench.scope.limits.full_scales_v[-1] == pytest.approx(100.0)


def test_clipping_is_detected() -> None:
    with open_bench(bench_spec(load_plan_text(plan_text(noise="0.5 mV"), "t.yaml"))) as bench:
        prepared(bench)
        assert bench.scope.set_range(1, 0.1) == pytest.approx(0.1)  # 12.5 mV/div (R10) x 8
        capture = bench.scope.capture()
        assert capture.clipped == (True, False)
        # the clipped channel sits at the top code: (127 * 256) * volts per count
        assert capture.volts[0].max() == pytest.approx(127 / 256 * 0.1, rel=1e-9)
        bench.scope.set_range(1, 2.5)
        assert bench.scope.capture().clipped == (False, False)


def test_error_queue_names_the_refused_command(tmp_path: Path) -> None:
    # A driver file claiming more than the instrument can do: the instrument refuses, the
    # interpreter drains SYST:ERR? and names the command.
    text = (repository_drivers_dir() / "sim-generator.yaml").read_text()
    wide = text.replace("amplitude_vpp: {min: 0.001, max: 10.0}", "amplitude_vpp: {min: 0.001, max: 20.0}")
    assert wide != text
    (tmp_path / "wide-generator.yaml").write_text(wide)
    plan_path = tmp_path / "plan.yaml"
    plan_path.write_text(plan_text(generator="wide-generator.yaml"))
    with open_bench(bench_spec(load_plan(plan_path))) as bench:  # the driver is found beside the plan
        assert bench.identities[0].driver == "wide-generator.yaml"
        with pytest.raises(ScpiError) as info:
            bench.source.configure_sine(15.0, 0.0, None)
        error = info.value
        assert error.command == "STIM:SWIN 15"
        assert error.errors == ((-222, "Data out of range"),)  # DIALECTS.md: -222 for out of range
        assert "'STIM:SWIN 15'" in str(error) and '-222,"Data out of range"' in str(error)
        assert bench.source.drain_errors() == []  # drained
        # the shipped limits stop the same request before anything is sent
        before = bench.stats.writes + bench.stats.queries
        with pytest.raises(LimitError, match="frequency 3e\\+07 Hz is outside"):
            bench.source.set_frequency(30e6)
        assert bench.stats.writes + bench.stats.queries == before


def test_close_switches_the_output_off_even_on_error() -> None:
    plan = load_plan_text(plan_text(), "t.yaml")
    with pytest.raises(RuntimeError, match="operator pulled the plug"):
        with open_bench(bench_spec(plan)) as bench:
            prepared(bench)
            assert bench.sim.generator.output_on
            raise RuntimeError("operator pulled the plug")
    assert bench.sim.generator.output_on is False  # the simulated generator's own state
    assert bench.output_off is True
    assert all(link.closed for link in bench.links)
    bench.close()  # again: nothing happens, nothing raises


def test_close_never_raises_when_the_source_is_gone() -> None:
    faults = FaultPlan()
    bench = open_bench(bench_spec(load_plan_text(plan_text(), "t.yaml")), sim_faults=faults)
    bench.source.configure_sine(2.0, 0.0, None)
    bench.source.set_output(True)
    # the generator's link breaks on the way to 'output off' (first try and the retry)
    faults.drop_session("TCPIP0::sim-gen::5025::SOCKET", contains="DRIV:ENAB OFF", times=5)
    bench.close()
    assert bench.output_off is False  # reported, not raised
    assert bench.sim.generator.output_on  # the simulated generator really is still on


def test_faults_surface_as_instrument_errors() -> None:
    faults = FaultPlan()
    with open_bench(bench_spec(load_plan_text(plan_text(), "t.yaml")), sim_faults=faults) as bench:
        prepared(bench)
        bench.scope.capture()
        faults.truncate_block("TCPIP0::sim-scope-a::5025::SOCKET", keep_fraction=0.5, contains=":BLOC?")
        with pytest.raises(MalformedResponse, match=r"'LANE\d:BLOC\?': truncated block"):
            bench.scope.capture()
        faults.drop_answer("TCPIP0::sim-scope-a::5025::SOCKET", contains="*OPC?")
        with pytest.raises(InstrumentTimeout, match=r"'CAPT:TAKE;\*OPC\?': no complete answer"):
            bench.scope.capture()
        # after a fault the interpreter forgets what it believed was selected, and recovers
        capture = bench.scope.capture()
        assert capture.volts.shape == (2, 5000)


def test_wrong_instrument_is_refused() -> None:
    with open_bench(bench_spec(load_plan_text(plan_text(), "t.yaml"))) as bench:
        with pytest.raises(IdentityMismatch, match="answered 'Sweeper Sim,SNAP-2B,SIM-SN-0001,1.0'"):
            open_role(bench.resource_manager, "scope", SCOPE_B_RESOURCE,
                      load_driver(repository_drivers_dir() / "sim-scope-a.yaml"))


def test_meter_mode() -> None:
    plan = load_plan_text(plan_text(mode="meter", noise="0.5 mV"), "t.yaml")
    with open_bench(bench_spec(plan)) as bench:
        assert bench.scope is None and bench.meter is not None
        assert [i.role for i in bench.identities] == ["source", "meter"]
        bench.source.configure_sine(2.0, 0.0, None)
        bench.source.set_output(True)
        bench.source.set_frequency(F_HZ)
        bench.meter.measure(F_HZ)
        before = bench.stats.writes + bench.stats.queries
        reading = bench.meter.measure(F_HZ)
        assert bench.stats.writes + bench.stats.queries - before == 1  # DET:RUN;RES:ALL? in one message
        h = divider_h(F_HZ)
        # Handbook divider formula. The meter's detector noise: 0.5 mV rms spread over 1 MHz,
        # seen through the 100 Hz bandwidth the driver picks at 1 kHz, is ~5 uV on ~0.7 V, i.e.
        # ~1e-5 relative: ~1e-4 dB and ~6e-4 degrees. 1e-3 dB, 5e-3 degrees and 1e-4 relative
        # are 8 to 10 sigma.
        assert reading.gain_db == pytest.approx(20 * math.log10(abs(h)), abs=1e-3)
        assert reading.phase_deg == pytest.approx(math.degrees(np.angle(h)), abs=5e-3)
        assert reading.amplitude_out_v / reading.amplitude_in_v == pytest.approx(abs(h), rel=1e-4)


def test_bench_limits_without_sessions(tmp_path: Path) -> None:
    from sweeper.instruments.errors import BenchError
    from sweeper.instruments.limits import bench_limits

    limits, problems = bench_limits(bench_spec(load_plan_text(plan_text(scope="sim-scope-b.yaml"), "t.yaml")))
    assert problems == []
    assert limits["source"].frequency_max_hz == 20e6  # DIALECTS.md: STIM-1 up to 20 MHz
    assert limits["scope"].max_samples == 250_000  # DIALECTS.md: SNAP-2B record up to 250,000
    broken = tmp_path / "plan.yaml"
    broken.write_text(plan_text(scope="missing-scope.yaml", generator="sim-meter.yaml"))
    limits, problems = bench_limits(bench_spec(load_plan(broken)))
    assert limits == {}
    assert [where for where, _ in problems] == ["bench.source.driver", "bench.scope.driver"]
    assert "'sim-meter.yaml' is a meter driver; expected a source driver" in problems[0][1]
    assert "'missing-scope.yaml' not found" in problems[1][1]
    with pytest.raises(BenchError, match="bench.scope.driver: driver file 'missing-scope.yaml' not found"):
        open_bench(bench_spec(load_plan(broken)))
