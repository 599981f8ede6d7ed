"""``--out`` refused before the analysis runs: a read-only parent, a parent that is a file, and
the project folder itself (the error names the option, not a table's file name)."""

from __future__ import annotations

import errno
import os
import subprocess
import sys
from pathlib import Path

import pytest

DEMO = Path(__file__).resolve().parents[1] / "blendq" / "data" / "demo"

#: ``blendq report``; argv: out folder, project, read-only folder (or ""). The analysis is
#: replaced by one that says it ran, so a refusal after it shows. A read-only folder is made
#: so by chmod for an ordinary user; root ignores permissions, so for root making a folder
#: there fails as on a read-only file system (EROFS).
DRIVER = """
import errno, os, sys

import blendq.cli as cli

out, project, readonly = sys.argv[1], sys.argv[2], sys.argv[3]


def analyse(*args, **kwargs):
    print("analysis ran", file=sys.stderr)
    raise SystemExit(99)


cli._analyse = analyse
if readonly and os.geteuid() == 0:
    mkdir = os.mkdir

    def refusing_mkdir(path, *args, **kwargs):
        if os.path.dirname(os.path.abspath(path)) == readonly:
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), path)
        return mkdir(path, *args, **kwargs)

    os.mkdir = refusing_mkdir
sys.argv = ["blendq", "report", "--out", out, project]
cli.main()
"""


def run(out: Path, project: Path, readonly: Path | None = None):
    return subprocess.run([sys.executable, "-c", DRIVER, str(out), str(project),
                           str(readonly or "")], capture_output=True, text=True, timeout=120)


def one_line_refusal(r) -> str:
    assert r.returncode == 2, r.stderr
    assert "analysis ran" not in r.stderr and "Traceback" not in r.stderr, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    return lines[0]


def test_read_only_parent_is_refused_before_the_analysis(tmp_path) -> None:
    parent = tmp_path / "shared"
    parent.mkdir()
    parent.chmod(0o555)
    try:
        line = one_line_refusal(run(parent / "report", DEMO, parent))
    finally:
        parent.chmod(0o755)
    assert "--out" in line and "cannot be created" in line, line
    assert os.strerror(errno.EROFS) in line or os.strerror(errno.EACCES) in line, line
    assert list(parent.iterdir()) == []


def test_parent_that_is_a_file_is_refused_before_the_analysis(tmp_path) -> None:
    (tmp_path / "notes.txt").write_text("x", encoding="utf-8")
    line = one_line_refusal(run(tmp_path / "notes.txt" / "report", DEMO))
    assert "--out" in line and "is a file, not a folder" in line, line


@pytest.mark.parametrize("inside", ["", "lab"])
def test_out_at_the_project_folder_names_the_option(tmp_path, inside) -> None:
    import shutil

    project = tmp_path / "project"
    shutil.copytree(DEMO, project)
    (project / "lab").mkdir(exist_ok=True)
    if inside:  # an output folder whose replacement would delete an input file in it
        shutil.move(project / "samples.csv", project / "lab" / "samples.csv")
        text = (project / "project.toml").read_text(encoding="utf-8")
        (project / "project.toml").write_text(text.replace('"samples.csv"', '"lab/samples.csv"'),
                                              encoding="utf-8")
    line = one_line_refusal(run(project / inside if inside else project, project))
    assert line.startswith("blendq: error: option --out:"), line
    assert "input file" in line, line
