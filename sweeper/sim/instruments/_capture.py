"""What a simulated scope keeps after an acquisition: ADC codes and how to scale them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweeper.sim import physics
from sweeper.sim.bench import Record
from sweeper.sim.scpi import ScpiInstrument, parse_choice

ADC_CODES = 256  # 8-bit ADC: codes -128 .. +127 span the screen


@dataclass(frozen=True)
class Capture:
    """Both channels of one acquisition: codes (2, N) int16 in [-128, 127], with per-channel scaling."""

    codes: np.ndarray
    sample_interval_s: float
    lsb_v: tuple[float, float]  # volts per ADC code
    centre_v: tuple[float, float]  # volts at code 0


def digitise(record: Record, full_scale_v: tuple[float, float], centre_v: tuple[float, float]) -> Capture:
    """Quantise both channels of a record with an 8-bit ADC spanning full_scale_v around centre_v (V)."""
    lsb = (full_scale_v[0] / ADC_CODES, full_scale_v[1] / ADC_CODES)
    codes = np.stack([physics.quantise(record.volts[c], lsb[c], centre_v[c]) for c in (0, 1)])
    return Capture(codes=codes, sample_interval_s=record.sample_interval_s, lsb_v=lsb, centre_v=tuple(centre_v))


class TwoChannelScope(ScpiInstrument):
    """What both simulated scope dialects share: channel suffixes, coupling, stale-capture rule.

    A subclass keeps `capture`, `_capture_state` and `coupling`, and says in
    `_acquisition_state` which settings an acquisition depends on.
    """

    CHANNELS = 2
    capture: Capture | None
    _capture_state: tuple
    coupling: list[str]

    def _acquisition_state(self) -> tuple:
        raise NotImplementedError

    def _valid_capture(self) -> Capture | None:
        """The stored acquisition, unless a setting it depends on changed since (then it is stale)."""
        if self.capture is not None and self._acquisition_state() == self._capture_state:
            return self.capture
        return None

    def _ch(self, suffixes: tuple[int, ...]) -> int:
        return self.check_suffix(suffixes[0], 1, self.CHANNELS) - 1

    def _set_coupling(self, suffixes: tuple[int, ...], params: list[str]) -> None:
        ch = self._ch(suffixes)
        self.coupling[ch] = parse_choice(self.one_param(params), {"DC": "DC", "AC": "AC"})
