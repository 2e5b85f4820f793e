"""The drift table as a pure function: alignment by point index, phase wrapping, ties, one sweep."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sweeper.campaigns.drift import DRIFT_COLUMNS, Sweep, drift_table, largest_changes

FREQS_HZ = np.array([100.0, 1e3, 10e3, 100e3])


def frame(gain_db, phase_deg, index=None) -> pd.DataFrame:
    index = np.arange(len(gain_db)) if index is None else np.asarray(index)
    return pd.DataFrame({"index": index, "frequency_hz": FREQS_HZ[index], "gain_db": gain_db,
                         "phase_deg": phase_deg})


def wrapped_difference_deg(later_deg, reference_deg) -> np.ndarray:
    """Reference: the angle of the complex ratio of unit phasors (numpy.angle), degrees."""
    ratio = np.exp(1j * np.radians(later_deg)) / np.exp(1j * np.radians(reference_deg))
    return np.degrees(np.angle(ratio))


def test_changes_are_largest_in_magnitude_wrapped_and_aligned_by_index() -> None:
    ref = frame([0.0, -3.0, -20.0, -40.0], [-5.0, -45.0, -84.0, 179.0])
    # Sweep 2 lacks point 2 and lists its points in another order; sweep 3 is complete.
    two = frame([0.1, -40.3, -3.2], [-5.5, -179.0, -45.1], index=[0, 3, 1])
    three = frame([-0.05, -3.1, -20.4, -40.1], [-4.0, -45.05, -84.5, 178.0])
    table = drift_table([Sweep("r1", "t1", ref, 0.0), Sweep("r2", "t2", two, 600.0), Sweep("r3", "t3", three, 1200.0)])
    assert tuple(table.columns) == DRIFT_COLUMNS
    np.testing.assert_allclose(table["frequency_hz"], FREQS_HZ)
    np.testing.assert_allclose(table["gain_change_db"], [0.1, -0.2, -0.4, -0.3], atol=1e-12)
    assert list(table["gain_change_sweep"]) == [2, 2, 3, 2]
    # Phase across the +-180 degree seam: 179 -> -179 is +2 degrees, not -358 (numpy.angle).
    expected_phase = [wrapped_difference_deg(-4.0, -5.0), wrapped_difference_deg(-45.1, -45.0),
                      wrapped_difference_deg(-84.5, -84.0), wrapped_difference_deg(-179.0, 179.0)]
    np.testing.assert_allclose(table["phase_change_deg"], expected_phase, atol=1e-9)
    assert list(table["phase_change_sweep"]) == [3, 2, 3, 2]
    assert list(table["sweeps_compared"]) == [2, 2, 1, 2]
    assert list(table["gain_change_offset_s"]) == [600.0, 600.0, 1200.0, 600.0]
    gain, phase = largest_changes(table)
    assert (gain.frequency_hz, gain.run_id, gain.sweep) == (10e3, "r3", 3)
    assert gain.change == pytest.approx(-0.4, abs=1e-12)
    assert phase.frequency_hz == 100e3 and phase.sweep == 2 and phase.time_utc == "t2"


def test_ties_go_to_the_earlier_sweep() -> None:
    ref = frame([0.0, 0.0, 0.0, 0.0], [0.0, 0.0, 0.0, 0.0])
    same = frame([0.5, -0.5, 0.0, 0.0], [1.0, -1.0, 0.0, 0.0])
    table = drift_table([Sweep("a", "", ref), Sweep("b", "", same), Sweep("c", "", same.copy())])
    assert list(table["gain_change_run_id"]) == ["b"] * 4
    assert list(table["phase_change_sweep"]) == [2] * 4


def test_one_sweep_has_nothing_to_compare() -> None:
    table = drift_table([Sweep("only", "", frame([0.0, -3.0, -20.0, -40.0], [0.0, -45.0, -84.0, -89.0]))])
    assert table["gain_change_db"].isna().all() and table["phase_change_deg"].isna().all()
    assert (table["sweeps_compared"] == 0).all() and (table["gain_change_sweep"] == 0).all()
    assert largest_changes(table) == (None, None)
