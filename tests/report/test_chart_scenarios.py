"""Tests of the scenario chart (blendq.report.charts.scenarios), inspected through its artists."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("matplotlib")

import blendq  # noqa: E402
from blendq.decide import scenarios as sc  # noqa: E402
from blendq.decide.analysis import analyse  # noqa: E402
from blendq.errors import InputError  # noqa: E402
from blendq.inputs.loader import load_project  # noqa: E402
from blendq.report.charts.scenarios import (  # noqa: E402
    SCENARIO_STYLES,
    save_figure,
    scenario_chart,
    window_summary,
)

DEMO = Path(blendq.__file__).parent / "data" / "demo"
# 1 US gallon = 3.785411784 L exactly (NIST SP 811, 2008, Appendix B.8): 1 gpm = 5.450992969 m^3/d
M3D_PER_GPM = 3.785411784e-3 * 1440.0


@pytest.fixture(scope="module")
def setup():
    a = analyse(load_project(DEMO), draws=100)
    return a, sc.compare(a)


def _lines(ax, prefix):
    return [ln for ln in ax.get_lines() if (ln.get_gid() or "").startswith(prefix)]


def test_one_line_per_scenario_per_analyte_each_styled_apart(setup):
    a, comp = setup
    fig = scenario_chart(comp, a.limits, "US")
    axes = fig.axes
    assert len(axes) == len(a.prediction.analytes) + 1
    for ax in axes[:-1]:
        lines = _lines(ax, "scenario ")
        assert [ln.get_label() for ln in lines] == list(comp.table["scenario"])
        for k, ln in enumerate(lines):
            colour, _, marker = SCENARIO_STYLES[k]
            assert ln.get_color() == colour
            assert ln.get_marker() == (marker or "None")
    # every pair of styles differs in colour, dash pattern and marker (grayscale-readable)
    for m in range(3):
        assert len({str(s[m]) for s in SCENARIO_STYLES}) == len(SCENARIO_STYLES)


def test_median_lines_are_in_display_units(setup):
    a, comp = setup
    fig = scenario_chart(comp, a.limits, "US")
    j = a.prediction.analytes.index("arsenic")
    line = _lines(fig.axes[j], "scenario Base case")[0]
    x, y = line.get_data()
    k = 60
    np.testing.assert_allclose(x[k], a.prediction.rates[k] / M3D_PER_GPM, rtol=1e-9)
    # arsenic is shown in ug/L: 1 mg/L = 1000 ug/L
    np.testing.assert_allclose(y[k], 1000 * np.median(a.prediction.concentration[:, k, j]),
                               rtol=1e-9)
    assert np.isnan(y[0])  # no discharge at zero rate


def test_limit_and_margin_lines(setup):
    a, comp = setup
    fig = scenario_chart(comp, a.limits, "SI")
    j = a.prediction.analytes.index("nitrate")
    ax = fig.axes[j]
    limit = _lines(ax, "limit")[0].get_ydata()[0]
    margin = _lines(ax, "margin")[0].get_ydata()[0]
    # US-EPA nitrate MCL 10 mg/L as N (40 CFR 141.62)
    np.testing.assert_allclose(limit, 10.0, rtol=1e-12)
    np.testing.assert_allclose(margin, a.project.settings.margin * 10.0, rtol=1e-12)


def test_window_strip_bars_match_each_window(setup):
    a, comp = setup
    fig = scenario_chart(comp, a.limits, "SI")
    strip = fig.axes[-1]
    for res in comp.results:
        bars = [c for c in strip.collections if c.get_gid() == f"window {res.scenario.name}"]
        if res.cannot_tell:  # an option the data cannot decide shows no window bar
            assert bars == []
            continue
        assert len(bars) == len(res.window.intervals)
        for bar, (lo, hi, _, _) in zip(bars, res.window.intervals, strict=True):
            x0, _, w, _ = bar.get_paths()[0].get_extents().bounds
            np.testing.assert_allclose([x0, x0 + w], [lo, hi], rtol=1e-9)
    labels = [t.get_text() for t in strip.get_yticklabels()]
    assert labels[-1] == sc.BASE_NAME  # base case on top
    assert len(_lines(strip, "recommended")) == sum(not r.window.empty and not r.cannot_tell
                                                    for r in comp.results)


def test_empty_window_is_said(setup):
    a, comp = setup
    empty = [r for r in comp.results if r.window.empty]
    assert empty  # sealing the upper sand leaves the demo no decided rate
    fig = scenario_chart(comp, a.limits, "US")
    texts = [t.get_text() for t in fig.axes[-1].texts]
    # an empty window is "no window" when the data decide it, else "cannot tell"
    assert texts.count("no window") == sum(not r.cannot_tell for r in empty)
    assert texts.count("cannot tell (see what would tell)") == sum(
        r.cannot_tell for r in comp.results)
    summary = window_summary(comp)
    for r in empty:
        end = "cannot tell" if r.cannot_tell else "no window"
        assert any(line == f"{r.scenario.name}: {end}" for line in summary)


def test_png_and_svg_written(setup, tmp_path):
    a, comp = setup
    paths = save_figure(scenario_chart(comp, a.limits), tmp_path / "options")
    assert [p.suffix for p in paths] == [".png", ".svg"]
    assert paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "<svg" in paths[1].read_text()


def test_bad_units_and_empty_comparison(setup):
    a, comp = setup
    with pytest.raises(InputError, match="unit system"):
        scenario_chart(comp, a.limits, "imperial")
    with pytest.raises(InputError, match="no scenario"):
        scenario_chart(sc.Comparison(comp.table.iloc[:0], []), a.limits)


def test_each_option_shows_its_band(setup):
    # the band of the mean of each option (central 90 %), so that an option with better medians
    # but a wider band can be seen to have the narrower window
    a, comp = setup
    fig = scenario_chart(comp, a.limits, "SI", interval=0.90)
    for j, analyte in enumerate(comp.results[0].prediction.analytes):
        ax = fig.axes[j]
        for res in comp.results:
            band = [c for c in ax.collections if c.get_gid() == f"band {res.scenario.name}"]
            assert len(band) == 1, res.scenario.name
            rates = res.prediction.rates
            k = int(np.argmin(np.abs(rates - 2000.0)))
            conc = res.prediction.concentration[:, k, j]
            lo, hi = np.quantile(conc, [0.05, 0.95])
            ys = band[0].get_paths()[0].vertices[:, 1]
            from blendq.chemistry.analytes import get_analyte

            lo, hi = get_analyte(analyte).in_display_unit([lo, hi])
            assert ys.min() <= lo + 1e-9 and ys.max() >= hi - 1e-9
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert any(lab.startswith("90 % band of the mean") for lab in labels)


def test_window_edge_markers_do_not_overlap(setup):
    # where the pumping-level marker falls on the recommended-rate marker (the window ending at
    # the level limit, the recommended rate at that end), it moves above the bar; elsewhere it
    # stays on the option's row
    import dataclasses

    from blendq.report.charts.scenarios import YIELD_OFFSET

    a, comp = setup
    res = next(r for r in comp.results if r.window.recommended is not None)
    at_end = dataclasses.replace(res, yield_rate=res.window.recommended, yield_beyond_grid=False)
    clash = dataclasses.replace(comp, results=[at_end])
    strip = scenario_chart(clash, a.limits, "US").axes[-1]
    (rec,), (yld,) = _lines(strip, "recommended"), _lines(strip, "yield")
    assert rec.get_xdata()[0] == pytest.approx(yld.get_xdata()[0])
    assert yld.get_ydata()[0] - rec.get_ydata()[0] == pytest.approx(YIELD_OFFSET)
    assert YIELD_OFFSET > 0.32 + 0.05  # clear of the bar (half height 0.32)
    far = dataclasses.replace(res, yield_rate=res.window.recommended * 3.0,
                              yield_beyond_grid=False)
    strip = scenario_chart(dataclasses.replace(comp, results=[far]), a.limits, "US").axes[-1]
    (rec,), (yld,) = _lines(strip, "recommended"), _lines(strip, "yield")
    assert yld.get_ydata()[0] == rec.get_ydata()[0]
