"""Scope dialect A, DSO-A2 (DIALECTS.md): binary int16/int8 blocks, sample-rate based, 8 divisions."""

from __future__ import annotations

import numpy as np

from sweeper.sim.bench import SimBench
from sweeper.sim.instruments._capture import ADC_CODES, Capture, TwoChannelScope, digitise
from sweeper.sim.instruments.scope_measurements import crossing_phase_deg, peak_to_peak
from sweeper.sim.scpi import (
    DATA_STALE,
    MISSING_PARAMETER,
    PARAMETER_NOT_ALLOWED,
    ScpiError,
    format_number,
    parse_choice,
    parse_number,
    parse_suffixed,
    step_at_or_above,
    step_at_or_below,
    R10,
    steps_125,
)

CHANNELS = 2
DIVISIONS = 8
SCALES_V_PER_DIV = steps_125(1e-3, 10.0, R10)  # fine vertical steps (ISO 3 series R10)
SAMPLE_RATES_HZ = steps_125(1e3, 1e9)
POINTS_MIN, POINTS_MAX = 1000, 1_000_000
OFFSET_MAX_V = 50.0
WORD_COUNTS_PER_CODE = 256  # WORD format: the 8-bit code sits in the high byte


class ScopeA(TwoChannelScope):
    """DSO-A2: :SINGle acquires both channels on one trigger; :WAVeform:DATA? returns a block."""

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add(":CHANnel<n>:SCALe", setter=self._set_scale, getter=lambda s, p: format_number(self.scale_v[self._ch(s)]))
        self.add(":CHANnel<n>:OFFSet", setter=self._set_offset, getter=lambda s, p: format_number(self.offset_v[self._ch(s)]))
        self.add(":CHANnel<n>:COUPling", setter=self._set_coupling, getter=lambda s, p: self.coupling[self._ch(s)])
        self.add(":ACQuire:SRATe", setter=self._set_rate, getter=lambda s, p: format_number(self.sample_rate_hz))
        self.add(":ACQuire:POINts", setter=self._set_points, getter=lambda s, p: str(self.points))
        self.add(":TRIGger:SOURce", setter=self._set_trigger, getter=lambda s, p: f"CHAN{self.trigger_channel}")
        self.add(":SINGle", setter=self._single)
        self.add(":WAVeform:SOURce", setter=self._set_source, getter=lambda s, p: f"CHAN{self.source_channel}")
        self.add(":WAVeform:FORMat", setter=self._set_format, getter=lambda s, p: self.format)
        self.add(":WAVeform:PREamble", getter=self._preamble)
        self.add(":WAVeform:DATA", getter=self._data)
        self.add(":MEASure:VAMPlitude", getter=self._measure_amplitude)
        self.add(":MEASure:PHASe", getter=self._measure_phase)
        self.reset()

    def reset(self) -> None:
        """*RST: 1 V/div, no offset, DC coupling, 1 MSa/s, 10000 points, WORD, channel 1; memory cleared."""
        self.scale_v = [1.0] * CHANNELS
        self.offset_v = [0.0] * CHANNELS
        self.coupling = ["DC"] * CHANNELS
        self.sample_rate_hz = 1e6
        self.points = 10_000
        self.trigger_channel = 1
        self.source_channel = 1
        self.format = "WORD"
        self.capture: Capture | None = None
        self._capture_state: tuple = ()

    def _acquisition_state(self) -> tuple:
        """The settings an acquisition's scaling and timing depend on."""
        return (tuple(self.scale_v), tuple(self.offset_v), tuple(self.coupling), self.sample_rate_hz, self.points)

    def _set_scale(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        value = self.clamp(parse_number(self.one_param(params)), SCALES_V_PER_DIV[0], SCALES_V_PER_DIV[-1])
        self.scale_v[ch] = step_at_or_above(value, SCALES_V_PER_DIV)

    def _set_offset(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        self.offset_v[ch] = self.clamp(parse_number(self.one_param(params)), -OFFSET_MAX_V, OFFSET_MAX_V)

    def _set_rate(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = self.clamp(parse_number(self.one_param(params)), SAMPLE_RATES_HZ[0], SAMPLE_RATES_HZ[-1])
        self.sample_rate_hz = step_at_or_below(value, SAMPLE_RATES_HZ)

    def _set_points(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = self.clamp(parse_number(self.one_param(params)), POINTS_MIN, POINTS_MAX)
        self.points = int(round(value))

    def _set_trigger(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.trigger_channel = parse_suffixed(self.one_param(params), "CHANnel<n>", 1, CHANNELS)

    def _set_source(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.source_channel = parse_suffixed(self.one_param(params), "CHANnel<n>", 1, CHANNELS)

    def _set_format(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.format = parse_choice(self.one_param(params), {"WORD": "WORD", "BYTE": "BYTE"})

    def _single(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        record = self.bench.acquire(
            self.points,
            1.0 / self.sample_rate_hz,
            self.bench.acquisition_rng("DSO-A2"),
            ac_coupled=(self.coupling[0] == "AC", self.coupling[1] == "AC"),
            full_scale_v=(DIVISIONS * self.scale_v[0], DIVISIONS * self.scale_v[1]),
        )
        full_scale = (DIVISIONS * self.scale_v[0], DIVISIONS * self.scale_v[1])
        self.capture = digitise(record, full_scale, (self.offset_v[0], self.offset_v[1]))
        self._capture_state = self._acquisition_state()

    def _preamble(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """Scaling of the current settings (those of the stored acquisition while it is valid)."""
        ch = self.source_channel - 1
        lsb = DIVISIONS * self.scale_v[ch] / ADC_CODES
        y_increment = lsb / WORD_COUNTS_PER_CODE if self.format == "WORD" else lsb
        fields = [
            self.format,
            str(self.points),
            format_number(1.0 / self.sample_rate_hz),
            format_number(y_increment),
            format_number(self.offset_v[ch]),
            "0",
        ]
        return ",".join(fields)

    def _data(self, suffixes: tuple[int, ...], params: list[str]) -> bytes:
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return b"#10"
        codes = capture.codes[self.source_channel - 1]
        if self.format == "WORD":
            payload = (codes.astype("<i2") * WORD_COUNTS_PER_CODE).astype("<i2").tobytes()
        else:
            payload = codes.astype(np.int8).tobytes()
        length = str(len(payload)).encode("ascii")
        return b"#" + str(len(length)).encode("ascii") + length + payload

    def _measured_channels(self, params: list[str], count: int) -> list[int]:
        if len(params) < count or any(not p for p in params):
            raise ScpiError(MISSING_PARAMETER)
        if len(params) > count:
            raise ScpiError(PARAMETER_NOT_ALLOWED)
        return [parse_suffixed(p, "CHANnel<n>", 1, CHANNELS) for p in params]

    def _measure_amplitude(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """Peak-to-peak volts (max - min) of the stored acquisition on one channel."""
        (channel,) = self._measured_channels(params, 1)
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return format_number(float("nan"))
        return format_number(peak_to_peak(capture.codes[channel - 1]) * capture.lsb_v[channel - 1])

    def _measure_phase(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """Phase (degrees) of the second channel relative to the first, from rising crossings."""
        first, second = self._measured_channels(params, 2)
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return format_number(float("nan"))
        return format_number(crossing_phase_deg(capture.codes[first - 1], capture.codes[second - 1]))
