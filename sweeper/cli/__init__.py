"""Command line: parse, call, render. One module per group of commands; each is thin."""

from __future__ import annotations

import click


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="sweeper")
def main() -> None:
    """sweeper: stepped-sine frequency-response sweeps, judged against the design."""


# Command modules register themselves on `main` when imported (keep one import per module).
from sweeper.cli import (  # noqa: E402,F401
    analysis,  # noqa: E402,F401
    archive,  # noqa: E402,F401
    bench,
    campaign,  # noqa: E402,F401
    driver,
    instruments,
    line,  # noqa: E402,F401
    reports,  # noqa: E402,F401
    resume,  # noqa: E402,F401
    sweeps,  # noqa: E402,F401
    watch,  # noqa: E402,F401
)
