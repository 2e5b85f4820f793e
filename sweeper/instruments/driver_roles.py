"""Role adapters built from a driver file: DriverSource, DriverScope, DriverMeter.

They implement the Source, Scope and Meter protocols of sweeper.instruments.roles over a
DriverSession. Settings equal to the current ones are not resent; configuration operations
are followed by an error-queue check; the per-point operations (set frequency, arm, fetch,
measure) are not, to keep transactions per point low.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from sweeper.instruments import scales
from sweeper.instruments.driverfile import LoadedDriver, MeterSection, ScopeSection, SourceSection
from sweeper.instruments.errors import LimitError, MalformedResponse
from sweeper.instruments.interpreter import DriverSession, as_codes
from sweeper.instruments.link import Link
from sweeper.instruments.limits import meter_limits, scope_limits, source_limits, volts_per_div_settings
from sweeper.instruments.roles import Capture, MeterReading, ScopeReading

#: Seconds added to the session timeout while waiting for an acquisition or a measurement.
WAIT_MARGIN_S = 2.0


class _DriverRole:
    """What all three adapters share: the session, its link and driver, reset and error checks."""

    def __init__(self, session: DriverSession) -> None:
        self.session = session

    @property
    def link(self) -> Link:
        """The Link every transaction of this role passes."""
        return self.session.link

    @property
    def driver(self) -> LoadedDriver:
        """The driver file this role was built from."""
        return self.session.loaded

    def drain_errors(self) -> list[tuple[int, str]]:
        """Read the instrument's error queue empty; (code, text) pairs, oldest first."""
        return self.session.drain_errors()

    def _forget(self) -> None:
        """Forget cached settings (after reset); subclasses extend."""
        self.session.forget_state()

    def reset(self) -> None:
        """Return the instrument to its reset state and forget cached settings."""
        self._forget()
        self.session.run("reset", check_errors=True)

    def _check_range(self, what: str, value: float, low: float, high: float, unit: str) -> None:
        if not (math.isfinite(value) and low * (1 - 1e-12) <= value <= high * (1 + 1e-12)):
            raise LimitError(
                f"{self.link.role}: {what} {value:g} {unit} is outside {low:g} .. {high:g} {unit} "
                f"({self.driver.name})"
            )


class DriverSource(_DriverRole):
    """Source role from a driver file."""

    def __init__(self, session: DriverSession) -> None:
        super().__init__(session)
        section = session.driver.section
        assert isinstance(section, SourceSection)
        self.section = section
        self.limits = source_limits(section)
        self._forget()

    def _forget(self) -> None:
        super()._forget()
        self.frequency_hz: float | None = None
        self.amplitude_vpp: float | None = None
        self.offset_v: float | None = None
        self.load: float | str | None = None
        self.shape_set = False
        self.output_on: bool | None = None

    def configure_sine(self, amplitude_vpp: float, offset_v: float, load_ohm: float | None) -> None:
        """Sine of amplitude_vpp (as the source means it for its load setting), offset V, load
        setting (None = high impedance, else Ohm). Only changed settings are sent."""
        lim = self.limits
        self._check_range("amplitude", amplitude_vpp, lim.amplitude_min_vpp, lim.amplitude_max_vpp, "Vpp")
        if not (math.isfinite(offset_v) and abs(offset_v) <= lim.offset_max_v):
            raise LimitError(f"source: offset {offset_v:g} V is outside +-{lim.offset_max_v:g} V ({self.driver.name})")
        if load_ohm is not None and not (math.isfinite(load_ohm) and load_ohm > 0):
            raise LimitError(f"source: load setting {load_ohm!r} Ohm is not a positive resistance")
        load: float | str = self.section.high_impedance_load if load_ohm is None else float(load_ohm)
        if not self.shape_set:
            self.session.run("set_shape", check_errors=True)
            self.shape_set = True
        if load != self.load and self.session.has("set_load"):
            self.session.run("set_load", {"load": load}, check_errors=True)
            self.load = load
            self.amplitude_vpp = None  # a load change may rescale the amplitude: send it again
        if amplitude_vpp != self.amplitude_vpp:
            self.session.run("set_amplitude", {"amplitude_vpp": amplitude_vpp}, check_errors=True)
            self.amplitude_vpp = amplitude_vpp
        if offset_v != self.offset_v:
            self.session.run("set_offset", {"offset_v": offset_v}, check_errors=True)
            self.offset_v = offset_v

    def set_frequency(self, frequency_hz: float) -> None:
        """Set the sine frequency, Hz (not resent when unchanged; no error-queue check)."""
        lim = self.limits
        self._check_range("frequency", frequency_hz, lim.frequency_min_hz, lim.frequency_max_hz, "Hz")
        if frequency_hz == self.frequency_hz:
            return
        self.frequency_hz = None
        self.session.run("set_frequency", {"frequency_hz": frequency_hz})
        self.frequency_hz = frequency_hz

    def set_output(self, on: bool) -> None:
        """Switch the output on or off. 'Off' is always sent, whatever the cached state."""
        if on and self.output_on:
            return
        self.output_on = None
        self.session.run("output_on" if on else "output_off", check_errors=True)
        self.output_on = on


class DriverScope(_DriverRole):
    """Scope role from a driver file."""

    def __init__(self, session: DriverSession) -> None:
        super().__init__(session)
        section = session.driver.section
        assert isinstance(section, ScopeSection)
        self.section = section
        vertical = section.vertical
        self.volts_per_div: tuple[float, ...] = volts_per_div_settings(section)
        self._continuous_scale = vertical.volts_per_div_range is not None and vertical.volts_per_div_range.steps == "any"
        self.limits = scope_limits(section)
        self._forget()

    def _forget(self) -> None:
        super()._forget()
        self.full_scale_v: dict[int, float] = {}
        self.window: tuple[float, int] | None = None  # what the scope uses: (Sa/s, samples)
        self._asked: tuple[float, int] | None = None  # what was asked for that window
        self._sent_samples: int | None = None  # record length last sent
        self._sent_horizontal: tuple[float, float] | None = None  # (rate or s/div sent, what the scope took)
        self._rate_confirmed = False  # the scope read back the horizontal setting it took
        self._scaling: dict[int, dict[str, Any]] = {}
        self._last_fetched: int | None = None

    # -- settings ------------------------------------------------------------------------

    def set_range(self, channel: int, full_scale_v: float) -> float:
        """Select the smallest vertical span >= full_scale_v (V, whole screen); returns the span set."""
        if channel not in (1, 2):
            raise LimitError(f"scope: channel {channel} does not exist (1 or 2)")
        if not (math.isfinite(full_scale_v) and full_scale_v > 0):
            raise LimitError(f"scope: full scale {full_scale_v!r} V is not a positive span")
        divisions = self.section.vertical.divisions
        if self._continuous_scale:
            low, high = self.volts_per_div[0], self.volts_per_div[-1]
            per_div = scales.clamp(full_scale_v / divisions, low, high)
        else:
            per_div = scales.smallest_at_least(self.volts_per_div, full_scale_v / divisions)
        span = scales.tidy(per_div * divisions)
        if self.full_scale_v.get(channel) == span:
            return span
        self.full_scale_v.pop(channel, None)
        self._scaling.pop(channel, None)
        self.session.run(
            "set_scale", {"channel": channel, "volts_per_div": per_div, "full_scale_v": span}, check_errors=True
        )
        self.full_scale_v[channel] = span
        return span

    def set_window(self, sample_rate_hz: float, samples: int) -> tuple[float, int]:
        """Ask for a sample rate (Hz) and record length; returns what the scope will use.

        Both are brought within the driver's limits; a rate that the scope rounds (1-2-5) or a
        timebase in s/div is rounded towards the lower rate, so the window never gets shorter.
        """
        if not (math.isfinite(sample_rate_hz) and sample_rate_hz > 0) or samples < 1:
            raise LimitError(f"scope: window {sample_rate_hz!r} Sa/s x {samples!r} samples is not valid")
        asked = (float(sample_rate_hz), int(samples))
        if self._asked == asked and self.window is not None:
            return self.window
        horizontal = self.section.horizontal
        n = int(round(scales.clamp(samples, self.section.samples.min, self.section.samples.max)))
        rate = scales.clamp(sample_rate_hz, horizontal.sample_rate_hz.min, horizontal.sample_rate_hz.max)
        self._asked = None
        self.window = None
        kept, self._scaling = self._scaling, {}  # restored below only if all went well
        if self._sent_samples != n:
            self._sent_samples = None
            got = self.session.run("set_samples", {"samples": n}, check_errors=True)
            self._sent_samples = n
            n = int(got.get("samples", n))
        if horizontal.mode == "sample_rate":
            if horizontal.rate_steps == "1-2-5":
                rate = max(scales.round_down_125(rate), scales.round_up_125(horizontal.sample_rate_hz.min))
            if self._sent_horizontal is not None and self._sent_horizontal[0] == rate:
                rate = self._sent_horizontal[1]
            else:
                self._sent_horizontal = None
                got = self.session.run("set_sample_rate", {"sample_rate_hz": rate}, check_errors=True)
                actual = float(got.get("sample_rate_hz", rate))
                self._sent_horizontal = (rate, actual)
                self._rate_confirmed = "sample_rate_hz" in got
                rate = actual
        else:
            assert horizontal.divisions is not None and horizontal.seconds_per_div is not None
            per_div_span = horizontal.seconds_per_div
            seconds_per_div = n / (rate * horizontal.divisions)
            if per_div_span.steps == "1-2-5":
                seconds_per_div = scales.round_up_125(seconds_per_div)
            seconds_per_div = scales.clamp(seconds_per_div, per_div_span.min, per_div_span.max)
            if self._sent_horizontal is not None and self._sent_horizontal[0] == seconds_per_div:
                seconds_per_div = self._sent_horizontal[1]
            else:
                self._sent_horizontal = None
                params = {
                    "seconds_per_div": seconds_per_div,
                    "sample_rate_hz": n / (seconds_per_div * horizontal.divisions),
                    "samples": n,
                }
                got = self.session.run("set_timebase", params, check_errors=True)
                actual = float(got.get("seconds_per_div", seconds_per_div))
                self._sent_horizontal = (seconds_per_div, actual)
                self._rate_confirmed = "seconds_per_div" in got
                seconds_per_div = actual
            rate = n / (seconds_per_div * horizontal.divisions)
        # Vertical scaling does not depend on the window: keep it. The sample interval does:
        # when the scope confirmed its rate, it is 1 / rate (divisions x s/div / samples for a
        # timebase, computed as a scope computes it, so that it is the same float as a fresh
        # read of the scaling gives); otherwise read scaling again.
        if self._rate_confirmed:
            interval_s = (horizontal.divisions * seconds_per_div / n if horizontal.mode != "sample_rate"
                          else 1.0 / rate)
            for scaling in kept.values():
                scaling["x_increment"] = interval_s
            self._scaling = kept
        self.window = (rate, n)
        self._asked = asked
        return self.window

    # -- acquisition ---------------------------------------------------------------------

    def capture(self) -> Capture:
        """One triggered single acquisition of both channels, fetched and scaled to volts."""
        wait_s = self.link.timeout_s + WAIT_MARGIN_S
        if self.window is not None:
            wait_s += 2.0 * self.window[1] / self.window[0]
        self.session.run("arm", timeout_s=wait_s)
        # Fetch the channel the scope already points at first: with `state` writes in the
        # driver, that saves re-selecting the waveform source on every capture.
        order = (2, 1) if self._last_fetched == 2 else (1, 2)
        rows: dict[int, np.ndarray] = {}
        clipped: dict[int, bool] = {}
        interval_s = math.nan
        for channel in order:
            scaling = self._scaling.get(channel)
            if scaling is None:
                scaling = self._read_scaling(channel)
            got = self.session.run("fetch", {"channel": channel})
            self._last_fetched = channel
            codes = as_codes(got["codes"])
            self._check_codes(channel, codes)
            rows[channel] = (codes - scaling["y_reference"]) * scaling["y_increment"] + scaling["y_origin"]
            clipped[channel] = self._clipped(codes)
            if channel == 1:
                interval_s = scaling.get("x_increment", math.nan)
        n = min(len(rows[1]), len(rows[2]))
        if n == 0:
            raise MalformedResponse(self.link.role, self.link.resource_name, "", "the scope returned no samples")
        if not (math.isfinite(interval_s) and interval_s > 0):
            if self.window is None:
                raise MalformedResponse(
                    self.link.role, self.link.resource_name, "", "no sample interval: scaling gave none and no window set"
                )
            interval_s = 1.0 / self.window[0]
        full_scale = (self.full_scale_v.get(1, math.nan), self.full_scale_v.get(2, math.nan))
        return Capture(
            volts=np.vstack([rows[1][:n], rows[2][:n]]),
            sample_interval_s=float(interval_s),
            full_scale_v=full_scale,
            clipped=(clipped[1], clipped[2]),
        )

    def can_measure(self) -> bool:
        """True when the driver gives the scope's own measurements (measure_amplitude, measure_phase)."""
        return self.session.has("measure_amplitude") and self.session.has("measure_phase")

    def measure(self) -> ScopeReading:
        """One triggered acquisition, then the scope's own peak-to-peak (both channels) and phase."""
        if not self.can_measure():
            raise MalformedResponse(self.link.role, self.link.resource_name, "",
                                    f"driver {self.driver.name} has no measure_amplitude / measure_phase operations")
        wait_s = self.link.timeout_s + WAIT_MARGIN_S
        if self.window is not None:
            wait_s += 2.0 * self.window[1] / self.window[0]
        self.session.run("arm", timeout_s=wait_s)
        amplitudes = [self.session.run("measure_amplitude", {"channel": ch}).get("amplitude_vpp") for ch in (1, 2)]
        phase = self.session.run("measure_phase").get("phase_deg")
        for name, value in (("amplitude_vpp (channel 1)", amplitudes[0]), ("amplitude_vpp (channel 2)", amplitudes[1]),
                            ("phase_deg", phase)):
            if not isinstance(value, (int, float)):
                raise MalformedResponse(self.link.role, self.link.resource_name, "", f"{name} is {value!r}, not a number")
        return ScopeReading(
            amplitude_in_vpp=float(amplitudes[0]),
            amplitude_out_vpp=float(amplitudes[1]),
            phase_deg=float(phase),
            full_scale_v=(self.full_scale_v.get(1, math.nan), self.full_scale_v.get(2, math.nan)),
        )

    def _read_scaling(self, channel: int) -> dict[str, Any]:
        got = self.session.run("scaling", {"channel": channel})
        scaling: dict[str, Any] = {}
        for name in ("y_increment", "y_origin", "y_reference", "x_increment"):
            if name not in got:
                continue
            value = got[name]
            if not isinstance(value, float) or not math.isfinite(value):
                raise MalformedResponse(
                    self.link.role, self.link.resource_name, "", f"scaling field {name} is {value!r}, not a number"
                )
            scaling[name] = value
        self._scaling[channel] = scaling
        return scaling

    def _check_codes(self, channel: int, codes: np.ndarray) -> None:
        """MalformedResponse when a waveform holds values its ADC cannot produce (outside its
        range, or off its grid when codes are packed, e.g. 8 bits in 16-bit words): the block
        was corrupted on its way, though its framing was intact."""
        adc = self.section.adc
        per = adc.counts_per_code
        low, high = (-(2 ** (adc.bits - 1)), 2 ** (adc.bits - 1) - 1) if adc.signed else (0, 2**adc.bits - 1)
        bad = (codes < low * per) | (codes > high * per) | ~np.isfinite(codes)
        if per > 1:
            bad |= np.mod(codes, per) != 0
        if bad.any():
            raise MalformedResponse(
                self.link.role, self.link.resource_name, "",
                f"channel {channel} waveform holds {int(bad.sum())} values its {adc.bits}-bit ADC cannot produce "
                "(outside its range or off its code grid): the block was corrupted in transfer")

    def _clipped(self, codes: np.ndarray) -> bool:
        """True when any code sits at an ADC extreme (the ADC saturated)."""
        adc = self.section.adc
        if codes.size == 0:
            return False
        per = adc.counts_per_code
        if adc.signed:
            low, high = -(2 ** (adc.bits - 1)), 2 ** (adc.bits - 1) - 1
        else:
            low, high = 0, 2**adc.bits - 1
        return bool(codes.min() <= low * per or codes.max() >= high * per)


class DriverMeter(_DriverRole):
    """Meter role from a driver file."""

    def __init__(self, session: DriverSession) -> None:
        super().__init__(session)
        section = session.driver.section
        assert isinstance(section, MeterSection)
        self.section = section
        self.limits = meter_limits(section)
        self._forget()

    def _forget(self) -> None:
        super()._forget()
        self.bandwidth_hz: float | None = None

    def measure(self, frequency_hz: float) -> MeterReading:
        """Gain (dB) and phase (degrees) of channel 2 relative to channel 1 at frequency_hz."""
        lim = self.limits
        self._check_range("frequency", frequency_hz, lim.frequency_min_hz, lim.frequency_max_hz, "Hz")
        wait_s = self.link.timeout_s + WAIT_MARGIN_S
        bandwidth = self.section.bandwidth
        if bandwidth is not None and self.session.has("set_bandwidth"):
            wanted = scales.clamp(bandwidth.fraction * frequency_hz, bandwidth.min_hz, bandwidth.max_hz)
            if wanted != self.bandwidth_hz:
                self.bandwidth_hz = None
                self.session.run("set_bandwidth", {"bandwidth_hz": wanted}, check_errors=True)
                self.bandwidth_hz = wanted
            wait_s += 10.0 / wanted
        got = self.session.run("measure", {"frequency_hz": frequency_hz}, timeout_s=wait_s)
        values = {}
        for name in ("gain_db", "phase_deg", "amplitude_in_v", "amplitude_out_v"):
            value = got.get(name, math.nan)
            if not isinstance(value, (int, float)):
                raise MalformedResponse(self.link.role, self.link.resource_name, "", f"{name} is {value!r}, not a number")
            values[name] = float(value)
        return MeterReading(**values)


def make_role(session: DriverSession) -> DriverSource | DriverScope | DriverMeter:
    """The role adapter for the session's driver role."""
    kinds = {"source": DriverSource, "scope": DriverScope, "meter": DriverMeter}
    return kinds[session.role](session)
