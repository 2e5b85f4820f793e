"""`sweeper driver check`: everything that can be known about a driver file without an instrument.

Problems (the file cannot be used) come from the driver-file loader: schema, templates,
placeholders, parsers, limits, each located file:line:column. On top of that every template is
rendered once with example values, and a few warnings point at what is legal but risky (no
identity pattern, no error queue, a sample type too narrow for the ADC).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from sweeper.instruments.driverfile import (
    OPERATION_PARAMS,
    DriverFile,
    DriverFileError,
    LoadedDriver,
    ScopeSection,
    load_driver,
    locate_in_text,
)
from sweeper.instruments.template import TemplateError, render
from sweeper.located import Problem

#: Example placeholder values used to render every template once (SI units).
EXAMPLE_VALUES: dict[str, int | float | str] = {
    "channel": 1,
    "volts_per_div": 0.1,
    "full_scale_v": 0.8,
    "sample_rate_hz": 1e6,
    "seconds_per_div": 1e-3,
    "samples": 10000,
    "frequency_hz": 1000.0,
    "amplitude_vpp": 1.0,
    "offset_v": 0.0,
    "load": 50.0,
    "bandwidth_hz": 100.0,
}
#: Below this session timeout (s) a busy instrument will time out (common practice: >= 1 s on LAN).
SHORT_TIMEOUT_S = 0.1
_SAMPLE_BITS = {"int8": 8, "int16": 16}


@dataclass
class DriverCheck:
    """What checking one driver file found."""

    path: Path
    loaded: LoadedDriver | None = None
    problems: list[Problem] = field(default_factory=list)
    warnings: list[Problem] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        """True when the file can be used (warnings allowed)."""
        return self.loaded is not None and not self.problems


def check_driver(path: Path | str) -> DriverCheck:
    """Validate a driver file, render its templates with example values, and lint it."""
    path = Path(path)
    result = DriverCheck(path)
    try:
        loaded = load_driver(path)
    except DriverFileError as exc:
        result.problems = list(exc.problems)
        return result
    text = path.read_text(encoding="utf-8")
    result.problems = render_problems(loaded.driver, text, str(path)) + output_off_problems(loaded.driver, text,
                                                                                           str(path))
    result.warnings = lint(loaded.driver, text, str(path))
    if not result.problems:
        result.loaded = loaded
    return result


def _operations(driver: DriverFile) -> list[tuple[tuple[str | int, ...], list]]:
    """(location, steps) of init and of every operation of the driver's role section."""
    found: list[tuple[tuple[str | int, ...], list]] = [(("init",), list(driver.init))]
    section = driver.section
    for name in OPERATION_PARAMS[driver.role]:
        found.append(((driver.role, "operations", name), list(getattr(section.operations, name))))
    return found


def render_problems(driver: DriverFile, text: str, file: str) -> list[Problem]:
    """Render every template once with EXAMPLE_VALUES; a located Problem per template that fails."""
    problems = []
    for loc, steps in _operations(driver):
        for i, step in enumerate(steps):
            kind = "write" if step.write is not None else "query"
            template = step.write if step.write is not None else step.query
            try:
                render(template or "", EXAMPLE_VALUES)
            except TemplateError as exc:
                problems.append(locate_in_text(text, file, (*loc, i, kind), "bad_template",
                                               f"does not render with example values ({exc})"))
    return problems


_OFF_WORDS = {"OFF", "0", "DIS", "DISABLE", "DISABLED", "FALSE", "STOP", "ABORT"}
_ON_WORDS = {"ON", "1", "ENABLE", "ENABLED", "TRUE", "START", "RUN"}


def output_off_problems(driver: DriverFile, text: str, file: str) -> list[Problem]:
    """A source's output_off must exist and switch off: rendered, it needs an off word (OFF, 0, ...)
    as a token, no on word (ON, 1, ...) as the last token of a message, and must differ from output_on."""
    if driver.role != "source":
        return []
    ops = driver.section.operations
    loc = ("source", "operations", "output_off")
    sent = [render(step.write if step.write is not None else (step.query or ""), EXAMPLE_VALUES)
            for step in ops.output_off]
    if not any(s.strip() for s in sent):
        return [locate_in_text(text, file, loc, "output_off_empty",
                               "sends nothing: the source's output would never be switched off")]
    on = [render(step.write if step.write is not None else (step.query or ""), EXAMPLE_VALUES)
          for step in ops.output_on]
    tokens = [t.upper() for s in sent for t in re.split(r"[\s:,]+", s) if t]
    last = [re.split(r"[\s:,]+", m.strip())[-1].upper() for s in sent for m in s.split(";") if m.strip()]
    if sent == on or any(t in _ON_WORDS for t in last) or not any(t in _OFF_WORDS for t in tokens):
        return [locate_in_text(text, file, loc, "output_off_not_off",
                               f"sends {'; '.join(sent)!r}, which does not switch the output off (expected a "
                               f"command ending in OFF or 0, different from output_on)")]
    return []


def lint(driver: DriverFile, text: str, file: str) -> list[Problem]:
    """Legal but risky choices, located."""
    warnings = []
    if not driver.identify:
        warnings.append(locate_in_text(text, file, ("identify",), "no_identity",
                                       "has no pattern: any instrument that answers would be driven"))
    for i, pattern in enumerate(driver.identify):
        if re.search(pattern, ""):
            warnings.append(locate_in_text(text, file, ("identify", i), "matches_anything",
                                           "matches any answer: a pattern must need identity text"))
    if driver.errors.query is None:
        warnings.append(locate_in_text(text, file, ("errors", "query"), "no_error_queue",
                                       "is not set: without an error-queue query, refused commands go unnoticed"))
    if driver.connection.timeout_s < SHORT_TIMEOUT_S:
        warnings.append(locate_in_text(text, file, ("connection", "timeout_s"), "short_timeout",
                                       f"is below {SHORT_TIMEOUT_S:g} s: a busy instrument would time out"))
    section = driver.section
    if isinstance(section, ScopeSection):
        adc = section.adc
        for i, step in enumerate(section.operations.fetch):
            bits = _SAMPLE_BITS.get(step.parse.sample) if step.parse.kind == "block" else None
            if bits is None:
                continue
            largest = 2 ** (adc.bits - 1 if adc.signed else adc.bits) * adc.counts_per_code
            if largest > 2 ** (bits - 1 if adc.signed else bits):
                warnings.append(locate_in_text(
                    text, file, ("scope", "operations", "fetch", i, "parse"), "narrow_samples",
                    f"has a sample type too narrow for a {adc.bits}-bit ADC x {adc.counts_per_code:g} counts per code",
                ))
    return warnings


__all__ = ["EXAMPLE_VALUES", "DriverCheck", "check_driver", "lint", "render_problems"]
