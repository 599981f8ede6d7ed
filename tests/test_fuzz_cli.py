"""Fuzzing ``blendq check``: on a randomly mutated project the command exits 0, 1 or 2, never
3 (internal error), and never prints a traceback; a refusal is one ``blendq: error:`` line.

The default run uses a few hundred examples; the full run is
``BLENDQ_FUZZ_EXAMPLES=2000 pytest tests/test_fuzz_cli.py``.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest
from fuzz_projects import FUZZ_EXAMPLES, mutated_projects, write_project
from hypothesis import HealthCheck, given, settings
from typer.testing import CliRunner

from blendq.cli import app

runner = CliRunner()


@pytest.mark.slow
@settings(max_examples=FUZZ_EXAMPLES, suppress_health_check=[HealthCheck.too_slow,
                                                             HealthCheck.data_too_large])
@given(files=mutated_projects())
def test_check_on_mutated_project_never_fails_internally(files):
    with tempfile.TemporaryDirectory() as tmp:
        folder = write_project(Path(tmp) / "project", files)
        result = runner.invoke(app, ["check", str(folder)])
    assert result.exit_code in (0, 1, 2), result.output
    assert "Traceback" not in result.output
    assert "internal error" not in result.output
    if result.exit_code == 2:
        lines = result.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("blendq: error: "), result.output
