"""`instruments`: what the VISA backend sees, who answers *IDN?, and which driver file fits."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import click

from sweeper.cli import main
from sweeper.cli.common import console, err_console
from sweeper.run.outcome import ExitCode


@main.command("instruments")
@click.option("--backend", default="@py", show_default=True,
              help="VISA backend: @py (pyvisa-py), @sim (the simulated bench) or a path to a VISA library.")
@click.option("--probe", "probes", multiple=True, metavar="RESOURCE",
              help="Also ask this resource (e.g. TCPIP0::192.168.0.20::5025::SOCKET). Repeatable.")
@click.option("--scan-local", "scan_local", default=None, metavar="PORTS",
              help="Try TCPIP0::127.0.0.1::<port>::SOCKET for listening ports, e.g. 5025-5028.")
@click.option("--lan", "lan", is_flag=True,
              help="Also ask the backend's own discovery, which for @py (pyvisa-py) and system VISA "
                   "libraries sends VXI-11 broadcasts and mDNS queries on the LAN. Without it nothing is "
                   "sent beyond this machine's loopback (the @sim backend lists its instruments anyway).")
@click.option("--timeout", "timeout_s", type=click.FloatRange(min=0.001), default=1.0, show_default=True,
              help="*IDN? timeout per resource, s.")
@click.option("--drivers", "driver_dirs", multiple=True, type=click.Path(file_okay=False),
              help="Also look for driver files in this folder (searched first). Repeatable.")
@click.option("--json", "as_json", is_flag=True, help="Print the findings as JSON.")
def instruments(backend: str, probes: tuple[str, ...], scan_local: str | None, lan: bool,
                timeout_s: float, driver_dirs: tuple[str, ...], as_json: bool) -> None:
    """List the instruments a VISA backend can reach, their identities and matching driver files.

    Raw SCPI sockets announce themselves nowhere, so name them with --probe or find local ones
    with --scan-local. LAN discovery (broadcasts) happens only with --lan. Exit 0 when the
    listing ran (even if nothing answered).
    """
    from sweeper.instruments.discovery import (
        BackendError,
        backend_listing_allowed,
        discover,
        known_drivers,
        list_backend_resources,
        listening_ports,
        open_resource_manager,
        parse_ports,
        socket_resources,
    )
    from sweeper.instruments.driverfile import driver_search_path

    ports: list[int] = []
    if scan_local is not None:
        try:
            ports = parse_ports(scan_local)
        except ValueError as exc:
            err_console.print(f"--scan-local: {exc}", markup=False)
            sys.exit(ExitCode.BAD_INPUT)
    try:
        rm = open_resource_manager(backend)
    except BackendError as exc:
        err_console.print(f"--backend: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    search = [Path(d) for d in driver_dirs] + driver_search_path(None)
    drivers, driver_problems = known_drivers(search)
    try:
        resources = list(list_backend_resources(rm)) if backend_listing_allowed(backend, lan) else []
        resources += list(probes)
        if ports:
            resources += socket_resources(listening_ports(ports))
        found = discover(rm, resources, drivers, timeout_s)
    finally:
        try:
            rm.close()
        except Exception:  # noqa: BLE001 - closing is best effort
            pass
    if as_json:
        click.echo(json.dumps([{"resource": f.resource, "idn": f.idn, "error": f.error, "drivers": f.drivers,
                                "driver_paths": [str(p) for p in f.driver_paths]} for f in found], indent=2))
        sys.exit(ExitCode.PASS)
    if not found:
        hint = "" if probes or ports else " Raw SCPI sockets need --probe or --scan-local."
        if not backend_listing_allowed(backend, lan):
            hint += " --lan also asks the backend's own discovery (LAN broadcasts)."
        console.print(f"No resources found on backend {backend}.{hint}", markup=False)
    else:
        click.echo(f"{len(found)} resource(s) on backend {backend}:")
        for f in found:
            click.echo(f.resource)
            if f.idn:
                click.echo(f"    identity: {f.idn}")
                click.echo(f"    driver:   {', '.join(f.drivers) if f.drivers else 'none matches (see sweeper driver check)'}")
            else:
                click.echo(f"    {f.error}")
    for line in driver_problems:
        err_console.print(f"note: {line}", markup=False)
    sys.exit(ExitCode.PASS)
