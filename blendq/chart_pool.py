"""Draw the report's charts in worker processes while the main process goes on.

Drawing the charts is the largest single cost of a report, and the analysis cannot be split
across processes, so the two overlap: a :class:`ChartPool` forks two workers before the
analysis starts; they import matplotlib and load the chart font while the main process fits
and samples; the charts are then handed to them as :class:`ChartJob` objects (a module-level
drawing function and its arguments, sent to the worker by pickling) and come back as PNG bytes
and SVG text. The main process meanwhile builds the text of the report.

Where the system cannot fork (Windows, macOS' default start method) or has one core, the pool
draws the charts in the main process when asked; the bytes are the same either way.
"""

from __future__ import annotations

import io
import multiprocessing as mp
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from blendq.document import Figure

__all__ = ["CHART_DPI", "ChartJob", "ChartPool", "render_chart"]

CHART_DPI = 110.0  #: resolution of the chart images [dots per inch]


@dataclass(frozen=True)
class ChartJob:
    """One chart of a report.

    Parameters
    ----------
    caption : str
        Figure caption.
    draw : callable
        A module-level function (so that it can be sent to a worker) returning a matplotlib
        :class:`~matplotlib.figure.Figure`.
    args : tuple
        Arguments of ``draw``.
    svg : bool
        Also write the chart as SVG (the HTML report shows the SVG where there is one).
    alt : str
        Text alternative; defaults to the caption.
    """

    caption: str
    draw: Callable[..., Any]
    args: tuple = ()
    svg: bool = True
    alt: str = ""

    def figure(self, rendered: tuple[bytes, str | None]) -> Figure:
        """The document figure holding this chart's rendered PNG (and SVG)."""
        png, svg = rendered
        return Figure(self.caption, alt=self.alt, png=png, svg=svg)


def render_chart(job: ChartJob) -> tuple[bytes, str | None]:
    """Draw a chart as PNG bytes at :data:`CHART_DPI` and, if asked, SVG text.

    The figure is laid out once, for the PNG; the SVG keeps that layout. Neither file carries
    a date or a software version, and the SVG's element ids are not random, so the same chart
    gives the same bytes.
    """
    fig = job.draw(*job.args)
    png = io.BytesIO()
    fig.savefig(png, format="png", dpi=CHART_DPI, metadata={"Software": None})
    svg = None
    if job.svg:
        from matplotlib import rc_context

        fig.set_layout_engine("none")  # keep the positions the PNG's layout found
        text = io.StringIO()
        # a fixed salt for the element ids (matplotlib draws them at random otherwise)
        with rc_context({"svg.hashsalt": "blendq"}):
            fig.savefig(text, format="svg", metadata={"Date": None, "Creator": None})
        svg = text.getvalue()
    return png.getvalue(), svg


def _warm_up() -> None:
    """Worker start: import matplotlib and load the chart font before the first chart comes."""
    from matplotlib.backends import backend_agg, backend_svg  # noqa: F401
    from matplotlib.figure import Figure as MplFigure

    fig = MplFigure(figsize=(1.0, 1.0))
    fig.text(0.5, 0.5, "0.5 m³/d", fontsize=8)
    fig.savefig(io.BytesIO(), format="png", dpi=20)


class ChartPool:
    """Two worker processes that draw charts, started when the pool is made.

    Use as a context manager; leaving it stops the workers, also on an error.

    Parameters
    ----------
    processes : int
        Number of workers; 0 draws in the calling process.
    """

    def __init__(self, processes: int = 2) -> None:
        self._pool: Any = None
        if (processes > 0 and (os.cpu_count() or 1) > 1
                and "fork" in mp.get_all_start_methods()):
            self._pool = mp.get_context("fork").Pool(processes, initializer=_warm_up)

    def __enter__(self) -> ChartPool:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Stop the workers (charts not yet collected are dropped)."""
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = None

    def submit(self, jobs: Sequence[ChartJob]) -> Callable[[], list[Figure]]:
        """Start drawing ``jobs``; returns a function that waits for them and gives the
        document figures in the order of ``jobs``."""
        jobs = list(jobs)
        if self._pool is None or not jobs:
            return lambda: [job.figure(render_chart(job)) for job in jobs]
        pending = self._pool.map_async(render_chart, jobs, chunksize=1)
        return lambda: [job.figure(r) for job, r in zip(jobs, pending.get(), strict=True)]
