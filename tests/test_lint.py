"""The code of the package, its tests, examples and benchmarks is clean under the project's
ruff rules (pyproject.toml, [tool.ruff]): the lint runs with the test suite, so CI enforces it."""

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_is_clean():
    exe = shutil.which("ruff") or shutil.which("ruff", path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.skip("ruff is not installed (it comes with the test extras)")
    run = subprocess.run([exe, "check", "blendq", "tests", "examples", "benchmarks"], cwd=ROOT,
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout + run.stderr
