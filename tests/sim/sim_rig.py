"""Helpers for the simulated-bench tests: DUTs, a rig of real pyvisa sessions, a reference sine fit."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from pyvisa.resources import MessageBasedResource

from sweeper.circuits import Loading, build_circuit
from sweeper.sim import SimBench

TERMINATION = {"read_termination": "\n", "write_termination": "\n"}

# DUTs with an ideal bench loading (no probe), so handbook formulas apply exactly.
R_LOWPASS_OHM = 1.6e3
C_LOWPASS_F = 100e-9
CORNER_HZ = 1.0 / (2 * math.pi * R_LOWPASS_OHM * C_LOWPASS_F)  # fc = 1 / (2 pi R C), handbook


def rc_lowpass(capacitance_f: float = C_LOWPASS_F):
    """First-order RC low-pass, R = 1.6 kOhm, referred to its input node."""
    return build_circuit("rc-lowpass", {"R": R_LOWPASS_OHM, "C": capacitance_f}, Loading())


def divider(r1_ohm: float, r2_ohm: float):
    """Resistive divider, R1 in series, R2 to ground."""
    return build_circuit("divider", {"R1": r1_ohm, "R2": r2_ohm}, Loading())


@dataclass
class Rig:
    """One simulated bench with all four instruments open."""

    bench: SimBench
    gen: MessageBasedResource
    scope_a: MessageBasedResource
    scope_b: MessageBasedResource
    meter: MessageBasedResource

    def drive(self, frequency_hz: float, amplitude_vpp: float, load: str = "HIZ", offset_v: float = 0.0) -> None:
        """Set the generator and switch it on, then let the DUT settle (1 s of simulated time)."""
        for command in (
            f"DRIVe:INTO {load}",
            f"STIMulus:TONE {frequency_hz!r}",
            f"STIMulus:SWINg {amplitude_vpp!r}",
            f"STIMulus:BIAS {offset_v!r}",
            "DRIVe:ENABle ON",
        ):
            self.gen.write(command)
        self.bench.clock.sleep(1.0)

    def capture_a(
        self, scale_v_per_div: tuple[float, float], sample_rate_hz: float, points: int, width_bits: int = 16
    ) -> tuple[np.ndarray, float]:
        """One CAPTure:TAKE acquisition on scope A, both lanes scaled by their legend: (volts (2, N), dt s)."""
        s = self.scope_a
        for ch, scale in zip((1, 2), scale_v_per_div):
            s.write(f"LANE{ch}:DIVision {scale!r}")
        s.write(f"CAPTure:RATE {sample_rate_hz!r}")
        s.write(f"CAPTure:LENGth {points}")
        s.write("CAPTure:ANCHor LANE1")
        s.write("CAPTure:TAKE")
        assert s.query("*OPC?") == "1"
        s.write(f"CAPTure:WIDTh {width_bits}")
        rows, dt = [], 0.0
        for ch in (1, 2):
            fields = s.query(f"LANE{ch}:LEGend?").split(",")
            assert int(fields[5]) == width_bits
            dt, per_count, reference, at_reference = (float(x) for x in fields[1:5])
            codes = s.query_binary_values(
                f"LANE{ch}:BLOCk?", datatype="h" if width_bits == 16 else "b", is_big_endian=False, container=np.array
            )
            assert len(codes) == int(fields[0])
            # DIALECTS.md: volts = (count - reference count) * volts per count + volts at reference
            rows.append((codes - reference) * per_count + at_reference)
        return np.array(rows), dt

    def capture_b(
        self, volts_per_div: tuple[float, float], seconds_per_div: float, record: int, position_div: float = 0.0
    ) -> tuple[np.ndarray, float, np.ndarray]:
        """One single-sequence acquisition on scope B: (volts (2, N), dt s, raw codes (2, N))."""
        s = self.scope_b
        for ch, scale in zip((1, 2), volts_per_div):
            s.write(f"VIEW{ch}:SENSitivity {scale!r}")
            s.write(f"VIEW{ch}:LIFT {position_div!r}")
        s.write(f"FRAMe:PITCh {seconds_per_div!r}")
        s.write(f"FRAMe:DOTS {record}")
        s.write("SNAP:MODE ONCE")
        s.write("SNAP:GO")
        assert s.query("*OPC?") == "1"
        s.write("LIST:RADix DECimal")
        rows, raw, dt = [], [], 0.0
        for ch in (1, 2):
            s.write(f"LIST:FROM VIEW{ch}")
            step = float(s.query("KEY:STEP?"))
            origin = float(s.query("KEY:ORIGin?"))
            base = float(s.query("KEY:BASE?"))
            dt = float(s.query("KEY:TICK?"))
            codes = np.array(s.query_ascii_values("LIST:CODes?", converter="d"))
            raw.append(codes)
            rows.append((codes - origin) * step + base)  # DIALECTS.md: volts = (code - ORIGin) * STEP + BASE
        return np.array(rows), dt, np.array(raw)


def fit_sine(volts: np.ndarray, dt_s: float, frequency_hz: float, harmonics: int = 1) -> tuple[np.ndarray, float]:
    """Least-squares sine fit at a known frequency (IEEE Std 1057 three-parameter fit, extended
    to harmonics), by numpy lstsq.

    Returns the peak phasors a_k + j b_k of v = sum_k (a_k sin(k w t) + b_k cos(k w t)) + c for
    k = 1..harmonics, and c (V); the angle of the ratio of two channels' fundamental phasors is
    their phase difference.
    """
    w_t = 2 * math.pi * frequency_hz * dt_s * np.arange(volts.shape[-1])
    columns = []
    for k in range(1, harmonics + 1):
        columns += [np.sin(k * w_t), np.cos(k * w_t)]
    model = np.column_stack(columns + [np.ones_like(w_t)])
    coefficients, *_ = np.linalg.lstsq(model, volts, rcond=None)
    phasors = coefficients[0:-1:2] + 1j * coefficients[1:-1:2]
    return phasors, float(coefficients[-1])


def fit_phasor(volts: np.ndarray, dt_s: float, frequency_hz: float) -> complex:
    """Fundamental peak phasor (V) of a three-parameter fit."""
    return complex(fit_sine(volts, dt_s, frequency_hz)[0][0])


def amplitude_sigma_v(noise_v: float, lsb_v: float, samples: int) -> float:
    """Standard deviation of a fitted amplitude: sqrt(2 / M) * sigma (Cramer-Rao bound, Andersson and
    Handel), sigma combining the white noise and the uniform quantisation noise lsb / sqrt(12)."""
    sigma = math.sqrt(noise_v**2 + lsb_v**2 / 12.0)
    return math.sqrt(2.0 / samples) * sigma
