"""Tests of blendq.inputs.template: the template project loads and is never written over."""

from __future__ import annotations

import pytest

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.template import PROJECT_TOML, TABLES, write_template

FT = 0.3048  # m, exact (NIST SP 811 appendix B)
GPM = 231 * 0.0254**3 * 1440  # m^3/d per gpm; US gallon = 231 in^3 exactly (NIST SP 811)


def test_template_round_trip(tmp_path):
    folder = tmp_path / "new well"
    written = write_template(folder)
    assert sorted(p.name for p in written) == sorted(["project.toml", *TABLES])
    project = load_project(folder)
    assert project.zone_names == ["Upper sand", "Lower gravel"]
    assert project.well.pump_intake_depth == pytest.approx(160 * FT, rel=1e-12)
    assert list(project.steps["rate"]) == pytest.approx([150 * GPM, 300 * GPM], rel=1e-12)
    for table in (project.samples, project.flowlogs, project.levels, project.field_readings):
        assert 1 <= len(table) <= 4
    assert project.samples["nondetect"].tolist() == [False] * 4
    assert project.limits[-1].authority == "Example water system"


def test_template_refuses_to_overwrite(tmp_path):
    write_template(tmp_path)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    with pytest.raises(InputError, match="will not overwrite") as info:
        write_template(tmp_path)
    assert info.value.file == "project.toml"
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


def test_one_existing_file_stops_all_writing(tmp_path):
    (tmp_path / "samples.csv").write_text("mine\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        write_template(tmp_path)
    assert info.value.file == "samples.csv"
    assert [p.name for p in tmp_path.iterdir()] == ["samples.csv"]
    assert (tmp_path / "samples.csv").read_text(encoding="utf-8") == "mine\n"


def test_folder_that_is_a_file(tmp_path):
    target = tmp_path / "project"
    target.write_text("", encoding="utf-8")
    with pytest.raises(InputError, match="is a file"):
        write_template(target)


def test_template_says_the_margin_applies_to_the_users_limit(tmp_path):
    write_template(tmp_path)
    project = load_project(tmp_path)
    target = project.limits[-1]
    assert (target.value, target.unit, project.settings.margin) == (8.0, "mg/L", 0.8)
    # the figures the template's comment states are the ones the settings give
    held = target.value * project.settings.margin
    assert held == pytest.approx(6.4, rel=1e-12)
    assert "0.8 x 8 = 6.4 mg/L as N" in PROJECT_TOML and "8 / 0.8 = 10" in PROJECT_TOML


def test_template_has_thin_data_and_names_its_setting(tmp_path):
    write_template(tmp_path)
    project = load_project(tmp_path)
    assert project.settings.min_window_steps == 3
    assert project.samples["step"].nunique() == 2 < project.settings.min_window_steps
    assert "min_window_steps" in PROJECT_TOML and "common practice" in PROJECT_TOML


def test_template_points_to_no_file_that_pip_does_not_install():
    # the package installs blendq/ only (pyproject: packages blendq*, package data data/**);
    # a pointer to docs/ would name a file a user does not have
    assert "docs/" not in PROJECT_TOML and ".md" not in PROJECT_TOML
    assert "`blendq docs input-files`" in PROJECT_TOML
    assert "`blendq docs scenarios`" in PROJECT_TOML


def test_template_points_to_the_optional_history_pumplog_and_plan(tmp_path):
    assert '# history = "history.csv"' in PROJECT_TOML
    assert '# pumplog = "pumplog.csv"' in PROJECT_TOML
    assert "# [plan]" in PROJECT_TOML and "blendq docs input-files" in PROJECT_TOML
    # the commented [plan] example is valid as written: uncommented, the project plans
    from blendq.inputs.plan_file import load_for_planning

    write_template(tmp_path)
    start = PROJECT_TOML.index("# [plan]")
    block = "\n".join(line[2:] if line.startswith("# ") else line.lstrip("#")
                      for line in PROJECT_TOML[start:].splitlines())
    (tmp_path / "project.toml").write_text(PROJECT_TOML[:start] + block + "\n",
                                           encoding="utf-8")
    project, inputs, finished = load_for_planning(tmp_path)
    assert finished  # the template has a steps table: the plan names the next measurement
    assert inputs.budget == 12000
    assert set(inputs.chemistry) == {"Upper sand", "Lower gravel"}
    assert inputs.analytes == ["nitrate", "arsenic"]
