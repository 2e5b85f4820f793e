"""Meter mode: repeat readings, the averaging rules of waveform mode, Student's k.

Outside references: GUM (JCGM 100:2008) 4.2.3 (s / sqrt(n), n - 1 degrees of freedom) and
table G.2 (t = 4.30 for 2 degrees of freedom at 95 %), scipy.stats.t.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from sweeper.measure.point import Flag
from sweeper.plan import load_plan_text
from sweeper.run.runner import sweep_only
from sweeper.run.spec import run_spec
from sweeper.sim.demo import demo_plan_text


def _points(tmp_path: Path, acquisition: str, noise_v: float = 2e-3):
    text = demo_plan_text(mode="meter", instrument="meter",
                          simulation=f"{{seed: 4, noise: {noise_v} V, transient: false}}",
                          sweep="{start: 150 Hz, stop: 15 kHz, points: 4, spacing: log}", acquisition=acquisition)
    return sweep_only(run_spec(load_plan_text(text, str(tmp_path / "m.yaml")))).points


def test_three_readings_give_k_4_30(tmp_path: Path):
    points = _points(tmp_path, "{averages: 1, max_averages: 3}")
    for p in points:
        assert p.captures == 3 and p.dof_eff_gain == 2.0
        # GUM table G.2: 4.30 (3 figures); scipy.stats.t as the exact reference.
        assert p.k_gain == pytest.approx(stats.t.ppf(0.975, 2), rel=1e-12) == pytest.approx(4.30, abs=0.005)
        assert p.expanded_u_gain_db == pytest.approx(p.k_gain * p.u_gain_db)


def test_averages_and_target_are_honoured(tmp_path: Path):
    points = _points(tmp_path, "{averages: 5, max_averages: 5}")
    assert all(p.captures == 5 and p.dof_eff_phase == 4.0 for p in points)
    # An unreachable target: readings up to max_averages, then the flag waveform mode sets.
    points = _points(tmp_path, "{averages: 3, max_averages: 7, target_uncertainty: {gain: 1e-9 dB}}")
    assert all(p.captures == 7 and p.flags & Flag.UNCERTAINTY_MISSED for p in points)
    # A generous target is met at the minimum count, no flag.
    points = _points(tmp_path, "{averages: 3, max_averages: 7, target_uncertainty: {gain: 1 dB, phase: 10 deg}}")
    assert all(p.captures == 3 and not p.flags & Flag.UNCERTAINTY_MISSED for p in points)
    assert np.all(np.isfinite([p.u_gain_db for p in points]))
