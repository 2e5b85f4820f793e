"""`watch`: follow a running sweep in a browser, on a page served from this computer only."""

from __future__ import annotations

import sys

import click

from sweeper.cli import main
from sweeper.cli.common import RUNS_OPTION, console, err_console
from sweeper.run.outcome import ExitCode


@main.command()
@click.argument("run")
@RUNS_OPTION
@click.option("--port", default=0, show_default=True, type=int, help="TCP port (0: any free port).")
@click.option("--host", default=None,
              help="Serve on this address instead of 127.0.0.1. Anyone who can reach it sees the run.")
def watch(run: str, runs_dir: str, port: int, host: str | None) -> None:
    """Show a sweep building up: a local web page that refreshes as points arrive.

    RUN is a journal, a run file (its journal beside it is followed while the run goes) or a
    run id (or a unique prefix of one) in the runs folder. Stop with Ctrl-C (exit 0).
    """
    from sweeper.live import LiveError, find_source, is_loopback, make_server

    source = find_source(run, runs_dir)
    if source is None:
        err_console.print(f"{run}: no such journal or run file, and no single run id starting so in {runs_dir}/",
                          markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    from sweeper.live.state import read_snapshot

    try:
        read_snapshot(source)
    except Exception as exc:  # noqa: BLE001 - an unreadable journal or run file is reported, not raised
        err_console.print(f"{source}: cannot read: {exc}", markup=False)
        sys.exit(ExitCode.RUN_ERROR)
    address = host if host is not None else "127.0.0.1"
    try:
        server = make_server(source, address, port, allow_remote=host is not None)
    except LiveError as exc:
        err_console.print(str(exc), markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    if not is_loopback(address):
        err_console.print(f"warning: serving on {address}: anyone who can reach this address can see the run",
                          markup=False)
    console.print(f"watching {source}\nopen {server.url}  (Ctrl-C to stop)", markup=False)
    try:
        server.serve_forever(poll_interval=0.2)
    except KeyboardInterrupt:
        console.print("stopped", markup=False)
    finally:
        server.server_close()
