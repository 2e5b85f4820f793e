"""Gain-phase meter RATIO-1 (DIALECTS.md): a narrow-band detector locked to the generator."""

from __future__ import annotations

import math
from dataclasses import dataclass

from sweeper.sim import physics
from sweeper.sim.bench import SimBench
from sweeper.sim.scpi import DATA_STALE, SCPI_NAN, ScpiInstrument, format_number, parse_number

BANDWIDTH_MIN_HZ, BANDWIDTH_MAX_HZ = 0.01, 10e3
CHANNELS = 2


@dataclass(frozen=True)
class _Reading:
    gain_db: float
    phase_deg: float
    amplitude_v: tuple[float, float]  # peak, channel 1 and 2


#: This meter's random stream (SimBench.acquisition_rng); fixed, so seeded draws stay as they were.
RNG_STREAM = 0xEE4A38A0


class Meter(ScpiInstrument):
    """RATIO-1: DETector:RUN measures channel 2 relative to channel 1 at the generator's frequency.

    One measurement integrates for T = max(1 / (2 B), one period of the generator) and
    advances the clock by T; its noise is that of a detector of equivalent noise bandwidth
    1 / (2 T) fed with the bench's noise_v spread over config.meter_front_end_bandwidth_hz.
    Harmonics and the DUT transient are outside its view (it reports steady state).
    """

    def __init__(self, bench: SimBench) -> None:
        super().__init__()
        self.bench = bench
        self.add("DETector:WIDTh", setter=self._set_bandwidth, getter=lambda s, p: format_number(self.bandwidth_hz))
        self.add("DETector:RUN", setter=self._run)
        self.add("RESult:GAIN", getter=lambda s, p: format_number(self._result(p).gain_db))
        self.add("RESult:PHASe", getter=lambda s, p: format_number(self._result(p).phase_deg))
        self.add("RESult:PEAK<n>", getter=self._result_peak)
        self.add("RESult:ALL", getter=self._result_all)
        self.reset()

    def reset(self) -> None:
        """*RST: 10 Hz detector bandwidth; no reading."""
        self.bandwidth_hz = 10.0
        self.reading: _Reading | None = None

    def _set_bandwidth(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self.bandwidth_hz = self.clamp(parse_number(self.one_param(params)), BANDWIDTH_MIN_HZ, BANDWIDTH_MAX_HZ)

    def _run(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        self._no_params(params)
        frequency_hz = self.bench.generator.frequency_hz
        duration_s = max(1.0 / (2.0 * self.bandwidth_hz), 1.0 / frequency_hz)
        sigma = physics.detector_noise_v(
            self.bench.config.noise_v, 1.0 / (2.0 * duration_s), self.bench.config.meter_front_end_bandwidth_hz
        )
        v_in, v_out = self.bench.fundamental_phasors()
        rng = self.bench.acquisition_rng(RNG_STREAM)  # depends on the seed and frequency only
        noise = rng.normal(0.0, sigma, 4) if sigma > 0 else [0.0] * 4
        v_in += complex(noise[0], noise[1])
        v_out += complex(noise[2], noise[3])
        self.bench.clock.sleep(duration_s)
        if v_in == 0 or v_out == 0:
            self.reading = _Reading(math.nan, math.nan, (abs(v_in), abs(v_out)))
            return
        gain_db, phase_deg = physics.gain_phase(v_in, v_out)
        self.reading = _Reading(gain_db, phase_deg, (abs(v_in), abs(v_out)))

    def _result(self, params: list[str]) -> _Reading:
        self._no_params(params)
        if self.reading is None:
            self.queue_error(DATA_STALE)
            return _Reading(SCPI_NAN, SCPI_NAN, (SCPI_NAN, SCPI_NAN))
        return self.reading

    def _result_peak(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        channel = self.check_suffix(suffixes[0], 1, CHANNELS)
        return format_number(self._result(params).amplitude_v[channel - 1])

    def _result_all(self, suffixes: tuple[int, ...], params: list[str]) -> str:
        """<gain dB>,<phase degrees>,<peak V channel 1>,<peak V channel 2> of the last reading."""
        reading = self._result(params)
        return ",".join(format_number(v) for v in (reading.gain_db, reading.phase_deg, *reading.amplitude_v))
