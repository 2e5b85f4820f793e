"""What the plan's instruments can do, read from their driver files without opening a session.

Used by the role adapters (their .limits) and by `sweeper check` before anything is touched.
"""

from __future__ import annotations

from typing import Any

from sweeper.instruments import scales
from sweeper.instruments.driverfile import (
    DriverFileError,
    LoadedDriver,
    MeterSection,
    ScopeSection,
    SourceSection,
    driver_search_path,
    find_driver,
    load_driver,
)
from sweeper.instruments.roles import MeterLimits, ScopeLimits, SourceLimits

#: Resource and driver used on a simulated bench when the plan names none for a role.
SIM_DEFAULTS = {
    "source": ("TCPIP0::sim-gen::5025::SOCKET", "sim-generator.yaml"),
    "scope": ("TCPIP0::sim-scope-a::5025::SOCKET", "sim-scope-a.yaml"),
    "meter": ("TCPIP0::sim-meter::5025::SOCKET", "sim-meter.yaml"),
}

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


def roles_for(mode: str) -> tuple[str, str]:
    """The roles a bench mode uses: ('source', 'meter') in meter mode, else ('source', 'scope')."""
    return ("source", "meter") if mode == "meter" else ("source", "scope")


def bench_drivers(plan: Any) -> tuple[dict[str, LoadedDriver], list[tuple[str, str]]]:
    """Find and load the driver file of every role the plan's bench mode uses.

    Returns ({role: loaded driver}, [(plan field path, problem)]); nothing is raised for a
    missing or invalid driver, so a check can report every problem at once.
    """
    bench = plan.bench
    found: dict[str, LoadedDriver] = {}
    problems: list[tuple[str, str]] = []
    search = driver_search_path(getattr(plan, "path", None))
    for role in roles_for(bench.mode):
        ref = getattr(bench, role)
        if ref is None:
            if bench.kind != "simulated":
                problems.append((f"bench.{role}", f"a {bench.mode}-mode visa bench needs a {role} (resource, driver)"))
                continue
            name = SIM_DEFAULTS[role][1]
        else:
            name = ref.driver
        where = f"bench.{role}.driver" if ref is not None else f"bench.{role}"
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
        if role == "scope" and bench.mode == "scope-measure":
            ops = loaded.driver.section.operations
            if not (getattr(ops, "measure_amplitude", None) and getattr(ops, "measure_phase", None)):
                problems.append((where, f"{name!r} has no measure_amplitude and measure_phase operations; "
                                        "expected a scope driver that measures for scope-measure mode"))
                continue
        found[role] = loaded
    return found, problems


def bench_limits(plan: Any) -> tuple[dict[str, Limits], list[tuple[str, str]]]:
    """Limits of every role the plan's bench uses, from its driver files, and the problems met
    finding or reading them as (plan field path, message)."""
    found, problems = bench_drivers(plan)
    return {role: driver_limits(loaded) for role, loaded in found.items()}, problems
