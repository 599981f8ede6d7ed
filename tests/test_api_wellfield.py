"""blendq.analyse_wellfield: the table, each well's Result, the errors, the chart and the
output folder."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

import blendq as bq
from blendq.errors import InputError
from blendq.report.outputs import MARKER_NAME

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "wellfield"

FIELD = """
[wellfield]
name = "API test"
display_units = "SI"
seed = 4

[[entry_points]]
name = "E"
demand = "40 L/s"

[[wells]]
name = "nine"
project = "TH-9"
entry_point = "E"

[[wells]]
name = "gone"
project = "gone"
entry_point = "E"
"""


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    root = tmp_path_factory.mktemp("api-field")
    shutil.copytree(EXAMPLE / "TH-9", root / "TH-9")
    shutil.copytree(EXAMPLE / "TH-9", root / "gone")
    (root / "gone" / "steps.csv").write_text("step,rate [gpm]\n", encoding="utf-8")
    (root / "wellfield.toml").write_text(FIELD, encoding="utf-8")
    return bq.analyse_wellfield(root, workers=1, draws=40)


def test_result(result):
    assert list(result.table["well"]) == ["nine", "gone"]
    assert list(result.table["status"]) == ["window", "failed"]
    assert "window low [m³/d]" in result.table.columns  # the file's display units
    assert set(result.wells) == {"nine"} and isinstance(result.wells["nine"], bq.Result)
    assert result.wells["nine"].analysis.draws.n_draws == 40
    assert set(result.errors) == {"gone"} and result.errors["gone"].startswith("steps.csv")
    w = result.wells["nine"].analysis.window
    assert result.summaries["nine"].intervals == w.intervals
    assert result.lines()[-1].startswith("Caution: blendq is a planning aid")
    fig = result.plot.overview()
    assert "API test" in fig.axes[0].get_title(loc="left")


def test_write(result, tmp_path):
    folder = result.write(tmp_path / "out")
    assert sorted(p.name for p in folder.iterdir()) == sorted(
        [MARKER_NAME, "n_minus_1.csv", "plan.csv", "wellfield.csv", "wellfield.png",
         "wellfield.svg", "wellfield.txt"])
    with pytest.raises(bq.api.InputError, match="would overwrite or delete"):
        result.write(result.wellfield.path.parent)


@pytest.mark.parametrize("bad", [0, -1, 2.5, True, "20"])
def test_a_bad_plan_draws_is_an_input_error_before_the_run(bad):
    with pytest.raises(InputError, match="plan_draws") as err:
        bq.analyse_wellfield(EXAMPLE, workers=1, plan_draws=bad)
    assert "not a number of draws" in str(err.value)
