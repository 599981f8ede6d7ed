"""Tests of blendq.report.html: self-contained, escaped, navigable report pages."""

from __future__ import annotations

import base64
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

from blendq.report.document import (
    BulletList,
    Callout,
    Document,
    Figure,
    KeyValues,
    Paragraph,
    Section,
    Table,
)
from blendq.report.html import STYLE_SHEET, render_html

HOSTILE = "<script>alert(1)</script>"
PNG_1PX = base64.b64decode(
    # a 1 x 1 grey PNG written for this test
    "iVBORw0KGgoAAAANSUhEUgAAAAEAAAABCAAAAAA6fptVAAAACklEQVR4nGNoAAAAggCBd81ytgAAAABJRU5ErkJggg=="
)
URL_ATTRIBUTES = {"src", "href", "action", "formaction", "poster", "data", "srcset", "xlink:href"}


class _PageParser(HTMLParser):
    """Collects tags, attributes and text of a page by element."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.stack: list[str] = []
        self.text_in: dict[str, list[str]] = {}
        self.errors: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))
        if tag not in {"meta", "img", "br", "link", "input"}:
            self.stack.append(tag)

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unbalanced </{tag}> with open {self.stack[-3:]}")
            return
        self.stack.pop()

    def handle_data(self, data: str) -> None:
        for tag in self.stack:
            self.text_in.setdefault(tag, []).append(data)


def _parse(page: str) -> _PageParser:
    parser = _PageParser()
    parser.feed(page)
    parser.close()
    return parser


def _chart() -> Figure:
    from matplotlib.figure import Figure as MplFigure

    chart = MplFigure(figsize=(3, 2))
    axes = chart.add_subplot()
    axes.plot([100, 800, 1600], [4.2, 7.9, 9.6], color="k")
    axes.set_xlabel("pumping rate [m3/d]")
    return Figure(caption=f"Nitrate against rate {HOSTILE}", alt=f"alt {HOSTILE}", figure=chart)


def _hostile_document() -> Document:
    table = pd.DataFrame(
        {
            f"zone {HOSTILE}": [1.5, np.nan],
            "note": [HOSTILE, "quote \" and ' & ampersand"],
        }
    )
    return Document(
        title=f"Report {HOSTILE}",
        subtitle=f"Well <b>X</b> {HOSTILE}",
        created="created 2024-03-01",
        sections=[
            Section(
                "Summary",
                [
                    Callout(f"Run below 900 m3/d {HOSTILE}", "decision"),
                    Callout("A planning aid, not a compliance determination.", "caution"),
                    Paragraph(f"text {HOSTILE}"),
                    BulletList([f"item {HOSTILE}", "second"]),
                ],
                key="summary",
            ),
            Section(
                f"Results {HOSTILE}",
                [
                    Table(table, f"caption {HOSTILE}", formats={f"zone {HOSTILE}": ".2f"}),
                    KeyValues([(f"label {HOSTILE}", f"value {HOSTILE}")], caption="Settings"),
                    _chart(),
                    Figure(caption="Ready image", png=PNG_1PX),
                ],
                key="results",
            ),
            Section("Vector chart", [Figure(caption="svg", svg="<svg xmlns='x'/>")], key="svg"),
        ],
    )


@pytest.fixture(scope="module")
def page() -> str:
    return render_html(_hostile_document())


def test_page_is_html5_and_balanced(page: str) -> None:
    assert page.startswith("<!DOCTYPE html>\n")
    parsed = _parse(page)
    assert parsed.errors == []
    assert parsed.stack == []


def test_required_sections_by_key_and_heading(page: str) -> None:
    parsed = _parse(page)
    sections = [attrs for tag, attrs in parsed.tags if tag == "section"]
    assert [s["id"] for s in sections] == ["summary", "results", "svg"]
    assert [s["data-key"] for s in sections] == ["summary", "results", "svg"]
    headings = "".join(parsed.text_in["h2"])
    assert "Summary" in headings and "Vector chart" in headings and "Contents" in headings


def test_table_of_contents_links_every_section(page: str) -> None:
    parsed = _parse(page)
    links = [attrs["href"] for tag, attrs in parsed.tags if tag == "a"]
    assert links == ["#summary", "#results", "#svg"]
    assert f"Results {HOSTILE}" in "".join(parsed.text_in["nav"])


def test_no_external_resource_of_any_kind(page: str) -> None:
    parsed = _parse(page)
    for tag, attrs in parsed.tags:
        assert tag not in {"script", "link", "iframe", "object", "embed", "base"}
        for name, value in attrs.items():
            if name in URL_ATTRIBUTES and value is not None:
                lowered = value.strip().lower()
                assert not lowered.startswith(("http:", "https:", "//", "file:", "ftp:")), value
                assert lowered.startswith(("#", "data:image/")), value
    style = "".join(parsed.text_in["style"])
    assert "url(" not in style and "@import" not in style
    csp = [a["content"] for t, a in parsed.tags if t == "meta" and a.get("http-equiv")]
    assert csp == ["default-src 'none'; img-src data:; style-src 'unsafe-inline'"]


def test_hostile_strings_are_escaped_everywhere(page: str) -> None:
    assert HOSTILE not in page
    assert "<b>X</b>" not in page
    parsed = _parse(page)
    assert not any(tag == "script" for tag, _ in parsed.tags)
    escaped = "&lt;script&gt;alert(1)&lt;/script&gt;"
    # title (twice: <title> and h1), subtitle, callout, paragraph, bullet, section heading
    # (twice: body and contents),
    # column label, table cell, caption, key and value, figure caption and alt text
    assert page.count(escaped) == 15
    assert f"Report {HOSTILE}" in "".join(parsed.text_in["title"])
    assert f"zone {HOSTILE}" in "".join(parsed.text_in["th"])
    assert HOSTILE in "".join(parsed.text_in["td"])
    assert f"caption {HOSTILE}" in "".join(parsed.text_in["caption"])
    alts = [attrs.get("alt") for tag, attrs in parsed.tags if tag == "img"]
    assert f"alt {HOSTILE}" in alts
    assert "quote &quot; and &#x27; &amp; ampersand" in page


def test_figures_are_embedded_data_uris(page: str) -> None:
    parsed = _parse(page)
    sources = [attrs["src"] for tag, attrs in parsed.tags if tag == "img"]
    assert len(sources) == 3
    assert sources[0].startswith("data:image/png;base64,")
    assert base64.b64decode(sources[0].split(",", 1)[1]).startswith(b"\x89PNG")
    assert base64.b64decode(sources[1].split(",", 1)[1]) == PNG_1PX
    assert sources[2].startswith("data:image/svg+xml;base64,")


def test_tables_and_figures_are_numbered_and_numbers_right_aligned(page: str) -> None:
    parsed = _parse(page)
    captions = "".join(parsed.text_in["caption"])
    assert captions.startswith("Table 1.")
    figcaptions = "".join(parsed.text_in["figcaption"])
    assert "Figure 1." in figcaptions and "Figure 2." in figcaptions and "Figure 3." in figcaptions
    cells = [attrs.get("class") for tag, attrs in parsed.tags if tag == "td"]
    assert cells == ["num", None, "num", None]
    assert "\u2014" in "".join(parsed.text_in["td"])  # the missing value


def test_callout_levels_are_marked(page: str) -> None:
    parsed = _parse(page)
    classes = [
        attrs["class"]
        for tag, attrs in parsed.tags
        if tag == "div" and "callout" in (attrs.get("class") or "")
    ]
    assert classes == ["callout callout-decision", "callout callout-caution"]


def test_same_document_gives_same_page() -> None:
    assert render_html(_hostile_document()) == render_html(_hostile_document())


def test_empty_table_says_so() -> None:
    doc = Document("t", "", "", [Section("S", [Table(pd.DataFrame({"a": []}), "none")], key="s")])
    assert "(no rows)" in render_html(doc)


# ------------------------------------------------------------------ tables on a laptop screen
#: a common laptop window [px] and the browsers' default root font size [px] (CSS Fonts 3:
#: "medium"; 1 rem = 16 px unless the reader changes it)
LAPTOP_PX, REM_PX, SCROLLBAR_PX = 1366, 16.0, 17


def _rule(selector: str) -> str:
    """The declarations of the first rule of the style sheet with exactly this selector."""
    import re

    match = re.search(r"(?:^|\})\s*" + re.escape(selector) + r"\s*\{([^}]*)\}", STYLE_SHEET)
    assert match, selector
    return match.group(1)


def text_column_px() -> float:
    """Width of the text column's content [px]: main's max-width less its side padding."""
    import re

    decl = _rule("main, header.titleblock, nav.contents, footer.colophon")
    width = float(re.search(r"max-width:\s*([\d.]+)rem", decl).group(1))
    pad = float(re.search(r"padding:\s*0\s+([\d.]+)rem", decl).group(1))
    return (width - 2 * pad) * REM_PX


def wide_box_px(window: float = LAPTOP_PX) -> float:
    """Width of a wide table's box [px] in a window of ``window`` px, from the style sheet."""
    import re

    decl = _rule(".tablewrap.wide")
    gap, cap = map(float, re.search(r"width:\s*min\(100vw - ([\d.]+)rem, ([\d.]+)rem\)",
                                    decl).groups())
    return min(window - gap * REM_PX, cap * REM_PX)


class _TableParents(HTMLParser):
    """The class attribute of the element around each <table>."""

    def __init__(self) -> None:
        super().__init__()
        self.open: list[dict[str, str | None]] = []
        self.parents: list[str | None] = []

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.parents.append(self.open[-1].get("class") if self.open else None)
        if tag not in {"meta", "img", "br", "link", "input"}:
            self.open.append(dict(attrs))

    def handle_endtag(self, tag):
        self.open.pop()


def test_every_table_scrolls_inside_its_own_box(page: str) -> None:
    parsed = _TableParents()
    parsed.feed(page)
    assert parsed.parents
    assert all(p is not None and "tablewrap" in p.split() for p in parsed.parents)
    box = _rule(".tablewrap")
    assert "overflow-x: auto" in box and "max-width: 100%" in box
    # long headers and text cells wrap (no nowrap on headers); numbers stay on one line
    cells = _rule("th, td")
    assert "overflow-wrap: break-word" in cells and "nowrap" not in cells
    assert "nowrap" not in _rule("th") and "white-space: nowrap" in _rule("td.num")
    # on paper the boxes neither scroll nor leave the text column
    assert ".tablewrap, .tablewrap.wide { overflow: visible; width: auto; margin-left: 0; }" \
        in STYLE_SHEET


def test_wide_box_stays_inside_a_laptop_window() -> None:
    # the box is centred on the text column: its left edge is at (body - box) / 2 in a body
    # that is the window less a scroll bar
    for window in (LAPTOP_PX, 1024, 800, 390):
        body = window - SCROLLBAR_PX
        box = wide_box_px(window)
        text = min(text_column_px(), body - 2 * 1.25 * REM_PX)
        left = (body - text) / 2 + (text - box) / 2
        assert left >= 0 and left + box <= body, window
    # on a laptop the wide box is much wider than the text column: 82 rem = 1312 px
    assert wide_box_px() == pytest.approx(1312.0)
    assert text_column_px() == pytest.approx(760.0)


def test_long_tables_get_the_wide_box_short_ones_the_text_column() -> None:
    from blendq.report.html import WIDE_TABLE_CHARACTERS, table_characters

    long_text = "lower end set by nitrate (P > 0.9 x limit above 0.05)"
    wide = pd.DataFrame({f"column {k} [gpm]": [long_text] for k in range(6)})
    narrow = pd.DataFrame({"zone": ["Upper sand"], "top [ft]": [120.0]})
    # 6 columns of 53 characters plus 3 each: 336 > 100; 2 columns: 10 + 3 + 8 + 3 = 24
    assert table_characters(list(wide.columns), [[long_text] * 6]) == 336
    assert table_characters(["zone", "top [ft]"], [["Upper sand", "120"]]) == 24
    assert WIDE_TABLE_CHARACTERS == 100
    doc = Document("t", "", "", [Section("S", [Table(wide, "wide"), Table(narrow, "narrow")],
                                         key="s")])
    parsed = _parse(render_html(doc))
    boxes = [attrs["class"] for tag, attrs in parsed.tags
             if tag == "div" and "tablewrap" in (attrs.get("class") or "")]
    assert boxes == ["tablewrap wide", "tablewrap"]
