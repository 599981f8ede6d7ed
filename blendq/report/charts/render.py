"""A drawn chart as the report's files: PNG bytes and, if asked, SVG text, with the same bytes
for the same chart.

The report draws its charts in the main process, one after the other: on the 2-core
development machine, worker processes saved at most 0.2 s of ``blendq demo``'s 4.3 s when the
machine was idle and cost time under load (``benchmarks/bench_charts.py``).
"""

from __future__ import annotations

import io
from typing import TYPE_CHECKING

from blendq.report.document import Figure

if TYPE_CHECKING:
    from matplotlib.figure import Figure as MplFigure

__all__ = ["CHART_DPI", "chart_figure", "render_chart"]

CHART_DPI = 110.0  #: resolution of the chart images [dots per inch]


def render_chart(fig: MplFigure, svg: bool = True) -> tuple[bytes, str | None]:
    """A matplotlib figure as PNG bytes at :data:`CHART_DPI` and, if asked, SVG text.

    The figure is laid out once, for the PNG; the SVG keeps that layout. Neither file carries
    a date or a software version, and the SVG's element ids are not random, so the same chart
    gives the same bytes.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The chart (its layout engine is switched off after the PNG is written).
    svg : bool
        Also write the SVG.

    Returns
    -------
    png : bytes
    svg : str or None
    """
    png = io.BytesIO()
    fig.savefig(png, format="png", dpi=CHART_DPI, metadata={"Software": None})
    text = None
    if svg:
        from matplotlib import rc_context

        fig.set_layout_engine("none")  # keep the positions the PNG's layout found
        out = io.StringIO()
        # a fixed salt for the element ids (matplotlib draws them at random otherwise)
        with rc_context({"svg.hashsalt": "blendq"}):
            fig.savefig(out, format="svg", metadata={"Date": None, "Creator": None})
        text = out.getvalue()
    return png.getvalue(), text


def chart_figure(caption: str, fig: MplFigure, svg: bool = True, alt: str = "") -> Figure:
    """The document figure of a drawn chart.

    Parameters
    ----------
    caption : str
        Figure caption.
    fig : matplotlib.figure.Figure
        The chart.
    svg : bool
        Also keep the chart as SVG (the HTML report shows the SVG where there is one).
    alt : str
        Text alternative; defaults to the caption.
    """
    png, text = render_chart(fig, svg)
    return Figure(caption, alt=alt, png=png, svg=text)
