"""Sample runs for the store tests (invented demo scenario), shared by the tests and crash_child.py.

Points are deterministic functions of their index so that a separate process can write them
and the test can check, bit for bit, what came back.
"""

from __future__ import annotations

import hashlib
import math
import struct
from pathlib import Path
from typing import Any

import numpy as np

from sweeper.instruments.roles import Identity
from sweeper.measure.point import POINT_FIELDS, Flag, Point, Verdict
from sweeper.store.fields import FIELD_KINDS

PLAN_PATH = Path(__file__).resolve().parents[2] / "configs" / "rc-antialias.yaml"


def f64(bits: int) -> float:
    """The float64 with these IEEE 754 bits."""
    return struct.unpack("<d", struct.pack("<Q", bits))[0]


def bits_of(value: float) -> int:
    """IEEE 754 bits of a float64."""
    return struct.unpack("<Q", struct.pack("<d", value))[0]


# IEEE 754 binary64 edge values (IEEE Std 754-2008 encodings; limits as numpy.finfo(float64) reports them).
SPECIAL_FLOATS: tuple[float, ...] = (
    math.nan,  # default quiet NaN, 0x7ff8000000000000
    f64(0xFFF8000000000000),  # negative quiet NaN (what x86 produces for inf - inf)
    f64(0x7FF8DEADBEEF0001),  # quiet NaN with a payload
    f64(0x7FF0000000000001),  # signalling NaN bit pattern
    math.inf,
    -math.inf,
    0.0,
    -0.0,
    5e-324,  # smallest subnormal, 0x0000000000000001
    -1e-310,  # a negative subnormal
    2.2250738585072014e-308,  # smallest normal
    1.7976931348623157e308,  # largest finite
    0.1,  # not exactly representable in binary
    1.0 / 3.0,
    6.02214076e23,
    -123456.789e-300,
)

FLOAT_FIELDS = [n for n in POINT_FIELDS if FIELD_KINDS[n] is float]
INT_FIELDS = [n for n in POINT_FIELDS if FIELD_KINDS[n] is int]


def sample_point(i: int) -> Point:
    """Point i: special floats and arbitrary float64 bit patterns (any exponent, NaN payloads), large ints."""
    rng = np.random.default_rng(1000 + i)
    values: dict[str, Any] = {"index": i}
    for k, name in enumerate(FLOAT_FIELDS):
        if (i + k) % 3 == 0:
            values[name] = SPECIAL_FLOATS[(7 * i + k) % len(SPECIAL_FLOATS)]
        else:
            values[name] = f64(int(rng.integers(0, 2**64, dtype=np.uint64)))
    values["samples"] = int(rng.integers(-(2**62), 2**62))
    values["captures"] = i % 9
    values["flags"] = Flag(i % 128)
    values["verdict"] = Verdict(i % 5)
    values["time_utc"] = f"2024-05-01T12:{i // 60 % 60:02d}:{i % 60:02d}.250000Z"
    return Point(**values)


def planned_frequency_hz() -> np.ndarray:
    """Planned grid of the demo plan: 10 Hz to 100 kHz, 5 points per decade, Hz."""
    return np.geomspace(10.0, 100e3, 21)


def rc_prediction(frequency_hz: np.ndarray) -> dict[str, np.ndarray]:
    """First-order RC low-pass, R = 1.6 kOhm, C = 100 nF (handbook: H = 1/(1 + j w R C)),
    with an invented +-0.5 dB / +-3 degree band; a NaN limit marks 'no limit here'."""
    h = 1.0 / (1.0 + 2j * np.pi * frequency_hz * 1.6e3 * 100e-9)
    gain_db = 20.0 * np.log10(np.abs(h))
    phase_deg = np.degrees(np.angle(h))
    gain_hi_db = gain_db + 0.5
    gain_hi_db[0] = math.nan
    return {
        "model_gain_db": gain_db,
        "model_phase_deg": phase_deg,
        "gain_lo_db": gain_db - 0.5,
        "gain_hi_db": gain_hi_db,
        "phase_lo_deg": phase_deg - 3.0,
        "phase_hi_deg": phase_deg + 3.0,
    }


def identities() -> list[Identity]:
    """The simulated bench of the demo plan (IDN strings from sweeper/sim/DIALECTS.md)."""
    return [
        Identity("source", "TCPIP0::sim-gen::5025::SOCKET", "Sweeper Sim,STIM-1,SIM-ST-0001,1.0",
                 "sim-generator.yaml", hashlib.sha256(b"invented generator driver").hexdigest()),
        Identity("scope", "TCPIP0::sim-scope-a::5025::SOCKET", "Sweeper Sim,CAP-2A,SIM-CA-0001,1.0",
                 "sim-scope-a.yaml", hashlib.sha256(b"invented scope driver").hexdigest()),
    ]


def sample_metadata(run_id: str = "STN-A3-20240501-0007") -> dict[str, Any]:
    """Metadata of an invented run of the demo plan; the DUT serial has non-ASCII characters."""
    return {
        "run_id": run_id,
        "campaign_id": "DLF7-revC-qual",
        "plan_name": "rc-antialias",
        "plan_yaml": PLAN_PATH.read_text(encoding="utf-8"),
        "dut": {
            "board": "DLF-7 anti-alias stage",
            "serial": "DLF7-000123-Ωµ-ü",
            "description": "RC low-pass, fc ≈ 1 kHz",
        },
        "instruments": identities(),
        "station": "STN-A3",
        "operator": "bench technician",
        "project": "data-logger rev C",
        "tags": ["demo", "anti-alias", "Prüfung"],
        "mode": "waveform",
    }


def assert_points_identical(got: list[Point], want: list[Point]) -> None:
    """Every field equal; floats compared by their 64 bits (NaN payload and sign of zero included)."""
    assert len(got) == len(want)
    for g, w in zip(got, want):
        for name in POINT_FIELDS:
            a, b = getattr(g, name), getattr(w, name)
            if FIELD_KINDS[name] is float:
                assert bits_of(a) == bits_of(b), (w.index, name, a, b)
            else:
                assert a == b and type(a) is FIELD_KINDS[name], (w.index, name, a, b)
