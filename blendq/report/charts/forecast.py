"""Forecast charts: the operating window year by year, and the history against its bands.

:func:`forecast_window_chart` draws year against rate: the rates compliant with the window's
confidence shaded dark, the rates compliant in at least half of the posterior draws (the
band's outer edge) shaded light, the recommended rate and the rate that stays compliant
longest as lines. :func:`history_chart` draws each analyte's history results against date
with their leave-one-out bands, the results outside marked, and margin x limit. Same look and
Okabe-Ito palette as :mod:`blendq.report.charts.quality`; matplotlib is imported lazily.

References
----------
Okabe, M. and Ito, K. (2008) Color Universal Design (CUD). https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from blendq.report.charts.quality import (
    BLACK,
    BLUE,
    ORANGE,
    SKY,
    VERMILLION,
    _conc,
    _conc_unit,
    _figure,
    _fmt_rate,
    _rate,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from blendq.chemistry.limits import Limit
    from blendq.decide.forecast import Forecast

__all__ = ["forecast_window_chart", "history_chart"]


def forecast_window_chart(fc: Forecast, units: str = "US", recommended: float | None = None,
                          confidence: float = 0.95) -> Figure:
    """Year against rate with the compliant region shaded.

    Parameters
    ----------
    fc : Forecast
        From :func:`blendq.decide.forecast.forecast` (rates [m^3/d]).
    units : str
        "US" or "SI" (rates in gpm or L/s).
    recommended : float, optional
        The step test's recommended rate [m^3/d], drawn as a line.
    confidence : float
        1 - alpha, for the legend.
    """
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    fig, axes = _figure(1, 1, (7.0, 4.2))
    ax = axes[0, 0]
    rates, label = _rate(fc.rates, units)
    rates = np.asarray(rates, float)
    edges_r = np.concatenate([[rates[0]], 0.5 * (rates[1:] + rates[:-1]), [rates[-1]]])
    edges_y = np.arange(fc.years[0], fc.years[-1] + 2)
    level = fc.likely.astype(int) + fc.ok.astype(int)  # 0 no, 1 likely, 2 with confidence
    cmap = ListedColormap(["#ffffff", "#cfe6f4", SKY])
    ax.pcolormesh(edges_y, edges_r, level.T, cmap=cmap, vmin=-0.5, vmax=2.5, shading="flat")
    handles = [Patch(facecolor=SKY, label=f"compliant with {confidence:.0%} confidence"),
               Patch(facecolor="#cfe6f4", label="compliant in at least half of the draws")]
    if recommended is not None:
        y = float(_rate(recommended, units)[0])
        handles.append(ax.axhline(y, color=BLACK, linestyle=(0, (6, 2)), linewidth=1.2,
                                  label=f"recommended now: {_fmt_rate(recommended, units)}"))
    if fc.best_rate is not None:
        y = float(_rate(fc.best_rate, units)[0])
        handles.append(ax.axhline(y, color=VERMILLION, linestyle=(0, (1.5, 1.5)),
                                  linewidth=1.4,
                                  label=f"compliant longest: {_fmt_rate(fc.best_rate, units)}"))
    ax.set_xlim(edges_y[0], edges_y[-1])
    ax.set_ylim(edges_r[0], edges_r[-1])
    ax.set_xticks(fc.years + 0.5, [str(int(y)) for y in fc.years])
    ax.set_xlabel("Year (each column a calendar year)", fontsize=9)
    ax.set_ylabel(f"Pumping rate [{label}]", fontsize=9)
    ax.set_title("Operating window year by year (monitoring-history forecast)", fontsize=10)
    fig.legend(handles=handles, loc="outside lower center", ncols=2, fontsize=8,
               frameon=False)
    return fig


def history_chart(check: pd.DataFrame, limits: dict[str, Limit], margin: float,
                  interval: float = 0.9) -> Figure:
    """Each analyte's history results against date with their leave-one-out bands.

    Parameters
    ----------
    check : DataFrame
        From :func:`blendq.decide.forecast.predictive_check` (mg/L canonical).
    limits : dict
        Governing limit of each analyte.
    margin : float
        Operating margin [-].
    interval : float
        Central probability of the bands.
    """
    analytes = list(dict.fromkeys(check["analyte"]))
    fig, axes = _figure(len(analytes), 1, (7.0, 2.4 * len(analytes) + 0.6), sharex=True)
    for ax, analyte in zip(axes[:, 0], analytes, strict=True):
        rows = check[check["analyte"] == analyte].sort_values("sampled_at")
        t = pd.to_datetime(rows["sampled_at"]).to_numpy()
        unit, shown = _conc_unit(analyte)
        ax.fill_between(t, _conc(rows["lower"].to_numpy(float), analyte),
                        _conc(rows["upper"].to_numpy(float), analyte), color="#cfe6f4",
                        step="mid", label=f"{interval:.0%} band without the result")
        inside = ~rows["outside"].to_numpy(bool)
        ax.plot(t[inside], _conc(rows["value"].to_numpy(float)[inside], analyte), "o",
                color=BLUE, markersize=3, label="result inside its band")
        ax.plot(t[~inside], _conc(rows["value"].to_numpy(float)[~inside], analyte), "D",
                color=ORANGE, markersize=4, markeredgecolor=BLACK, markeredgewidth=0.5,
                label="result outside its band")
        if analyte in limits:
            ax.axhline(_conc(margin * limits[analyte].canonical(), analyte), color=VERMILLION,
                       linestyle=(0, (6, 2)), linewidth=1.0, label="margin x limit")
        from blendq.chemistry.analytes import get_analyte

        ax.set_ylabel(f"{get_analyte(analyte).label()} [{shown}]", fontsize=8)
    axes[-1, 0].set_xlabel("Date sampled", fontsize=9)
    seen: dict[str, object] = {}
    for ax in axes[:, 0]:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            seen.setdefault(lab, h)
    fig.legend(list(seen.values()), list(seen.keys()), loc="outside lower center", ncols=2,
               fontsize=8, frameon=False)
    return fig
