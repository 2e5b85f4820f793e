"""Shared simulated sweeps for the analysis tests, made once per session."""

from __future__ import annotations

from typing import Any

import pandas as pd
import pytest
from analysis_rig import RL, SEEDS, measure

Measured = tuple[pd.DataFrame, dict[str, Any]]


@pytest.fixture(scope="session")
def rc_batch() -> list[Measured]:
    """20 sweeps of an RC low-pass (R 1.6 kOhm, C 120 nF fitted for 100 nF), one per seed, 0.2 % range noise."""
    return [measure(seed=seed, serial=f"ANX3-{seed:04d}", true_parts="{C: 120 nF}") for seed in SEEDS]


@pytest.fixture(scope="session")
def rl_batch() -> list[Measured]:
    """20 sweeps of an RL high-pass with its DCR (R 470 Ohm, L 12 mH, RL 15 Ohm), scope dialect B."""
    return [measure(seed=seed, serial=f"ANX3-{100 + seed:04d}", circuit="rl-highpass", components=RL,
                    true_parts="{L: 12 mH, RL: 15 Ohm}", start="100 Hz", stop="1 MHz", dialect="b") for seed in SEEDS]
