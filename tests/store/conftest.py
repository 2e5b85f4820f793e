"""Fixtures for the store tests: an invented run of the demo plan."""

from __future__ import annotations

from typing import Any

import pytest
from store_samples import planned_frequency_hz, rc_prediction, sample_metadata, sample_point

from sweeper.measure.point import Point
from sweeper.store.runfile import run_header


@pytest.fixture
def header() -> dict[str, Any]:
    """Journal header of the sample run (completed metadata, planned grid, RC prediction)."""
    freq = planned_frequency_hz()
    return run_header(sample_metadata(), freq, rc_prediction(freq))


@pytest.fixture
def points() -> list[Point]:
    """40 points full of float64 edge cases and arbitrary bit patterns."""
    return [sample_point(i) for i in range(40)]
