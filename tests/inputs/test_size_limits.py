"""File-size limits of the inputs (docs/input-files.md, "Size limits"): a file is measured
before it is read, and an oversized one is refused with one line naming it."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from blendq.errors import InputError
from blendq.inputs import project_file, tables
from blendq.inputs.loader import load_project

US = Path(__file__).resolve().parents[1] / "data" / "projects" / "quillmarsh_us"


def test_table_file_larger_than_the_limit_is_refused(tmp_path, monkeypatch):
    project = tmp_path / "p"
    shutil.copytree(US, project)
    size = (project / "lab" / "samples.csv").stat().st_size
    monkeypatch.setattr(tables, "MAX_FILE_BYTES", size - 1)
    with pytest.raises(InputError, match="the limit for a table file is") as info:
        load_project(project)
    assert info.value.file == "lab/samples.csv"
    assert f"{size:,} bytes" in info.value.message and "\n" not in str(info.value)


def test_project_file_larger_than_the_limit_is_refused(tmp_path, monkeypatch):
    project = tmp_path / "p"
    shutil.copytree(US, project)
    size = (project / "project.toml").stat().st_size
    monkeypatch.setattr(project_file, "MAX_PROJECT_BYTES", size - 1)
    with pytest.raises(InputError, match="the limit for a project file is") as info:
        load_project(project)
    assert info.value.file == "project.toml"


def test_files_within_the_limits_are_read(tmp_path, monkeypatch):
    project = tmp_path / "p"
    shutil.copytree(US, project)
    monkeypatch.setattr(tables, "MAX_FILE_BYTES",
                        (project / "lab" / "samples.csv").stat().st_size)
    assert len(load_project(project).samples) > 0
