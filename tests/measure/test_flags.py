"""Flags of a point: distortion only when the harmonics stand above the noise.

The LC demo plan (configs/lc-supply.yaml) has output SNRs down to about 10 dB above its
resonance, where THD computed on noise alone used to exceed -40 dB. Reference for "present":
the simulated source's injected 2nd and 3rd harmonics (bench.simulation.distortion), each at the
given fraction of the fundamental, so THD = 20 log10(sqrt(2) x 2 %) = -31 dB at the input.
"""

from __future__ import annotations

from pathlib import Path

from sweeper.measure.point import Flag
from sweeper.plan import load_plan_text
from sweeper.run.runner import sweep_only
from sweeper.run.spec import run_spec

REPO = Path(__file__).resolve().parents[2]


def _lc_points(tmp_path: Path, distortion: str):
    text = (REPO / "configs" / "lc-supply.yaml").read_text()
    text = text.replace("    noise: 0.2 mV\n", f"    noise: 0.2 mV\n    distortion: {distortion}\n    transient: false\n")
    text = text.replace("samples: 2000, percentiles", "samples: 200, percentiles")  # the band is not under test
    return sweep_only(run_spec(load_plan_text(text, str(tmp_path / "lc.yaml")))).points


def test_lc_demo_without_distortion_has_no_distortion_flags(tmp_path: Path):
    points = _lc_points(tmp_path, "0 %")
    # Non-vacuous: some points do have a low output SNR (where the old THD-on-noise flag fired).
    assert min(p.snr_out_db for p in points) < 20.0
    assert not [p.frequency_hz for p in points if p.flags & Flag.HIGH_DISTORTION]


def test_lc_demo_with_2_percent_distortion_is_flagged(tmp_path: Path):
    points = _lc_points(tmp_path, "2 %")
    flagged = [p for p in points if p.flags & Flag.HIGH_DISTORTION]
    # The input channel sees the source's harmonics at every point: every point flagged.
    assert len(flagged) == len(points)
