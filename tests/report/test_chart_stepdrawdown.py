"""Tests of blendq.report.charts.stepdrawdown: figures build under Agg and save as PNG and SVG."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
import pytest

from blendq.errors import InputError
from blendq.report.charts import stepdrawdown as charts
from blendq.well import stepdrawdown as sd
from blendq.well import steptest

matplotlib.use("Agg")

ORIGIN = pd.Timestamp("2026-05-04 08:00")


@pytest.fixture(scope="module")
def chained_result():
    """Four chained steps of invented Cooper-Jacob data with a turbulent loss and some noise."""
    rates = np.array([450.0, 900.0, 1350.0, 1800.0])
    starts = np.arange(4) * 0.125
    t = np.concatenate([s + np.geomspace(2e-3, 0.125, 25) for s in starts])
    s = sd.cooper_jacob_step_drawdown(t, starts, rates, 420.0, 2e-4, 0.15, 2.0, 9e-7)
    s = s + np.random.default_rng(4).normal(0.0, 0.02, t.size)
    steps = pd.DataFrame({
        "step": [1, 2, 3, 4], "rate": rates,
        "start": ORIGIN + pd.to_timedelta(starts, unit="D"),
        "end": ORIGIN + pd.to_timedelta(starts + 0.125, unit="D"), "duration": 0.125,
        "pumping_level": np.nan, "recovered_before": False, "source_row": [1, 2, 3, 4]})
    levels = pd.DataFrame({"time": ORIGIN + pd.to_timedelta(t, unit="D"), "level": 15.0 + s,
                           "source_row": np.arange(1, t.size + 1)})
    return steptest.analyse_step_test(steps, 15.0, levels)


@pytest.fixture(scope="module")
def end_of_step_result():
    rates = np.array([500.0, 1000.0])
    steps = pd.DataFrame({"step": ["A", "B"], "rate": rates, "start": pd.NaT, "end": pd.NaT,
                          "duration": 0.1, "pumping_level": 8.0 + 2e-3 * rates + 5e-7 * rates**2,
                          "recovered_before": [False, True], "source_row": [1, 2]})
    return steptest.analyse_step_test(steps, 8.0)


@pytest.mark.parametrize("chart", ["specific_drawdown_chart", "drawdown_rate_chart",
                                   "step_record_chart"])
@pytest.mark.parametrize("units", ["US", "SI"])
def test_charts_save_png_and_svg(chained_result, chart, units, tmp_path):
    fig = getattr(charts, chart)(chained_result, units=units)
    for ext in ("png", "svg"):
        path = tmp_path / f"{chart}_{units}.{ext}"
        fig.savefig(path, dpi=110)
        assert path.exists() and path.stat().st_size > 5000


def test_charts_label_units(chained_result):
    fig = charts.specific_drawdown_chart(chained_result, units="US")
    ax = fig.axes[0]
    assert "gpm" in ax.get_xlabel() and "ft/gpm" in ax.get_ylabel()
    fig = charts.drawdown_rate_chart(chained_result, units="SI")
    ax = fig.axes[0]
    assert "m³/d" in ax.get_xlabel() and "[m]" in ax.get_ylabel()
    lo, hi = ax.get_ylim()
    assert lo > hi == 0.0  # drawdown axis points down


def test_specific_drawdown_points_are_in_display_units(chained_result):
    # the plotted step points are s/Q converted by pint: 1 d/m^2 = 1/((1/0.3048 ft) / ...)
    fig = charts.specific_drawdown_chart(chained_result, units="SI")
    pts = [ln for ln in fig.axes[0].get_lines() if ln.get_label() == "steps"][0]
    r = chained_result.jacob
    np.testing.assert_allclose(pts.get_xdata(), r.rate, rtol=1e-12)
    np.testing.assert_allclose(pts.get_ydata(), r.drawdown / r.rate, rtol=1e-12)


def test_end_of_step_result_charts_and_missing_record(end_of_step_result, tmp_path):
    fig = charts.drawdown_rate_chart(end_of_step_result, units="US", rate_max=1500.0)
    fig.savefig(tmp_path / "d.png")
    assert (tmp_path / "d.png").stat().st_size > 5000
    with pytest.raises(InputError, match="no water-level record"):
        charts.step_record_chart(end_of_step_result)
    with pytest.raises(InputError, match="unit system"):
        charts.specific_drawdown_chart(end_of_step_result, units="metric")


def test_importing_charts_does_not_import_matplotlib():
    code = ("import sys, blendq.report.charts, blendq.report.charts.stepdrawdown, blendq.well.stepdrawdown; "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parents[1])
    assert out.stdout.strip() == "False"
