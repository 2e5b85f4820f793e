"""Shared pieces of the transport tests: a small RC plan, loopback servers for it, the reference curve.

Everything runs on loopback (127.0.0.1) only: the servers of sweeper.sim.serve and real
pyvisa-py sessions, no mocks.
"""

from __future__ import annotations

import signal as os_signal
from pathlib import Path

import numpy as np
from scipy import signal

from sweeper.plan import Plan, load_plan_text

R_OHM, C_F = 1.6e3, 100e-9  # the DUT of every plan below
RP_OHM, CP_F = 1e6, 15e-12  # scope probe on the output node (the plan's loading)

PLAN = """
plan: 1
name: transport-rc
dut: {{board: TRN-4 loopback fixture, serial: TRN4-{serial}}}
bench:
  kind: {kind}
  visa_library: "{library}"
  mode: {mode}
  source: {{resource: "{source}", driver: sim-generator.yaml{timeout}}}
  {role}: {{resource: "{instrument}", driver: {driver}{timeout}}}
  simulation: {{seed: {seed}, noise: {noise}}}
stimulus: {{amplitude: 2 Vpp, load: high-z, max_amplitude: 5 Vpp}}
sweep: {{start: {start}, stop: {stop}, points_per_decade: {ppd}}}
acquisition:
  min_cycles: 8
  min_samples: 4000
  settle_cycles: 2
  settle_time_constants: 6
  averages: {averages}
  max_averages: 4
model:
  circuit: rc-lowpass
  components: {{R: {{value: 1.6 kOhm, tolerance: 1 %}}, C: {{value: 100 nF, tolerance: 5 %}}}}
  loading: {{source_resistance: 50 Ohm, probe_resistance: 1 MOhm, probe_capacitance: 15 pF}}
limits: {{band: worst-case, allowance: {{gain: 0.1 dB, phase: 1 deg}}, decision_rule: guarded}}
{extra}
"""

SIM_SOURCE = "TCPIP0::sim-gen::5025::SOCKET"
SIM_SCOPE_A = "TCPIP0::sim-scope-a::5025::SOCKET"


def rc_plan(path: Path, **fields: object) -> Plan:
    """The RC plan; defaults: simulated bench, waveform mode with scope A, 100 Hz .. 100 kHz at 3 per decade."""
    values: dict[str, object] = dict(kind="simulated", library="@py", mode="waveform", source=SIM_SOURCE,
                                     role="scope", instrument=SIM_SCOPE_A, driver="sim-scope-a.yaml", timeout="",
                                     seed=3, noise="0.5 mV", start="100 Hz", stop="100 kHz", ppd=3, averages=1,
                                     serial="0001", extra="")
    values.update(fields)
    return load_plan_text(PLAN.format(**values), str(path))


def loopback_plan(path: Path, resources: dict[str, str], scope: str = "scope-a", timeout_s: float | None = None,
                  **fields: object) -> Plan:
    """The RC plan pointed at served instruments through pyvisa-py (bench.kind visa)."""
    timeout = f", timeout: {timeout_s} s" if timeout_s is not None else ""
    driver = {"scope-a": "sim-scope-a.yaml", "scope-b": "sim-scope-b.yaml", "meter": "sim-meter.yaml"}[scope]
    role = "meter" if scope == "meter" else "scope"
    return rc_plan(path, kind="visa", library="@py", source=resources["generator"], instrument=resources[scope],
                   driver=driver, role=role, timeout=timeout, **fields)


def rc_reference(frequency_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB) and phase (degrees) of the RC low-pass loaded by the probe, from scipy.signal.freqs.

    Handbook voltage divider, input node to output node: H = Y_R / (Y_R + Y_shunt) with
    Y_R = 1/R and Y_shunt = s (C + Cp) + 1/Rp, so b = [1/R], a = [C + Cp, 1/R + 1/Rp]
    (the generator's 50 Ohm sits before the input node and cancels in the ratio).
    """
    b = np.array([1.0 / R_OHM])
    a = np.array([C_F + CP_F, 1.0 / R_OHM + 1.0 / RP_OHM])
    _, h = signal.freqs(b, a, worN=2 * np.pi * np.asarray(frequency_hz, dtype=float))
    return 20 * np.log10(np.abs(h)), np.degrees(np.angle(h))


def phase_difference_deg(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """a - b wrapped to [-180, 180) degrees."""
    return (np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0


def sweeper_in_process(*args: str) -> tuple[int, str, str]:
    """Run the sweeper command line in this process (click's test runner): (exit code, stdout, stderr).

    Used where the command must reach servers running in this process quickly; an exception
    escaping the command is re-raised, so a traceback cannot pass unnoticed.
    """
    from click.testing import CliRunner

    from sweeper.cli import main

    handlers = {sig: os_signal.getsignal(sig) for sig in (os_signal.SIGTERM, os_signal.SIGINT)}
    try:
        result = CliRunner().invoke(main, list(args), catch_exceptions=True)
    finally:  # `run` and `bench serve` install their own handlers: give pytest its own back
        for sig, handler in handlers.items():
            os_signal.signal(sig, handler)
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    return result.exit_code, result.stdout, result.stderr
