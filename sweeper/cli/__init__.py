"""Command line: parse, call, render. One module per group of commands; each is thin."""

from __future__ import annotations

import click


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="sweeper")
def main() -> None:
    """sweeper: stepped-sine frequency-response sweeps, judged against the design."""


# Command modules register themselves on `main` when imported (keep one import per module).
from sweeper.cli import sweeps  # noqa: E402,F401
from sweeper.cli import archive  # noqa: E402,F401
from sweeper.cli import reports  # noqa: E402,F401
from sweeper.cli import campaign  # noqa: E402,F401
from sweeper.cli import line  # noqa: E402,F401
from sweeper.cli import bench, driver, instruments  # noqa: E402,F401
from sweeper.cli import analysis  # noqa: E402,F401
from sweeper.cli import resume  # noqa: E402,F401
from sweeper.cli import watch  # noqa: E402,F401
