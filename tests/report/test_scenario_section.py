"""Tests of the scenario report section (blendq.report.scenario_section) and the compare command."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

import blendq
from blendq.cli import app
from blendq.decide import scenarios as sc
from blendq.decide.analysis import analyse
from blendq.inputs.loader import load_project
from blendq.report.document import Figure, Paragraph, Table
from blendq.report.scenario_section import (
    comparison_display_table,
    scenario_section,
    widest_sentence,
)

DEMO = Path(blendq.__file__).parent / "data" / "demo"
runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})


@pytest.fixture(scope="module")
def setup():
    # no temporal variability of the water (lab error only), so that the demo's base case has
    # a window; at the default temporal CV every option of the demo is empty
    demo = load_project(DEMO)
    demo = replace(demo, settings=replace(demo.settings, temporal_cv={"default": 0.0}))
    a = analyse(demo, draws=100)
    return a, sc.compare(a)


def test_section_has_sentence_table_and_chart(setup):
    a, comp = setup
    section = scenario_section(a, comp, "US")
    assert section.key == "scenarios"
    kinds = [type(b) for b in section.blocks]
    assert kinds[0] is Paragraph and Table in kinds and Figure in kinds
    k = int(np.argmax(comp.table["window_width"]))
    assert f'"{comp.table["scenario"].iloc[k]}"' in section.blocks[0].text
    table = next(b for b in section.blocks if isinstance(b, Table))
    assert list(table.data["Option"]) == list(comp.table["scenario"])


def test_display_table_units(setup):
    a, comp = setup
    us = comparison_display_table(comp, "US")
    si = comparison_display_table(comp, "SI")
    assert us["Recommended"].iloc[0].endswith("gpm")
    assert si["Recommended"].iloc[0].endswith("m³/d")
    # 1 gpm = 5.450992969 m^3/d (NIST SP 811 gallon); both printed to 3 significant digits
    # (as the CLI and the charts), SI thousands grouped by a narrow no-break space
    gpm = float(us["Recommended"].iloc[0].rsplit(" ", 1)[0].replace(",", ""))
    m3d_text = si["Recommended"].iloc[0].rsplit(" ", 1)[0]
    assert "," not in m3d_text
    m3d = float(m3d_text.replace("\u202f", ""))
    assert m3d == pytest.approx(gpm * 5.450992969, rel=1e-2)
    assert gpm == pytest.approx(comp.results[0].window.recommended / 5.450992969, rel=5e-3)
    assert us["Nitrate (as N) median"].iloc[0].endswith("mg/L")
    assert us["Arsenic median"].iloc[0].endswith("ug/L")
    # an empty window reads "none" when the data decide it, else "cannot tell"
    empty = [i for i, r in enumerate(comp.results) if r.window.empty]
    assert empty
    assert all(us["Operating window"].iloc[i] == ("cannot tell" if comp.results[i].cannot_tell
                                                  else "none") for i in empty)


def test_widest_sentence_when_base_is_widest(setup):
    a, comp = setup
    only_base = sc.compare(a, [])
    assert "None of the options widens" in widest_sentence(only_base)


def test_cli_compare_text_and_json():
    res = runner.invoke(app, ["compare", str(DEMO), "--draws", "60", "--seal", "Deep sand",
                              "--blend", "300 gpm; nitrate=1 mg/L as N; arsenic=0.5 ug/L"])
    assert res.exit_code == 0, res.output
    assert "Base case (as tested)" in res.output
    assert "Seal Deep sand" in res.output and "Blend 300 gpm" in res.output
    assert "opens the widest operating window" in res.output
    res = runner.invoke(app, ["compare", str(DEMO), "--draws", "60", "--json",
                              "--redevelop", "Gravel (clogged):factor=2"])
    assert res.exit_code == 0, res.output
    rows = json.loads(res.output)["comparison"]
    assert [r["scenario"] for r in rows][0] == sc.BASE_NAME
    assert rows[-1]["scenario"] == "Redevelop Gravel (clogged) (factor 2)"
    assert len(rows) == 1 + len(load_project(DEMO).scenarios) + 1


@pytest.mark.parametrize("args, field", [
    (["--redevelop", "Gravel:skin=0"], "--redevelop"),
    (["--redevelop", "Gravel (clogged)"], "--redevelop"),
    (["--redevelop", "Gravel (clogged):skin=zero"], "--redevelop"),
    (["--blend", "nitrate=2 mg/L as N"], "--blend"),
    (["--blend", "200 gpm; nitrate 2"], "--blend"),
    (["--seal", "Nowhere"], "--seal"),
])
def test_cli_compare_bad_options(args, field):
    res = runner.invoke(app, ["compare", str(DEMO), "--draws", "20", *args])
    assert res.exit_code == 2
    assert f"option {field}:" in res.output  # a command-line option, named as such


def test_limited_by_names_both_ends(setup):
    a, comp = setup
    us = comparison_display_table(comp, "US")
    for res, full in zip(comp.results, us["Window limited by"], strict=True):
        w = res.window
        # the zones water cascades from follow what limits the window
        text, _, cascade = full.partition("; water cascades from ")
        named = [part.split(" from ")[0] for part in cascade.split(", ")] if cascade else []
        assert named == [z for z, _, _ in w.cascading]
        if res.cannot_tell:  # the data cannot decide the option: no ends to name
            assert text.startswith("cannot tell: ")
        elif w.intervals:  # what closes the lowest end and what closes the highest end
            assert text == f"low end: {w.intervals[0][2]}; high end: {w.intervals[-1][3]}"
        else:
            assert text == (w.reason_empty or "no rate meets every criterion")
    assert list(comp.table["lower_end_set_by"][:1]) == [comp.results[0].window.intervals[0][2]]


def test_cannot_tell_option_in_section_and_cli(setup):
    # on the demo the nitrate zones are not resolved (discharge samples only); sealing the
    # gravel changes the shares into combinations no sample saw
    a, _ = setup
    seal = sc.parse_scenario({"name": "Seal the gravel", "seal": ["Gravel (clogged)"]}, 1,
                             a.project)
    comp = sc.compare(a, [seal])
    assert comp.results[1].cannot_tell and not comp.results[0].cannot_tell
    section = scenario_section(a, comp, "US")
    texts = [b.text for b in section.blocks if isinstance(b, Paragraph)]
    assert any(t.startswith("Cannot tell:") for t in texts)
    line = next(t for t in texts if t.startswith('"Seal the gravel": cannot tell'))
    assert "What would tell:" in line and "depth sample between" in line and " ft " in line
    si = scenario_section(a, comp, "SI")
    assert any(" m and " in b.text for b in si.blocks if isinstance(b, Paragraph)
               and b.text.startswith('"Seal the gravel"'))
    res = runner.invoke(app, ["compare", str(DEMO), "--draws", "60", "--seal", "Gravel (clogged)"])
    assert res.exit_code == 0, res.output
    assert "window cannot tell; recommended -" in res.output
    assert "  what would tell: " in res.output
    told = next(ln for ln in res.output.splitlines() if "The data cannot tell whether" in ln)
    assert '"Seal Gravel (clogged)"' in told.split("The data cannot tell whether")[1]


# ------------------------------------------------------------------- a new pump
PUMP_DATA = Path(__file__).parents[1] / "data" / "pump"


@pytest.fixture(scope="module")
def pumped(tmp_path_factory):
    from inputs.test_pump_file import pump_project

    from blendq.api import analyse as api_analyse

    folder = pump_project(tmp_path_factory.mktemp("sectionpump"))
    (folder / "curve-b.csv").write_text((PUMP_DATA / "curve-b.csv").read_text())
    return folder, api_analyse(folder, draws=100, seed=7)


def test_new_pump_in_section_and_api(pumped):
    folder, result = pumped
    comp = result.compare(new_pump=[folder / "curve-b.csv", "curve-b.csv; intake=150 ft"],
                          include_project=False)
    names = list(comp.table["option"])
    assert names == [sc.BASE_NAME, "New pump curve-b.csv", "New pump curve-b.csv, intake at 150 ft"]
    t = comp.table
    assert {"drive setting [Hz]", "energy at setting [kWh/1,000 gal]",
            "pump rate at highest frequency [gpm]"} <= set(t.columns)
    # kWh per 1,000 US gal = kWh/m3 x 3.785411784
    raw = comp.comparison.table["pump_kwh_per_m3"].to_numpy(float)
    np.testing.assert_allclose(t["energy at setting [kWh/1,000 gal]"], raw * 3.785411784,
                               rtol=1e-12)
    lines = comp.pump_lines()
    assert len(lines) == 2 and "for the current pump at its own setting" in lines[0]
    assert "less per volume" in lines[0] and "cheapest compliant setting" in lines[0]
    section = scenario_section(result.analysis, comp.comparison, "SI")
    text = " ".join(b.text for b in section.blocks if isinstance(b, Paragraph))
    assert "A new pump meets the system curve" in text and "kWh/m3" in text
    (table,) = [b for b in section.blocks if isinstance(b, Table)]
    col = table.data["Pump: drive setting; energy at setting"]
    assert col.iloc[0].endswith("kWh/m3") and "Hz all year" in col.iloc[1]
    si = comparison_display_table(comp.comparison, "SI-L/s")
    assert "L/s at 60 Hz" in si["Pump delivers"].iloc[1]
    assert (si["Drive setting"].iloc[1:] != "-").all()


def test_cli_compare_new_pump(pumped, monkeypatch):
    folder, _ = pumped
    monkeypatch.chdir(folder)
    res = runner.invoke(app, ["compare", str(folder), "--draws", "60", "--seed", "7",
                              "--new-pump", "curve-b.csv; rated_speed=3550 rpm"])
    assert res.exit_code == 0, res.output
    assert "New pump curve-b.csv (new pump (curve-b.csv, 3550 rpm, 35 to 60 Hz))" in res.output
    assert "  pump: drive " in res.output and "kWh/1,000 gal" in res.output
    assert "for the current pump at its own setting" in res.output
    res = runner.invoke(app, ["compare", str(folder), "--draws", "60", "--json",
                              "--new-pump", "curve-b.csv"])
    rows = json.loads(res.output)["comparison"]
    assert rows[0]["pump_curve"] == "curve.csv" and rows[-1]["pump_curve"] == "curve-b.csv"
    assert rows[-1]["pump_setting"] > 0


@pytest.mark.parametrize("value, says", [
    ("intake=150 ft", "does not start with the pump curve"),
    ("nowhere.csv", "does not exist"),
    ("curve-b.csv; motor_efficiency=high", "not a plain number"),
    ("curve-b.csv; speed", "is not KEY=VALUE"),
])
def test_cli_compare_bad_new_pump(pumped, monkeypatch, value, says):
    folder, _ = pumped
    monkeypatch.chdir(folder)
    res = runner.invoke(app, ["compare", str(folder), "--draws", "20", "--new-pump", value])
    assert res.exit_code == 2
    assert "option --new-pump:" in res.output and says in res.output
