"""Tests of the public Python API (blendq.api, offered lazily as ``blendq.<name>``).

The API converts the pipeline's base-unit results to display units; the conversions are
checked against pint (an outside library) and against the command line's JSON, which holds the
same numbers in base units. The demo project (blendq/data/demo) is analysed once per module.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pytest
from hypothesis import given
from hypothesis import strategies as st
from typer.testing import CliRunner

import blendq as bq
from blendq.cli import app
from blendq.errors import InputError, ModelError

DRAWS, SEED = 200, 1
ureg = pint.UnitRegistry()  # a registry of the test's own: pint is the outside reference
runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})


@pytest.fixture(scope="module")
def result():
    return bq.analyse(bq.load_project(bq.demo_path()), draws=DRAWS, seed=SEED)


@pytest.fixture(scope="module")
def si(result):
    return result.in_units("SI")


def _fresh(code: str) -> str:
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr
    return r.stdout.strip()


# --- import cost and lazy names --------------------------------------------------------------

HEAVY = ("numpy", "pandas", "scipy", "matplotlib", "pint")


@pytest.mark.parametrize("module", ["blendq", "blendq.cli"])
def test_import_does_not_load_the_scientific_stack(module):
    # `import blendq` and `blendq --help` (which imports blendq.cli) stay fast
    out = _fresh(f"import sys, {module}; print([m for m in {HEAVY!r} if m in sys.modules])")
    assert out == "[]"


def test_api_names_load_on_first_use():
    out = _fresh("import sys, blendq; a = 'blendq.api' in sys.modules; blendq.analyse; "
                 "print(a, 'blendq.api' in sys.modules, 'matplotlib' in sys.modules)")
    assert out == "False True False"


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no_such_name"):
        bq.no_such_name  # noqa: B018
    assert {"analyse", "load_project", "demo_path", "CAUTIONS"} <= set(dir(bq))
    from blendq import analyse  # PEP 562: a from-import works too

    assert analyse is bq.api.analyse


def test_demo_path_is_the_shipped_demo():
    assert (bq.demo_path() / "project.toml").is_file()
    assert bq.demo_path() == Path(bq.__file__).parent / "data" / "demo"


# --- tables in display units -----------------------------------------------------------------

def test_units_in_column_names(result, si):
    p = result.predict("400 gpm")
    for name in ("rate [gpm]", "nitrate median [mg/L as N]", "nitrate lower [mg/L as N]",
                 "arsenic upper [ug/L]", "nitrate P(above 90% of limit) [-]",
                 "pumping level median [ft depth]", "share Upper sand [-]"):
        assert name in p.columns
    assert "rate [m3/d]" in si.predict(400).columns
    assert "pumping level deep [m depth]" in si.predict(400).columns
    assert "conductance [ft2/d]" in result.hydraulics.columns
    assert "conductance [m2/d]" in si.hydraulics.columns
    assert list(result.window.intervals.columns[:2]) == ["from [gpm]", "to [gpm]"]
    assert "window low [m3/d]" in si.compare().table.columns
    # every numeric column of the wide tables names its unit
    for table in (p, result.hydraulics, result.window.intervals, result.sweep):
        for col in table.select_dtypes("number").columns:
            assert col.endswith("]"), col
    # the tidy tables hold analytes of different units: the unit is a column
    z = result.zones
    assert dict(zip(z["analyte"], z["unit"], strict=True)) == {"nitrate": "mg/L as N",
                                                               "arsenic": "ug/L"}


def test_si_and_us_numbers_are_related_by_pint(result, si):
    us_p, si_p = result.predict([300, 500]), si.predict(ureg.Quantity([300, 500], "gallon/minute"))
    np.testing.assert_allclose(
        si_p["rate [m3/d]"], ureg.Quantity(us_p["rate [gpm]"].to_numpy(), "gallon/minute")
        .to("m**3/day").magnitude, rtol=1e-12)
    np.testing.assert_allclose(
        si_p["pumping level median [m depth]"],
        ureg.Quantity(us_p["pumping level median [ft depth]"].to_numpy(), "ft").to("m").magnitude,
        rtol=1e-9)
    # concentrations and shares do not depend on the unit system
    np.testing.assert_allclose(si_p["nitrate median [mg/L as N]"],
                               us_p["nitrate median [mg/L as N]"], rtol=1e-9)
    np.testing.assert_allclose(si_p["share Deep sand [-]"], us_p["share Deep sand [-]"],
                               rtol=1e-9)
    np.testing.assert_allclose(
        si.window.intervals[["from [m3/d]", "to [m3/d]"]].to_numpy(),
        ureg.Quantity(result.window.intervals[["from [gpm]", "to [gpm]"]].to_numpy(),
                      "gallon/minute").to("m**3/day").magnitude, rtol=1e-12)
    np.testing.assert_allclose(
        si.hydraulics["conductance [m2/d]"],
        ureg.Quantity(result.hydraulics["conductance [ft2/d]"].to_numpy(), "ft**2/day")
        .to("m**2/day").magnitude, rtol=1e-12)
    assert "m³/d" in si.decision and "gpm" in result.decision


def test_display_units_default_to_the_project_setting(result):
    p = result.project
    metric = dataclasses.replace(p, settings=dataclasses.replace(p.settings,
                                                                 display_units="SI"))
    r = bq.analyse(metric, draws=50, seed=SEED)
    assert r.units == "SI" and "rate [m3/d]" in r.sweep.columns
    assert bq.analyse(metric, draws=50, seed=SEED, units="us").units == "US"
    with pytest.raises(InputError, match="US"):
        result.in_units("imperial")


def test_zone_concentrations_in_display_units(result):
    base, shown = result.analysis.zones, result.zones
    arsenic = (base["analyte"] == "arsenic").to_numpy()
    # arsenic is shown in ug/L: 1 mg/L = 1000 ug/L
    np.testing.assert_allclose(
        shown.loc[arsenic, "range high"],
        ureg.Quantity(base.loc[arsenic, "range_high"].to_numpy(), "mg/L").to("ug/L").magnitude,
        rtol=1e-12)
    np.testing.assert_allclose(shown.loc[~arsenic, "range high"],
                               base.loc[~arsenic, "range_high"], rtol=1e-12)


# --- rates -----------------------------------------------------------------------------------

def test_rates_as_text_quantities_and_numbers_agree(result):
    expected = result.predict([200, 400])
    for rates in ("200, 400 gpm", "200; 400 gpm", "200 gpm, 400 gpm", ["200 gpm", 400],
                  ureg.Quantity([200, 400], "gallon/minute"), np.array([200.0, 400.0]),
                  pd.Series([200, 400]), (200, 400.0)):
        pd.testing.assert_frame_equal(result.predict(rates), expected, rtol=1e-12)
    # another unit in the text, checked by pint
    p = result.predict("30 L/s")
    np.testing.assert_allclose(p["rate [gpm]"],
                               ureg.Quantity(30, "L/s").to("gallon/minute").magnitude,
                               rtol=1e-12)


@given(st.lists(st.floats(0.0, 5e3, allow_nan=False), min_size=1, max_size=6))
def test_parse_rates_text_equals_numbers(values):
    text = ", ".join(repr(v) for v in values) + " gpm"
    np.testing.assert_allclose(bq.parse_rates(text), bq.parse_rates(values), rtol=1e-12)
    np.testing.assert_allclose(
        bq.parse_rates(values),
        ureg.Quantity(np.array(values), "gallon/minute").to("m**3/day").magnitude, rtol=1e-12)


@pytest.mark.parametrize("rates", ["-5 gpm", "450 ft", "fast", [], True, "450 gpm, nan",
                                   ureg.Quantity(3, "m")])
def test_bad_rates_are_input_errors(result, rates):
    with pytest.raises(InputError) as err:
        result.predict(rates)
    assert err.value.field == "rates"


def test_predict_at_grid_rates_reproduces_the_sweep(result):
    # the window is decided on the sweep; predict() at the grid's own rates gives its rows
    grid = result.analysis.prediction.rates
    pick = [10, 40, 80]
    p = result.predict(ureg.Quantity(grid[pick], "m**3/day"))
    pd.testing.assert_frame_equal(p, result.sweep.iloc[pick].reset_index(drop=True),
                                  rtol=1e-12)


# --- the same numbers as the command line ----------------------------------------------------

def test_result_equals_the_cli_json(result):
    r = runner.invoke(app, ["window", str(bq.demo_path()), "--json", "--draws", str(DRAWS),
                            "--seed", str(SEED)])
    assert r.exit_code == 0, r.output
    cli = json.loads(r.stdout)
    shown = result.window.intervals[["from [gpm]", "to [gpm]"]].to_numpy()
    np.testing.assert_allclose(ureg.Quantity(shown, "gallon/minute").to("m**3/day").magnitude,
                               cli["window_m3_per_day"], rtol=1e-12)
    assert result.window.intervals["upper end set by"].tolist() == \
        [hi for _, hi in cli["window_limiting"]]
    np.testing.assert_allclose(
        ureg.Quantity(result.window.recommended, "gallon/minute").to("m**3/day").magnitude,
        cli["recommended_rate_m3_per_day"], rtol=1e-12)
    assert cli["decision"] == result.decision
    # the command line adds the window without each step and the failure drivers
    assert cli.pop("failure_drivers") == result.failure_drivers
    assert len(cli.pop("leave_one_step_out")) == 6
    assert cli == json.loads(bq.to_json(result.summary()))


def test_zones_equal_the_cli_fit_json(result):
    r = runner.invoke(app, ["fit", str(bq.demo_path()), "--json", "--draws", str(DRAWS),
                            "--seed", str(SEED)])
    assert r.exit_code == 0, r.output
    cli = pd.DataFrame(json.loads(r.stdout)["zones"])
    z = result.zones
    mg_per_l = [ureg.Quantity(v, u.split(" as ")[0]).to("mg/L").magnitude
                for v, u in zip(z["estimate"], z["unit"], strict=True)]
    np.testing.assert_allclose(mg_per_l, cli["estimate"].astype(float), rtol=1e-12)
    assert z["verdict"].tolist() == cli["verdict"].tolist()


# --- options ---------------------------------------------------------------------------------

def test_compare_options_like_the_command_line(result):
    c = result.compare(seal="Upper sand", redevelop="Gravel (clogged):skin=0", intake="140 ft",
                       blend="200 gpm; nitrate=2 mg/L as N; arsenic=1 ug/L")
    names = c.table["option"].tolist()
    assert names[0] == "Base case"
    assert names[-4:] == ["Seal Upper sand", "Redevelop Gravel (clogged) (skin 0)",
                          "Intake at 140 ft", "Blend 200 gpm"]
    # other spellings of the same options give the same windows
    d = result.compare(redevelop={"zone": "Gravel (clogged)", "skin": 0},
                       intake=ureg.Quantity(140, "ft"),
                       blend={"rate": ureg.Quantity(200, "gallon/minute"), "nitrate": "2 mg/L as N",
                              "arsenic": "1 ug/L"}, include_project=False)
    e = result.compare(intake=140, include_project=False)
    cols = ["window low [gpm]", "window high [gpm]", "recommended [gpm]"]
    np.testing.assert_allclose(d.table[cols].to_numpy(float)[1:],
                               c.table[cols].to_numpy(float)[[-3, -2, -1]], rtol=1e-12)
    np.testing.assert_allclose(e.table[cols].to_numpy(float)[1],
                               c.table[cols].to_numpy(float)[-2], rtol=1e-12)
    # a combined option written as a [[scenarios]] entry
    f = result.compare(scenarios=[{"name": "Seal and blend", "seal": ["Upper sand"],
                                   "blend": {"rate": "300 gpm", "nitrate": "1 mg/L as N",
                                             "arsenic": "0.5 ug/L"}}], include_project=False)
    assert f.table["option"].tolist() == ["Base case", "Seal and blend"]


@pytest.mark.parametrize("kwargs, field", [
    ({"seal": "Nowhere"}, "seal"),
    ({"redevelop": "Gravel:skin=0"}, "redevelop"),
    ({"blend": "200 gpm; nitrate 2"}, "blend"),
    ({"intake": "deep"}, "intake"),
    ({"seal": ["Upper sand", "Upper sand"]}, "seal"),
    ({"scenarios": [{"name": "Deeper", "intake": "deep"}]}, "scenarios[1].intake"),
])
def test_bad_options_name_their_argument(result, kwargs, field):
    with pytest.raises(InputError) as err:
        result.compare(**kwargs)
    assert err.value.field == field and err.value.file == "compare()"


def test_sealing_every_zone_is_a_model_error(result):
    with pytest.raises(ModelError):
        result.compare(scenarios=[{"name": "all", "seal": result.project.zone_names}])


# --- texts -----------------------------------------------------------------------------------

def _objects(result):
    return [result, result.window, result.compare(seal="Upper sand"), result.plot,
            result.in_units("SI").window]


def test_reprs_are_short_and_carry_the_cautions(result):
    for obj in _objects(result):
        text = repr(obj)
        lines = text.splitlines()
        assert 1 <= len(lines) <= 30, text
        assert max(len(line) for line in lines) <= 100, text
        assert "..." not in text and "array(" not in text and "dtype" not in text, text
        if obj is not result.plot:
            assert "planning aid, not a compliance determination" in " ".join(text.split())
    assert str(result.window) == repr(result.window)


def test_window_summary_shows_the_decision(result):
    text = " ".join(repr(result.window).split())
    lo, hi = result.window.intervals.iloc[0, :2]
    assert f"{lo:.0f} gpm to {hi:.0f} gpm" in text
    assert result.window.intervals.iloc[0, 2] in text  # what limits the low end
    assert f"recommended rate: {result.window.recommended:.0f} gpm" in text
    assert " ".join(result.decision.split()) in text


def test_empty_window_says_why(result):
    p = result.project
    strict = dataclasses.replace(p, settings=dataclasses.replace(p.settings, margin=0.1))
    w = bq.analyse(strict, draws=50, seed=SEED).window
    assert w.empty and w.recommended is None and w.intervals.empty
    assert list(w.intervals.columns[:2]) == ["from [gpm]", "to [gpm]"]
    text = " ".join(repr(w).split())
    assert "no rate meets every criterion" in text and w.reason_empty in text
    assert "No pumping rate meets every limit" in text  # the decision sentence
    assert "planning aid" in text and "planning aid" in w._repr_html_()


def test_html_reprs_carry_the_full_cautions(result):
    import html

    for obj in _objects(result)[:3]:
        page = obj._repr_html_()
        for caution in bq.CAUTIONS:
            assert html.escape(caution) in page
        assert "<table>" in page


def test_html_escapes_user_text(result):
    p = result.project
    odd = dataclasses.replace(p, well=dataclasses.replace(p.well, name="<b>TH-2</b>"))
    r = bq.api.Result(dataclasses.replace(result.analysis, project=odd), "US")
    assert "&lt;b&gt;TH-2&lt;/b&gt;" in r.window._repr_html_()
    assert "<b>TH-2</b>" not in r.window._repr_html_()


def test_text_tables_are_the_reports(result):
    from blendq.report.assemble import window_display_table, zone_display_table

    pd.testing.assert_frame_equal(result.text_table("zones"),
                                  zone_display_table(result.analysis))
    pd.testing.assert_frame_equal(result.text_table("window"),
                                  window_display_table(result.analysis, "US"))
    with pytest.raises(InputError):
        result.text_table("everything")


# --- charts and report -----------------------------------------------------------------------

def test_matplotlib_only_when_a_chart_is_drawn():
    out = _fresh(
        "import sys, blendq as bq\n"
        "r = bq.analyse(bq.demo_path(), draws=20, seed=1)\n"
        "r.predict('300 gpm'); r.compare(seal='Upper sand'); repr(r); r.plot\n"
        "print('matplotlib' in sys.modules)\n"
        "fig = r.plot.quality(); print('matplotlib' in sys.modules, type(fig).__name__)")
    assert out.splitlines() == ["False", "True Figure"]


def test_every_chart_is_a_figure(result):
    from matplotlib.figure import Figure

    figures = [result.plot.quality(), result.plot.shares(), result.plot.levels(),
               result.plot.zones(), result.plot.step_drawdown(),
               result.plot.step_drawdown("drawdown"), result.compare(seal="Upper sand").plot()]
    for fig in figures:
        assert isinstance(fig, Figure) and fig.axes
    # one panel per fitted analyte in the quality chart
    assert len([ax for ax in figures[0].axes if ax.get_lines()]) == 2
    with pytest.raises(ModelError, match="water-level record"):
        result.plot.step_drawdown("record")  # the demo has no levels table
    with pytest.raises(InputError):
        result.plot.step_drawdown("pie")


def _tree(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.slow
def test_write_report_writes_the_cli_report(result, tmp_path):
    r = runner.invoke(app, ["report", str(bq.demo_path()), "--out", str(tmp_path / "cli"),
                            "--draws", str(DRAWS), "--seed", str(SEED)])
    assert r.exit_code == 0, r.output
    folder = result.write_report(tmp_path / "api")
    assert folder == (tmp_path / "api").resolve()
    assert _tree(folder) == _tree(tmp_path / "cli")  # byte for byte
    # a folder blendq did not write is refused before anything is written
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep")
    with pytest.raises(InputError):
        result.write_report(tmp_path / "mine")
    with pytest.raises(InputError):
        bq.check_report_folder(tmp_path / "mine", result.project)
    assert (tmp_path / "mine" / "notes.txt").read_text() == "keep"


# --- the window without each step; failure drivers; options of the command line --------------

def test_leave_one_step_out_table_in_display_units(result, si):
    t = result.leave_one_step_out()
    assert list(t["step"]) == ["none", "S1", "S2", "S3", "S4", "S5"]
    assert list(t.columns[:4]) == ["step", "results left out", "window low [gpm]",
                                   "window high [gpm]"]
    base = result.window.intervals
    np.testing.assert_allclose(t["window low [gpm]"].iloc[0], base.iloc[0, 0], rtol=1e-12)
    np.testing.assert_allclose(t["shift high [gpm]"].iloc[0], 0.0, atol=0)
    # the same reruns in SI: the rate columns relate by pint's gallon and minute
    s = si.leave_one_step_out()
    factor = ureg.Quantity(1.0, "gallon/minute").to("m**3/day").magnitude
    np.testing.assert_allclose(s["window high [m3/d]"].to_numpy(float),
                               t["window high [gpm]"].to_numpy(float) * factor, rtol=1e-9)


def test_lower_heads_option_and_blend_checked_before_the_run(result):
    comp = result.compare(lower_heads="5 ft", include_project=False)
    assert list(comp.table["option"]) == ["Base case", "Static heads 5 ft lower"]
    with pytest.raises(InputError) as err:
        result.compare(blend="200 gpm; nitrate=2 mg/L as N", include_project=False)
    assert err.value.field == "blend" and "arsenic" in err.value.message


def test_option_entries_join_the_project_scenarios(result):
    from blendq.api import option_entries

    entries = option_entries(result.project, seal="Upper sand", intake=118.0)
    assert entries == [("seal", {"name": "Seal Upper sand", "seal": ["Upper sand"]}),
                       ("intake", {"name": "Intake at 118 ft", "intake": "118 ft"})]


def test_window_weighs_the_demand(result):
    w = result.window
    assert w.demand == pytest.approx(600.0, rel=1e-12)
    assert w.demand_met is True and w.recommended == pytest.approx(w.demand, rel=1e-9)
    # a demand above the window's top end cannot be met: the rate stays below the end
    p = result.project
    big = dataclasses.replace(p, well=dataclasses.replace(
        p.well, demand=float(bq.parse_rates("900 gpm")[0])))
    w = bq.analyse(big, draws=DRAWS, seed=SEED).window
    assert w.demand == pytest.approx(900.0, rel=1e-9)
    assert w.demand_met is False and w.recommended < w.demand
    assert w.headroom == pytest.approx(0.05, abs=0) and w.headroom_kept
    assert w.recommended * 1.05 <= w.intervals["to [gpm]"].max() + 1e-9
