"""The API tour notebook (examples/api_tour.ipynb) runs from top to bottom, so it never rots.

The notebook is executed with nbclient in a kernel of the interpreter that runs the tests
(a kernelspec written for ``sys.executable``, found first through ``JUPYTER_PATH``), with the
blendq under test on the kernel's ``PYTHONPATH``. The stored notebook keeps no outputs.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")
kernelspec = pytest.importorskip("ipykernel.kernelspec")

import blendq  # noqa: E402

pytestmark = pytest.mark.example

ROOT = Path(blendq.__file__).resolve().parent.parent
NOTEBOOK = ROOT / "examples" / "api_tour.ipynb"


def test_notebook_is_stored_without_outputs():
    nb = nbformat.read(NOTEBOOK, as_version=4)
    nbformat.validate(nb)
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None, cell.id


def test_notebook_runs(tmp_path, monkeypatch):
    # the "python3" kernel of this interpreter, ahead of any other installed under that name
    kernelspec.write_kernel_spec(str(tmp_path / "jupyter" / "kernels" / "python3"))
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "jupyter"))
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join(
        p for p in (str(ROOT), os.environ.get("PYTHONPATH", "")) if p))
    nb = nbformat.read(NOTEBOOK, as_version=4)
    probe = nbformat.v4.new_code_cell(
        "import json, sys, blendq; print(json.dumps([sys.executable, blendq.__file__]))")
    nb.cells.append(probe)
    work = tmp_path / "work"
    work.mkdir()
    client = nbclient.NotebookClient(nb, kernel_name="python3", timeout=600,
                                     resources={"metadata": {"path": str(work)}})
    client.execute()  # raises CellExecutionError, with the cell and its traceback, on failure

    executable, module = json.loads(nb.cells[-1].outputs[0]["text"])
    assert Path(executable).resolve() == Path(sys.executable).resolve()
    assert Path(module).resolve() == Path(blendq.__file__).resolve()

    outputs = {cell.id: cell.outputs for cell in nb.cells if cell.cell_type == "code"}
    window = outputs["window"][0]["data"]
    assert "Operating window of TH-2" in window["text/plain"]
    assert "planning aid" in window["text/html"]
    assert "image/png" in outputs["plot"][-1]["data"]  # the Figure shows itself
    files = outputs["report"][0]["data"]["text/plain"]
    assert "report.html" in files and "report.pdf" in files and "summary.json" in files
