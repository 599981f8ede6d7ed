"""Render a :class:`blendq.report.document.Document` as one self-contained HTML5 page.

The page needs nothing else to display: the style sheet is inline, charts are embedded as
``data:`` images (PNG, or SVG shown through ``<img>`` so nothing inside it can run), and no
element refers to a script, font, style sheet or image elsewhere. A Content-Security-Policy in
the page tells the browser to load nothing from anywhere, as a second guard. Every string that
comes from the document (titles, headings, cells, column labels, captions, alt text) goes
through :func:`html.escape`.

The look is plain and print-friendly: black text on white, rules and line styles rather than
colour to tell callout kinds apart, so a grayscale print reads the same as the screen.
"""

from __future__ import annotations

import base64
import html

from blendq import __version__
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

__all__ = ["render_html", "STYLE_SHEET", "WIDE_TABLE_CHARACTERS", "table_characters"]

#: Inline style sheet of the page (blendq's own design).
STYLE_SHEET = """
:root { --ink: #161616; --muted: #555; --rule: #8a8a8a; --faint: #e4e4e4; --wash: #f4f4f4; }
* { box-sizing: border-box; }
html { font-size: 100%; }
body { margin: 0; color: var(--ink); background: #fff;
  font-family: Charter, "Bitstream Charter", Cambria, "DejaVu Serif", Georgia, serif;
  line-height: 1.5; }
main, header.titleblock, nav.contents, footer.colophon { max-width: 50rem; margin: 0 auto;
  padding: 0 1.25rem; }
h1, h2, .label, caption, figcaption, table, dl, nav.contents, footer.colophon {
  font-family: "Source Sans 3", "Segoe UI", Roboto, "DejaVu Sans", Arial, sans-serif; }
header.titleblock { padding-top: 2.25rem; }
header.titleblock::after { content: ""; display: block; margin-top: 0.75rem;
  border-bottom: 3px double var(--ink); }
h1 { font-size: 1.85rem; line-height: 1.2; margin: 0 0 0.35rem 0; font-weight: 700; }
p.subtitle { font-size: 1.15rem; margin: 0 0 0.35rem 0; }
p.created { font-size: 0.85rem; color: var(--muted); margin: 0; letter-spacing: 0.02em; }
nav.contents { padding-top: 1rem; padding-bottom: 0.5rem; }
nav.contents h2 { font-size: 1rem; text-transform: uppercase; letter-spacing: 0.08em;
  border: none; margin: 0 0 0.35rem 0; padding: 0; }
nav.contents ol { margin: 0; padding-left: 1.6rem; columns: 2 18rem; }
nav.contents a { color: inherit; text-decoration: none; border-bottom: 1px dotted var(--rule); }
section { margin-top: 2rem; }
h2 { font-size: 1.3rem; margin: 0 0 0.6rem 0; padding-bottom: 0.2rem;
  border-bottom: 1px solid var(--rule); }
h2 .number { display: inline-block; min-width: 2rem; color: var(--muted); }
p { margin: 0 0 0.8rem 0; }
ul { margin: 0 0 0.8rem 0; padding-left: 1.4rem; }
li { margin-bottom: 0.2rem; }
.callout { margin: 0 0 1rem 0; padding: 0.6rem 0.85rem; }
.callout .label { font-weight: 700; text-transform: uppercase; font-size: 0.8rem;
  letter-spacing: 0.08em; margin-right: 0.5rem; }
.callout-decision { border: 2px solid var(--ink); background: var(--wash); font-weight: 600; }
.callout-caution { border-left: 6px solid var(--ink); background: #fff;
  border-top: 1px solid var(--faint); border-bottom: 1px solid var(--faint); }
.callout-note { border: 1px dashed var(--rule); }
.tablewrap { max-width: 100%; overflow-x: auto; margin: 0 0 1.2rem 0; }
.tablewrap.wide { max-width: none; width: min(100vw - 2.5rem, 82rem);
  margin-left: calc((100% - min(100vw - 2.5rem, 82rem)) / 2); }
.tablewrap.wide table { margin: 0 auto; }
table { border-collapse: collapse; font-size: 0.88rem; min-width: 50%;
  font-variant-numeric: tabular-nums; }
caption { caption-side: top; text-align: left; font-size: 0.9rem; padding-bottom: 0.35rem; }
caption .label, figcaption .label { font-weight: 700; }
th, td { padding: 0.25rem 0.65rem; vertical-align: top; text-align: left;
  overflow-wrap: break-word; }
th { hyphens: auto; }
td.num { white-space: nowrap; }
thead th { border-top: 2px solid var(--ink); border-bottom: 1px solid var(--ink);
  font-weight: 700; }
tbody tr:nth-child(even) td { background: var(--wash); }
tbody tr:last-child td { border-bottom: 2px solid var(--ink); }
th.num, td.num { text-align: right; }
p.tablenote { font-size: 0.8rem; color: var(--muted); margin-top: 0.3rem; }
td.empty { color: var(--muted); font-style: italic; }
figure { margin: 0 0 1.4rem 0; }
figure img { display: block; max-width: 100%; height: auto; margin: 0 auto;
  border: 1px solid var(--faint); }
figcaption { font-size: 0.9rem; margin-top: 0.4rem; }
dl.keyvalues { display: grid; grid-template-columns: minmax(10rem, max-content) 1fr;
  gap: 0.15rem 1.2rem; margin: 0 0 1rem 0; font-size: 0.92rem; }
dl.keyvalues dt { font-weight: 700; }
dl.keyvalues dd { margin: 0; min-width: 0; overflow-wrap: anywhere;
  font-variant-numeric: tabular-nums; }
p.kvcaption { font-weight: 700; margin-bottom: 0.3rem; }
footer.colophon { margin-top: 3rem; padding-top: 0.6rem; padding-bottom: 2rem;
  border-top: 1px solid var(--rule); font-size: 0.8rem; color: var(--muted); }
@media print {
  @page { margin: 16mm 15mm 18mm 15mm; }
  body { font-size: 10.5pt; }
  main, header.titleblock, nav.contents, footer.colophon { max-width: none; padding: 0; }
  a { color: inherit; text-decoration: none; }
  section { break-before: auto; }
  h2 { break-after: avoid; }
  figure, .callout, tr, dl.keyvalues { break-inside: avoid; }
  thead { display: table-header-group; }
  .tablewrap, .tablewrap.wide { overflow: visible; width: auto; margin-left: 0; }
}
""".strip()

#: Characters of a table's widest row (each column at its longest cell, plus three for the
#: padding) beyond which the table leaves the 50 rem text column for a wider box: at most
#: 82 rem and never closer than 1.25 rem to either side of the window, so that on a laptop
#: screen (about 1366 px) a table with long text has room and fewer wrapped lines, and on a
#: narrow window it scrolls inside its box. About 100 characters of the 0.88 rem table font fit
#: the text column; blendq's setting.
WIDE_TABLE_CHARACTERS = 100

_CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def _e(text: object) -> str:
    """Escape any value for HTML text or a quoted attribute."""
    return html.escape(str(text), quote=True)


def _paragraph(block: Paragraph) -> str:
    return f"<p>{_e(block.text)}</p>"


def _bullets(block: BulletList) -> str:
    items = "".join(f"<li>{_e(item)}</li>" for item in block.items)
    return f"<ul>{items}</ul>"


def _callout(block: Callout) -> str:
    return (
        f'<div class="callout callout-{_e(block.level)}" role="note">'
        f'<span class="label">{_e(block.label)}</span>{_e(block.text)}</div>'
    )


def table_characters(header: list[str], rows: list[list[str]]) -> int:
    """Characters of a table's widest row: each column at its longest cell or label, plus three
    for the cell padding (compared with :data:`WIDE_TABLE_CHARACTERS`)."""
    return sum(max(len(text) for text in [label, *(row[i] for row in rows)]) + 3
               for i, label in enumerate(header))


def _table(block: Table, number: int) -> str:
    numeric = block.numeric_columns()
    classes = [' class="num"' if is_number else "" for is_number in numeric]
    head = "".join(
        f'<th scope="col"{cls}>{_e(label)}</th>'
        for label, cls in zip(block.header_text(), classes, strict=True)
    )
    rows, cells_text = [], block.cell_text()
    if not cells_text:
        span = max(1, len(classes))
        rows.append(f'<tr><td colspan="{span}" class="empty">(no rows)</td></tr>')
    for row in cells_text:
        cells = "".join(f"<td{cls}>{_e(cell)}</td>" for cell, cls in zip(row, classes, strict=True))
        rows.append(f"<tr>{cells}</tr>")
    note = f'<p class="tablenote">{_e(block.note)}</p>' if block.note else ""
    wide = table_characters(block.header_text(), cells_text) > WIDE_TABLE_CHARACTERS
    wrap = "tablewrap wide" if wide else "tablewrap"
    return (
        f'<div class="{wrap}" id="table-{number}"><table>'
        f'<caption><span class="label">Table {number}.</span> {_e(block.caption)}</caption>'
        f"<thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>{note}</div>"
    )


def _figure(block: Figure, number: int, png_dpi: float) -> str:
    if block.svg is not None:
        payload = base64.b64encode(block.svg.encode("utf-8")).decode("ascii")
        source = f"data:image/svg+xml;base64,{payload}"
    else:
        png = block.png_bytes(dpi=png_dpi)
        payload = base64.b64encode(png).decode("ascii")
        source = f"data:image/png;base64,{payload}"
    return (
        f'<figure id="figure-{number}"><img src="{source}" alt="{_e(block.alt)}">'
        f'<figcaption><span class="label">Figure {number}.</span> {_e(block.caption)}'
        "</figcaption></figure>"
    )


def _keyvalues(block: KeyValues) -> str:
    caption = f'<p class="kvcaption">{_e(block.caption)}</p>' if block.caption else ""
    pairs = "".join(
        f"<dt>{_e(label)}</dt><dd>{_e(value)}</dd>" for label, value in block.text_items()
    )
    return f'{caption}<dl class="keyvalues">{pairs}</dl>'


def _section(section: Section, number: int, counters: dict[type, int], png_dpi: float) -> str:
    parts = [
        f'<section id="{_e(section.key)}" data-key="{_e(section.key)}">',
        f'<h2><span class="number">{number}</span>{_e(section.heading)}</h2>',
    ]
    for block in section.blocks:
        if isinstance(block, Paragraph):
            parts.append(_paragraph(block))
        elif isinstance(block, BulletList):
            parts.append(_bullets(block))
        elif isinstance(block, Callout):
            parts.append(_callout(block))
        elif isinstance(block, Table):
            counters[Table] += 1
            parts.append(_table(block, counters[Table]))
        elif isinstance(block, Figure):
            counters[Figure] += 1
            parts.append(_figure(block, counters[Figure], png_dpi))
        elif isinstance(block, KeyValues):
            parts.append(_keyvalues(block))
        else:  # the Section constructor admits only the types above
            raise TypeError(f"cannot render {type(block).__name__}")
    parts.append("</section>")
    return "\n".join(parts)


def render_html(doc: Document, png_dpi: float = 150.0) -> str:
    """Render a document as a self-contained HTML5 page.

    Parameters
    ----------
    doc : Document
        The report.
    png_dpi : float
        Resolution [dots per inch] at which matplotlib figures are turned into PNG.

    Returns
    -------
    str
        The page, UTF-8 text ending with a newline. The same document gives the same text.
    """
    counters: dict[type, int] = {Table: 0, Figure: 0}
    contents = "".join(
        f'<li><a href="#{_e(section.key)}">{_e(section.heading)}</a></li>'
        for section in doc.sections
    )
    subtitle = f'<p class="subtitle">{_e(doc.subtitle)}</p>' if doc.subtitle else ""
    created = f'<p class="created">{_e(doc.created)}</p>' if doc.created else ""
    body = "\n".join(
        _section(section, index, counters, png_dpi)
        for index, section in enumerate(doc.sections, start=1)
    )
    page = f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="{_CSP}">
<meta name="generator" content="blendq {_e(__version__)}">
<title>{_e(doc.title)}</title>
<style>
{STYLE_SHEET}
</style>
</head>
<body>
<header class="titleblock">
<h1>{_e(doc.title)}</h1>
{subtitle}
{created}
</header>
<nav class="contents" aria-label="Contents">
<h2>Contents</h2>
<ol>{contents}</ol>
</nav>
<main>
{body}
</main>
<footer class="colophon">Made with blendq {_e(__version__)}.</footer>
</body>
</html>
"""
    return page
