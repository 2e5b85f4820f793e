"""`sweeper compare`, `sweeper diagnose` and the extraction block of `sweeper report`, on real
run files from the simulated bench (three invented boards: C on nominal, C 4 % high, C 30 % high)."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

import pytest
from analysis_rig import sweep
from click.testing import CliRunner

from sweeper.cli import main
from sweeper.report.extraction import extraction_section_html
from sweeper.store.runfile import read_run

BOARDS = (("ANX3-0101", "{}"), ("ANX3-0102", "{C: 104 nF}"), ("ANX3-0103", "{C: 130 nF}"))


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[Path]]:
    """The runs folder (with its catalog) and the three run files, in start-time order."""
    folder = tmp_path_factory.mktemp("runs")
    paths = [sweep(folder, seed=10 + i, serial=serial, true_parts=parts)[2] for i, (serial, parts) in enumerate(BOARDS)]
    return folder, paths


def invoke(*args: str):
    result = CliRunner().invoke(main, list(args), terminal_width=200)
    # A traceback would surface as an exception other than SystemExit.
    assert result.exception is None or isinstance(result.exception, SystemExit), result.output
    return result


class Page(HTMLParser):
    """Collects what the tests look at: tags, headings, outside references."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.headings: list[str] = []
        self.outside: list[str] = []
        self._in_heading = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        self._in_heading = tag in ("h1", "h2")
        for name, value in attrs:
            if name in ("src", "href") and value and re.match(r"[a-z]+:", value) and not value.startswith("data:"):
                self.outside.append(value)

    def handle_endtag(self, tag: str) -> None:
        self._in_heading = False

    def handle_data(self, data: str) -> None:
        if self._in_heading:
            self.headings.append(data.strip())


def test_compare_writes_a_self_contained_page_with_every_plot(runs, tmp_path: Path) -> None:
    folder, paths = runs
    golden_id = read_run(paths[0])[1]["run_id"]
    out = tmp_path / "batch.html"
    result = invoke("compare", str(paths[1]), str(paths[2]), "--golden", golden_id, "--runs", str(folder),
                    "--at", "1kHz", "--at", "10 kHz", "--out", str(out))
    assert result.exit_code == 0, result.output
    assert "ANX3-0103" in result.output and "golden" in result.output
    page = Page()
    page.feed(out.read_text(encoding="utf-8"))
    assert page.headings[:1] == ["Comparison of 3 runs"]
    for heading in ("Overlay", "Difference to the golden run", "Spread of the batch", "Drift at chosen frequencies"):
        assert heading in page.headings
    assert page.tags.count("svg") == 4
    assert "script" not in page.tags and "link" not in page.tags and not page.outside


def test_compare_writes_plots_beside_the_named_file(runs, tmp_path: Path) -> None:
    _, paths = runs
    out = tmp_path / "series.png"
    result = invoke("compare", *map(str, paths), "--at", "1kHz", "--out", str(out))
    assert result.exit_code == 0, result.output
    for name in ("series.png", "series-spread.png", "series-drift.png"):
        assert (tmp_path / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not (tmp_path / "series-difference.png").exists()  # no golden run, no difference plot
    # The batch spread printed: the 130 nF board is 2.3 dB below the others well above the corner
    # (handbook: 20 log10(130/100) = 2.28 dB where |H| ~ 1/(w R C)).
    assert re.search(r"widest gain range 2\.\d+ dB", result.output), result.output


@pytest.mark.parametrize("args, message", [
    (("--out", "x.pdf"), "expected .html, .png or .svg"),
    (("--at", "banana"), "banana"),
    (("--at", "0 Hz"), "> 0 Hz"),
])
def test_compare_refuses_bad_options_with_exit_2(runs, args: tuple[str, ...], message: str) -> None:
    _, paths = runs
    result = invoke("compare", str(paths[0]), *args)
    assert result.exit_code == 2
    assert message in result.output


def test_diagnose_names_the_wrong_capacitor_and_exits_1(runs) -> None:
    _, paths = runs
    result = invoke("diagnose", str(paths[2]))
    assert result.exit_code == 1, result.output
    assert "C is the likely cause" in result.output and "out of tolerance" in result.output
    assert "RC product" in result.output and "held at nominal" in result.output


def test_diagnose_passes_a_board_within_tolerance(runs) -> None:
    folder, paths = runs
    run_id = read_run(paths[1])[1]["run_id"]
    result = invoke("diagnose", run_id, "--runs", str(folder))
    assert result.exit_code == 0, result.output
    assert "No part found out of tolerance" in result.output


def test_diagnose_unknown_run_is_bad_input(runs) -> None:
    folder, _ = runs
    result = invoke("diagnose", "no-such-run", "--runs", str(folder))
    assert result.exit_code == 2


def test_report_carries_the_extraction_table(runs, tmp_path: Path) -> None:
    _, paths = runs
    out = tmp_path / "r.html"
    result = invoke("report", str(paths[2]), "--out", str(out))
    assert result.exit_code == 0, result.output
    text = out.read_text(encoding="utf-8")
    assert "<h2>Parameter extraction</h2>" in text
    assert 'data-name="RC product"' in text and "C is the likely cause" in text


def test_extraction_block_explains_why_it_is_missing() -> None:
    # A run whose stored plan cannot be read again gets a note, never an error page.
    html = extraction_section_html(None, {"run_id": "X1", "plan_yaml": "plan: 1\nname: short\n"})
    assert html.startswith('<p class="note">Parameter extraction not available:')
