"""WellfieldResult.modifications() and the modification lines of WellfieldResult.lines(): the
demo wellfield at a North plant demand of 800 gpm, without the interference table (the two
entry points then plan apart: only the North plant has no plan)."""

from __future__ import annotations

import shutil
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import blendq as bq

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "wellfield"


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    root = tmp_path_factory.mktemp("api-fieldmods") / "wf"
    shutil.copytree(EXAMPLE, root)
    f = root / "wellfield.toml"
    text = f.read_text(encoding="utf-8").replace('demand = "650 gpm"', 'demand = "800 gpm"')
    f.write_text(text.split("[interference]")[0], encoding="utf-8")
    return bq.analyse_wellfield(root, workers=1, draws=100, plan_draws=50)


def test_modifications_table(result):
    t = result.modifications()
    assert list(t["well"]) == ["TH-5", "TH-2", "TH-2"]
    assert list(t["opens_plan"]) == [True, False, False]
    opened = t.iloc[0]
    # only the North plant's sources: the South plant has its own plan
    assert {"TH-2 [gpm]", "TH-5 [gpm]", "compliance North plant"} <= set(t.columns)
    assert "TH-7 [gpm]" not in t.columns
    np.testing.assert_allclose(opened["TH-2 [gpm]"] + opened["TH-5 [gpm]"], 800, rtol=1e-3)
    assert opened["compliance North plant"] >= 0.9
    assert t.attrs["cautions"] == result.cautions


def test_lines_put_the_modifications_after_the_diagnosis(result):
    lines = result.lines()
    k = next(i for i, x in enumerate(lines) if x.startswith("  Well modifications tried"))
    assert lines[k - 1].startswith(("    opens a plan", "    does not open one", "  note:"))
    assert any(x.startswith("    opens a plan: nitrate at North plant") for x in lines[:k])
    assert lines[k + 1].startswith("    opens a plan: TH-5, seal Upper sand")
    assert "licensed professional" in lines[k]
    n = next(i for i, x in enumerate(lines) if x.startswith("N-1"))
    assert n > k + 1
    assert lines[-1].startswith("Caution: blendq is a planning aid")


def test_a_wellfield_with_a_plan_has_no_modifications(result):
    wf = result.wellfield
    north = replace(wf.entry_points[0], demand=wf.entry_points[0].demand * 650 / 800)
    ok = bq.api.WellfieldResult(replace(wf, entry_points=[north, *wf.entry_points[1:]]),
                                result.outcomes, "US", plan_draws=50)
    assert ok.plan().feasible
    assert ok.modifications().empty
