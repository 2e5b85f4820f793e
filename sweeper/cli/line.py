"""`line`: production mode, board after board, with a large PASS or FAIL and a running tally."""

from __future__ import annotations

import math
import signal
import sys
import unicodedata
from pathlib import Path
from typing import TYPE_CHECKING

import click
from rich import box
from rich.align import Align
from rich.console import Group
from rich.panel import Panel
from rich.table import Table
from rich.text import Text

from sweeper.cli import main
from sweeper.cli.common import (
    checked_plan_or_exit,
    console,
    err_console,
    styled,
)
from sweeper.measure.point import Verdict
from sweeper.plan import format_quantity
from sweeper.run.outcome import ExitCode
from sweeper.verdict import VERDICT_LABELS, VERDICT_MEANINGS

if TYPE_CHECKING:
    from sweeper.campaigns.production import BoardTest, ShiftSummary, Tally
    from sweeper.run.outcome import RunOutcome

# Our own 5-row block letters, drawn with '#' and widened when rendered.
_GLYPHS: dict[str, tuple[str, ...]] = {
    "P": ("####.", "#...#", "####.", "#....", "#...."),
    "A": (".###.", "#...#", "#####", "#...#", "#...#"),
    "S": (".####", "#....", ".###.", "....#", "####."),
    "F": ("#####", "#....", "####.", "#....", "#...."),
    "I": ("#####", "..#..", "..#..", "..#..", "#####"),
    "L": ("#....", "#....", "#....", "#....", "#####"),
    "E": ("#####", "#....", "####.", "#....", "#####"),
    "R": ("####.", "#...#", "####.", "#..#.", "#...#"),
    "O": (".###.", "#...#", "#...#", "#...#", ".###."),
}
_RESULT_STYLE = {"PASS": "bold black on green3", "FAIL": "bold white on red3", "ERROR": "bold white on grey39"}
FAILING_SHOWN = 10  # failing frequencies listed under the result; the rest are counted


def big_text(word: str) -> str:
    """`word` (letters of PASS, FAIL, ERROR) as five lines of block letters, two cells per dot."""
    rows = []
    for r in range(5):
        rows.append("  ".join(_GLYPHS[c][r].replace("#", "██").replace(".", "  ") for c in word.upper()))
    return "\n".join(rows)


def visible(text: str) -> str:
    """Text with control characters shown as escapes (\\x07), so an echo cannot drive the terminal."""
    return "".join(repr(c)[1:-1] if unicodedata.category(c).startswith("C") else c for c in text)


def tally_line(t: Tally) -> str:
    """The running tally on one line."""
    fpy = t.first_pass_yield
    fpy_text = "n/a" if math.isnan(fpy) else f"{100 * fpy:.1f} % ({t.first_tests_passed}/{t.first_tests})"
    return (f"tested {t.tested} · boards {t.boards} · passed {t.passed} · failed {t.failed} · "
            f"errors {t.errors} · retests {t.retests} · first-pass yield {fpy_text}")


def result_panel(test: BoardTest, outcome: RunOutcome) -> Panel:
    """The large PASS / FAIL / ERROR panel of one board, with its failing frequencies."""
    from sweeper.campaigns.production import failing_points

    verdict = Verdict(outcome.verdict)
    parts = [Align.center(Text(big_text(test.result), no_wrap=True))]
    detail = f"{test.serial}{'  (retest)' if test.retest else ''}   verdict {VERDICT_LABELS[verdict]}: " \
             f"{VERDICT_MEANINGS[verdict]}"
    if test.result == "ERROR":
        detail = f"{test.serial}: run {test.status}: {test.error or 'not completed'}; board NOT judged"
    parts.append(Text(detail, justify="center"))
    bad = failing_points(outcome.points)
    if bad:
        table = Table(box=box.SIMPLE_HEAD, title="failing frequencies", style=_RESULT_STYLE[test.result])
        for col in ("frequency", "gain dB", "limits dB", "phase °", "limits °", ""):
            table.add_column(col, justify="right", no_wrap=True)
        for p in bad[:FAILING_SHOWN]:
            table.add_row(format_quantity(p.frequency_hz, "frequency"), f"{p.gain_db:.2f}",
                          f"{p.gain_lo_db:.2f}..{p.gain_hi_db:.2f}", f"{p.phase_deg:.1f}",
                          f"{p.phase_lo_deg:.1f}..{p.phase_hi_deg:.1f}", VERDICT_LABELS[Verdict(p.verdict)])
        parts.append(Align.center(table))
    if len(bad) > FAILING_SHOWN:
        parts.append(Text(f"... and {len(bad) - FAILING_SHOWN} more failing frequencies", justify="center"))
    return Panel(Group(*parts), style=_RESULT_STYLE[test.result], title=Text(f"board {test.serial}"),
                 subtitle=Text(test.run_id), padding=(1, 2))


def render_summary(summary: ShiftSummary) -> None:
    """The end-of-shift table and tally."""
    table = Table(title=f"Shift {summary.shift_id}  {summary.plan_name}  {summary.start_utc} .. {summary.end_utc}",
                  box=box.SIMPLE_HEAD)
    for col in ("#", "UTC", "serial", "result", "retest", "failing"):
        table.add_column(col, no_wrap=True)
    table.add_column("run id", overflow="fold")
    for i, t in enumerate(summary.tests, start=1):
        verdict = VERDICT_LABELS[Verdict[t.verdict]]
        result = t.result if verdict == t.result else f"{t.result} ({verdict})"
        table.add_row(str(i), t.time_utc[11:19], t.serial, result, "yes" if t.retest else "",
                      str(len(t.failing_hz)) if t.failing_hz else "", t.run_id)
    console.print(table)
    console.print(Panel(tally_line(summary.tally), title=Text(f"end of shift ({summary.ended_by})")))


@main.command()
@click.argument("plan_path", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", default="runs", show_default=True, type=click.Path(file_okay=False),
              help="Folder for run files, journals and the catalog.")
@click.option("--summary-out", type=click.Path(dir_okay=False),
              help="Write the end-of-shift summary: .csv (one row per test) or .json.")
@click.option("--waveforms/--no-waveforms", default=False, help="Also store every capture's raw waveforms.")
def line(plan_path: str, out_dir: str, summary_out: str | None, waveforms: bool) -> None:
    """Production mode: test board after board with one plan.

    Reads one serial per line from standard input (typed, or a barcode scanner that types);
    an empty line, 'end' or the end of input ends the shift. A serial tested before needs a
    'y' to be retested. Exit 0 when the shift ends normally (the verdicts are in the tally),
    3 when a run ended in an instrument or run error, 130 when interrupted.
    """
    from sweeper.campaigns.production import (
        SUMMARY_SUFFIXES,
        run_shift,
        write_shift_summary,
    )

    if summary_out and Path(summary_out).suffix.lower() not in SUMMARY_SUFFIXES:
        err_console.print(f"--summary-out: {summary_out!r} needs the suffix .csv or .json", markup=False)
        sys.exit(ExitCode.BAD_INPUT)
    plan, report = checked_plan_or_exit(plan_path)
    console.print(styled((plan.name, "bold"), f"  {plan.dut.board}: production line, {report.points} points per "
                                              f"board, about {report.duration_text} each; runs filed in {out_dir}"))
    stdin = click.get_text_stream("stdin")
    typed = stdin.isatty()

    def ask(prompt: str) -> str | None:
        console.print(prompt, end="", markup=False)
        console.file.flush()
        text = stdin.readline()
        if text == "":
            console.print()
            return None
        if not typed:  # show what the scanner or pipe sent, control characters escaped
            console.print(visible(text.rstrip("\r\n")), markup=False)
        return text

    def on_term(signum, frame):
        raise KeyboardInterrupt

    def on_start(serial: str, retest: bool) -> None:
        console.print(f"testing {serial}{' (retest)' if retest else ''} ...", markup=False)

    def on_result(test, outcome, tally) -> None:
        console.print(result_panel(test, outcome))
        console.print(tally_line(tally), markup=False)

    old_term = signal.signal(signal.SIGTERM, on_term)
    try:
        summary = run_shift(plan, Path(out_dir), ask, tell=lambda m: console.print(m, style="bold yellow", markup=False),
                            on_start=on_start, on_result=on_result, keep_waveforms=waveforms)
    finally:
        signal.signal(signal.SIGTERM, old_term)
    render_summary(summary)
    if summary_out:
        try:
            write_shift_summary(summary, summary_out)
        except OSError as exc:
            err_console.print(f"{summary_out}: cannot write the shift summary: {exc.strerror or exc}", markup=False)
            sys.exit(ExitCode.RUN_ERROR)
        console.print(f"shift summary written to {summary_out}")
    if summary.ended_by == "interrupted":
        sys.exit(ExitCode.INTERRUPTED)
    sys.exit(ExitCode.RUN_ERROR if summary.tally.errors else ExitCode.PASS)
