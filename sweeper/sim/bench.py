"""The virtual bench's shared state: generator settings, DUT, clock, counters, random numbers.

One `SimBench` sits behind the four simulated instruments of one resource manager; the
scope models ask it what the DUT nodes carry at the moment they acquire, so what a scope
sees follows the generator through the DUT.

Wiring (fixed): the generator drives the DUT input through its 50 Ohm source resistance;
scope channel 1 and meter channel 1 see the DUT input node, channel 2 the DUT output node;
the meter takes its reference frequency from the generator's sync.

Transient (optional, on by default): every change of a generator setting at time t_c
(frequency, amplitude, offset, load, output state) starts a decaying term on the DUT output
node, residual * exp(-(t - t_c) / tau), with tau the DUT's slowest time constant and the
residual chosen so that the output is continuous at t_c (the old steady state, plus what was
left of earlier transients, minus the new steady state). This is exact for a first-order DUT
and an envelope approximation for higher orders; the input node and the meter see steady
state only. The generator's phase is continuous across frequency changes.

What a real bench adds (all off by default, so the bench is ideal unless configured):
- the bench's own probes (`SimConfig.probes`, sweeper.sim.probes): channel 1's probe loads the
  input node, channel 2's the output node, whatever probe loading the DUT model names;
- each scope channel's flat gain and phase error (`channel_gain_db`, `channel_phase_deg`),
  and channel 2's record lagging channel 1's by `skew_s` (a phase of -360 f skew degrees);
  these are the scopes' own, the meter does not see them;
- slow DUT drift with bench time (`drift`, sweeper.sim.drift), bench time being
  `bench_age_s` plus the clock;
- `sweep_seed`, mixed into every random stream, so the sweeps of a campaign differ while each
  stays reproducible from what its run stores.
"""

from __future__ import annotations

import math
import zlib
from collections import Counter
from dataclasses import dataclass, replace

import numpy as np

from sweeper.sim import drift as drift_model
from sweeper.sim import physics
from sweeper.sim.clock import SimClock
from sweeper.sim.drift import Drift
from sweeper.sim.faults import FaultAction, consult
from sweeper.sim.probes import Probe, ProbedDut


@dataclass
class SimConfig:
    """How to build a virtual bench."""

    circuit: physics.DutModel  # the true DUT (a sweeper.circuits.Circuit): H from input node to output node
    noise_v: float = 0.0  # white noise added on each scope channel, V rms
    noise_range_frac: float = 0.0  # front-end noise proportional to each channel's full-scale span, rms fraction
    distortion_frac: float = 0.0  # 2nd and 3rd harmonic at the source, fraction of the fundamental
    seed: int = 0
    realtime: bool = False  # also really sleep when the simulated clock advances
    transaction_latency_s: float = 0.5e-3  # simulated time each message costs, s
    faults: object | None = None  # fault hook: callable(resource, message) -> FaultAction | None, or .on_message
    transient: bool = True  # DUT transient after each generator change (see module docstring)
    meter_front_end_bandwidth_hz: float = 1e6  # bandwidth over which noise_v is spread, for the meter's noise
    probes: tuple[Probe, Probe] | None = None  # the bench's own probes on channel 1 (input) and 2 (output)
    channel_gain_db: tuple[float, float] = (0.0, 0.0)  # each scope channel's gain error, dB
    channel_phase_deg: tuple[float, float] = (0.0, 0.0)  # each scope channel's phase error, degrees
    skew_s: float = 0.0  # channel 2's record lags channel 1's by this, s
    drift: Drift | None = None  # slow DUT drift with bench time
    bench_age_s: float = 0.0  # how long the bench had been on when it was opened, s (drift's time origin)
    sweep_seed: int = 0  # mixed into every random stream when not 0 (e.g. a campaign's sweep number)


@dataclass(frozen=True)
class GeneratorSettings:
    """The function generator's state as its front panel shows it."""

    function: str = "SINE"
    frequency_hz: float = 1e3
    amplitude_vpp: float = 0.1  # as displayed for the load setting
    offset_v: float = 0.0  # as displayed for the load setting
    load_ohm: float = math.inf  # load setting; inf = high impedance
    output_on: bool = False

    def emf_peak_v(self) -> float:
        """Open-circuit EMF of the sine, peak V (0 when the output is off)."""
        if not self.output_on:
            return 0.0
        return 0.5 * self.amplitude_vpp * physics.emf_per_displayed_volt(self.load_ohm)

    def emf_dc_v(self) -> float:
        """Open-circuit DC EMF, V (0 when the output is off)."""
        if not self.output_on:
            return 0.0
        return self.offset_v * physics.emf_per_displayed_volt(self.load_ohm)


@dataclass
class Record:
    """One simultaneous acquisition of both DUT nodes, in volts before digitising."""

    volts: np.ndarray  # shape (2, N): row 0 DUT input node, row 1 DUT output node, V
    sample_interval_s: float
    start_s: float  # clock time of the first sample, s


def _slowest_time_constant_s(circuit: physics.DutModel) -> float:
    """The DUT's slowest time constant, s; 0 (no transient) when it is not a positive finite time."""
    try:
        tau = float(circuit.slowest_time_constant_s())
    except (AttributeError, ValueError, ZeroDivisionError, np.linalg.LinAlgError):
        return 0.0
    return tau if math.isfinite(tau) and tau > 0 else 0.0


@dataclass
class _Transient:
    start_s: float = 0.0
    residual_v: float = 0.0


class SimBench:
    """Shared state of one virtual bench (one per resource manager).

    Attributes: config, clock (SimClock), generator (GeneratorSettings), counters (messages
    received per resource name), bytes_sent (answer bytes read per resource name), rng,
    circuit (the DUT as the bench's probes load it).
    """

    def __init__(self, config: SimConfig) -> None:
        circuit: physics.DutModel = config.circuit
        if config.probes is not None:
            circuit = ProbedDut(config.circuit, *config.probes)
        reference = getattr(getattr(circuit, "loading", None), "reference", "input")
        if reference != "input":
            raise ValueError(
                f"SimConfig.circuit: loading reference {reference!r}: the bench applies the source "
                "resistance itself, so the true DUT must be referred to its input node (reference 'input')"
            )
        self.config = config
        self._circuit = circuit
        self._channels = tuple(
            physics.channel_factor(g, p) for g, p in zip(config.channel_gain_db, config.channel_phase_deg, strict=True)
        )
        attenuation = tuple(probe.attenuation for probe in config.probes) if config.probes else (1.0, 1.0)
        self._noise_v = np.array([config.noise_v * a for a in attenuation])  # scope noise referred to the tips
        self.clock = SimClock(realtime=config.realtime)
        self.generator = GeneratorSettings()
        self.counters: Counter[str] = Counter()
        self.bytes_sent: Counter[str] = Counter()
        self.rng = self.rng_for("bench")  # bench-level randomness (the generator's start phase)
        self._phase_ref = (0.0, float(self.rng.uniform(0.0, 2 * math.pi)))  # (time s, phase rad)
        self._transient = _Transient()
        self._time_constant_s = _slowest_time_constant_s(circuit)
        self._spectrum_key: tuple | None = None
        self._spectrum: physics.NodeSpectrum | None = None
        self._draws: tuple[float, int] = (math.nan, -1)  # (generator frequency, acquisitions at it - 1)

    @property
    def circuit(self) -> physics.DutModel:
        """The true DUT, loaded by the bench's probes when it has its own."""
        return self._circuit

    def _sweep_key(self) -> list[int]:
        return [self.config.sweep_seed] if self.config.sweep_seed else []

    def rng_for(self, name: str) -> np.random.Generator:
        """An independent, reproducible random stream for one consumer (seeded by config.seed,
        config.sweep_seed and name)."""
        key = zlib.crc32(name.encode("utf-8"))
        return np.random.default_rng(
            np.random.SeedSequence(entropy=self.config.seed, spawn_key=(key, *self._sweep_key()))
        )

    def acquisition_rng(self, stream: int) -> np.random.Generator:
        """The random stream of one acquisition by one instrument (trigger phase, noise).

        stream: the instrument's fixed 32-bit stream key (each simulated instrument has its
        own; changing one changes every seeded draw of that instrument).
        The draws depend only on config.seed, config.sweep_seed, the stream, the generator's
        frequency (its bits) and how many acquisitions were made since that frequency was set,
        never on what the bench did before: a bench reopened mid-sweep (a resumed run) draws
        exactly what an uninterrupted one draws at the same point.
        """
        frequency_hz = float(self.generator.frequency_hz)
        count = self._draws[1] + 1 if self._draws[0] == frequency_hz else 0
        self._draws = (frequency_hz, count)
        bits = int(np.float64(frequency_hz).view(np.uint64))
        key = [self.config.seed, stream, bits & 0xFFFFFFFF, bits >> 32, count, *self._sweep_key()]
        return np.random.default_rng(np.random.SeedSequence(key))

    # --- the one place every message passes

    def on_message(self, resource: str, message: str) -> FaultAction | None:
        """Count a message, charge its latency to the clock and ask the fault hook about it."""
        self.counters[resource] += 1
        if self.config.transaction_latency_s > 0:
            self.clock.sleep(self.config.transaction_latency_s)
        return consult(self.config.faults, resource, message)

    # --- generator

    def set_generator(self, **changes: object) -> None:
        """Change generator settings now: keeps the phase continuous and starts a DUT transient."""
        new = replace(self.generator, **changes)
        if new == self.generator:
            return
        now = self.clock.now_s()
        phase = self.generator_phase_rad(now)
        before = physics.node_values_v(self.spectrum_at(now), np.array([phase]))[1, 0] + self._transient_at(now)
        self._phase_ref = (now, phase)
        self.generator = new
        after = physics.node_values_v(self.spectrum_at(now), np.array([phase]))[1, 0]
        residual = float(before - after) if self.config.transient else 0.0
        self._transient = _Transient(start_s=now, residual_v=residual)

    def generator_phase_rad(self, time_s: float) -> float:
        """Phase of the generator's fundamental at a clock time, rad in [0, 2 pi)."""
        t0, phase0 = self._phase_ref
        cycles = self.generator.frequency_hz * (time_s - t0)
        return (phase0 + 2 * math.pi * (cycles - math.floor(cycles))) % (2 * math.pi)

    def bench_time_s(self, clock_s: float | None = None) -> float:
        """How long the bench has been on at a clock time (now by default), s: bench_age_s + clock."""
        return self.config.bench_age_s + (self.clock.now_s() if clock_s is None else clock_s)

    def spectrum_at(self, clock_s: float) -> physics.NodeSpectrum:
        """Steady-state phasors at the DUT nodes at a clock time: the spectrum with the DUT's drift."""
        if self.config.drift is None:
            return self.spectrum()
        factor = drift_model.output_factor(self.config.drift, self.bench_time_s(clock_s))
        return physics.scaled_spectrum(self.spectrum(), output_factor=factor)

    def spectrum(self) -> physics.NodeSpectrum:
        """Steady-state phasors at the DUT nodes for the current generator settings (no drift)."""
        g = self.generator
        key = (g.frequency_hz, g.emf_peak_v(), g.emf_dc_v(), self.config.distortion_frac)
        if key != self._spectrum_key:
            self._spectrum = physics.node_spectrum(
                self.circuit,
                g.frequency_hz,
                emf_peak_v=g.emf_peak_v(),
                emf_dc_v=g.emf_dc_v(),
                distortion_frac=self.config.distortion_frac,
            )
            self._spectrum_key = key
        assert self._spectrum is not None
        return self._spectrum

    def _transient_at(self, time_s: float | np.ndarray) -> np.ndarray:
        tr = self._transient
        return physics.transient_v(tr.residual_v, self._time_constant_s, np.asarray(time_s) - tr.start_s)

    # --- what the instruments measure

    def acquire(
        self,
        samples: int,
        sample_interval_s: float,
        rng: np.random.Generator,
        ac_coupled: tuple[bool, bool] = (False, False),
        full_scale_v: tuple[float, float] = (0.0, 0.0),
    ) -> Record:
        """Acquire both DUT nodes on one trigger; advances the clock by trigger wait + record duration.

        The trigger fires within one period of the generator, at a phase of its fundamental
        drawn uniformly from rng (the random trigger phase). Each channel shows its node through
        its own gain and phase error, channel 2 lagging by the skew; each gets independent white
        noise of config.noise_v rms (times its probe's attenuation) plus config.noise_range_frac of
        its full-scale span (a scope front end's noise grows with its volts/division setting); an
        AC-coupled channel loses the steady-state DC level.
        """
        g = self.generator
        trigger_phase_rad = float(rng.uniform(0.0, 2 * math.pi))
        to_go_rad = (trigger_phase_rad - self.generator_phase_rad(self.clock.now_s())) % (2 * math.pi)
        self.clock.sleep(to_go_rad / (2 * math.pi * g.frequency_hz))
        start_s = self.clock.now_s()
        spectrum = physics.scaled_spectrum(self.spectrum_at(start_s), *self._channels)
        # The record starts at the drawn phase itself (not one recomputed from the clock), so
        # the samples depend on the draw and the settings only.
        phases = physics.sample_phases_rad(trigger_phase_rad, g.frequency_hz, sample_interval_s, samples)
        skew_s = self.config.skew_s
        volts = physics.node_values_v(spectrum, phases, output_delay_rad=2 * math.pi * g.frequency_hz * skew_s)
        if self.config.transient and self._transient.residual_v != 0.0:
            times = start_s - skew_s + sample_interval_s * np.arange(samples)
            volts[1] += abs(self._channels[1]) * self._transient_at(times)
        if ac_coupled[0]:
            volts[0] -= spectrum.dc_input_v
        if ac_coupled[1]:
            volts[1] -= spectrum.dc_output_v
        if self.config.noise_v > 0 or self.config.noise_range_frac > 0:
            sigma = np.hypot(self._noise_v, self.config.noise_range_frac * np.asarray(full_scale_v, dtype=float))
            volts += rng.normal(0.0, 1.0, volts.shape) * sigma[:, None]
        self.clock.sleep(samples * sample_interval_s)
        return Record(volts=volts, sample_interval_s=sample_interval_s, start_s=start_s)

    def fundamental_phasors(self) -> tuple[complex, complex]:
        """Steady-state fundamental phasors (peak V) at the DUT input and output nodes, now."""
        spectrum = self.spectrum_at(self.clock.now_s())
        return complex(spectrum.input_v[0]), complex(spectrum.output_v[0])
