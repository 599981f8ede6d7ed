"""Step-drawdown charts: specific drawdown, drawdown against rate, and the step record.

Each function takes a :class:`blendq.well.stepdrawdown.StepDrawdownResult` (base units) and returns
a :class:`matplotlib.figure.Figure` built with the object API (no pyplot state), so it works
under any backend, Agg included. matplotlib is imported inside the functions only.

``units="US"`` shows gpm, ft and ft/gpm; ``units="SI"`` m^3/d, m and m/(m^3/d); conversions
go through :mod:`blendq.units` (pint).

Design: Okabe-Ito colours (colour-blind safe) always paired with distinct line styles and
markers, so a grayscale print still reads: measured steps as black discs, Jacob's fit as a solid
blue line with a grey band, Rorabaugh's as a dashed vermillion line, the linear part BQ as a
dotted line.

References
----------
Okabe, M. and Ito, K. (2008) Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people.
"""

from __future__ import annotations

import textwrap
from typing import TYPE_CHECKING

import numpy as np

from blendq.errors import InputError
from blendq.report.charts import plain_text
from blendq.units import DISPLAY_UNITS, Q_, display_unit_label, from_base, significant

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from blendq.well.steptest import StepDrawdownResult

# Okabe-Ito colours
BLACK, BLUE, VERMILLION, SKY, GREY = "#000000", "#0072B2", "#D55E00", "#56B4E9", "#9a9a9a"
POINT_STYLE = dict(marker="o", markersize=6.5, color=BLACK, markeredgecolor="white",
                   markeredgewidth=0.8, linestyle="none", zorder=5)
JACOB_STYLE = dict(color=BLUE, linestyle="-", linewidth=1.8, zorder=4)
RORABAUGH_STYLE = dict(color=VERMILLION, linestyle=(0, (5, 2.5)), linewidth=1.6, zorder=4)
LINEAR_STYLE = dict(color=BLACK, linestyle=(0, (1, 2)), linewidth=1.2, zorder=3)
BAND_STYLE = dict(color="#c8c8c8", alpha=0.7, linewidth=0, zorder=1)
SPECIFIC_DRAWDOWN_UNIT = {"US": "ft/gpm", "SI": "d/m**2", "SI-L/s": "m*s/L"}
SPECIFIC_DRAWDOWN_LABEL = {"US": "ft/gpm", "SI": "m/(m³/d)", "SI-L/s": "m/(L/s)"}


def _system(units: str) -> dict[str, str]:
    if units not in DISPLAY_UNITS:
        raise InputError(f'unit system "{units}" is not known (expected "US", "SI" or "SI-L/s")',
                         field="units")
    return DISPLAY_UNITS[units]


def _rate(values, units: str):
    unit = _system(units)["rate"]
    return np.asarray(from_base(np.asarray(values, float), "rate", unit)), display_unit_label(unit)


def _length(values, units: str):
    unit = _system(units)["length"]
    return (np.asarray(from_base(np.asarray(values, float), "length", unit)),
            display_unit_label(unit))


def _specific(values, units: str) -> np.ndarray:
    """Specific drawdown s/Q [d/m^2] in the display unit."""
    _system(units)
    return np.asarray(Q_(np.asarray(values, float), "d/m**2").to(SPECIFIC_DRAWDOWN_UNIT[units])
                      .magnitude)


def _figure(size=(6.6, 4.4)):
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    fig.get_layout_engine().set(w_pad=0.12, h_pad=0.08)
    ax = fig.add_subplot()
    ax.tick_params(labelsize=8.5)
    ax.grid(True, color="#e0e0e0", linewidth=0.6)
    ax.set_axisbelow(True)
    ax.spines[["top", "right"]].set_visible(False)
    return fig, ax


def _titles(fig, ax, title: str, caption: str) -> None:
    """Bold title at the figure's left edge and the method line under it."""
    fig.suptitle(title, x=0.01, ha="left", fontsize=10.5, fontweight="bold")
    ax.set_title(textwrap.fill(caption, 100), loc="left", fontsize=7.5, color="#333333")


def _rate_grid(result: StepDrawdownResult, rate_max: float | None) -> np.ndarray:
    top = 1.2 * float(result.per_step["rate"].max()) if rate_max is None else float(rate_max)
    if not (np.isfinite(top) and top > 0):
        raise InputError(f"rate_max {rate_max!r} must be a rate > 0 [m^3/d]", field="rate_max")
    return np.linspace(0.0, top, 161)


def _points(result: StepDrawdownResult) -> tuple[np.ndarray, np.ndarray]:
    """Step rates and the drawdowns that were fitted (equal-time sums or step ends)."""
    return result.jacob.rate, result.jacob.drawdown


def _caption(result: StepDrawdownResult, units: str) -> str:
    if result.method == "equal time":
        minutes = Q_(result.reference_time, "d").to("min").magnitude
        how = f"Hantush-Bierschenk sums at {minutes:.4g} min after each step start"
    else:
        how = "drawdown at the end of each step"
    c_walton = from_base(result.jacob.well_loss, "well_loss", _system(units)["well_loss"])
    return (f"{how}; Jacob C = {c_walton:.3g} {display_unit_label(_system(units)['well_loss'])}"
            f" (Walton class {result.walton_class}: {result.walton_label})")


def specific_drawdown_chart(result: StepDrawdownResult, units: str = "US",
                            rate_max: float | None = None, interval: float = 0.90) -> Figure:
    """Specific drawdown s_w/Q against rate Q with the fitted well-loss lines.

    Parameters
    ----------
    result : StepDrawdownResult
    units : {"US", "SI"}
    rate_max : float, optional
        Right end of the rate axis [m^3/d]; default 1.2 x the largest step.
    interval : float, default 0.90
        Central probability of the band around Jacob's line.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Jacob (1947): s_w/Q = B + C Q, a straight line with intercept B and slope C; Rorabaugh
    (1953): s_w/Q = B + C Q^(n-1).
    """
    q_pts, s_pts = _points(result)
    grid = _rate_grid(result, rate_max)
    inner = grid[1:]
    fig, ax = _figure()
    x_pts, rate_label = _rate(q_pts, units)
    x, _ = _rate(inner, units)
    pred = result.predict(inner, interval=interval)
    ax.fill_between(x, _specific(pred.drawdown_low / inner, units),
                    _specific(pred.drawdown_high / inner, units), **BAND_STYLE,
                    label=f"Jacob {interval:.0%} band")
    ax.plot(x, _specific(pred.drawdown / inner, units), **JACOB_STYLE,
            label="Jacob: fitted straight line s/Q = B + CQ")
    if result.rorabaugh_shown is not None:
        r = result.rorabaugh_shown
        ax.plot(x, _specific(r.drawdown_at(inner) / inner, units), **RORABAUGH_STYLE,
                label=f"Rorabaugh  s/Q = B + CQⁿ⁻¹ (n = {r.exponent:.2f})")
    b = float(_specific(result.jacob.linear_loss, units))
    ax.axhline(b, **LINEAR_STYLE, label="B (linear loss)")
    ax.plot(x_pts, _specific(s_pts / q_pts, units), **POINT_STYLE, label="steps")
    for xp, yp, lab in zip(x_pts, _specific(s_pts / q_pts, units), result.per_step["step"],
                           strict=True):
        ax.annotate(str(lab), (xp, yp), xytext=(5, 5), textcoords="offset points", fontsize=8)
    ax.set_xlim(0.0, float(_rate(grid[-1], units)[0]))
    lo = min(b, float(np.nanmin(_specific(s_pts / q_pts, units))))
    ax.set_ylim(bottom=max(0.0, lo - 0.35 * (float(np.nanmax(_specific(s_pts / q_pts, units)))
                                            - lo + 1e-30)))
    ax.set_xlabel(f"pumping rate Q [{rate_label}]", fontsize=9)
    ax.set_ylabel(f"specific drawdown s/Q [{SPECIFIC_DRAWDOWN_LABEL[units]}]", fontsize=9)
    ax.legend(fontsize=8, frameon=False, loc="upper left")
    _titles(fig, ax, "Specific drawdown against rate", _caption(result, units))
    return plain_text(fig)


def drawdown_rate_chart(result: StepDrawdownResult, units: str = "US",
                        rate_max: float | None = None, interval: float = 0.90) -> Figure:
    """Drawdown against rate: step points, Jacob and Rorabaugh fits, linear part BQ.

    The drawdown axis points down (like a water level); the right axis gives the pumping level
    as depth below the datum (static level + drawdown).

    Parameters
    ----------
    result : StepDrawdownResult
    units : {"US", "SI"}
    rate_max : float, optional
        Right end of the rate axis [m^3/d]; default 1.2 x the largest step.
    interval : float, default 0.90
        Central probability of the band around Jacob's curve.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    s_w = B Q + C Q^2 (Jacob 1947), s_w = B Q + C Q^n (Rorabaugh 1953); the gap between the
    fitted curve and the line BQ is the nonlinear (well) loss.
    """
    q_pts, s_pts = _points(result)
    grid = _rate_grid(result, rate_max)
    fig, ax = _figure()
    x, rate_label = _rate(grid, units)
    pred = result.predict(grid, interval=interval)
    y, length_label = _length(pred.drawdown, units)
    ax.fill_between(x, _length(pred.drawdown_low, units)[0], _length(pred.drawdown_high, units)[0],
                    **BAND_STYLE, label=f"Jacob {interval:.0%} band")
    lin = _length(result.jacob.linear_loss * grid, units)[0]
    ax.fill_between(x, lin, y, facecolor="none", edgecolor=SKY, hatch="////", linewidth=0,
                    zorder=2, label="nonlinear loss CQ²")
    ax.plot(x, lin, **LINEAR_STYLE, label="linear part BQ")
    ax.plot(x, y, **JACOB_STYLE, label="Jacob  s = BQ + CQ²")
    if result.rorabaugh_shown is not None:
        r = result.rorabaugh_shown
        ax.plot(x, _length(r.drawdown_at(grid), units)[0], **RORABAUGH_STYLE,
                label=f"Rorabaugh  s = BQ + CQⁿ (n = {r.exponent:.2f})")
    ax.plot(_rate(q_pts, units)[0], _length(s_pts, units)[0], **POINT_STYLE, label="steps")
    ax.set_xlim(0.0, float(x[-1]))
    top = float(np.nanmax(np.r_[_length(pred.drawdown_high, units)[0], _length(s_pts, units)[0]]))
    ax.set_ylim(1.05 * top, 0.0)  # drawdown increases downward
    static = float(_length(result.static_level, units)[0])
    right = ax.secondary_yaxis("right", functions=(lambda s: s + static, lambda d: d - static))
    right.set_ylabel(f"pumping level, depth [{length_label}]", fontsize=9)
    right.tick_params(labelsize=8.5)
    ax.set_xlabel(f"pumping rate Q [{rate_label}]", fontsize=9)
    ax.set_ylabel(f"drawdown s [{length_label}]", fontsize=9)
    ax.legend(fontsize=8, frameon=False, loc="lower left")
    _titles(fig, ax, "Drawdown against rate", _caption(result, units))
    return plain_text(fig)


def step_record_chart(result: StepDrawdownResult, units: str = "US") -> Figure:
    """The water-level record of the test with each step's log-time extrapolation.

    Shows the drawdown readings against time since the first step began, the steps as
    alternating bands labelled with their rates, the straight line in superposed log-time that
    continues each step into the next (dashed), and the equal-time readings that the
    Hantush-Bierschenk sums use (open squares). A reviewer checks here that the extrapolations
    follow the data.

    Parameters
    ----------
    result : StepDrawdownResult
        With a water-level record (``result.record``).
    units : {"US", "SI"}

    Returns
    -------
    matplotlib.figure.Figure
    """
    from blendq.well.stepdrawdown import superposition_log_time

    if result.record is None or result.schedule is None:
        raise InputError("this step-drawdown result has no water-level record to chart",
                         field="levels")
    sched = result.schedule
    rec = result.record
    fig, ax = _figure(size=(7.2, 4.2))
    hours = Q_(1.0, "d").to("h").magnitude
    _, length_label = _length(0.0, units)
    for k, row in enumerate(sched.itertuples(index=False)):
        ax.axvspan(row.start * hours, row.end * hours, color="#f1f1f1" if k % 2 else "#ffffff",
                   zorder=0, linewidth=0)
        rate, rate_label = _rate(row.rate, units)
        ax.annotate(f"{row.step}: {significant(float(rate), 3, units)} {rate_label}",
                    (0.5 * (row.start + row.end) * hours, 1.0), xycoords=("data", "axes fraction"),
                    xytext=(0, 3), textcoords="offset points", ha="center", va="bottom",
                    fontsize=7.5)
    ax.plot(rec["time"] * hours, _length(rec["drawdown"], units)[0], color=BLACK, marker=".",
            markersize=3, linewidth=0.8, label="readings", zorder=3)
    inc = result.increments
    if inc is not None:
        start = sched["start"].to_numpy(float)
        end = sched["end"].to_numpy(float)
        rate = sched["rate"].to_numpy(float)
        first = sched["sequence_start"].to_numpy(bool)
        labelled = False
        for k in range(len(sched) - 1):
            if first[k + 1] or not np.isfinite(inc.log_slope[k]):
                continue
            t = np.linspace(start[k] + 0.5 * (end[k] - start[k]), end[k + 1], 60)
            s = inc.intercept[k] + inc.log_slope[k] * superposition_log_time(t, start, rate,
                                                                             first, k)
            ax.plot(t * hours, _length(s, units)[0], color=BLUE, linestyle=(0, (4, 2)),
                    linewidth=1.3, zorder=4, label=None if labelled else
                    "previous step continued (log-time line)")
            labelled = True
        ax.plot((start + inc.elapsed) * hours, _length(inc.step_drawdown, units)[0],
                marker="s", markersize=6, markerfacecolor="white", markeredgecolor=VERMILLION,
                markeredgewidth=1.5, linestyle="none", zorder=5,
                label=f"reading at {Q_(inc.elapsed, 'd').to('min').magnitude:.4g} min "
                      "after each start")
    deepest = float(np.nanmax(_length(rec["drawdown"], units)[0]))
    ax.set_ylim(1.05 * deepest, 0.0)  # drawdown increases downward, from static at the top
    ax.set_xlim(0.0, float(sched["end"].max()) * hours)
    ax.set_xlabel("time since the first step began [h]", fontsize=9)
    ax.set_ylabel(f"drawdown [{length_label}]", fontsize=9)
    fig.suptitle("Step test record", x=0.01, ha="left", fontsize=10.5, fontweight="bold")
    ax.set_title(" ", fontsize=9)  # room for the step labels above the axes
    ax.legend(fontsize=8, frameon=False, loc="lower left")
    return plain_text(fig)
