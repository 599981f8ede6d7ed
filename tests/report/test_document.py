"""Tests of blendq.report.document: the renderer-neutral report model."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from blendq.report.document import (
    MISSING_TEXT,
    BulletList,
    Callout,
    Document,
    Figure,
    KeyValues,
    Paragraph,
    Section,
    Table,
    format_value,
)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def test_module_does_not_import_matplotlib() -> None:
    # a fresh interpreter, so modules imported by other tests do not mask the import
    code = "import sys, blendq.report.document; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


@pytest.mark.parametrize(
    ("value", "spec", "expected"),
    [
        (3, None, "3"),
        (np.int64(12000), ",d", "12,000"),
        (1.23456, None, "1.235"),
        (1.23456, ".2f", "1.23"),
        (-0.5, ".1f", "-0.5"),
        (np.float32(2.5), None, "2.5"),
        (float("nan"), ".2f", MISSING_TEXT),
        (None, None, MISSING_TEXT),
        (pd.NaT, None, MISSING_TEXT),
        (float("inf"), None, "inf"),
        (True, None, "yes"),
        (np.bool_(False), None, "no"),
        ("<DL", ".2f", "<DL"),
    ],
)
def test_format_value(value: object, spec: str | None, expected: str) -> None:
    assert format_value(value, spec) == expected


def test_table_cells_use_column_formats_and_missing_marker() -> None:
    frame = pd.DataFrame(
        {"rate": [400.0, 1250.0], "nitrate": [5.123, np.nan], "flag": ["<DL", None]},
        index=pd.Index(["step 1", "step 2"], name="step"),
    )
    table = Table(frame, "Steps", formats={"rate": ",.0f", "nitrate": ".2f"}, index=True)
    assert table.header_text() == ["step", "rate", "nitrate", "flag"]
    assert table.cell_text() == [
        ["step 1", "400", "5.12", "<DL"],
        ["step 2", "1,250", MISSING_TEXT, MISSING_TEXT],
    ]
    assert table.numeric_columns() == [False, True, True, False]


def test_table_without_index_hides_it_and_unnamed_index_gets_empty_label() -> None:
    frame = pd.DataFrame({"a": [1, 2]}, index=[10, 20])
    assert Table(frame, "t").cell_text() == [["1"], ["2"]]
    assert Table(frame, "t", index=True).header_text() == ["", "a"]


def test_table_rejects_formats_for_missing_columns_and_non_frames() -> None:
    with pytest.raises(ValueError, match="not in the table"):
        Table(pd.DataFrame({"a": [1]}), "t", formats={"b": ".2f"})
    with pytest.raises(TypeError, match="DataFrame"):
        Table([[1, 2]], "t")  # type: ignore[arg-type]


def test_callout_levels() -> None:
    assert Callout("x", "decision").label == "Decision"
    assert Callout("x").level == "caution"
    with pytest.raises(ValueError, match="not one of"):
        Callout("x", "warning")


def test_figure_needs_an_image_and_defaults_alt_to_caption() -> None:
    with pytest.raises(ValueError, match="needs a matplotlib figure"):
        Figure(caption="empty")
    with pytest.raises(ValueError, match="PNG signature"):
        Figure(caption="bad", png=b"GIF89a")
    figure = Figure(caption="Rate against nitrate", png=PNG_SIGNATURE + b"rest")
    assert figure.alt == "Rate against nitrate"
    assert Figure(caption="c", svg="<svg/>").png_bytes() is None


def test_figure_renders_matplotlib_figure_to_identical_png() -> None:
    from matplotlib.figure import Figure as MplFigure

    chart = MplFigure(figsize=(2, 1.5))
    chart.add_subplot().plot([0, 1], [1, 0])
    block = Figure(caption="c", figure=chart)
    first, second = block.png_bytes(dpi=50), block.png_bytes(dpi=50)
    assert first.startswith(PNG_SIGNATURE)
    assert first == second
    assert b"Software" not in first  # no library-version stamp in the file


def test_section_key_and_block_types_are_checked() -> None:
    with pytest.raises(ValueError, match="Section key"):
        Section("Summary", [], key="Summary Part")
    with pytest.raises(TypeError, match="not a document block"):
        Section("Summary", ["plain string"], key="summary")  # type: ignore[list-item]


def test_document_keys_unique_and_lookup() -> None:
    one = Section("One", [Paragraph("a")], key="one")
    with pytest.raises(ValueError, match="used twice"):
        Document("t", "", "2024-01-01", [one, Section("Again", [], key="one")])
    doc = Document("t", "", "2024-01-01", [one])
    assert doc.section("one") is one
    with pytest.raises(KeyError):
        doc.section("two")


def test_numbered_counts_tables_and_figures_separately() -> None:
    table = Table(pd.DataFrame({"a": [1]}), "t")
    figure = Figure(caption="f", png=PNG_SIGNATURE)
    doc = Document(
        "t",
        "",
        "",
        [
            Section("A", [table, figure, Paragraph("p")], key="a"),
            Section("B", [figure, table, KeyValues([("k", 1)]), BulletList(["x"])], key="b"),
        ],
    )
    numbers = [(type(block).__name__, number) for _, block, number in doc.numbered()]
    assert numbers == [("Table", 1), ("Figure", 1), ("Figure", 2), ("Table", 2)]


def test_keyvalues_text_and_pair_check() -> None:
    block = KeyValues([("screened zones", 3), ("rate", 1234.5678), ("flag", None)])
    assert block.text_items() == [("screened zones", "3"), ("rate", "1235"), ("flag", MISSING_TEXT)]
    with pytest.raises(TypeError, match="pairs"):
        KeyValues([("only label",)])  # type: ignore[list-item]


@given(st.floats(allow_nan=True, allow_infinity=True))
def test_format_value_always_gives_text(value: float) -> None:
    text = format_value(value)
    assert isinstance(text, str) and text
