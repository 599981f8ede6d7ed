"""Each class of odd input a practitioner's files hold (tests/fuzz_projects.py
``fault_classes``: decimal commas in a comma file, repeated level times with other levels,
steps out of order, nested TOML and huge integers, long cells and units, a header unit against
the unit column, misspelt review rule names, two nitrate bases, absurd sample depths, odd and
long names) is read, or refused by ``blendq check`` with one ``blendq: error:`` line naming
the file (and the field the class names) and exit 2: never an internal error (exit 3), never a
traceback, never a changed input file."""

from __future__ import annotations

import hashlib
import tempfile
from pathlib import Path

import pytest
from fuzz_projects import fault_classes, write_project
from hypothesis import HealthCheck, given, settings
from typer.testing import CliRunner

from blendq.cli import app
from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.review.findings import review

runner = CliRunner()


def _digest(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.slow
@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(case=fault_classes)
def test_fault_class_is_read_or_refused_in_one_located_line(case):
    files, (outcome, file, field) = case
    with tempfile.TemporaryDirectory() as tmp:
        folder = write_project(Path(tmp) / "project", files)
        before = _digest(folder)
        try:
            review(load_project(folder))  # what `check` reads and reviews
            error = None
        except InputError as err:
            error = err
        result = runner.invoke(app, ["check", str(folder)])
        assert _digest(folder) == before  # inputs are read, never written
    assert "Traceback" not in result.output and "internal error" not in result.output
    if error is None:
        assert outcome in ("read", "either", "any"), f"expected {outcome} of {file} {field}"
        assert result.exit_code in (0, 1), result.output
        return
    assert outcome in ("rejected", "either", "any"), str(error)
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("blendq: error: "), result.output
    if file is not None:
        assert error.file == file and file in lines[0], lines[0]
    if field is not None:
        assert error.field == field, lines[0]
