"""Tests of the decision charts (blendq.report.charts.quality).

The charts are inspected through their artists (lines, patches, labels), so the tests check
what is drawn and in which unit, not pixels.
"""

from __future__ import annotations

import dataclasses
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("matplotlib")

from matplotlib.figure import Figure  # noqa: E402

from blendq.chemistry.limits import limit_set  # noqa: E402
from blendq.decide.sweep import Window, governing_limits, operating_window, sweep  # noqa: E402
from blendq.errors import InputError  # noqa: E402
from blendq.fit.diagnostics import zone_table  # noqa: E402
from blendq.fit.estimation import fit  # noqa: E402
from blendq.fit.uncertainty import monte_carlo  # noqa: E402
from blendq.report.charts import quality as cq  # noqa: E402
from blendq.well.synthetic import synthetic_project  # noqa: E402

# 1 US gallon = 3.785411784 L exactly (NIST SP 811, 2008, Appendix B.8), so
# 1 gpm = 3.785411784e-3 m^3 x 1440 min/d = 5.450992969 m^3/d
M3D_PER_GPM = 3.785411784e-3 * 1440.0
# 1 ft = 0.3048 m exactly (NIST SP 811, Appendix B.8)
M_PER_FT = 0.3048

ARSENIC_DL = 0.002  # [mg/L] detection limit given to one arsenic result below


@pytest.fixture(scope="module")
def case():
    """An invented three-zone well (nitrate-rich top zone, arsenic-rich bottom zone; the middle
    zone has the lowest head and takes water from the well at low rates)."""
    g = np.array([150.0, 60.0, 300.0])
    h0 = np.array([-10.0, -12.5, -11.0])
    p = synthetic_project(g, h0, [20, 30, 40], [25, 35, 50],
                          {"nitrate": [14, 2, 1.0], "arsenic": [0.0005, 0.004, 0.014]},
                          [300, 800, 1500, 2500], 28, relative_error=0.05,
                          absolute_error={"arsenic": 0.0005}, flowlog_rates=[0, 1500],
                          flowlog_depths=[19, 27, 29, 37, 39, 55], flowlog_noise=0.03, seed=3)
    p.limits = limit_set("US-EPA")
    r = fit(p)
    d = monte_carlo(r, 200, seed=1)
    pred = sweep(r, d, np.linspace(0, 4000, 41))
    limits = governing_limits(p.limits, pred.analytes)
    # one arsenic result turned into a non-detect, one sample taken inside the well
    s = p.samples.copy()
    k = s.index[(s["analyte"] == "arsenic") & (s["step"] == "S1")][0]
    s.loc[k, ["value", "nondetect", "detection_limit"]] = [np.nan, True, ARSENIC_DL]
    depth_row = s.loc[[k]].assign(value=50.0, nondetect=False, depth=45.0, analyte="nitrate")
    p.samples = pd.concat([s, depth_row], ignore_index=True)
    p = dataclasses.replace(p, well=dataclasses.replace(p.well, submergence=3.0))
    window = operating_window(pred, limits, 0.8, 0.05, 28, 3, 0, 5000, 2000)
    return dict(project=p, fit=r, draws=d, pred=pred, limits=limits, window=window,
                zones=zone_table(r, d))


def two_interval_window(pred) -> Window:
    return Window(pred.rates, np.ones(len(pred.rates), bool),
                  [(300.0, 700.0, "rate range", "nitrate"), (1500.0, 2400.0, "arsenic", "level")],
                  2000.0, "", [])


def empty_window(pred) -> Window:
    return Window(pred.rates, np.zeros(len(pred.rates), bool), [], None,
                  "arsenic fails at every rate", [])


def window_patches(ax):
    return [p for p in ax.patches if p.get_gid() == "operating window"]


def test_quality_vs_rate_panels_and_files(case, tmp_path):
    fig = cq.quality_vs_rate(case["pred"], case["window"], case["limits"], 0.8, 0.9,
                             case["project"])
    assert isinstance(fig, Figure)
    assert len(fig.axes) == 2  # nitrate and arsenic
    titles = [ax.get_title(loc="left") for ax in fig.axes]
    assert titles == ["Nitrate (as N)", "Arsenic"]
    paths = cq.save_figure(fig, tmp_path / "out" / "quality")
    assert [p.suffix for p in paths] == [".png", ".svg"]
    assert paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert paths[0].stat().st_size > 10_000
    assert "<svg" in paths[1].read_text()[:500]


def test_quality_limit_and_margin_lines_in_display_units(case):
    fig = cq.quality_vs_rate(case["pred"], case["window"], case["limits"], 0.8, 0.9,
                             case["project"])
    nitrate, arsenic = fig.axes

    def horizontal(ax):
        return sorted(float(line.get_ydata()[0]) for line in ax.get_lines()
                      if len(set(line.get_ydata())) == 1 and len(line.get_ydata()) == 2)

    # nitrate MCL 10 mg/L as N, arsenic MCL 0.010 mg/L = 10 ug/L (40 CFR 141.62(b))
    np.testing.assert_allclose(horizontal(nitrate), [8.0, 10.0], rtol=1e-12)
    np.testing.assert_allclose(horizontal(arsenic), [8.0, 10.0], rtol=1e-9)
    assert "mg/L" in nitrate.get_ylabel() and "µg/L" in arsenic.get_ylabel()
    texts = [t.get_text() for t in nitrate.texts]
    assert "US-EPA MCL 10 mg/L as N" in texts and "80 % of limit" in texts
    assert any(t.startswith("US-EPA MCL 0.01 mg/L (= 10 µg/L)") for t in
               (t.get_text() for t in arsenic.texts))


def test_quality_samples_and_nondetect(case):
    fig = cq.quality_vs_rate(case["pred"], case["window"], case["limits"], 0.8, 0.9,
                             case["project"], units="SI")
    nitrate, arsenic = fig.axes
    points = [line for line in nitrate.get_lines() if line.get_marker() == "o"]
    # four discharge samples; the sample taken inside the well is left out
    assert len(points) == 1 and len(points[0].get_xdata()) == 4
    np.testing.assert_allclose(points[0].get_xdata(), [300, 800, 1500, 2500], rtol=1e-12)
    open_marks = [line for line in arsenic.get_lines()
                  if line.get_marker() == "o" and line.get_markerfacecolor() == "white"]
    assert len(open_marks) == 1
    np.testing.assert_allclose(open_marks[0].get_ydata(), [ARSENIC_DL * 1000], rtol=1e-12)


def test_units_switch_rate_axis(case):
    pred, w, lim, p = case["pred"], case["window"], case["limits"], case["project"]
    us = cq.quality_vs_rate(pred, w, lim, 0.8, 0.9, p, units="US")
    si = cq.quality_vs_rate(pred, w, lim, 0.8, 0.9, p, units="SI")
    assert "gpm" in us.axes[-1].get_xlabel() and "m³/d" not in us.axes[-1].get_xlabel()
    assert "m³/d" in si.axes[-1].get_xlabel()

    def median_line(fig):
        return next(line for line in fig.axes[0].get_lines()
                    if line.get_label() == "median prediction")

    np.testing.assert_allclose(median_line(si).get_xdata(), pred.rates, rtol=1e-12)
    np.testing.assert_allclose(median_line(us).get_xdata() * M3D_PER_GPM, pred.rates, rtol=1e-9)
    lv_us = cq.pumping_level(pred, p, w, units="US")
    lv_si = cq.pumping_level(pred, p, w, units="SI")
    assert "[ft]" in lv_us.axes[0].get_ylabel() and "[m]" in lv_si.axes[0].get_ylabel()
    assert "gpm" in cq.zone_shares(pred, p.zone_names, w, units="US").axes[0].get_xlabel()


def test_two_interval_window_and_recommended(case):
    pred = case["pred"]
    w2 = two_interval_window(pred)
    fig = cq.quality_vs_rate(pred, w2, case["limits"], 0.8, 0.9, case["project"], units="SI")
    for ax in fig.axes:
        spans = window_patches(ax)
        assert len(spans) == 2
        lows = sorted(float(s.get_x()) for s in spans)
        np.testing.assert_allclose(lows, [300.0, 1500.0], rtol=1e-12)
        rec = [line for line in ax.get_lines() if line.get_label() == "recommended rate"]
        np.testing.assert_allclose(rec[0].get_xdata(), [2000.0, 2000.0], rtol=1e-12)
    assert "300 to 700 m³/d and 1\u202f500 to 2\u202f400 m³/d" in fig.get_suptitle()
    shares = cq.zone_shares(pred, case["project"].zone_names, w2, units="SI")
    bars = [line for line in shares.axes[0].get_lines() if line.get_label() == "operating window"]
    assert len(bars) == 2


def test_empty_window_is_stated(case, tmp_path):
    pred = case["pred"]
    fig = cq.quality_vs_rate(pred, empty_window(pred), case["limits"], 0.8, 0.9,
                             case["project"])
    # a short title; the reason belongs to the report's text, not the chart title
    title = fig.get_suptitle()
    assert title.splitlines() == ["Discharge quality against pumping rate", "No operating window"]
    assert "arsenic fails" not in title and "P >" not in title
    assert all(not window_patches(ax) for ax in fig.axes)
    assert all(line.get_label() != "recommended rate" for ax in fig.axes for line in ax.get_lines())
    level = cq.pumping_level(pred, case["project"], empty_window(pred))
    assert "No operating window" in level.get_suptitle()
    assert all(p.stat().st_size > 0 for p in cq.save_figure(fig, tmp_path / "empty"))


def test_single_rate_window_is_visible(case):
    pred = case["pred"]
    w1 = Window(pred.rates, np.ones(len(pred.rates), bool), [(500.0, 500.0, "a", "b")], 500.0,
                "", [])
    fig = cq.quality_vs_rate(pred, w1, case["limits"], 0.8, 0.9, None, units="SI")
    span = window_patches(fig.axes[0])[0]
    assert span.get_width() == pytest.approx(100.0, rel=1e-12)  # one grid step of 100 m^3/d


def test_zone_shares_stack(case, tmp_path):
    pred, names = case["pred"], case["project"].zone_names
    fig = cq.zone_shares(pred, names, case["window"])
    assert len(fig.axes) == 1
    ax = fig.axes[0]
    fills = [c for c in ax.collections if c.get_label() and not c.get_label().startswith("_")]
    assert len(fills) == 3
    assert len({c.get_hatch() for c in fills}) == 3  # distinct hatches read in grayscale
    top = max(fills, key=lambda c: c.get_paths()[0].vertices[:, 1].max())
    np.testing.assert_allclose(top.get_paths()[0].vertices[:, 1].max(), 100.0, rtol=1e-9)
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels[0].startswith("Z1") and labels[2].startswith("Z3")  # top to bottom
    # the middle zone has the lowest head: at low rates it takes water from the well
    assert "takes water from the well" in labels[1]
    assert all(p.stat().st_size > 0 for p in cq.save_figure(fig, tmp_path / "shares"))
    with pytest.raises(InputError, match="zone names"):
        cq.zone_shares(pred, names[:2])


def test_pumping_level(case, tmp_path):
    p = case["project"]
    fig = cq.pumping_level(case["pred"], p, case["window"], units="US")
    assert len(fig.axes) == 1
    ax = fig.axes[0]
    bottom, top = ax.get_ylim()
    assert bottom > top  # depth increases downward
    lines = {line.get_label(): line for line in ax.get_lines()}
    intake = next(v for k, v in lines.items() if k.startswith("pump intake"))
    np.testing.assert_allclose(intake.get_ydata()[0] * M_PER_FT, 28.0, rtol=1e-9)
    deepest = next(v for k, v in lines.items() if k.startswith("intake less submergence"))
    np.testing.assert_allclose(deepest.get_ydata()[0] * M_PER_FT, 25.0, rtol=1e-9)
    screen = next(v for k, v in lines.items() if k.startswith("top of uppermost zone Z1"))
    np.testing.assert_allclose(screen.get_ydata()[0] * M_PER_FT, 20.0, rtol=1e-9)
    measured = lines["measured at end of step (hours of pumping)"]
    np.testing.assert_allclose(measured.get_ydata() * M_PER_FT, p.steps["pumping_level"],
                               rtol=1e-9)
    assert all(q.stat().st_size > 0 for q in cq.save_figure(fig, tmp_path / "level"))


def unresolved_table(zones: pd.DataFrame) -> pd.DataFrame:
    t = zones.copy()
    t["verdict"] = "resolved"
    mid = (t["zone"] == "Z2")
    t.loc[mid, ["estimate", "sd", "lower", "upper"]] = np.nan
    t.loc[mid, "verdict"] = "not resolved"
    t.loc[mid & (t["analyte"] == "nitrate"), ["range_low", "range_high"]] = [0.5, 16.0]
    t.loc[mid & (t["analyte"] == "arsenic"), ["range_low", "range_high"]] = [0.001, np.inf]
    return t


def test_zone_estimates_unresolved_is_a_bar(case, tmp_path):
    t = unresolved_table(case["zones"])
    fig = cq.zone_estimates(t, ["nitrate", "arsenic"], case["limits"])
    assert len(fig.axes) == 2
    nitrate, arsenic = fig.axes
    bar = next(p for p in nitrate.patches if p.get_gid() == "unresolved:nitrate:Z2")
    assert bar.get_hatch()
    np.testing.assert_allclose([bar.get_x(), bar.get_x() + bar.get_width()], [0.5, 16.0],
                               rtol=1e-12)
    assert bar.get_y() < 1 < bar.get_y() + bar.get_height()  # Z2 is the second row
    # no point is drawn for the unresolved zone, one point for each resolved zone
    for ax, analyte in ((nitrate, "nitrate"), (arsenic, "arsenic")):
        gids = [line.get_gid() for line in ax.get_lines() if line.get_gid()]
        assert f"estimate:{analyte}:Z2" not in gids
        assert {f"estimate:{analyte}:Z1", f"estimate:{analyte}:Z3"} <= set(gids)
        ys = [y for line in ax.get_lines() if line.get_marker() in ("o", "D")
              for y in line.get_ydata()]
        assert 1 not in ys
    # no upper bound from the data: the bar runs to the panel's edge, from 1 ug/L
    open_bar = next(p for p in arsenic.patches if p.get_gid() == "unresolved:arsenic:Z2")
    assert open_bar.get_x() == pytest.approx(1.0, rel=1e-12)
    assert open_bar.get_x() + open_bar.get_width() == pytest.approx(arsenic.get_xlim()[1])
    assert any("no upper bound" in tx.get_text() for tx in arsenic.texts)
    assert "µg/L" in arsenic.get_xlabel()
    paths = cq.save_figure(fig, tmp_path / "zones")
    assert all(q.stat().st_size > 0 for q in paths)


def test_zone_estimates_defaults_and_errors(case):
    fig = cq.zone_estimates(case["zones"])
    assert len(fig.axes) == 2
    with pytest.raises(InputError, match="uranium"):
        cq.zone_estimates(case["zones"], ["uranium"])
    with pytest.raises(InputError, match="range_low"):
        cq.zone_estimates(case["zones"].drop(columns="range_low"))


def test_bad_unit_system(case):
    with pytest.raises(InputError, match="unit system"):
        cq.quality_vs_rate(case["pred"], None, case["limits"], 0.8, 0.9, units="metric")


def test_import_does_not_load_matplotlib():
    code = "import sys, blendq.report.charts.quality; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         cwd=Path(__file__).parent, check=True)
    assert out.stdout.strip() == "False"


def test_single_sample_range_drawn_where_the_basis_is_a_single_sample(case):
    from blendq.decide.sweep import compliance_statistics, statistic_quantiles

    stats = compliance_statistics(case["project"], case["limits"])
    fig = cq.quality_vs_rate(case["pred"], case["window"], case["limits"], 0.8, 0.9,
                             case["project"], statistics=stats)
    nitrate, arsenic = fig.axes[:2]
    label = "90 % range of a compliance sample"
    # nitrate is judged on a sample with its confirmation (40 CFR 141.23): its range is drawn;
    # arsenic on the annual mean (40 CFR 141.23(i)): only the band of the mean
    upper = [ln for ln in nitrate.get_lines() if ln.get_linestyle() != "-"
             and ln.get_color() == cq.BLUE]
    assert len(upper) == 2 and upper[0].get_label() == label
    assert not [ln for ln in arsenic.get_lines() if ln.get_label() == label]
    ref = statistic_quantiles(case["pred"].concentration[:, :, 0], [0.05, 0.95],
                              stats["nitrate"].log_sd)
    np.testing.assert_allclose(upper[1].get_ydata()[1:], ref[1, 1:], rtol=1e-12)  # mg/L as N
    # the shaded band is the band of the mean, and says so
    assert any(c.get_label() == "90 % interval of the mean" for c in nitrate.collections)


def test_chart_rates_round_as_the_text_and_the_command_line():
    # the chart's rate labels and the report text / CLI (blendq.units.format_quantity) give the
    # same figure: three significant digits (3,360, not 3,358); SI groups with a narrow space
    from blendq.report.charts.quality import _fmt_rate
    from blendq.units import format_quantity, to_base

    for system, text in (("US", "3358 gpm"), ("SI", "3358 m**3/d")):
        q = to_base(float(text.split()[0]), text.split()[1], "rate")
        assert _fmt_rate(q, system) == format_quantity(q, "rate", system)
    assert _fmt_rate(to_base(3358.0, "gpm", "rate"), "US") == "3,360 gpm"
    assert _fmt_rate(3358.0, "SI") == "3\u202f360 m³/d"


def test_untested_rates_faded_and_off_pump_rates_hatched_with_legend(case):
    # steps at 300-2500 m^3/d (synthetic project); pump range 0-5000 set below: the rates
    # below 300 and above 2500 are faded, those outside the pump's range hatched
    p = dataclasses.replace(case["project"], well=dataclasses.replace(
        case["project"].well, rate_min=500.0, rate_max=3500.0))
    fig = cq.quality_vs_rate(case["pred"], case["window"], case["limits"], 0.8, 0.9, p,
                             units="SI")
    for ax in fig.axes:
        faded = sorted((float(s.get_x()), float(s.get_x() + s.get_width()))
                       for s in ax.patches if s.get_gid() == "not tested")
        np.testing.assert_allclose(faded, [(0.0, 300.0), (2500.0, 4000.0)], rtol=1e-12)
        off = sorted((float(s.get_x()), float(s.get_x() + s.get_width()))
                     for s in ax.patches if s.get_gid() == "outside pump range")
        np.testing.assert_allclose(off, [(0.0, 500.0), (3500.0, 4000.0)], rtol=1e-12)
        # the fade lies over the model curves but under the limit lines and the samples
        fade = next(s for s in ax.patches if s.get_gid() == "not tested")
        curves = [c for c in ax.collections if c.get_label().endswith("interval of the mean")]
        assert fade.get_zorder() > curves[0].get_zorder()
        limit = next(line for line in ax.get_lines() if line.get_label() == "limit")
        assert limit.get_zorder() > fade.get_zorder()
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "no step tested here (model extrapolated; faded)" in labels
    assert "outside the pump's range" in labels


def test_pumping_level_band_shown_horizon_labelled_off_the_hatching(case):
    p = case["project"]
    w = two_interval_window(case["pred"])
    fig = cq.pumping_level(case["pred"], p, w, units="SI")
    ax = fig.axes[0]
    # the band's width is given in the legend and its edges are drawn
    band = [c for c in ax.collections if "interval of prediction" in c.get_label()]
    assert band and "±" in band[0].get_label() and "m at" in band[0].get_label()
    # the axis spans the levels, not the datum: the band is not squeezed against 0
    deep, shallow = ax.get_ylim()
    assert shallow > 0
    # the operating horizon is written on the chart, clear of the window's hatching
    label = next(t for t in ax.texts if t.get_gid() == "horizon label")
    assert label.get_text() == f"operating horizon: {p.settings.horizon:g} days of pumping"
    fig.canvas.draw()
    box = label.get_window_extent()
    for lo, hi in ([300.0, 700.0], [1500.0, 2400.0]):
        a = ax.transData.transform((lo, 0))[0]
        b = ax.transData.transform((hi, 0))[0]
        assert box.x1 < a or box.x0 > b, (box, a, b)
    left, right = ax.transData.transform((0, 0))[0], ax.transData.transform((4000, 0))[0]
    assert left <= box.x0 and box.x1 <= right  # inside the axes
    assert "median prediction after" in " ".join(t.get_text() for t in fig.legends[0].get_texts())
