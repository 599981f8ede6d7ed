"""A demo wellfield well with the test pump of tests/data/pump (curve and [pump] table)
appended to its project: what the tests of a well's energy use."""

from __future__ import annotations

import shutil
from pathlib import Path

TESTS = Path(__file__).resolve().parent
EXAMPLE = TESTS.parent / "examples" / "wellfield"


def well_with_test_pump(folder: Path, name: str = "TH-9") -> Path:
    """Copy the demo wellfield's well ``name`` into ``folder`` with the test pump; returns the
    project folder."""
    data = TESTS / "data" / "pump"
    project = folder / name
    shutil.copytree(EXAMPLE / name, project)
    shutil.copy(data / "curve.csv", project / "curve.csv")
    with open(project / "project.toml", "a", encoding="utf-8") as f:
        f.write("\n" + (data / "pump.toml").read_text(encoding="utf-8"))
    return project
