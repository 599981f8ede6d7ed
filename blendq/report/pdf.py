"""Render a :class:`blendq.report.document.Document` as a paginated PDF with ReportLab's page layout.

Each document block becomes one or more ReportLab flowables; ReportLab's frame fills the pages,
wraps and measures the text (DejaVu Sans, the font that ships with matplotlib, embedded as a
subset so every machine shows the same glyphs, including the ones for units such as m³ and µg),
splits paragraphs without leaving a single line alone at the foot or head of a page
(``allowOrphans``/``allowWidows`` off), and splits long tables by row, repeating the column
labels under a "Table n (continued)" caption. Our own rules on top:

* a section heading starts a new page unless its own height plus some of what follows it fits
  (three lines of text, the first rows of a table, or the whole of an unbreakable block such as
  a chart) -- see :class:`_RoomAfterHeading`;
* charts are scaled to the text width and to at most two thirds of the text height and kept
  with their caption.

Pages are held back until the layout is done (:class:`_DeferredCanvas`), so each page's
footer can say "page k of N" and the contents list can give the page on which each section
starts in a single layout pass. The PDF is written in ReportLab's invariant mode (a fixed date
and document id), so the same document gives the same bytes.

References: ReportLab PDF Library User Guide (platypus: frames, flowables, tables, keeping
content together), ReportLab Inc.
"""

from __future__ import annotations

import importlib.util
import io
import os
import re
from dataclasses import dataclass, field
from os import PathLike
from typing import Any
from xml.sax.saxutils import escape

from blendq import __version__
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

__all__ = [
    "FIGURE_DPI",
    "PAPER_SIZES",
    "Pagination",
    "Placed",
    "paginate",
    "prepare",
    "render_pdf",
    "render_pdf_bytes",
    "text_width",
]

#: Paper sizes [pt] (width, height), portrait.
PAPER_SIZES: dict[str, tuple[float, float]] = {"a4": (595.276, 841.89), "letter": (612.0, 792.0)}
#: Resolution [dots per inch] at which a figure that still holds a matplotlib figure is
#: rasterised for the PDF (ready PNGs are placed at the resolution they were saved with).
FIGURE_DPI = 200.0
#: Smallest scale [-] to which a chart shrinks to end a page instead of moving to the next one
#: (blendq's layout rule: a chart at 75 % of its size still reads; a page three-quarters blank
#: does not).
FIGURE_MIN_SCALE = 0.75

FONT, FONT_BOLD = "blendq-sans", "blendq-sans-bold"
MARGIN_X, MARGIN_TOP, MARGIN_BOTTOM = 58.0, 66.0, 62.0
BODY, BODY_LEAD = 9.5, 13.6
SMALL, SMALL_LEAD = 8.0, 11.0
TABLE_SIZE, CELL_PAD_X, CELL_PAD_Y, MIN_TABLE_SIZE = 8.0, 4.0, 2.6, 6.0
HEADING, HEADING_LEAD, HEADING_INDENT = 13.5, 18.0, 26.0
HEADING_FOLLOW = 3 * BODY_LEAD  # least content [pt] kept on the page below a heading
CALLOUT_PAD = 7.0  # room [pt] between a callout's frame and its text
TITLE, TITLE_LEAD = 20.0, 25.0
GREYS = {"ink": 0.08, "muted": 0.35, "rule": 0.5, "wash": 0.92, "faint": 0.8}


# ---------------------------------------------------------------------------------------------
# fonts and styles


def _register_fonts() -> None:
    """Register DejaVu Sans (regular and bold) from matplotlib's font folder, once.

    Also turns off ReportLab's ASCII85 stream filter: binary (zlib) streams are smaller, and
    ReportLab's pure-Python ASCII85 encoder would be most of the time spent on the charts.
    """
    from reportlab import rl_config
    from reportlab.lib.fonts import addMapping
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    rl_config.useA85 = 0
    if FONT in pdfmetrics.getRegisteredFontNames():
        return
    spec = importlib.util.find_spec("matplotlib")  # located, not imported
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("matplotlib is not installed; its DejaVu Sans font is needed")
    folder = os.path.join(spec.submodule_search_locations[0], "mpl-data", "fonts", "ttf")
    pdfmetrics.registerFont(TTFont(FONT, os.path.join(folder, "DejaVuSans.ttf")))
    pdfmetrics.registerFont(TTFont(FONT_BOLD, os.path.join(folder, "DejaVuSans-Bold.ttf")))
    for bold, italic in ((0, 0), (0, 1), (1, 0), (1, 1)):  # <b> in markup picks the bold face
        addMapping(FONT, bold, italic, FONT_BOLD if bold else FONT)


def prepare() -> None:
    """Import the layout engine and load the fonts now (both happen on first use anyway)."""
    _register_fonts()
    _flowable_classes()
    import reportlab.platypus  # noqa: F401


def text_width(text: str, size: float, bold: bool = False) -> float:
    """Width [pt] of one line of text at font ``size`` [pt], as the PDF draws it."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    _register_fonts()
    return stringWidth(text, FONT_BOLD if bold else FONT, size)


def _grey(name: str) -> Any:
    from reportlab.lib.colors import Color

    g = GREYS[name]
    return Color(g, g, g)


def _style(name: str, size: float, lead: float, bold: bool = False, grey: str = "ink",
           **extra: Any) -> Any:
    from reportlab.lib.styles import ParagraphStyle

    return ParagraphStyle(name, fontName=FONT_BOLD if bold else FONT, fontSize=size,
                          leading=lead, textColor=_grey(grey), allowWidows=0, allowOrphans=0,
                          **extra)


def _markup(text: str) -> str:
    """Plain text as ReportLab paragraph markup: escaped, newlines kept."""
    # collapse ordinary white space only: the narrow no-break space that groups SI thousands
    # ("1 000") must stay, or the line could break inside a number
    return "<br/>".join(escape(" ".join(re.split(r"[ \t\r\f\v]+", part.strip(" \t\r\f\v"))))
                        for part in text.split("\n"))


# ---------------------------------------------------------------------------------------------
# what went where (for the contents list, the footers and the tests)


@dataclass(frozen=True)
class Placed:
    """One tagged flowable as placed: its page, its tag and how many lines or rows it holds.

    ``tag`` is ``"heading:<key>"``, ``"paragraph:<n>"`` (the n-th paragraph of the document,
    one entry per page it spans, ``count`` its lines there), ``"table:<n>"`` (``count`` the
    body rows on that page, ``continued`` true on the pages it runs onto), ``"figure:<n>"`` or
    ``"callout:<n>"``.
    """

    page: int
    tag: str
    count: int = 0
    continued: bool = False


@dataclass
class Pagination:
    """Where the content fell: page count, each section's first page (1-based), and the
    tagged flowables in the order they were placed."""

    page_count: int
    section_pages: dict[str, int] = field(default_factory=dict)
    placed: list[Placed] = field(default_factory=list)


# ---------------------------------------------------------------------------------------------
# flowables of our own


def _flowable_classes() -> dict[str, type]:
    """ReportLab subclasses, built on first use so that importing this module stays cheap."""
    if _CLASSES:
        return _CLASSES
    from reportlab.pdfgen.canvas import Canvas
    from reportlab.platypus import CondPageBreak, Flowable, KeepTogether
    from reportlab.platypus import Paragraph as RLParagraph
    from reportlab.platypus import Table as RLTable

    class TaggedParagraph(RLParagraph):
        """A paragraph whose parts keep its tag (and its callout frame) when it is split over
        pages. ``bq_frame`` is a callout level: "decision" draws a shaded box, "caution" a
        heavy bar on the left, "note" a dashed bar; each reaches :data:`CALLOUT_PAD` above
        and below the text."""

        bq_tag = ""
        bq_frame = ""

        def split(self, width: float, height: float) -> list[Any]:
            parts = super().split(width, height)
            for part in parts:
                part.bq_tag, part.bq_frame = self.bq_tag, self.bq_frame
            return parts

        def draw(self) -> None:
            if self.bq_frame:
                c, pad, h = self.canv, CALLOUT_PAD, self.height
                c.saveState()
                c.setStrokeColor(_grey("ink"))
                if self.bq_frame == "decision":
                    c.setFillColor(_grey("wash"))
                    c.setLineWidth(1.2)
                    c.rect(0.6, -pad, self.width - 1.2, h + 2 * pad, fill=1, stroke=1)
                elif self.bq_frame == "caution":
                    c.setLineWidth(4.0)
                    c.line(2.0, -pad, 2.0, h + pad)
                else:
                    c.setLineWidth(1.2)
                    c.setDash(2, 2)
                    c.line(0.6, -pad, 0.6, h + pad)
                c.restoreState()
            super().draw()

        def bq_count(self) -> int:
            return len(self.blPara.lines)

    class TaggedTable(RLTable):
        """A table with a caption row and a column-label row that repeat on every page;
        on the pages it runs onto the caption reads "Table n (continued)"."""

        bq_tag = ""
        bq_label = ""
        bq_caption_style: Any = None
        bq_fixed = 2  # caption row and column-label row
        bq_note = 0  # 1 when the last row is a note
        bq_continued = False

        def split(self, width: float, height: float) -> list[Any]:
            parts = super().split(width, height)
            if len(parts) == 2:
                head, rest = parts
                for part in parts:
                    part.bq_tag, part.bq_label = self.bq_tag, self.bq_label
                    part.bq_caption_style = self.bq_caption_style
                head.bq_continued, head.bq_note = self.bq_continued, 0
                rest.bq_continued, rest.bq_note = True, self.bq_note
                caption = RLParagraph(f"<b>{escape(self.bq_label)}</b> (continued)",
                                      self.bq_caption_style)
                # a new row list: the parts share the row lists of the table they came from
                rest._cellvalues[0] = [caption, *rest._cellvalues[0][1:]]
            return parts

        def bq_count(self) -> int:
            return len(self._cellvalues) - self.bq_fixed - self.bq_note

    class TwoRules(Flowable):
        """Two thin parallel rules across the text width, under the title block."""

        def wrap(self, width: float, height: float) -> tuple[float, float]:
            self.width = width
            return width, 8.0

        def draw(self) -> None:
            self.canv.setStrokeColor(_grey("ink"))
            self.canv.setLineWidth(0.8)
            self.canv.line(0, 5.0, self.width, 5.0)
            self.canv.line(0, 2.5, self.width, 2.5)

    class RoomAfterHeading(CondPageBreak):
        """Start a new page unless the heading and the first part of what follows fit.

        What must fit below the heading: :data:`HEADING_FOLLOW` of content, where a paragraph
        counts with its lines, a table with its caption, column labels and first two rows, and
        an unbreakable block (a chart and its caption, a short list) whole; so a short opening
        line is kept with the chart after it.
        """

        def __init__(self, heading: Any, following: list[Any]) -> None:
            super().__init__(0.0)
            self.heading, self.following = heading, following

        def wrap(self, width: float, height: float) -> tuple[float, float]:
            heading = self.heading
            need = heading.getSpaceBefore() + heading.wrap(width, height)[1]
            need += heading.getSpaceAfter()
            follow = 0.0  # content below the heading, not counting the space between blocks
            for f in self.following:
                if follow >= HEADING_FOLLOW:
                    break
                need += f.getSpaceBefore()
                if isinstance(f, KeepTogether):
                    part = sum(c.wrap(width, 1e6)[1] + c.getSpaceBefore() for c in f._content)
                elif hasattr(f, "bq_min_height"):  # a chart: whole, at its smallest scale
                    part = f.bq_min_height(width)
                elif isinstance(f, TaggedTable):
                    f.wrap(width, 1e6)
                    part = sum(f._rowHeights[: f.bq_fixed + 2])
                else:
                    part = min(f.wrap(width, 1e6)[1], HEADING_FOLLOW - follow)
                follow += part
            self.height = need + follow
            return super().wrap(width, height)

    class PageRef(Flowable):
        """The page on which a section starts, in the contents list: drawn at the end, when
        the page is known (see :class:`_DeferredCanvas`)."""

        def __init__(self, key: str) -> None:
            super().__init__()
            self.key = key

        def wrap(self, width: float, height: float) -> tuple[float, float]:
            self.width = width
            return width, BODY_LEAD

        def draw(self) -> None:
            x, y = self.canv.absolutePosition(self.width, BODY_LEAD - BODY)
            self.canv.bq_refs.append((self.canv.getPageNumber(), x, y, self.key))

    class DeferredCanvas(Canvas):
        """A canvas that holds every page back until :meth:`save`, then calls ``finish(canvas,
        total)`` on each before writing it: the page count and the sections' pages are known
        by then."""

        def __init__(self, *args: Any, finish: Any = None, **kwargs: Any) -> None:
            super().__init__(*args, **kwargs)
            self.bq_pages: list[dict[str, Any]] = []
            self.bq_refs: list[tuple[int, float, float, str]] = []
            self.bq_finish = finish

        def showPage(self) -> None:  # noqa: N802 - ReportLab's name
            self.bq_pages.append(dict(self.__dict__))
            self._startPage()

        def save(self) -> None:
            total = len(self.bq_pages)
            for state in self.bq_pages:
                self.__dict__.update(state)
                if self.bq_finish is not None:
                    self.bq_finish(self, total)
                Canvas.showPage(self)
            Canvas.save(self)

    class FigureBox(Flowable):
        """A chart and its caption as one unit that may shrink (to :data:`FIGURE_MIN_SCALE` of
        its height at least) to finish a page rather than leave most of it blank."""

        bq_tag = ""

        def __init__(self, png: bytes, width: float, height: float, caption: Any) -> None:
            super().__init__()
            self.png, self.full_w, self.full_h, self.caption = png, width, height, caption
            self.spaceBefore = 10.0
            self.scale = 1.0

        def bq_min_height(self, avail_w: float) -> float:
            return self.full_h * FIGURE_MIN_SCALE + self.caption.wrap(avail_w, 1e6)[1]

        def wrap(self, avail_w: float, avail_h: float) -> tuple[float, float]:
            _, cap_h = self.caption.wrap(avail_w, 1e6)
            self.cap_h = cap_h
            need = self.full_h + cap_h
            room = (avail_h - cap_h) / self.full_h
            self.scale = 1.0 if need <= avail_h else (
                room if room >= FIGURE_MIN_SCALE else 1.0)
            self.width = avail_w
            self.height = self.full_h * self.scale + cap_h
            return self.width, self.height

        def draw(self) -> None:
            from reportlab.lib.utils import ImageReader

            w, h = self.full_w * self.scale, self.full_h * self.scale
            self.canv.drawImage(ImageReader(io.BytesIO(self.png)), 0, self.cap_h, width=w,
                                height=h, mask="auto")
            self.caption.drawOn(self.canv, 0, 0)

    _CLASSES.update(TaggedParagraph=TaggedParagraph, TaggedTable=TaggedTable,
                    TwoRules=TwoRules, RoomAfterHeading=RoomAfterHeading, PageRef=PageRef,
                    DeferredCanvas=DeferredCanvas, FigureBox=FigureBox)
    return _CLASSES


_CLASSES: dict[str, type] = {}


# ---------------------------------------------------------------------------------------------
# blocks to flowables


def _column_widths(
    header: list[str], rows: list[list[str]], width: float, size: float, force: bool = False
) -> list[float] | None:
    """Column widths [pt] that fit ``width``, wrapping cells only where needed.

    ``None`` when the longest words do not fit at this font size, unless ``force`` (then the
    words are broken).
    """
    n = len(header)
    if n == 0:
        return []
    natural, shortest = [], []
    for j in range(n):
        cells = [row[j] for row in rows]
        widest = max([text_width(header[j], size, True)] + [text_width(c, size) for c in cells])
        natural.append(widest + 2 * CELL_PAD_X + 0.5)
        words = [w for cell in [header[j], *cells] for w in cell.split()] or [""]
        longest = max(text_width(w, size, True) for w in words)
        shortest.append(min(longest, width / 3.0) + 2 * CELL_PAD_X + 0.5)
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


class _Builder:
    """Turns document blocks into flowables for a text block ``width`` x ``height`` [pt]."""

    def __init__(self, width: float, height: float) -> None:
        self.width, self.height = width, height
        self.counts = {"paragraph": 0, "table": 0, "figure": 0, "callout": 0}
        self.cls = _flowable_classes()
        self.body = _style("body", BODY, BODY_LEAD, spaceBefore=6.0)
        self.bullet = _style("bullet", BODY, BODY_LEAD, leftIndent=13.0, bulletIndent=3.0,
                             bulletFontName=FONT, spaceBefore=2.0)
        self.small = _style("small", SMALL, SMALL_LEAD, grey="muted")
        self.caption = _style("caption", BODY, BODY * 1.4)
        self.heading = _style("heading", HEADING, HEADING_LEAD, bold=True)
        self.heading_number = _style("heading-number", HEADING, HEADING_LEAD, bold=True,
                                     grey="muted")

    def _tag(self, kind: str) -> str:
        self.counts[kind] += 1
        return f"{kind}:{self.counts[kind]}"

    def para(self, text: str, style: Any, tag: str = "", **kw: Any) -> Any:
        p = self.cls["TaggedParagraph"](_markup(text), style, **kw)
        p.bq_tag = tag
        return p

    def paragraph(self, block: Paragraph) -> list[Any]:
        return [self.para(block.text, self.body, self._tag("paragraph"))]

    def bullets(self, block: BulletList) -> list[Any]:
        out = [self.para(item, self.bullet, bulletText="\u2022") for item in block.items]
        if out:
            out[0].style = _style("bullet-first", BODY, BODY_LEAD, leftIndent=13.0,
                                  bulletIndent=3.0, bulletFontName=FONT, spaceBefore=6.0)
        return out

    def callout(self, block: Callout) -> list[Any]:
        from reportlab.platypus import KeepTogether

        # label and text in one paragraph: orphan control keeps the label with the text
        muted = "#%02x%02x%02x" % ((round(255 * GREYS["muted"]),) * 3)
        text = (f'<font name="{FONT_BOLD}" size="{SMALL}" color="{muted}">'
                f"{escape(block.label.upper())}</font><br/>{_markup(block.text)}")
        bar = 4.0 if block.level == "caution" else 1.2
        style = _style("callout", BODY, BODY_LEAD, block.level == "decision",
                       leftIndent=7.0 + bar, rightIndent=7.0, spaceBefore=8.0 + CALLOUT_PAD,
                       spaceAfter=CALLOUT_PAD)
        para = self.cls["TaggedParagraph"](text, style)
        para.bq_tag, para.bq_frame = self._tag("callout"), block.level
        # a callout moves to the next page whole, unless it is too long for that
        if para.wrap(self.width, 1e6)[1] > self.height / 3.0:
            return [para]
        return [KeepTogether([para])]

    def table(self, block: Table) -> list[Any]:
        from reportlab.lib.enums import TA_LEFT, TA_RIGHT
        from reportlab.platypus import TableStyle

        tag = self._tag("table")
        label = f"Table {self.counts['table']}."
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
        assert widths is not None
        cell = {(bold, right): _style("cell", size, 1.3 * size, bold,
                                     alignment=TA_RIGHT if right else TA_LEFT)
                for bold in (False, True) for right in (False, True)}
        caption = self.cls["TaggedParagraph"](
            f"<b>{escape(label)}</b> {_markup(block.caption)}", self.caption)
        data: list[list[Any]] = [[caption] + [""] * (len(header) - 1)]
        data.append([self.para(h, cell[True, right]) for h, right in
                     zip(header, numeric, strict=True)])
        body = rows or [["(no rows)"] + [""] * (len(header) - 1)]
        for cells in body:
            data.append([self.para(c, cell[False, right]) for c, right in
                         zip(cells, numeric, strict=True)])
        n_body = len(body)
        commands: list[tuple[Any, ...]] = [
            ("SPAN", (0, 0), (-1, 0)),
            ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ("LEFTPADDING", (0, 0), (-1, -1), CELL_PAD_X),
            ("RIGHTPADDING", (0, 0), (-1, -1), CELL_PAD_X),
            ("TOPPADDING", (0, 0), (-1, -1), CELL_PAD_Y),
            ("BOTTOMPADDING", (0, 0), (-1, -1), CELL_PAD_Y),
            ("LEFTPADDING", (0, 0), (-1, 0), 0.0),
            ("BOTTOMPADDING", (0, 0), (-1, 0), 4.0),
            ("LINEBELOW", (0, 0), (-1, 0), 1.1, _grey("ink")),
            ("LINEBELOW", (0, 1), (-1, 1), 0.6, _grey("ink")),
            ("LINEBELOW", (0, 2), (-1, n_body + 1), 0.3, _grey("faint")),
            ("LINEBELOW", (0, n_body + 1), (-1, n_body + 1), 1.1, _grey("ink")),
        ]
        commands += [("BACKGROUND", (0, 2 + k), (-1, 2 + k), _grey("wash"))
                     for k in range(1, n_body, 2) if rows]
        if not rows:
            commands.append(("SPAN", (0, 2), (-1, 2)))
            data[2][0] = self.para("(no rows)", self.small)
        if block.note:
            data.append([self.para(block.note, self.small)] + [""] * (len(header) - 1))
            commands += [("SPAN", (0, -1), (-1, -1)), ("LEFTPADDING", (0, -1), (-1, -1), 0.0),
                         ("TOPPADDING", (0, -1), (-1, -1), 3.0)]
        table = self.cls["TaggedTable"](data, colWidths=widths, repeatRows=2, hAlign="LEFT",
                                        spaceBefore=10.0)
        table.setStyle(TableStyle(commands))
        table.bq_tag, table.bq_label, table.bq_note = tag, label[:-1], int(bool(block.note))
        table.bq_caption_style = self.caption
        return [table]

    def figure(self, block: Figure) -> list[Any]:
        from PIL import Image as PILImage  # matplotlib's and ReportLab's image dependency
        from reportlab.platypus import KeepTogether
        from reportlab.platypus import Table as RLTable

        tag = self._tag("figure")
        caption = self.cls["TaggedParagraph"](
            f"<b>Figure {self.counts['figure']}.</b> {_markup(block.caption)}", self.caption)
        png = block.png_bytes(dpi=FIGURE_DPI)
        if png is None:  # SVG only: ReportLab cannot draw it, so say where the chart is
            box = RLTable([[self.para(f"[Chart in the HTML report only] {block.alt}",
                                      self.small)]],
                          colWidths=[self.width], spaceBefore=10.0,
                          style=[("BOX", (0, 0), (-1, -1), 0.5, _grey("rule")),
                                 ("LEFTPADDING", (0, 0), (-1, -1), 10.0),
                                 ("TOPPADDING", (0, 0), (-1, -1), 10.0),
                                 ("BOTTOMPADDING", (0, 0), (-1, -1), 10.0)])
            box.bq_tag = tag
            return [KeepTogether([box, caption])]
        with PILImage.open(io.BytesIO(png)) as img:
            px_w, px_h = img.size
            # ready PNGs: the resolution they were saved at (matplotlib writes it), else 150
            saved = float(img.info.get("dpi", (150.0, 150.0))[0]) or 150.0
        dpi = FIGURE_DPI if block.png is None else saved
        w = min(self.width, px_w / dpi * 72.0)
        h = w * px_h / px_w
        if h > self.height * 2.0 / 3.0:
            w, h = w * self.height * 2.0 / 3.0 / h, self.height * 2.0 / 3.0
        box = self.cls["FigureBox"](png, w, h, caption)
        box.bq_tag = tag
        return [box]

    def keyvalues(self, block: KeyValues) -> list[Any]:
        from reportlab.platypus import Table as RLTable

        out: list[Any] = []
        if block.caption:
            out.append(self.para(block.caption, _style("kv-caption", BODY, BODY_LEAD, True,
                                                       spaceBefore=6.0, keepWithNext=1)))
        items = block.text_items()
        if not items:
            return out
        gap = 14.0
        widest = max(text_width(label, BODY, True) for label, _ in items)
        label_w = min(widest + 1.0, 0.42 * self.width)
        bold = _style("kv-label", BODY, BODY_LEAD, True)
        rows = [[self.para(label, bold), self.para(value, _style("kv", BODY, BODY_LEAD))]
                for label, value in items]
        table = RLTable(rows, colWidths=[label_w + gap, self.width - label_w - gap],
                        hAlign="LEFT", spaceBefore=6.0,
                        style=[("VALIGN", (0, 0), (-1, -1), "TOP"),
                               ("LEFTPADDING", (0, 0), (-1, -1), 0.0),
                               ("RIGHTPADDING", (0, 0), (-1, -1), 0.0),
                               ("TOPPADDING", (0, 0), (-1, -1), 0.0),
                               ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5)])
        if len(rows) <= 10:  # a short list stays on one page
            from reportlab.platypus import KeepTogether

            return [*out, KeepTogether([table])]
        return [*out, table]

    def block(self, block: Any) -> list[Any]:
        for kind, method in ((Paragraph, self.paragraph), (BulletList, self.bullets),
                             (Callout, self.callout), (Table, self.table),
                             (Figure, self.figure), (KeyValues, self.keyvalues)):
            if isinstance(block, kind):
                return method(block)
        raise TypeError(f"cannot render {type(block).__name__}")  # Section admits no other

    def heading_flowable(self, number: int, section: Section) -> Any:
        from reportlab.platypus import Table as RLTable

        rows = [[self.para(str(number), self.heading_number),
                 self.para(section.heading, self.heading)]]
        table = RLTable(rows, colWidths=[HEADING_INDENT, self.width - HEADING_INDENT],
                        hAlign="LEFT", spaceBefore=22.0, spaceAfter=4.0,
                        style=[("VALIGN", (0, 0), (-1, -1), "TOP"),
                               ("LEFTPADDING", (0, 0), (-1, -1), 0.0),
                               ("RIGHTPADDING", (0, 0), (-1, -1), 0.0),
                               ("TOPPADDING", (0, 0), (-1, -1), 0.0),
                               ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5),
                               ("LINEBELOW", (0, 0), (-1, -1), 0.5, _grey("rule"))])
        table.bq_tag = f"heading:{section.key}"
        return table


def _story(doc: Document, width: float, height: float) -> list[Any]:
    """All flowables of the document."""
    from reportlab.platypus import Table as RLTable

    b = _Builder(width, height)
    story: list[Any] = [b.para(doc.title, _style("title", TITLE, TITLE_LEAD, True))]
    if doc.subtitle:
        story.append(b.para(doc.subtitle, _style("subtitle", 12.0, 16.0, spaceBefore=2.0)))
    if doc.created:
        story.append(b.para(doc.created, b.small))
    rules = b.cls["TwoRules"]()
    rules.spaceBefore = 4.0
    story.append(rules)
    if doc.sections:
        story.append(b.para("CONTENTS", _style("contents", SMALL, SMALL_LEAD, True, "muted",
                                               spaceBefore=10.0, keepWithNext=1)))
        number_style = _style("contents-number", BODY, BODY_LEAD, grey="muted")
        entry_style = _style("contents-entry", BODY, BODY_LEAD)
        rows = [[b.para(str(k), number_style), b.para(s.heading, entry_style),
                 b.cls["PageRef"](s.key)]
                for k, s in enumerate(doc.sections, start=1)]
        story.append(RLTable(rows, colWidths=[20.0, width - 60.0, 40.0], hAlign="LEFT",
                             style=[("VALIGN", (0, 0), (-1, -1), "TOP"),
                                    ("LEFTPADDING", (0, 0), (-1, -1), 0.0),
                                    ("RIGHTPADDING", (0, 0), (-1, -1), 0.0),
                                    ("TOPPADDING", (0, 0), (-1, -1), 0.0),
                                    ("BOTTOMPADDING", (0, 0), (-1, -1), 0.0)]))
    for number, section in enumerate(doc.sections, start=1):
        heading = b.heading_flowable(number, section)
        blocks = [f for block in section.blocks for f in b.block(block)]
        story += [b.cls["RoomAfterHeading"](heading, blocks), heading]
        story += blocks
    return story


# ---------------------------------------------------------------------------------------------
# pages


def _layout(doc: Document, paper: str, target: Any) -> Pagination:
    """Lay the document out and write it to ``target``; return where everything fell."""
    from reportlab.platypus import BaseDocTemplate, Frame, PageTemplate

    page_w, page_h = PAPER_SIZES[paper]
    width, height = page_w - 2 * MARGIN_X, page_h - MARGIN_TOP - MARGIN_BOTTOM
    running = doc.title if not doc.subtitle else f"{doc.title} \u2014 {doc.subtitle}"
    if text_width(running, SMALL) > 0.8 * width:
        while running and text_width(running + " \u2026", SMALL) > 0.8 * width:
            running = running[:-1]
        running = running.rstrip(" .,;:\u2014") + " \u2026"
    result = Pagination(0)

    def finish(canvas: Any, total: int) -> None:
        """Footer, running header and contents page numbers of the canvas's current page."""
        number = canvas.getPageNumber()
        canvas.saveState()
        canvas.setStrokeColor(_grey("rule"))
        canvas.setFillColor(_grey("muted"))
        canvas.setLineWidth(0.4)
        canvas.setFont(FONT, SMALL)
        foot = MARGIN_BOTTOM - 32.0
        canvas.line(MARGIN_X, foot + 10.0, MARGIN_X + width, foot + 10.0)
        canvas.drawString(MARGIN_X, foot, doc.created)
        canvas.drawRightString(MARGIN_X + width, foot, f"page {number} of {total}")
        if number > 1:
            top = page_h - MARGIN_TOP
            canvas.line(MARGIN_X, top + 18.0, MARGIN_X + width, top + 18.0)
            canvas.drawString(MARGIN_X, top + 24.0, running)
        canvas.setFillColor(_grey("ink"))
        canvas.setFont(FONT, BODY)
        for page, x, y, key in canvas.bq_refs:
            if page == number:
                canvas.drawRightString(x, y, str(result.section_pages.get(key, "")))
        canvas.restoreState()
        result.page_count = total

    class Template(BaseDocTemplate):
        def afterFlowable(self, flowable: Any) -> None:  # noqa: N802 - ReportLab's name
            tag = getattr(flowable, "bq_tag", "")
            if not tag:
                return
            page = self.page
            if tag.startswith("heading:"):
                result.section_pages.setdefault(tag.split(":", 1)[1], page)
            count = flowable.bq_count() if hasattr(flowable, "bq_count") else 0
            continued = bool(getattr(flowable, "bq_continued", False))
            result.placed.append(Placed(page, tag, count, continued))

    template = Template(
        target, pagesize=(page_w, page_h), leftMargin=MARGIN_X, rightMargin=MARGIN_X,
        topMargin=MARGIN_TOP, bottomMargin=MARGIN_BOTTOM, title=doc.title,
        subject=doc.subtitle, creator=f"blendq {__version__}", author="",
        # the creation date is the real one; ReportLab uses SOURCE_DATE_EPOCH instead when it
        # is set, for a reproducible (byte-identical) file
        invariant=0,
    )
    frame = Frame(MARGIN_X, MARGIN_BOTTOM, width, height, leftPadding=0, rightPadding=0,
                  topPadding=0, bottomPadding=0, id="text")
    template.addPageTemplates([PageTemplate("page", [frame])])
    canvas_class = _flowable_classes()["DeferredCanvas"]
    template.build(_story(doc, width, height),
                   canvasmaker=lambda *a, **k: canvas_class(*a, finish=finish, **k))
    return result


def _check_paper(paper: str) -> None:
    if paper not in PAPER_SIZES:
        raise InputError(
            f"paper size {paper!r} is not known; expected one of {', '.join(PAPER_SIZES)}",
            field="paper",
        )


def paginate(doc: Document, paper: str = "a4") -> Pagination:
    """Lay a document out on pages without keeping the file.

    Parameters
    ----------
    doc : Document
    paper : {"a4", "letter"}

    Returns
    -------
    Pagination
        Page count, the page on which each section starts, and what was placed where.
    """
    _check_paper(paper)
    _register_fonts()
    return _layout(doc, paper, io.BytesIO())


def _write(doc: Document, paper: str) -> tuple[bytes, int]:
    _check_paper(paper)
    _register_fonts()
    buffer = io.BytesIO()
    layout = _layout(doc, paper, buffer)
    return buffer.getvalue(), layout.page_count


def render_pdf(doc: Document, path: str | PathLike[str], paper: str = "a4") -> int:
    """Write a document as a PDF file.

    Parameters
    ----------
    doc : Document
    path : path-like
        Output file, overwritten if present. For an all-or-nothing output folder use
        :func:`render_pdf_bytes` with :func:`blendq.report.outputs.write_outputs`.
    paper : {"a4", "letter"}
        Portrait paper size.

    Returns
    -------
    int
        Number of pages written.
    """
    data, pages = _write(doc, paper)
    with open(path, "wb") as handle:
        handle.write(data)
    return pages


def render_pdf_bytes(doc: Document, paper: str = "a4") -> bytes:
    """Render a document to PDF bytes; the same document gives the same bytes when
    ``SOURCE_DATE_EPOCH`` fixes the creation date (otherwise the date is the real one)."""
    return _write(doc, paper)[0]
