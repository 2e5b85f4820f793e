"""Sweep schedule: the frequency grid, and the settle and capture time of each point.

Pure functions on plain numbers; the engine and `sweeper check` both use them, so the
duration printed before a run is the one the engine will follow.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from sweeper.instruments.roles import ScopeLimits

#: Highest harmonic the fit projects out: the sample rate stays above twice its frequency.
HARMONICS = 5
#: Samples per period the window keeps at least (Nyquist for the 5th harmonic, with margin).
MIN_SAMPLES_PER_PERIOD = 2.5 * HARMONICS


def frequency_grid(
    start_hz: float | None = None,
    stop_hz: float | None = None,
    points_per_decade: float | None = None,
    points: int | None = None,
    spacing: str = "log",
    direction: str = "up",
    frequencies_hz: list[float] | None = None,
) -> np.ndarray:
    """Frequencies of a sweep in measurement order, Hz.

    An explicit list is used as given (sorted, duplicates removed); otherwise log or linear
    spacing from start to stop, both ends included, with `points` in all or
    `points_per_decade` (rounded up so that no decade gets fewer).
    """
    if frequencies_hz:
        grid = np.unique(np.asarray(frequencies_hz, dtype=float))
    else:
        if start_hz is None or stop_hz is None:
            raise ValueError("a sweep needs start and stop, or an explicit list of frequencies")
        if points is None:
            if points_per_decade is None:
                raise ValueError("a sweep needs points or points_per_decade")
            decades = math.log10(stop_hz / start_hz)
            points = max(2, int(math.ceil(decades * points_per_decade - 1e-9)) + 1)
        if spacing == "log":
            grid = np.geomspace(start_hz, stop_hz, int(points))
        else:
            grid = np.linspace(start_hz, stop_hz, int(points))
    return grid[::-1].copy() if direction == "down" else grid


def settle_time_s(
    frequency_hz: float,
    settle_s: float,
    settle_cycles: float,
    settle_time_constants: float,
    slowest_time_constant_s: float,
) -> float:
    """Wait after a frequency change: the largest of a fixed time, whole cycles and DUT time constants, s."""
    tau = slowest_time_constant_s if math.isfinite(slowest_time_constant_s) else 0.0
    return max(settle_s, settle_cycles / frequency_hz, settle_time_constants * tau)


def time_constants_for_target(
    settle_time_constants: float,
    target_gain_db: float | None,
    target_phase_deg: float | None,
) -> float:
    """Time constants to wait so a unit step's transient has decayed below the target uncertainty.

    A first-order transient decays as exp(-t/tau); to leave at most a relative error e it needs
    t = tau ln(1/e). The target gain uncertainty in dB is a relative amplitude error of
    target ln(10)/20; a phase target in radians is the same relative size of a quadrature error.
    The plan's own settle_time_constants is kept when it asks for more.
    """
    errors = []
    if target_gain_db:
        errors.append(target_gain_db * math.log(10) / 20)
    if target_phase_deg:
        errors.append(math.radians(target_phase_deg))
    if not errors:
        return settle_time_constants
    return max(settle_time_constants, math.log(1.0 / min(errors)))


@dataclass(frozen=True)
class Window:
    """A capture window: sample rate (Sa/s), record length, and the cycles it holds."""

    sample_rate_hz: float
    samples: int
    cycles: float

    @property
    def duration_s(self) -> float:
        """Record duration, s."""
        return self.samples / self.sample_rate_hz


def capture_window(frequency_hz: float, min_cycles: float, min_samples: int, limits: ScopeLimits) -> Window:
    """Shortest window holding >= min_cycles and >= min_samples within the scope's limits.

    The rate is chosen so the record just holds min_cycles with min_samples samples; it is
    raised to keep MIN_SAMPLES_PER_PERIOD and lowered to the scope's maximum. If the rate hits
    the scope's minimum, more cycles are taken; the record never exceeds max_samples (then
    the window holds fewer cycles than asked, which the engine flags).
    """
    samples = max(int(min_samples), 16)
    rate = samples * frequency_hz / min_cycles
    rate = max(rate, MIN_SAMPLES_PER_PERIOD * frequency_hz)
    rate = min(rate, limits.max_sample_rate_hz)
    rate = max(rate, limits.min_sample_rate_hz)
    samples = max(samples, int(math.ceil(min_cycles * rate / frequency_hz)))
    samples = min(samples, int(limits.max_samples))
    return Window(rate, samples, samples * frequency_hz / rate)


def ceil_125(value: float) -> float:
    """Smallest 1-2-5 step (..., 0.5, 1, 2, 5, 10, ...) at or above value (> 0)."""
    decade = 10.0 ** math.floor(math.log10(value))
    for step in (1.0, 2.0, 5.0, 10.0):
        if step * decade >= value * (1 - 1e-12):
            return step * decade
    return 10.0 * decade


def window_is_valid(window: Window, frequency_hz: float, min_cycles: float, min_samples: int) -> bool:
    """True when an existing window still holds min_cycles and min_samples and samples fast enough."""
    cycles = window.samples * frequency_hz / window.sample_rate_hz
    return (
        cycles >= min_cycles * (1 - 1e-9)
        and window.samples >= min_samples
        and window.sample_rate_hz >= MIN_SAMPLES_PER_PERIOD * frequency_hz
    )


def choose_window(
    frequency_hz: float,
    min_cycles: float,
    min_samples: int,
    limits: ScopeLimits,
    current: Window | None,
    change_cost_s: float,
) -> Window:
    """The window to capture with: keep the current one unless a new one saves more than it costs.

    A new window asks for a 1-2-5 sample rate at or above the shortest window's rate (most
    scopes round rates down to 1-2-5 steps, so asking for one avoids a silent stretch of the
    record) and the samples that rate needs for min_cycles. Changing the window costs
    instrument transactions (change_cost_s); keeping a longer window costs capture time. The
    cheaper of the two wins, so a sweep does not reconfigure its scope at every point.
    """
    shortest = capture_window(frequency_hz, min_cycles, min_samples, limits)
    rate = min(ceil_125(shortest.sample_rate_hz), limits.max_sample_rate_hz)
    samples = max(int(min_samples), int(math.ceil(min_cycles * rate / frequency_hz - 1e-9)))
    samples = min(samples, int(limits.max_samples))
    fresh = Window(rate, samples, samples * frequency_hz / rate)
    if fresh.samples >= limits.max_samples:
        fresh = shortest
    if current is not None and window_is_valid(current, frequency_hz, min_cycles, min_samples):
        kept = Window(current.sample_rate_hz, current.samples, current.samples * frequency_hz / current.sample_rate_hz)
        if kept.duration_s <= fresh.duration_s + change_cost_s:
            return kept
    return fresh


def incoherent_frequency_hz(frequency_hz: float, sample_rate_hz: float, samples: int) -> float:
    """A stimulus frequency, within 1/samples (relative) of the one asked for, whose record
    visits `samples` distinct phases.

    When the sample rate is a simple multiple of the frequency (a decade frequency on a 1-2-5
    rate, say 10 kHz at 500 kSa/s) every period is sampled at the same few phases, so an ADC's
    quantisation error repeats identically and biases the fit instead of averaging out. IEEE
    Std 1241 asks for records whose cycle count and sample count share no factor for the same
    reason. With frequency/rate = p/q in lowest terms over the record, shifting the frequency by
    the relative amount 1/(q J) (J = cycles in the record) slides the q phase classes by one class
    spacing across the record, filling it evenly. Frequencies already incoherent are returned as
    they are.
    """
    ratio = Fraction(frequency_hz / sample_rate_hz).limit_denominator(samples)
    if abs(float(ratio) - frequency_hz / sample_rate_hz) > 1e-12 * frequency_hz / sample_rate_hz:
        return frequency_hz
    q = ratio.denominator
    if q >= samples // 2:
        return frequency_hz
    cycles = samples * frequency_hz / sample_rate_hz
    return frequency_hz * (1.0 + 1.0 / (q * cycles))


def samples_for_uncertainty(
    target_u_gain_db: float | None,
    target_u_phase_deg: float | None,
    snr_db: float,
) -> int:
    """Fewest samples per channel for which a sine fit meets the target uncertainties.

    From the Cramer-Rao bounds of the sine fit (see GUIDE.md): var(A)/A^2 >= 2 sigma^2/(A^2 M)
    and var(phi) >= 2 sigma^2/(A^2 M); with SNR = A^2/(2 sigma^2), both relative-amplitude and
    phase variance are 1/(SNR M). Two independent channels double the variance of the ratio.
    """
    snr = 10 ** (snr_db / 10)
    need = 16
    if target_u_gain_db:
        rel = target_u_gain_db * math.log(10) / 20  # dB -> relative amplitude
        need = max(need, math.ceil(2 / (snr * rel**2)))
    if target_u_phase_deg:
        rad = math.radians(target_u_phase_deg)
        need = max(need, math.ceil(2 / (snr * rad**2)))
    return need
