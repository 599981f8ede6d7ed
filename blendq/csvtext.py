"""CSV text blendq writes: a comment block with the cautions, formula-like cells made inert,
RFC 4180 quoting with ``#`` quoted too, CRLF line ends.

At the bottom of the package (beside :mod:`blendq.units`), so that every layer that writes a
table (the lab review's findings, the report, the wellfield) writes it the same way.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Iterable
from typing import Any

import pandas as pd

from blendq import CAUTIONS, __version__

__all__ = ["CSV_CAUTIONS", "csv_comments", "to_csv_safe"]

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")


def _guard_cell(value: Any) -> Any:
    """Prefix ``'`` to text a spreadsheet would run as a formula; leave numbers alone."""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        if not _PLAIN_NUMBER.fullmatch(value):
            return "'" + value
    return value


#: The cautions at the head of every CSV file (planning aid; the regulator's sampling rules;
#: licensed review and local codes), as the command line prints them.
CSV_CAUTIONS = (CAUTIONS[0], CAUTIONS[1], CAUTIONS[3])
#: Characters that make a cell quoted: RFC 4180's delimiter, quote and line ends, and the
#: comment mark, so that a reader skipping ``#`` comments keeps a cell holding one.
_QUOTE_IF = (",", '"', "\r", "\n", "#")


def csv_comments(what: str) -> list[str]:
    """The comment block of a CSV file: what the table is, the blendq version, the cautions.

    Parameters
    ----------
    what : str
        One line saying what the table holds.

    Returns
    -------
    list of str
        Lines without the ``# `` mark (:func:`to_csv_safe` adds it). No date or time, so the
        same inputs and seed give the same bytes.
    """
    return [what, f"written by blendq {__version__}", *CSV_CAUTIONS]


def _csv_field(text: str) -> str:
    """One CSV field, quoted (quotes doubled) when it holds a delimiter, quote, line end or
    ``#``."""
    if any(c in text for c in _QUOTE_IF):
        return '"' + text.replace('"', '""') + '"'
    return text


def to_csv_safe(df: pd.DataFrame, index: bool = False, comments: Iterable[str] = (),
                float_format: str | None = None) -> str:
    """CSV text of a table, with formula-like text cells made inert.

    Parameters
    ----------
    df : pandas.DataFrame
    index : bool
        Write the index as the first column.
    comments : iterable of str
        Lines written first, each after ``# `` (line ends inside a line become spaces); see
        :func:`csv_comments`.
    float_format : str, optional
        Format of floats (as pandas' ``to_csv``); default the shortest round-trip form.

    Returns
    -------
    str
        CSV with CRLF line ends (RFC 4180) after the comment lines. Text cells (and column
        labels) that start with ``=``, ``+``, ``-``, ``@``, tab or carriage return get a
        leading ``'`` unless the whole cell is a plain decimal number such as ``-1.5`` or
        ``+2e-3``. Numeric columns are written as numbers (shortest round-trip form), so
        ``-1.5`` stays a number. A cell holding ``#`` is quoted, so that
        ``pandas.read_csv(path, comment="#")`` (the default C engine, which reads a ``#``
        outside quotes as the start of a comment anywhere in a line) reads it whole.
    """
    guarded = df.copy()
    for position in range(guarded.shape[1]):
        column = guarded.iloc[:, position]
        if not pd.api.types.is_numeric_dtype(column) and not pd.api.types.is_bool_dtype(column):
            guarded.isetitem(position, column.astype(object).map(_guard_cell))
    guarded.columns = [_guard_cell(str(label)) for label in guarded.columns]
    if index:
        guarded.index = guarded.index.map(_guard_cell)
        guarded.index.names = [
            None if name is None else _guard_cell(str(name)) for name in guarded.index.names
        ]
    # CRLF line ends (RFC 4180); they also make the writer quote a cell holding a bare CR,
    # which with LF line ends would be written unquoted and split the row on reading
    text = guarded.to_csv(index=index, lineterminator="\r\n", float_format=float_format)
    # pandas formats the cells; the fields are written again with "#" among the characters
    # that make a field quoted (the csv module has no per-character quoting rule)
    lines = []
    for row in csv.reader(io.StringIO(text, newline="")):
        # a row of one empty field is written "" so that it is not an empty line
        lines.append('""' if row == [""] else ",".join(_csv_field(f) for f in row))
    head = ["# " + " ".join(str(c).splitlines()) for c in comments]
    return "".join(f"{line}\r\n" for line in [*head, *lines])
