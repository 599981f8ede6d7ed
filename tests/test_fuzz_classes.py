"""Generated projects of known odd classes (tests/fuzz_projects.py: decimal commas in comma
files, repeated level times, flow-log rates against their step, steps out of order, project
files and cells at and beyond the size limits): each is read or refused as its class says,
with one located line, never another exception."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pandas as pd
import pytest
from fuzz_projects import FUZZ_EXAMPLES, US, input_classes, write_project
from hypothesis import HealthCheck, given, settings

from blendq.errors import InputError
from blendq.inputs.loader import load_project

GOOD = load_project(US)


@pytest.mark.slow
@settings(max_examples=max(FUZZ_EXAMPLES // 2, 20), deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(case=input_classes)
def test_input_class_is_read_or_refused_as_expected(case):
    files, (outcome, file, field) = case
    with tempfile.TemporaryDirectory() as tmp:
        folder = write_project(Path(tmp) / "project", files)
        try:
            project = load_project(folder)
        except InputError as err:
            assert outcome in ("rejected", "either", "any"), str(err)
            assert "\n" not in str(err)
            if file is not None:
                assert err.file == file, str(err)
            if field is not None:
                assert err.field == field, str(err)
            return
    assert outcome in ("read", "either", "any"), f"expected {outcome} of {file} {field}"
    if outcome == "read":
        pd.testing.assert_frame_equal(project.steps.drop(columns="source_row"),
                                      GOOD.steps.drop(columns="source_row"), rtol=1e-12,
                                      atol=0.0)
        pd.testing.assert_frame_equal(project.levels.drop(columns="source_row"),
                                      GOOD.levels.drop(columns="source_row"), rtol=1e-12,
                                      atol=0.0)
