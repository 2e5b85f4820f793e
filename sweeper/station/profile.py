"""Station profile files: read with the shared located YAML reader, every problem located.

A station file names the station, its instruments by role (resource, driver file, VISA backend,
timeout), the output folder, the catalog path and how the operator is identified. A plan names
roles only; `bench_with_station` gives the plan's bench the station's instruments, so the plan's
text (and SHA-256) is the same at every station. The station file has a SHA-256 of its own.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator
from yaml.nodes import MappingNode

from sweeper.located import LocatedError, Problem, YamlTree, problems_from_errors, read_text_file, sorted_unique
from sweeper.plan.schema import Bench, InstrumentRef

STATION_ENV = "SWEEPER_STATION"  # environment variable naming a station file


class StationError(LocatedError):
    """A station file that cannot be used; carries every problem found."""


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)


class InstrumentSlot(_Section):
    """One instrument of the station: VISA resource, driver file, backend, timeout (s)."""

    resource: str = Field(min_length=1)
    driver: str = Field(min_length=1)
    backend: str | None = None  # VISA library: '@py', a path, or None for the plan's/default
    timeout_s: float = Field(5.0, gt=0.0, alias="timeout")


class Operator(_Section):
    """How the operator is identified: asked at the start, taken from the login, or fixed."""

    identify: Literal["ask", "login", "fixed"] = "login"
    name: str = ""


class Station(_Section):
    """A validated station file."""

    station: Literal[1] = 1  # format version
    name: str = Field(min_length=1)
    instruments: dict[Literal["source", "scope", "meter"], InstrumentSlot]
    output: str = "runs"
    catalog: str | None = None
    operator: Operator = Field(default_factory=Operator)
    calibration_policy: Literal["refuse", "flag"] = "refuse"

    @field_validator("instruments")
    @classmethod
    def _some(cls, value: dict) -> dict:
        if not value:
            raise ValueError("at least one instrument (source, scope or meter)")
        return value

    @property
    def sha256(self) -> str:
        """SHA-256 (hex) of the station file's bytes as read."""
        return self._sha256

    @property
    def text(self) -> str:
        """The station file's text, verbatim."""
        return self._text

    @property
    def path(self) -> Path | None:
        return self._path


def load_station_text(text: str, filename: str = "<station>") -> Station:
    """Validate a station file given as text; raises StationError with every problem located."""
    tree = YamlTree(filename, text)
    try:
        root = tree.compose()
        if root is None or not isinstance(root, MappingNode):
            line = 1 if root is None else root.start_mark.line + 1
            raise StationError([Problem(filename, line, 1, (), "not_a_mapping", "" if root is None else tree.written(root),
                                        "a mapping", "a station file is a mapping (station: 1, name: ..., instruments: ...)")])
        data = tree.build()
    except StationError:
        raise
    except LocatedError as exc:
        raise StationError(exc.problems) from None
    problems = list(tree.problems)
    station = None
    try:
        station = Station.model_validate(data)
    except ValidationError as exc:
        problems.extend(problems_from_errors(exc.errors(), tree, Station))
    if problems or station is None:
        raise StationError(sorted_unique(problems))
    station._text = text
    station._sha256 = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()
    station._path = None
    return station


def load_station(path: str | Path) -> Station:
    """Read and validate a station file; raises StationError listing every problem."""
    path = Path(path)
    data, text = read_text_file(path, "station file", StationError)
    station = load_station_text(text, str(path))
    station._sha256 = hashlib.sha256(data).hexdigest()
    station._path = path
    return station


def bench_with_station(bench: Bench, station: Station) -> Bench:
    """The plan's bench with the station's instruments: a VISA bench whose roles come from the
    station (driver paths relative to the station file's folder). The plan is not changed."""
    base = station.path.parent if station.path is not None else Path(".")
    refs = {}
    backend = bench.visa_library
    for role, slot in station.instruments.items():
        driver = slot.driver if Path(slot.driver).is_absolute() else str(base / slot.driver)
        refs[role] = InstrumentRef(resource=slot.resource, driver=driver, timeout_s=slot.timeout_s)
        backend = slot.backend or backend
    return bench.model_copy(update={"kind": "visa", "visa_library": backend, **refs})
