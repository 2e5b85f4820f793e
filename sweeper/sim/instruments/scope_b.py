"""Scope dialect B, SNAP-2B (DIALECTS.md): decimal-text code lists, timebase based, separate key queries, 10 divisions."""

from __future__ import annotations

from sweeper.sim.bench import SimBench
from sweeper.sim.instruments._capture import ADC_CODES, Capture, TwoChannelScope, digitise
from sweeper.sim.scpi import (
    DATA_STALE,
    format_number,
    parse_bool,
    parse_choice,
    parse_number,
    parse_suffixed,
    step_at_or_above,
    steps_125,
)

CHANNELS = 2
DIVISIONS = 10
SCALES_V_PER_DIV = steps_125(1e-3, 10.0)
PITCH_MIN_S, PITCH_MAX_S = 10e-9, 100.0
DOTS_MIN, DOTS_MAX = 1000, 250_000
LIFT_MAX_DIV = 5.0
CODES_PER_DIV = ADC_CODES / DIVISIONS

#: This scope's random stream (SimBench.acquisition_rng); fixed, so seeded draws stay as they were.
RNG_STREAM = 0xA3C2BD1D


class ScopeB(TwoChannelScope):
    """SNAP-2B: SNAP:GO acquires both views on one trigger; LIST:CODes? returns decimal codes."""

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add("VIEW<n>:SENSitivity", setter=self._set_sensitivity,
                 getter=lambda s, p: format_number(self.volts_per_div[self._ch(s)]))
        self.add("VIEW<n>:LIFT", setter=self._set_lift, getter=lambda s, p: format_number(self.lift_div[self._ch(s)]))
        self.add("VIEW<n>:BLOCking", setter=self._set_blocking,
                 getter=lambda s, p: "ON" if self.coupling[self._ch(s)] == "AC" else "OFF")
        self.add("FRAMe:PITCh", setter=self._set_pitch, getter=lambda s, p: format_number(self.seconds_per_div))
        self.add("FRAMe:DOTS", setter=self._set_dots, getter=lambda s, p: str(self.dots))
        self.add("SNAP:MODE", setter=self._set_mode, getter=lambda s, p: self.mode)
        self.add("SNAP:GO", setter=self._go)
        self.add("LIST:FROM", setter=self._set_from, getter=lambda s, p: f"VIEW{self.source_channel}")
        self.add("LIST:RADix", setter=self._set_radix, getter=lambda s, p: "DEC")
        self.add("LIST:CODes", getter=self._codes)
        self.add("KEY:STEP", getter=lambda s, p: format_number(self._key()[0]))
        self.add("KEY:ORIGin", getter=lambda s, p: format_number(self._key()[1]))
        self.add("KEY:BASE", getter=lambda s, p: format_number(0.0))
        self.add("KEY:TICK", getter=lambda s, p: format_number(self._tick_s()))
        self.reset()

    def reset(self) -> None:
        """*RST: 1 V/div, lift 0, DC blocking off, 1 ms/div, 10000 dots, mode REPEAT, VIEW1; memory cleared."""
        self.volts_per_div = [1.0] * CHANNELS
        self.lift_div = [0.0] * CHANNELS
        self.coupling = ["DC"] * CHANNELS
        self.seconds_per_div = 1e-3
        self.dots = 10_000
        self.mode = "REPEAT"
        self.source_channel = 1
        self.capture: Capture | None = None
        self._capture_state: tuple = ()

    def _acquisition_state(self) -> tuple:
        """The settings an acquisition's scaling and timing depend on."""
        return (tuple(self.volts_per_div), tuple(self.lift_div), tuple(self.coupling), self.seconds_per_div, self.dots)

    def _set_sensitivity(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        value = self.clamp(parse_number(self.one_param(params)), SCALES_V_PER_DIV[0], SCALES_V_PER_DIV[-1])
        self.volts_per_div[ch] = step_at_or_above(value, SCALES_V_PER_DIV)

    def _set_lift(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        self.lift_div[ch] = self.clamp(parse_number(self.one_param(params)), -LIFT_MAX_DIV, LIFT_MAX_DIV)

    def _set_blocking(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        self.coupling[ch] = "AC" if parse_bool(self.one_param(params)) else "DC"

    def _set_pitch(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.seconds_per_div = self.clamp(parse_number(self.one_param(params)), PITCH_MIN_S, PITCH_MAX_S)

    def _set_dots(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.dots = int(round(self.clamp(parse_number(self.one_param(params)), DOTS_MIN, DOTS_MAX)))

    def _set_mode(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.mode = parse_choice(self.one_param(params), {"ONCE": "ONCE", "REPeat": "REPEAT"})

    def _set_from(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.source_channel = parse_suffixed(self.one_param(params), "VIEW<n>", 1, CHANNELS)

    def _set_radix(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        parse_choice(self.one_param(params), {"DECimal": "DEC"})

    def _tick_s(self) -> float:
        return DIVISIONS * self.seconds_per_div / self.dots

    def _key(self) -> tuple[float, float]:
        """(STEP V per code, ORIGin code) of the LIST:FROM view: volts = (code - ORIGin) * STEP + BASE."""
        ch = self.source_channel - 1
        return DIVISIONS * self.volts_per_div[ch] / ADC_CODES, self.lift_div[ch] * CODES_PER_DIV

    def _go(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        full_scale = (DIVISIONS * self.volts_per_div[0], DIVISIONS * self.volts_per_div[1])
        record = self.bench.acquire(
            self.dots,
            self._tick_s(),
            self.bench.acquisition_rng(RNG_STREAM),
            ac_coupled=(self.coupling[0] == "AC", self.coupling[1] == "AC"),
            full_scale_v=full_scale,
        )
        centre = (-self.lift_div[0] * self.volts_per_div[0], -self.lift_div[1] * self.volts_per_div[1])
        self.capture = digitise(record, full_scale, centre)
        self._capture_state = self._acquisition_state()

    def _codes(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        self._no_params(params)
        capture = self._valid_capture()
        if capture is None:
            self.queue_error(DATA_STALE)
            return ""
        return ",".join(map(str, capture.codes[self.source_channel - 1].tolist()))
