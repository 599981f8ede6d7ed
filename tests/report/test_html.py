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
from blendq.report.html import render_html

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
