"""What a bench's instruments can do, read from their driver files without opening a session.

Used by the role adapters (their .limits) and by `sweeper check` before anything is touched.
"""

from __future__ import annotations


from sweeper.instruments import scales
from sweeper.instruments.driverfile import (
    DriverFileError,
    LoadedDriver,
    MeterSection,
    ScopeSection,
    SourceSection,
    find_driver,
    load_driver,
)
from sweeper.instruments.roles import MeterLimits, ScopeLimits, SourceLimits
from sweeper.instruments.spec import BenchSpec, roles_for

Limits = SourceLimits | ScopeLimits | MeterLimits


def source_limits(section: SourceSection) -> SourceLimits:
    """SourceLimits of a driver's source section."""
    return SourceLimits(
        frequency_min_hz=section.frequency_hz.min,
        frequency_max_hz=section.frequency_hz.max,
        amplitude_min_vpp=section.amplitude_vpp.min,
        amplitude_max_vpp=section.amplitude_vpp.max,
        offset_max_v=section.offset_max_v,
    )


def volts_per_div_settings(section: ScopeSection) -> tuple[float, ...]:
    """The vertical settings (V/div, ascending); for a continuous range, its two ends."""
    vertical = section.vertical
    if vertical.volts_per_div is not None:
        return tuple(sorted(vertical.volts_per_div))
    span = vertical.volts_per_div_range
    assert span is not None
    if span.steps == "1-2-5":
        return tuple(scales.one_two_five(span.min, span.max))
    return (span.min, span.max)


def scope_limits(section: ScopeSection) -> ScopeLimits:
    """ScopeLimits of a driver's scope section (full-scale spans = V/div x divisions)."""
    divisions = section.vertical.divisions
    return ScopeLimits(
        full_scales_v=tuple(scales.tidy(v * divisions) for v in volts_per_div_settings(section)),
        max_samples=int(section.samples.max),
        max_sample_rate_hz=section.horizontal.sample_rate_hz.max,
        min_sample_rate_hz=section.horizontal.sample_rate_hz.min,
        bits=section.adc.bits,
    )


def meter_limits(section: MeterSection) -> MeterLimits:
    """MeterLimits of a driver's meter section."""
    return MeterLimits(frequency_min_hz=section.frequency_hz.min, frequency_max_hz=section.frequency_hz.max)


def driver_limits(loaded: LoadedDriver) -> Limits:
    """The limits record of any driver file, by its role."""
    section = loaded.driver.section
    if isinstance(section, SourceSection):
        return source_limits(section)
    if isinstance(section, ScopeSection):
        return scope_limits(section)
    assert isinstance(section, MeterSection)
    return meter_limits(section)


def bench_drivers(spec: BenchSpec) -> tuple[dict[str, LoadedDriver], list[tuple[str, str]]]:
    """Find and load the driver file of every role the bench's mode uses.

    Returns ({role: loaded driver}, [(plan field path, problem)]); nothing is raised for a
    missing or invalid driver, so a check can report every problem at once.
    """
    found: dict[str, LoadedDriver] = {}
    problems: list[tuple[str, str]] = []
    search = list(spec.search_path)
    for role in roles_for(spec.mode):
        ref = spec.role(role)
        if ref is None or not ref.driver:
            problems.append((f"bench.{role}", f"a {spec.mode}-mode bench needs a {role} (resource, driver)"))
            continue
        name = ref.driver
        where = f"{ref.field}.driver" if ref.field else f"bench.{role}"
        try:
            loaded = load_driver(find_driver(name, search))
        except FileNotFoundError as exc:
            problems.append((where, str(exc)))
            continue
        except DriverFileError as exc:
            problems.append((where, f"driver file {name!r} is not valid:\n{exc}"))
            continue
        if loaded.driver.role != role:
            problems.append((where, f"{name!r} is a {loaded.driver.role} driver; expected a {role} driver"))
            continue
        if role == "scope" and spec.mode == "scope-measure":
            ops = loaded.driver.section.operations
            if not (getattr(ops, "measure_amplitude", None) and getattr(ops, "measure_phase", None)):
                problems.append((where, f"{name!r} has no measure_amplitude and measure_phase operations; "
                                        "expected a scope driver that measures for scope-measure mode"))
                continue
        found[role] = loaded
    return found, problems


def bench_limits(spec: BenchSpec) -> tuple[dict[str, Limits], list[tuple[str, str]]]:
    """Limits of every role the bench uses, from its driver files, and the problems met
    finding or reading them as (plan field path, message)."""
    found, problems = bench_drivers(spec)
    return {role: driver_limits(loaded) for role, loaded in found.items()}, problems
