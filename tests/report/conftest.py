"""Runs for the report tests, built from the handbook first-order RC low-pass.

H(f) = 1 / (1 + j 2 pi f R C), corner fc = 1 / (2 pi R C) (circuit handbook formula). The
frames carry every `Point` field; limits come from the worst-case spread of R and C plus an
allowance, and the verdicts from the project's own judge (`sweeper.verdict.judge_point`), so
nothing here hard-codes a verdict. Board, serials, stations and instruments are invented.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
import pytest

from sweeper.verdict import build_limits, judge_point, run_verdict
from sweeper.measure.point import POINT_FIELDS, Flag, Point, Verdict

R_OHM = 1.6e3
C_F = 100e-9
FC_HZ = 1.0 / (2.0 * np.pi * R_OHM * C_F)  # 994.7 Hz
START_HZ, STOP_HZ, POINTS = 10.0, 100e3, 60
RC_SPREAD = (0.99 * 0.95, 1.01 * 1.05)  # worst-case RC product: R 1 %, C 5 %

PLAN_YAML = "plan: 1\nname: rc-demo\n# invented demo plan for the report tests\n"


def rc_response(frequency_hz: np.ndarray, rc_s: float = R_OHM * C_F) -> tuple[np.ndarray, np.ndarray]:
    """Gain (dB) and phase (degrees) of the RC low-pass, straight from the handbook formula."""
    h = 1.0 / (1.0 + 1j * 2.0 * np.pi * np.asarray(frequency_hz) * rc_s)
    return 20.0 * np.log10(np.abs(h)), np.degrees(np.angle(h))


def rc_limits(frequency_hz: np.ndarray):
    """Worst-case band over the RC spread, widened by 0.1 dB / 1 degree (sweeper.verdict)."""
    model_g, model_p = rc_response(frequency_hz)
    corners = [rc_response(frequency_hz, R_OHM * C_F * s) for s in RC_SPREAD]
    g = np.stack([c[0] for c in corners] + [model_g])
    p = np.stack([c[1] for c in corners] + [model_p])
    band = (g.min(0), g.max(0), p.min(0), p.max(0))
    return build_limits(frequency_hz, model_g, model_p, band, allowance_gain_db=0.1, allowance_phase_deg=1.0)


def make_run(
    *,
    gain_offsets_db: dict[int, float] | None = None,
    noise_db: float = 0.0,
    seed: int = 3,
    serial: str = "DLF7-000123",
    run_id: str = "DLF7-000123-20250301T081500Z",
    points: int = POINTS,
    rule: str = "guarded",
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """A judged run of the RC low-pass: exact handbook values plus optional noise and offsets."""
    f = np.geomspace(START_HZ, STOP_HZ, points)
    limits = rc_limits(f)
    gain, phase = rc_response(f)
    rng = np.random.default_rng(seed)
    gain = gain + noise_db * rng.standard_normal(f.size)
    for i, offset in (gain_offsets_db or {}).items():
        gain[i] += offset
    u_gain, u_phase = 0.01, 0.1
    rows = []
    for i in range(f.size):
        judged = judge_point(gain[i], phase[i], u_gain, u_phase, limits.at(i), rule, 2.0)
        p = Point(
            index=i, frequency_hz=float(f[i]), gain_db=float(gain[i]), phase_deg=float(phase[i]),
            u_gain_db=u_gain, u_phase_deg=u_phase, amplitude_in_v=1.0, amplitude_out_v=float(10 ** (gain[i] / 20)),
            samples=4000, captures=1, flags=int(Flag.RETRIED) if i == 5 else 0, elapsed_s=0.25 * i,
            time_utc=f"2025-03-01T08:{15 + i // 60:02d}:{i % 60:02d}Z", **limits.at(i),
            verdict=int(judged["verdict"]), margin_gain_db=judged["margin_gain_db"],
            margin_phase_deg=judged["margin_phase_deg"],
        )
        rows.append({name: getattr(p, name) for name in POINT_FIELDS})
    frame = pd.DataFrame(rows, columns=list(POINT_FIELDS))
    verdict = run_verdict(frame["verdict"].to_numpy())
    metadata: dict[str, Any] = {
        "run_id": run_id,
        "plan_name": "rc-demo",
        "plan_yaml": PLAN_YAML,
        "plan_sha256": hashlib.sha256(PLAN_YAML.encode()).hexdigest(),
        "dut": {"board": "DLF-7 anti-alias stage", "serial": serial, "description": "RC low-pass, corner near 1 kHz"},
        "operator": "bench technician",
        "station": "STN-A3",
        "project": "data-logger rev C",
        "tags": ["demo", "anti-alias"],
        "instruments": [
            {"role": "source", "resource": "TCPIP0::sim-gen::5025::SOCKET", "idn": "Simbench,SG-10,SN0001,1.2",
             "driver": "sim-generator.yaml", "driver_sha256": "a" * 64},
            {"role": "scope", "resource": "TCPIP0::sim-scope-a::5025::SOCKET", "idn": "Simbench,SC-4,SN0042,3.1",
             "driver": "sim-scope-a.yaml", "driver_sha256": "b" * 64},
        ],
        "software": {"sweeper": "0.1.0", "numpy": np.__version__},
        "host": "bench-pc-3",
        "start_utc": "2025-03-01T08:15:00Z",
        "end_utc": "2025-03-01T08:16:02Z",
        "status": "complete",
        "verdict": Verdict(verdict).name,
        "decision_rule": rule,
        "coverage_factor": 2.0,
        "prediction": {k: np.asarray(v, dtype=float) for k, v in limits.as_arrays().items()},
    }
    return frame, metadata


@pytest.fixture
def run_factory() -> Callable[..., tuple[pd.DataFrame, dict[str, Any]]]:
    """Build RC low-pass runs: make_run(**options)."""
    return make_run


@pytest.fixture
def failing_run() -> tuple[pd.DataFrame, dict[str, Any]]:
    """An RC run with two points 1 dB low just above the corner (outside the band)."""
    return make_run(gain_offsets_db={34: -1.0, 35: -1.0}, noise_db=0.003)


@pytest.fixture
def passing_run() -> tuple[pd.DataFrame, dict[str, Any]]:
    """An RC run measured exactly on the model."""
    return make_run()
