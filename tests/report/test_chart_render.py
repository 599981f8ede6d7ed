"""Tests of blendq.report.charts.render, and of what a report promises while its charts are
drawn.

- the same chart gives the same PNG and SVG bytes; the PNG has the chart resolution and no
  software stamp, the SVG no date;
- an error while drawing reaches the user of ``blendq report`` as one line (exit code 3) and
  leaves no output folder; so does Ctrl-C (a real SIGINT), which leaves no process behind.
"""

from __future__ import annotations

import io
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

import blendq
from blendq.report.charts.render import CHART_DPI, chart_figure, render_chart

DEMO = Path(blendq.__file__).parent / "data" / "demo"


def _line_chart(slope: float, label: str):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3.0, 2.0), layout="constrained")
    ax = fig.add_subplot()
    x = np.linspace(0.0, 10.0, 50)
    ax.plot(x, slope * x, label=label)
    ax.set_xlabel("rate [m³/d]")
    ax.legend()
    return fig


def test_same_chart_same_bytes() -> None:
    first = chart_figure("chart", _line_chart(2.0, "slope 2"), alt="a line")
    again = chart_figure("chart", _line_chart(2.0, "slope 2"), alt="a line")
    assert first.png == again.png and first.svg == again.svg
    assert first.caption == "chart" and first.alt == "a line"
    other = chart_figure("chart", _line_chart(3.0, "slope 3"))
    assert other.png != first.png
    assert chart_figure("chart", _line_chart(2.0, "slope 2"), svg=False).svg is None


def test_png_resolution_and_no_version_stamp() -> None:
    png, svg = render_chart(_line_chart(1.0, "x"))
    with Image.open(io.BytesIO(png)) as img:
        assert img.size == (round(3.0 * CHART_DPI), round(2.0 * CHART_DPI))
    assert b"matplotlib" not in png.lower()
    assert svg is not None and "<dc:date>" not in svg and "<svg" in svg


#: ``blendq report`` on the demo project, with the zone-share chart replaced by argv[2]:
#: "error" raises while drawing, "sigint" sends this process a real SIGINT (Ctrl-C)
DRIVER = """
import os, signal, sys, time

import blendq.report.charts.quality as quality

out, what = sys.argv[1], sys.argv[2]


def zone_shares(*args, **kwargs):
    if what == "sigint":
        os.kill(os.getpid(), signal.SIGINT)
        time.sleep(60)  # the interrupt is delivered here (asynchronously, even under load)
    raise RuntimeError("the zone-share chart broke")


quality.zone_shares = zone_shares
# a Ctrl-C from a terminal: Python's own handler (a process started in the background by a
# non-interactive shell inherits SIGINT ignored, and Python then installs none)
signal.signal(signal.SIGINT, signal.default_int_handler)
from blendq.cli import main

sys.argv = ["blendq", "report", "--out", out, "--draws", "50", sys.argv[3]]
main()
"""


@pytest.mark.parametrize("what", ["error", "sigint"])
def test_failure_while_drawing_leaves_nothing_behind(tmp_path, what) -> None:
    out = tmp_path / "report"
    r = subprocess.run([sys.executable, "-c", DRIVER, str(out), what, str(DEMO)],
                       capture_output=True, text=True, timeout=120)
    assert "Traceback" not in r.stderr, r.stderr
    if what == "error":
        assert r.returncode == 3
        lines = r.stderr.strip().splitlines()
        assert len(lines) == 1 and "the zone-share chart broke" in lines[0], r.stderr
    else:
        assert r.returncode != 0 and "zone-share chart broke" not in r.stderr, r.stderr
    assert r.stdout == ""
    assert list(tmp_path.iterdir()) == []  # no report folder, no staging folder
    if Path("/proc").is_dir():  # no process left that was started for this report
        left = []
        for cmdline in Path("/proc").glob("[0-9]*/cmdline"):
            try:
                if str(out).encode() in cmdline.read_bytes():
                    left.append(cmdline.parent.name)
            except OSError:  # a process that ended meanwhile
                pass
        assert left == []
