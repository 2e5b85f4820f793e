"""A point is judged against the model and limits at the frequency it was measured at.

The engine nudges a frequency off the coherent grid (IEEE Std 1241 practice); on a steep
response a narrow fixed band evaluated at the planned frequency would fail a perfect board.
Reference: the notch's handbook transfer function (series R into L + C + RL to ground, the
scope probe across the output) evaluated with scipy.signal.freqs.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy import signal

from sweeper.measure.point import Verdict
from sweeper.plan import load_plan_text
from sweeper.run.runner import execute_run
from sweeper.store.runfile import read_run

R, L, C, RL = 330.0, 10e-3, 101.2e-9, 2.0
RP, CP = 1e6, 15e-12  # the probe on the output node, as the plan's loading says

PLAN = """
plan: 1
name: notch-nudged
dut: {board: NT-2 notch fixture, serial: NT2-0001}
bench:
  kind: simulated
  mode: waveform
  source: {resource: "TCPIP0::sim-gen::5025::SOCKET", driver: sim-generator.yaml}
  scope: {resource: "TCPIP0::sim-scope-a::5025::SOCKET", driver: sim-scope-a.yaml}
  simulation: {seed: 3, noise: 0 V, range_noise: 0 %, transient: false}
stimulus: {amplitude: 4 Vpp, load: high-z, max_amplitude: 10 Vpp}
sweep: {frequencies: [4000 Hz, 4500 Hz, 4950 Hz, 5000 Hz, 5050 Hz, 5500 Hz, 6000 Hz]}
acquisition: {min_cycles: 8, min_samples: 4000, averages: 4, max_averages: 4}
model:
  circuit: rlc-notch
  components: {R: 330 Ohm, L: 10 mH, C: 101.2 nF, RL: 2 Ohm}
  loading: {source_resistance: 50 Ohm, probe_resistance: 1 MOhm, probe_capacitance: 15 pF}
limits:
  band: none
  fixed: {gain: 1 dB, phase: 3 deg}
  decision_rule: simple
"""


def notch_reference(f_hz: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB) and phase (degrees) of the notch with the probe, from scipy.signal.freqs."""
    # Shunt arm admittance Y = s C / (s^2 L C + s RL C + 1), in parallel with 1/RP + s CP;
    # H = (1/R) / (1/R + Y_total) (voltage divider, handbook).
    num = np.polyadd(np.polymul([C, 0.0], [RP]), np.polymul([L * C, RL * C, 1.0], [RP * CP, 1.0]))
    den = np.polymul([L * C, RL * C, 1.0], [RP])
    b = den / R
    a = np.polyadd(den / R, num)
    _, h = signal.freqs(b, a, worN=2 * np.pi * f_hz)
    return 20 * np.log10(np.abs(h)), np.degrees(np.angle(h))


def test_notch_with_narrow_fixed_band_passes_a_perfect_board_at_nudged_frequencies(tmp_path: Path) -> None:
    plan = load_plan_text(PLAN, str(tmp_path / "plan.yaml"))
    outcome = execute_run(plan, tmp_path / "runs")
    assert outcome.status == "complete", outcome.error
    frame, meta = read_run(outcome.run_path)
    f = frame["frequency_hz"].to_numpy()
    planned = meta["prediction"]["frequency_hz"]
    g_meas, p_meas = notch_reference(f)
    g_plan, p_plan = notch_reference(planned)
    # Non-vacuous: the model moved by more than the 3 degree band between planned and measured
    # frequency at some point (the notch's phase slope is steep), so judging at the planned
    # frequency would fail this board.
    moved = np.abs((p_meas - p_plan + 180) % 360 - 180)
    assert moved.max() > 3.0
    # The stored model is the one at the measured frequency (scipy.signal.freqs reference;
    # 1e-6 dB / 1e-4 degree allow for float arithmetic on two independent implementations).
    np.testing.assert_allclose(frame["model_gain_db"], g_meas, atol=1e-6)
    np.testing.assert_allclose((frame["model_phase_deg"] - p_meas + 180) % 360 - 180, 0.0, atol=1e-4)
    assert (frame["verdict"] == Verdict.PASS).all()
    assert outcome.verdict == Verdict.PASS
