"""The self-contained HTML report (sweeper.report.html), read back with the stdlib html.parser."""

from __future__ import annotations

import base64
import re
from html.parser import HTMLParser

import numpy as np
import pytest

from sweeper.report.html import render_html, write_html

URL_ATTRIBUTES = {"src", "href", "xlink:href", "srcset", "action", "poster", "data", "background", "formaction"}


class Page(HTMLParser):
    """Collects what the tests look at: tags, table body rows by table class, banners, attributes."""

    def __init__(self, text: str) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.tables: dict[str, list[list[str]]] = {}
        self.row_classes: dict[str, list[str]] = {}
        self.banners: list[tuple[str, str]] = []
        self.ids: list[str] = []
        self.style = ""
        self._table: list[str] = []
        self._cell: list[str] | None = None
        self._row: list[str] | None = None
        self._banner: list[str] | None = None
        self._banner_class = ""
        self._depth_banner = 0
        self._in_style = False
        self._in_head = False
        self.feed(text)
        self.close()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "style":
            self._in_style = True
        if tag == "thead":
            self._in_head = True
        if tag == "table":
            self._table.append(a.get("class", ""))
            self.tables.setdefault(self._table[-1], [])
            self.row_classes.setdefault(self._table[-1], [])
        elif tag == "tr" and self._table and not self._in_head:
            self._row = []
            self.row_classes[self._table[-1]].append(a.get("class", ""))
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []
        if tag == "div" and "banner" in a.get("class", "").split():
            self._banner, self._banner_class, self._depth_banner = [], a["class"], 1
        elif self._banner is not None and tag == "div":
            self._depth_banner += 1

    def handle_endtag(self, tag: str) -> None:
        if tag == "style":
            self._in_style = False
        if tag == "thead":
            self._in_head = False
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append(" ".join("".join(self._cell).split()))
            self._cell = None
        elif tag == "tr" and self._row is not None and self._table:
            self.tables[self._table[-1]].append(self._row)
            self._row = None
        elif tag == "table" and self._table:
            self._table.pop()
        if tag == "div" and self._banner is not None:
            self._depth_banner -= 1
            if self._depth_banner == 0:
                self.banners.append((self._banner_class, " ".join("".join(self._banner).split())))
                self._banner = None

    def handle_data(self, data: str) -> None:
        if self._in_style:
            self.style += data
        if self._cell is not None:
            self._cell.append(data)
        if self._banner is not None:
            self._banner.append(data + " ")

    def row(self, table: str, header: str) -> list[str]:
        """The row of a two-column table whose header cell is `header`."""
        for r in self.tables[table]:
            if r and r[0] == header:
                return r
        raise KeyError(header)


def _assert_self_contained(text: str, page: Page) -> None:
    for tag, attrs in page.tags:
        assert tag not in ("script", "link", "iframe", "object", "embed", "base"), tag
        for name, value in attrs.items():
            if name.lower() in URL_ATTRIBUTES:
                v = value.strip().lower()
                assert not v.startswith(("http://", "https://", "//", "file:", "ftp:")), (tag, name, value)
                assert v.startswith(("#", "data:")), (tag, name, value)
    assert "@import" not in page.style and "url(" not in page.style.replace("url(#", "")
    # Stronger than the attribute check: no web address anywhere in the file.
    assert "http://" not in text and "https://" not in text


def test_single_run_page(failing_run, tmp_path) -> None:
    frame, metadata = failing_run
    sha = "0123456789abcdef" * 4
    path = write_html([(frame, metadata, sha)], tmp_path / "report.html")
    text = path.read_text(encoding="utf-8")
    page = Page(text)
    _assert_self_contained(text, page)

    # Verdict banner first, in words (colour is only a second cue).
    assert page.banners, "no verdict banner"
    banner_class, banner_text = page.banners[0]
    assert "v-fail" in banner_class
    assert banner_text.split()[1] == "FAIL"  # after the sign
    assert "outside a limit" in banner_text and "2 of 60 points failing" in banner_text
    assert text.index('class="banner') < text.index("<svg")  # verdict above the plot

    # The plot, inline.
    assert text.count("<svg") == 1
    assert len(page.ids) == len(set(page.ids))

    # Traceability record.
    assert page.row("meta", "DUT serial")[1] == "DLF7-000123"
    assert page.row("meta", "plan SHA-256")[1] == metadata["plan_sha256"]
    assert page.row("meta", "run file SHA-256")[1] == sha
    assert page.row("meta", "start (UTC)")[1] == metadata["start_utc"]
    assert page.row("meta", "points measured")[1] == "60 of 60 planned"
    idns = [r[2] for r in page.tables["instruments"]]
    assert idns == [i["idn"] for i in metadata["instruments"]]
    software = dict(r for r in page.tables["software"])
    assert software["numpy"] == np.__version__

    # Derived figures: measured -3 dB frequency near the handbook 994.7 Hz (noise 0.003 dB
    # and 60-point interpolation: 1 % is ample, see test_analysis_figures).
    f3 = page.row("figures", "-3 dB frequency")
    assert float(f3[1]) == pytest.approx(994.7, rel=0.01)

    # Per-point table: one row per point, failing rows marked, in frequency order.
    rows = page.tables["points"]
    classes = page.row_classes["points"]
    assert len(rows) == len(frame)
    failing_freqs = {float(r[1]) for r, c in zip(rows, classes) if "failing" in c.split()}
    expected = set(frame.loc[frame["verdict"] >= 3, "frequency_hz"])
    assert len(failing_freqs) == len(expected) == 2
    for f_text, f_true in zip(sorted(failing_freqs), sorted(expected)):
        assert float(f_text) == pytest.approx(f_true, rel=1e-5)  # shown to 6 significant digits
    assert all(r[10].endswith("FAIL") for r, c in zip(rows, classes) if "failing" in c.split())
    assert sum("v-fail" in c.split() for c in classes) == 2

    # Printing: page breaks between runs, rows kept whole, header repeated.
    assert "@media print" in page.style and "break-before: page" in page.style
    assert "break-inside: avoid" in page.style and "table-header-group" in page.style
    assert re.findall(r'<section class="(run[^"]*)"', text) == ["run first"]


def test_metadata_is_escaped(run_factory) -> None:
    serial = '<script>alert("x")</script>&<b> $x^$'  # '$...$' would be matplotlib math text (here invalid)
    frame, metadata = run_factory(serial=serial)
    metadata["instruments"][0]["idn"] = "Simbench,<SG>,\"1\",'2'"
    metadata["operator"] = "<img src=http://example.invalid/x.png>"
    text = render_html([(frame, metadata, "")], image_format="png")
    page = Page(text)
    assert not any(tag in ("script", "b") for tag, _ in page.tags)
    assert page.row("meta", "DUT serial")[1] == serial  # shown as text, unchanged
    assert page.tables["instruments"][0][2] == "Simbench,<SG>,\"1\",'2'"
    assert page.row("meta", "run file SHA-256")[1] == "not given"
    imgs = [attrs for tag, attrs in page.tags if tag == "img"]
    assert len(imgs) == 1 and imgs[0]["src"].startswith("data:image/png;base64,")
    png = base64.b64decode(imgs[0]["src"].split(",", 1)[1])
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    # The operator text carries a web address as text; no attribute points anywhere.
    for tag, attrs in page.tags:
        for name, value in attrs.items():
            if name in URL_ATTRIBUTES:
                assert value.startswith(("#", "data:"))


def test_set_of_runs(run_factory) -> None:
    runs = [
        run_factory(serial="DLF7-000301", run_id="DLF7-000301-A"),
        run_factory(serial="DLF7-000302", run_id="DLF7-000302-A", gain_offsets_db={30: -1.5}),
        run_factory(serial="DLF7-000303", run_id="DLF7-000303-A", points=41),
    ]
    text = render_html([(f, m, "") for f, m in runs], golden_index=0)
    page = Page(text)
    _assert_self_contained(text, page)
    # Overall banner (worst run: FAIL), then one banner per run.
    assert [c.split()[1] for c, _ in page.banners] == ["v-fail", "v-pass", "v-fail", "v-pass"]
    assert "1 of 3 runs failing" in page.banners[0][1]
    # Summary table links to each run's section.
    links = [a["href"] for tag, a in page.tags if tag == "a"]
    sections = [a["id"] for tag, a in page.tags if tag == "section"]
    assert links == ["#" + s for s in sections] and len(sections) == 3
    # Overlay, difference and one Bode plot per run, ids unique across all of them.
    assert text.count("<svg") == 5
    assert len(page.ids) == len(set(page.ids))
    assert sum("failing" in c.split() for c in page.row_classes["points"]) == 1
    # After the summary, each run starts a new printed page (a lone run starts the first page).
    assert re.findall(r'<section class="(run[^"]*)"', text) == ["run", "run", "run"]


def test_empty_set_is_refused() -> None:
    with pytest.raises(ValueError):
        render_html([])
