"""Tests of the [plan] table of the project file."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from blendq.errors import InputError
from blendq.inputs.plan_file import load_for_planning, read_plan

EXAMPLE = Path(__file__).resolve().parents[2] / "blendq" / "data" / "plan"


def test_example_plan_reads_in_base_units():
    project, plan, finished = load_for_planning(EXAMPLE)
    assert not finished
    assert project.steps.empty and project.samples.empty
    # 1500 ft2/d = 1500 x 0.3048^2 m2/d (exact foot, NIST SP 811)
    np.testing.assert_allclose(plan.transmissivity["Upper sand"],
                               (1500 * 0.3048**2, 4000 * 0.3048**2), rtol=1e-12)
    # 1 ug/L = 1e-3 mg/L; nitrate as N is the canonical basis
    np.testing.assert_allclose(plan.chemistry["Upper sand"]["arsenic"], (1e-3, 4e-3), rtol=1e-12)
    np.testing.assert_allclose(plan.chemistry["Upper sand"]["nitrate"], (8.0, 14.0), rtol=1e-12)
    assert plan.analytes == ["nitrate", "arsenic"]
    assert plan.budget == 12000
    assert plan.costs == {"lab_sample": 250, "flowlog_run": 1500, "rig_hour": 200}
    np.testing.assert_allclose(plan.min_step_hours, 2.0, rtol=1e-12)


def test_a_project_without_plan_table_has_empty_inputs():
    demo = Path(__file__).resolve().parents[2] / "blendq" / "data" / "demo"
    project, plan, finished = load_for_planning(demo)
    assert finished and len(project.steps)
    assert plan.transmissivity == {} and plan.budget is None


def _write(tmp_path, extra: str) -> Path:
    text = (EXAMPLE / "project.toml").read_text(encoding="utf-8")
    text = text[:text.index("[plan]")] + extra
    (tmp_path / "project.toml").write_text(text, encoding="utf-8")
    return tmp_path


@pytest.mark.parametrize("extra, field", [
    ('[plan]\nbudget = -5\n', "plan.budget"),
    ('[plan]\nbudgt = 5\n', "plan.budgt"),
    ('[plan]\n[[plan.zones]]\nzone = "Nowhere"\n', "plan.zones[1].zone"),
    ('[plan]\n[[plan.zones]]\nzone = "Upper sand"\ntransmissivity = ["4000 ft2/d"]\n',
     "plan.zones[1].transmissivity"),
    ('[plan]\n[[plan.zones]]\nzone = "Upper sand"\nnitrate = ["9 mg/L", "3 mg/L"]\n',
     "plan.zones[1].nitrate"),
    ('[plan]\n[[plan.zones]]\nzone = "Upper sand"\narsenic = "3 ug/L"\n',
     "plan.zones[1].arsenic"),
    ('[plan]\nrig_hour_cost = "200 USD"\n', "plan.rig_hour_cost"),
    ('[plan]\n[[plan.zones]]\nzone = "Upper sand"\nnitrate = ["1 ft", "3 mg/L"]\n',
     "plan.zones[1].nitrate"),
])
def test_bad_plan_entries_name_the_field(tmp_path, extra, field):
    folder = _write(tmp_path, extra)
    with pytest.raises(InputError) as err:
        read_plan(folder, ["Upper sand", "Silty sand", "Gravel", "Deep sand"])
    assert err.value.field == field
    assert err.value.file == "project.toml"
