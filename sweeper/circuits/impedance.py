"""Frequency responses evaluated directly from complex impedances.

Each topology is a divider: a series arm from the DUT input to the output node and a shunt
arm from the output node to ground, with the output loading (probe R parallel C, load
resistor) in parallel with the shunt arm. Everything here is complex arithmetic at each
frequency; nothing goes through polynomial coefficients (see `polynomial` for that path, kept
independent so that each checks the other).

Component values may be floats or numpy arrays; they broadcast against the frequency axis,
so an array of shape (K, 1) evaluates K component sets at once (shape (K, F) results).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from sweeper.circuits.catalog import ARMS, COMPONENTS, Arm
from sweeper.circuits.loading import Loading

Values = Mapping[str, "float | np.ndarray"]


def laplace_s(frequency_hz: np.ndarray) -> np.ndarray:
    """s = j 2 pi f (rad/s) for frequencies in Hz; frequencies must be finite and > 0."""
    frequency_hz = np.asarray(frequency_hz, dtype=float)
    if not np.all(np.isfinite(frequency_hz) & (frequency_hz > 0)):
        raise ValueError("frequency_hz: expected finite frequencies > 0 Hz")
    return 2j * np.pi * frequency_hz


def _kinds(topology: str) -> dict[str, str]:
    return {spec.name: spec.kind for spec in COMPONENTS[topology]}


def _impedance(arm: Arm, kinds: dict[str, str], values: Values, s: np.ndarray) -> np.ndarray:
    """Impedance of an arm, Ohm."""
    if isinstance(arm, str):
        value = np.asarray(values[arm], dtype=float)
        kind = kinds[arm]
        if kind == "resistance":
            return value + 0j
        if kind == "inductance":
            return s * value
        return 1.0 / (s * value)
    operator, *parts = arm
    if operator == "series":
        return sum(_impedance(part, kinds, values, s) for part in parts)
    return 1.0 / _admittance(arm, kinds, values, s)


def _admittance(arm: Arm, kinds: dict[str, str], values: Values, s: np.ndarray) -> np.ndarray:
    """Admittance of an arm, siemens; an infinite resistance contributes nothing."""
    if isinstance(arm, str):
        value = np.asarray(values[arm], dtype=float)
        kind = kinds[arm]
        if kind == "resistance":
            return 1.0 / value + 0j
        if kind == "inductance":
            return 1.0 / (s * value)
        return s * value
    operator, *parts = arm
    if operator == "parallel":
        return sum(_admittance(part, kinds, values, s) for part in parts)
    return 1.0 / _impedance(arm, kinds, values, s)


def _probe_admittance(loading: Loading, s: np.ndarray) -> np.ndarray:
    """Admittance of one scope probe (R parallel C), siemens."""
    return loading.probe_conductance_s + s * loading.probe_capacitance_f


def _divider(topology: str, values: Values, loading: Loading, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(series impedance, loaded shunt impedance), Ohm."""
    series_arm, shunt_arm = ARMS[topology]
    kinds = _kinds(topology)
    z_series = _impedance(series_arm, kinds, values, s)
    y_out = (
        _admittance(shunt_arm, kinds, values, s)
        + loading.output_conductance_s
        + s * loading.probe_capacitance_f
    )
    return z_series, 1.0 / y_out


def rational_response(zeros_hz: np.ndarray, poles_hz: np.ndarray, gain: float, s: np.ndarray) -> np.ndarray:
    """gain * prod(s - 2 pi z) / prod(s - 2 pi p) at each s (rad/s)."""
    s_col = s[..., np.newaxis]
    numerator = np.prod(s_col - 2 * np.pi * np.asarray(zeros_hz, dtype=complex), axis=-1)
    denominator = np.prod(s_col - 2 * np.pi * np.asarray(poles_hz, dtype=complex), axis=-1)
    return gain * numerator / denominator


def dut_input_admittance(topology: str, values: Values, loading: Loading, s: np.ndarray) -> np.ndarray:
    """Admittance into the DUT input node, output loaded, plus the channel-1 probe, siemens."""
    if topology == "rational":
        return _probe_admittance(loading, s) + 0j
    z_series, z_out = _divider(topology, values, loading, s)
    return _probe_admittance(loading, s) + 1.0 / (z_series + z_out)


def response(
    topology: str,
    values: Values,
    loading: Loading,
    frequency_hz: np.ndarray,
    zeros_hz: np.ndarray = (),
    poles_hz: np.ndarray = (),
    gain: float = 1.0,
) -> np.ndarray:
    """Complex H(j 2 pi f) of a topology under loading, for the loading's reference."""
    s = laplace_s(frequency_hz)
    with np.errstate(divide="ignore", invalid="ignore"):
        if topology == "rational":
            h = rational_response(zeros_hz, poles_hz, gain, s)
        else:
            z_series, z_out = _divider(topology, values, loading, s)
            h = z_out / (z_series + z_out)
        if loading.reference == "source" and loading.source_resistance_ohm > 0:
            y_in = dut_input_admittance(topology, values, loading, s)
            h = h / (1.0 + loading.source_resistance_ohm * y_in)
    return np.broadcast_to(h, np.broadcast_shapes(np.shape(h), s.shape)).copy()


def input_impedance(topology: str, values: Values, loading: Loading, frequency_hz: np.ndarray) -> np.ndarray:
    """Impedance into the DUT input node, output loaded, with the channel-1 probe across it, Ohm."""
    s = laplace_s(frequency_hz)
    y_in = dut_input_admittance(topology, values, loading, s)
    with np.errstate(divide="ignore", invalid="ignore"):
        z_in = np.where(y_in == 0, complex(np.inf, 0.0), 1.0 / np.where(y_in == 0, 1.0, y_in))
    return np.broadcast_to(z_in, np.broadcast_shapes(np.shape(z_in), s.shape)).copy()
