"""`blendq plan` and the planning API (``blendq.api.plan_test``)."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from blendq.api import demo_path, plan_test
from blendq.cli import app

runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})
EXAMPLE = Path(demo_path()).parent / "plan"


def test_plan_a_new_test_writes_the_field_sheet(tmp_path):
    out = tmp_path / "sheet"
    r = runner.invoke(app, ["plan", str(EXAMPLE), "--budget", "6000", "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert "Planned test:" in r.output and "of a budget of 6,000" in r.output
    assert "window high end near" in r.output
    assert "planning aid, not a compliance determination" in r.output
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        "candidates.csv", "fieldsheet.csv", "fieldsheet.pdf", "plan.txt"]


def test_plan_after_a_test_ranks_the_next_measurement():
    r = runner.invoke(app, ["plan", str(demo_path()), "--json"])
    assert r.exit_code == 0, r.output
    data = json.loads(r.output)
    assert data["plan"][0] == "The finished test leaves:"
    assert any("most value" in line for line in data["plan"])
    assert data["cautions"]


def test_plan_bad_budget_is_an_input_error():
    r = runner.invoke(app, ["plan", str(EXAMPLE), "--budget", "100"])
    assert r.exit_code == 2
    assert "budget" in r.output


def test_api_plan_in_si():
    p = plan_test(EXAMPLE, budget=6000, units="SI")
    assert p.units == "SI"
    assert p.field_sheet.attrs["units"]["rate"] == "m**3/d"
    assert "m³/d" in repr(p)


def test_other_commands_refuse_a_project_that_only_plans():
    r = runner.invoke(app, ["check", str(EXAMPLE)])
    assert r.exit_code == 2
    assert "tables.steps" in r.output and "blendq plan" in r.output


def test_plan_in_a_fresh_process():
    # a new interpreter imports the modules in the command's own order (hidden cycles show)
    import subprocess
    import sys

    r = subprocess.run([sys.executable, "-m", "blendq", "plan", str(EXAMPLE), "--budget",
                        "6000"], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert "Traceback" not in r.stderr and "Planned test" in r.stdout
