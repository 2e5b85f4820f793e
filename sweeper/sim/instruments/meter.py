"""Gain-phase meter GPM-1 (DIALECTS.md): a narrow-band detector locked to the generator."""

from __future__ import annotations

import math
from dataclasses import dataclass

from sweeper.sim import physics
from sweeper.sim.bench import SimBench
from sweeper.sim.scpi import DATA_STALE, SCPI_NAN, ScpiInstrument, format_number, parse_number, parse_suffixed

BANDWIDTH_MIN_HZ, BANDWIDTH_MAX_HZ = 0.01, 10e3
CHANNELS = 2


@dataclass(frozen=True)
class _Reading:
    gain_db: float
    phase_deg: float
    amplitude_v: tuple[float, float]  # peak, channel 1 and 2


class Meter(ScpiInstrument):
    """GPM-1: INITiate measures channel 2 relative to channel 1 at the generator's frequency.

    One measurement integrates for T = max(1 / (2 B), one period of the generator) and
    advances the clock by T; its noise is that of a detector of equivalent noise bandwidth
    1 / (2 T) fed with the bench's noise_v spread over config.meter_front_end_bandwidth_hz.
    Harmonics and the DUT transient are outside its view (it reports steady state).
    """

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add("SENSe:BANDwidth", setter=self._set_bandwidth, getter=lambda s, p: format_number(self.bandwidth_hz))
        self.add("INITiate", setter=self._initiate)
        self.add("FETCh:GAIN", getter=lambda s, p: format_number(self._fetch().gain_db))
        self.add("FETCh:PHASe", getter=lambda s, p: format_number(self._fetch().phase_deg))
        self.add("FETCh:AMPLitude", getter=self._fetch_amplitude)
        self.reset()

    def reset(self) -> None:
        """*RST: 10 Hz detector bandwidth; no reading."""
        self.bandwidth_hz = 10.0
        self.reading: _Reading | None = None

    def _set_bandwidth(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.bandwidth_hz = self.clamp(parse_number(self.one_param(params)), BANDWIDTH_MIN_HZ, BANDWIDTH_MAX_HZ)

    def _initiate(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        frequency_hz = self.bench.generator.frequency_hz
        duration_s = max(1.0 / (2.0 * self.bandwidth_hz), 1.0 / frequency_hz)
        sigma = physics.detector_noise_v(
            self.bench.config.noise_v, 1.0 / (2.0 * duration_s), self.bench.config.meter_front_end_bandwidth_hz
        )
        v_in, v_out = self.bench.fundamental_phasors()
        rng = self.bench.acquisition_rng("GPM-1")  # depends on the seed and frequency only
        noise = rng.normal(0.0, sigma, 4) if sigma > 0 else [0.0] * 4
        v_in += complex(noise[0], noise[1])
        v_out += complex(noise[2], noise[3])
        self.bench.clock.sleep(duration_s)
        if v_in == 0 or v_out == 0:
            self.reading = _Reading(math.nan, math.nan, (abs(v_in), abs(v_out)))
            return
        gain_db, phase_deg = physics.gain_phase(v_in, v_out)
        self.reading = _Reading(gain_db, phase_deg, (abs(v_in), abs(v_out)))

    def _fetch(self) -> _Reading:
        if self.reading is None:
            self.queue_error(DATA_STALE)
            return _Reading(SCPI_NAN, SCPI_NAN, (SCPI_NAN, SCPI_NAN))
        return self.reading

    def _fetch_amplitude(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        channel = parse_suffixed(self.one_param(params), "CH<n>", 1, CHANNELS)
        return format_number(self._fetch().amplitude_v[channel - 1])
