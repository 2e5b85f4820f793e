"""Autorange at small signals: hysteresis, and a clipped capture is never judged.

A 20 mVpp stimulus with 3 mV rms of front-end noise: on the range that fits the sine, noise
peaks clip; on the next range up the sine looks small. Without hysteresis autorange went back
down and kept a clipped capture at every point (flags clipped, low_signal, retried), then
judged it. The expectations are the decision rule itself (ILAC-G8: a value that was not
measured cannot be judged) and the flags' definitions in sweeper.measure.point.
"""

from __future__ import annotations

import math
from pathlib import Path

from sweeper.measure.point import Flag, Point, Verdict
from sweeper.plan import load_plan_text
from sweeper.run.runner import sweep_only
from sweeper.run.spec import run_spec
from sweeper.sim.demo import demo_plan_text


def test_small_signal_autorange_does_not_end_on_a_clipped_capture(tmp_path: Path):
    text = demo_plan_text(simulation="{seed: 2, noise: 3 mV, transient: false}",
                          stimulus="{amplitude: 20 mVpp, load: high-z, max_amplitude: 5 Vpp}",
                          sweep="{start: 100 Hz, stop: 100 kHz, points_per_decade: 3}",
                          acquisition="{min_cycles: 8, min_samples: 2000, averages: 1, max_averages: 2}")
    spec = run_spec(load_plan_text(text, str(tmp_path / "small.yaml")))
    points = sweep_only(spec).points
    assert len(points) == 10
    assert not [p.index for p in points if p.flags & Flag.CLIPPED]
    assert all(p.flags & Flag.RETRIED for p in points)  # autorange did work at every point
    assert all(p.verdict != Verdict.NOT_JUDGED for p in points)


def test_a_clipped_point_is_not_judged(tmp_path: Path):
    text = demo_plan_text(sweep="{start: 1 kHz, stop: 10 kHz, points: 2}")
    judge = run_spec(load_plan_text(text, str(tmp_path / "p.yaml"))).judge
    at = judge.limits.at(0)
    # A value right on the model, with a tiny uncertainty: PASS unless it clipped.
    point = Point(index=0, frequency_hz=float(judge.limits.frequency_hz[0]), gain_db=at["model_gain_db"],
                  phase_deg=at["model_phase_deg"], u_gain_db=1e-4, u_phase_deg=1e-3, amplitude_in_v=1.0,
                  amplitude_out_v=1.0, dof_eff_gain=math.inf, dof_eff_phase=math.inf)
    assert judge(point).verdict == Verdict.PASS
    clipped = Point(**{**point.__dict__, "flags": int(Flag.CLIPPED | Flag.RETRIED)})
    assert judge(clipped).verdict == Verdict.NOT_JUDGED
