"""Sine source STIM-1 (DIALECTS.md): its SCPI front end over the bench's generator state."""

from __future__ import annotations

import math

from sweeper.sim import physics
from sweeper.sim.bench import GeneratorSettings, SimBench
from sweeper.sim.scpi import SETTINGS_CONFLICT, ScpiError, ScpiInstrument, format_number, parse_bool, parse_choice, parse_number

FREQUENCY_MIN_HZ = 1e-3
FREQUENCY_MAX_HZ = 20e6
EMF_MIN_VPP = 1e-3  # amplitude limits into high-Z, i.e. of the open-circuit EMF
EMF_MAX_VPP = 10.0
EMF_OFFSET_MAX_V = 5.0  # offset limit into high-Z
LOAD_MIN_OHM = 1.0
LOAD_MAX_OHM = 10e3


class Generator(ScpiInstrument):
    """STIM-1: one sine channel; settings live in bench.generator so the scopes can see them."""

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add("STIMulus:FORM", setter=self._set_form, getter=lambda s, p: self.bench.generator.function)
        self.add("STIMulus:TONE", setter=self._set_frequency, getter=lambda s, p: format_number(self.bench.generator.frequency_hz))
        self.add("STIMulus:SWINg", setter=self._set_amplitude, getter=lambda s, p: format_number(self.bench.generator.amplitude_vpp))
        self.add("STIMulus:BIAS", setter=self._set_offset, getter=lambda s, p: format_number(self.bench.generator.offset_v))
        self.add("DRIVe:INTO", setter=self._set_load, getter=self._load_query)
        self.add("DRIVe:ENABle", setter=self._set_output, getter=lambda s, p: "1" if self.bench.generator.output_on else "0")

    def reset(self) -> None:
        """*RST: 1 kHz sine, 100 mVpp, no bias, drive setting HIZ (high impedance), output disabled."""
        self.bench.set_generator(**vars(GeneratorSettings()))

    def _scale(self) -> float:
        return physics.emf_per_displayed_volt(self.bench.generator.load_ohm)

    def _set_form(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.bench.set_generator(function=parse_choice(self.one_param(params), {"SINE": "SINE"}))

    def _set_frequency(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = parse_number(self.one_param(params))
        self.bench.set_generator(frequency_hz=self.clamp(value, FREQUENCY_MIN_HZ, FREQUENCY_MAX_HZ))

    def _set_amplitude(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = parse_number(self.one_param(params))
        scale = self._scale()
        self.bench.set_generator(amplitude_vpp=self.clamp(value, EMF_MIN_VPP / scale, EMF_MAX_VPP / scale))

    def _set_offset(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        value = parse_number(self.one_param(params))
        limit = EMF_OFFSET_MAX_V / self._scale()
        self.bench.set_generator(offset_v=self.clamp(value, -limit, limit))

    def _set_load(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        text = self.one_param(params)
        try:
            load = math.inf if parse_choice(text, {"HIZ": "HIZ"}) == "HIZ" else 0.0
        except ScpiError:
            load = self.clamp(parse_number(text), LOAD_MIN_OHM, LOAD_MAX_OHM)
        g = self.bench.generator
        scale = physics.emf_per_displayed_volt(load)
        amplitude = min(max(g.amplitude_vpp, EMF_MIN_VPP / scale), EMF_MAX_VPP / scale)
        offset = min(max(g.offset_v, -EMF_OFFSET_MAX_V / scale), EMF_OFFSET_MAX_V / scale)
        if (amplitude, offset) != (g.amplitude_vpp, g.offset_v):
            self.queue_error(SETTINGS_CONFLICT)
        self.bench.set_generator(load_ohm=load, amplitude_vpp=amplitude, offset_v=offset)

    def _load_query(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        load = self.bench.generator.load_ohm
        return "HIZ" if math.isinf(load) else format_number(load)

    def _set_output(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.bench.set_generator(output_on=parse_bool(self.one_param(params)))
