"""One measured point of a sweep: the record that flows from the engine to the store and the judge.

Field names carry their units by suffix (_hz, _db, _deg, _v, _s); the run file derives each
dataset's `units` attribute from that suffix (see `units_of`).
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, fields


class Flag(enum.IntFlag):
    """Why a point deserves a second look; stored as an integer bit mask."""

    NONE = 0
    CLIPPED = 1  # a channel still clipped after autorange gave up
    LOW_SIGNAL = 2  # a channel used less than the useful part of its smallest range, or SNR too low
    HIGH_DISTORTION = 4  # THD above the plan's threshold
    RETRIED = 8  # re-captured after clipping, low signal or a fault
    UNCERTAINTY_MISSED = 16  # target uncertainty not met within the averaging limit
    FAULT = 32  # an instrument fault was recovered while measuring this point
    SKIPPED = 64  # not measured: the fault policy said skip


class Verdict(enum.IntEnum):
    """Per-point and per-run judgement (ILAC-G8 style; see sweeper.verdict)."""

    NOT_JUDGED = 0
    PASS = 1  # inside the limits (by at least the expanded uncertainty under the guarded rule)
    PASS_UNCERTAIN = 2  # inside the limits by less than the expanded uncertainty (guarded rule)
    FAIL_UNCERTAIN = 3  # outside the limits by less than the expanded uncertainty (guarded rule)
    FAIL = 4  # outside the limits (by at least the expanded uncertainty under the guarded rule)


@dataclass(frozen=True)
class Measurement:
    """What measuring one frequency gave (a mode's result), before the engine adds where and
    when it was measured and the run judges it: the measured fields of a Point, same units."""

    gain_db: float
    phase_deg: float
    u_gain_db: float  # standard uncertainty (k = 1)
    u_phase_deg: float
    amplitude_in_v: float
    amplitude_out_v: float
    thd_in_db: float = float("nan")
    thd_out_db: float = float("nan")
    snr_in_db: float = float("nan")
    snr_out_db: float = float("nan")
    range_in_v: float = float("nan")
    range_out_v: float = float("nan")
    sample_rate_hz: float = float("nan")
    samples: int = 0
    captures: int = 0
    flags: int = 0
    dof_eff_gain: float = float("inf")  # effective degrees of freedom of u_gain_db (Welch-Satterthwaite)
    dof_eff_phase: float = float("inf")
    u_gain_type_a_db: float = float("nan")  # budget: type A (fit residuals, scatter between averages)
    u_phase_type_a_deg: float = float("nan")
    u_gain_converter_db: float = float("nan")  # budget: type B, converter quantisation and nonlinearity
    u_phase_converter_deg: float = float("nan")
    u_gain_reading_db: float = float("nan")  # budget: type B, residual scope-reading bias after correction
    u_gain_frequency_db: float = float("nan")  # budget: type B, frequency error times the model's slope
    u_phase_frequency_deg: float = float("nan")

    def fields(self) -> dict[str, float | int]:
        """The measured fields by name (the Point fields they fill)."""
        return {name: getattr(self, name) for name in MEASUREMENT_FIELDS}


@dataclass
class Point:
    """A measured frequency point with its uncertainties, diagnostics and judgement."""

    index: int
    frequency_hz: float
    gain_db: float
    phase_deg: float
    u_gain_db: float  # standard uncertainty (k = 1)
    u_phase_deg: float
    amplitude_in_v: float  # fitted peak amplitude, channel 1
    amplitude_out_v: float
    thd_in_db: float = float("nan")
    thd_out_db: float = float("nan")
    snr_in_db: float = float("nan")
    snr_out_db: float = float("nan")
    range_in_v: float = float("nan")  # vertical full-scale span used, channel 1
    range_out_v: float = float("nan")
    sample_rate_hz: float = float("nan")
    samples: int = 0
    captures: int = 0  # acquisitions averaged into this point
    flags: int = 0  # Flag bit mask
    dof_eff_gain: float = float("inf")  # effective degrees of freedom of u_gain_db (Welch-Satterthwaite)
    dof_eff_phase: float = float("inf")
    u_gain_type_a_db: float = float("nan")  # budget components, standard uncertainties (k = 1)
    u_phase_type_a_deg: float = float("nan")
    u_gain_converter_db: float = float("nan")
    u_phase_converter_deg: float = float("nan")
    u_gain_reading_db: float = float("nan")
    u_gain_frequency_db: float = float("nan")
    u_phase_frequency_deg: float = float("nan")
    elapsed_s: float = 0.0  # since the run started (bench clock)
    time_utc: str = ""  # ISO 8601, when the point was finished
    model_gain_db: float = float("nan")
    model_phase_deg: float = float("nan")
    gain_lo_db: float = float("nan")
    gain_hi_db: float = float("nan")
    phase_lo_deg: float = float("nan")
    phase_hi_deg: float = float("nan")
    verdict: int = 0  # Verdict
    margin_gain_db: float = float("nan")  # distance to the nearest gain limit, negative when outside
    margin_phase_deg: float = float("nan")
    k_gain: float = float("nan")  # coverage factor of expanded_u_gain_db (Student's t at nu_eff, or the plan's k)
    k_phase: float = float("nan")
    expanded_u_gain_db: float = float("nan")  # U = k u, used by the guarded decision rule
    expanded_u_phase_deg: float = float("nan")


POINT_FIELDS: tuple[str, ...] = tuple(f.name for f in fields(Point))
MEASUREMENT_FIELDS: tuple[str, ...] = tuple(f.name for f in fields(Measurement))

_SUFFIX_UNITS = {"_hz": "Hz", "_db": "dB", "_deg": "degree", "_v": "V", "_s": "s", "_utc": "ISO 8601 UTC"}


def units_of(name: str) -> str:
    """Units of a field or column from its name suffix; '' when dimensionless."""
    for suffix, unit in _SUFFIX_UNITS.items():
        if name.endswith(suffix):
            return unit
    return ""
