"""Tests of the field sheet of a planned test."""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
import pytest

from blendq import CAUTIONS, __version__
from blendq.decide import plan
from blendq.inputs.plan_file import load_for_planning
from blendq.report.fieldsheet import (
    field_sheet,
    field_sheet_document,
    field_sheet_files,
    plan_lines,
    sheet_design,
)

EXAMPLE = Path(plan.__file__).resolve().parents[1] / "data" / "plan"


def _report():
    project, inputs, finished = load_for_planning(EXAMPLE)
    return plan.plan_test(project, inputs, finished, budget=6000.0)


REPORT = _report()


def test_field_sheet_follows_the_design_in_field_order():
    design = sheet_design(REPORT)
    table = field_sheet(REPORT, design, "US")
    assert table["order"].tolist() == list(range(1, len(table) + 1))
    steps = table[table["action"] == "step"]
    assert len(steps) == design.n_steps
    assert (table["action"] == "depth sample").sum() == len(design.depth_samples)
    assert (table["action"] == "discharge sample").sum() == design.n_steps
    assert steps["start_hour"].is_monotonic_increasing
    # gpm shown: 1 gpm = 3.785411784 L x 1440 min/d = 5.45099296896 m3/d (NIST SP 811)
    pd.testing.assert_series_equal(steps["rate"].reset_index(drop=True),
                                   pd.Series([r / 5.45099296896 for r in design.rates], name="rate"),
                                   rtol=1e-6)
    assert table.attrs["units"] == {"rate": "gpm", "volume": "gallon", "depth": "ft"}


def test_files_are_written_the_same_twice_and_carry_the_cautions(monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    a = field_sheet_files(REPORT, "SI", "test")
    b = field_sheet_files(_report(), "SI", "test")
    assert a == b
    assert a["fieldsheet.pdf"].startswith(b"%PDF")
    table = pd.read_csv(io.StringIO(a["fieldsheet.csv"]), comment="#")
    assert "rate [m**3/d]" in table.columns and "purge_volume [m**3]" in table.columns
    # both CSV files begin with the comment block: what they hold, the version, the cautions
    for name in ("fieldsheet.csv", "candidates.csv"):
        lines = a[name].split("\r\n")
        assert lines[0].startswith("# ") and lines[1] == f"# written by blendq {__version__}"
        assert lines[2:5] == [f"# {CAUTIONS[0]}", f"# {CAUTIONS[1]}", f"# {CAUTIONS[3]}"]
        assert not lines[5].startswith("#"), name
    # the table reads back whole: the "what" sentences hold commas inside quotes
    assert len(table) == a["fieldsheet.csv"].count("\r\n") - 6
    assert table["what"].str.len().min() > 10
    assert "planning aid, not a compliance determination" in a["plan.txt"]
    doc = field_sheet_document(REPORT, sheet_design(REPORT), "SI")
    assert "compliance determination" in doc.sections[0].blocks[0].text


def test_candidates_table_lists_every_design_evaluated():
    from blendq.report.fieldsheet import candidates_table

    table = candidates_table(REPORT, "US")
    assert len(table) == len(REPORT.plan.candidates) >= 200
    assert table["cost"].is_monotonic_increasing
    assert (table["low_end_sd"] >= 0).all() and (table["high_end_sd"] >= 0).all()
    files = field_sheet_files(REPORT, "US", "test")
    assert files["candidates.csv"].split("\r\n")[5].startswith("steps,rates [gpm],")


def test_purge_on_the_sheet_is_casing_volumes_plus_the_stored_water():
    purge = plan.planned_purge(REPORT.basis)
    assert purge.stored.total > 0 and not purge.idle_given  # the example has no idle time
    table = field_sheet(REPORT, sheet_design(REPORT), "SI")
    samples = table[table["action"] == "discharge sample"]
    # m3 shown in SI: the column is the casing volumes plus the stored volume
    assert samples["purge_volume"].to_numpy() == pytest.approx(
        [purge.casing + purge.stored.total] * len(samples), rel=1e-9)
    assert all("stored by thief zones in 12 h idle" in w for w in samples["what"])
    lines = plan_lines(REPORT, "SI")
    assert any(line.startswith("Purge before each step's sample") and "common practice" in line
               for line in lines)
    doc = field_sheet_document(REPORT, sheet_design(REPORT), "SI")
    assert "casing volumes" in doc.sections[0].blocks[2].note
    assert "hook" not in Path(plan.__file__).read_text()
