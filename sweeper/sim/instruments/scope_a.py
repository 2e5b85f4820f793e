"""Scope dialect A, CAP-2A (DIALECTS.md): binary blocks, sample-rate based, one legend query, 8 divisions."""

from __future__ import annotations

import numpy as np

from sweeper.sim.bench import SimBench
from sweeper.sim.instruments._capture import ADC_CODES, Capture, TwoChannelScope, digitise
from sweeper.sim.instruments.scope_measurements import crossing_phase_deg, peak_to_peak
from sweeper.sim.scpi import (
    DATA_STALE,
    MISSING_PARAMETER,
    PARAMETER_NOT_ALLOWED,
    R10,
    ScpiError,
    format_number,
    parse_choice,
    parse_number,
    parse_suffixed,
    step_at_or_above,
    step_at_or_below,
    steps_125,
)

CHANNELS = 2
DIVISIONS = 8
SCALES_V_PER_DIV = steps_125(1e-3, 10.0, R10)  # fine vertical steps (ISO 3 series R10)
SAMPLE_RATES_HZ = steps_125(1e3, 1e9)
POINTS_MIN, POINTS_MAX = 1000, 1_000_000
CENTRE_MAX_V = 50.0
COUNTS_PER_CODE_16 = 256  # 16-bit width: the 8-bit code sits in the high byte
LANE = "LANE<n>"  # how a channel is named as a parameter (LANE1, LANE2)

#: This scope's random stream (SimBench.acquisition_rng); fixed, so seeded draws stay as they were.
RNG_STREAM = 0x88EFEEDE


class ScopeA(TwoChannelScope):
    """CAP-2A: CAPTure:TAKE acquires both lanes on one trigger; LANE<n>:BLOCk? returns a block."""

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add("LANE<n>:DIVision", setter=self._set_scale, getter=lambda s, p: format_number(self.scale_v[self._ch(s)]))
        self.add("LANE<n>:CENTre", setter=self._set_centre, getter=lambda s, p: format_number(self.centre_v[self._ch(s)]))
        self.add("LANE<n>:COUPling", setter=self._set_coupling, getter=lambda s, p: self.coupling[self._ch(s)])
        self.add("LANE<n>:LEGend", getter=self._legend)
        self.add("LANE<n>:BLOCk", getter=self._block)
        self.add("CAPTure:RATE", setter=self._set_rate, getter=lambda s, p: format_number(self.sample_rate_hz))
        self.add("CAPTure:LENGth", setter=self._set_length, getter=lambda s, p: str(self.points))
        self.add("CAPTure:ANCHor", setter=self._set_anchor, getter=lambda s, p: f"LANE{self.anchor_channel}")
        self.add("CAPTure:WIDTh", setter=self._set_width, getter=lambda s, p: str(self.width_bits))
        self.add("CAPTure:TAKE", setter=self._take)
        self.add("GAUGe:SWINg", getter=self._gauge_swing)
        self.add("GAUGe:PHASe", getter=self._gauge_phase)
        self.reset()

    def reset(self) -> None:
        """*RST: 1 V/div, centre 0 V, DC coupling, 1 MSa/s, 10000 points, anchor LANE1, width 16; memory cleared."""
        self.scale_v = [1.0] * CHANNELS
        self.centre_v = [0.0] * CHANNELS
        self.coupling = ["DC"] * CHANNELS
        self.sample_rate_hz = 1e6
        self.points = 10_000
        self.anchor_channel = 1
        self.width_bits = 16
        self.capture: Capture | None = None
        self._capture_state: tuple = ()

    def _acquisition_state(self) -> tuple:
        """The settings an acquisition's scaling and timing depend on."""
        return (tuple(self.scale_v), tuple(self.centre_v), tuple(self.coupling), self.sample_rate_hz, self.points)

    def _set_scale(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        value = self.clamp(parse_number(self.one_param(params)), SCALES_V_PER_DIV[0], SCALES_V_PER_DIV[-1])
        self.scale_v[ch] = step_at_or_above(value, SCALES_V_PER_DIV)

    def _set_centre(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        self.centre_v[ch] = self.clamp(parse_number(self.one_param(params)), -CENTRE_MAX_V, CENTRE_MAX_V)

    def _set_rate(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = self.clamp(parse_number(self.one_param(params)), SAMPLE_RATES_HZ[0], SAMPLE_RATES_HZ[-1])
        self.sample_rate_hz = step_at_or_below(value, SAMPLE_RATES_HZ)

    def _set_length(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = self.clamp(parse_number(self.one_param(params)), POINTS_MIN, POINTS_MAX)
        self.points = int(round(value))

    def _set_anchor(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.anchor_channel = parse_suffixed(self.one_param(params), LANE, 1, CHANNELS)

    def _set_width(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.width_bits = int(parse_choice(self.one_param(params), {"16": "16", "8": "8"}))

    def _take(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        full_scale = (DIVISIONS * self.scale_v[0], DIVISIONS * self.scale_v[1])
        record = self.bench.acquire(
            self.points,
            1.0 / self.sample_rate_hz,
            self.bench.acquisition_rng(RNG_STREAM),
            ac_coupled=(self.coupling[0] == "AC", self.coupling[1] == "AC"),
            full_scale_v=full_scale,
        )
        self.capture = digitise(record, full_scale, (self.centre_v[0], self.centre_v[1]))
        self._capture_state = self._acquisition_state()

    def _legend(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """Scaling of one lane for the current settings (those of the stored acquisition while it is valid)."""
        self._no_params(params)
        ch = self._ch(suffixes)
        lsb = DIVISIONS * self.scale_v[ch] / ADC_CODES
        volts_per_count = lsb / COUNTS_PER_CODE_16 if self.width_bits == 16 else lsb
        fields = [
            str(self.points),
            format_number(1.0 / self.sample_rate_hz),
            format_number(volts_per_count),
            "0",
            format_number(self.centre_v[ch]),
            str(self.width_bits),
        ]
        return ",".join(fields)

    def _block(self, suffixes: tuple[int, ...], params: list[str]) -> bytes:
        self._no_params(params)
        ch = self._ch(suffixes)
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return b"#10"
        codes = capture.codes[ch]
        if self.width_bits == 16:
            payload = (codes.astype("<i2") * COUNTS_PER_CODE_16).astype("<i2").tobytes()
        else:
            payload = codes.astype(np.int8).tobytes()
        length = str(len(payload)).encode("ascii")
        return b"#" + str(len(length)).encode("ascii") + length + payload

    def _gauged_lanes(self, params: list[str], count: int) -> list[int]:
        if len(params) < count or any(not p for p in params):
            raise ScpiError(MISSING_PARAMETER)
        if len(params) > count:
            raise ScpiError(PARAMETER_NOT_ALLOWED)
        return [parse_suffixed(p, LANE, 1, CHANNELS) for p in params]

    def _gauge_swing(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """Peak-to-peak volts (max - min) of the stored acquisition on one lane."""
        (channel,) = self._gauged_lanes(params, 1)
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return format_number(float("nan"))
        return format_number(peak_to_peak(capture.codes[channel - 1]) * capture.lsb_v[channel - 1])

    def _gauge_phase(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """Phase (degrees) of the second lane relative to the first, from rising crossings."""
        first, second = self._gauged_lanes(params, 2)
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return format_number(float("nan"))
        return format_number(crossing_phase_deg(capture.codes[first - 1], capture.codes[second - 1]))
