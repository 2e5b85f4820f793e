"""Derived figures from measured points (sweeper.analysis.figures).

Outside references:
* Circuit handbook, first-order RC low-pass H = 1/(1 + j w R C): corner fc = 1/(2 pi R C),
  |H(fc)| = -3.01 dB, phase(fc) = -45 degrees, roll-off -20 dB per decade above fc.
  First-order CR high-pass H = j w R C/(1 + j w R C): same fc, phase(fc) = +45 degrees,
  +20 dB per decade below fc.
* Series RLC band-pass (output across R): peak at f0 = 1/(2 pi sqrt(L C)) (handbook).
* scipy.signal.freqs evaluates the high-pass, band-pass and notch transfer functions
  independently of our code.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import signal

from sweeper.analysis.figures import (
    HALF_POWER_DB,
    derived_figures,
    difference_to_reference,
    figures_from_arrays,
    format_hz,
    response_feature,
    unwrap_deg,
)

R_OHM, C_F = 1.6e3, 100e-9
FC_HZ = 1.0 / (2 * math.pi * R_OHM * C_F)  # handbook corner, 994.7 Hz


def _frame(f: np.ndarray, h: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame({"frequency_hz": f, "gain_db": 20 * np.log10(np.abs(h)), "phase_deg": np.degrees(np.angle(h))})


def _rc_lowpass(f: np.ndarray) -> np.ndarray:
    return 1.0 / (1.0 + 1j * 2 * np.pi * f * R_OHM * C_F)


def test_rc_lowpass_figures_match_handbook() -> None:
    # 60 points, 10 Hz to 100 kHz: 4/59 = 0.0678 decade between points.
    f = np.geomspace(10.0, 100e3, 60)
    figs = derived_figures(_frame(f, _rc_lowpass(f)))
    # Tolerance of the -3 dB frequency: linear interpolation of g(x) = -10 log10(1 + 10^(2u)),
    # u = log10(f/fc), errs by at most h^2/8 max|g''| with h = 0.0678 decade and
    # max|g''| = 40 ln(10)/4 = 23.0 dB/decade^2 (at u = 0): 0.0132 dB. The slope there is
    # -10 dB/decade, so the crossing moves by at most 0.00132 decade = 0.31 % in frequency;
    # 0.5 % leaves room for the passband reference (the 10 Hz point sits 0.0004 dB below 0 dB).
    assert figs["f_3db_hz"] == pytest.approx(FC_HZ, rel=0.005)
    # Roll-off: fitted over the points at least 20 dB down, i.e. from one decade above fc
    # to two; the local slope there is -20 * 10^(2u)/(1 + 10^(2u)), between -19.80 (u = 1) and
    # -20 dB/decade, so a least-squares line lies within 0.2 dB/decade of the handbook -20.
    assert figs["rolloff_db_per_decade"] == pytest.approx(-20.0, abs=0.2)
    # Phase at fc: the handbook -45 degrees. Interpolation error of -atan(10^u) over
    # 0.0678 decade is at most h^2/8 * 76 deg/decade^2 = 0.044 degree, plus the slope at fc
    # (66 deg/decade) times the 0.00132-decade corner error = 0.09 degree; 1 degree is ample.
    assert figs["phase_at_f_3db_deg"] == pytest.approx(-45.0, abs=1.0)
    # Passband and peak: the lowest point, 0 dB within 0.001 dB (|H(10 Hz)| = -0.0004 dB).
    assert figs["passband_gain_db"] == pytest.approx(0.0, abs=1e-3)
    assert figs["peak_frequency_hz"] == f[0]
    assert figs["peak_gain_db"] == figs["passband_gain_db"]


def test_cr_highpass_figures_against_scipy_freqs() -> None:
    # H(s) = s R C / (1 + s R C): b = [RC, 0], a = [RC, 1], evaluated by scipy.signal.freqs.
    f = np.geomspace(10.0, 100e3, 60)
    _, h = signal.freqs([R_OHM * C_F, 0.0], [R_OHM * C_F, 1.0], worN=2 * np.pi * f)
    figs = derived_figures(_frame(f, h))
    # Same interpolation bounds as the low-pass (mirror image in log f).
    assert figs["f_3db_hz"] == pytest.approx(FC_HZ, rel=0.005)
    assert figs["rolloff_db_per_decade"] == pytest.approx(20.0, abs=0.2)
    assert figs["phase_at_f_3db_deg"] == pytest.approx(45.0, abs=1.0)
    assert figs["passband_gain_db"] == pytest.approx(0.0, abs=1e-3)


def test_points_in_any_order_and_unmeasured_rows_are_ignored() -> None:
    f = np.geomspace(10.0, 100e3, 60)
    frame = _frame(f, _rc_lowpass(f))
    shuffled = frame.sample(frac=1.0, random_state=4).reset_index(drop=True)
    shuffled.loc[7, "gain_db"] = np.nan  # a skipped point
    expected = figures_from_arrays(f, frame["gain_db"].to_numpy(), frame["phase_deg"].to_numpy())
    got = derived_figures(shuffled)
    # One missing point away from fc changes nothing but possibly the fit; rel 1e-3 catches order bugs.
    assert got["f_3db_hz"] == pytest.approx(expected["f_3db_hz"], rel=1e-3)
    assert got["rolloff_db_per_decade"] == pytest.approx(expected["rolloff_db_per_decade"], rel=1e-3)


def test_not_crossed_gives_nan() -> None:
    f = np.geomspace(10.0, 200.0, 20)  # stops a decade below fc: the gain never falls 3 dB
    figs = derived_figures(_frame(f, _rc_lowpass(f)))
    assert math.isnan(figs["f_3db_hz"])
    assert math.isnan(figs["phase_at_f_3db_deg"])
    assert math.isnan(figs["rolloff_db_per_decade"])
    assert not math.isnan(figs["peak_gain_db"])


def test_too_few_points_give_nan() -> None:
    figs = derived_figures(pd.DataFrame({"frequency_hz": [1e3], "gain_db": [-1.0], "phase_deg": [-10.0]}))
    assert all(math.isnan(v) for v in figs.values())


def test_half_power_level_is_ten_log_half() -> None:
    # Half power: 10 log10(1/2) = -3.0103 dB (handbook value -3.01 dB).
    assert HALF_POWER_DB == pytest.approx(-3.0103, abs=1e-4)


def test_phase_at_corner_survives_a_wrapped_third_order_response() -> None:
    # Third-order Butterworth low-pass (scipy.signal.butter, analog): phase runs to -270 degrees,
    # so the wrapped points jump from -180 to +180. At its -3 dB frequency (= the design corner,
    # a Butterworth property) the phase is -135 degrees (3 poles x -45, from the pole angles).
    wc = 2 * np.pi * 1e3
    b, a = signal.butter(3, wc, analog=True)
    f = np.geomspace(10.0, 100e3, 80)
    _, h = signal.freqs(b, a, worN=2 * np.pi * f)
    figs = derived_figures(_frame(f, h))
    # Spacing h = 4/79 = 0.0506 decade. For g = -10 log10(1 + 10^(2 n u)), max|g''| =
    # 10 n^2 ln(10) = 207 dB/decade^2 at n = 3, so linear interpolation errs by at most
    # h^2/8 * 207 = 0.066 dB; over the -30 dB/decade slope at the corner that is 0.0022 decade
    # = 0.51 % in frequency: 1 % allowed. The phase falls 330 degrees/decade at the corner and
    # curves by at most 770 degrees/decade^2 near it (both computed numerically here from
    # scipy.signal.freqs), so 0.0022 * 330 + h^2/8 * 770 = 0.97 degree at most: 2 degrees allowed.
    assert figs["f_3db_hz"] == pytest.approx(1e3, rel=0.01)
    assert figs["phase_at_f_3db_deg"] == pytest.approx(-135.0, abs=2.0)
    # -60 dB/decade well past the corner (third order), within 1 dB/decade: at two decades
    # above the corner the asymptote is reached to 20 log10(1 + 1e-12)-level accuracy.
    assert figs["rolloff_db_per_decade"] == pytest.approx(-60.0, abs=1.0)


def test_response_feature_corner_peak_and_dip() -> None:
    f = np.geomspace(10.0, 100e3, 400)
    corner = response_feature(f, 20 * np.log10(np.abs(_rc_lowpass(f))))
    assert corner is not None and corner.kind == "corner"
    # 400 points: 0.01 decade spacing, interpolation error far under 0.1 %.
    assert corner.frequency_hz == pytest.approx(FC_HZ, rel=1e-3)
    assert corner.gain_db == pytest.approx(HALF_POWER_DB, abs=0.01)

    r, l_h, c = 10.0, 10e-3, 100e-9
    f0 = 1.0 / (2 * math.pi * math.sqrt(l_h * c))  # handbook: 5.03 kHz
    # Band-pass across R: H = (R/L) s / (s^2 + (R/L) s + 1/(LC)).
    _, h = signal.freqs([r / l_h, 0.0], [1.0, r / l_h, 1.0 / (l_h * c)], worN=2 * np.pi * f)
    peak = response_feature(f, 20 * np.log10(np.abs(h)))
    assert peak is not None and peak.kind == "peak"
    # The peak is taken at the nearest grid point: within one spacing (10^0.01 = 2.3 %).
    assert peak.frequency_hz == pytest.approx(f0, rel=0.024)
    # Notch across L + C with a small inductor resistance: H = (s^2 + (RL/L) s + 1/LC) / (...)
    rl = 1.0
    _, h = signal.freqs([1.0, rl / l_h, 1.0 / (l_h * c)], [1.0, (r + rl) / l_h, 1.0 / (l_h * c)], worN=2 * np.pi * f)
    dip = response_feature(f, 20 * np.log10(np.abs(h)))
    assert dip is not None and dip.kind == "dip"
    assert dip.frequency_hz == pytest.approx(f0, rel=0.024)
    # A flat divider has nothing to mark.
    assert response_feature(f, np.full(f.size, -6.02)) is None


def test_difference_to_reference() -> None:
    f = np.geomspace(10.0, 100e3, 60)
    g = 20 * np.log10(np.abs(_rc_lowpass(f)))
    p = np.degrees(np.angle(_rc_lowpass(f)))
    d_gain, d_phase = difference_to_reference(f, g + 0.5, p + 2.0, f, g, p)
    # Same frequencies: interpolation returns the reference values, so only rounding remains.
    np.testing.assert_allclose(d_gain, 0.5, atol=1e-12)
    np.testing.assert_allclose(d_phase, 2.0, atol=1e-12)
    # Outside the reference's span: NaN, never extrapolated.
    d_gain, _ = difference_to_reference(np.array([1.0, 1e6]), np.zeros(2), np.zeros(2), f, g, p)
    assert np.isnan(d_gain).all()
    # Phase difference is wrapped: 179 - (-179) is -2 degrees, not 358.
    _, d_phase = difference_to_reference(np.array([100.0]), np.zeros(1), np.array([179.0]),
                                         np.array([10.0, 1e3]), np.zeros(2), np.array([-179.0, -179.0]))
    assert d_phase[0] == pytest.approx(-2.0, abs=1e-9)


def test_unwrap_keeps_nan_in_place() -> None:
    out = unwrap_deg(np.array([170.0, np.nan, -170.0, -150.0]))
    np.testing.assert_allclose(out, [170.0, np.nan, 190.0, 210.0])


@pytest.mark.parametrize(
    "value, text", [(994.7183, "994.7 Hz"), (1592.0, "1.592 kHz"), (2.5e6, "2.5 MHz"), (float("nan"), "n/a")]
)
def test_format_hz(value: float, text: str) -> None:
    assert format_hz(value) == text
