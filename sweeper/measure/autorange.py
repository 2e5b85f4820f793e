"""Vertical ranges: where a point starts and how far a range is from a good fill.

Shared by every scope mode (waveform captures and the scope's own readings).
"""

from __future__ import annotations

import math
from collections.abc import Callable

from sweeper.measure.settings import EngineSettings, EngineState

#: Fraction of the vertical span the autorange aims the signal's peak-to-peak (plus offset) at.
RANGE_FILL = 0.9
#: Below this fraction of the span the signal is "too small" and a smaller range is tried.
RANGE_SMALL = 0.35
#: Autorange re-captures per acquisition before giving up and flagging.
AUTORANGE_TRIES = 6


def expected_input_amplitude_v(settings: EngineSettings) -> float:
    """Upper estimate of the DUT input peak amplitude, V.

    With the source set for a 50 Ohm load and a high-impedance DUT the real voltage is up to
    twice the displayed one (common practice), so autorange starts from that.
    """
    factor = 2.0 if settings.load_ohm is not None else 1.0
    return settings.amplitude_vpp / 2 * factor


def span_for(amplitude_v: float, offset_v: float) -> float:
    """Vertical full-scale span (V) that puts a sine of this peak amplitude at RANGE_FILL."""
    return 2.0 * (abs(amplitude_v) + abs(offset_v)) / RANGE_FILL


def first_spans(
    f: float, settings: EngineSettings, state: EngineState, model_response: Callable[[float], complex]
) -> list[float]:
    """Spans (V) to start a point at f (Hz) from: the previous point's amplitudes moved by the
    model's change between the two frequencies, or the stimulus and the model's gain at first."""
    if not math.isnan(state.last_frequency_hz) and all(a > 0 for a in state.last_amplitudes_v):
        a_in, a_out = state.last_amplitudes_v
        h_prev = abs(model_response(state.last_frequency_hz))
        h_now = abs(model_response(f))
        if h_prev > 0 and math.isfinite(h_now / h_prev):
            a_out = a_out * h_now / h_prev
        return [span_for(a_in, settings.offset_v), span_for(a_out, settings.offset_v)]
    a_in = expected_input_amplitude_v(settings)
    a_out = a_in * abs(model_response(f))
    return [span_for(a_in, settings.offset_v), span_for(max(a_out, 1e-6), settings.offset_v)]


def set_first_ranges(scope, f: float, settings: EngineSettings, state: EngineState,
                     model_response: Callable[[float], complex]) -> None:
    """Send the starting ranges of a point (every point when autoranging, else only once)."""
    if settings.autorange or any(math.isnan(s) for s in state.spans_v):
        for ch, span in enumerate(first_spans(f, settings, state, model_response)):
            if settings.autorange or math.isnan(state.spans_v[ch]):
                state.spans_v[ch] = scope.set_range(ch + 1, span)
