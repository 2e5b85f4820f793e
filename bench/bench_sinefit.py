"""Benchmark: time of the three-parameter sine fit on two channels.

Run:  /tmp/venv/bin/python bench/bench_sinefit.py

Prints, for 2 x 10,000, 2 x 100,000 and 2 x 1,000,000 samples, the median wall time of
`sweeper.measure.sinefit.fit_sine` (harmonics up to 5, as the engine calls it) and of a plain
implementation that evaluates np.cos and np.sin over the whole record and solves the
[cos, sin, 1] normal equations (no harmonics, so it does less work). The target is
<= 5 ms median for 2 x 1,000,000 samples.

Timings on a shared machine move with whatever else runs; the load average is printed
alongside. OpenBLAS threads (OPENBLAS_NUM_THREADS) change the figures too.
"""

from __future__ import annotations

import os
import statistics
import time
from collections.abc import Callable

import numpy as np

from sweeper.measure.sinefit import fit_sine

SAMPLE_INTERVAL_S = 1e-6
TARGET_MS = 5.0


def plain_fit(volts: np.ndarray, frequency_hz: float, sample_interval_s: float) -> np.ndarray:
    """Reference: full-length [cos, sin, 1] basis, normal equations; returns (C, 3) coefficients."""
    angle = 2 * np.pi * frequency_hz * sample_interval_s * np.arange(volts.shape[1])
    basis = np.stack([np.cos(angle), np.sin(angle), np.ones(volts.shape[1])])
    gram = basis @ basis.T
    return np.linalg.solve(gram, basis @ volts.T).T


def median_ms(call: Callable[[], object], repeats: int) -> tuple[float, float]:
    """Median wall time and median process CPU time of `call`, ms (after one warm-up call)."""
    call()
    wall, cpu = [], []
    for _ in range(repeats):
        start_wall, start_cpu = time.perf_counter(), time.process_time()
        call()
        wall.append(time.perf_counter() - start_wall)
        cpu.append(time.process_time() - start_cpu)
    return 1e3 * statistics.median(wall), 1e3 * statistics.median(cpu)


def record(samples: int, rng: np.random.Generator) -> tuple[np.ndarray, float]:
    """Two channels (V) of a noisy sine with a non-whole number of cycles, and its frequency (Hz)."""
    frequency_hz = 1234.567 / (samples * SAMPLE_INTERVAL_S)
    angle = 2 * np.pi * frequency_hz * SAMPLE_INTERVAL_S * np.arange(samples)
    volts = np.stack([np.cos(angle + 0.3), 0.5 * np.cos(angle - 0.7)]) + 0.01 * rng.standard_normal((2, samples))
    return volts, frequency_hz


def main() -> None:
    rng = np.random.default_rng(1)
    sizes = ((10_000, 400, 100), (100_000, 200, 30), (1_000_000, 100, 7))
    records = {samples: record(samples, rng) for samples, _, _ in sizes}
    # All fit_sine timings first: the plain implementation's large BLAS products wake the BLAS
    # thread pool, whose busy-waiting workers would slow whatever runs right after them.
    fast = {
        samples: median_ms(lambda: fit_sine(*records[samples], SAMPLE_INTERVAL_S), repeats)
        for samples, repeats, _ in sizes
    }
    plain = {
        samples: median_ms(lambda: plain_fit(*records[samples], SAMPLE_INTERVAL_S), repeats)
        for samples, _, repeats in sizes
    }
    threads = os.environ.get("OPENBLAS_NUM_THREADS", "unset")
    print(f"load average {os.getloadavg()[0]:.2f}, OPENBLAS_NUM_THREADS={threads}")
    print(f"{'record':>16} {'fit_sine ms':>12} {'(cpu ms)':>9} {'plain ms':>10} {'(cpu ms)':>9} {'speed-up':>9}")
    for samples, _, _ in sizes:
        (fast_wall, fast_cpu), (plain_wall, plain_cpu) = fast[samples], plain[samples]
        label = "2 x " + format(samples, ",")
        print(
            f"{label:>16} {fast_wall:12.3f} {fast_cpu:9.3f} {plain_wall:10.2f} {plain_cpu:9.2f}"
            f" {plain_wall / fast_wall:8.1f}x"
        )
    wall_ms = fast[1_000_000][0]
    verdict = "meets" if wall_ms <= TARGET_MS else "MISSES"
    print(f"2 x 1,000,000 samples: {wall_ms:.2f} ms median {verdict} the {TARGET_MS:g} ms target")


if __name__ == "__main__":
    main()
