"""What the sweep engine is told (settings from the plan, as plain SI numbers), which roles it
measures with, and what it carries from one point to the next."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal, get_args

from sweeper.instruments.roles import Clock, Meter, Scope, Source
from sweeper.measure.schedule import Window

FitKind = Literal["three-parameter", "four-parameter"]
DecisionRule = Literal["simple", "guarded"]
Mode = Literal["waveform", "meter", "scope-measure"]


@dataclass(frozen=True)
class EngineSettings:
    """Everything the engine needs from the plan, as plain numbers (SI units).

    Checked when built: a fit, decision rule or mode outside its choices, or a count below
    one, is a ValueError before any instrument is touched.
    """

    amplitude_vpp: float
    offset_v: float = 0.0
    load_ohm: float | None = None
    min_cycles: float = 8.0
    min_samples: int = 2000
    settle_s: float = 0.0
    settle_cycles: float = 2.0
    settle_time_constants: float = 5.0
    slowest_time_constant_s: float = 0.0
    averages: int = 1
    max_averages: int = 8
    target_gain_db: float | None = None
    target_phase_deg: float | None = None
    autorange: bool = True
    fit: FitKind = "three-parameter"
    decision_rule: DecisionRule = "guarded"
    coverage_factor: float | None = None  # explicit k; None: Student's t at coverage_probability
    coverage_probability: float = 0.95
    keep_waveforms: bool = False
    mode: Mode = "waveform"
    thd_flag_db: float = -40.0  # THD above this (dB), significant above the noise, flags HIGH_DISTORTION
    snr_flag_db: float = 20.0  # SNR below this (dB) flags LOW_SIGNAL

    def __post_init__(self) -> None:
        for name, kind in (("fit", FitKind), ("decision_rule", DecisionRule), ("mode", Mode)):
            value = getattr(self, name)
            if value not in get_args(kind):
                raise ValueError(f"EngineSettings.{name}: {value!r} is not one of {', '.join(get_args(kind))}")
        if self.averages < 1 or self.max_averages < self.averages:
            raise ValueError(f"EngineSettings: averages {self.averages} and max_averages {self.max_averages} "
                             "must satisfy 1 <= averages <= max_averages")
        if not (self.amplitude_vpp > 0 and math.isfinite(self.amplitude_vpp)):
            raise ValueError(f"EngineSettings.amplitude_vpp: {self.amplitude_vpp!r} is not a positive amplitude")


@dataclass
class Instruments:
    """The roles a sweep uses; scope for waveform and scope-measure mode, meter for meter mode."""

    source: Source
    clock: Clock
    scope: Scope | None = None
    meter: Meter | None = None


@dataclass
class EngineState:
    """What carries from one point to the next (ranges, capture window, last amplitudes)."""

    spans_v: list[float] = field(default_factory=lambda: [math.nan, math.nan])
    window: Window | None = None
    last_frequency_hz: float = math.nan
    last_amplitudes_v: tuple[float, float] = (math.nan, math.nan)
