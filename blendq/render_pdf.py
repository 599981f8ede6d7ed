"""Render a :class:`blendq.document.Document` as a paginated PDF with matplotlib only.

Each page is a matplotlib figure the size of the paper with one invisible axes whose data
coordinates are points (1/72 inch) from the lower-left corner of the page. The document is
first cut into *pieces* (a line of text, a table row, a chart) of known height, each a short
list of drawing operations relative to its top-left corner. The paginator fills pages with
them, keeping a heading with what follows it, never leaving a single line of a paragraph alone
at the foot or head of a page, and repeating a table's caption and column labels on every page
the table runs onto. Only then are pages drawn, so the footer can say "page k of N" and the
contents list can give each section's page.

Text is wrapped with :mod:`textwrap`; every wrapped line is measured with the font's glyph
advances and rewrapped narrower if it would pass the margin. Charts are rasterised at
:data:`FIGURE_DPI` and placed in the flow, scaled to the text width and to at most two thirds
of the text height. The PDF carries no creation date, so the same document gives the same bytes.
"""

from __future__ import annotations

import io
import math
import textwrap
import warnings
from dataclasses import dataclass, field
from os import PathLike
from typing import Any

import numpy as np

from blendq import __version__
from blendq.document import (
    BulletList,
    Callout,
    Document,
    Figure,
    KeyValues,
    Paragraph,
    Table,
)
from blendq.errors import InputError

__all__ = [
    "FIGURE_DPI",
    "PAPER_SIZES",
    "Pagination",
    "paginate",
    "render_pdf",
    "render_pdf_bytes",
    "text_width",
    "wrap",
]

#: Paper sizes [pt] (width, height), portrait.
PAPER_SIZES: dict[str, tuple[float, float]] = {"a4": (595.276, 841.89), "letter": (612.0, 792.0)}
#: Resolution [dots per inch] at which matplotlib charts are rasterised into the PDF.
FIGURE_DPI = 200.0

FONT = "DejaVu Sans"  # ships with matplotlib, so every machine draws the same glyphs
MARGIN_X, MARGIN_TOP, MARGIN_BOTTOM = 58.0, 66.0, 62.0
BODY, BODY_LEAD = 9.5, 13.6
SMALL, SMALL_LEAD = 8.0, 11.0
TABLE_SIZE, CELL_PAD_X, CELL_PAD_Y, MIN_TABLE_SIZE = 8.0, 4.0, 2.6, 6.0
HEADING, HEADING_LEAD, HEADING_INDENT = 13.5, 18.0, 26.0
HEADING_FOLLOW = 3 * BODY_LEAD  # least content [pt] kept on the page below a heading
TITLE, TITLE_LEAD = 20.0, 25.0
INK, MUTED, RULE, WASH, FAINT = "0.08", "0.35", "0.5", "0.92", "0.8"
_ASCENT, _DESCENT = 0.928, 0.236  # DejaVu Sans ascender and descender [em]

_em_widths: dict[tuple[str, bool], float] = {}


def _char_em(char: str, bold: bool) -> float:
    """Advance width of one character [em] in :data:`FONT`."""
    key = (char, bold)
    if key not in _em_widths:
        from matplotlib.font_manager import FontProperties, findfont, get_font

        font = get_font(findfont(FontProperties(family=FONT, weight="bold" if bold else "normal")))
        font.set_size(100.0, 72)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                glyph = font.load_char(ord(char))
            _em_widths[key] = glyph.linearHoriAdvance / 65536.0 / 100.0
        except RuntimeError:  # no glyph: matplotlib draws a box about this wide
            _em_widths[key] = 0.6
    return _em_widths[key]


def text_width(text: str, size: float, bold: bool = False) -> float:
    """Width [pt] of one line of text at font ``size`` [pt].

    Sum of glyph advances; kerning is ignored, which errs on the wide side.
    """
    return size * sum(_char_em(char, bold) for char in text)


def wrap(
    text: str, width: float, size: float, bold: bool = False, first_indent: float = 0.0
) -> list[str]:
    """Wrap text into lines no wider than ``width`` [pt] at font ``size`` [pt].

    ``first_indent`` [pt] is room taken on the first line by something drawn before it (a bold
    lead-in such as "Table 2."). Newlines start new lines; runs of spaces collapse; words longer
    than a line are broken. Always returns at least one line.
    """
    lines: list[str] = []
    for number, part in enumerate(text.split("\n")):
        indent = first_indent if number == 0 else 0.0
        part = " ".join(part.split())
        if not part:
            lines.append("")
            continue
        average = text_width(part, size, bold) / len(part)
        chars = max(1, int(width / average))
        pad = int(math.ceil(indent / average))
        while True:
            wrapped = textwrap.wrap(part, chars, initial_indent="#" * pad) if chars > pad else []
            if wrapped:
                wrapped[0] = wrapped[0][pad:]
            widths = [text_width(line, size, bold) for line in wrapped]
            if wrapped and widths[0] + indent <= width + 0.01 and max(widths) <= width + 0.01:
                break
            if chars <= pad + 1:  # not even one character fits after the indent
                wrapped = [""] + textwrap.wrap(part, max(1, int(width / average)))
                break
            chars -= 1
        lines.extend(wrapped)
    return lines or [""]


# ---------------------------------------------------------------------------------------------
# pieces: drawing operations relative to the piece's top-left corner, y measured downwards


@dataclass
class _Piece:
    """An unbreakable slice of the flow, ``height`` [pt] tall.

    ``ops`` are tuples: ``("text", dx, dy, text, size, bold, color, align)`` with dy the
    baseline below the top; ``("rect", dx, dy, w, h, fill)``; ``("line", dx0, dy0, dx1, dy1,
    width, color, style)``; ``("image", dx, dy, w, h, pixels)``; ``("pageref", dx, dy, key)``
    (right-aligned page number of a section, known only after pagination).
    """

    height: float
    ops: list[tuple[Any, ...]] = field(default_factory=list)
    space_before: float = 0.0
    keep_with_next: bool = False
    repeat: tuple[_Piece, ...] = ()  # drawn first when this piece opens a page (table heads)
    section: str | None = None  # key of the section this piece opens


@dataclass
class Pagination:
    """Where the content fell: number of pages and each section's first page (1-based)."""

    page_count: int
    section_pages: dict[str, int] = field(default_factory=dict)


def _baseline(lead: float, size: float) -> float:
    """Distance [pt] from the top of a line box of height ``lead`` down to the baseline."""
    return (lead - (_ASCENT + _DESCENT) * size) / 2.0 + _ASCENT * size


def _text(
    dx: float,
    dy: float,
    s: str,
    size: float,
    bold: bool = False,
    color: str = INK,
    align: str = "left",
) -> tuple[Any, ...]:
    return ("text", dx, dy, s, size, bold, color, align)


def _line(
    dx0: float, dy0: float, dx1: float, dy1: float, lw: float, color: str = INK, style: Any = "-"
) -> tuple[Any, ...]:
    return ("line", dx0, dy0, dx1, dy1, lw, color, style)


def _keep_lines(pieces: list[_Piece]) -> list[_Piece]:
    """Keep at least two lines of a run together at the foot and at the head of a page."""
    if len(pieces) <= 4:
        for piece in pieces[:-1]:
            piece.keep_with_next = True
    else:
        pieces[0].keep_with_next = True
        pieces[-2].keep_with_next = True
    return pieces


def _lines(
    lines: list[str],
    size: float,
    lead: float,
    bold: bool = False,
    color: str = INK,
    dx: float = 0.0,
) -> list[_Piece]:
    base = _baseline(lead, size)
    return _keep_lines([_Piece(lead, [_text(dx, base, s, size, bold, color)]) for s in lines])


class _Builder:
    """Turns document blocks into pieces for a text block ``width`` [pt] wide."""

    def __init__(self, width: float, frame_height: float) -> None:
        self.width = width
        self.frame_height = frame_height
        self.tables = 0
        self.figures = 0

    def paragraph(self, block: Paragraph) -> list[_Piece]:
        pieces = _lines(wrap(block.text, self.width, BODY), BODY, BODY_LEAD)
        pieces[0].space_before = 6.0
        return pieces

    def bullets(self, block: BulletList) -> list[_Piece]:
        hang, pieces = 13.0, []
        for item in block.items:
            item_pieces = _lines(wrap(item, self.width - hang, BODY), BODY, BODY_LEAD, dx=hang)
            item_pieces[0].ops.append(_text(3.0, _baseline(BODY_LEAD, BODY), "\u2022", BODY))
            item_pieces[0].space_before = 2.0
            pieces += item_pieces
        if pieces:
            pieces[0].space_before = 6.0
        return pieces

    def callout(self, block: Callout) -> list[_Piece]:
        pad = 7.0
        bar = {"decision": 1.2, "caution": 4.0, "note": 1.2}[block.level]
        bold = block.level == "decision"
        rows = [(block.label.upper(), SMALL, SMALL_LEAD, True, MUTED)]
        text_lines = wrap(block.text, self.width - 2 * pad - bar, BODY, bold)
        rows += [(s, BODY, BODY_LEAD, bold, INK) for s in text_lines]
        pieces = []
        w = self.width
        for k, (s, size, lead, row_bold, color) in enumerate(rows):
            first, last = k == 0, k == len(rows) - 1
            h = lead + (pad if first else 0.0) + (pad if last else 0.0)
            ops: list[tuple[Any, ...]] = []
            if block.level == "decision":
                ops += [
                    ("rect", 0.0, h, w, h, WASH),
                    _line(0, 0, 0, h, bar),
                    _line(w, 0, w, h, bar),
                ]
                ops += [_line(0, 0, w, 0, bar)] if first else []
                ops += [_line(0, h, w, h, bar)] if last else []
            else:
                style = "-" if block.level == "caution" else (0, (2, 2))
                ops.append(_line(bar / 2, 0, bar / 2, h, bar, style=style))
            top = pad if first else 0.0
            ops.append(_text(bar + pad, top + _baseline(lead, size), s, size, row_bold, color))
            pieces.append(_Piece(h, ops))
        _keep_lines(pieces[1:])  # the label row counts apart: two text lines follow it
        pieces[0].keep_with_next = True
        if len(pieces) <= 8:
            for piece in pieces[:-1]:
                piece.keep_with_next = True
        pieces[0].space_before = 8.0
        return pieces

    def caption(self, label: str, text: str, size: float = BODY) -> list[_Piece]:
        lead = size * 1.4
        label_width = text_width(label + " ", size, bold=True)
        lines = wrap(text, self.width, size, first_indent=label_width)
        pieces = _lines(lines, size, lead)
        pieces[0].ops = [
            _text(0.0, _baseline(lead, size), label, size, True),
            _text(label_width, _baseline(lead, size), lines[0], size),
        ]
        for piece in pieces:
            piece.keep_with_next = True
        return pieces

    def table(self, block: Table) -> list[_Piece]:
        self.tables += 1
        header, rows, numeric = block.header_text(), block.cell_text(), block.numeric_columns()
        if not header:  # a table without columns shows only its caption and a remark
            header, rows, numeric = ["(no columns)"], [], [False]
        size = TABLE_SIZE
        widths = _column_widths(header, rows, self.width, size)
        while widths is None and size > MIN_TABLE_SIZE:
            size -= 0.5
            widths = _column_widths(header, rows, self.width, size)
        if widths is None:
            widths = _column_widths(header, rows, self.width, size, force=True)
        lead, total = 1.3 * size, sum(widths)

        def row(cells: list[str], bold: bool, shade: bool, head: bool) -> _Piece:
            wrapped = [
                wrap(c, w - 2 * CELL_PAD_X, size, bold) for c, w in zip(cells, widths, strict=True)
            ]
            h = max(len(lines) for lines in wrapped) * lead + 2 * CELL_PAD_Y
            ops: list[tuple[Any, ...]] = [("rect", 0.0, h, total, h, WASH)] if shade else []
            if head:
                ops += [_line(0, 0, total, 0, 1.1), _line(0, h, total, h, 0.6)]
            else:
                ops.append(_line(0, h, total, h, 0.3, FAINT))
            left = 0.0
            for lines, w, right in zip(wrapped, widths, numeric, strict=True):
                for k, s in enumerate(lines):
                    dy = CELL_PAD_Y + k * lead + _baseline(lead, size)
                    if right:
                        ops.append(_text(left + w - CELL_PAD_X, dy, s, size, bold, align="right"))
                    else:
                        ops.append(_text(left + CELL_PAD_X, dy, s, size, bold))
                left += w
            return _Piece(h, ops)

        caption = self.caption(f"Table {self.tables}.", block.caption)
        caption[0].space_before = 10.0
        head = row(header, True, False, True)
        head.keep_with_next = True
        body = [row(cells, False, k % 2 == 1, False) for k, cells in enumerate(rows)]
        if not body:
            body = _lines(["(no rows)"], size, lead + 2 * CELL_PAD_Y, color=MUTED, dx=CELL_PAD_X)
        repeat = (
            *self.caption(f"Table {self.tables}", "(continued)"),
            row(header, True, False, True),
        )
        for piece in body:
            piece.repeat = repeat
        body[-1].ops.append(_line(0, body[-1].height, total, body[-1].height, 1.1))
        pieces = [*caption, head, *body]
        if block.note:
            note = _lines(wrap(block.note, self.width, SMALL), SMALL, SMALL_LEAD, color=MUTED)
            note[0].space_before = 3.0
            pieces[-1].keep_with_next = True
            pieces += note
        return pieces

    def figure(self, block: Figure) -> list[_Piece]:
        self.figures += 1
        caption = self.caption(f"Figure {self.figures}.", block.caption)
        caption[-1].keep_with_next = False
        png = block.png_bytes(dpi=FIGURE_DPI)
        if png is None:  # SVG only: matplotlib cannot draw it, so say where the chart is
            message = f"[Chart in the HTML report only] {block.alt}"
            lines = wrap(message, self.width - 20.0, SMALL)
            h = len(lines) * SMALL_LEAD + 20.0
            ops: list[tuple[Any, ...]] = [("rect", 0.0, h, self.width, h, "white")]
            ops += [_line(0, 0, self.width, 0, 0.5, RULE), _line(0, h, self.width, h, 0.5, RULE)]
            base = _baseline(SMALL_LEAD, SMALL)
            ops += [
                _text(10.0, 10.0 + k * SMALL_LEAD + base, s, SMALL, color=MUTED)
                for k, s in enumerate(lines)
            ]
            return [_Piece(h + 4.0, ops, space_before=10.0, keep_with_next=True), *caption]
        from PIL import Image  # matplotlib's own image dependency

        # 8-bit RGB straight from the PNG: no float conversion or masking on the way in
        with Image.open(io.BytesIO(png)) as img:
            pixels = np.asarray(img.convert("RGB"))
            # ready PNGs: the resolution they were saved at (matplotlib writes it), else 150 dpi
            saved = float(img.info.get("dpi", (150.0, 150.0))[0]) or 150.0
        dpi = FIGURE_DPI if block.png is None else saved
        w = min(self.width, pixels.shape[1] / dpi * 72.0)
        h = w * pixels.shape[0] / pixels.shape[1]
        max_h = self.frame_height * 2.0 / 3.0
        if h > max_h:
            w, h = w * max_h / h, max_h
        image = ("image", (self.width - w) / 2.0, h, w, h, pixels)
        return [_Piece(h + 4.0, [image], space_before=10.0, keep_with_next=True), *caption]

    def keyvalues(self, block: KeyValues) -> list[_Piece]:
        items = block.text_items()
        pieces: list[_Piece] = []
        if block.caption:
            pieces += _lines(wrap(block.caption, self.width, BODY, True), BODY, BODY_LEAD, True)
            pieces[-1].keep_with_next = True
        gap = 14.0
        widest = max((text_width(label, BODY, True) for label, _ in items), default=0.0)
        label_w = min(widest + 1.0, 0.42 * self.width)
        base = _baseline(BODY_LEAD, BODY)
        for label, value in items:
            labels = wrap(label, label_w, BODY, True)
            values = wrap(value, self.width - label_w - gap, BODY)
            ops = [_text(0.0, k * BODY_LEAD + base, s, BODY, True) for k, s in enumerate(labels)]
            ops += [
                _text(label_w + gap, k * BODY_LEAD + base, s, BODY) for k, s in enumerate(values)
            ]
            pieces.append(_Piece(max(len(labels), len(values)) * BODY_LEAD + 1.5, ops))
        if pieces:
            pieces[0].space_before = 6.0
            _keep_lines(pieces)
            if len(pieces) <= 10:  # a short list stays on one page
                for piece in pieces[:-1]:
                    piece.keep_with_next = True
        return pieces


def _column_widths(
    header: list[str], rows: list[list[str]], width: float, size: float, force: bool = False
) -> list[float] | None:
    """Column widths [pt] that fit ``width``, wrapping cells only where needed.

    ``None`` when the longest words do not fit at this font size, unless ``force`` (then words
    are broken).
    """
    n = len(header)
    if n == 0:
        return []
    natural, shortest = [], []
    for j in range(n):
        cells = [row[j] for row in rows]
        widest = max([text_width(header[j], size, True)] + [text_width(c, size) for c in cells])
        natural.append(widest + 2 * CELL_PAD_X)
        words = [w for cell in [header[j], *cells] for w in cell.split()] or [""]
        longest = max(text_width(w, size, True) for w in words)
        shortest.append(min(longest, width / 3.0) + 2 * CELL_PAD_X)
    if sum(natural) <= width:
        scale = max(1.0, 0.5 * width / sum(natural))  # no table narrower than half the text
        return [w * scale for w in natural]
    if sum(shortest) > width:
        if not force:
            return None
        return [width * w / sum(shortest) for w in shortest]
    # every column gets its longest word; the rest is shared in proportion to what each
    # column still lacks of its natural width
    spare = width - sum(shortest)
    wants = [nat - short for nat, short in zip(natural, shortest, strict=True)]
    return [short + spare * want / sum(wants) for short, want in zip(shortest, wants, strict=True)]


def _build(doc: Document, paper: str) -> tuple[list[_Piece], float, float]:
    """All pieces of the document, the text width [pt] and the text height [pt]."""
    if paper not in PAPER_SIZES:
        raise InputError(
            f"paper size {paper!r} is not known; expected one of {', '.join(PAPER_SIZES)}",
            field="paper",
        )
    page_w, page_h = PAPER_SIZES[paper]
    width, frame_h = page_w - 2 * MARGIN_X, page_h - MARGIN_TOP - MARGIN_BOTTOM
    builder = _Builder(width, frame_h)

    pieces = _lines(wrap(doc.title, width, TITLE, True), TITLE, TITLE_LEAD, True)
    if doc.subtitle:
        subtitle = _lines(wrap(doc.subtitle, width, 12.0), 12.0, 16.0)
        subtitle[0].space_before = 2.0
        pieces += subtitle
    if doc.created:
        pieces += _lines(wrap(doc.created, width, SMALL), SMALL, SMALL_LEAD, color=MUTED)
    rule = [_line(0, 3.0, width, 3.0, 0.8), _line(0, 5.5, width, 5.5, 0.8)]
    pieces.append(_Piece(8.0, rule, space_before=4.0))

    if doc.sections:
        contents = _lines(["CONTENTS"], SMALL, SMALL_LEAD, bold=True, color=MUTED)
        contents[0].space_before = 10.0
        contents[0].keep_with_next = True
        pieces += contents
        base = _baseline(BODY_LEAD, BODY)
        for number, section in enumerate(doc.sections, start=1):
            entry = _lines(wrap(section.heading, width - 60.0, BODY), BODY, BODY_LEAD, dx=20.0)
            entry[0].ops.append(_text(0.0, base, str(number), BODY, color=MUTED))
            entry[-1].ops.append(("pageref", width, base, section.key))
            pieces += entry

    for number, section in enumerate(doc.sections, start=1):
        heading_lines = wrap(section.heading, width - HEADING_INDENT, HEADING, True)
        heading = _lines(heading_lines, HEADING, HEADING_LEAD, True, dx=HEADING_INDENT)
        heading[0].ops.append(
            _text(0.0, _baseline(HEADING_LEAD, HEADING), str(number), HEADING, True, MUTED)
        )
        heading[0].space_before, heading[0].section = 22.0, section.key
        heading[-1].height += 4.0
        heading[-1].ops.append(_line(0, HEADING_LEAD + 1.5, width, HEADING_LEAD + 1.5, 0.5, RULE))
        for piece in heading:
            piece.keep_with_next = True
        pieces += heading
        start = len(pieces)
        for block in section.blocks:
            if isinstance(block, Paragraph):
                pieces += builder.paragraph(block)
            elif isinstance(block, BulletList):
                pieces += builder.bullets(block)
            elif isinstance(block, Callout):
                pieces += builder.callout(block)
            elif isinstance(block, Table):
                pieces += builder.table(block)
            elif isinstance(block, Figure):
                pieces += builder.figure(block)
            elif isinstance(block, KeyValues):
                pieces += builder.keyvalues(block)
            else:  # the Section constructor admits only the types above
                raise TypeError(f"cannot render {type(block).__name__}")
        # a heading keeps at least HEADING_FOLLOW of content below it on its page (a short
        # opening line is kept with whatever comes next, such as a chart)
        follow = 0.0
        for piece in pieces[start:-1]:
            follow += piece.space_before + piece.height
            if follow >= HEADING_FOLLOW:
                break
            piece.keep_with_next = True
        pieces[-1].keep_with_next = False
    return pieces, width, frame_h


def _paginate(pieces: list[_Piece], frame_h: float) -> list[list[tuple[_Piece, float]]]:
    """Place pieces on pages; per page, (piece, offset of its top below the text top [pt])."""
    pages: list[list[tuple[_Piece, float]]] = [[]]
    used = 0.0
    for i, piece in enumerate(pieces):
        chain = [piece]
        while chain[-1].keep_with_next and i + len(chain) < len(pieces):
            chain.append(pieces[i + len(chain)])
        rest = sum(p.space_before + p.height for p in chain[1:])
        space = piece.space_before if pages[-1] else 0.0
        if pages[-1] and used + space + piece.height + rest > frame_h:
            # new page, unless the kept-together run would not fit on a fresh page either:
            # then the run is broken here, where this piece still fits
            fresh = sum(p.height for p in piece.repeat) + piece.height + rest
            if fresh <= frame_h or used + space + piece.height > frame_h:
                pages.append([])
                used, space = 0.0, 0.0
        if not pages[-1]:
            for head in piece.repeat:
                pages[-1].append((head, used))
                used += head.height
        used += space
        pages[-1].append((piece, used))
        used += piece.height
    return pages


def _section_pages(pages: list[list[tuple[_Piece, float]]]) -> dict[str, int]:
    return {
        piece.section: number
        for number, page in enumerate(pages, start=1)
        for piece, _ in page
        if piece.section
    }


def paginate(doc: Document, paper: str = "a4") -> Pagination:
    """Lay a document out on pages without drawing it.

    Parameters
    ----------
    doc : Document
    paper : {"a4", "letter"}

    Returns
    -------
    Pagination
        Page count and the page on which each section starts.
    """
    pieces, _, frame_h = _build(doc, paper)
    pages = _paginate(pieces, frame_h)
    return Pagination(len(pages), _section_pages(pages))


def _draw(axes: Any, op: tuple[Any, ...], x: float, top: float, refs: dict[str, int]) -> None:
    """Draw one operation of a piece whose top-left corner is at (x, top) [pt]."""
    kind = op[0]
    if kind == "pageref":
        _, dx, dy, key = op
        op = _text(dx, dy, str(refs.get(key, "")), BODY, align="right")
        kind = "text"
    if kind == "text":
        _, dx, dy, s, size, bold, color, align = op
        axes.text(
            x + dx,
            top - dy,
            s,
            fontsize=size,
            fontfamily=FONT,
            color=color,
            ha=align,
            fontweight="bold" if bold else "normal",
            va="baseline",
            parse_math=False,
        )
    elif kind == "line":
        _, dx0, dy0, dx1, dy1, lw, color, style = op
        axes.plot(
            [x + dx0, x + dx1],
            [top - dy0, top - dy1],
            lw=lw,
            color=color,
            linestyle=style,
            solid_capstyle="butt",
        )
    elif kind == "rect":
        from matplotlib.patches import Rectangle

        _, dx, dy, w, h, fill = op
        axes.add_patch(Rectangle((x + dx, top - dy), w, h, facecolor=fill, edgecolor="none"))
    elif kind == "image":
        _, dx, dy, w, h, pixels = op
        axes.imshow(
            pixels,
            extent=(x + dx, x + dx + w, top - dy, top - dy + h),
            interpolation="none",
            aspect="auto",
        )
    else:
        raise ValueError(f"unknown drawing operation {kind!r}")


def _write(doc: Document, target: Any, paper: str) -> int:
    import matplotlib
    from matplotlib.backends.backend_pdf import PdfPages
    from matplotlib.figure import Figure as MplFigure

    pieces, width, frame_h = _build(doc, paper)
    pages = _paginate(pieces, frame_h)
    refs = _section_pages(pages)
    page_w, page_h = PAPER_SIZES[paper]
    top, total = page_h - MARGIN_TOP, len(pages)
    running = doc.title if not doc.subtitle else f"{doc.title} \u2014 {doc.subtitle}"
    running_lines = wrap(running, 0.8 * width, SMALL)
    if len(running_lines) > 1:
        running = running_lines[0].rstrip(" .,;:\u2014") + " \u2026"
    header = [
        _line(0, -18.0, width, -18.0, 0.4, RULE),
        _text(0, -24.0, running, SMALL, color=MUTED),
    ]
    foot = frame_h + 32.0  # footer baseline 30 pt above the paper's lower edge
    metadata = {
        "Title": doc.title,
        "Subject": doc.subtitle,
        "Creator": f"blendq {__version__}",
        "CreationDate": None,
    }
    # Type 3 fonts: subset by matplotlib itself, a good deal faster to write than TrueType
    with matplotlib.rc_context({"pdf.fonttype": 3}), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"Glyph .* missing from")
        with PdfPages(target, metadata=metadata) as pdf:
            for number, placed in enumerate(pages, start=1):
                figure = MplFigure(figsize=(page_w / 72.0, page_h / 72.0))
                axes = figure.add_axes((0.0, 0.0, 1.0, 1.0))
                axes.axis("off")
                ops = [(op, offset) for piece, offset in placed for op in piece.ops]
                furniture = [
                    _line(0, foot - 10.0, width, foot - 10.0, 0.4, RULE),
                    _text(0, foot, doc.created, SMALL, color=MUTED),
                    _text(
                        width, foot, f"page {number} of {total}", SMALL, color=MUTED, align="right"
                    ),
                ]
                if number > 1:
                    furniture += header
                ops += [(op, 0.0) for op in furniture]
                for op, offset in ops:
                    _draw(axes, op, MARGIN_X, top - offset, refs)
                axes.set_xlim(0.0, page_w)
                axes.set_ylim(0.0, page_h)
                pdf.savefig(figure)
    return total


def render_pdf(doc: Document, path: str | PathLike[str], paper: str = "a4") -> int:
    """Write a document as a PDF file.

    Parameters
    ----------
    doc : Document
    path : path-like
        Output file, overwritten if present. For an all-or-nothing output folder use
        :func:`render_pdf_bytes` with :func:`blendq.outputs.write_outputs`.
    paper : {"a4", "letter"}
        Portrait paper size.

    Returns
    -------
    int
        Number of pages written.
    """
    return _write(doc, str(path), paper)


def render_pdf_bytes(doc: Document, paper: str = "a4") -> bytes:
    """Render a document to PDF bytes; the same document gives the same bytes."""
    buffer = io.BytesIO()
    _write(doc, buffer, paper)
    return buffer.getvalue()
