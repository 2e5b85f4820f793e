"""1-2-5 setting grids and range picking (the 1-2-5 sequence is common practice for scope
volts/div and time/div settings)."""

from __future__ import annotations

import pytest

from sweeper.instruments.scales import one_two_five, round_down_125, round_up_125, smallest_at_least


def test_one_two_five_grid() -> None:
    assert one_two_five(1e-3, 10.0) == [
        0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0, 5.0, 10.0,
    ]
    assert one_two_five(3.0, 40.0) == [5.0, 10.0, 20.0]
    with pytest.raises(ValueError):
        one_two_five(0.0, 1.0)


@pytest.mark.parametrize(
    ("value", "down", "up"),
    [(0.3, 0.2, 0.5), (1.0, 1.0, 1.0), (7.0, 5.0, 10.0), (150e3, 100e3, 200e3), (2.6667e-3, 2e-3, 5e-3),
     (0.1 * 3, 0.2, 0.5)],
)
def test_rounding(value: float, down: float, up: float) -> None:
    assert round_down_125(value) == down
    assert round_up_125(value) == up


def test_smallest_at_least() -> None:
    spans = [0.08, 0.16, 0.4, 0.8]
    assert smallest_at_least(spans, 0.1) == 0.16
    assert smallest_at_least(spans, 0.16) == 0.16
    assert smallest_at_least(spans, 0.16 * (1 + 1e-12)) == 0.16  # float noise does not skip a range
    assert smallest_at_least(spans, 5.0) == 0.8  # nothing big enough: the largest
