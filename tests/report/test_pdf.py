"""Tests of blendq.report.pdf: text measure, pagination rules, and the PDF file itself.

Run this file as a script to write the demo report for a visual check::

    python tests/test_render_pdf.py /tmp/blendq-demo

It writes demo.pdf and demo.html (invented well, invented numbers) and, when poppler's
``pdftoppm`` is installed, one PNG per page to look at.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from blendq.errors import InputError
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
from blendq.report.pdf import (
    PAPER_SIZES,
    paginate,
    render_pdf,
    render_pdf_bytes,
    text_width,
)

HOSTILE = "<script>alert(1)</script> (unbalanced \\ paren"


def _chart(width: float = 6.4, height: float = 3.6) -> Figure:
    from matplotlib.figure import Figure as MplFigure

    rates = np.linspace(200.0, 2400.0, 60)
    nitrate = 4.0 + 6.5 * (1.0 - np.exp(-rates / 900.0))
    chart = MplFigure(figsize=(width, height))
    axes = chart.add_subplot()
    axes.fill_between(rates, nitrate - 0.6, nitrate + 0.6, color="0.82", label="90% band")
    axes.plot(rates, nitrate, color="k", lw=1.5, label="predicted")
    axes.axhline(10.0, color="k", ls="--", lw=1.0, label="limit 10 mg/L as N")
    axes.set_xlabel("pumping rate [m³/d]")
    axes.set_ylabel("nitrate [mg/L as N]")
    axes.legend(loc="lower right")
    chart.tight_layout()
    return Figure(
        caption="Predicted nitrate in the discharge against pumping rate, with the 90% band.",
        alt="Nitrate rises from about 5 to 10 mg/L as N between 200 and 2400 m³/d.",
        figure=chart,
    )


def demo_document() -> Document:
    """A report-like document with invented numbers: callouts, long text, tables, a chart."""
    rates = np.linspace(200.0, 2400.0, 60)
    nitrate = 4.0 + 6.5 * (1.0 - np.exp(-rates / 900.0))
    steps = pd.DataFrame(
        {
            "step": [1, 2, 3, 4],
            "rate [m³/d]": [400.0, 800.0, 1200.0, 1600.0],
            "drawdown [m]": [1.21, 2.58, 4.11, 5.83],
            "nitrate [mg/L as N]": [5.12, 6.94, 8.01, 8.73],
            "arsenic [µg/L]": [np.nan, 3.1, 4.4, 5.0],
            "lab flag": ["<DL", "", "", "=SUM(A1)"],
        }
    )
    sweep = pd.DataFrame(
        {
            "rate [m³/d]": rates,
            "nitrate [mg/L as N]": nitrate,
            "lower": nitrate - 0.6,
            "upper": nitrate + 0.6,
            "P(exceed 80% of limit)": 1.0 / (1.0 + np.exp(-(nitrate - 8.0) * 3.0)),
            "pumping level [m bgs]": 12.0 + rates * 0.004 + 1e-6 * rates**2,
        }
    )
    wide = pd.DataFrame(
        {
            f"zone {i} concentration estimate (mg/L)": [1.2345 * i, 2.5 * i, np.nan]
            for i in range(1, 10)
        }
    )
    long_text = " ".join(
        ["The zone estimates rest on four step samples and one pumped flow log."] * 12
    )
    return Document(
        title="Discharge quality against pumping rate: Larkmoor test well 3",
        subtitle="Invented example for layout checks, Feldwick water district",
        created="Created 2024-05-01 by blendq 0.1.0",
        sections=[
            Section(
                "Summary",
                [
                    Callout(
                        "Run at 1,150 m³/d or less: nitrate stays below 80% of the limit.",
                        "decision",
                    ),
                    Callout("A planning aid, not a compliance determination.", "caution"),
                    Callout("Zone 3 is not resolved by the data; its value is a bound.", "note"),
                    Paragraph(long_text),
                    BulletList(
                        [
                            "Window: 150 to 1,150 m³/d.",
                            "Limiting factor at the upper end: nitrate.",
                            "A long item that runs past one line of the page, to check that "
                            "wrapped bullet text hangs under the first word and not the bullet.",
                        ]
                    ),
                ],
                key="summary",
            ),
            Section(
                "Inputs",
                [
                    KeyValues(
                        [
                            ("well", "Larkmoor TW-3"),
                            ("screened zones", 3),
                            ("pump intake depth", "42.0 m bgs"),
                            ("a long label that needs wrapping in its column, surely", "value"),
                        ],
                        caption="Project settings",
                    )
                ],
                key="inputs",
            ),
            Section(
                "Step test",
                [
                    Table(
                        steps,
                        f"Step samples and drawdown. {HOSTILE}",
                        formats={"rate [m³/d]": ",.0f", "drawdown [m]": ".2f"},
                        note="<DL: below the detection limit.",
                    ),
                    _chart(),
                ],
                key="step-test",
            ),
            Section(
                "Rate sweep",
                [
                    Paragraph("Every rate on the grid."),
                    Table(
                        sweep,
                        "Predicted discharge quality on the rate grid.",
                        formats={c: ".2f" for c in sweep.columns[1:4]}
                        | {
                            "rate [m³/d]": ",.0f",
                            "P(exceed 80% of limit)": ".3f",
                            "pumping level [m bgs]": ".1f",
                        },
                    ),
                ],
                key="sweep",
            ),
            Section("Nine zones side by side", [Table(wide, "A wide table.")], key="wide"),
        ],
    )


def _tall_image() -> Figure:
    """A 300 x 1500 pixel grey ramp as PNG: taller than two thirds of any page's text."""
    import io

    from matplotlib.image import imsave

    buffer = io.BytesIO()
    ramp = np.linspace(0.0, 1.0, 1500)[:, None] * np.ones((1, 300))
    imsave(buffer, ramp, cmap="gray", format="png", metadata={"Software": None})
    return Figure(caption="A tall image.", png=buffer.getvalue())


def _page_count_in_file(data: bytes) -> int:
    return len(re.findall(rb"/Type\s*/Page\b(?!s)", data))


@pytest.fixture(scope="module")
def demo_pdf() -> bytes:
    return render_pdf_bytes(demo_document())


# --- text measuring --------------------------------------------------------------------------


def test_text_width_matches_matplotlib_layout() -> None:
    # reference: matplotlib's own text-to-path layout of the same DejaVu Sans font (a second,
    # independent reader of the font file, which applies kerning); our width, the sum of
    # advances as the PDF draws them, may only be a little wider, never narrower
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextToPath

    layout = TextToPath()
    for text, bold in [("Nitrate 10.5 mg/L as N at 1,150 m³/d", False), ("Table 12.", True)]:
        prop = FontProperties(family="DejaVu Sans", size=9.5, weight="bold" if bold else "normal")
        reference = layout.get_text_width_height_descent(text, prop, ismath=False)[0]
        ours = text_width(text, 9.5, bold)
        assert reference * (1 - 1e-3) <= ours <= reference * 1.04


def test_paper_sizes_are_the_standard_ones() -> None:
    # ISO 216 A4 is 210 mm x 297 mm and US Letter 8.5 in x 11 in; reportlab.lib.pagesizes
    # holds both in points (1 pt = 1/72 in)
    from reportlab.lib.pagesizes import A4, LETTER

    assert PAPER_SIZES["a4"] == pytest.approx(A4, abs=1e-3)
    assert PAPER_SIZES["a4"] == pytest.approx((210 / 25.4 * 72, 297 / 25.4 * 72), abs=1e-3)
    assert PAPER_SIZES["letter"] == pytest.approx(LETTER)


# --- pagination -------------------------------------------------------------------------------


def _of(layout, tag: str) -> list:
    return [p for p in layout.placed if p.tag == tag]


def test_two_tall_figures_never_share_a_page() -> None:
    # a portrait chart is scaled to two thirds of the text height, so two cannot share a page:
    # known content, three sections of one short paragraph and one such chart, gives 3 pages
    sections = [
        Section(f"Part {k}", [Paragraph("Short text."), _tall_image()], key=f"part-{k}")
        for k in (1, 2, 3)
    ]
    doc = Document("Three charts", "", "2024-05-01", sections)
    layout = paginate(doc)
    assert layout.page_count == 3
    assert layout.section_pages == {"part-1": 1, "part-2": 2, "part-3": 3}
    assert [p.page for p in layout.placed if p.tag.startswith("figure")] == [1, 2, 3]
    data = render_pdf_bytes(doc)
    assert _page_count_in_file(data) == 3


def test_short_document_is_one_page() -> None:
    doc = Document("t", "s", "c", [Section("A", [Paragraph("hello")], key="a")])
    assert paginate(doc).page_count == 1
    assert _page_count_in_file(render_pdf_bytes(doc)) == 1


def test_long_table_runs_over_pages_with_repeated_header() -> None:
    rows = 150
    frame = pd.DataFrame({"rate": np.arange(rows) * 10.0, "nitrate": np.linspace(2, 9, rows)})
    doc = Document("t", "", "", [Section("Sweep", [Table(frame, "Long table")], key="sweep")])
    parts = _of(paginate(doc), "table:1")
    # A4 text height 713.9 pt; a one-line row is 1.3 x 8 pt + 2 x 2.6 pt = 15.6 pt tall,
    # so 150 rows (2340 pt) need at least 4 pages
    assert len(parts) >= 4
    assert [p.page for p in parts] == list(range(1, len(parts) + 1))
    assert [p.continued for p in parts] == [False] + [True] * (len(parts) - 1)
    assert sum(p.count for p in parts) == rows  # every row once
    assert all(p.count >= 2 for p in parts)


def test_paragraph_never_leaves_a_single_line_at_a_page_edge() -> None:
    # a five-line paragraph after fillers of growing length: the page break moves through it
    para = Paragraph(" ".join(["A paragraph that must split across the page."] * 10))
    splits = set()
    for filler_words in range(100, 160, 2):
        filler = Paragraph(" ".join(["Filler"] * filler_words * 5))
        doc = Document("t", "", "", [Section("S", [filler, para], key="s")])
        counts = tuple(p.count for p in _of(paginate(doc), "paragraph:2"))
        assert sum(counts) == 5
        assert 1 not in counts, counts
        splits.add(counts)
    assert {(2, 3), (3, 2)} <= splits  # both legal splits did occur
    assert (5,) in splits


def test_long_callout_splits_with_label_and_text_together() -> None:
    callout = Callout(" ".join(["Run below the window only after review."] * 60), "decision")
    alone = Document("t", "", "", [Section("S", [callout], key="s")])
    (whole,) = _of(paginate(alone), "callout:1")
    assert whole.count > 20  # the label line and the text lines
    pages_seen = set()
    for filler_lines in range(30, 50):
        filler = Paragraph("\n".join(["line"] * filler_lines))
        doc = Document("t", "", "", [Section("S", [filler, callout], key="s")])
        layout = paginate(doc)
        parts = _of(layout, "callout:1")
        pages_seen.add(len(parts))
        assert layout.page_count == 2
        assert sum(p.count for p in parts) == whole.count
        # the label is the first line: never alone at a page foot, and two lines at the head
        assert all(p.count >= 2 for p in parts), parts
    assert pages_seen == {1, 2} or pages_seen == {2}


def test_short_callout_moves_whole() -> None:
    for filler_lines in range(40, 52):
        filler = Paragraph("\n".join(["line"] * filler_lines))
        callout = Callout("A caution of three lines. " * 12, "caution")
        doc = Document("t", "", "", [Section("S", [filler, callout], key="s")])
        parts = _of(paginate(doc), "callout:1")
        assert len(parts) == 1


def test_heading_is_kept_with_what_follows() -> None:
    for filler_lines in range(20, 60):
        filler = Paragraph("\n".join(["line"] * filler_lines))
        doc = Document(
            "t",
            "",
            "",
            [Section("A", [filler], key="a"), Section("B", [Paragraph("x\ny\nz")], key="b")],
        )
        layout = paginate(doc)
        (heading,) = _of(layout, "heading:b")
        (after,) = _of(layout, "paragraph:2")
        assert heading.page == after.page, f"heading alone at a page foot ({filler_lines} lines)"
        assert after.count == 3


def test_heading_is_kept_with_a_chart() -> None:
    for filler_lines in range(5, 40, 3):
        filler = Paragraph("\n".join(["line"] * filler_lines))
        doc = Document("t", "", "", [Section("A", [filler], key="a"),
                                     Section("B", [_chart()], key="b")])
        layout = paginate(doc)
        (heading,) = _of(layout, "heading:b")
        (chart,) = _of(layout, "figure:1")
        assert heading.page == chart.page


def test_markup_characters_are_text() -> None:
    # the layout engine reads markup: user text with <, > and & must come through as text
    doc = Document(HOSTILE, "a & b", "<c>", [Section("A <b>", [
        Paragraph(HOSTILE), BulletList([HOSTILE]), Callout(HOSTILE, "note"),
        KeyValues([(HOSTILE, HOSTILE)]),
        Table(pd.DataFrame({HOSTILE: [HOSTILE]}), HOSTILE, note=HOSTILE)], key="a")])
    assert paginate(doc).page_count == 1


def test_unknown_paper_is_an_input_error() -> None:
    doc = Document("t", "", "", [])
    with pytest.raises(InputError, match="paper size 'a5'"):
        paginate(doc, paper="a5")


# --- the file ---------------------------------------------------------------------------------


def test_pdf_file_basics(demo_pdf: bytes) -> None:
    assert demo_pdf.startswith(b"%PDF-")
    assert demo_pdf.rstrip().endswith(b"%%EOF")
    assert _page_count_in_file(demo_pdf) == paginate(demo_document()).page_count
    assert b"/Creator (blendq" in demo_pdf
    assert re.search(rb"/MediaBox \[ 0 0 595\.27\d* 841\.8\d* \]", demo_pdf)
    # the text fonts are embedded subsets of DejaVu Sans and DejaVu Sans Bold
    assert demo_pdf.count(b"/FontFile2") == 2


def test_letter_paper_and_file_output(tmp_path: Path) -> None:
    doc = Document("Letter", "", "", [Section("A", [Paragraph("x")], key="a")])
    target = tmp_path / "report.pdf"
    pages = render_pdf(doc, target, paper="letter")
    data = target.read_bytes()
    assert pages == 1 == _page_count_in_file(data)
    assert b"/MediaBox [ 0 0 612 792 ]" in data


def test_svg_only_figure_and_empty_table_still_render() -> None:
    doc = Document(
        "t",
        "",
        "",
        [
            Section(
                "A",
                [
                    Figure(caption="vector", svg="<svg/>"),
                    Table(pd.DataFrame({"a": []}), "empty"),
                    Table(pd.DataFrame(), "no columns"),
                ],
                key="a",
            )
        ],
    )
    layout = paginate(doc)
    assert [p.tag for p in layout.placed] == ["heading:a", "figure:1", "table:1", "table:2"]
    assert render_pdf_bytes(doc).startswith(b"%PDF-")


def write_demo(folder: Path) -> list[Path]:
    """Write demo.pdf, demo.html and (with pdftoppm) page PNGs into ``folder``."""
    from blendq.report.html import render_html

    folder.mkdir(parents=True, exist_ok=True)
    doc = demo_document()
    written = [folder / "demo.pdf", folder / "demo.html"]
    render_pdf(doc, written[0])
    written[1].write_text(render_html(doc), encoding="utf-8")
    if shutil.which("pdftoppm"):
        subprocess.run(
            ["pdftoppm", "-png", "-r", "60", str(written[0]), str(folder / "page")], check=True
        )
        written += sorted(folder.glob("page-*.png"))
    return written


def test_demo_renders_to_files_with_identical_bytes(tmp_path: Path, demo_pdf: bytes) -> None:
    # the same document rendered twice (here once to bytes, once to a file) gives the same
    # bytes: no creation date, no random ids
    written = write_demo(tmp_path)
    assert written[0].read_bytes() == demo_pdf
    assert written[1].read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


if __name__ == "__main__":
    for path in write_demo(Path(sys.argv[1] if len(sys.argv) > 1 else "blendq-demo")):
        print(path)


def test_a_chart_shrinks_to_finish_a_page_instead_of_leaving_it_mostly_blank() -> None:
    # text fills about 40 % of the first page; a chart two thirds of the text height tall fits
    # the rest at 75 % of its size (FIGURE_MIN_SCALE), so it stays on page 1 and the page is not
    # left mostly blank; a chart that would need more shrinking moves on whole
    from blendq.report.pdf import FIGURE_MIN_SCALE

    assert FIGURE_MIN_SCALE == 0.75
    text = " ".join(["Words that fill the page before the chart."] * 25)
    doc = Document("One chart", "", "2024-05-01",
                   [Section("Part", [Paragraph(text), _tall_image()], key="part")])
    layout = paginate(doc)
    assert [p.page for p in layout.placed if p.tag.startswith("figure")] == [1]
    assert layout.page_count == 1
    longer = " ".join(["Words that fill the page before the chart."] * 60)
    doc = Document("One chart", "", "2024-05-01",
                   [Section("Part", [Paragraph(longer), _tall_image()], key="part")])
    assert [p.page for p in paginate(doc).placed if p.tag.startswith("figure")] == [2]
