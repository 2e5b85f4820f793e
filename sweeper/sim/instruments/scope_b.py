"""Scope dialect B, DSO-B2 (DIALECTS.md): ASCII curves, timebase based, 10 divisions."""

from __future__ import annotations

from sweeper.sim.bench import SimBench
from sweeper.sim.instruments._capture import ADC_CODES, Capture, TwoChannelScope, digitise
from sweeper.sim.scpi import (
    DATA_STALE,
    format_number,
    parse_choice,
    parse_number,
    parse_suffixed,
    step_at_or_above,
    steps_125,
)

CHANNELS = 2
DIVISIONS = 10
SCALES_V_PER_DIV = steps_125(1e-3, 10.0)
HORIZONTAL_MIN_S, HORIZONTAL_MAX_S = 10e-9, 100.0
RECORD_MIN, RECORD_MAX = 1000, 250_000
POSITION_MAX_DIV = 5.0
CODES_PER_DIV = ADC_CODES / DIVISIONS


class ScopeB(TwoChannelScope):
    """DSO-B2: ACQuire:STATE RUN acquires both channels on one trigger; CURVe? returns ASCII codes."""

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add("CH<n>:VOLts", setter=self._set_volts, getter=lambda s, p: format_number(self.volts_per_div[self._ch(s)]))
        self.add("CH<n>:POSition", setter=self._set_position, getter=lambda s, p: format_number(self.position_div[self._ch(s)]))
        self.add("CH<n>:COUPling", setter=self._set_coupling, getter=lambda s, p: self.coupling[self._ch(s)])
        self.add("HORizontal:SCAle", setter=self._set_horizontal, getter=lambda s, p: format_number(self.seconds_per_div))
        self.add("HORizontal:RECOrdlength", setter=self._set_record, getter=lambda s, p: str(self.record_length))
        self.add("ACQuire:STOPAfter", setter=self._set_stop_after, getter=lambda s, p: self.stop_after)
        self.add("ACQuire:STATE", setter=self._set_state, getter=lambda s, p: "0")
        self.add("DATa:SOUrce", setter=self._set_source, getter=lambda s, p: f"CH{self.source_channel}")
        self.add("DATa:ENCdg", setter=self._set_encoding, getter=lambda s, p: "ASCII")
        self.add("WFMOutpre:YMUlt", getter=lambda s, p: format_number(self._scaling()[0]))
        self.add("WFMOutpre:YOFf", getter=lambda s, p: format_number(self._scaling()[1]))
        self.add("WFMOutpre:YZEro", getter=lambda s, p: format_number(0.0))
        self.add("WFMOutpre:XINcr", getter=lambda s, p: format_number(self._x_increment_s()))
        self.add("CURVe", getter=self._curve)
        self.reset()

    def reset(self) -> None:
        """*RST: 1 V/div, position 0, DC coupling, 1 ms/div, 10000 points, RUNSTop, CH1; memory cleared."""
        self.volts_per_div = [1.0] * CHANNELS
        self.position_div = [0.0] * CHANNELS
        self.coupling = ["DC"] * CHANNELS
        self.seconds_per_div = 1e-3
        self.record_length = 10_000
        self.stop_after = "RUNSTOP"
        self.source_channel = 1
        self.capture: Capture | None = None
        self._capture_state: tuple = ()

    def _acquisition_state(self) -> tuple:
        """The settings an acquisition's scaling and timing depend on."""
        return (
            tuple(self.volts_per_div),
            tuple(self.position_div),
            tuple(self.coupling),
            self.seconds_per_div,
            self.record_length,
        )

    def _set_volts(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        value = self.clamp(parse_number(self.one_param(params)), SCALES_V_PER_DIV[0], SCALES_V_PER_DIV[-1])
        self.volts_per_div[ch] = step_at_or_above(value, SCALES_V_PER_DIV)

    def _set_position(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        self.position_div[ch] = self.clamp(parse_number(self.one_param(params)), -POSITION_MAX_DIV, POSITION_MAX_DIV)

    def _set_horizontal(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.seconds_per_div = self.clamp(parse_number(self.one_param(params)), HORIZONTAL_MIN_S, HORIZONTAL_MAX_S)

    def _set_record(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.record_length = int(round(self.clamp(parse_number(self.one_param(params)), RECORD_MIN, RECORD_MAX)))

    def _set_stop_after(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.stop_after = parse_choice(self.one_param(params), {"SEQuence": "SEQUENCE", "RUNSTop": "RUNSTOP"})

    def _set_state(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        run = parse_choice(self.one_param(params), {"RUN": "1", "ON": "1", "1": "1", "STOP": "0", "OFF": "0", "0": "0"})
        if run == "1":
            self._acquire()

    def _set_source(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.source_channel = parse_suffixed(self.one_param(params), "CH<n>", 1, CHANNELS)

    def _set_encoding(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        parse_choice(self.one_param(params), {"ASCii": "ASCII"})

    def _x_increment_s(self) -> float:
        return DIVISIONS * self.seconds_per_div / self.record_length

    def _scaling(self) -> tuple[float, float]:
        """(YMULT V per code, YOFF codes) of the data source: volts = (code - YOFF) * YMULT."""
        ch = self.source_channel - 1
        return DIVISIONS * self.volts_per_div[ch] / ADC_CODES, self.position_div[ch] * CODES_PER_DIV

    def _acquire(self) -> None:
        interval_s = DIVISIONS * self.seconds_per_div / self.record_length
        record = self.bench.acquire(
            self.record_length,
            interval_s,
            self.bench.acquisition_rng("DSO-B2"),
            ac_coupled=(self.coupling[0] == "AC", self.coupling[1] == "AC"),
            full_scale_v=(DIVISIONS * self.volts_per_div[0], DIVISIONS * self.volts_per_div[1]),
        )
        full_scale = (DIVISIONS * self.volts_per_div[0], DIVISIONS * self.volts_per_div[1])
        centre = (-self.position_div[0] * self.volts_per_div[0], -self.position_div[1] * self.volts_per_div[1])
        self.capture = digitise(record, full_scale, centre)
        self._capture_state = self._acquisition_state()

    def _curve(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return ""
        return ",".join(map(str, capture.codes[self.source_channel - 1].tolist()))
