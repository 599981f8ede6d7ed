"""Tests of blendq.inputs.tables: cells, header units, delimiters, row numbers, encodings."""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd
import pytest

from blendq.errors import InputError
from blendq.inputs.tables import (
    SPECS,
    parse_number,
    parse_time,
    read_table,
    split_unit_basis,
)

FT = 0.3048  # m, exact (NIST SP 811 appendix B)
GPM = 231 * 0.0254**3 * 1440  # m^3/d per gpm; US gallon = 231 in^3 exactly (NIST SP 811)


def _write(tmp_path: Path, name: str, data: bytes | str) -> Path:
    path = tmp_path / name
    if isinstance(data, str):
        data = data.encode("utf-8")
    path.write_bytes(data)
    return path


@pytest.mark.parametrize(("text", "comma", "expected"), [
    ("12.5", False, 12.5), ("-3", False, -3.0), (".5", False, 0.5), ("1e3", False, 1000.0),
    ("12,5", True, 12.5), ("-0,25e-2", True, -0.0025), ("12.5", True, 12.5),
])
def test_parse_number(text, comma, expected):
    assert parse_number(text, comma) == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(("text", "comma", "fragment"), [
    ("12,5", False, "is not a number"), ("1_000", False, "is not a number"),
    ("nan", False, "not a finite number"), ("-inf", False, "not a finite number"),
    ("1,500.0", True, "is not a number"), ("5 ft", False, "is not a number"),
])
def test_parse_number_rejects(text, comma, fragment):
    with pytest.raises(InputError, match=fragment):
        parse_number(text, comma)


def test_parse_time_iso_and_offsets():
    assert parse_time("2025-04-08") == pd.Timestamp("2025-04-08")
    assert parse_time("2025-04-08T09:55") == pd.Timestamp("2025-04-08 09:55")
    # an offset is converted to UTC: 09:55-07:00 is 16:55 UTC
    assert parse_time("2025-04-08 09:55-07:00") == pd.Timestamp("2025-04-08 16:55")
    assert parse_time("2025-04-08T16:55Z") == pd.Timestamp("2025-04-08 16:55")
    with pytest.raises(InputError, match="ISO 8601"):
        parse_time("8 April 2025")


def test_split_unit_basis():
    assert split_unit_basis("mg/L") == (None, "mg/L", None)
    assert split_unit_basis("mg/L as N") == (None, "mg/L", "N")
    assert split_unit_basis("10 mg/L as NO3", with_number=True) == (10.0, "mg/L", "NO3")
    assert split_unit_basis("0.5ug/L", with_number=True) == (0.5, "ug/L", None)
    assert split_unit_basis("mg/L", with_number=True) == (None, "mg/L", None)


def _rows(table):
    return [(row, {c: get(c) for c in table.columns}) for row, get in table.records()]


def test_bom_crlf_semicolon_and_blank_lines(tmp_path):
    text = "\ufeff\r\nstep;rate [m3/h]\r\n\r\nA;12,5\r\n;\r\nB;7\r\n"
    table = read_table(_write(tmp_path, "s.csv", text), "s.csv", "steps")
    rows = _rows(table)
    # header on line 2; "A" is two lines below it (blank line counted), "B" four lines below
    assert [r for r, _ in rows] == [2, 4]
    assert rows[0][1]["step"] == "A"
    assert rows[0][1]["rate"] == pytest.approx(12.5 * 24, rel=1e-12)


def test_tab_delimiter_quotes_and_short_rows(tmp_path):
    text = 'log\tstep\tdepth [ft]\tupward_flow [gpm]\n"amb, run 1"\t\t100\t-3\nx\n'
    path = _write(tmp_path, "f.csv", text)
    table = read_table(path, "f.csv", "flowlogs")
    (row, get), (short_row, _) = table.records()
    assert (row, short_row) == (1, 2)
    assert get("log") == "amb, run 1" and get("step") is None
    assert get("depth") == pytest.approx(100 * FT, rel=1e-12)
    assert get("upward_flow") == pytest.approx(-3 * GPM, rel=1e-12)
    # a short row reads missing cells as empty; a required one then fails with its row
    with pytest.raises(InputError) as info:
        table._value(2, "depth")
    assert (info.value.file, info.value.row, info.value.field) == ("f.csv", 2, "depth")


def test_temperature_header_units_are_affine(tmp_path):
    text = "step,temperature [degF],ph [-],turbidity [FNU]\n1,50,7.1,0.4\n"
    table = read_table(_write(tmp_path, "x.csv", text), "x.csv", "field")
    (_, row), = _rows(table)
    assert row["temperature"] == pytest.approx(10.0, rel=1e-12)  # (50 - 32) x 5/9
    assert row["ph"] == 7.1 and row["turbidity"] == 0.4


def test_unknown_columns_are_ignored_and_names_normalised(tmp_path):
    text = "Step,Rate [gpm],Pumping Level [ft],Operator\n1,100,50,someone\n"
    table = read_table(_write(tmp_path, "s.csv", text), "s.csv", "steps")
    assert set(table.columns) == {"step", "rate", "pumping_level"}


@pytest.mark.parametrize(("text", "row", "field", "fragment"), [
    ("", None, None, "is empty"),
    ("step,rate [gpm],duration\n1,2,3\n", 0, "duration", "needs its unit"),
    ("step,rate [gpm],start [UTC]\n1,2,2025-01-01\n", 0, "start", "takes no unit"),
    ("step,rate [acre_foot/day]\n1,2\n", None, None, None),
    ("step,rate [parsec]\n1,2\n", 0, "rate", "is not a rate unit"),
])
def test_header_problems(tmp_path, text, row, field, fragment):
    path = _write(tmp_path, "s.csv", text)
    if fragment is None:  # an odd but valid rate unit reads fine (pint knows it)
        table = read_table(path, "s.csv", "steps")
        assert _rows(table)[0][1]["rate"] > 0
        return
    with pytest.raises(InputError, match=fragment) as info:
        read_table(path, "s.csv", "steps")
    assert (info.value.row, info.value.field) == (row, field)


def test_detection_limit_header_unit_is_refused(tmp_path):
    text = "sample_id,step,analyte,value,unit,detection_limit [mg/L]\na,1,arsenic,1,ug/L,0.5\n"
    with pytest.raises(InputError, match="in the unit of its row"):
        read_table(_write(tmp_path, "l.csv", text), "l.csv", "samples")


def test_xlsx_rows_and_numbers(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["time", "level [m]"])
    sheet.append([])
    sheet.append([pd.Timestamp("2025-04-08 07:50").to_pydatetime(), 29.5])
    book.save(tmp_path / "levels.xlsx")
    table = read_table(tmp_path / "levels.xlsx", "levels.xlsx", "levels")
    (row, values), = _rows(table)
    assert row == 3  # the spreadsheet's own row number (header on row 1, a blank row 2)
    assert values == {"time": pd.Timestamp("2025-04-08 07:50"), "level": 29.5}


def test_number_in_reads_nondetect_text(tmp_path):
    text = "sample_id,step,analyte,value,unit\na,1,arsenic,<0.5,ug/L\nb,1,arsenic,ND,ug/L\n"
    table = read_table(_write(tmp_path, "l.csv", text), "l.csv", "samples")
    assert table.number_in(1, "value") == 0.5
    assert math.isnan(table.number_in(2, "value"))


def test_specs_cover_project_tables():
    from blendq.inputs.project import TABLE_COLUMNS

    for name, columns in SPECS.items():
        if name == "pump_curve":  # read by blendq.inputs.pump_file, not a [tables] table
            continue
        derived = {"end", "reported_value", "reported_unit", "reported_basis", "nondetect",
                   "source_row", "rate_from", "volume_since_start"}
        assert set(TABLE_COLUMNS[name]) - derived <= set(columns) | derived


# ----------------------------------------------------------------------------- .xlsx worksheets
def _book(tmp_path: Path, sheets: dict[str, list[list]], name: str = "lab.xlsx") -> Path:
    """A workbook written with openpyxl, one worksheet per entry, in order."""
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    book.remove(book.active)
    for title, rows in sheets.items():
        sheet = book.create_sheet(title)
        for row in rows:
            sheet.append(row)
    book.save(tmp_path / name)
    return tmp_path / name


LAB_HEADER = ["sample_id", "step", "analyte", "value", "unit"]
LAB_ROWS = [["a", "S1", "arsenic", 6.1, "ug/L"], ["b", "S2", "arsenic", "six", "ug/L"]]
COVER = [["Laboratory report (invented)"], [], ["Client", "Town of Quillmarsh (invented)"]]


def test_xlsx_bad_cell_is_named_by_its_spreadsheet_row(tmp_path):
    # header on sheet row 1, rows 2 and 3: the bad value is on row 3 as the spreadsheet shows it
    path = _book(tmp_path, {"Results": [LAB_HEADER, *LAB_ROWS]})
    table = read_table(path, "lab.xlsx", "samples")
    with pytest.raises(InputError) as info:
        table.number_in(3, "value")
    assert (info.value.row, info.value.field) == (3, "value")
    assert str(info.value).startswith("lab.xlsx row 3, column value:")
    # a header error names the header's sheet row (row 1 here, row 2 below a title row)
    path = _book(tmp_path, {"S": [["step", "rate [furlongs]"], ["S1", 3]]}, "steps.xlsx")
    with pytest.raises(InputError) as info:
        read_table(path, "steps.xlsx", "steps")
    assert (info.value.row, info.value.field) == (1, "rate")
    path = _book(tmp_path, {"S": [[], ["step", "rate [gpm]"], ["S1", "x"]]}, "steps2.xlsx")
    table = read_table(path, "steps2.xlsx", "steps")
    with pytest.raises(InputError) as info:
        list(get("rate") for _, get in table.records())
    assert info.value.row == 3


def test_xlsx_named_worksheet(tmp_path):
    path = _book(tmp_path, {"Cover": COVER, "Results": [LAB_HEADER, *LAB_ROWS[:1]]})
    table = read_table(path, "lab.xlsx (sheet Results)", "samples", sheet="Results")
    (row, values), = [(r, {c: get(c) for c in ("sample_id", "value")})
                      for r, get in table.records()]
    assert (row, values) == (2, {"sample_id": "a", "value": "6.1"})


def test_xlsx_cover_sheet_first_lists_the_worksheets(tmp_path):
    path = _book(tmp_path, {"Cover": COVER, "Notes": [["free text"]],
                            "Results": [LAB_HEADER, *LAB_ROWS]})
    with pytest.raises(InputError) as info:
        read_table(path, "lab.xlsx", "samples")
    text = str(info.value)
    assert 'worksheet "Cover" was read' in text
    assert '"Cover", "Notes", "Results"' in text
    assert '"Results" has the columns of this table' in text
    assert 'samples = { file = "lab.xlsx", sheet = "Results" }' in text
    assert "\n" not in text
    # a named worksheet that is not the table gets the same help
    with pytest.raises(InputError, match='worksheet "Notes" was read.*"Results" has the'):
        read_table(path, "lab.xlsx (sheet Notes)", "samples", sheet="Notes")
    # an empty first worksheet too
    path = _book(tmp_path, {"Blank": [], "Results": [LAB_HEADER, *LAB_ROWS]}, "lab2.xlsx")
    with pytest.raises(InputError, match='is empty.*"Results" has the columns'):
        read_table(path, "lab2.xlsx", "samples")


def test_xlsx_unknown_worksheet_names_the_worksheets(tmp_path):
    path = _book(tmp_path, {"Cover": COVER, "Results": [LAB_HEADER, *LAB_ROWS]})
    with pytest.raises(InputError, match='has no worksheet "results" \\(its worksheets: '
                                         '"Cover", "Results"\\)'):
        read_table(path, "lab.xlsx", "samples", sheet="results")
