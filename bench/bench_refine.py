"""Benchmark: adaptive frequency grid (sweeper.measure.refine) against a 20-per-decade log grid.

Run:  .venv/bin/python bench/bench_refine.py

For second-order band-passes (Q = 2, 10, 50, f0 = 1 kHz, 10 Hz to 100 kHz), evaluated by
scipy.signal.freqs: the worst error of straight-line reading in log frequency of a
20-per-decade grid (81 points) over 20,001 reference frequencies is the tolerance given to the
adaptive grid, which starts from 3 points per decade; printed are both grids' points, their
worst gain and phase errors and the ratio of points (target <= 0.5 at equal worst error).
"""

from __future__ import annotations

import sys

import numpy as np
from scipy import signal

from sweeper.measure.refine import RefineSettings, adaptive_grid

DENSE = np.geomspace(10.0, 1e5, 20001)


def band_pass(q: float, f0_hz: float = 1e3):
    w0 = 2 * np.pi * f0_hz
    b, a = [w0 / q, 0.0], [1.0, w0 / q, w0**2]

    def response(f):
        _, h = signal.freqs(b, a, worN=2 * np.pi * np.asarray(f, dtype=float))
        return 20 * np.log10(np.abs(h)), np.degrees(np.unwrap(np.angle(h)))

    return response


def worst(response, f) -> tuple[float, float]:
    g, p = response(f)
    gd, pd = response(DENSE)
    x, xd = np.log10(f), np.log10(DENSE)
    return float(np.max(np.abs(np.interp(xd, x, g) - gd))), float(np.max(np.abs(np.interp(xd, x, p) - pd)))


def main() -> int:
    print(f"{'Q':>4}{'log pts':>9}{'worst dB':>10}{'worst deg':>11}{'adaptive':>10}{'worst dB':>10}{'worst deg':>11}{'ratio':>7}")
    for q in (2.0, 10.0, 50.0):
        response = band_pass(q)
        reference = np.geomspace(10.0, 1e5, 81)
        tol_db, tol_deg = worst(response, reference)
        grid = adaptive_grid(response, np.geomspace(10.0, 1e5, 13), RefineSettings(tol_db, tol_deg))
        got_db, got_deg = worst(response, grid)
        print(f"{q:>4g}{reference.size:>9}{tol_db:>10.4f}{tol_deg:>11.3f}{grid.size:>10}{got_db:>10.4f}"
              f"{got_deg:>11.3f}{grid.size / reference.size:>7.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
