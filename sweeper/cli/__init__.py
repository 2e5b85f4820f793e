"""Command line: parse, call, render. One module per group of commands; each is thin.

The command modules are imported only when their command runs (or its help is asked for), so
`sweeper --help` and a mistyped command answer without loading numpy, pandas or scipy. The
one-line summaries of the top-level listing are kept in COMMANDS; tests/cli check them against
the commands' own help texts.
"""

from __future__ import annotations

import importlib

import click

#: Top-level command -> (module under sweeper.cli that defines it, first sentence of its help).
COMMANDS: dict[str, tuple[str, str]] = {
    "bench": ("bench", "The simulated bench as network instruments."),
    "catalog": ("archive", "Maintain the run catalog."),
    "check": ("sweeps", "Validate a test plan and show what the board should do and how long the sweep takes."),
    "compare": (
        "analysis",
        "Compare runs (files or run ids): overlay, difference to a golden run, batch spread, drift.",
    ),
    "diagnose": ("analysis", "Fit the model's part values to a run and name the likely out-of-tolerance part."),
    "drift": (
        "campaign",
        "Largest change in gain and phase against a campaign's first sweep, per frequency (CAMPAIGN_ID: a campaign id or a unique prefix of one).",
    ),
    "driver": ("driver", "Check and try driver files (one YAML file per instrument dialect)."),
    "export": ("reports", "Export a run's points (units in the column names) and a JSON summary."),
    "instruments": (
        "instruments",
        "List the instruments a VISA backend can reach, their identities and matching driver files.",
    ),
    "line": ("line", "Production mode: test board after board with one plan."),
    "repeat": ("campaign", "Sweep a plan repeatedly as one campaign (warm-up, drift), then summarise the drift."),
    "report": ("reports", "Write one self-contained HTML report for one or more runs (files or run ids)."),
    "resume": ("resume", "Finish an interrupted run (RUN: its .journal or .h5 file, or its run id in --runs)."),
    "run": ("sweeps", "Run a test plan's sweep, judge it and file the run."),
    "runs": ("archive", "List filed runs, newest first, with filters."),
    "show": ("archive", "Print a run's metadata and summary (RUN: a run file, or a run id or unique prefix)."),
    "verify": (
        "archive",
        "Re-hash every catalogued run file; report missing, altered or unreadable ones (exit 1 if any).",
    ),
    "watch": ("watch", "Show a sweep building up: a local web page that refreshes as points arrive."),
}


class _LazyGroup(click.Group):
    """A group whose commands are imported on first use (see the module docstring)."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(set(COMMANDS) | set(self.commands))

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in self.commands and cmd_name in COMMANDS:
            importlib.import_module(f"sweeper.cli.{COMMANDS[cmd_name][0]}")
        return self.commands.get(cmd_name)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        names = self.list_commands(ctx)
        limit = formatter.width - 6 - max(len(n) for n in names)
        rows = []
        for name in names:
            summary = COMMANDS[name][1] if name in COMMANDS else self.commands[name].get_short_help_str(limit)
            rows.append((name, click.Command(name, help=summary).get_short_help_str(limit)))
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(cls=_LazyGroup, invoke_without_command=True, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="sweeper")
@click.pass_context
def main(ctx: click.Context) -> None:
    """sweeper: stepped-sine frequency-response sweeps, judged against the design."""
    if ctx.invoked_subcommand is None:
        click.echo(ctx.get_help())
