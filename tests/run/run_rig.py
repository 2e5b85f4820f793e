"""Shared pieces of the unattended-run tests: plans on the simulated bench, run helpers."""

from __future__ import annotations

from pathlib import Path

from sweeper.measure.point import Flag
from sweeper.plan import load_plan_text
from sweeper.store.journal import read_journal
from sweeper.store.runfile import ensure_runfile, frames_identical, points_frame, read_run

SCOPE_A = 'scope: {resource: "TCPIP0::sim-scope-a::5025::SOCKET", driver: sim-scope-a.yaml}'
SCOPE_B = 'scope: {resource: "TCPIP0::sim-scope-b::5025::SOCKET", driver: sim-scope-b.yaml}'
METER = 'meter: {resource: "TCPIP0::sim-meter::5025::SOCKET", driver: sim-meter.yaml}'

# An invented test fixture: a 1.6 kOhm / 100 nF RC low-pass (corner near 1 kHz).
PLAN = """\
plan: 1
name: unattended-test
dut: {{board: UNA-4 test fixture, serial: UNA4-{serial}}}
bench:
  kind: simulated
  mode: {mode}
  source: {{resource: "TCPIP0::sim-gen::5025::SOCKET", driver: sim-generator.yaml}}
  {instrument}
  simulation:
    seed: {seed}
    noise: 1 mV
    range_noise: 0.2 %
    realtime: {realtime}
    transient: {transient}
    components: {true_parts}
    faults: {injections}
stimulus: {{amplitude: 2 Vpp, load: high-z}}
sweep: {{start: {start}, stop: {stop}, points: {points}}}
acquisition:
  min_cycles: 8
  min_samples: 2000
  settle_cycles: 2
  averages: 1
  max_averages: 4
  autorange: {autorange}
  target_uncertainty: {{gain: 0.02 dB}}
model:
  circuit: {circuit}
  components: {components}
  loading: {{source_resistance: 50 Ohm, probe_resistance: 1 MOhm, probe_capacitance: 15 pF}}
faults: {faults}
"""

RC = "{R: {value: 1.6 kOhm, tolerance: 1 %}, C: {value: 100 nF, tolerance: 5 %}}"


def plan_text(**kw: object) -> str:
    """A plan for the simulated bench; keyword arguments replace the defaults below."""
    fields = dict(serial="0001", mode="waveform", instrument=SCOPE_A, seed=3, realtime="false", transient="true",
                  true_parts="{}", injections="[]", start="200 Hz", stop="20 kHz", points=12, autorange="true",
                  circuit="rc-lowpass", components=RC, faults="{}")
    fields.update(kw)
    return PLAN.format(**fields)


def load(text: str, where: Path):
    """Write the plan beside the runs (so messages name a file) and load it."""
    where.mkdir(parents=True, exist_ok=True)
    path = where / "plan.yaml"
    path.write_text(text, encoding="utf-8")
    return load_plan_text(text, str(path))


def journal_points_match_runfile(journal: Path, run_file: Path) -> int:
    """Rebuild the run file from the journal if needed; assert it holds exactly the journal's
    points (bit for bit); return how many."""
    ensure_runfile(journal, run_file)
    frame, _ = read_run(run_file)
    contents = read_journal(journal)
    assert frames_identical(frame, points_frame(contents.points))
    assert [p.index for p in contents.points] == list(range(len(contents.points)))
    return len(contents.points)


def without_times(frame):
    """The run's points without the two time columns (the only ones a resume may change)."""
    return frame.drop(columns=["elapsed_s", "time_utc"])


def skipped(points) -> list[int]:
    return [p.index for p in points if p.flags & Flag.SKIPPED]
