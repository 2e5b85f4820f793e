"""Text is data: serials, boards and plan names that look like terminal markup, emoji codes or
broken Unicode print literally in every command, and never crash a listing."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
PLAN = REPO / "configs" / "rc-antialias.yaml"
# Rich markup ([/] closes nothing, [bold] styles, [link=...] hides its target) and an emoji code.
MARKUP_SERIALS = ["[/]", "[bold]x", ":x:", "[link=http://127.0.0.1/]click[/link]"]


def sweeper(*args: str, cwd: Path, stdin: str | None = None) -> subprocess.CompletedProcess:
    env = {**os.environ, "COLUMNS": "250"}
    return subprocess.run([sys.executable, "-m", "sweeper", *args], capture_output=True, text=True, cwd=cwd,
                          timeout=300, env=env, input=stdin)


def plan_with_serial(tmp_path: Path, serial_yaml: str, name: str = "odd.yaml") -> Path:
    text = PLAN.read_text(encoding="utf-8").replace("serial: DLF7-000123", f"serial: {serial_yaml}")
    assert serial_yaml in text
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("serial", MARKUP_SERIALS)
def test_check_and_run_print_a_markup_serial_literally(tmp_path: Path, serial: str) -> None:
    quoted = '"' + serial.replace('"', '\\"') + '"'
    plan = plan_with_serial(tmp_path, quoted)
    checked = sweeper("check", str(plan), cwd=tmp_path)
    assert checked.returncode == 0, checked.stderr
    assert f"({serial})" in checked.stdout  # the serial as written, brackets and colons kept
    assert "Traceback" not in checked.stdout + checked.stderr
    ran = sweeper("run", str(plan), "--out", str(tmp_path / "runs"), cwd=tmp_path)
    assert ran.returncode == 0, ran.stdout + ran.stderr
    assert f"({serial})" in ran.stdout and "Traceback" not in ran.stdout + ran.stderr
    assert "\u274c" not in ran.stdout  # :x: is not turned into the cross-mark emoji


def test_a_located_message_on_a_line_with_an_emoji_code_stays_literal(tmp_path: Path) -> None:
    # ':100:' would become an emoji if messages were read for emoji codes (the file name is
    # chosen so that "name.yaml:100:9" holds the code).
    lines = PLAN.read_text(encoding="utf-8").splitlines()
    lines += ["#"] * (99 - len(lines)) + ["extra_section: 1"]
    plan = tmp_path / "emoji.yaml"
    plan.write_text("\n".join(lines) + "\n", encoding="utf-8")
    result = sweeper("check", str(plan), cwd=tmp_path)
    assert result.returncode == 2
    assert f"{plan}:100:1: extra_section" in result.stderr, result.stderr
    assert "\U0001f4af" not in result.stderr


def test_an_unpaired_surrogate_is_refused_located_by_check_and_run(tmp_path: Path) -> None:
    plan = plan_with_serial(tmp_path, '"\\ud800"')
    line = next(i for i, t in enumerate(plan.read_text().splitlines(), 1) if "serial:" in t)
    for command in (["check", str(plan)], ["run", str(plan), "--out", str(tmp_path / "runs")]):
        result = sweeper(*command, cwd=tmp_path)
        assert result.returncode == 2, result.stderr
        assert "Traceback" not in result.stdout + result.stderr
        assert f"{plan}:{line}:" in result.stderr and "dut.serial" in result.stderr and "U+D800" in result.stderr
    assert not (tmp_path / "runs").exists() or not list((tmp_path / "runs").glob("*.h5"))


def test_line_runs_show_and_compare_with_markup_serials(tmp_path: Path) -> None:
    runs = tmp_path / "runs"
    # the shift: a normal board, three markup serials, and a serial holding an escape character
    # (refused: a control character), then the end.
    shift = "SN-1\n[/]\n[bold]x\n:x:\n\x1b[2Jclear\n\n"
    summary = tmp_path / "shift.json"
    result = sweeper("line", str(PLAN), "--out", str(runs), "--summary-out", str(summary), cwd=tmp_path,
                     stdin=shift)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "Traceback" not in result.stdout + result.stderr
    assert summary.exists()
    for serial in ("[/]", "[bold]x", ":x:"):
        assert f"board {serial}" in result.stdout
    assert "\x1b[2J" not in result.stdout  # echoed escaped, never sent to the terminal
    assert "control character" in result.stdout

    listing = sweeper("runs", "--runs", str(runs), cwd=tmp_path)
    assert listing.returncode == 0, listing.stderr
    for serial in ("SN-1", "[/]", "[bold]x", ":x:"):
        assert f" {serial} " in listing.stdout
    assert "4 run(s)" in listing.stdout

    files = sorted(runs.glob("*.h5"))
    serials = set()
    for path in files:
        shown = sweeper("show", str(path), "--runs", str(runs), cwd=tmp_path)
        assert shown.returncode == 0 and "Traceback" not in shown.stderr, shown.stderr
        serials.add(shown.stdout.split("serial ", 1)[1].split()[0])
    assert serials == {"SN-1", "[/]", "[bold]x", ":x:"}

    compared = sweeper("compare", *map(str, files), "--runs", str(runs), cwd=tmp_path)
    assert compared.returncode in (0, 1), compared.stdout + compared.stderr
    assert "Traceback" not in compared.stdout + compared.stderr
    assert "[/]" in compared.stdout and "[bold]x" in compared.stdout
