"""The top-level command line: lazily imported command modules, a listing that matches the
commands' own help, a fast `--help`, and a bare `sweeper` that shows the help and exits 0."""

from __future__ import annotations

import importlib
import subprocess
import sys

import click
from click.testing import CliRunner

from sweeper.cli import COMMANDS, main


def test_every_listed_summary_is_the_commands_own_first_sentence() -> None:
    for name, (module, summary) in COMMANDS.items():
        importlib.import_module(f"sweeper.cli.{module}")
        command = main.commands[name]
        assert command.get_short_help_str(10_000) == summary, name


def test_every_registered_command_is_listed() -> None:
    for module in {m for m, _ in COMMANDS.values()}:
        importlib.import_module(f"sweeper.cli.{module}")
    assert set(main.commands) == set(COMMANDS)


def test_help_loads_no_command_module_and_no_numerics() -> None:
    # A fresh interpreter: what `sweeper --help` imports (sys.modules after it ran).
    code = ("import sys\nfrom sweeper.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(','.join(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('numpy', 'pandas', 'scipy', 'h5py', 'pyvisa', 'sweeper'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    loaded = out.strip().splitlines()[-1].split(",")
    assert loaded == ["sweeper", "sweeper.cli"], loaded


def test_bare_sweeper_shows_the_help_and_exits_0() -> None:
    result = CliRunner().invoke(main, [])
    assert result.exit_code == 0
    assert "Commands:" in result.output and "run" in result.output


def test_an_unknown_command_exits_2_with_clicks_message() -> None:
    result = CliRunner().invoke(main, ["rnu"])
    assert result.exit_code == 2 and "No such command 'rnu'" in result.output
    assert isinstance(main, click.Group)
