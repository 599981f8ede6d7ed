"""The wellfield overview chart: a bar per well on one rate axis, failed wells shown, the
cautions at the foot."""

from __future__ import annotations

import matplotlib.colors as mcolors
import pytest

from blendq import CAUTIONS
from blendq.api import demo_path, load_project
from blendq.decide.analysis import analyse
from blendq.decide.batch import WellOutcome
from blendq.decide.wellfield import summarise
from blendq.report.charts.render import render_chart
from blendq.report.charts.wellfield import wellfield_chart


@pytest.fixture(scope="module")
def outcomes():
    a = analyse(load_project(demo_path()), draws=40, seed=5)
    s = summarise(a, "TH-2", "North", 5)
    return [WellOutcome("TH-2", "North", s),
            WellOutcome("TH-4", "South", summarise(a, "TH-4", "South", 5)),
            WellOutcome("TH-6", "North", error="project.toml field well.rate_max: bad")]


def _gids(fig):
    return {a.get_gid() for a in fig.findobj() if a.get_gid()}


def test_bars_marks_and_a_failed_well(outcomes):
    fig = wellfield_chart(outcomes, "US")
    gids = _gids(fig)
    assert {"window TH-2", "window TH-4", "recommended TH-2", "rail TH-2",
            "failed TH-6"} <= gids
    texts = " ".join(t.get_text() for t in fig.texts + fig.axes[0].texts)
    assert "analysis failed: project.toml field well.rate_max: bad" in texts
    # each entry point has its own colour
    colours = {}
    for art in fig.findobj():
        if str(art.get_gid()).startswith("window "):
            colours[art.get_gid()] = mcolors.to_hex(art.get_facecolor()[0])
    assert colours["window TH-2"] != colours["window TH-4"]
    # rows grouped by entry point: both North wells above the South one
    ax = fig.axes[0]
    row = dict(zip([t.get_text() for t in ax.get_yticklabels()], ax.get_yticks(), strict=True))
    assert row["TH-2\nNorth"] > row["TH-6\nNorth"] > row["TH-4\nSouth"]


def test_the_cautions_are_on_the_chart(outcomes):
    fig = wellfield_chart(outcomes, "SI")
    foot = " ".join(fig._supxlabel.get_text().split())
    for caution in (CAUTIONS[0], CAUTIONS[1], CAUTIONS[3]):
        assert caution in foot
    assert "m³/d" in fig.axes[0].get_xlabel()
    png, _ = render_chart(fig, svg=False)
    assert png.startswith(b"\x89PNG")


def test_the_same_chart_gives_the_same_bytes(outcomes):
    one = render_chart(wellfield_chart(outcomes, "US"))
    two = render_chart(wellfield_chart(outcomes, "US"))
    assert one == two
