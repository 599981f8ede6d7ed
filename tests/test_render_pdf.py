"""Tests of blendq.render_pdf: wrapping, pagination, and the PDF file itself.

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
from hypothesis import given
from hypothesis import strategies as st

from blendq.document import (
    BulletList,
    Callout,
    Document,
    Figure,
    KeyValues,
    Paragraph,
    Section,
    Table,
)
from blendq.errors import InputError
from blendq.render_pdf import (
    MARGIN_BOTTOM,
    MARGIN_TOP,
    PAPER_SIZES,
    _build,
    _paginate,
    paginate,
    render_pdf,
    render_pdf_bytes,
    text_width,
    wrap,
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


# --- text measuring and wrapping ------------------------------------------------------------


def test_text_width_matches_matplotlib_layout() -> None:
    # reference: matplotlib's own text-to-path layout (which applies kerning); our sum of
    # advances may only be a little wider, never narrower
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextToPath

    layout = TextToPath()
    for text, bold in [("Nitrate 10.5 mg/L as N at 1,150 m³/d", False), ("Table 12.", True)]:
        prop = FontProperties(family="DejaVu Sans", size=9.5, weight="bold" if bold else "normal")
        reference = layout.get_text_width_height_descent(text, prop, ismath=False)[0]
        ours = text_width(text, 9.5, bold)
        assert reference * (1 - 1e-3) <= ours <= reference * 1.04


def test_wrap_keeps_words_and_margin() -> None:
    text = "The blend at each step is the flow-weighted mix of the zones open to the well. " * 5
    lines = wrap(text, 200.0, 9.5)
    assert len(lines) > 5
    assert all(text_width(line, 9.5) <= 200.0 + 1e-6 for line in lines)
    # textwrap may break after a hyphen ("flow-" / "weighted"): compare the characters
    assert "".join("".join(lines).split()) == "".join(text.split())


def test_wrap_breaks_overlong_words_and_honours_newlines_and_indent() -> None:
    lines = wrap("x" * 300, 100.0, 9.5)
    assert "".join(lines) == "x" * 300
    assert all(text_width(line, 9.5) <= 100.0 + 1e-6 for line in lines)
    assert wrap("one\ntwo", 500.0, 9.5) == ["one", "two"]
    assert wrap("", 100.0, 9.5) == [""]
    indented = wrap("alpha beta gamma delta epsilon zeta", 120.0, 9.5, first_indent=60.0)
    assert text_width(indented[0], 9.5) + 60.0 <= 120.0 + 1e-6


@given(
    st.lists(
        st.text(alphabet="abcdefghijkl mnop,.-ABC0123µ³", min_size=1, max_size=14), max_size=40
    ),
    st.floats(min_value=60.0, max_value=480.0),
)
def test_wrap_property_lines_fit(words: list[str], width: float) -> None:
    text = " ".join(words)
    lines = wrap(text, width, 9.5)
    assert all(text_width(line, 9.5) <= width + 1e-6 for line in lines)
    assert "".join("".join(lines).split()) == "".join(text.split())


# --- pagination -------------------------------------------------------------------------------


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
    pieces, _, frame_h = _build(doc, "a4")
    pages = _paginate(pieces, frame_h)
    # A4 text height 713.9 pt; a one-line row is 1.3 x 8 pt + 2 x 2.6 pt = 15.6 pt tall,
    # so 150 rows (2340 pt) need at least 4 pages
    assert frame_h == pytest.approx(PAPER_SIZES["a4"][1] - MARGIN_TOP - MARGIN_BOTTOM)
    assert len(pages) >= 4
    body = [p for p in pieces if p.repeat]
    assert len(body) == rows
    repeat = body[0].repeat
    for page in pages[1:]:
        opening = [piece for piece, _ in page[: len(repeat)]]
        assert opening == list(repeat)  # "(continued)" caption and column labels first
    for page in pages:
        assert max(offset + piece.height for piece, offset in page) <= frame_h + 1e-9
    placed_rows = [piece for page in pages for piece, _ in page if piece.repeat]
    assert placed_rows == body  # every row once, in order


def test_paragraph_never_leaves_a_single_line_at_a_page_edge() -> None:
    # a five-line paragraph after fillers of growing length: the page break moves through it
    para = Paragraph(" ".join(["A paragraph that must split across the page."] * 10))
    splits = set()
    for filler_words in range(100, 160):
        filler = Paragraph(" ".join(["Filler"] * filler_words * 5))
        doc = Document("t", "", "", [Section("S", [filler, para], key="s")])
        pieces, width, frame_h = _build(doc, "a4")
        pages = _paginate(pieces, frame_h)
        n_lines = len(wrap(para.text, width, 9.5))
        assert n_lines == 5
        lines_of = {id(p) for p in pieces[-n_lines:]}
        counts = tuple(sum(id(piece) in lines_of for piece, _ in page) for page in pages)
        assert 1 not in counts, counts
        splits.add(tuple(c for c in counts if c))
    assert {(2, 3), (3, 2)} <= splits  # both legal splits did occur
    assert (5,) in splits


def test_long_callout_splits_with_label_and_two_lines_together() -> None:
    callout = Callout(" ".join(["Run below the window only after review."] * 60), "decision")
    for filler_lines in range(30, 50):
        filler = Paragraph("\n".join(["line"] * filler_lines))
        doc = Document("t", "", "", [Section("S", [filler, callout], key="s")])
        pieces, _, frame_h = _build(doc, "a4")
        pages = _paginate(pieces, frame_h)
        # title, rule, "CONTENTS", one contents entry, heading, then the filler lines
        callout_pieces = pieces[5 + filler_lines :]
        assert any(op[3] == "DECISION" for op in callout_pieces[0].ops if op[0] == "text")
        ours = {id(p) for p in callout_pieces}
        counts = [sum(id(piece) in ours for piece, _ in page) for page in pages]
        assert len(pages) == 2
        assert counts[0] == 0 or counts[0] >= 3, counts  # label row plus two text lines
        assert counts[1] >= 2


def test_heading_is_kept_with_what_follows() -> None:
    for filler_lines in range(20, 60):
        filler = Paragraph("\n".join(["line"] * filler_lines))
        doc = Document(
            "t",
            "",
            "",
            [Section("A", [filler], key="a"), Section("B", [Paragraph("x\ny\nz")], key="b")],
        )
        pieces, _, frame_h = _build(doc, "a4")
        pages = _paginate(pieces, frame_h)
        for page in pages:
            last = page[-1][0]
            assert not last.section, f"heading alone at a page foot with {filler_lines} lines"


def test_unknown_paper_is_an_input_error() -> None:
    doc = Document("t", "", "", [])
    with pytest.raises(InputError, match="paper size 'a5'"):
        paginate(doc, paper="a5")


# --- the file ---------------------------------------------------------------------------------


def test_pdf_file_basics(demo_pdf: bytes) -> None:
    assert demo_pdf.startswith(b"%PDF-")
    assert demo_pdf.rstrip().endswith(b"%%EOF")
    assert _page_count_in_file(demo_pdf) == paginate(demo_document()).page_count
    assert b"/CreationDate" not in demo_pdf and b"/ModDate" not in demo_pdf
    assert b"/Creator (blendq" in demo_pdf
    assert re.search(rb"/MediaBox \[ 0 0 595\.276 841\.89 \]", demo_pdf)


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
    assert render_pdf_bytes(doc).startswith(b"%PDF-")


def write_demo(folder: Path) -> list[Path]:
    """Write demo.pdf, demo.html and (with pdftoppm) page PNGs into ``folder``."""
    from blendq.render_html import render_html

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
