"""`driver check` and `driver try`: help writing a driver file for a new instrument."""

from __future__ import annotations

import sys

import click
from rich.table import Table
from rich.text import Text

from sweeper.cli import main
from sweeper.cli.common import console, err_console
from sweeper.run.outcome import ExitCode

STATUS_STYLE = {"ok": "green", "failed": "bold red", "skipped": "dim"}


@main.group("driver")
def driver_group() -> None:
    """Check and try driver files (one YAML file per instrument dialect)."""


@driver_group.command("check")
@click.argument("files", nargs=-1, required=True, type=click.Path(dir_okay=False))
def check(files: tuple[str, ...]) -> None:
    """Validate driver files: schema, templates, placeholders, parsers, limits.

    Every problem is printed as file:line:column: field: given ...; expected ... .
    Exit 0 when all files are usable (warnings allowed), 2 otherwise.
    """
    from sweeper.instruments.driver_check import check_driver
    from sweeper.instruments.limits import driver_limits

    bad = 0
    for name in files:
        result = check_driver(name)
        for problem in result.problems:
            err_console.print(str(problem), markup=False)
        for warning in result.warnings:
            err_console.print(f"warning: {warning}", markup=False)
        if not result.ok:
            bad += 1
            err_console.print(f"{name}: {len(result.problems)} problem(s); the file cannot be used", markup=False)
            continue
        assert result.loaded is not None
        driver = result.loaded.driver
        ops = driver.section.operations
        used = [n for n in type(ops).model_fields if getattr(ops, n)]
        click.echo(f"{name}: ok: {driver.role} driver '{driver.name}'")
        click.echo(f"  identify: {', '.join(driver.identify) or '(none)'}")
        click.echo(f"  operations: {', '.join(used)}")
        click.echo(f"  limits: {describe_limits(driver_limits(result.loaded))}")
    sys.exit(ExitCode.BAD_INPUT if bad else ExitCode.PASS)


def describe_limits(limits) -> str:
    """One line of a driver's limits, in engineering units."""
    from sweeper.instruments.roles import MeterLimits, ScopeLimits, SourceLimits
    from sweeper.plan import format_quantity as q

    if isinstance(limits, SourceLimits):
        return (f"frequency {q(limits.frequency_min_hz, 'frequency')} .. {q(limits.frequency_max_hz, 'frequency')}, "
                f"amplitude {q(limits.amplitude_min_vpp, 'amplitude')} .. {q(limits.amplitude_max_vpp, 'amplitude')}, "
                f"offset +-{q(limits.offset_max_v, 'voltage')}")
    if isinstance(limits, ScopeLimits):
        spans = limits.full_scales_v
        return (f"full scale {q(min(spans), 'voltage')} .. {q(max(spans), 'voltage')} ({len(spans)} ranges), "
                f"{q(limits.min_sample_rate_hz, 'frequency').replace('Hz', 'Sa/s')} .. "
                f"{q(limits.max_sample_rate_hz, 'frequency').replace('Hz', 'Sa/s')} "
                f"sample rate, up to {limits.max_samples} samples, {limits.bits}-bit")
    if isinstance(limits, MeterLimits):
        return f"frequency {q(limits.frequency_min_hz, 'frequency')} .. {q(limits.frequency_max_hz, 'frequency')}"
    return str(limits)


@driver_group.command("try")
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("resource")
@click.option("--backend", default="@py", show_default=True,
              help="VISA backend: @py (pyvisa-py), @sim (the simulated bench) or a path to a VISA library.")
@click.option("--timeout", "timeout_s", type=click.FloatRange(min=0.001), default=None,
              help="Session timeout, s (default: the driver file's).")
@click.option("--frequency", "frequency", default="1 kHz", show_default=True,
              help="Frequency for the source and meter steps.")
def try_(file: str, resource: str, backend: str, timeout_s: float | None, frequency: str) -> None:
    """Self-test driver FILE on a live instrument at RESOURCE and show what worked.

    Steps: open, identity, init, then per role (source: set and read back a frequency, output
    kept off; scope: ranges, window, one capture, scaling, its own measurements; meter: one
    measurement), then the error queue. Exit 0 when no step failed, 2 for a bad driver file,
    resource name or option, 3 when a step failed.
    """
    from sweeper.instruments.discovery import (
        BackendError,
        open_resource_manager,
        resource_name_problem,
    )
    from sweeper.instruments.driver_check import check_driver
    from sweeper.instruments.driver_try import any_failed, try_driver
    from sweeper.plan import parse_quantity

    try:
        frequency_hz = parse_quantity(frequency, "frequency")
    except ValueError as exc:
        err_console.print(f"--frequency: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    name_problem = resource_name_problem(resource)
    if name_problem is not None:
        err_console.print(f"RESOURCE: {name_problem}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    result = check_driver(file)
    if not result.ok:
        for problem in result.problems:
            err_console.print(str(problem), markup=False)
        err_console.print(f"{file}: {len(result.problems)} problem(s); run `sweeper driver check {file}`",
                          markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    assert result.loaded is not None
    try:
        rm = open_resource_manager(backend)
    except BackendError as exc:
        err_console.print(f"--backend: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    try:
        steps = try_driver(result.loaded, rm, resource, timeout_s=timeout_s, frequency_hz=frequency_hz)
    finally:
        try:
            rm.close()
        except Exception:  # noqa: BLE001 - closing is best effort
            pass
    table = Table(title=f"{result.loaded.name} on {resource}")
    table.add_column("step")
    table.add_column("result")
    table.add_column("detail", overflow="fold")
    table.add_column("s", justify="right")
    for step in steps:
        style = STATUS_STYLE.get(step.status, "")
        table.add_row(step.name, Text(step.status, style=style), step.detail, f"{step.seconds:.3f}")
    console.print(table)
    failed = [s.name for s in steps if s.status == "failed"]
    if any_failed(steps):
        err_console.print(f"{len(failed)} step(s) failed: {', '.join(failed)}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    console.print("all steps passed", markup=False)
    sys.exit(ExitCode.PASS)
