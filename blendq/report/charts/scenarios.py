"""Scenario chart: median discharge quality against rate for every scenario, and their windows.

One panel per analyte with each scenario's median prediction (its own colour, line style and
marker, so the lines read in grayscale and for colour-blind readers), the limit and the
operating margin; beneath, a strip with one row per scenario showing its operating window as
bars, its recommended rate and the rate at which the pumping level reaches its limit. Same look
and Okabe-Ito palette as :mod:`blendq.report.charts.quality`; matplotlib is imported lazily.

References
----------
Okabe, M. and Ito, K. (2008) Color Universal Design (CUD). https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

import textwrap
from typing import TYPE_CHECKING

import numpy as np

from blendq.chemistry.analytes import get_analyte
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
    _conc,
    _conc_unit,
    _figure,
    _fmt_rate,
    _limit_text,
    _rate,
    save_figure,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from blendq.chemistry.limits import Limit
    from blendq.decide.scenarios import Comparison

__all__ = ["SCENARIO_STYLES", "save_figure", "scenario_chart"]

#: (colour, line style, marker) per scenario, base case first; colour, dash and marker all
#: differ between neighbours so that each line can be told apart without colour
SCENARIO_STYLES = [
    (BLACK, "-", None),
    (BLUE, (0, (6, 2)), "o"),
    (VERMILLION, (0, (1.5, 1.5)), "s"),
    (GREEN, (0, (6, 2, 1.5, 2)), "^"),
    (ORANGE, (0, (10, 3)), "D"),
    (PURPLE, (0, (3, 1.5, 1.5, 1.5, 1.5, 1.5)), "v"),
    (SKY, (0, (2, 3)), "P"),
]


#: Where the pumping-level marker would fall on the recommended-rate marker (both at the
#: window's end, within :data:`MARKER_CLEARANCE` of the rate axis), it moves this far [rows]
#: above its option's bar, so that neither hides the other.
YIELD_OFFSET = 0.42
MARKER_CLEARANCE = 0.03


def _style(k: int):
    return SCENARIO_STYLES[k % len(SCENARIO_STYLES)]


def scenario_chart(comparison: Comparison, limits: dict[str, Limit], units: str = "US",
                   title: str | None = None, interval: float = 0.90) -> Figure:
    """Median delivered quality against the well's rate for each scenario, and their windows.

    Parameters
    ----------
    comparison : Comparison
        From :func:`blendq.decide.scenarios.compare` (rates [m^3/d], concentrations [mg/L canonical]).
    limits : dict analyte -> Limit
        Governing limit of each analyte.
    units : {"US", "SI"}
        Rates in gpm or m^3/d.
    title : str, optional
    interval : float, default 0.90
        Central probability of each option's band of the mean (shaded in its colour, edged
        in its line style), so that an option whose curves look better can be seen to overlap
        the others.

    Returns
    -------
    matplotlib.figure.Figure
        Panels (one per analyte) and the window strip (last axes).

    Notes
    -----
    The margin drawn is each scenario's own when scenarios differ in margin; the dashed
    margin line shows the base case's. Lines stop where the well pumps nothing (rate 0).
    """
    results = comparison.results
    if not results:
        raise InputError("no scenario to chart", field="scenarios")
    analytes = list(results[0].prediction.analytes)
    n = len(analytes)
    ns = len(results)
    strip_h = 0.35 + 0.32 * ns
    fig, axes = _figure(n + 1, 1, (7.5, 1.6 + 2.5 * n + strip_h), sharex=True,
                        gridspec_kw=dict(height_ratios=[2.5] * n + [strip_h]))
    rates = results[0].prediction.rates
    x, rate_label = _rate(rates, units)
    pos = rates > 0
    every = max(1, len(x) // 8)
    margin = results[0].margin
    for j, analyte in enumerate(analytes):
        ax = axes[j, 0]
        _, unit_label = _conc_unit(analyte)
        top = 0.0
        curves = []
        for k, res in enumerate(results):
            colour, dash, marker = _style(k)
            med = np.full(len(rates), np.nan)
            med[pos] = np.median(res.prediction.concentration[:, pos, j], axis=0)
            y = _conc(med, analyte)
            band = np.full((2, len(rates)), np.nan)
            band[:, pos] = np.quantile(res.prediction.concentration[:, pos, j],
                                       [(1 - interval) / 2, (1 + interval) / 2], axis=0)
            blo, bhi = _conc(band[0], analyte), _conc(band[1], analyte)
            ax.fill_between(x, blo, bhi, facecolor=colour, alpha=0.10, linewidth=0, zorder=1,
                            gid=f"band {res.scenario.name}")
            for edge in (blo, bhi):
                ax.plot(x, edge, color=colour, linestyle=dash, linewidth=0.6, alpha=0.7,
                        zorder=1.5)
            top = max(top, float(np.nanmax(y)), float(np.nanmax(bhi)))
            curves.append(y)
            ax.plot(x, y, color=colour, linestyle=dash, linewidth=2.0 if k == 0 else 1.6,
                    marker=marker, markevery=(k % every, every), markersize=4.5,
                    markerfacecolor="white" if k % 2 else colour, label=res.scenario.name,
                    zorder=3 + (k == 0), gid=f"scenario {res.scenario.name}")
        lim = limits.get(analyte)
        if lim is not None:
            v = float(_conc(lim.canonical(), analyte))
            top = max(top, 1.2 * v)
            ax.axhline(v, color=BLACK, linewidth=1.2, zorder=2, gid="limit")
            labels = [(_limit_text(lim, analyte), v, "bottom", BLACK)]
            if 0 < margin < 1:
                ax.axhline(margin * v, color="#555555", linewidth=1.0, linestyle=(0, (4, 2)),
                           zorder=2, gid="margin")
                labels.append((f"{margin * 100:g} % of limit", margin * v, "top", "#333333"))
            for text, yv, va, colour in labels:
                side = _free_side(curves, yv, va, top, 0.012 * len(text))
                ax.annotate(text, (side, yv), xycoords=("axes fraction", "data"),
                            xytext=(0, 2 if va == "bottom" else -2), textcoords="offset points",
                            ha="left" if side < 0.5 else "right", va=va, fontsize=8,
                            color=colour, zorder=6, bbox=dict(boxstyle="square,pad=0.1",
                                                              fc="white", ec="none", alpha=0.85))
        ax.set_ylim(0, top * 1.05 if top > 0 else 1.0)
        ax.set_ylabel(f"concentration [{unit_label}]")
        ax.set_title(get_analyte(analyte).label(), loc="left", fontsize=10, fontweight="bold")
    _window_strip(axes[n, 0], comparison, units)
    axes[n, 0].set_xlabel(f"well pumping rate [{rate_label}]")
    axes[n, 0].set_xlim(float(x.min()), float(x.max()))
    fig.suptitle(title or "Options compared: delivered quality and operating window", fontsize=10.5)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    from matplotlib.patches import Patch

    handles.append(Patch(facecolor="#999999", alpha=0.25, edgecolor="#666666", linewidth=0.6))
    labels.append(f"{interval * 100:g} % band of the mean (each option in its colour); "
                  "lines: medians")
    extra = _strip_legend_handles()
    fig.legend(handles + [h for h, _ in extra], labels + [lab for _, lab in extra],
               loc="outside lower center", ncols=2, fontsize=8, frameon=False)
    return plain_text(fig)


def _free_side(curves, y: float, va: str, top: float, width: float) -> float:
    """Axes-fraction x (0.005 or 0.995) of the end where a label above (``va="bottom"``) or
    below a line at ``y`` covers fewer curve points; ``width`` is the label's axes fraction."""
    lo, hi = (y, y + 0.1 * top) if va == "bottom" else (y - 0.1 * top, y)
    cover = {0.005: 0, 0.995: 0}
    for c in curves:
        c = np.asarray(c, float)
        frac = np.linspace(0.0, 1.0, len(c))
        inside = (c >= lo) & (c <= hi)
        cover[0.005] += int(np.sum(inside & (frac <= width + 0.02)))
        cover[0.995] += int(np.sum(inside & (frac >= 1 - width - 0.02)))
    return 0.995 if cover[0.995] <= cover[0.005] else 0.005


def _strip_legend_handles():
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    return [(Patch(facecolor="#bbbbbb", edgecolor=BLACK, linewidth=0.6), "operating window"),
            (Line2D([], [], color=BLACK, marker="D", linestyle="none", markersize=6,
                    markerfacecolor="white", markeredgewidth=1.4), "recommended rate"),
            (Line2D([], [], color=BLACK, marker=">", linestyle="none", markersize=5,
                    markerfacecolor="white"), "pumping level reaches its limit")]


def _window_strip(ax, comparison: Comparison, units: str) -> None:
    """One row per scenario: window bars, recommended rate, pumping-level yield."""
    results = comparison.results
    rates = results[0].prediction.rates
    half = 0.5 * float(np.min(np.diff(rates))) if len(rates) > 1 else 0.0
    span = float(_rate(rates.max(), units)[0]) or 1.0
    ns = len(results)
    for k, res in enumerate(results):
        row = ns - 1 - k
        colour, _, _ = _style(k)
        w = res.window
        if res.cannot_tell:  # the data cannot decide this option: no window, no rate
            ax.annotate("cannot tell (see what would tell)", (0.01, row),
                        xycoords=("axes fraction", "data"), ha="left", va="center",
                        fontsize=7.5, color=VERMILLION, style="italic")
            if not res.yield_beyond_grid:
                xy = float(_rate(res.yield_rate, units)[0])
                ax.plot([xy], [row], marker=">", markersize=5, color=BLACK,
                        markerfacecolor="white", linestyle="none", zorder=5, gid="yield")
            continue
        for lo, hi, _, _ in w.intervals:
            a, b = _rate([max(lo - half, 0.0), hi + half] if hi - lo < half else [lo, hi], units)[0]
            ax.broken_barh([(a, b - a)], (row - 0.32, 0.64), facecolors=colour, alpha=0.55,
                           edgecolor=BLACK, linewidth=0.6, hatch="////" if k % 2 else None,
                           gid=f"window {res.scenario.name}")
        xr = None
        if w.recommended is not None:
            xr = float(_rate(w.recommended, units)[0])
            ax.plot([xr], [row], marker="D", markersize=6, markeredgewidth=1.4, color=BLACK,
                    markerfacecolor="white", linestyle="none", zorder=5, gid="recommended")
        if not res.yield_beyond_grid:
            xy = float(_rate(res.yield_rate, units)[0])
            clash = xr is not None and abs(xy - xr) < MARKER_CLEARANCE * span
            ax.plot([xy], [row + (YIELD_OFFSET if clash else 0.0)], marker=">", markersize=5,
                    color=BLACK, markerfacecolor="white", linestyle="none", zorder=5,
                    gid="yield")
        if w.empty:
            ax.annotate("no window", (0.01, row), xycoords=("axes fraction", "data"), ha="left",
                        va="center", fontsize=7.5, color=VERMILLION, style="italic")
    ax.set_ylim(-0.6, ns - 0.4)
    ax.set_yticks(range(ns))
    ax.set_yticklabels([textwrap.shorten(r.scenario.name, 42, placeholder="...")
                        for r in reversed(results)], fontsize=7.5)
    ax.grid(False, axis="y")
    ax.set_title("Operating window of each option", loc="left", fontsize=9)


def window_summary(comparison: Comparison, units: str = "US") -> list[str]:
    """One line per scenario: its window in display units (for alt text)."""
    out = []
    for res in comparison.results:
        w = res.window
        if res.cannot_tell:
            out.append(f"{res.scenario.name}: cannot tell")
            continue
        if w.empty:
            out.append(f"{res.scenario.name}: no window")
            continue
        parts = [f"{_fmt_rate(lo, units)} to {_fmt_rate(hi, units)}" for lo, hi, _, _ in w.intervals]
        out.append(f"{res.scenario.name}: " + " and ".join(parts))
    return out
