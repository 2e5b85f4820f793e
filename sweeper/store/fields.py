"""Point fields as the store sees them: one storage kind (int, float or str) per `Point` field.

Shared by the journal (JSON records) and the run file (HDF5 datasets) so that both
normalise a point the same way and read it back the same way.
"""

from __future__ import annotations

import dataclasses
import operator
import typing
from typing import Any

from sweeper.measure.point import POINT_FIELDS, Point

_HINTS = typing.get_type_hints(Point)

FIELD_KINDS: dict[str, type] = {name: _HINTS[name] for name in POINT_FIELDS}
"""Storage kind of every Point field, in POINT_FIELDS order: int, float or str."""

if set(FIELD_KINDS.values()) - {int, float, str}:  # pragma: no cover - guards a future Point change
    raise TypeError(f"Point has a field the store cannot hold: {FIELD_KINDS}")

FIELD_DEFAULTS: dict[str, Any] = {
    f.name: f.default for f in dataclasses.fields(Point) if f.default is not dataclasses.MISSING
}
"""Default value of every Point field that has one."""


class PointValueError(ValueError):
    """A point field holds a value of the wrong kind."""


def coerce_field(name: str, value: Any) -> int | float | str:
    """One field value as its plain storage kind (int, float or str); raises PointValueError."""
    kind = FIELD_KINDS[name]
    if isinstance(value, bool):
        raise PointValueError(f"{name}: expected {kind.__name__}, got a bool")
    try:
        if kind is int:
            return operator.index(value)
        if kind is float:
            if isinstance(value, str):
                raise TypeError
            return float(value)
    except (TypeError, ValueError):
        raise PointValueError(f"{name}: expected {kind.__name__}, got {value!r}") from None
    if not isinstance(value, str):
        raise PointValueError(f"{name}: expected str, got {value!r}")
    return str(value)


def point_values(point: Point) -> dict[str, int | float | str]:
    """The fields of a point as plain Python values in POINT_FIELDS order (enums become ints)."""
    return {name: coerce_field(name, getattr(point, name)) for name in POINT_FIELDS}


def point_from_values(values: dict[str, Any]) -> Point:
    """Build a Point from stored values; missing fields with a default take it.

    Raises PointValueError on an unknown field, a missing required field or a wrong kind.
    """
    unknown = sorted(set(values) - set(FIELD_KINDS))
    if unknown:
        raise PointValueError(f"unknown point field(s): {', '.join(unknown)}")
    missing = [n for n in POINT_FIELDS if n not in values and n not in FIELD_DEFAULTS]
    if missing:
        raise PointValueError(f"missing point field(s): {', '.join(missing)}")
    return Point(**{n: coerce_field(n, values[n]) if n in values else FIELD_DEFAULTS[n] for n in POINT_FIELDS})
