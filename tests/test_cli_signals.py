"""SIGTERM and SIGHUP to ``blendq report``: one line, exit code 128 + signal, no traceback, no
hidden partial or old folder beside the output, no process left behind.

The signal is sent by the process to itself from a patched step (writing the first output
file, or removing the old output being replaced), so the test does not depend on timing.
"""

from __future__ import annotations

import signal
import subprocess
import sys
from pathlib import Path

import pytest

from blendq.report.outputs import MARKER_NAME

DEMO = Path(__file__).resolve().parents[1] / "blendq" / "data" / "demo"

#: ``blendq report`` on the demo; argv: out folder, signal name, step at which it is sent
DRIVER = """
import os, signal, sys, time

import blendq.report.outputs as outputs

out, name, when = sys.argv[1], sys.argv[2], sys.argv[3]
sent = []


def send():
    if not sent:
        sent.append(1)
        os.kill(os.getpid(), getattr(signal, name))
        if when == "write":
            time.sleep(60)  # the signal is delivered here (it is not held while writing)


write_file = outputs._write_file


def _write_file(path, data):
    if when == "write":
        send()
    write_file(path, data)


class Shutil:  # the old output's removal sends the signal (held until the swap is done)
    def __getattr__(self, attr):
        import shutil
        return getattr(shutil, attr)

    def rmtree(self, path, *args, **kwargs):
        import shutil
        if when == "remove" and ".old-" in str(path):
            send()
        return shutil.rmtree(path, *args, **kwargs)


outputs._write_file = _write_file
outputs.shutil = Shutil()
from blendq.cli import main

sys.argv = ["blendq", "report", "--out", out, "--draws", "40", sys.argv[4]]
main()
"""


def _processes_naming(text: str) -> list[str]:
    left = []
    for cmdline in Path("/proc").glob("[0-9]*/cmdline"):
        try:
            if text.encode() in cmdline.read_bytes():
                left.append(cmdline.parent.name)
        except OSError:  # a process that ended meanwhile
            pass
    return left


@pytest.mark.parametrize(("name", "when"), [("SIGTERM", "write"), ("SIGHUP", "write"),
                                            ("SIGTERM", "remove")])
def test_stop_signal_leaves_no_partial_folder(tmp_path, name, when) -> None:
    out = tmp_path / "report"
    if when == "remove":  # an earlier output of blendq, to be replaced
        out.mkdir()
        (out / MARKER_NAME).write_text("written by blendq\n", encoding="utf-8")
        (out / "report.html").write_text("old", encoding="utf-8")
    r = subprocess.run([sys.executable, "-c", DRIVER, str(out), name, when, str(DEMO)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 128 + getattr(signal, name), r.stderr
    assert "Traceback" not in r.stderr, r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and f"stopped by {name}" in lines[0], r.stderr
    if when == "write":  # stopped while writing: no output at all, nothing hidden
        assert list(tmp_path.iterdir()) == []
    else:  # stopped while the old output was removed: the new one complete, the old gone
        assert [p.name for p in tmp_path.iterdir()] == ["report"]
        assert (out / "report.pdf").is_file()
        assert (out / "report.html").read_text(encoding="utf-8") != "old"
    if Path("/proc").is_dir():
        assert _processes_naming(str(out)) == []
