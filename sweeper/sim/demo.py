"""Demo plan texts for the simulated bench: one template, filled in by benchmarks and tests.

Every board, serial and station here is invented. The default is a first-order RC low-pass
(1.6 kOhm, 100 nF: corner near 1 kHz) measured with scope dialect A through 1 MOhm / 15 pF
probes; any section can be replaced by a YAML flow fragment.
"""

from __future__ import annotations

#: The RC board's parts and tolerances (YAML flow mapping).
RC_PARTS = "{R: {value: 1.6 kOhm, tolerance: 1 %}, C: {value: 100 nF, tolerance: 5 %}}"
#: Probe and source loading of the demo benches (YAML flow mapping).
PROBE_LOADING = "{source_resistance: 50 Ohm, probe_resistance: 1 MOhm, probe_capacitance: 15 pF}"

_RESOURCES = {
    "source": "TCPIP0::sim-gen::5025::SOCKET",
    "scope-a": "TCPIP0::sim-scope-a::5025::SOCKET",
    "scope-b": "TCPIP0::sim-scope-b::5025::SOCKET",
    "meter": "TCPIP0::sim-meter::5025::SOCKET",
}
_DRIVERS = {"scope-a": "sim-scope-a.yaml", "scope-b": "sim-scope-b.yaml", "meter": "sim-meter.yaml"}

_TEMPLATE = """\
plan: 1
name: {name}
dut: {{board: {board}, serial: {serial}}}
bench:
  kind: {kind}
  mode: {mode}{visa_library}
  source: {{resource: "{source_resource}", driver: sim-generator.yaml}}
  {role}: {{resource: "{instrument_resource}", driver: {driver}}}
  simulation: {simulation}
stimulus: {stimulus}
sweep: {sweep}
acquisition: {acquisition}
model:
  circuit: {circuit}
  components: {components}
  loading: {loading}
limits: {limits}
metadata: {metadata}
"""


def demo_plan_text(
    *,
    name: str = "demo-rc",
    board: str = "DEMO-1 RC fixture",
    serial: str = "DEMO1-0001",
    kind: str = "simulated",
    mode: str = "waveform",
    instrument: str = "scope-a",
    visa_library: str | None = None,
    source_resource: str | None = None,
    instrument_resource: str | None = None,
    simulation: str = "{seed: 1, range_noise: 0.2 %}",
    stimulus: str = "{amplitude: 2 Vpp, load: high-z, max_amplitude: 10 Vpp}",
    sweep: str = "{start: 100 Hz, stop: 100 kHz, points_per_decade: 5}",
    acquisition: str = "{min_cycles: 8, min_samples: 2000, settle_cycles: 2, settle_time_constants: 6}",
    circuit: str = "rc-lowpass",
    components: str = RC_PARTS,
    loading: str = PROBE_LOADING,
    limits: str = "{band: worst-case, allowance: {gain: 0.05 dB, phase: 0.5 deg}, decision_rule: guarded}",
    metadata: str = "{operator: demo, station: STN-D1}",
) -> str:
    """A plan's YAML text; instrument: 'scope-a', 'scope-b' or 'meter' (meter mode needs
    'meter'); resources default to the simulated bench's; sections are YAML flow fragments."""
    role = "meter" if instrument == "meter" else "scope"
    return _TEMPLATE.format(
        name=name, board=board, serial=serial, kind=kind, mode=mode,
        visa_library=f"\n  visa_library: \"{visa_library}\"" if visa_library else "",
        source_resource=source_resource or _RESOURCES["source"],
        role=role, instrument_resource=instrument_resource or _RESOURCES[instrument], driver=_DRIVERS[instrument],
        simulation=simulation, stimulus=stimulus, sweep=sweep, acquisition=acquisition, circuit=circuit,
        components=components, loading=loading, limits=limits, metadata=metadata,
    )


__all__ = ["PROBE_LOADING", "RC_PARTS", "demo_plan_text"]
