"""DUT physics of the virtual bench: pure functions on numbers and numpy arrays.

Signal chain (all phasors are peak volts; a phasor V at harmonic k of a fundamental whose
phase is theta stands for the signal Im(V exp(j k theta)), so a real positive V is a sine):

    generator EMF e(t)  --R_s (50 Ohm)--+-- DUT input node (scope channel 1)
                                        |
                                   Z_in(f) of the DUT          V_in = e * Z_in / (Z_in + R_s)
                                        |
                         DUT output node (scope channel 2)     V_out = H(f) * V_in

H(f) is the DUT's transfer function from its input node to its output node, as given by
`sweeper.circuits.Circuit.response` with a Loading of reference "input" (probe and load
resistor loading included, the generator's source resistance not: that is applied here, with
`Circuit.input_impedance_ohm`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol

import numpy as np

SOURCE_RESISTANCE_OHM = 50.0  # generator's internal source resistance (DIALECTS.md, STIM-1)
DISTORTION_HARMONICS = (2, 3)  # harmonic orders added when distortion is on
_DC_FALLBACK_HZ = 1e-9  # stands in for 0 Hz when a model cannot be evaluated at exactly DC


class DutModel(Protocol):
    """What the physics needs of a DUT (satisfied by sweeper.circuits.Circuit)."""

    def response(self, frequency_hz: float) -> complex:
        """Transfer function V_out / V_in at frequency_hz (Hz)."""

    def input_impedance_ohm(self, frequency_hz: float) -> complex:
        """Impedance seen at the DUT input node, Ohm."""

    def slowest_time_constant_s(self) -> float:
        """Longest time constant of the DUT's natural response, s."""


@dataclass(frozen=True)
class NodeSpectrum:
    """Steady-state signals at the DUT input and output nodes: DC plus spectral lines."""

    frequency_hz: float  # fundamental, Hz
    harmonics: np.ndarray  # harmonic order of each line (1 = fundamental), shape (K,)
    input_v: np.ndarray  # complex peak phasors at the DUT input node, V, shape (K,)
    output_v: np.ndarray  # complex peak phasors at the DUT output node, V, shape (K,)
    dc_input_v: float = 0.0  # DC level at the input node, V
    dc_output_v: float = 0.0  # DC level at the output node, V


def emf_per_displayed_volt(load_ohm: float, source_resistance_ohm: float = SOURCE_RESISTANCE_OHM) -> float:
    """Open-circuit EMF per volt of displayed amplitude for a generator load setting (Ohm).

    The displayed amplitude is what a load of load_ohm would see through the source
    resistance, so EMF = displayed * (R_load + R_s) / R_load: x2 for a 50 Ohm setting with a
    50 Ohm source (common practice), x1 for an infinite (high-Z) setting.
    """
    if math.isinf(load_ohm):
        return 1.0
    if load_ohm <= 0:
        raise ValueError(f"load setting must be positive, got {load_ohm} Ohm")
    return (load_ohm + source_resistance_ohm) / load_ohm


def source_divider(z_in_ohm: complex, source_resistance_ohm: float = SOURCE_RESISTANCE_OHM) -> complex:
    """Input-node voltage per volt of EMF: Z_in / (Z_in + R_s) (Ohm's law); 1 for an open input."""
    z = complex(z_in_ohm)
    if math.isinf(abs(z)):
        return 1.0 + 0.0j
    return z / (z + source_resistance_ohm)


def _evaluate(fn, frequency_hz: float) -> complex:
    """Evaluate a frequency function of the DUT; nan when it cannot be evaluated there (e.g. 0 Hz)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        try:
            return complex(fn(frequency_hz))
        except (ValueError, ZeroDivisionError, FloatingPointError, OverflowError):
            return complex(float("nan"), float("nan"))


def _at_dc(fn) -> complex:
    """Evaluate a frequency function at 0 Hz, or just above it when the model is singular at DC."""
    value = _evaluate(fn, 0.0)
    if math.isfinite(value.real) and math.isfinite(value.imag):
        return value
    return _evaluate(fn, _DC_FALLBACK_HZ)


def node_spectrum(
    dut: DutModel,
    frequency_hz: float,
    emf_peak_v: float,
    emf_dc_v: float = 0.0,
    distortion_frac: float = 0.0,
    source_resistance_ohm: float = SOURCE_RESISTANCE_OHM,
) -> NodeSpectrum:
    """Steady-state phasors at the DUT nodes for a sine EMF (peak V) plus DC (V).

    With distortion_frac > 0 the source also emits the 2nd and 3rd harmonic, each at
    distortion_frac times the fundamental's amplitude, and each passes through the source
    divider and H at its own frequency.
    """
    orders = [1]
    if distortion_frac > 0:
        orders += list(DISTORTION_HARMONICS)
    harmonics = np.array(orders, dtype=int)
    input_v = np.zeros(len(orders), dtype=complex)
    output_v = np.zeros(len(orders), dtype=complex)
    if emf_peak_v != 0.0:
        for i, k in enumerate(orders):
            f_k = k * frequency_hz
            emf_k = emf_peak_v * (1.0 if k == 1 else distortion_frac)
            divider = source_divider(_evaluate(dut.input_impedance_ohm, f_k), source_resistance_ohm)
            input_v[i] = emf_k * divider
            output_v[i] = input_v[i] * _evaluate(dut.response, f_k)
    dc_input_v = dc_output_v = 0.0
    if emf_dc_v != 0.0:
        divider = source_divider(_at_dc(dut.input_impedance_ohm), source_resistance_ohm)
        dc_input_v = float((emf_dc_v * divider).real)
        dc_output_v = float((emf_dc_v * divider * _at_dc(dut.response)).real)
    return NodeSpectrum(
        frequency_hz=float(frequency_hz),
        harmonics=harmonics,
        input_v=input_v,
        output_v=output_v,
        dc_input_v=dc_input_v,
        dc_output_v=dc_output_v,
    )


def node_values_v(spectrum: NodeSpectrum, phase_rad: np.ndarray, output_delay_rad: float = 0.0) -> np.ndarray:
    """Node voltages (V) at the given fundamental phases (rad): shape (2, N), row 0 input, row 1 output.

    output_delay_rad: row 1 is taken that much fundamental phase earlier (a channel whose
    record lags by a time tau has output_delay_rad = 2 pi f tau; harmonic k lags k times it).
    """
    phase = np.asarray(phase_rad, dtype=float)
    out = np.empty((2,) + phase.shape)
    out[0] = spectrum.dc_input_v
    out[1] = spectrum.dc_output_v
    for k, v_in, v_out in zip(spectrum.harmonics, spectrum.input_v, spectrum.output_v):
        kphase = k * phase
        s, c = np.sin(kphase), np.cos(kphase)
        # Im(V exp(j x)) = Re(V) sin x + Im(V) cos x
        out[0] += v_in.real * s + v_in.imag * c
        if output_delay_rad:
            s, c = np.sin(kphase - k * output_delay_rad), np.cos(kphase - k * output_delay_rad)
        out[1] += v_out.real * s + v_out.imag * c
    return out


def scaled_spectrum(spectrum: NodeSpectrum, input_factor: complex = 1.0, output_factor: complex = 1.0) -> NodeSpectrum:
    """The spectrum with every line of a node multiplied by a complex factor, its DC level by the
    factor's magnitude (a flat gain and phase change: a channel's error, or the DUT's drift)."""
    return NodeSpectrum(
        frequency_hz=spectrum.frequency_hz,
        harmonics=spectrum.harmonics,
        input_v=spectrum.input_v * input_factor,
        output_v=spectrum.output_v * output_factor,
        dc_input_v=spectrum.dc_input_v * abs(input_factor),
        dc_output_v=spectrum.dc_output_v * abs(output_factor),
    )


def channel_factor(gain_db: float, phase_deg: float) -> complex:
    """A channel's complex gain error: 10^(gain_db / 20) exp(j phase_deg) (1 for an ideal channel)."""
    magnitude = 10.0 ** (gain_db / 20.0)
    phase_rad = math.radians(phase_deg)
    return complex(magnitude * math.cos(phase_rad), magnitude * math.sin(phase_rad))


def sample_phases_rad(start_phase_rad: float, frequency_hz: float, sample_interval_s: float, samples: int) -> np.ndarray:
    """Fundamental phase (rad) at each sample of a record that starts at start_phase_rad."""
    return math.fmod(start_phase_rad, 2 * math.pi) + 2 * math.pi * frequency_hz * sample_interval_s * np.arange(samples)


def transient_v(residual_v: float, time_constant_s: float, elapsed_s: np.ndarray) -> np.ndarray:
    """Decaying DUT transient (V): residual * exp(-elapsed / tau); zero when tau is not a positive finite time."""
    elapsed = np.asarray(elapsed_s, dtype=float)
    if residual_v == 0.0 or not (math.isfinite(time_constant_s) and time_constant_s > 0):
        return np.zeros_like(elapsed)
    return residual_v * np.exp(-np.maximum(elapsed, 0.0) / time_constant_s)


def quantise(volts: np.ndarray, lsb_v: float, centre_v: float, code_min: int = -128, code_max: int = 127) -> np.ndarray:
    """ADC codes (int16) of volts: round((v - centre) / lsb), clipped to [code_min, code_max]."""
    codes = np.rint((np.asarray(volts, dtype=float) - centre_v) / lsb_v)
    return np.clip(codes, code_min, code_max).astype(np.int16)


def detector_noise_v(noise_v: float, bandwidth_hz: float, front_end_bandwidth_hz: float) -> float:
    """Standard deviation (V) of each quadrature of a narrow-band detector's peak phasor estimate.

    White noise of noise_v rms spread over front_end_bandwidth_hz has a one-sided density
    S = noise_v^2 / B_fe; a detector of equivalent noise bandwidth B estimates each quadrature
    of the peak phasor with variance 2 S B (the same 2 sigma^2 / M as a least-squares sine fit
    of M samples at rate 2 B_fe over a time 1 / (2 B)).
    """
    return noise_v * math.sqrt(2.0 * bandwidth_hz / front_end_bandwidth_hz)


def wrap_phase_deg(phase_deg: float) -> float:
    """Wrap an angle (degrees) to (-180, 180]."""
    wrapped = math.fmod(phase_deg, 360.0)
    if wrapped <= -180.0:
        wrapped += 360.0
    elif wrapped > 180.0:
        wrapped -= 360.0
    return wrapped


def gain_phase(input_v: complex, output_v: complex) -> tuple[float, float]:
    """Gain 20 log10(|V_out| / |V_in|) (dB) and phase of V_out relative to V_in (degrees, (-180, 180])."""
    ratio = complex(output_v) / complex(input_v)
    return 20.0 * math.log10(abs(ratio)), wrap_phase_deg(math.degrees(math.atan2(ratio.imag, ratio.real)))
