"""`bench serve`: the simulated bench's instruments as raw SCPI socket servers (loopback by default)."""

from __future__ import annotations

import math
import signal
import sys
import time

import click

from sweeper.cli import main
from sweeper.cli.common import err_console, load_plan_or_exit
from sweeper.run.outcome import ExitCode

FAULT_HELP = (
    "Inject a network fault: KIND:INSTRUMENT[:TEXT], KIND one of drop, stall[=SECONDS], cut[=FRACTION], "
    "trickle[=BYTES]; it fires once, on the next message to INSTRUMENT containing TEXT "
    "(e.g. 'stall=5:scope-a:BLOC?'). Repeatable."
)


@main.group("bench")
def bench_group() -> None:
    """The simulated bench as network instruments."""


def parse_fault(spec: str, plan) -> None:
    """Add one --fault spec to a NetFaultPlan; ValueError says what is wrong with it."""
    from sweeper.sim.serve import INSTRUMENTS

    parts = spec.split(":", 2)
    if len(parts) < 2:
        raise ValueError(f"{spec!r}: expected KIND:INSTRUMENT[:TEXT]")
    kind_text, instrument = parts[0].strip().lower(), parts[1].strip()
    text = parts[2] if len(parts) > 2 else ""
    kind, _, value_text = kind_text.partition("=")
    if instrument not in INSTRUMENTS and instrument != "*":
        raise ValueError(f"{spec!r}: instrument {instrument!r}; expected one of {', '.join(INSTRUMENTS)} or *")
    try:
        value = float(value_text) if value_text else None
    except ValueError:
        raise ValueError(f"{spec!r}: {value_text!r} is not a number") from None
    if kind == "drop":
        plan.drop_connection(instrument, contains=text)
    elif kind == "stall":
        plan.stall(instrument, value if value is not None else math.inf, contains=text or "?")
    elif kind == "cut":
        plan.cut_block(instrument, value if value is not None else 0.5, contains=text or "?")
    elif kind == "trickle":
        plan.trickle(instrument, int(value) if value is not None else 64, contains=text or "?")
    else:
        raise ValueError(f"{spec!r}: fault kind {kind!r}; expected drop, stall, cut or trickle")


@bench_group.command("serve")
@click.argument("plan_path", type=click.Path(dir_okay=False))
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to serve on. Anything but loopback needs --allow-remote.")
@click.option("--base-port", default=5025, show_default=True, type=click.IntRange(0, 65531),
              help="Port of the generator; scope A, scope B and the meter follow (0: any free ports).")
@click.option("--allow-remote", is_flag=True,
              help="Allow a non-loopback --host (the simulated instruments have no access control).")
@click.option("--instrument", "instruments", multiple=True,
              type=click.Choice(["generator", "scope-a", "scope-b", "meter"]),
              help="Serve only these instruments (repeatable; default all four).")
@click.option("--seed", type=int, default=None, help="Override the plan's bench.simulation.seed.")
@click.option("--fault", "faults", multiple=True, help=FAULT_HELP)
@click.option("--duration", type=click.FloatRange(min=0, min_open=True), default=None,
              help="Stop after this many seconds (default: until Ctrl-C).")
def serve(plan_path: str, host: str, base_port: int, allow_remote: bool, instruments: tuple[str, ...],
          seed: int | None, faults: tuple[str, ...], duration: float | None) -> None:
    """Serve the simulated bench of PLAN_PATH (its DUT and bench.simulation) as raw SCPI sockets.

    Each instrument listens on its own TCP port and speaks the dialect of sweeper/sim/DIALECTS.md
    (LF-terminated messages, binary blocks as they are), with the same physics as the simulated
    bench. Point a plan at them with bench.kind: visa and the printed resource names.
    Stops on Ctrl-C or SIGTERM (exit 0).
    """
    from dataclasses import replace

    from sweeper.run.spec import sim_config
    from sweeper.sim.serve import (
        DRIVERS,
        INSTRUMENTS,
        NetFaultPlan,
        is_loopback,
        serve_bench,
    )

    plan = load_plan_or_exit(plan_path)
    net_faults = NetFaultPlan()
    for spec in faults:
        try:
            parse_fault(spec, net_faults)
        except ValueError as exc:
            err_console.print(f"--fault {exc}", markup=False)
            sys.exit(ExitCode.BAD_INPUT)
    try:
        config = sim_config(plan)
    except Exception as exc:  # noqa: BLE001 - a DUT the simulator cannot build is bad input
        err_console.print(f"{plan_path}: cannot simulate this DUT: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    if seed is not None:
        config = replace(config, seed=seed)
    try:
        handle = serve_bench(config, host, base_port, instruments=instruments or INSTRUMENTS,
                             faults=net_faults, allow_remote=allow_remote)
    except ValueError as exc:
        err_console.print(f"--host {host}: {exc}", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    except OSError as exc:
        err_console.print(f"cannot listen on {host} from port {base_port}: {exc.strerror or exc} "
                          "(another program may hold the port: try --base-port)", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    stop = {"flag": False}

    def on_signal(signum, frame) -> None:  # noqa: ARG001 - signal handler signature
        stop["flag"] = True

    signal.signal(signal.SIGTERM, on_signal)
    signal.signal(signal.SIGINT, on_signal)
    with handle:
        reach = "loopback only" if is_loopback(handle.host) else "REMOTE ACCESS ALLOWED: anyone on the network"
        click.echo(f"Serving the simulated bench of {plan.name} ({plan.model.circuit}, seed {config.seed}) "
                   f"on {handle.host} ({reach})")
        for name, resource in handle.resources.items():
            click.echo(f"  {name:<10} {resource}  {DRIVERS[name]}")
        resources = handle.resources
        click.echo("A plan reaches them with:")
        click.echo("bench:\n  kind: visa\n  visa_library: \"@py\"")
        if "generator" in resources:
            click.echo(f"  source: {{resource: \"{resources['generator']}\", driver: {DRIVERS['generator']}}}")
        for name in ("scope-a", "scope-b"):
            if name in resources:
                click.echo(f"  scope: {{resource: \"{resources[name]}\", driver: {DRIVERS[name]}}}")
                break
        if "meter" in resources:
            click.echo(f"  meter: {{resource: \"{resources['meter']}\", driver: {DRIVERS['meter']}}}")
        click.echo("Ctrl-C stops the servers.")
        sys.stdout.flush()
        deadline = time.monotonic() + duration if duration is not None else math.inf
        while not stop["flag"] and time.monotonic() < deadline:
            time.sleep(0.1)
        counts = ", ".join(f"{name} {handle.bench.counters[resource]}"
                           for name, resource in _sim_names(handle).items())
        click.echo(f"stopped; messages served: {counts}")
    sys.exit(ExitCode.PASS)


def _sim_names(handle) -> dict[str, str]:
    from sweeper.sim.serve import SIM_RESOURCES

    return {name: SIM_RESOURCES[name] for name in handle.servers}
