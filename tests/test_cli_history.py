"""Tests of `blendq history` and the API's history methods on the demo project."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

from typer.testing import CliRunner

import blendq
from blendq.api import analyse, demo_path, load_project
from blendq.cli import app

DEMO = Path(blendq.__file__).parent / "data" / "demo"
runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})


def test_history_command_prints_models_forecast_check_and_cautions():
    r = runner.invoke(app, ["history", str(DEMO), "--draws", "100"])
    assert r.exit_code == 0, r.output
    lines = r.stdout.splitlines()
    assert lines[0].startswith("Nitrate (as N): Results used: 118; Time model (AICc): ")
    assert any("Mann-Kendall S, p: " in ln for ln in lines)
    assert any(ln.startswith("Rates that stay compliant longest: ") for ln in lines)
    assert any(ln.startswith("Predictive check: ") for ln in lines)
    assert any("40 CFR 141.23(d)(2)" in ln for ln in lines)
    assert lines[-1].startswith("Caution: blendq is a planning aid")


def test_history_json():
    r = runner.invoke(app, ["history", str(DEMO), "--draws", "100", "--json"])
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    assert data["years"] == list(range(2026, 2036))
    assert len(data["compliant"]) == 10
    assert len(data["compliant"][0]) == len(data["rates_m3_per_day"])
    assert {t["analyte"] for t in data["trend_tests"]} == {"nitrate", "arsenic"}
    assert data["cautions"]


def test_history_without_a_history_is_a_one_line_error(tmp_path):
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder)
    toml = (folder / "project.toml").read_text(encoding="utf-8")
    toml = "\n".join(ln for ln in toml.splitlines()
                     if not ln.startswith(("history =", "pumplog =")))
    (folder / "project.toml").write_text(toml, encoding="utf-8")
    r = runner.invoke(app, ["history", str(folder)])
    assert r.exit_code == 2
    assert "no monitoring history" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1


def test_api_forecast_and_models():
    res = analyse(load_project(demo_path()), draws=100, units="SI")
    fc = res.forecast()
    assert fc is not None and fc.best_rate is not None
    assert any("m³/d" in s for s in fc.sentences) and not any("gpm" in s for s in fc.sentences)
    models = res.history_models()
    assert list(models["Analyte"]) == ["Nitrate (as N)", "Arsenic"]
