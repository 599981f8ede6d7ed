"""Tests of blendq.report.chart_pool: charts drawn in worker processes are the charts drawn at home.

- the same job gives the same PNG and SVG bytes in the main process and in a worker;
- figures come back in the order of the jobs, whatever order the workers finish in;
- an error in a worker reaches the caller, and leaving the pool stops its workers.
"""

from __future__ import annotations

import multiprocessing as mp

import numpy as np
import pytest

from blendq.report.chart_pool import CHART_DPI, ChartJob, ChartPool, render_chart


def _line_chart(slope: float, label: str):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3.0, 2.0), layout="constrained")
    ax = fig.add_subplot()
    x = np.linspace(0.0, 10.0, 50)
    ax.plot(x, slope * x, label=label)
    ax.set_xlabel("rate [m³/d]")
    ax.legend()
    return fig


def _broken_chart():
    raise RuntimeError("cannot draw this")


class _Unpicklable(Exception):
    def __init__(self) -> None:
        super().__init__("holds a function")
        self.hook = lambda: None  # a lambda cannot be pickled


def _chart_with_odd_error():
    raise _Unpicklable()


def _jobs() -> list[ChartJob]:
    return [ChartJob(f"chart {k}", _line_chart, (float(k), f"slope {k}"), svg=k % 2 == 0)
            for k in range(5)]


def test_same_bytes_at_home_and_in_workers() -> None:
    home = [job.figure(render_chart(job)) for job in _jobs()]
    with ChartPool(2) as pool:
        away = pool.submit(_jobs())()
    assert [f.caption for f in away] == [f"chart {k}" for k in range(5)]  # job order kept
    for a, b in zip(home, away, strict=True):
        assert a.png == b.png
        assert a.svg == b.svg
    assert [f.svg is not None for f in away] == [True, False, True, False, True]


def test_png_resolution_and_no_version_stamp() -> None:
    import io

    from PIL import Image

    png, svg = render_chart(ChartJob("c", _line_chart, (1.0, "x")))
    with Image.open(io.BytesIO(png)) as img:
        assert img.size == (round(3.0 * CHART_DPI), round(2.0 * CHART_DPI))
    assert b"matplotlib" not in png.lower()
    assert svg is not None and "<dc:date>" not in svg


def test_no_pool_draws_in_this_process() -> None:
    with ChartPool(0) as pool:
        assert pool.submit(_jobs()[:1])()[0].png.startswith(b"\x89PNG")
        assert not mp.active_children()


def test_worker_error_reaches_the_caller_and_workers_stop() -> None:
    with pytest.raises(RuntimeError, match="cannot draw this"):
        with ChartPool(2) as pool:
            pool.submit([ChartJob("bad", _broken_chart)])()
    assert not mp.active_children()
    with pytest.raises(KeyError):
        with ChartPool(2):
            raise KeyError("an error in the main process while the workers wait")
    assert not mp.active_children()


def test_an_error_that_cannot_be_pickled_still_reaches_the_caller() -> None:
    with ChartPool(2) as pool:
        collect = pool.submit([ChartJob("odd", _chart_with_odd_error)])
        with pytest.raises(RuntimeError, match="_Unpicklable: holds a function"):
            collect()
        # the pool still works after it
        assert pool.submit(_jobs()[:1])()[0].png.startswith(b"\x89PNG")
    assert not mp.active_children()
