"""Fuzzing the loader: a randomly mutated project either loads or raises one located
InputError, never another exception.

The default run uses a few hundred examples; the full run is
``BLENDQ_FUZZ_EXAMPLES=2000 pytest tests/test_fuzz_loader.py``.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from fuzz_projects import FUZZ_EXAMPLES, mutated_projects, write_project
from hypothesis import HealthCheck, given, settings

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.project import Project


@pytest.mark.slow
@settings(max_examples=FUZZ_EXAMPLES, suppress_health_check=[HealthCheck.too_slow,
                                                             HealthCheck.data_too_large])
@given(files=mutated_projects())
def test_mutated_project_loads_or_raises_input_error(files):
    with tempfile.TemporaryDirectory() as tmp:
        folder = write_project(Path(tmp) / "project", files)
        try:
            project = load_project(folder)
        except InputError as err:
            message = str(err)
            assert message and "\n" not in message and "\r" not in message
            assert err.file, "an input error names its file"
            return
    assert isinstance(project, Project)
    assert len(project.steps) >= 1
    assert project.steps["rate"].map(lambda q: 0 <= q < float("inf")).all()
