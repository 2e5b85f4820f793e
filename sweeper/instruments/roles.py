"""Role interfaces: the seam between the sweep engine and the instruments.

The engine talks to these roles only, never to SCPI strings. Each role is built
from a driver file by `sweeper.instruments.driver` over one pyvisa session.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol

import numpy as np


@dataclass(frozen=True)
class SourceLimits:
    """What a signal source can do, from its driver file."""

    frequency_min_hz: float
    frequency_max_hz: float
    amplitude_min_vpp: float
    amplitude_max_vpp: float
    offset_max_v: float = 10.0


@dataclass(frozen=True)
class ScopeLimits:
    """What a digitising scope can do, from its driver file."""

    full_scales_v: tuple[float, ...]  # selectable vertical full-scale spans, V peak-to-peak of the screen
    max_samples: int
    max_sample_rate_hz: float
    min_sample_rate_hz: float = 1.0
    bits: int = 8


@dataclass(frozen=True)
class MeterLimits:
    """What a gain-phase meter can do, from its driver file."""

    frequency_min_hz: float
    frequency_max_hz: float


@dataclass
class Capture:
    """One simultaneous acquisition of both scope channels, scaled to volts."""

    volts: np.ndarray  # shape (2, N): row 0 = channel 1 (DUT input), row 1 = channel 2 (DUT output), V
    sample_interval_s: float
    full_scale_v: tuple[float, float]  # vertical full-scale span of each channel at capture time, V
    clipped: tuple[bool, bool] = (False, False)  # a sample sat at a range limit


@dataclass(frozen=True)
class MeterReading:
    """A gain-phase meter's own answer."""

    gain_db: float
    phase_deg: float
    amplitude_in_v: float = float("nan")  # amplitude (peak) at channel 1, V, when the meter reports it
    amplitude_out_v: float = float("nan")


@dataclass(frozen=True)
class ScopeReading:
    """A scope's own measurements on one acquisition (scope-measure mode)."""

    amplitude_in_vpp: float  # peak-to-peak at channel 1 as the scope measures it, V
    amplitude_out_vpp: float  # peak-to-peak at channel 2, V
    phase_deg: float  # channel 2 relative to channel 1, degrees
    full_scale_v: tuple[float, float]  # vertical full-scale span of each channel, V


class Source(Protocol):
    """A sine source driving the DUT input."""

    limits: SourceLimits

    def reset(self) -> None: ...
    def configure_sine(self, amplitude_vpp: float, offset_v: float, load_ohm: float | None) -> None:
        """Sine shape, amplitude (Vpp as the source means it for its load setting), offset V,
        load setting (None = high impedance, else ohms)."""
    def set_frequency(self, frequency_hz: float) -> None: ...
    def set_output(self, on: bool) -> None: ...


class Scope(Protocol):
    """A two-channel digitiser: channel 1 sees the DUT input, channel 2 its output."""

    limits: ScopeLimits

    def reset(self) -> None: ...
    def set_range(self, channel: int, full_scale_v: float) -> float:
        """Select the smallest vertical span >= full_scale_v (V, whole screen); returns the span set."""
    def set_window(self, sample_rate_hz: float, samples: int) -> tuple[float, int]:
        """Ask for a sample rate (Hz) and record length; returns what the scope will use."""
    def capture(self) -> Capture:
        """One triggered single acquisition of both channels, fetched and scaled to volts."""


class MeasuringScope(Scope, Protocol):
    """A scope that also measures peak-to-peak and phase itself (scope-measure mode)."""

    def measure(self) -> ScopeReading:
        """One triggered acquisition, then the scope's own Vpp of both channels and their phase."""


class Meter(Protocol):
    """An instrument that measures amplitude ratio and phase itself."""

    limits: MeterLimits

    def reset(self) -> None: ...
    def measure(self, frequency_hz: float) -> MeterReading: ...


@dataclass
class Identity:
    """Who answered on a resource: recorded in every run file."""

    role: str
    resource: str
    idn: str
    driver: str
    driver_sha256: str


@dataclass
class TransactionStats:
    """Counts kept by the one place every instrument transaction passes."""

    writes: int = 0
    queries: int = 0
    bytes_read: int = 0
    seconds: float = 0.0
    per_role: dict[str, int] = field(default_factory=dict)


class Clock(Protocol):
    """Time as the bench sees it: real for hardware, simulated for the virtual bench."""

    def now_s(self) -> float:
        """Monotonic seconds."""
    def sleep(self, seconds: float) -> None:
        """Wait (or advance a simulated clock) by seconds."""
