"""Command line: parse, call, render. Filled in as the pieces land."""

from __future__ import annotations

import click


@click.group()
def main() -> None:
    """sweeper: stepped-sine frequency-response sweeps, judged against the design."""
