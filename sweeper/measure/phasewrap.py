"""Phase wrapping and unwrapping in degrees (pure numerics)."""

from __future__ import annotations

from typing import overload

import numpy as np
from numpy.typing import ArrayLike


@overload
def wrap_phase_deg(phase_deg: float) -> float: ...
@overload
def wrap_phase_deg(phase_deg: np.ndarray) -> np.ndarray: ...
def wrap_phase_deg(phase_deg: ArrayLike) -> float | np.ndarray:
    """Wrap phase (degrees) into (-180, 180]: 180 stays 180 and -180 becomes 180.

    Element-wise on arrays; a scalar in gives a float out.
    """
    values = np.asarray(phase_deg, dtype=np.float64)
    wrapped = values - 360.0 * np.ceil((values - 180.0) / 360.0)
    wrapped = np.where(wrapped <= -180.0, wrapped + 360.0, wrapped)
    wrapped = np.where(wrapped > 180.0, wrapped - 360.0, wrapped)
    if wrapped.ndim == 0:
        return float(wrapped)
    return wrapped


def unwrap_phase_deg(phase_deg: ArrayLike, axis: int = -1) -> np.ndarray:
    """Unwrap a sequence of phases (degrees) for display across a sweep: wherever two
    neighbours jump by more than 180 degrees, add the multiple of 360 that removes the jump.
    The first value is kept as given."""
    values = np.asarray(phase_deg, dtype=np.float64)
    return np.unwrap(values, period=360.0, axis=axis)
