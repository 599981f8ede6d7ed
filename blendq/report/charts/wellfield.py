"""Wellfield overview chart: every well's operating window on one rate axis.

One row per well, grouped by entry point (each entry point its own colour and hatch, from the
Okabe-Ito palette of :mod:`blendq.report.charts.quality`): a thin grey rail over the rates the
well's hydraulic and pump criteria allow, the operating window as a bar on it, the recommended
rate as a black bar across the row, the blending plan's rate (when there is a plan) as a
white diamond; a well without a window or whose analysis failed says so
in its row. The cautions run along the foot of the figure. matplotlib is imported lazily.

References
----------
Okabe, M. and Ito, K. (2008) Color Universal Design (CUD). https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

import textwrap
from typing import TYPE_CHECKING

import numpy as np

from blendq import CAUTIONS
from blendq.errors import InputError
from blendq.report.charts import plain_text
from blendq.report.charts.quality import (
    BLACK,
    BLUE,
    GREEN,
    ORANGE,
    PURPLE,
    SKY,
    VERMILLION,
    _figure,
    _rate,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = ["ENTRY_STYLES", "caution_footer", "wellfield_chart"]

#: (colour, hatch) per entry point: neighbours differ in hue, lightness and hatch
ENTRY_STYLES = [(BLUE, ""), (ORANGE, "////"), (GREEN, "...."), (PURPLE, "xxx"), (SKY, "\\\\\\\\")]
#: rail of the rates the hydraulic and pump criteria allow
RAIL_COLOUR = "#b8b8b8"
#: characters of a failed well's error shown in its row
ERROR_CHARS = 90
#: legend entries per line, and the height of a legend line in chart rows
LEGEND_COLUMNS = 4
LEGEND_ROW = 0.75


def caution_footer(width: int = 150) -> str:
    """The cautions every output carries, wrapped for a chart's foot."""
    text = "Caution: " + " ".join([CAUTIONS[0], CAUTIONS[1], CAUTIONS[3]])
    return "\n".join(textwrap.wrap(text, width))


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [a, b] of the True runs of ``mask``."""
    edges = np.flatnonzero(np.diff(np.r_[0, mask.astype(int), 0]))
    return [(int(a), int(b) - 1) for a, b in zip(edges[::2], edges[1::2], strict=True)]


def wellfield_chart(outcomes, units: str = "US", title: str | None = None,
                    planned: dict[str, float] | None = None) -> Figure:
    """Each well's operating window as a horizontal bar on a common rate axis.

    Parameters
    ----------
    outcomes : list of :class:`blendq.decide.batch.WellOutcome`
        In the wellfield file's order (a failed well has no summary).
    units : {"US", "SI", "SI-L/s"}
    title : str, optional
    planned : dict well -> rate [m^3/d], optional
        The blending plan's rate of each well: a white diamond on the well's row, labelled
        with the rate ("plan: off" at the row's right end for a well the plan leaves off).

    Returns
    -------
    matplotlib.figure.Figure
    """
    outcomes = list(outcomes)
    if not outcomes:
        raise InputError("no well to chart", field="wells")
    entries = list(dict.fromkeys(o.entry_point for o in outcomes))
    order = sorted(range(len(outcomes)), key=lambda k: (entries.index(outcomes[k].entry_point), k))
    n = len(outcomes)
    legend_lines = -(-(len(entries) + 2 + (planned is not None)) // LEGEND_COLUMNS)
    fig, axes = _figure(1, 1, (8.0, 1.9 + 0.42 * n + 0.3 * legend_lines))
    ax = axes[0, 0]
    top = max((float(o.summary.rates.max()) for o in outcomes if o.summary is not None),
              default=1.0)
    x_top = float(_rate(top, units)[0])
    x_label = _rate(top, units)[1]
    labels = []
    for row_k, k in enumerate(order):
        o = outcomes[k]
        y = n - 1 - row_k
        colour, hatch = ENTRY_STYLES[entries.index(o.entry_point) % len(ENTRY_STYLES)]
        labels.append((y, f"{o.name}\n{o.entry_point}"))
        s = o.summary
        if s is None:
            ax.broken_barh([(0.0, x_top)], (y - 0.3, 0.6), facecolors="white",
                           edgecolor=VERMILLION, linewidth=0.8, hatch="xx", alpha=0.5,
                           gid=f"failed {o.name}")
            ax.annotate("analysis failed: " + textwrap.shorten(o.error or "", ERROR_CHARS,
                                                               placeholder="..."),
                        (0.01, y), xycoords=("axes fraction", "data"), ha="left", va="center",
                        fontsize=7.5, color=VERMILLION, fontweight="bold",
                        bbox=dict(boxstyle="square,pad=0.15", fc="white", ec="none"))
            continue
        x = np.asarray(_rate(s.rates, units)[0], float)
        for a, b in _runs(s.hydraulic_ok & (s.rates > 0)):
            ax.plot([x[a], x[b]], [y, y], color=RAIL_COLOUR, linewidth=3.0,
                    solid_capstyle="butt", zorder=1, gid=f"rail {o.name}")
        for lo, hi, _, _ in s.intervals:
            a, b = (float(v) for v in _rate(np.array([lo, hi]), units)[0])
            ax.broken_barh([(a, max(b - a, 0.004 * x_top))], (y - 0.28, 0.56),
                           facecolors=colour, edgecolor=BLACK, linewidth=0.7,
                           hatch=hatch or None, zorder=2, gid=f"window {o.name}")
        if s.recommended is not None:
            xr = float(_rate(s.recommended, units)[0])
            ax.plot([xr, xr], [y - 0.38, y + 0.38], color=BLACK, linewidth=2.6,
                    solid_capstyle="butt", zorder=4, gid=f"recommended {o.name}")
            ax.annotate(f"{xr:,.0f}", (xr, y + 0.38), ha="center", va="bottom", fontsize=7,
                        zorder=5)
        if planned is not None and o.name in planned and planned[o.name] > 0:
            xp = float(_rate(planned[o.name], units)[0])
            ax.plot([xp], [y], marker="D", markersize=7, markerfacecolor="white",
                    markeredgecolor=VERMILLION, markeredgewidth=1.6, linestyle="none",
                    zorder=6, gid=f"planned {o.name}")
            ax.annotate(f"plan {xp:,.0f}", (xp, y - 0.36),
                        ha="left" if xp < 0.85 * x_top else "right", va="top", fontsize=7,
                        color=VERMILLION, zorder=6)
        elif planned is not None and o.name in planned:
            ax.annotate("plan: off", (0.99, y), xycoords=("axes fraction", "data"), ha="right",
                        va="center", fontsize=7.5, color=VERMILLION, zorder=6,
                        gid=f"planned {o.name}")
        if s.empty:
            ax.annotate("no window: " + textwrap.shorten(s.reason_empty, ERROR_CHARS,
                                                         placeholder="..."),
                        (0.01, y + 0.12), xycoords=("axes fraction", "data"), ha="left",
                        va="bottom", fontsize=7.5, color=VERMILLION, style="italic",
                        zorder=5, bbox=dict(boxstyle="square,pad=0.1", fc="white", ec="none",
                                            alpha=0.85))
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = [Patch(facecolor=c, edgecolor=BLACK, hatch=h or None, label=f"window, {name}")
               for name, (c, h) in zip(entries, [ENTRY_STYLES[i % len(ENTRY_STYLES)]
                                                 for i in range(len(entries))], strict=True)]
    handles += [Line2D([], [], color=RAIL_COLOUR, linewidth=3.0, label="hydraulic range"),
                Line2D([], [], color=BLACK, linewidth=2.6, label="recommended rate")]
    if planned is not None:
        handles.append(Line2D([], [], marker="D", markersize=7, markerfacecolor="white",
                              markeredgecolor=VERMILLION, markeredgewidth=1.6,
                              linestyle="none", label="blending plan's rate"))
    # room above the top well for the legend (a row of the chart is 0.42 in high)
    ax.set_ylim(-0.7, n - 0.2 + LEGEND_ROW * legend_lines)
    ax.legend(handles=handles, loc="upper center", ncols=min(len(handles), LEGEND_COLUMNS), fontsize=7.5, frameon=False,
              borderaxespad=0.2)
    ax.set_yticks([y for y, _ in labels])
    ax.set_yticklabels([lab for _, lab in labels], fontsize=7.5)
    ax.grid(False, axis="y")
    ax.set_xlim(0.0, x_top)
    ax.set_xlabel(f"well pumping rate [{x_label}]")
    ax.set_title(title or "Wellfield: each well's operating window", loc="left",
                 fontsize=10.5)
    # the cautions at the foot (constrained layout keeps room for a figure's x label)
    fig.supxlabel(caution_footer(), fontsize=6.3, color="#444444")
    return plain_text(fig)
