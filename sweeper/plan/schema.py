"""The test plan as validated data: pydantic models with units parsed into SI.

YAML keys are the aliases ("start", "amplitude"); Python attribute names carry units
(`start_hz`, `amplitude_vpp`). Unknown keys are errors everywhere. Rules that tie several
fields together raise a `located` error whose findings name the exact field, so the loader
can point at the right line and column; `sweeper.plan.loader` turns them into Problems.
"""

from __future__ import annotations

import difflib
import math
import re
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PrivateAttr,
    ValidationError,
    ValidationInfo,
    model_validator,
)

from sweeper.circuits.catalog import COMPONENTS, ComponentSpec
from sweeper.located import Finding, RuleError, raise_located
from sweeper.plan.faults import FaultPolicies, Injection
from sweeper.plan.model_files import FILE_MODELS, GOLDEN, NETLIST, ModelFiles
from sweeper.plan.units import (
    AmplitudeVpp,
    AngleDeg,
    CapacitanceF,
    Fraction,
    FrequencyHz,
    GainDb,
    ResistanceOhm,
    TimeS,
    VoltageV,
    format_quantity,
    parse_quantity,
)

PLAN_FORMAT = 1


# ---------------------------------------------------------------------------------------------
# Small validated types


def _no_bool(value: object) -> object:
    if isinstance(value, bool):
        raise RuleError(value, "is true/false, not a number", kind="not_a_number")
    return value


def _non_blank(value: str) -> str:
    if not value.strip():
        raise RuleError(value, "must not be empty", kind="empty")
    return value


def _above(limit: float, kind: str | None = None, inclusive: bool = False) -> AfterValidator:
    shown = format_quantity(limit, kind) if kind else f"{limit:g}"

    def check(value: float) -> float:
        if value < limit or (value == limit and not inclusive) or math.isnan(value):
            raise RuleError(value, f"must be {'at least' if inclusive else 'above'} {shown}")
        return value

    return AfterValidator(check)


def _at_most(limit: float, kind: str | None = None) -> AfterValidator:
    shown = format_quantity(limit, kind) if kind else f"{limit:g}"

    def check(value: float) -> float:
        if value > limit:
            raise RuleError(value, f"must be at most {shown}")
        return value

    return AfterValidator(check)


def _below(limit: float, kind: str | None = None) -> AfterValidator:
    shown = format_quantity(limit, kind) if kind else f"{limit:g}"

    def check(value: float) -> float:
        if value >= limit:
            raise RuleError(value, f"must be below {shown}")
        return value

    return AfterValidator(check)


def _finite(value: float) -> float:
    if not math.isfinite(value):
        raise RuleError(value, "must be finite", kind="not_finite")
    return value


#: Largest magnitude of any integer in a plan: far above every count a bench uses, far below
#: what overflows a C long or a date.
MAX_INT = 10**12
#: At most this many frequency points per sweep (a point's record is about 1 kB in memory and on
#: disk with its prediction and band: 20000 points stay below a few tens of MB).
MAX_POINTS = 20_000
#: Monte Carlo: at most this many samples, and samples x points at most MAX_MC_CELLS (each cell
#: holds a complex response, 16 bytes: 5e7 cells are 800 MB at most).
MAX_MC_SAMPLES = 100_000
MAX_MC_CELLS = 50_000_000
#: Component values a bench can hold: R 1 uOhm..1 TOhm, C 1 fF..10 F, L 1 pH..10 kH.
COMPONENT_RANGES = {"resistance": (1e-6, 1e12), "capacitance": (1e-15, 10.0), "inductance": (1e-12, 1e4)}
#: Frequencies in a plan: 1 mHz to 1 THz.
MIN_FREQUENCY_HZ, MAX_FREQUENCY_HZ = 1e-3, 1e12
#: The longest settle time, capture count or duration a plan may ask for.
MAX_SETTLE_S = 3600.0
MAX_DURATION_CEILING_S = 30 * 24 * 3600.0


def _int_range(value: int) -> int:
    if abs(value) > MAX_INT:
        raise RuleError(value, f"is out of range (at most {MAX_INT:.0e} in magnitude)")
    return value


Int = Annotated[int, BeforeValidator(_no_bool), AfterValidator(_int_range)]
Float = Annotated[float, BeforeValidator(_no_bool), AfterValidator(_finite)]
Text = Annotated[str, AfterValidator(_non_blank)]


def _component_any(value: object) -> float:
    """A component value when the topology (and so its kind) is not known: the unit must decide."""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise RuleError(value, "is not a component value (expected e.g. '4.7 kOhm', '100 nF', '10 mH')", kind="bad_quantity")
    results = set()
    for kind in ("resistance", "capacitance", "inductance"):
        try:
            results.add(parse_quantity(value, kind))
        except ValueError:
            continue
    if len(results) != 1:
        raise RuleError(value, "is not a component value (expected e.g. '4.7 kOhm', '100 nF', '10 mH')", kind="bad_quantity")
    return results.pop()


ComponentValue = Annotated[float, BeforeValidator(_component_any)]


def _load(value: object) -> float | None:
    """Source load setting: high impedance (None) or a resistance in ohms."""
    if value is None:
        return None
    if isinstance(value, str) and value.strip().lower() in {"high-z", "hiz", "hi-z", "high-impedance", "inf"}:
        return None
    try:
        ohm = parse_quantity(value, "resistance")  # type: ignore[arg-type]
    except ValueError:
        raise RuleError(value, "is not a load setting (expected 'high-z' or a resistance, e.g. '50 Ohm')", kind="bad_quantity") from None
    if math.isinf(ohm):
        return None
    if ohm <= 0:
        raise RuleError(value, "must be above 0 Ohm (or 'high-z')")
    return ohm


def _root(value: object) -> complex:
    """A zero or pole: a number in Hz (real root, s-plane / 2 pi) or a pair [re, im] in Hz."""
    if isinstance(value, (list, tuple)):
        if len(value) != 2:
            raise RuleError(value, "is not a root (expected a number in Hz or a pair [re, im] in Hz)", kind="bad_quantity")
        return complex(parse_quantity(value[0], "frequency"), parse_quantity(value[1], "frequency"))
    if isinstance(value, (int, float, str)) and not isinstance(value, bool):
        return complex(parse_quantity(value, "frequency"), 0.0)
    raise RuleError(value, "is not a root (expected a number in Hz or a pair [re, im] in Hz)", kind="bad_quantity")


Root = Annotated[complex, BeforeValidator(_root)]


def _non_empty_list(value: list) -> list:
    if not value:
        raise RuleError(value, "is empty: list at least one frequency", kind="empty")
    return value


def _did_you_mean(word: str, choices: list[str]) -> str:
    close = difflib.get_close_matches(word, choices, n=1)
    return f"; did you mean '{close[0]}'?" if close else ""


MODEL_CIRCUITS = (*COMPONENTS, *FILE_MODELS)  # catalogued topologies, 'rational', 'netlist', 'golden'


def _circuit_name(value: str) -> str:
    if value not in MODEL_CIRCUITS:
        raise RuleError(
            value,
            f"is not a known circuit (expected one of: {', '.join(MODEL_CIRCUITS)})"
            + _did_you_mean(value, list(MODEL_CIRCUITS)),
        kind="unknown_name")
    return value


def _model_files(info: ValidationInfo) -> ModelFiles:
    """The model files the loader read (sweeper.plan.model_files), or none."""
    context = info.context if isinstance(info.context, dict) else {}
    found = context.get("model_files")
    return found if isinstance(found, ModelFiles) else ModelFiles()


def part_specs(circuit: object, found: ModelFiles) -> tuple[ComponentSpec, ...] | None:
    """The parts a model has (name and kind): a catalogued topology's, a netlist's, none for a
    golden curve; None when unknown (an unknown circuit, or a netlist that could not be read)."""
    if circuit == NETLIST:
        if found.netlist is None:
            return None
        return tuple(ComponentSpec(name, kind) for name, kind in found.netlist.kinds.items())
    if circuit == GOLDEN:
        return ()
    return COMPONENTS.get(circuit) if isinstance(circuit, str) else None


class _Section(BaseModel):
    """Base of every plan section: unknown keys are errors; Python code may use attribute names."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    def _alias(self, name: str) -> str:
        return type(self).model_fields[name].alias or name

    def _given(self, name: str) -> bool:
        return name in self.model_fields_set


# ---------------------------------------------------------------------------------------------
# Sections


class Dut(_Section):
    """The device under test."""

    board: Text
    serial: Text
    description: str = ""


class InstrumentRef(_Section):
    """One instrument: its VISA resource name and the driver file that speaks its dialect."""

    resource: Text
    driver: Text
    timeout_s: Annotated[TimeS, _above(0.0, "time"), _at_most(600.0, "time")] = Field(5.0, alias="timeout")


class SimProbe(_Section):
    """A probe of the simulated bench's own (sweeper.sim.probes): its R and C load the DUT node it
    touches; its attenuation is compensated by the scope, leaving the scope's noise times it."""

    attenuation: Annotated[Float, _above(1.0, inclusive=True)] = 1.0  # 1 (1x) or 10 (10x)
    resistance_ohm: Annotated[ResistanceOhm, _above(0.0, "resistance")] = Field(alias="resistance")
    capacitance_f: Annotated[CapacitanceF, _above(0.0, "capacitance", inclusive=True)] = Field(0.0, alias="capacitance")


class SimDrift(_Section):
    """Slow drift of the simulated DUT with bench time (sweeper.sim.drift): warm-up plus a linear drift."""

    warmup_frac: Fraction = Field(0.0, alias="warmup")  # gain change once warm, e.g. '0.2 %'
    warmup_time_s: Annotated[TimeS, _above(0.0, "time", inclusive=True)] = Field(0.0, alias="warmup_time")
    per_hour_frac: Fraction = Field(0.0, alias="per_hour")  # gain drift per hour
    warmup_phase_deg: AngleDeg = Field(0.0, alias="warmup_phase")
    phase_per_hour_deg: AngleDeg = Field(0.0, alias="phase_per_hour")


class Simulation(_Section):
    """Settings of the simulated bench (used when bench.kind is 'simulated')."""

    seed: Annotated[Int, _above(0, inclusive=True)] = 0
    noise_v: Annotated[VoltageV, _above(0.0, "voltage", inclusive=True)] = Field(0.0, alias="noise")
    distortion_frac: Annotated[Fraction, _above(0.0, "percent", inclusive=True), _at_most(1.0, "percent")] = Field(
        0.0, alias="distortion"
    )
    # front-end noise of each scope channel as a fraction of its full-scale span, rms
    noise_range_frac: Annotated[Fraction, _above(0.0, "percent", inclusive=True), _at_most(1.0, "percent")] = Field(
        0.0, alias="range_noise"
    )
    components: dict[str, ComponentValue] = Field(default_factory=dict)  # true part values, SI
    realtime: bool = False
    transient: bool = True  # the DUT's transient after each generator change (see sweeper.sim.bench)
    faults: list[Injection] = Field(default_factory=list)  # faults to inject (sweeper.plan.faults)
    # What a real bench adds; the defaults are the ideal bench (sweeper.sim.bench).
    channel_gain_db: tuple[GainDb, GainDb] = Field((0.0, 0.0), alias="channel_gain")  # per scope channel
    channel_phase_deg: tuple[AngleDeg, AngleDeg] = Field((0.0, 0.0), alias="channel_phase")
    skew_s: Annotated[TimeS, AfterValidator(_finite)] = Field(0.0, alias="skew")  # channel 2 lags channel 1
    probes: tuple[SimProbe, SimProbe] | None = None  # the bench's own probes, channel 1 then channel 2
    drift: SimDrift | None = None


class Bench(_Section):
    """Which instruments play which role, and how they are reached."""

    kind: Literal["simulated", "visa"] = "simulated"
    mode: Literal["waveform", "meter", "scope-measure"] = "waveform"  # scope-measure: the scope's own Vpp and phase
    visa_library: str | None = None
    source: InstrumentRef | None = None
    scope: InstrumentRef | None = None
    meter: InstrumentRef | None = None
    simulation: Simulation = Field(default_factory=Simulation)

    @model_validator(mode="after")
    def _roles_present(self) -> Bench:
        findings = []
        needed = ("source", "meter") if self.mode == "meter" else ("source", "scope")
        for role in needed:
            if getattr(self, role) is None:
                findings.append(
                    Finding((role,), f"{self.mode} mode needs a {role}: add {role}: {{resource: ..., driver: ...}}", kind="missing")
                )
        if findings:
            raise_located(findings)
        return self


#: Output impedance of a bench function generator, Ohm (common practice: 50 Ohm).
SOURCE_IMPEDANCE_OHM = 50.0


class Stimulus(_Section):
    """The sine driving the DUT input."""

    amplitude_vpp: Annotated[AmplitudeVpp, _above(0.0, "amplitude")] = Field(alias="amplitude")
    offset_v: VoltageV = Field(0.0, alias="offset")
    load_ohm: Annotated[float | None, BeforeValidator(_load)] = Field(None, alias="load")  # None = high-Z
    max_amplitude_vpp: Annotated[AmplitudeVpp, _above(0.0, "amplitude")] = Field(10.0, alias="max_amplitude")

    @property
    def open_circuit_factor(self) -> float:
        """How much more the DUT can receive than the setting says: a source set for a load of R
        (Ohm) through its 50 Ohm output impedance gives (R + 50) / R times the displayed voltage
        into a high-impedance DUT (twice for 50 Ohm; common practice); 1 for a high-Z setting."""
        if self.load_ohm is None or not self.load_ohm > 0:
            return 1.0
        return (self.load_ohm + SOURCE_IMPEDANCE_OHM) / self.load_ohm

    @property
    def dut_amplitude_vpp(self) -> float:
        """Worst-case peak-to-peak amplitude at the DUT (high-impedance input), V."""
        return self.amplitude_vpp * self.open_circuit_factor

    @model_validator(mode="after")
    def _within_cap(self) -> Stimulus:
        """The cap applies to what the DUT receives, not to the setting."""
        findings = []
        cap = format_quantity(self.max_amplitude_vpp, "amplitude")
        factor = self.open_circuit_factor
        delivered = self.dut_amplitude_vpp
        note = "" if factor == 1.0 else (
            f" (set for a {format_quantity(self.load_ohm, 'resistance')} load, so up to "
            f"{format_quantity(delivered, 'amplitude')} at a high-impedance DUT: {factor:g} times the setting)")
        if delivered > self.max_amplitude_vpp:
            findings.append(
                Finding(
                    ("amplitude",),
                    f"{format_quantity(self.amplitude_vpp, 'amplitude')}{note} is above max_amplitude ({cap}); "
                    "the tool refuses to exceed the cap",
                kind="over_cap")
            )
        elif (abs(self.offset_v) + self.amplitude_vpp / 2) * factor > self.max_amplitude_vpp / 2:
            findings.append(
                Finding(
                    ("offset",),
                    f"offset {format_quantity(self.offset_v, 'voltage')} plus half the amplitude{note} swings beyond "
                    f"+-{format_quantity(self.max_amplitude_vpp / 2, 'voltage')}, half of max_amplitude ({cap})",
                kind="over_cap")
            )
        if findings:
            raise_located(findings)
        return self


class Sweep(_Section):
    """The frequency grid: start, stop and a density, or an explicit list."""

    start_hz: Annotated[FrequencyHz, _above(MIN_FREQUENCY_HZ, "frequency", inclusive=True),
                        _at_most(MAX_FREQUENCY_HZ, "frequency")] | None = Field(None, alias="start")
    stop_hz: Annotated[FrequencyHz, _above(MIN_FREQUENCY_HZ, "frequency", inclusive=True),
                       _at_most(MAX_FREQUENCY_HZ, "frequency")] | None = Field(None, alias="stop")
    points_per_decade: Annotated[Float, _above(0.0), _at_most(1000.0)] | None = None
    points: Annotated[Int, _above(2, inclusive=True), _at_most(MAX_POINTS)] | None = None
    # the longest sweep the plan expects; `check` warns above it (the ceiling is refused)
    max_duration_s: Annotated[TimeS, _above(0.0, "time"), _at_most(MAX_DURATION_CEILING_S, "time")] = Field(
        24 * 3600.0, alias="max_duration")
    spacing: Literal["log", "linear"] = "log"
    direction: Literal["up", "down"] = "up"
    frequencies_hz: (
        Annotated[list[Annotated[FrequencyHz, _above(MIN_FREQUENCY_HZ, "frequency", inclusive=True),
                                 _at_most(MAX_FREQUENCY_HZ, "frequency")]],
                  AfterValidator(_non_empty_list), Field(max_length=MAX_POINTS)] | None
    ) = Field(None, alias="frequencies")

    @model_validator(mode="after")
    def _one_way(self) -> Sweep:
        findings: list[Finding | dict[str, Any]] = []
        if self.frequencies_hz is not None:
            for name in ("start_hz", "stop_hz", "points", "points_per_decade", "spacing"):
                if self._given(name):
                    findings.append(
                        Finding((self._alias(name),), "is not allowed with an explicit frequencies list", at="key", kind="conflict")
                    )
            seen: set[float] = set()
            for index, frequency_hz in enumerate(self.frequencies_hz):
                if frequency_hz in seen:
                    findings.append(Finding(("frequencies", index), "is listed twice", follows_value=True, kind="duplicate"))
                seen.add(frequency_hz)
        else:
            for name in ("start_hz", "stop_hz"):
                if getattr(self, name) is None:
                    findings.append(
                        Finding(
                            (self._alias(name),), f"missing {self._alias(name)}: give start and stop, or frequencies"
                        , kind="missing")
                    )
            if self.points is None and self.points_per_decade is None:
                findings.append(Finding((), "give points_per_decade or points (or an explicit frequencies list)", kind="missing"))
            if self.points is not None and self.points_per_decade is not None:
                findings.append(Finding(("points",), "give points or points_per_decade, not both", at="key", kind="conflict"))
            if self.points_per_decade is not None and self.spacing == "linear":
                findings.append(
                    Finding(("points_per_decade",), "needs log spacing; give points for linear spacing", at="key", kind="conflict")
                )
            if self.start_hz is not None and self.stop_hz is not None and self.start_hz >= self.stop_hz:
                findings.append(
                    Finding(
                        ("stop",),
                        f"stop ({format_quantity(self.stop_hz, 'frequency')}) must be above start "
                        f"({format_quantity(self.start_hz, 'frequency')})",
                    kind="out_of_order")
                )
        if findings:
            raise_located(findings)
        return self


class TargetUncertainty(_Section):
    """Averaging goal: keep capturing until the standard uncertainties are below these."""

    gain_db: Annotated[GainDb, _above(0.0, "gain")] | None = Field(None, alias="gain")
    phase_deg: Annotated[AngleDeg, _above(0.0, "angle")] | None = Field(None, alias="phase")


class Acquisition(_Section):
    """How each point is captured: window length, settling, averaging, fit."""

    # a sine fit needs at least one whole cycle in its record; 1e6 cycles is far beyond any need
    min_cycles: Annotated[Float, _above(1.0, inclusive=True), _at_most(1e6)] = 8.0
    # A four-parameter sine fit has four unknowns, so it needs at least four samples.
    min_samples: Annotated[Int, _above(4, inclusive=True), _at_most(100_000_000)] = 2000
    settle_s: Annotated[TimeS, _above(0.0, "time", inclusive=True), _at_most(MAX_SETTLE_S, "time")] = Field(
        0.0, alias="settle_time")
    settle_cycles: Annotated[Float, _above(0.0, inclusive=True), _at_most(1e6)] = 2.0
    settle_time_constants: Annotated[Float, _above(0.0, inclusive=True), _at_most(100.0)] = 5.0
    averages: Annotated[Int, _above(1, inclusive=True), _at_most(10_000)] = 1
    max_averages: Annotated[Int, _above(1, inclusive=True), _at_most(10_000)] = 8  # raised to `averages` when not given
    target_uncertainty: TargetUncertainty | None = None
    autorange: bool = True
    fit: Literal["three-parameter", "four-parameter"] = "three-parameter"
    # Flag thresholds: THD above thd_flag (default -40 dB = 1 %, common practice for a linear
    # DUT) flags high distortion, but only when the harmonics are significant above the noise;
    # SNR below snr_flag (default 20 dB) flags low signal.
    thd_flag_db: GainDb = Field(-40.0, alias="thd_flag")
    snr_flag_db: GainDb = Field(20.0, alias="snr_flag")

    @model_validator(mode="after")
    def _averaging(self) -> Acquisition:
        if not self._given("max_averages"):
            self.max_averages = max(self.max_averages, self.averages)
        elif self.max_averages < self.averages:
            raise_located(
                [Finding(("max_averages",), f"must be at least averages ({self.averages})", follows_value=True, kind="out_of_range")]
            )
        return self

    @property
    def target_gain_db(self) -> float | None:
        """Target standard uncertainty of gain, dB; None when not set."""
        return self.target_uncertainty.gain_db if self.target_uncertainty else None

    @property
    def target_phase_deg(self) -> float | None:
        """Target standard uncertainty of phase, degrees; None when not set."""
        return self.target_uncertainty.phase_deg if self.target_uncertainty else None


class Component(_Section):
    """A component's nominal value (SI: Ohm, F or H) and its tolerance (fraction)."""

    value: ComponentValue
    # below 100 %: a part at -100 % has no value at all
    tolerance_frac: Annotated[Fraction, _above(0.0, "percent", inclusive=True), _below(1.0, "percent")] = Field(
        0.0, alias="tolerance"
    )


class LoadingSpec(_Section):
    """What the bench adds to the DUT: source resistance, probe, external load."""

    source_resistance_ohm: Annotated[
        ResistanceOhm, _above(0.0, "resistance", inclusive=True), AfterValidator(_finite)
    ] = Field(0.0, alias="source_resistance")
    probe_resistance_ohm: Annotated[ResistanceOhm, _above(0.0, "resistance")] = Field(
        math.inf, alias="probe_resistance"
    )
    probe_capacitance_f: Annotated[CapacitanceF, _above(0.0, "capacitance", inclusive=True)] = Field(
        0.0, alias="probe_capacitance"
    )
    load_resistance_ohm: Annotated[ResistanceOhm, _above(0.0, "resistance")] = Field(math.inf, alias="load_resistance")
    reference: Literal["input", "source"] = "input"


_RATIONAL_ONLY = ("zeros_hz", "poles_hz", "gain")


def _component_findings(
    raw: dict[Any, Any], specs: tuple[ComponentSpec, ...], circuit: str, where: tuple[str, ...], nested: bool
) -> tuple[dict[Any, Any], list[Finding]]:
    """Parse component values with their kinds from the topology; unknown names are findings.

    nested: entries are {value, tolerance} mappings (model) rather than bare values (simulation).
    Returns the entries with values replaced by SI floats (a placeholder where parsing failed,
    so the remaining fields still get checked) and the findings.
    """
    by_name = {spec.name: spec for spec in specs}
    names = ", ".join(by_name) or "none"
    prepared: dict[Any, Any] = {}
    findings: list[Finding] = []
    for name, entry in raw.items():
        spec = by_name.get(name)
        if spec is None:
            findings.append(
                Finding(
                    (*where, name),
                    f"unknown component {name!r} for circuit {circuit!r} (expected: {names})"
                    + _did_you_mean(str(name), list(by_name)),
                    at="key",
                kind="unknown_name")
            )
            continue
        if nested and not isinstance(entry, dict):
            entry = {"value": entry}  # shorthand: "R: 1.6 kOhm"
        value = entry.get("value") if nested else entry
        if nested and "value" not in entry:
            prepared[name] = entry
            continue
        loc = (*where, name, "value") if nested else (*where, name)
        try:
            value_si = parse_quantity(value, spec.kind)
            zero_ok = not spec.required and spec.default == 0.0
            open_ok = not spec.required and math.isinf(spec.default)
            low, high = COMPONENT_RANGES.get(spec.kind, (0.0, math.inf))
            if math.isinf(value_si) and value_si > 0 and not open_ok:
                findings.append(Finding(loc, f"must be finite (at most {format_quantity(high, spec.kind)})",
                                        follows_value=True, kind="out_of_range"))
            elif math.isfinite(value_si) and value_si > 0 and not low <= value_si <= high:
                findings.append(Finding(loc, f"must be within {format_quantity(low, spec.kind)} to "
                                        f"{format_quantity(high, spec.kind)}", follows_value=True, kind="out_of_range"))
            elif value_si < 0 or (value_si == 0 and not zero_ok):
                findings.append(
                    Finding(
                        loc,
                        f"must be {'at least' if zero_ok else 'above'} {format_quantity(0, spec.kind)}",
                        follows_value=True,
                        kind="out_of_range",
                    )
                )
        except ValueError as exc:
            findings.append(Finding(loc, str(exc), kind="bad_quantity"))
            value_si = 1.0
        prepared[name] = {**entry, "value": value_si} if nested else value_si
    return prepared, findings


class GoldenSpec(_Section):
    """A golden curve as the model (sweeper.circuits.golden): its CSV file and its band."""

    file: Text  # relative to the plan file
    band: Literal["uncertainty", "fixed"] = "uncertainty"  # +- k u of the curve, or +- gain / phase
    coverage_factor: Annotated[Float, _above(0.0)] = 2.0  # k of the uncertainty band
    gain_db: Annotated[GainDb, _above(0.0, "gain", inclusive=True)] | None = Field(None, alias="gain")
    phase_deg: Annotated[AngleDeg, _above(0.0, "angle", inclusive=True)] | None = Field(None, alias="phase")

    @model_validator(mode="after")
    def _band_fields(self) -> GoldenSpec:
        findings = []
        if self.band == "fixed" and self.gain_db is None and self.phase_deg is None:
            findings.append(Finding(("band",), "a fixed band needs gain and/or phase (e.g. gain: 0.1 dB, phase: 1 deg)",
                                    kind="missing"))
        if self.band == "uncertainty":
            for name in ("gain_db", "phase_deg"):
                if self._given(name):
                    findings.append(Finding((self._alias(name),), "is only for band: fixed", at="key", kind="conflict"))
        elif self._given("coverage_factor"):
            findings.append(Finding(("coverage_factor",), "is only for band: uncertainty", at="key", kind="conflict"))
        if findings:
            raise_located(findings)
        return self


class Model(_Section):
    """The circuit the DUT should behave like, with component tolerances and bench loading: a
    catalogued topology, a rational H(s), a netlist (inline or a file) or a golden curve."""

    circuit: Annotated[str, AfterValidator(_circuit_name)]
    components: dict[str, Component] = Field(default_factory=dict)
    loading: LoadingSpec = Field(default_factory=LoadingSpec)
    zeros_hz: list[Root] = Field(default_factory=list, alias="zeros")  # s-plane roots / 2 pi, Hz
    poles_hz: list[Root] = Field(default_factory=list, alias="poles")
    gain: Float = 1.0  # rational only: H(s) = gain * prod(s - 2 pi z) / prod(s - 2 pi p)
    netlist: str | None = None  # circuit netlist: the netlist's text (sweeper.circuits.netlist.parse)
    netlist_file: Text | None = None  # circuit netlist: a netlist file, relative to the plan file
    golden: GoldenSpec | None = None  # circuit golden

    _parsed_netlist: Any = PrivateAttr(None)
    _golden_curve: Any = PrivateAttr(None)

    @property
    def parsed_netlist(self) -> Any:
        """The netlist (sweeper.circuits.netlist.Netlist) of circuit 'netlist', else None."""
        return self._parsed_netlist

    @property
    def golden_curve(self) -> Any:
        """The golden curve (sweeper.circuits.golden.GoldenCurve) of circuit 'golden', else None."""
        return self._golden_curve

    def part_specs(self) -> tuple[ComponentSpec, ...]:
        """The model's parts (name, kind): a topology's, a netlist's; none for rational or golden."""
        if self.circuit == NETLIST:
            netlist = self._parsed_netlist
            return tuple(ComponentSpec(n, k) for n, k in netlist.kinds.items()) if netlist is not None else ()
        return COMPONENTS.get(self.circuit, ())

    @model_validator(mode="wrap")
    @classmethod
    def _topology(cls, data: Any, handler: Any, info: ValidationInfo) -> Model:
        if not isinstance(data, dict):
            return handler(data)
        findings: list[Finding | dict[str, Any]] = []
        circuit = data.get("circuit")
        if circuit in FILE_MODELS and "components" in data:
            where = ("the netlist (e.g. 'R1 in a 10k tol=1%')" if circuit == NETLIST
                     else "nowhere: a golden curve has no parts")
            findings.append(Finding(("components",), f"part values and tolerances of a {circuit} model belong in "
                                    f"{where}", at="key", kind="conflict"))
            data = {key: value for key, value in data.items() if key != "components"}
        specs = COMPONENTS.get(circuit) if isinstance(circuit, str) else None
        raw = data.get("components", {})
        if specs is not None and isinstance(raw, dict):
            prepared, found = _component_findings(raw, specs, circuit, ("components",), nested=True)
            findings.extend(found)
            for spec in specs:
                if spec.required and spec.name not in raw:
                    findings.append(
                        Finding(
                            ("components", spec.name),
                            f"circuit {circuit!r} needs component {spec.name} ({spec.kind})",
                            kind="missing",
                        )
                    )
            data = {**data, "components": prepared}
        try:
            model = handler(data)
        except ValidationError as exc:
            findings.extend(exc.errors())
            model = None
        if model is not None:
            findings.extend(model._roots())
            findings.extend(model._files(_model_files(info)))
        if findings:
            raise_located(findings)
        return model

    def _files(self, found: ModelFiles) -> list[Finding]:
        """Rules of the netlist and golden models; attaches what the loader read."""
        findings: list[Finding] = []
        own = {NETLIST: ("netlist", "netlist_file"), GOLDEN: ("golden",)}
        for circuit, names in own.items():
            if self.circuit != circuit:
                findings.extend(Finding((name,), f"is only for circuit {circuit!r}", at="key", kind="conflict")
                                for name in names if self._given(name))
        if self.circuit not in FILE_MODELS:
            return findings
        if self.circuit == NETLIST:
            if self._given("netlist") and self._given("netlist_file"):
                findings.append(Finding(("netlist_file",), "give netlist (the text) or netlist_file, not both",
                                        at="key", kind="conflict"))
            elif not (self._given("netlist") or self._given("netlist_file")):
                findings.append(Finding((), "circuit 'netlist' needs netlist: | (the netlist's lines) or "
                                        "netlist_file: <file>", kind="missing"))
            self._parsed_netlist = found.netlist
            return findings
        if self.golden is None:
            findings.append(Finding((), "circuit 'golden' needs golden: {file: <csv file>}", kind="missing"))
        if self._given("loading"):
            findings.append(Finding(("loading",), "does not apply to a golden curve: it was measured with its own "
                                    "loading, which the curve includes", at="key", kind="conflict"))
        curve = found.golden
        if curve is not None and self.golden is not None and self.golden.band == "uncertainty" \
                and not curve.has_uncertainty:
            findings.append(Finding(("golden", "band"), f"uncertainty needs the columns u_gain_db and u_phase_deg in "
                                    f"{curve.file}; otherwise give band: fixed with gain and phase",
                                    kind="missing"))
        self._golden_curve = curve
        return findings

    def _roots(self) -> list[Finding]:
        findings = []
        if self.circuit != "rational":
            for name in _RATIONAL_ONLY:
                if self._given(name):
                    findings.append(
                        Finding((self._alias(name),), "is only for circuit 'rational'", at="key", kind="conflict")
                    )
            return findings
        if not 1e-15 <= abs(self.gain) <= 1e15:
            findings.append(Finding(("gain",), "must be non-zero, 1e-15 to 1e15 in magnitude (0 is no response "
                                    "at all: minus infinity dB)", follows_value=True, kind="out_of_range"))
        for alias, roots in (("zeros", self.zeros_hz), ("poles", self.poles_hz)):
            for index, root in enumerate(roots):
                if not (abs(root.real) <= MAX_FREQUENCY_HZ and abs(root.imag) <= MAX_FREQUENCY_HZ):
                    findings.append(Finding((alias, index), f"must lie within {MAX_FREQUENCY_HZ:g} Hz of the origin",
                                            follows_value=True, kind="out_of_range"))
            for index, root in enumerate(roots):
                if root.imag != 0 and roots.count(root.conjugate()) != roots.count(root):
                    findings.append(
                        Finding(
                            (alias, index),
                            f"needs its conjugate [{root.real:g}, {-root.imag:g}] too (a real circuit has "
                            "complex roots in conjugate pairs)",
                            follows_value=True,
                            kind="unpaired_root",
                        )
                    )
                if alias == "poles" and root.real > 0:
                    findings.append(
                        Finding(
                            (alias, index),
                            "is in the right half-plane: the circuit would be unstable",
                            follows_value=True,
                            kind="unstable",
                        )
                    )
        return findings


class Allowance(_Section):
    """Measurement allowance added outside the model band."""

    gain_db: Annotated[GainDb, _above(0.0, "gain", inclusive=True)] = Field(0.0, alias="gain")
    phase_deg: Annotated[AngleDeg, _above(0.0, "angle", inclusive=True)] = Field(0.0, alias="phase")


class FixedBand(_Section):
    """A fixed +- band around the model."""

    gain_db: Annotated[GainDb, _above(0.0, "gain", inclusive=True)] | None = Field(None, alias="gain")
    phase_deg: Annotated[AngleDeg, _above(0.0, "angle", inclusive=True)] | None = Field(None, alias="phase")


class Mask(_Section):
    """Absolute limits over a frequency segment."""

    from_hz: Annotated[FrequencyHz, _above(0.0, "frequency")] = Field(alias="from")
    to_hz: Annotated[FrequencyHz, _above(0.0, "frequency")] = Field(alias="to")
    gain_min_db: GainDb | None = Field(None, alias="gain_min")
    gain_max_db: GainDb | None = Field(None, alias="gain_max")
    phase_min_deg: AngleDeg | None = Field(None, alias="phase_min")
    phase_max_deg: AngleDeg | None = Field(None, alias="phase_max")

    @model_validator(mode="after")
    def _ordered(self) -> Mask:
        findings = []
        if self.from_hz >= self.to_hz:
            findings.append(
                Finding(
                    ("to",), f"must be above from ({format_quantity(self.from_hz, 'frequency')})", follows_value=True
                , kind="out_of_order")
            )
        for low, high, kind in (("gain_min_db", "gain_max_db", "gain"), ("phase_min_deg", "phase_max_deg", "angle")):
            lo, hi = getattr(self, low), getattr(self, high)
            if lo is not None and hi is not None and lo > hi:
                findings.append(
                    Finding(
                        (self._alias(high),),
                        f"must be at least {self._alias(low)} ({format_quantity(lo, kind)})",
                        follows_value=True,
                    kind="out_of_order")
                )
        bounds = ("gain_min_db", "gain_max_db", "phase_min_deg", "phase_max_deg")
        if all(getattr(self, name) is None for name in bounds):
            findings.append(Finding((), "a mask needs at least one of gain_min, gain_max, phase_min, phase_max", kind="missing"))
        if findings:
            raise_located(findings)
        return self


class MonteCarlo(_Section):
    """Settings for a Monte Carlo tolerance band."""

    samples: Annotated[Int, _above(2, inclusive=True), _at_most(MAX_MC_SAMPLES)] = 2000
    percentiles: tuple[Float, Float] = (0.5, 99.5)
    seed: Annotated[Int, _above(0, inclusive=True)] = 0
    distribution: Literal["uniform", "normal"] = "uniform"

    @model_validator(mode="after")
    def _percentiles(self) -> MonteCarlo:
        low, high = self.percentiles
        if not 0.0 <= low < high <= 100.0:
            raise_located([Finding(("percentiles",), "must be two percentiles with 0 <= low < high <= 100", kind="out_of_range")])
        return self


class Limits(_Section):
    """How measured points are judged against the model."""

    band: Literal["worst-case", "monte-carlo", "none"] = "worst-case"
    allowance: Allowance = Field(default_factory=Allowance)
    fixed: FixedBand | None = None
    masks: list[Mask] = Field(default_factory=list)
    monte_carlo: MonteCarlo = Field(default_factory=MonteCarlo)
    decision_rule: Literal["simple", "guarded"] = "guarded"
    # k of U = k u when given (an explicit override); by default k is Student's t at
    # coverage_probability with each point's effective degrees of freedom (GUM G.3, G.4).
    coverage_factor: Annotated[Float, _above(0.0), _at_most(10.0)] | None = None
    coverage_probability: Annotated[Fraction, _above(0.5, "percent"), _below(1.0, "percent")] = 0.95

    @property
    def allowance_gain_db(self) -> float:
        """Gain allowance added outside the band, dB."""
        return self.allowance.gain_db

    @property
    def allowance_phase_deg(self) -> float:
        """Phase allowance added outside the band, degrees."""
        return self.allowance.phase_deg

    @property
    def fixed_gain_db(self) -> float | None:
        """Fixed +- gain band around the model, dB; None when not set."""
        return self.fixed.gain_db if self.fixed else None

    @property
    def fixed_phase_deg(self) -> float | None:
        """Fixed +- phase band around the model, degrees; None when not set."""
        return self.fixed.phase_deg if self.fixed else None


class Metadata(_Section):
    """Who and where, for the catalogue. operator is a role, not a person's name."""

    operator: str = ""
    station: str = ""
    project: str = ""
    tags: list[str] = Field(default_factory=list)


def _format_version(value: int) -> int:
    if value != PLAN_FORMAT:
        raise RuleError(value, f"is not a plan format this sweeper reads (expected {PLAN_FORMAT})", kind="unsupported_version")
    return value


class Plan(_Section):
    """A whole test plan. The loader also records its source text, checksum and path."""

    plan: Annotated[Int, AfterValidator(_format_version)]
    name: Text
    dut: Dut
    bench: Bench
    stimulus: Stimulus
    sweep: Sweep
    acquisition: Acquisition = Field(default_factory=Acquisition)
    model: Model
    limits: Limits = Field(default_factory=Limits)
    metadata: Metadata = Field(default_factory=Metadata)
    faults: FaultPolicies = Field(default_factory=FaultPolicies)  # fault handling (sweeper.plan.faults)

    _source_text: str = PrivateAttr("")
    _sha256: str = PrivateAttr("")
    _path: Path | None = PrivateAttr(None)
    _locations: dict[str, tuple[int, int]] = PrivateAttr(default_factory=dict)
    _model_files: dict[str, dict[str, str]] = PrivateAttr(default_factory=dict)
    _station: Any = PrivateAttr(None)  # the station profile the bench came from (sweeper.station), or None

    @model_validator(mode="after")
    def _golden_range(self) -> Plan:
        """A sweep must stay within the golden curve's frequencies: outside them there is no model."""
        curve = self.model.golden_curve
        if curve is None:
            return self
        low, high = float(curve.frequency_hz[0]), float(curve.frequency_hz[-1])
        span = f"{format_quantity(low, 'frequency')} to {format_quantity(high, 'frequency')}"
        sweep = self.sweep
        checks = ([(("sweep", "frequencies", i), f) for i, f in enumerate(sweep.frequencies_hz)]
                  if sweep.frequencies_hz is not None else
                  [(("sweep", "start"), sweep.start_hz), (("sweep", "stop"), sweep.stop_hz)])
        findings = [Finding(loc, f"lies outside the golden curve's {span} ({curve.file})", follows_value=True,
                            kind="out_of_range")
                    for loc, f in checks if f is not None and not bool(curve.covers(f))]
        if findings:
            raise_located(findings)
        return self

    @model_validator(mode="after")
    def _memory(self) -> Plan:
        """Monte Carlo samples times points bounded (the band is held in memory)."""
        sweep = self.sweep
        if sweep.frequencies_hz is not None:
            points = len(sweep.frequencies_hz)
        elif sweep.points is not None:
            points = sweep.points
        elif sweep.points_per_decade is not None and sweep.start_hz and sweep.stop_hz:
            points = int(min(MAX_POINTS + 1, math.ceil(math.log10(sweep.stop_hz / sweep.start_hz)
                                                         * sweep.points_per_decade) + 1))
        else:
            return self
        findings = []
        if points > MAX_POINTS:
            findings.append(Finding(("sweep", "points_per_decade"), f"gives {points - 1}+ points; expected at most "
                                    f"{MAX_POINTS} per sweep", kind="out_of_range"))
        if self.limits.band == "monte-carlo" and self.limits.monte_carlo.samples * points > MAX_MC_CELLS:
            findings.append(Finding(("limits", "monte_carlo", "samples"), f"times {points} points exceeds "
                                    f"{MAX_MC_CELLS:.0e} responses held in memory", follows_value=True,
                                    kind="out_of_range"))
        if findings:
            raise_located(findings)
        return self

    @model_validator(mode="wrap")
    @classmethod
    def _simulated_parts(cls, data: Any, handler: Any, info: ValidationInfo) -> Plan:
        """Parse bench.simulation.components with the kinds of the model's parts."""
        if not isinstance(data, dict):
            return handler(data)
        model, bench = data.get("model"), data.get("bench")
        circuit = model.get("circuit") if isinstance(model, dict) else None
        specs = part_specs(circuit, _model_files(info))
        simulation = bench.get("simulation") if isinstance(bench, dict) else None
        raw = simulation.get("components") if isinstance(simulation, dict) else None
        if specs is None or not isinstance(raw, dict):
            return handler(data)
        where = ("bench", "simulation", "components")
        prepared, findings = _component_findings(raw, specs, circuit, where, nested=False)
        data = {**data, "bench": {**bench, "simulation": {**simulation, "components": prepared}}}
        all_findings: list[Finding | dict[str, Any]] = list(findings)
        try:
            plan = handler(data)
        except ValidationError as exc:
            all_findings.extend(exc.errors())
            plan = None
        if all_findings:
            raise_located(all_findings)
        return plan

    @property
    def source_text(self) -> str:
        """The plan file's text, verbatim."""
        return self._source_text

    @property
    def sha256(self) -> str:
        """SHA-256 of the plan file's bytes, hex."""
        return self._sha256

    @property
    def path(self) -> Path | None:
        """Where the plan was read from; None when loaded from text."""
        return self._path

    @property
    def model_files(self) -> dict[str, dict[str, str]]:
        """The model files read (netlist_file, golden.file): name as written -> {sha256, text}."""
        return self._model_files

    def location(self, field: str) -> tuple[int, int] | None:
        """1-based (line, column) where a dotted YAML field ("sweep.stop", "limits.masks[0].to") is
        written; for a field left to its default, where its nearest written parent is. None when
        the plan was not loaded from YAML.
        """
        while field:
            if field in self._locations:
                return self._locations[field]
            field = re.sub(r"(\[\d+\]|\.?[^.\[]*)$", "", field, count=1)
        return None
