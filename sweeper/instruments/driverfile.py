"""Driver files: one YAML file per instrument dialect, validated with located errors.

A driver file tells the generic interpreter (sweeper.instruments.interpreter) everything it
needs about one instrument: how to recognise it from *IDN?, how to talk to it (terminations,
timeout), what to send once after opening, what each role operation sends and how to read
the answers, what the instrument can do (limits), and how waveform codes become volts.
See drivers/*.yaml for worked examples; the format is described there and below.

Every problem is reported at once with its place in the file:
``sim-scope-a.yaml:14:5: scope.vertical.divisions: given 'eight'; expected an integer``.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, PlainValidator, ValidationError, field_validator, model_validator

from sweeper.instruments.template import TemplateError, parse_template, placeholders
from sweeper.located import (
    Finding,
    LocatedError,
    Problem,
    RuleError,
    YamlTree,
    problems_from_errors,
    raise_located,
    read_text_file,
    sorted_unique,
)

FORMAT_VERSION = 1

# ---------------------------------------------------------------------------------------------
# Answer parsers


PARSER_WORDS = ("text", "float", "int", "floats", "ints")
SAMPLE_TYPES = ("int8", "int16", "float32")
BYTE_ORDERS = ("little", "big")
_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_PARSE_EXPECTED = (
    "one of text, float, int, floats, ints, {block: int8|int16|float32, byte_order: little|big} "
    "or {fields: [name, ...]}"
)


@dataclass(frozen=True)
class ParseSpec:
    """How to read one query's answer.

    kind: 'text' | 'float' | 'int' | 'floats' (comma-separated numbers) | 'ints' (comma-separated
    integers) | 'block' (IEEE 488.2 definite-length block of samples) | 'fields' (a list separated by
    ',' or, for the answer of a compound query, ';', whose items are stored under the given names,
    as numbers when they read as numbers).
    """

    kind: str = "text"
    sample: str = "int16"
    byte_order: str = "little"
    fields: tuple[str, ...] = ()


def _to_parse_spec(value: Any) -> ParseSpec:
    if isinstance(value, ParseSpec):
        return value
    if isinstance(value, str):
        if value in PARSER_WORDS:
            return ParseSpec(kind=value)
        raise RuleError(value, f"is not a parser (expected {_PARSE_EXPECTED})", kind="bad_parser")
    if isinstance(value, dict):
        keys = set(value)
        if "block" in keys and keys <= {"block", "byte_order"}:
            sample = value["block"]
            order = value.get("byte_order", "little")
            if sample not in SAMPLE_TYPES:
                raise RuleError(value, f"has a block sample type that is not one of {', '.join(SAMPLE_TYPES)}", kind="bad_parser")
            if order not in BYTE_ORDERS:
                raise RuleError(value, f"has a byte_order that is not one of {', '.join(BYTE_ORDERS)}", kind="bad_parser")
            return ParseSpec(kind="block", sample=sample, byte_order=order)
        if keys == {"fields"}:
            names = value["fields"]
            if not isinstance(names, list) or not names or not all(
                isinstance(n, str) and _NAME.match(n) for n in names
            ):
                raise RuleError(value, "needs fields as a non-empty list of names (letters, digits, '_')", kind="bad_parser")
            return ParseSpec(kind="fields", fields=tuple(names))
    raise RuleError(value, f"is not a parser (expected {_PARSE_EXPECTED})", kind="bad_parser")


Parse = Annotated[ParseSpec, PlainValidator(_to_parse_spec)]


# ---------------------------------------------------------------------------------------------
# Schema


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Step(_Model):
    """One transaction: either write a template, or query a template and parse the answer.

    store: name under which the parsed answer is kept (a 'fields' parser stores each field).
    expect: for a query, the exact answer required (e.g. '1' after *OPC?).
    state: for a write, a name for the instrument setting it changes; the write is skipped
        when the same text was the last one sent for that name (cleared by reset and faults).
    """

    write: str | None = None
    query: str | None = None
    parse: Parse = ParseSpec()
    store: str | None = None
    expect: str | None = None
    state: str | None = None

    @model_validator(mode="after")
    def _one_kind(self) -> Step:
        if (self.write is None) == (self.query is None):
            raise_located([Finding((), "a step has exactly one of 'write' or 'query'", kind="conflict")])
        if self.write is not None and (self.store or self.expect is not None or self.parse != ParseSpec()):
            raise_located([Finding((), "'parse', 'store' and 'expect' belong to a 'query' step", kind="conflict")])
        if self.query is not None and self.state is not None:
            raise_located([Finding((), "'state' belongs to a 'write' step", kind="conflict")])
        if self.parse.kind == "fields" and self.store:
            raise_located([Finding(("store",), "is not used with a 'fields' parser, which stores each field by name: drop it", at="key", kind="conflict")])
        return self

    @field_validator("write", "query")
    @classmethod
    def _template_ok(cls, value: str | None) -> str | None:
        if value is not None:
            if not value.strip():
                raise RuleError(value, "is an empty command", kind="empty")
            try:
                parse_template(value)
            except TemplateError as exc:
                raise RuleError(value, f"is not a valid template ({exc})", kind="bad_template") from None
        return value

    @field_validator("store", "state")
    @classmethod
    def _name_ok(cls, value: str | None) -> str | None:
        if value is not None and not _NAME.match(value):
            raise RuleError(value, "is not a name (letters, digits and '_')", kind="bad_name")
        return value


Operation = list[Step]


class Connection(_Model):
    """How to talk to the instrument (defaults when a plan does not override them)."""

    read_termination: str = "\n"
    write_termination: str = "\n"
    timeout_s: float = Field(5.0, gt=0)
    chunk_size: int = Field(20 * 1024, gt=0)


class ErrorQueue(_Model):
    """The SCPI error queue: the query that pops one entry, and how many reads at most per drain."""

    query: str | None = "SYST:ERR?"
    max_reads: int = Field(32, ge=1, le=1000)


class Span(_Model):
    """A closed interval [min, max] of a quantity (SI units, as the field name says)."""

    min: float = Field(gt=0)
    max: float = Field(gt=0)

    @model_validator(mode="after")
    def _ordered(self) -> Span:
        if not (math.isfinite(self.min) and math.isfinite(self.max)) or self.min > self.max:
            raise_located([Finding(("max",), f"needs finite min <= max (min {self.min!r}, max {self.max!r})", kind="out_of_order")])
        return self


class StepSpan(Span):
    """An interval with a step rule: '1-2-5' (1, 2, 5 times powers of ten) or 'any'."""

    steps: Literal["1-2-5", "any"] = "any"


class SourceOperations(_Model):
    """Source operations; placeholders each may use are listed in OPERATION_PARAMS."""

    reset: Operation
    set_shape: Operation = []
    set_load: Operation = []
    set_amplitude: Operation
    set_offset: Operation
    set_frequency: Operation
    output_on: Operation
    output_off: Operation
    get_frequency: Operation = []  # optional: read the frequency back (driver try)


class SourceSection(_Model):
    """A sine source: limits, the token sent for a high-impedance load setting, operations."""

    frequency_hz: Span
    amplitude_vpp: Span
    offset_max_v: float = Field(0.0, ge=0)
    high_impedance_load: str = "INF"
    operations: SourceOperations


class Vertical(_Model):
    """Vertical ranges over `divisions` on screen: either an explicit list `volts_per_div` or a
    `volts_per_div_range` {min, max, steps: 1-2-5}; full-scale span = volts/div * divisions."""

    divisions: float = Field(gt=0)
    volts_per_div: list[Annotated[float, Field(gt=0)]] | None = None
    volts_per_div_range: StepSpan | None = None

    @model_validator(mode="after")
    def _one_form(self) -> Vertical:
        if (self.volts_per_div is None) == (self.volts_per_div_range is None):
            raise_located([Finding((), "give exactly one of 'volts_per_div' (a list) or 'volts_per_div_range' ({min, max, steps})", kind="conflict")])
        if self.volts_per_div is not None and not self.volts_per_div:
            raise_located([Finding(("volts_per_div",), "needs at least one scale", kind="empty")])
        return self


class Horizontal(_Model):
    """How the capture window is set.

    mode 'sample_rate': the scope takes a sample rate (rate_steps says how it rounds it);
    mode 'seconds_per_div': the scope takes a timebase in s/div over `divisions` with the record
    length spread across the screen, so sample interval = divisions * s/div / samples.
    """

    mode: Literal["sample_rate", "seconds_per_div"]
    sample_rate_hz: Span
    rate_steps: Literal["1-2-5", "any"] = "any"
    divisions: float | None = Field(None, gt=0)
    seconds_per_div: StepSpan | None = None

    @model_validator(mode="after")
    def _timebase_complete(self) -> Horizontal:
        if self.mode == "seconds_per_div" and (self.divisions is None or self.seconds_per_div is None):
            raise_located([Finding((), "mode seconds_per_div needs 'divisions' and 'seconds_per_div'", kind="missing")])
        return self


class Adc(_Model):
    """The digitiser: bits, signed codes, and how many transferred counts make one ADC code
    (e.g. 256 when an 8-bit code sits in the high byte of a 16-bit word)."""

    bits: int = Field(8, ge=1, le=24)
    signed: bool = True
    counts_per_code: float = Field(1.0, gt=0)


class ScopeOperations(_Model):
    """Scope operations; placeholders each may use are listed in OPERATION_PARAMS."""

    reset: Operation
    set_scale: Operation
    set_sample_rate: Operation = []
    set_timebase: Operation = []
    set_samples: Operation
    arm: Operation
    fetch: Operation
    scaling: Operation
    measure_amplitude: Operation = []  # optional: the scope's own peak-to-peak (scope-measure mode)
    measure_phase: Operation = []  # optional: the scope's own phase, channel 2 relative to 1


class ScopeSection(_Model):
    """A two-channel digitising scope."""

    channels: Literal[2] = 2
    vertical: Vertical
    horizontal: Horizontal
    samples: Span
    adc: Adc = Adc()
    operations: ScopeOperations


class Bandwidth(_Model):
    """Detector bandwidth chosen per frequency: fraction of the frequency, clamped to [min, max]."""

    fraction: float = Field(gt=0, le=1)
    min_hz: float = Field(gt=0)
    max_hz: float = Field(gt=0)


class MeterOperations(_Model):
    """Meter operations; placeholders each may use are listed in OPERATION_PARAMS."""

    reset: Operation
    set_bandwidth: Operation = []
    measure: Operation


class MeterSection(_Model):
    """A gain-phase meter."""

    frequency_hz: Span
    bandwidth: Bandwidth | None = None
    operations: MeterOperations


def _regex_ok(pattern: str) -> str:
    try:
        re.compile(pattern)
    except re.error as exc:
        raise RuleError(pattern, f"is not a regular expression ({exc})", kind="bad_regex") from None
    return pattern


class DriverFile(_Model):
    """A whole driver file."""

    format: Literal[1]
    name: str
    description: str = ""
    role: Literal["source", "scope", "meter"]
    identify: list[Annotated[str, AfterValidator(_regex_ok)]] = []
    connection: Connection = Connection()
    errors: ErrorQueue = ErrorQueue()
    init: Operation = []
    source: SourceSection | None = None
    scope: ScopeSection | None = None
    meter: MeterSection | None = None

    @property
    def section(self) -> SourceSection | ScopeSection | MeterSection:
        """The role section (source, scope or meter) this driver fills."""
        section = getattr(self, self.role)
        assert section is not None
        return section

    def matches(self, idn: str) -> bool:
        """True when one of the identify patterns finds a match in an *IDN? answer."""
        return any(re.search(p, idn) for p in self.identify)


#: Placeholders each operation may use (the interpreter provides exactly these).
OPERATION_PARAMS: dict[str, dict[str, tuple[str, ...]]] = {
    "source": {
        "reset": (),
        "set_shape": (),
        "set_load": ("load",),
        "set_amplitude": ("amplitude_vpp",),
        "set_offset": ("offset_v",),
        "set_frequency": ("frequency_hz",),
        "output_on": (),
        "output_off": (),
        "get_frequency": (),
    },
    "scope": {
        "reset": (),
        "set_scale": ("channel", "volts_per_div", "full_scale_v"),
        "set_sample_rate": ("sample_rate_hz",),
        "set_timebase": ("seconds_per_div", "sample_rate_hz", "samples"),
        "set_samples": ("samples",),
        "arm": (),
        "fetch": ("channel",),
        "scaling": ("channel",),
        "measure_amplitude": ("channel",),
        "measure_phase": (),
    },
    "meter": {
        "reset": (),
        "set_bandwidth": ("bandwidth_hz",),
        "measure": ("frequency_hz",),
    },
}

#: Names an operation must store for the interpreter to use it (alternatives separated by '|').
REQUIRED_STORES: dict[str, dict[str, tuple[str, ...]]] = {
    "source": {"get_frequency": ("frequency_hz",)},
    "scope": {
        "fetch": ("codes",),
        "scaling": ("y_increment", "y_origin", "y_reference"),
        "measure_amplitude": ("amplitude_vpp",),
        "measure_phase": ("phase_deg",),
    },
    "meter": {"measure": ("gain_db", "phase_deg")},
}


# ---------------------------------------------------------------------------------------------
# Located errors


class DriverFileError(LocatedError):
    """A driver file could not be read or is not valid; .problems lists every problem found."""


def _semantic_problems(driver: DriverFile) -> list[tuple[tuple[str | int, ...], str, str]]:
    """Checks across fields: the role's section present, placeholders and stores per operation.
    Returns (location, kind, message) triples."""
    problems: list[tuple[tuple[str | int, ...], str, str]] = []
    for other in ("source", "scope", "meter"):
        present = getattr(driver, other) is not None
        if other == driver.role and not present:
            problems.append((("role",), "missing", f"a driver for role {other} needs a '{other}' section (none found)"))
        elif other != driver.role and present:
            problems.append(((other,), "conflict", f"a driver for role {driver.role} takes no '{other}' section"))
    for i, step in enumerate(driver.init):
        for name in placeholders(step.write or step.query or ""):
            problems.append((("init", i), "unknown_placeholder", f"init steps take no placeholders (found {{{name}}})"))
    section = getattr(driver, driver.role)
    if section is None:
        return problems
    params = OPERATION_PARAMS[driver.role]
    ops = section.operations
    for op_name, allowed in params.items():
        steps: list[Step] = getattr(ops, op_name)
        stored: set[str] = set()
        for i, step in enumerate(steps):
            text = step.write if step.write is not None else step.query
            for name in placeholders(text or ""):
                if name not in allowed:
                    have = ", ".join("{" + a + "}" for a in allowed) or "none"
                    problems.append(
                        ((driver.role, "operations", op_name, i, "write" if step.write is not None else "query"),
                         "unknown_placeholder", f"{{{name}}} is unknown here (this operation has {have})")
                    )
            if step.store:
                stored.add(step.store)
            stored.update(step.parse.fields)
        optional = not type(ops).model_fields[op_name].is_required()
        for need in REQUIRED_STORES.get(driver.role, {}).get(op_name, ()):
            if need not in stored and (steps or not optional):
                problems.append(((driver.role, "operations", op_name), "missing", f"needs a step that stores '{need}'"))
        if driver.role == "scope" and op_name == "fetch":
            code_steps = [s for s in steps if s.store == "codes"]
            if code_steps and code_steps[-1].parse.kind not in ("block", "ints", "floats"):
                problems.append(((driver.role, "operations", op_name), "wrong_parser",
                                 "'codes' must be parsed as a block, ints or floats"))
    if driver.role == "scope":
        needed = "set_sample_rate" if section.horizontal.mode == "sample_rate" else "set_timebase"
        if not getattr(ops, needed):
            problems.append(
                (("scope", "operations", needed), "missing",
                 f"horizontal mode {section.horizontal.mode} needs an operation '{needed}'")
            )
    return problems


def parse_driver(text: str, file: str = "<driver>") -> DriverFile:
    """Validate driver-file text; DriverFileError lists every problem, located in the text.

    The YAML is read like a plan's (sweeper.located): duplicate keys, unknown tags and deep
    nesting are problems, never silently resolved.
    """
    tree = YamlTree(file, text)
    try:
        root = tree.compose()
        data = tree.build()
    except LocatedError as exc:
        raise DriverFileError(exc.problems) from None
    if not isinstance(data, dict):
        given = tree.written(root) if root is not None else "nothing"
        raise DriverFileError([Problem(file, 1, 1, (), "not_a_mapping", given, "a mapping",
                                       "a driver file is a mapping of driver fields (format, name, role, ...)")])
    problems = list(tree.problems)
    driver = None
    try:
        driver = DriverFile.model_validate(data)
    except ValidationError as exc:
        problems.extend(problems_from_errors(exc.errors(), tree, DriverFile))
    if driver is not None and not problems:
        problems = [tree.at(loc, kind, message) for loc, kind, message in _semantic_problems(driver)]
    if problems or driver is None:
        raise DriverFileError(sorted_unique(problems))
    return driver


def locate_in_text(text: str, file: str, loc: Sequence[str | int], kind: str, message: str) -> Problem:
    """A Problem at the place `loc` (YAML keys / list indices) names in driver-file text, for
    checks made after parse_driver (e.g. `sweeper driver check` warnings)."""
    tree = YamlTree(file, text)
    try:
        tree.compose()
        tree.build()
    except LocatedError:
        return Problem(file, 1, 1, tuple(loc), kind, "", "", message)
    return tree.at(tuple(loc), kind, message)


@dataclass(frozen=True)
class LoadedDriver:
    """A validated driver file with where it came from and its checksum."""

    driver: DriverFile
    path: Path
    sha256: str

    @property
    def name(self) -> str:
        """The file name plans refer to."""
        return self.path.name


def load_driver(path: Path | str) -> LoadedDriver:
    """Read and validate one driver file; DriverFileError on any problem (located)."""
    path = Path(path)
    raw, text = read_text_file(path, "driver file", DriverFileError)
    driver = parse_driver(text, str(path))
    return LoadedDriver(driver=driver, path=path, sha256=hashlib.sha256(raw).hexdigest())


def repository_drivers_dir() -> Path:
    """The demo driver files shipped with sweeper: the copy installed inside the package
    (sweeper/drivers, from a wheel), else the drivers/ folder of the source checkout the package
    runs from (a clone or an editable install)."""
    import sweeper

    package_dir = Path(sweeper.__file__).resolve().parent
    installed = package_dir / "drivers"
    return installed if installed.is_dir() else package_dir.parent / "drivers"


def driver_search_path(plan_path: Path | None = None) -> list[Path]:
    """Folders searched for a driver file, in order: the plan's folder, its ../drivers, ./drivers,
    the shipped demo drivers (repository_drivers_dir), then each folder in the SWEEPER_DRIVERS
    environment variable."""
    folders: list[Path] = []
    if plan_path is not None:
        plan_dir = Path(plan_path).resolve().parent
        folders += [plan_dir, plan_dir.parent / "drivers"]
    folders += [Path.cwd() / "drivers", repository_drivers_dir()]
    extra = os.environ.get("SWEEPER_DRIVERS", "")
    folders += [Path(p) for p in extra.split(os.pathsep) if p]
    unique: list[Path] = []
    for folder in folders:
        if folder not in unique:
            unique.append(folder)
    return unique


def find_driver(name: str, search: Sequence[Path]) -> Path:
    """The first file called name in the search folders (a path with a folder is taken as is)."""
    candidate = Path(name)
    if candidate.is_absolute() or len(candidate.parts) > 1:
        if candidate.is_file():
            return candidate
        raise FileNotFoundError(f"driver file {name!r} not found")
    for folder in search:
        path = folder / name
        if path.is_file():
            return path
    looked = ", ".join(str(f) for f in search)
    raise FileNotFoundError(f"driver file {name!r} not found (looked in: {looked})")
