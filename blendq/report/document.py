"""A small, renderer-neutral document model for blendq's reports.

A :class:`Document` is a title block and a list of :class:`Section` objects; each section holds
a list of blocks (:class:`Paragraph`, :class:`BulletList`, :class:`Callout`, :class:`Table`,
:class:`Figure`, :class:`KeyValues`). The model is pure data: it never reads the clock (the
creation stamp is passed in, so the same inputs give the same report), and it imports no
plotting library. Renderers (:mod:`blendq.report.html`, :mod:`blendq.report.pdf`) walk it.

Table cells are turned into text here, once, by :meth:`Table.cell_text`, so the HTML page and
the PDF show the same numbers.

Errors raised here are :class:`ValueError`/:class:`TypeError`: a document is built by blendq's
own code, so a malformed block is a programming error, not bad user input.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from numbers import Integral, Real
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "CALLOUT_LEVELS",
    "BulletList",
    "Block",
    "Callout",
    "Document",
    "Figure",
    "KeyValues",
    "MISSING_TEXT",
    "Paragraph",
    "Section",
    "Table",
    "format_value",
]

#: Allowed callout levels and the word each renderer prints in front of the text.
CALLOUT_LEVELS: dict[str, str] = {
    "decision": "Decision",
    "caution": "Caution",
    "note": "Note",
}

#: Text shown for a missing value (NaN, None, NaT) in a table or key-value list.
MISSING_TEXT = "\u2014"

_KEY_PATTERN = re.compile(r"^[a-z][a-z0-9_-]*$")


def format_value(value: Any, spec: str | None = None) -> str:
    """Turn one value into the text shown in a table cell or key-value list.

    Parameters
    ----------
    value : Any
        A number, string, bool, ``None`` or NaN/NaT.
    spec : str, optional
        A format spec for numbers, as in :func:`format` (``".3g"``, ``".2f"``, ``",.0f"``).
        Default: integers as they are, other reals with 4 significant digits (``".4g"``).

    Returns
    -------
    str
        The text; :data:`MISSING_TEXT` for a missing value. Strings are returned unchanged
        (escaping is the renderer's job).
    """
    if value is None:
        return MISSING_TEXT
    if isinstance(value, str):
        return value
    if isinstance(value, (bool, np.bool_)):
        return "yes" if bool(value) else "no"
    if value is pd.NaT:
        return MISSING_TEXT
    if isinstance(value, Integral):
        return format(int(value), spec) if spec else str(int(value))
    if isinstance(value, Real):
        number = float(value)
        if math.isnan(number):
            return MISSING_TEXT
        if math.isinf(number):
            return "inf" if number > 0 else "-inf"
        return format(number, spec or ".4g")
    try:
        if pd.isna(value):
            return MISSING_TEXT
    except (TypeError, ValueError):
        pass
    return str(value)


@dataclass(frozen=True)
class Paragraph:
    """A paragraph of plain text (no markup; renderers escape and wrap it)."""

    text: str

    def __post_init__(self) -> None:
        if not isinstance(self.text, str):
            raise TypeError(f"Paragraph text must be a str, got {type(self.text).__name__}")


@dataclass(frozen=True)
class BulletList:
    """An unordered list of plain-text items."""

    items: tuple[str, ...]

    def __post_init__(self) -> None:
        items = tuple(self.items)
        bad = [type(item).__name__ for item in items if not isinstance(item, str)]
        if bad:
            raise TypeError(f"BulletList items must be str, got {', '.join(bad)}")
        object.__setattr__(self, "items", items)


@dataclass(frozen=True)
class Callout:
    """A highlighted statement: the decision sentence, a caution, or a note.

    Parameters
    ----------
    text : str
        The statement.
    level : {"caution", "decision", "note"}
        What kind of statement it is; renderers mark each level differently in a way that
        survives grayscale printing (line style and weight, not colour alone).
    """

    text: str
    level: str = "caution"

    def __post_init__(self) -> None:
        if not isinstance(self.text, str):
            raise TypeError(f"Callout text must be a str, got {type(self.text).__name__}")
        if self.level not in CALLOUT_LEVELS:
            raise ValueError(
                f"Callout level {self.level!r} is not one of {', '.join(CALLOUT_LEVELS)}"
            )

    @property
    def label(self) -> str:
        """Word printed in front of the text ("Decision", "Caution", "Note")."""
        return CALLOUT_LEVELS[self.level]


@dataclass(frozen=True, eq=False)
class Table:
    """A table from a DataFrame, with a caption and optional per-column number formats.

    Parameters
    ----------
    data : pandas.DataFrame
        The rows to show. Column labels are shown as they are (converted to str); the index is
        not shown unless ``index=True``.
    caption : str
        Caption; renderers number tables ("Table 3. ...").
    formats : mapping of column label to format spec, optional
        Format spec per column (``{"nitrate_mg_L": ".2f", "rate": ",.0f"}``); other numeric
        columns use :func:`format_value`'s default.
    note : str, optional
        A line under the table (sources, abbreviations).
    index : bool
        Show the index as the first column.
    """

    data: pd.DataFrame
    caption: str
    formats: Mapping[Any, str] | None = None
    note: str = ""
    index: bool = False

    def __post_init__(self) -> None:
        if not isinstance(self.data, pd.DataFrame):
            raise TypeError(
                f"Table data must be a pandas DataFrame, got {type(self.data).__name__}"
            )
        unknown = [c for c in (self.formats or {}) if c not in self.data.columns]
        if unknown:
            raise ValueError(f"Table formats name columns that are not in the table: {unknown}")

    @property
    def frame(self) -> pd.DataFrame:
        """The data with the index turned into a first column when ``index=True``."""
        if not self.index:
            return self.data
        names = ["" if name is None else name for name in self.data.index.names]
        return self.data.reset_index(names=names)

    def header_text(self) -> list[str]:
        """Column labels as text."""
        return [str(column) for column in self.frame.columns]

    def cell_text(self) -> list[list[str]]:
        """All cells as text, row by row, with each column's format applied."""
        frame = self.frame
        formats = dict(self.formats or {})
        columns = []
        for position, column in enumerate(frame.columns):
            spec = formats.get(column)
            values = frame.iloc[:, position].tolist()
            columns.append([format_value(value, spec) for value in values])
        return [list(row) for row in zip(*columns, strict=True)] if columns else []

    def numeric_columns(self) -> list[bool]:
        """For each shown column, whether it holds numbers (renderers right-align those)."""
        frame = self.frame
        return [
            bool(pd.api.types.is_numeric_dtype(frame.iloc[:, i]))
            and not pd.api.types.is_bool_dtype(frame.iloc[:, i])
            for i in range(frame.shape[1])
        ]


@dataclass(frozen=True, eq=False)
class Figure:
    """A chart: a matplotlib Figure, or ready PNG bytes, optionally with SVG text.

    Parameters
    ----------
    caption : str
        Caption; renderers number figures ("Figure 2. ...").
    alt : str
        Text alternative describing what the chart shows (for screen readers and for a
        renderer that cannot draw the image). Defaults to the caption.
    figure : matplotlib.figure.Figure, optional
        A figure to draw; it is rendered to PNG on demand.
    png : bytes, optional
        A ready PNG image.
    svg : str, optional
        The same chart as SVG text; the HTML renderer prefers it (embedded as an image, so
        any script inside it cannot run).
    """

    caption: str
    alt: str = ""
    figure: Any = None
    png: bytes | None = None
    svg: str | None = None

    def __post_init__(self) -> None:
        if self.figure is None and self.png is None and self.svg is None:
            raise ValueError(f"Figure {self.caption!r} needs a matplotlib figure, PNG or SVG")
        if self.png is not None and not bytes(self.png[:8]) == b"\x89PNG\r\n\x1a\n":
            raise ValueError(f"Figure {self.caption!r}: png does not start with the PNG signature")
        if self.figure is not None and not hasattr(self.figure, "savefig"):
            raise TypeError(
                f"Figure {self.caption!r}: figure must be a matplotlib Figure, "
                f"got {type(self.figure).__name__}"
            )
        if not self.alt:
            object.__setattr__(self, "alt", self.caption)

    def png_bytes(self, dpi: float = 150.0) -> bytes | None:
        """PNG image of the chart, or ``None`` when only SVG was given.

        A matplotlib figure is rendered without the software-version stamp, so the same
        figure gives the same bytes.
        """
        if self.png is not None:
            return bytes(self.png)
        if self.figure is None:
            return None
        import io

        buffer = io.BytesIO()
        self.figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
        return buffer.getvalue()


@dataclass(frozen=True)
class KeyValues:
    """A list of labelled values (inputs, settings, results), with an optional caption."""

    items: tuple[tuple[str, Any], ...]
    caption: str = ""

    def __post_init__(self) -> None:
        items = tuple(tuple(item) for item in self.items)
        for item in items:
            if len(item) != 2 or not isinstance(item[0], str):
                raise TypeError(f"KeyValues items must be (label, value) pairs, got {item!r}")
        object.__setattr__(self, "items", items)

    def text_items(self) -> list[tuple[str, str]]:
        """Labels and values as text."""
        return [(label, format_value(value)) for label, value in self.items]


Block = Paragraph | BulletList | Callout | Table | Figure | KeyValues
_BLOCK_TYPES = (Paragraph, BulletList, Callout, Table, Figure, KeyValues)


@dataclass(frozen=True)
class Section:
    """A headed part of the report.

    Parameters
    ----------
    heading : str
        Heading text.
    blocks : sequence of blocks
        Content in reading order.
    key : str
        Stable identifier (lower case letters, digits, ``-`` and ``_``, starting with a
        letter): the HTML anchor, and what tests and links refer to.
    """

    heading: str
    blocks: tuple[Block, ...]
    key: str

    def __post_init__(self) -> None:
        if not isinstance(self.key, str) or not _KEY_PATTERN.match(self.key):
            raise ValueError(
                f"Section key {self.key!r} must be lower-case letters, digits, '-' or '_', "
                "starting with a letter"
            )
        blocks = tuple(self.blocks)
        for block in blocks:
            if not isinstance(block, _BLOCK_TYPES):
                raise TypeError(
                    f"Section {self.key!r}: {type(block).__name__} is not a document block"
                )
        object.__setattr__(self, "blocks", blocks)


@dataclass(frozen=True)
class Document:
    """A whole report.

    Parameters
    ----------
    title : str
    subtitle : str
        Second line of the title block (well name, project), may be empty.
    created : str
        Creation stamp as text, supplied by the caller (never read from the clock here, so
        the same inputs give the same report).
    sections : sequence of Section
        Sections in order; their keys must be unique.
    """

    title: str
    subtitle: str
    created: str
    sections: tuple[Section, ...] = field(default_factory=tuple)

    def __post_init__(self) -> None:
        for name in ("title", "subtitle", "created"):
            if not isinstance(getattr(self, name), str):
                raise TypeError(f"Document {name} must be a str")
        sections = tuple(self.sections)
        seen: set[str] = set()
        for section in sections:
            if not isinstance(section, Section):
                raise TypeError(f"Document sections must be Section, got {type(section).__name__}")
            if section.key in seen:
                raise ValueError(f"Section key {section.key!r} is used twice")
            seen.add(section.key)
        object.__setattr__(self, "sections", sections)

    def section(self, key: str) -> Section:
        """Return the section with this key (``KeyError`` if there is none)."""
        for section in self.sections:
            if section.key == key:
                return section
        raise KeyError(key)

    def numbered(self) -> list[tuple[Section, Block, int]]:
        """Every table and figure with its number (tables and figures counted separately)."""
        counters = {Table: 0, Figure: 0}
        numbered = []
        for section in self.sections:
            for block in section.blocks:
                kind = type(block)
                if kind in counters:
                    counters[kind] += 1
                    numbered.append((section, block, counters[kind]))
        return numbered
