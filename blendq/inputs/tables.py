"""Read one input table (CSV or .xlsx) into checked cells, with units taken from the header.

A header cell names a column and, in brackets, its unit: ``rate [gpm]``, ``depth [m]``. Rows of
a CSV file are numbered from the header: the header is row 0 and the first line below it is row
1 (blank lines count, so row numbers match the line below the header in any editor). Rows of an
.xlsx worksheet keep the spreadsheet's own numbers (header on row 1, first data row 2), as the
spreadsheet program shows them; a table may name its worksheet, else the first one is read. Blank lines are skipped,
a UTF-8 byte-order mark is ignored, and the delimiter (comma, semicolon or tab) is taken from
the header line; in a semicolon file a decimal comma (``12,5``) is read as a decimal point.
Columns the table does not know are ignored. Files are opened for reading only.

Size limits (stated in ``docs/input-files.md``): :data:`MAX_FILE_BYTES` bytes in a file,
:data:`MAX_ROWS` data rows, :data:`MAX_CELL`
characters in a cell, :data:`MAX_HEADER_CELL` in a header cell and :data:`MAX_UNIT` in a unit.
A larger input is refused with one located line before any slow parsing starts.
"""

from __future__ import annotations

import contextlib
import csv
import gc
import io
import itertools
import math
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from blendq.errors import InputError
from blendq.units import parse_unit, to_base

#: most data rows (non-blank lines below the header) a table may hold
MAX_ROWS = 1_000_000
#: most characters in one cell of a data row
MAX_CELL = 1_000
#: most characters in one header cell ("depth [ft]")
MAX_HEADER_CELL = 200
#: most characters in a unit (header brackets or a unit column): units are short words
MAX_UNIT = 40
#: largest table file [bytes] (1,000,000 rows of a wide lab export fit in it)
MAX_FILE_BYTES = 500_000_000

#: kinds of cell that carry a unit in the header (a kind of :data:`blendq.units.BASE_UNITS`)
UNIT_KINDS = ("rate", "length", "time", "temperature", "specific_conductance", "concentration")

# table -> column -> (kind, column required, cell required). Kinds: a unit kind; "text";
# "date" (ISO 8601); "flag" (true/false); "number" (plain, unit "-" or none); "turbidity"
# (plain, unit FNU or NTU or none); "raw" (text read by the caller, in the row's unit);
# "result" (like "raw", and the header may give a default unit)
SPECS: dict[str, dict[str, tuple[str, bool, bool]]] = {
    "steps": {
        "step": ("text", True, True), "rate": ("rate", True, True),
        "start": ("date", False, False), "end": ("date", False, False),
        "duration": ("time", False, False), "pumping_level": ("length", False, False),
        "recovered_before": ("flag", False, False),
    },
    "samples": {
        "sample_id": ("text", True, True), "step": ("text", True, True),
        "analyte": ("text", True, True), "value": ("result", True, False),
        "unit": ("text", False, False), "basis": ("text", False, False),
        "nondetect": ("flag", False, False), "detection_limit": ("raw", False, False),
        "uncertainty": ("raw", False, False), "qualifier": ("text", False, False),
        "sampled_at": ("date", False, False), "analyzed_at": ("date", False, False),
        "duplicate_of": ("text", False, False), "depth": ("length", False, False),
        "preservation": ("text", False, False), "well": ("text", False, False),
    },
    "flowlogs": {
        "log": ("text", True, True), "step": ("text", False, False),
        "rate": ("rate", False, False), "depth": ("length", True, True),
        "upward_flow": ("rate", True, True),
    },
    "levels": {"time": ("date", True, True), "level": ("length", True, True)},
    # the pump's head-capacity curve ([pump] curve); efficiency in percent, as on makers' sheets
    "pump_curve": {
        "rate": ("rate", True, True), "head": ("length", True, True),
        "efficiency": ("number", False, False),
    },
    "field": {
        "step": ("text", True, True), "time": ("date", False, False),
        "temperature": ("temperature", False, False), "ph": ("number", False, False),
        "specific_conductance": ("specific_conductance", False, False),
        "dissolved_oxygen": ("concentration", False, False),
        "turbidity": ("turbidity", False, False),
    },
    # routine monitoring samples over the years (blendq.inputs.monitoring)
    "history": {
        "sampled_at": ("date", True, True), "sample_point": ("text", False, False),
        "analyte": ("text", True, True), "value": ("result", True, False),
        "unit": ("text", False, False), "basis": ("text", False, False),
        "nondetect": ("flag", False, False), "detection_limit": ("raw", False, False),
        "uncertainty": ("raw", False, False), "qualifier": ("text", False, False),
        "rate": ("rate", False, False), "well": ("text", False, False),
    },
    # pump-rate log: a rate from each time on, or the pump switched on (nominal rate) or off
    "pumplog": {
        "time": ("date", True, True), "rate": ("rate", False, False),
        "pump": ("text", False, False),
    },
}

_NUMBER = re.compile(r"^[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?$")
_LEADING_NUMBER = re.compile(r"^([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*)$")
_HEADER = re.compile(r"^(.*?)\s*\[(.*)\]\s*$")
_AS_BASIS = re.compile(r"^(.*?)\s+as\s+(\S+)$", re.IGNORECASE)
_FLAGS = {"true": True, "yes": True, "y": True, "1": True, "t": True, "<": True, "nd": True,
          "false": False, "no": False, "n": False, "0": False, "f": False}
# "1.250" in a decimal-comma file may be 1250 written with a thousands point: refused
_DOT_GROUPS = re.compile(r"^[-+]?[1-9]\d{0,2}(?:\.\d{3})+$")
# digits with "," or "." between groups of three, e.g. "1,200", "1.200,5", "1,200.5"
_GROUPED = re.compile(r"^[-+]?\d{1,3}(?:[.,]\d{3})+(?:[.,]\d+)?$")
# characters that end a line for str.splitlines() or a terminal, and other C0/C1 controls
_CONTROL = re.compile("[\x00-\x08\x0a-\x1f\x7f-\x9f\u2028\u2029]")
_NOT_FINITE = {"nan", "inf", "+inf", "-inf", "infinity", "-infinity", "+infinity"}
_NO_NUMBER = {"", "nd", "n.d.", "<dl", "<rl", "<mdl", "bdl"}


@contextlib.contextmanager
def no_collection() -> Iterator[None]:
    """Hold off Python's cyclic garbage collector while a long table is read or reviewed: the
    rows make millions of small objects and no reference cycles, and a collection pass every
    few thousand of them would take about half the time. Restored on leaving, whatever
    happens (nested use keeps it off until the outermost one leaves)."""
    was_on = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_on:
            gc.enable()


def one_line(message: str) -> str:
    """``message`` with line breaks and other control characters escaped (``\\n``,
    ``\\x1e``), so that an error prints as one line whatever a cell held."""
    return _CONTROL.sub(lambda m: repr(m.group())[1:-1], message)


def located(err: InputError, file: str | None, row: int | None, field: str | None,
            text: str | None = None) -> InputError:
    """``err`` with file, row and field filled in, and the received text if it is not quoted."""
    message = err.message
    if text is not None and str(text) not in message:
        message = f'received "{text}": {message}'
    return InputError(message, file=err.file or file, row=err.row if err.row is not None else row,
                      field=err.field or field)


def split_unit_basis(text: str, with_number: bool = False):
    """Split ``"10 mg/L as N"`` into (10.0, "mg/L", "N"); number and basis may be absent.

    Returns (number or None, unit text, basis text or None). The number is read only when
    ``with_number`` is true.
    """
    text, number = str(text).strip(), None
    if with_number:
        m = _LEADING_NUMBER.match(text)
        number, text = (float(m.group(1)), m.group(2).strip()) if m else (None, text)
    m = _AS_BASIS.match(text)
    return (number, m.group(1).strip(), m.group(2)) if m else (number, text, None)


def parse_number(text: str, decimal_comma: bool = False) -> float:
    """A finite number from a cell; raises :class:`InputError` (without location) otherwise."""
    cell = text.strip()
    if decimal_comma and re.match(r"^[-+]?\d*,\d+(?:[eE][-+]?\d+)?$", cell):
        cell = cell.replace(",", ".")
    elif decimal_comma and _DOT_GROUPS.match(cell):
        raise InputError(f'"{text}" is ambiguous in a file with decimal commas (a thousands '
                         'separator or a decimal point?); write it without the point, or with '
                         'a decimal comma')
    if cell.lower() in _NOT_FINITE:
        raise InputError(f'"{text}" is not a finite number')
    if not _NUMBER.match(cell):
        if _GROUPED.match(cell):
            raise InputError(f'"{text}" is not a number; write it without thousands '
                             'separators (decimal point in a comma- or tab-delimited file, '
                             'decimal comma in a semicolon-delimited one)')
        raise InputError(f'"{text}" is not a number')
    number = float(cell)
    if not math.isfinite(number):
        raise InputError(f'"{text}" is too large (not a finite number)')
    return number


_EARLIEST, _LATEST = pd.Timestamp.min, pd.Timestamp.max


def parse_time(text: str) -> pd.Timestamp:
    """An ISO 8601 date or date-time; a time with an offset is converted to UTC (naive)."""
    cell = text.strip()
    try:
        stamp = datetime.fromisoformat(cell[:-1] + "+00:00" if cell.endswith("Z") else cell)
    except ValueError:
        raise InputError(f'"{text}" is not an ISO 8601 date or time (expected e.g. '
                         '"2025-05-13" or "2025-05-13 14:30")') from None
    if stamp.tzinfo is not None:
        stamp = stamp.astimezone(timezone.utc).replace(tzinfo=None)
    stamp = pd.Timestamp(stamp)
    if not _EARLIEST <= stamp <= _LATEST:  # tables hold nanosecond times
        raise InputError(f'"{text}" is outside the dates blendq can hold (years 1678 to 2261)')
    return stamp


@dataclass
class Table:
    """The cells of one table, its header units and the parsing rules of its columns.

    Attributes
    ----------
    label : str
        File name as the user wrote it (used in messages).
    columns : dict
        Column name -> (cell index, unit text or None).
    rows : list
        (row number, cells) of every non-blank data row.
    spec : dict
        Column rules from :data:`SPECS`.
    decimal_comma : bool
        Read ``12,5`` as 12.5 (semicolon-delimited files).
    """

    label: str
    columns: dict[str, tuple[int, str | None]]
    rows: list[tuple[int, list[str]]]
    spec: dict[str, tuple[str, bool, bool]]
    decimal_comma: bool = False

    def error(self, row: int | None, column: str | None, message: str) -> InputError:
        return InputError(message, file=self.label, row=row, field=column)

    def unit(self, column: str) -> str | None:
        return self.columns[column][1] if column in self.columns else None

    def raw(self, row: int, column: str) -> str:
        """Stripped text of a cell ("" when the column or the cell is absent)."""
        cells = self.column(column)
        return cells[self._position[row]] if cells else ""

    def column(self, column: str) -> list[str]:
        """Stripped text of ``column`` in every row, in row order ("" where a row is short);
        [] when the table has no such column. Built once per column, for the rows kept."""
        if column not in self._columns:
            index = self._index.get(column)
            if self._transposed is None:
                self._transposed = transpose([cells for _, cells in self.rows])
            self._columns[column] = [] if index is None else [""] * len(self.rows) \
                if index >= len(self._transposed) else \
                list(map(str.strip, self._transposed[index]))
        return self._columns[column]

    def number_text(self, row: int, column: str, text: str) -> float:
        try:
            return parse_number(text, self.decimal_comma)
        except InputError as err:
            raise located(err, self.label, row, column) from None

    def number_in(self, row: int, column: str, cell: str | None = None) -> float:
        """Number of a "raw" cell, NaN when empty or "ND"; a leading "<" is dropped. ``cell``:
        the cell's stripped text when the caller has it (errors still name ``row``)."""
        cell = self.raw(row, column) if cell is None else cell
        key = ("<number>", column, cell)
        if key in self._parsed:  # each text of a column is read once
            return self._parsed[key]
        text = cell[1:].strip() if cell.startswith("<") else cell
        number = math.nan if text.lower() in _NO_NUMBER else self.number_text(row, column, text)
        self._parsed[key] = number
        return number

    def share_or_number(self, row: int, column: str, of: float) -> float:
        """A cell written as a number or as a percentage of ``of`` ("5%"), never negative
        (a lab uncertainty given either way); NaN when empty."""
        text = self.raw(row, column)
        if text.endswith("%"):
            value = self.number_text(row, column, text[:-1]) / 100.0 * of
        else:
            value = self.number_in(row, column)
        if value < 0:
            raise self.error(row, column, f'"{text}" is negative')
        return value

    def keep(self, rows: set[int]) -> None:
        """Keep only the data rows numbered in ``rows`` (rows of other wells are dropped)."""
        self.rows = [(row, cells) for row, cells in self.rows if row in rows]
        self._position = {row: n for n, (row, _) in enumerate(self.rows)}
        self._columns = {}
        self._transposed = None

    def records(self) -> Iterator[tuple[int, Callable[[str], object]]]:
        """Yield (row, get) where ``get(column)`` is the parsed cell or None when empty."""
        for row, _ in self.rows:
            yield row, (lambda column, row=row: self._value(row, column))

    def value(self, row: int, column: str, text: str | None = None):
        """The parsed cell of ``column`` in ``row`` (None when empty), as :meth:`records`
        gives it. ``text``: the cell's stripped text when the caller has it."""
        return self._value(row, column, text)

    def _value(self, row: int, column: str, text: str | None = None):
        text = self.raw(row, column) if text is None else text
        key = (column, text)
        if key in self._parsed:  # a long table repeats its cells: each text is parsed once
            return self._parsed[key]
        value = self._parsed[key] = self._parse(row, column, text)
        return value

    def _parse(self, row: int, column: str, text: str):
        """The value of ``text`` in ``column`` (errors name ``row``); a function of the column
        and the text alone, so that :meth:`_value` may keep it."""
        kind, _, needed = self.spec[column]
        if not text:
            if needed:
                raise self.error(row, column, "is empty (a value is required)")
            return None
        if kind in ("text", "raw", "result"):
            return text
        if kind == "flag":
            if text.lower() not in _FLAGS:
                raise self.error(row, column, f'"{text}" is not true or false')
            return _FLAGS[text.lower()]
        if kind == "date":
            try:
                return parse_time(text)
            except InputError as err:
                raise located(err, self.label, row, column) from None
        try:
            number = parse_number(text, self.decimal_comma)
        except InputError as err:
            lead = _LEADING_NUMBER.match(text)
            unit_in_cell = kind in UNIT_KINDS and lead and lead.group(2)[:1].isalpha()
            hint = f" (the unit goes in the header: {column} [{self.unit(column)}])" \
                if unit_in_cell else ""
            raise self.error(row, column, err.message + hint) from None
        if kind in UNIT_KINDS:
            offset, scale = self._affine[column]
            base = offset + scale * number
            if not math.isfinite(base):
                raise self.error(row, column, f'"{text}" is too large (not a finite number '
                                              f"once converted from {self.unit(column)})")
            return base
        return number

    def __post_init__(self) -> None:
        self._position = {row: n for n, (row, _) in enumerate(self.rows)}
        self._columns: dict[str, list[str]] = {}
        self._transposed: list[tuple[str, ...]] | None = None  # cells by column, not stripped
        self._index = {column: index for column, (index, _) in self.columns.items()}
        self._parsed: dict[tuple, object] = {}
        self._affine = {}
        for column, (_, unit) in self.columns.items():
            kind = self.spec[column][0]
            if kind in UNIT_KINDS:
                zero, one = to_base(0.0, unit, kind), to_base(1.0, unit, kind)
                self._affine[column] = (zero, one - zero)


def _decode(path: Path, label: str) -> str:
    _check_file_size(path, label)
    try:
        data = path.read_bytes()
    except OSError as err:
        raise InputError(f"cannot be read: {err.strerror or err}", file=label) from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise InputError(f"is not UTF-8 text (byte 0x{data[err.start]:02x} at offset "
                         f"{err.start}); save it as CSV UTF-8", file=label) from None


def _check_file_size(path: Path, label: str) -> None:
    """Refuse a file larger than :data:`MAX_FILE_BYTES` before reading it."""
    try:
        size = path.stat().st_size
    except OSError:
        return  # an unreadable file is reported by the read
    if size > MAX_FILE_BYTES:
        raise InputError(f"is {size:,} bytes; the limit for a table file is "
                         f"{MAX_FILE_BYTES:,} bytes", file=label)


def _csv_rows(path: Path, label: str) -> tuple[list[tuple[int, list[str]]], str]:
    """(line number, cells) of every non-blank line, and the delimiter."""
    text = _decode(path, label)
    head = text[:65536].splitlines()[:-1]  # the last line of the slice may be cut short
    first = next((line for line in head if line.strip()), None)
    if first is None:  # no complete non-blank line near the top: look through the whole text
        first = next((line for line in text.splitlines() if line.strip()), "")
    delimiter = max((",", ";", "\t"), key=first.count)
    # strict: an unterminated quote is an error, not a cell that runs to the end of the file
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    rows = []
    try:
        for cells in reader:
            if "".join(cells).strip():  # a line of blank cells is skipped
                rows.append((reader.line_num, cells))
    except csv.Error as err:
        row = reader.line_num - rows[0][0] if rows else 0
        hint = " (a quote that is never closed?)" if "end of data" in str(err) else ""
        raise InputError(f"cannot be read as CSV near line {reader.line_num}: {err}{hint}",
                         file=label, row=row) from None
    return rows, delimiter


def sheet_label(file: str, sheet: str) -> str:
    """How messages name a worksheet of a workbook: ``lab.xlsx (sheet Results)``."""
    return f"{file} (sheet {sheet})"


def _open_book(path: Path, label: str, data_only: bool = True):
    try:
        import openpyxl
    except ModuleNotFoundError:
        raise InputError("reading .xlsx files needs the openpyxl package; install it or save "
                         "the sheet as CSV", file=label) from None
    _check_file_size(path, label)
    try:
        return openpyxl.load_workbook(path, read_only=True, data_only=data_only)
    except Exception as err:  # openpyxl raises several types for a damaged file
        raise InputError(f"cannot be read as an .xlsx workbook: {err}", file=label) from None


def _sheet_names(names: list[str]) -> str:
    return ", ".join(f'"{n}"' for n in names)


def _xlsx_rows(path: Path, label: str, sheet: str | None = None
               ) -> tuple[list[tuple[int, list[str]]], set, list[str]]:
    """(sheet row number, cells as text) of the non-blank rows of worksheet ``sheet`` (the first
    when None), the (sheet row, column index) of formula cells the workbook holds no computed
    value for, and the names of the workbook's worksheets.

    A workbook written by a program that does not calculate (a script, some converters) keeps
    formulas without their results; such a cell would otherwise read as empty.
    """
    book = _open_book(path, label)
    try:
        names = list(book.sheetnames)
        if sheet is not None and sheet not in names:
            raise InputError(f'has no worksheet "{sheet}" (its worksheets: '
                             f"{_sheet_names(names)})", file=label)
        rows, empty = [], set()
        ws = book[sheet] if sheet is not None else book.worksheets[0]
        for number, values in enumerate(ws.iter_rows(values_only=True), 1):
            if number - len(rows) > MAX_ROWS + 1000:  # blank rows count too
                raise InputError(f"has more than {MAX_ROWS:,} rows (the limit)", file=label)
            cells = ["" if v is None else v.isoformat(sep=" ") if isinstance(v, datetime)
                     else str(v) for v in values]
            empty.update((number, i) for i, v in enumerate(values) if v is None)
            if "".join(cells).strip():  # a line of blank cells is skipped
                rows.append((number, cells))
    finally:
        book.close()
    title = sheet if sheet is not None else names[0]
    return rows, _uncached_formulas(path, empty, title) if empty else set(), names


def _uncached_formulas(path: Path, empty: set, sheet: str) -> set:
    """The cells of ``empty`` (sheet row, column index) of worksheet ``sheet`` that hold a
    formula."""
    import openpyxl

    book = openpyxl.load_workbook(path, read_only=True, data_only=False)
    try:
        found = set()
        for number, values in enumerate(book[sheet].iter_rows(values_only=True), 1):
            found.update((number, i) for i, v in enumerate(values)
                         if (number, i) in empty and isinstance(v, str) and v.startswith("="))
        return found
    finally:
        book.close()


#: rows of a worksheet searched for a header when suggesting the sheet that holds a table
_HEADER_SEARCH_ROWS = 20


def _column_name(cell: object) -> str:
    m = _HEADER.match(str(cell).strip())
    return re.sub(r"[\s\-]+", "_", (m.group(1) if m else str(cell)).strip().lower())


def _sheet_hint(path: Path, label: str, names: list[str], read: str, name: str) -> str:
    """Words for a message about a worksheet that is not table ``name``: the workbook's
    worksheets, the ones whose first non-blank row holds the table's required columns, and how
    to name one in ``[tables]``."""
    required = {c for c, (_, needed, _) in SPECS[name].items() if needed}
    fits = []
    book = _open_book(path, label)
    try:
        for title in names:
            if title == read:
                continue
            for number, values in enumerate(book[title].iter_rows(values_only=True), 1):
                if number > _HEADER_SEARCH_ROWS:
                    break
                cells = {_column_name(v) for v in values if v is not None and str(v).strip()}
                if cells:
                    if required <= cells:
                        fits.append(title)
                    break
    finally:
        book.close()
    file = label.rsplit(" (sheet ", 1)[0]
    text = f'; worksheet "{read}" was read; the workbook\'s worksheets: {_sheet_names(names)}'
    if fits:
        text += (f" ({_sheet_names(fits)} {'has' if len(fits) == 1 else 'have'} the columns of "
                 f"this table); name the worksheet in [tables], e.g. {name} = {{ file = "
                 f'"{file}", sheet = "{fits[0]}" }}')
    else:
        text += (f"; name the worksheet that holds the table in [tables], e.g. {name} = "
                 f'{{ file = "{file}", sheet = "..." }}')
    return text


def read_table(path: Path, label: str, name: str, sheet: str | None = None) -> Table:
    """Read table ``name`` ("steps", "samples", ...) from ``path`` and check its header.

    Parameters
    ----------
    path : Path
        CSV (comma, semicolon or tab) or .xlsx file.
    label : str
        File name used in messages (:func:`sheet_label` when a worksheet is named).
    name : str
        Key of :data:`SPECS`.
    sheet : str, optional
        Worksheet of an .xlsx file (default: the first); rows of a worksheet are numbered as
        the spreadsheet shows them.

    Raises
    ------
    InputError
        Unreadable file, no data rows, a missing required column, a duplicate column, a
        missing, unknown or wrong-dimension unit, or a row with more cells than the header.
    """
    spec = SPECS[name]
    formulas: set = set()
    xlsx = path.suffix.lower() == ".xlsx"
    if xlsx:
        (lines, formulas, sheets), delimiter = _xlsx_rows(path, label, sheet), ","
    else:
        lines, delimiter = _csv_rows(path, label)

    def hint() -> str:  # which worksheet holds the table, when one was not
        if not xlsx or len(sheets) < 2:
            return ""
        return _sheet_hint(path, label, sheets, sheet if sheet is not None else sheets[0], name)

    if not lines:
        raise InputError("is empty; the first line must name the columns" + hint(), file=label)
    if len(lines) > MAX_ROWS + 1:
        raise InputError(f"has {len(lines) - 1:,} data rows; the limit is {MAX_ROWS:,}",
                         file=label)
    header_line, header = lines[0]
    top = header_line if xlsx else 0  # the header's row number in messages
    columns: dict[str, tuple[int, str | None]] = {}
    for index, cell in enumerate(header):
        if len(cell) > MAX_HEADER_CELL:
            raise InputError(f'header cell {index + 1} ("{cell[:30]}...") has {len(cell):,} '
                             f"characters; the limit is {MAX_HEADER_CELL}", file=label, row=top)
        m = _HEADER.match(cell.strip())
        column, unit = (m.group(1), m.group(2).strip()) if m else (cell.strip(), None)
        column = re.sub(r"[\s\-]+", "_", column.strip().lower())
        if column not in spec:
            continue  # unknown or blank header cells are ignored
        if column in columns:
            raise InputError(f'column "{cell.strip()}" appears twice', file=label, row=top,
                             field=column)
        if column in spec:
            _check_header_unit(label, column, spec[column][0], unit, top)
            columns[column] = (index, unit or None)
    for column, (_, required, _) in spec.items():
        if required and column not in columns:
            kind = spec[column][0]
            example = f"{column} [{_EXAMPLE[kind]}]" if kind in UNIT_KINDS else column
            found = ", ".join(c.strip() for c in header if c.strip())
            raise InputError(f'required column is missing (expected a header such as '
                             f'"{example}"; found: {found}){hint()}', file=label, row=top,
                             field=column)
    names = {index: column for column, (index, _) in columns.items()}
    columns_seen = _ColumnsSeen([cells for _, cells in lines[1:]],
                                sorted(i for i, c in names.items() if spec[c][0] not in _NOT_NUMERIC))
    widths = [len(cells) for _, cells in lines[1:]]
    usual = max(set(widths), key=widths.count) if widths else len(header)
    by_column = transpose([cells for _, cells in lines[1:]])
    for line, cells in _suspect_rows(lines[1:], by_column, widths, usual, len(header),
                                     columns_seen.numeric, {line for line, _ in formulas},
                                     delimiter):
        row = line if xlsx else line - header_line
        if max(map(len, cells)) > MAX_CELL:
            index = next(i for i, c in enumerate(cells) if len(c) > MAX_CELL)
            raise InputError(f'cell "{cells[index][:30]}..." has {len(cells[index]):,} '
                             f"characters; the limit is {MAX_CELL:,}", file=label, row=row,
                             field=names.get(index, f"#{index + 1}"))
        if delimiter == "," and (len(cells) > len(header) or len(cells) == usual + 1):
            _decimal_comma(label, row, cells, names, spec, len(header), usual)
        elif delimiter == "," and len(cells) > 1:  # a row one cell short, split by "14,6"
            _shifted_row(label, row, cells, names, spec, columns_seen)
        if len(cells) > len(header) and any(c.strip() for c in cells[len(header):]):
            raise InputError(f"has {len(cells)} cells but the header has {len(header)} "
                             "columns", file=label, row=row)
        for index in names:
            if (line, index) in formulas:
                raise InputError("is a formula without a computed value in the workbook (it "
                                 "was saved by a program that does not calculate); open and "
                                 "save it in a spreadsheet program, or save the sheet as CSV",
                                 file=label, row=row, field=names[index])
    rows = [(line if xlsx else line - header_line, cells) for line, cells in lines[1:]]
    if not rows:
        raise InputError("has no data rows (only a header); add rows or remove the table from "
                         "[tables]", file=label)
    table = Table(label, columns, rows, spec, decimal_comma=delimiter == ";")
    table._transposed = by_column
    return table


def transpose(rows: list[list[str]]) -> list[tuple[str, ...]]:
    """The cells of ``rows`` column by column ("" where a row is short)."""
    return list(itertools.zip_longest(*rows, fillvalue=""))


def _suspect_rows(lines: list[tuple[int, list[str]]], by_column: list[tuple[str, ...]],
                  widths: list[int], usual: int, width: int, numeric: list[int],
                  formula_lines: set, delimiter: str) -> list[tuple[int, list[str]]]:
    """The rows, in file order, that the row checks of :func:`read_table` must look at: a cell
    over :data:`MAX_CELL` characters, a width other than the usual one, a formula cell, or (comma
    files) a whole number followed by a cell of digits in a numeric column. Worked out column by
    column, so that a long table's ordinary rows cost no per-row check."""
    suspect = {k for k, n in enumerate(widths) if n != usual or n > width}
    suspect.update(k for k, (line, _) in enumerate(lines) if line in formula_lines)
    for cells in by_column:
        if max(map(len, cells)) > MAX_CELL:
            suspect.update(k for k, cell in enumerate(cells) if len(cell) > MAX_CELL)
    if delimiter == ",":
        everyone = range(len(lines))
        for i in numeric:  # str.isdigit accepts every \d digit (and a few more): a wide net
            if i + 1 < len(by_column):
                this, after = by_column[i], by_column[i + 1]
                digits = map(str.isdigit, map(str.strip, after))
                suspect.update(k for k in itertools.compress(everyone, digits)
                               if this[k].strip().lstrip("+-").isdigit())
    return [lines[k] for k in sorted(suspect)]


_WHOLE = re.compile(r"^[-+]?\d+$")
_DIGITS = re.compile(r"^\d+$")
_NOT_NUMERIC = ("text", "date", "flag")


def _decimal_comma(label: str, row: int, cells: list[str], names: dict, spec: dict,
                   width: int, usual: int) -> None:
    """Refuse a row of a comma-separated file that is wider than the header or than the other
    rows and holds a whole number followed by a cell of digits in a numeric column: a decimal
    comma ("14,6") that split one number into two cells and shifted the rest of the row."""
    for i in range(len(cells) - 1):
        a, b = cells[i].strip(), cells[i + 1].strip()
        if i in names and spec[names[i]][0] not in _NOT_NUMERIC and _WHOLE.match(a) \
                and _DIGITS.match(b):
            others = f"the header has {width}" if len(cells) > width else f"most rows have {usual}"
            raise InputError(f'"{a},{b}" looks like a number written with a decimal comma, which '
                             f"splits the row in a comma-separated file (this row has "
                             f'{len(cells)} cells, {others}); write "{a}.{b}", quote the cell, '
                             "or save the file with semicolons", file=label, row=row,
                             field=names[i])


_DATE_LIKE = re.compile(r"^\d{4}-\d{2}-\d{2}")


def _shape(cell: str) -> str:
    """What a cell holds, roughly: "empty", "number", "date" or "text"."""
    text = cell.strip()
    if not text:
        return "empty"
    if _NUMBER.match(text.lstrip("<").strip()):
        return "number"
    return "date" if _DATE_LIKE.match(text) else "text"


class _ColumnsSeen:
    """What each column holds in the rows of a table (worked out for a column when first
    asked): the shapes of its cells and the sizes of its numbers."""

    def __init__(self, rows: list[list[str]], numeric: list[int]) -> None:
        self.rows = rows
        self.numeric = numeric  # indices of the numeric columns, in order
        self.known: dict[int, tuple[dict[str, int], list[float]]] = {}

    def column(self, index: int) -> tuple[dict[str, int], list[float]]:
        if index not in self.known:
            shapes: dict[str, int] = {}
            sizes = []
            for cells in self.rows:
                cell = cells[index] if index < len(cells) else ""
                shape = _shape(cell)
                shapes[shape] = shapes.get(shape, 0) + 1
                if shape == "number":
                    sizes.append(abs(float(cell.strip().lstrip("<").strip())))
            self.known[index] = (shapes, sorted(sizes))
        return self.known[index]

    def fits(self, index: int, cell: str, own: str, kind: str) -> bool:
        """Whether ``cell`` fits column ``index`` (of kind ``kind``) as its other rows fill it;
        ``own`` is what this row holds there as read (left out of the comparison)."""
        shape = _shape(cell)
        text = cell.strip()
        numeric = kind not in _NOT_NUMERIC
        if numeric and shape in ("date", "text") and text.lower() not in _NO_NUMBER:
            return False
        if kind == "date" and shape not in ("date", "empty"):
            return False
        if kind == "flag" and shape != "empty" and text.lower() not in _FLAGS:
            return False
        shapes, sizes = self.column(index)
        others = dict(shapes)
        others[_shape(own)] = others.get(_shape(own), 0) - 1
        if sum(others.values()) < 3:  # too few other rows to know the column
            return True
        if others.get(shape, 0) <= 0:
            return False
        if not numeric or shape != "number":
            return True
        value = abs(float(text.lstrip("<").strip()))
        rest = list(sizes)
        if _shape(own) == "number":
            rest.remove(abs(float(own.strip().lstrip("<").strip())))
        low, high = (rest[0], rest[-1]) if rest else (0.0, math.inf)
        # an order of magnitude beyond every other row of the column (common practice)
        return low <= 0 or value == 0 or low / 10 <= value <= 10 * high


def _shifted_row(label: str, row: int, cells: list[str], names: dict, spec: dict,
                 seen: _ColumnsSeen) -> None:
    """Refuse a row of a comma-separated file in which a decimal comma ("14,6") split a
    number into two cells while the row was one cell short, so that its length looks right
    (or one short) but every later cell sits one column to the right: the cells after the
    split do not fit their columns as the other rows fill them, and read as one number
    they all do."""
    for i in seen.numeric:
        if i + 1 >= len(cells):
            continue
        a, b = cells[i].strip(), cells[i + 1].strip()
        if not (_WHOLE.match(a) and _DIGITS.match(b)):
            continue
        merged = cells[:i] + [f"{a}.{b}"] + cells[i + 2:]
        misfit = next((j for j in range(i + 1, len(cells)) if j in names
                       and not seen.fits(j, cells[j], cells[j], spec[names[j]][0])), None)
        if misfit is None:
            continue
        if all(seen.fits(j, merged[j], cells[j] if j < len(cells) else "",
                         spec[names[j]][0]) for j in range(i, len(merged)) if j in names):
            raise InputError(f'"{a},{b}" looks like a number written with a decimal comma, '
                             "which shifts the rest of the row one column to the right in a "
                             f'comma-separated file ("{cells[misfit].strip()}" does not fit '
                             f"column {names[misfit]}; read as {a}.{b} the row fits its "
                             f'columns); write "{a}.{b}", quote the cell, or save the file '
                             "with semicolons", file=label, row=row, field=names[i])


_EXAMPLE = {"rate": "gpm", "length": "ft", "time": "min", "temperature": "degC",
            "specific_conductance": "uS/cm", "concentration": "mg/L"}


def _check_header_unit(label: str, column: str, kind: str, unit: str | None,
                       row: int = 0) -> None:
    def fail(message: str) -> InputError:
        return InputError(message, file=label, row=row, field=column)

    if unit and len(unit) > MAX_UNIT:
        raise fail(f'unit "{unit[:20]}..." has {len(unit):,} characters; the limit is {MAX_UNIT}')
    if kind in UNIT_KINDS:
        if not unit:
            raise fail(f'needs its unit in brackets, e.g. "{column} [{_EXAMPLE[kind]}]"')
        try:
            to_base(1.0, unit, kind)
        except InputError as err:
            raise located(err, label, row, column, unit) from None
    elif kind == "result" and unit:  # a default unit for the value column of samples
        try:
            parse_unit(split_unit_basis(unit)[1])
        except InputError as err:
            raise located(err, label, row, column, unit) from None
    elif kind == "number" and unit not in (None, "", "-"):
        raise fail(f'"[{unit}]" is not allowed; {column} has no unit (write "{column}")')
    elif kind == "turbidity" and unit not in (None, "", "FNU", "NTU"):
        raise fail(f'"[{unit}]" is not a turbidity unit (expected FNU or NTU)')
    elif kind == "raw" and unit:
        raise fail(f'"[{unit}]" is not allowed; {column} is in the unit of its row')
    elif kind in ("text", "date", "flag") and unit:
        raise fail(f'"[{unit}]" is not allowed; {column} takes no unit')
