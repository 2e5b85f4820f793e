"""The reference plan (configs/rc-antialias.yaml) and the test fixtures load into the expected SI values."""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import pytest
import yaml

from sweeper.plan import Plan, load_plan, load_plan_text
from sweeper.plan.schema import Acquisition, Stimulus, Sweep

ROOT = Path(__file__).resolve().parents[2]
REFERENCE = ROOT / "configs" / "rc-antialias.yaml"
FIXTURES = Path(__file__).resolve().parent / "fixtures"

# Values written as decimal literals parse to the nearest float; a prefix or unit factor adds at
# most a couple of roundings, so 1e-12 relative separates "right" from "wrong" with a wide margin.
REL = 1e-12


def approx(value: float) -> object:
    return pytest.approx(value, rel=REL, abs=0.0)


def test_reference_plan_si_values() -> None:
    plan = load_plan(REFERENCE)
    assert isinstance(plan, Plan)
    assert plan.plan == 1
    assert plan.name == "rc-antialias"
    assert plan.dut.serial == "DLF7-000123"
    assert plan.bench.kind == "simulated" and plan.bench.mode == "waveform"
    assert plan.bench.source is not None and plan.bench.scope is not None and plan.bench.meter is None
    assert plan.bench.scope.resource == "TCPIP0::sim-scope-a::5025::SOCKET"
    assert plan.bench.source.timeout_s == 5.0  # default when not written
    assert plan.bench.simulation.seed == 7
    assert plan.bench.simulation.noise_v == approx(0.5e-3)  # "0.5 mV"
    assert plan.bench.simulation.distortion_frac == 0.0  # "0 %"
    assert plan.bench.simulation.components == {}
    assert plan.stimulus.amplitude_vpp == 2.0  # "2 Vpp"
    assert plan.stimulus.offset_v == 0.0
    assert plan.stimulus.load_ohm is None  # "high-z"
    assert plan.stimulus.max_amplitude_vpp == 5.0
    assert plan.sweep.start_hz == 10.0
    assert plan.sweep.stop_hz == approx(100e3)  # "100 kHz"
    assert plan.sweep.points_per_decade == 5.0 and plan.sweep.points is None
    assert plan.sweep.spacing == "log" and plan.sweep.direction == "up"
    assert plan.sweep.frequencies_hz is None
    acq = plan.acquisition
    assert (acq.min_cycles, acq.min_samples, acq.settle_cycles, acq.settle_time_constants) == (8, 4000, 2, 5)
    assert acq.settle_s == approx(1e-3)  # "1 ms"
    assert (acq.averages, acq.max_averages) == (1, 8)
    assert acq.target_gain_db == approx(0.02)
    assert acq.target_phase_deg == approx(0.2)
    assert acq.autorange is True and acq.fit == "three-parameter"
    model = plan.model
    assert model.circuit == "rc-lowpass"
    assert model.components["R"].value == approx(1.6e3)  # "1.6 kOhm"
    assert model.components["R"].tolerance_frac == approx(0.01)  # "1 %"
    assert model.components["C"].value == approx(100e-9)  # "100 nF"
    assert model.components["C"].tolerance_frac == approx(0.05)
    assert model.loading.source_resistance_ohm == 50.0
    assert model.loading.probe_resistance_ohm == approx(1e6)  # "1 MOhm"
    assert model.loading.probe_capacitance_f == approx(15e-12)  # "15 pF"
    assert model.loading.load_resistance_ohm == math.inf  # default: no load
    assert model.loading.reference == "input"
    assert model.zeros_hz == [] and model.poles_hz == []
    limits = plan.limits
    assert limits.band == "worst-case" and limits.decision_rule == "guarded"
    assert limits.allowance_gain_db == approx(0.1) and limits.allowance_phase_deg == 1.0
    assert limits.fixed_gain_db is None and limits.fixed_phase_deg is None
    assert limits.masks == [] and limits.coverage_factor == 2.0
    assert limits.monte_carlo.samples == 2000 and limits.monte_carlo.percentiles == (0.5, 99.5)
    assert plan.metadata.operator == "bench technician"
    assert plan.metadata.tags == ["demo", "anti-alias"]


def test_reference_plan_corner_matches_its_description() -> None:
    # Handbook: first-order RC low-pass corner fc = 1 / (2 pi R C). The plan's DUT description
    # says "corner near 1 kHz"; 1.6 kOhm and 100 nF give 994.7 Hz, within 1 % of 1 kHz.
    plan = load_plan(REFERENCE)
    r_ohm = plan.model.components["R"].value
    c_f = plan.model.components["C"].value
    corner_hz = 1.0 / (2.0 * math.pi * r_ohm * c_f)
    assert "1 kHz" in plan.dut.description
    assert abs(corner_hz - 1e3) / 1e3 < 0.01


def test_reference_plan_records_its_source() -> None:
    raw = REFERENCE.read_bytes()
    plan = load_plan(str(REFERENCE))
    assert plan.source_text == raw.decode("utf-8")
    assert plan.sha256 == hashlib.sha256(raw).hexdigest()  # reference: hashlib
    assert plan.path == REFERENCE
    from_text = load_plan_text(raw.decode("utf-8"))
    assert from_text.path is None
    assert from_text.sha256 == plan.sha256
    assert from_text.model_dump() == plan.model_dump()


def test_reference_plan_text_fields_match_plain_yaml() -> None:
    # Texts pass through untouched: compare with PyYAML's own safe_load of the same file.
    plain = yaml.safe_load(REFERENCE.read_text(encoding="utf-8"))
    plan = load_plan(REFERENCE)
    assert plan.dut.board == plain["dut"]["board"]
    assert plan.dut.description == plain["dut"]["description"]
    assert plan.metadata.station == plain["metadata"]["station"]
    assert plan.bench.source.driver == plain["bench"]["source"]["driver"]


def test_fixture_plan_values() -> None:
    plan = load_plan(FIXTURES / "base-plan.yaml")
    assert plan.stimulus.amplitude_vpp == pytest.approx(2 * math.sqrt(2), rel=REL)  # 1 Vrms, sine
    assert plan.stimulus.load_ohm == 50.0
    assert plan.bench.scope.timeout_s == 2.0
    assert plan.bench.simulation.components == {"R": approx(3.3e3), "C": approx(47e-9)}
    assert plan.bench.simulation.distortion_frac == approx(0.005)
    assert plan.sweep.points == 31 and plan.sweep.direction == "down"
    assert plan.acquisition.target_gain_db == approx(0.01)  # "10 mdB"
    assert plan.acquisition.target_phase_deg is None
    assert plan.model.components["R"].value == approx(3.3e3)  # "3k3", IEC 60062 letter code
    assert plan.model.loading.reference == "source"
    assert plan.limits.fixed_gain_db == approx(0.3) and plan.limits.fixed_phase_deg is None
    assert plan.limits.allowance_gain_db == 0.0 and plan.limits.allowance_phase_deg == 0.5
    first, second = plan.limits.masks
    assert (first.from_hz, first.to_hz, first.gain_min_db, first.gain_max_db) == (20.0, 200.0, -0.5, 0.2)
    assert (second.from_hz, second.to_hz, second.phase_max_deg) == (5e3, 20e3, -45.0)
    assert plan.limits.monte_carlo.percentiles == (2.5, 97.5)
    assert plan.limits.monte_carlo.distribution == "normal"


def test_rational_meter_fixture() -> None:
    plan = load_plan(FIXTURES / "rational-meter.yaml")
    assert plan.bench.mode == "meter" and plan.bench.scope is None
    assert plan.bench.visa_library == "@py"
    assert plan.bench.source.timeout_s == approx(0.5)
    assert plan.stimulus.amplitude_vpp == approx(0.4)  # 200 mVpk = 0.4 Vpp
    assert plan.stimulus.load_ohm is None  # "high-Z"
    assert plan.sweep.frequencies_hz == [100.0, 500.0, 1e3, 1.1e3, 2e3, 10e3]
    assert plan.sweep.start_hz is None and plan.sweep.points is None
    assert plan.model.zeros_hz == [0j]
    assert plan.model.poles_hz == [complex(-50, 1e3), complex(-50, -1e3), complex(-20e3, 0)]
    assert plan.model.gain == 2000.0
    assert plan.model.components == {}


def test_defaults_when_sections_are_left_out() -> None:
    text = (FIXTURES / "rational-meter.yaml").read_text(encoding="utf-8")
    plan = load_plan_text(text)
    assert plan.acquisition == Acquisition()
    assert plan.acquisition.target_gain_db is None
    assert plan.metadata.tags == []
    assert plan.bench.simulation.seed == 0 and plan.bench.simulation.realtime is False


def test_sections_built_in_python_by_attribute_name() -> None:
    # Other packages build sections in code with the unit-carrying names.
    sweep = Sweep(start_hz=10.0, stop_hz=1e3, points=5)
    assert sweep.start_hz == 10.0 and sweep.points == 5
    stimulus = Stimulus(amplitude_vpp="1 Vpk", max_amplitude_vpp=4.0)
    assert stimulus.amplitude_vpp == 2.0
    averaged = Acquisition(averages=16)
    assert averaged.max_averages == 16  # raised to averages when not given


def test_yaml_merge_keys_and_anchors() -> None:
    text = (FIXTURES / "base-plan.yaml").read_text(encoding="utf-8")
    text = text.replace(
        '  source: {resource: "TCPIP0::sim-gen::5025::SOCKET", driver: sim-generator.yaml}',
        '  source: &gen {resource: "TCPIP0::sim-gen::5025::SOCKET", driver: sim-generator.yaml, timeout: 3 s}',
    ).replace("    driver: sim-scope-b.yaml\n    timeout: 2 s\n", "    driver: sim-scope-b.yaml\n    <<: *gen\n")
    plan = load_plan_text(text)
    assert plan.bench.source.timeout_s == 3.0
    assert plan.bench.scope.timeout_s == 3.0  # merged from the anchor
    assert plan.bench.scope.driver == "sim-scope-b.yaml"  # explicit keys win over merged ones


def test_coverage_probability_defaults_to_95_percent_and_is_bounded(tmp_path) -> None:
    # GUM 6.2.2: 95 % is the usual level; 100 % has no finite Student's t, so it is refused, located.
    from sweeper.plan import PlanError, load_plan_text
    from sweeper.sim.demo import demo_plan_text

    plan = load_plan_text(demo_plan_text(), str(tmp_path / "p.yaml"))
    assert plan.limits.coverage_probability == 0.95 and plan.limits.coverage_factor is None
    with pytest.raises(PlanError, match=r"p\.yaml:\d+:\d+: limits\.coverage_probability: '100 %' must be below 100 %"):
        load_plan_text(demo_plan_text(limits="{band: worst-case, coverage_probability: 100 %}"), str(tmp_path / "p.yaml"))
