"""The wellfield table: per well the window, recommended rate, limiting factor, trend and data
gaps, read from the analysis's own fields."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from blendq.api import demo_path, load_project
from blendq.decide.analysis import analyse
from blendq.decide.batch import WellOutcome
from blendq.decide.wellfield import (
    gaps_text,
    limiting_factor,
    summarise,
    table_lines,
    trend_text,
    wellfield_table,
)

# 1 US gallon = 3.785411784 L exactly (NIST Handbook 44, Appendix C)
GPM = 3.785411784e-3 * 1440.0  # m3/d


@pytest.fixture(scope="module")
def demo():
    return analyse(load_project(demo_path()), draws=60, seed=3)


def test_the_limiting_factor_names_the_ends_of_the_window(demo):
    lo, hi, why_lo, why_hi = demo.window.intervals[0]
    assert lo <= demo.window.recommended <= hi
    assert limiting_factor(demo) == f"low end: {why_lo}; high end: {why_hi}"
    empty = replace(demo, window=replace(demo.window, intervals=[], recommended=None,
                                         reason_empty="arsenic fails at every rate"))
    assert limiting_factor(empty) == "no window: arsenic fails at every rate"


def test_the_trend_comes_from_the_monitoring_history(demo):
    # the demo's invented history has nitrate rising and arsenic steady
    # (examples/build_demo_history.py); Mann-Kendall by pymannkendall
    text = trend_text(demo)
    assert text.startswith("nitrate increasing (+") and "mg/L as N per year" in text
    assert "arsenic no trend" in text
    assert trend_text(replace(demo, history={})) == "no history"


def test_data_gaps(demo):
    text = gaps_text(demo)
    z = demo.zones
    for analyte in ("nitrate", "arsenic"):
        rows = z[z["analyte"] == analyte]
        n = int((rows["verdict"] == "not resolved").sum())
        assert f"{analyte}: {n} of {len(rows)} zones not resolved" in text
    assert "nitrite not fitted: every result is a non-detect" in text
    assert "thin data" not in text and "window rests on" not in text
    p = demo.project
    thin = replace(demo, project=replace(p, samples=p.samples[p.samples["step"].isin(["S1",
                                                                                       "S2"])]))
    assert gaps_text(thin).startswith("the window rests on 2 steps with lab results")


def test_the_summary_keeps_what_the_plan_needs(demo):
    s = summarise(demo, "TH-2", "North", 3)
    np.testing.assert_array_equal(s.concentration, demo.prediction.concentration)
    np.testing.assert_array_equal(s.rates, demo.window.rates)
    hydraulic = np.logical_and.reduce([c.ok for c in demo.window.criteria
                                       if c.kind in ("hydraulic", "pump")])
    np.testing.assert_array_equal(s.hydraulic_ok, hydraulic)
    assert s.limits["nitrate"] == pytest.approx(10.0, rel=1e-12)  # US EPA MCL, 10 mg/L as N
    assert s.limits["arsenic"] == pytest.approx(0.010, rel=1e-12)  # US EPA MCL, 10 ug/L
    assert s.analytes == list(demo.prediction.analytes)
    assert (s.window_low, s.window_high) == (demo.window.intervals[0][0],
                                             demo.window.intervals[0][1])


def test_the_table_in_display_units(demo):
    s = summarise(demo, "TH-2", "North", 3)
    outcomes = [WellOutcome("TH-2", "North", s),
                WellOutcome("TH-3", "North", error="project.toml: broken")]
    table = wellfield_table(outcomes, "US")
    assert list(table.columns) == ["well", "entry point", "status", "window low [gpm]",
                                   "window high [gpm]", "recommended [gpm]", "limiting factor",
                                   "trend", "data gaps", "error"]
    ok, bad = table.to_dict("records")
    assert ok["status"] == "window" and ok["error"] == ""
    assert ok["window low [gpm]"] == pytest.approx(s.window_low / GPM, rel=1e-3)
    assert ok["recommended [gpm]"] == pytest.approx(s.recommended / GPM, rel=1e-3)
    assert bad["status"] == "failed" and bad["error"] == "project.toml: broken"
    assert pd.isna(bad["window low [gpm]"])
    si = wellfield_table(outcomes, "SI")
    assert si["window high [m³/d]"].iloc[0] == pytest.approx(s.window_high, rel=1e-3)
    lines = table_lines(table)
    assert lines[0].startswith("TH-2 (entry point North): window ")
    assert lines[-1] == "TH-3 (entry point North): FAILED: project.toml: broken"
