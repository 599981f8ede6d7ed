"""Decision charts: discharge quality, zone shares and pumping level against rate; zone values.

Each function returns a :class:`matplotlib.figure.Figure` built with the object API (no pyplot
state); matplotlib is imported inside the functions. Values arrive in base units (m, m^3/d,
mg/L canonical) and are shown in gpm and ft (``units="US"``) or m^3/d and m (``"SI"``);
concentrations in each analyte's display unit. Colours are Okabe-Ito (colour-blind safe), always
paired with distinct line styles, markers and hatches so a grayscale print still reads.

References
----------
Okabe, M. and Ito, K. (2008) Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.errors import InputError
from blendq.report.charts import plain_text
from blendq.units import DISPLAY_UNITS, display_unit_label, from_base, significant

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from blendq.chemistry.limits import Limit
    from blendq.decide.sweep import Statistic, Window
    from blendq.fit.uncertainty import Prediction
    from blendq.inputs.project import Project

# Okabe-Ito colours
BLACK, ORANGE, SKY, GREEN = "#000000", "#E69F00", "#56B4E9", "#009E73"
YELLOW, BLUE, VERMILLION, PURPLE = "#F0E442", "#0072B2", "#D55E00", "#CC79A7"
#: zone fills: neighbours differ in lightness as well as hue, and each has its own hatch
ZONE_FILLS = [(SKY, ""), (BLUE, "///"), (YELLOW, "..."), (VERMILLION, "xx"), (GREEN, "\\\\\\"),
              (ORANGE, "oo"), (PURPLE, "++")]
WINDOW_COLOUR = GREEN
RECOMMENDED_STYLE = dict(color=BLACK, linestyle=(0, (6, 2, 1, 2)), linewidth=1.3)


# ---------------------------------------------------------------------------------- helpers
def _figure(nrows: int, ncols: int, size: tuple[float, float], **kw):
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False, **kw)
    for ax in axes.flat:
        ax.tick_params(labelsize=8)
        ax.grid(True, color="#dddddd", linewidth=0.6)
        ax.set_axisbelow(True)
        ax.spines[["top", "right"]].set_visible(False)
    return fig, axes


def _system(units: str) -> dict[str, str]:
    if units not in DISPLAY_UNITS:
        raise InputError(f'unit system "{units}" is not known (expected "US", "SI" or "SI-L/s")',
                         field="units")
    return DISPLAY_UNITS[units]


def _shown(values, kind: str, units: str):
    """Base-unit values of ``kind`` ("rate", "length") in the display unit, and its label."""
    unit = _system(units)[kind]
    return np.asarray(from_base(np.asarray(values, float), kind, unit)), display_unit_label(unit)


def _rate(values, units: str):
    return _shown(values, "rate", units)


def _conc_unit(analyte: str) -> tuple[str, str]:
    unit = get_analyte(analyte).display_unit
    return unit, unit.replace("ug/", "µg/")


def _conc(values, analyte: str):
    """Concentrations [mg/L canonical] in the analyte's display unit."""
    return get_analyte(analyte).in_display_unit(values)


def _limit_text(limit: Limit, analyte: str) -> str:
    """The limit as published, with its value in the chart's unit when that differs."""
    text = limit.label()
    unit, shown = _conc_unit(analyte)
    if limit.unit != unit:
        text += f" (= {_conc(limit.canonical(), analyte):.3g} {shown})"
    return text


def _fmt_rate(value: float, units: str) -> str:
    x, label = _rate(value, units)
    return f"{significant(float(x), 3, units)} {label}"  # the rounding of the text and CLI


def _window_intervals(window: Window | None, units: str) -> list[np.ndarray]:
    """Display rates (low, high) of every window interval; one grid step wide at least."""
    if window is None:
        return []
    r = np.asarray(window.rates, float)
    half = 0.5 * float(np.min(np.diff(r))) if len(r) > 1 else 0.0
    return [_rate([max(lo - half, 0.0), hi + half] if hi - lo < half else [lo, hi], units)[0]
            for lo, hi, _, _ in window.intervals]


def _window_spans(ax: Axes, window: Window | None, units: str) -> None:
    """Shade every interval of the window (light fill and hatch, to read in grayscale)."""
    from matplotlib.colors import to_rgb

    for k, (lo, hi) in enumerate(_window_intervals(window, units)):
        ax.axvspan(lo, hi, facecolor=(*to_rgb(WINDOW_COLOUR), 0.13),
                   edgecolor=(*to_rgb(WINDOW_COLOUR), 0.35), hatch="\\\\", linewidth=0,
                   zorder=0, label=None if k else "operating window", gid="operating window")


def _recommended(ax: Axes, window: Window | None, units: str, annotate: bool):
    if window is None or window.recommended is None:
        return None
    x = float(_rate(window.recommended, units)[0])
    line = ax.axvline(x, zorder=4, label="recommended rate", **RECOMMENDED_STYLE)
    if annotate:
        # on the side of the line away from the window's hatching
        right_in_window = any(lo <= x + 1e-9 < hi for lo, hi in _window_intervals(window, units))
        ax.annotate(f"recommended {_fmt_rate(window.recommended, units)}", (x, 1.0),
                    xycoords=("data", "axes fraction"),
                    xytext=(-4, -2) if right_in_window else (4, -2),
                    textcoords="offset points", va="top",
                    ha="right" if right_in_window else "left", fontsize=8, zorder=6,
                    bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.85))
    return line


#: Fade of the rates no step tested (white over the model, so it reads as "less certain")
UNTESTED_FADE = dict(facecolor=(1.0, 1.0, 1.0, 0.62), edgecolor="#8a8a8a", linestyle=":",
                     linewidth=0.9, zorder=3.5)
#: Rates the pump cannot deliver (grey cross-hatch, distinct from the window's green hatch)
OFF_PUMP_STYLE = dict(facecolor=(0.45, 0.45, 0.45, 0.10), edgecolor=(0.35, 0.35, 0.35, 0.45),
                      hatch="xx", linewidth=0, zorder=0.5)


def _tested_and_pump_ranges(project: Project | None) -> tuple[tuple[float, float] | None,
                                                               tuple[float, float] | None]:
    """(lowest, highest) step rate and (rate_min, rate_max) of the pump [m^3/d]."""
    if project is None:
        return None, None
    tested = None
    if project.steps is not None and len(project.steps):
        r = pd.to_numeric(project.steps["rate"], errors="coerce").to_numpy(float)
        r = r[np.isfinite(r) & (r > 0)]
        if r.size:
            tested = (float(r.min()), float(r.max()))
    w = project.well
    return tested, (float(w.rate_min), float(w.rate_max))


def _range_marks(ax: Axes, project: Project | None, units: str, x_max: float) -> None:
    """Fade the rates outside the tested range and hatch those outside the pump's range."""
    tested, pump = _tested_and_pump_ranges(project)
    if tested is not None:
        lo, hi = _rate(list(tested), units)[0]
        spans = [(0.0, float(lo)), (float(hi), x_max)]
        first = True
        for a, b in spans:
            if b > a:
                ax.axvspan(a, b, **UNTESTED_FADE, gid="not tested",
                           label="no step tested here (model extrapolated; faded)"
                           if first else None)
                first = False
    if pump is not None:
        lo, hi = (float(v) for v in _rate([pump[0], min(pump[1], 1e30)], units)[0])
        first = True
        for a, b in ((0.0, lo), (hi, x_max)):
            if b > a:
                ax.axvspan(a, b, **OFF_PUMP_STYLE, gid="outside pump range",
                           label="outside the pump's range" if first else None)
                first = False


def _free_x(ax: Axes, window: Window | None, units: str, width: float) -> float | None:
    """Data x of the centre of the first (lowest-rate) stretch of the rate axis clear of the
    window's hatching and the recommended line that holds a label ``width`` (axes fraction)
    wide; None when none does."""
    x0, x1 = ax.get_xlim()
    blocked = [tuple(v) for v in _window_intervals(window, units)]
    if window is not None and window.recommended is not None:
        xr = float(_rate(window.recommended, units)[0])
        blocked.append((xr - 0.01 * (x1 - x0), xr + 0.01 * (x1 - x0)))
    edges = sorted((max(a, x0), min(b, x1)) for a, b in blocked if b > x0 and a < x1)
    gaps, start = [], x0
    for a, b in edges:
        if a > start:
            gaps.append((start, a))
        start = max(start, b)
    if start < x1:
        gaps.append((start, x1))
    fits = [(a, b) for a, b in gaps if (b - a) >= width * (x1 - x0)]
    return 0.5 * (fits[0][0] + fits[0][1]) if fits else None


def _clear_side(x, lo, hi, sx, s_hi, s_lo, box: tuple[float, float], width: float) -> float:
    """Axes-fraction x (0.005 or 0.995) of the end where a label over ``box`` (data y range) and
    ``width`` (axes fraction) hides fewer band points and samples; the left end on a tie."""
    span = float(x.max() - x.min()) or 1.0
    frac = (np.asarray(x) - x.min()) / span
    sfrac = (np.asarray(sx) - x.min()) / span
    band = (lo < box[1]) & (hi > box[0])
    dots = (np.asarray(s_lo) < box[1]) & (np.asarray(s_hi) > box[0])
    left = np.sum(band[frac <= width]) / len(frac) + 0.05 * dots[sfrac <= width].sum()
    right = np.sum(band[frac >= 1 - width]) / len(frac) + 0.05 * dots[sfrac >= 1 - width].sum()
    return 0.995 if right < left else 0.005


def _title(fig: Figure, head: str, window: Window | None, units: str) -> None:
    """Title in plain words, with the window (or the reason there is none) beneath it."""
    if window is not None and window.empty:
        head += "\nNo operating window"
    elif window is not None:
        parts = [_fmt_rate(lo, units) if hi == lo else
                 f"{_fmt_rate(lo, units).rsplit(' ', 1)[0]} to {_fmt_rate(hi, units)}"
                 for lo, hi, _, _ in window.intervals]
        text = "Operating window " + " and ".join(parts)
        if window.recommended is not None:
            text += f"; recommended {_fmt_rate(window.recommended, units)}"
        head += "\n" + textwrap.fill(text, 88)
    fig.suptitle(head, fontsize=10.5,
                 color=VERMILLION if window is not None and window.empty else BLACK)


def _step_samples(project: Project | None, analyte: str, interval: float) -> pd.DataFrame:
    """Discharge samples of one analyte with rate [m^3/d], value and half-interval [mg/L]."""
    from blendq.fit.diagnostics import interval_z
    from blendq.fit.observations import lab_sigma

    cols = ["rate", "value", "half", "nondetect"]
    if project is None or not len(project.samples) or not len(project.steps):
        return pd.DataFrame({c: np.zeros(0, bool if c == "nondetect" else float) for c in cols})
    s, steps = project.samples, project.steps
    s = s[s["analyte"] == analyte]
    # samples taken inside the well are not the discharge
    s = s[pd.to_numeric(s["depth"], errors="coerce").isna()] if "depth" in s else s
    rate = pd.to_numeric(s["step"].map(dict(zip(steps["step"], steps["rate"], strict=False))),
                         errors="coerce")
    s, rate = s[rate.notna()], rate[rate.notna()]
    nd = s["nondetect"].fillna(False).astype(bool).to_numpy()
    value = pd.to_numeric(s["value"], errors="coerce").to_numpy(float)
    dl = pd.to_numeric(s["detection_limit"], errors="coerce").to_numpy(float)
    unc = pd.to_numeric(s["uncertainty"], errors="coerce").to_numpy(float)
    half = np.zeros(len(s))
    det = ~nd & np.isfinite(value)
    if det.any():
        sigma = lab_sigma(value[det], unc[det], dl[det], project.settings.default_relative_uncertainty,
                          project.settings.detection_limit_sigma_fraction)
        half[det] = interval_z(interval) * sigma
    value = np.where(nd, dl, value)
    out = pd.DataFrame({"rate": rate.to_numpy(float), "value": value, "half": half,
                        "nondetect": nd})
    return out[np.isfinite(out["value"])]


def _figure_legend(fig: Figure, axes, ncols: int = 4) -> None:
    seen: dict[str, object] = {}
    for ax in np.ravel(axes):
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            seen.setdefault(lab, h)
    if seen:
        fig.legend(list(seen.values()), list(seen.keys()), loc="outside lower center",
                   ncols=min(ncols, len(seen)), fontsize=8, frameon=False)


# ------------------------------------------------------------------------------ the charts
def quality_vs_rate(pred: Prediction, window: Window | None, limits: dict[str, Limit],
                    margin: float, interval: float, project: Project | None = None,
                    units: str = "US", title: str | None = None,
                    statistics: dict[str, Statistic] | None = None) -> Figure:
    """Predicted discharge quality against pumping rate, one panel per analyte.

    Each panel shows the median prediction and its central ``interval`` band over the Monte
    Carlo draws (both of the mean discharge concentration), for a limit judged on single
    samples the same interval of a compliance sample (dashed lines: the mean's uncertainty
    with the water's temporal variability and the lab's error), the governing limit and ``margin`` x limit, the step samples (detected results
    with error bars of the same interval from the lab's one-sd uncertainty; non-detects as open
    markers at the detection limit with a downward arrow), every interval of the operating window
    shaded and the recommended rate. An empty window is stated under the title with its reason.

    Parameters
    ----------
    pred : Prediction
        Rate sweep (rates [m^3/d], concentration [mg/L canonical]).
    window : Window or None
    limits : dict analyte -> Limit
        Governing limit of each analyte (:func:`blendq.decide.sweep.governing_limits`).
    margin : float
        Fraction of each limit the operator keeps under [-].
    interval : float
        Central probability of the band, e.g. 0.90 [-].
    project : Project, optional
        Source of the step samples.
    units : {"US", "SI"}
        Rates in gpm or m^3/d.
    title : str, optional
    statistics : dict analyte -> Statistic, optional
        The statistic each limit is judged on (:func:`blendq.decide.sweep.compliance_statistics`).
    """
    from blendq.decide.sweep import statistic_quantiles

    n = len(pred.analytes)
    if n == 0:
        raise InputError("the prediction has no analytes to chart", field="analytes")
    fig, axes = _figure(n, 1, (7.5, 1.2 + 2.6 * n), sharex=True)
    x, rate_label = _rate(pred.rates, units)
    q = np.quantile(pred.concentration, [(1 - interval) / 2, 0.5, (1 + interval) / 2], axis=0)
    q[:, pred.rates <= 0, :] = np.nan  # no discharge, no discharge quality
    for j, analyte in enumerate(pred.analytes):
        ax = axes[j, 0]
        _, unit_label = _conc_unit(analyte)
        lo, med, hi = (_conc(q[k, :, j], analyte) for k in range(3))
        s = _step_samples(project, analyte, interval)
        sx, sv = _rate(s["rate"], units)[0], _conc(s["value"], analyte)
        sh = _conc(s["half"], analyte)
        lim = limits.get(analyte)
        v = float(_conc(lim.canonical(), analyte)) if lim is not None else np.nan
        st = (statistics or {}).get(analyte)
        single = None
        if st is not None and st.limit.compliance.statistic == "single sample" and st.log_sd > 0:
            sq = statistic_quantiles(pred.concentration[:, :, j],
                                     [(1 - interval) / 2, (1 + interval) / 2], st.log_sd)
            sq[:, pred.rates <= 0] = np.nan
            single = _conc(sq, analyte)
        ytop = max(float(np.nanmax(hi)), float(np.max(sv + sh, initial=0)) * 1.05,
                   1.25 * v if lim is not None else 0.0,
                   float(np.nanmax(single[1])) * 1.02 if single is not None else 0.0, 1e-12)
        _window_spans(ax, window, units)
        _range_marks(ax, project, units, float(x.max()))
        ax.fill_between(x, lo, hi, color=SKY, alpha=0.45, linewidth=0,
                        label=f"{interval * 100:g} % interval of the mean")
        if single is not None:
            for k in range(2):
                ax.plot(x, single[k], color=BLUE, linewidth=1.0, linestyle=(0, (4, 2)),
                        label=f"{interval * 100:g} % range of a compliance sample"
                        if k == 0 else None)
        ax.plot(x, med, color=BLUE, linewidth=1.8, label="median prediction")
        if lim is not None:
            ax.axhline(v, color=BLACK, linewidth=1.4, label="limit", zorder=4)
            texts = [(_limit_text(lim, analyte), v, "bottom", BLACK)]
            if 0 < margin < 1:
                ax.axhline(margin * v, color=VERMILLION, linewidth=1.4, linestyle="--",
                           label=f"{margin * 100:g} % of limit (operating margin)", zorder=4)
                texts.append((f"{margin * 100:g} % of limit", margin * v, "top", VERMILLION))
            for text, y, va, colour in texts:
                box = (y, y + 0.09 * ytop) if va == "bottom" else (y - 0.09 * ytop, y)
                side = _clear_side(x, lo, hi, sx, sv + sh, sv - sh, box, 0.0115 * len(text))
                ax.annotate(text, (side, y), xycoords=("axes fraction", "data"),
                            xytext=(0, 2 if va == "bottom" else -2), textcoords="offset points",
                            ha="left" if side < 0.5 else "right", va=va, fontsize=8,
                            color=colour, zorder=6, bbox=dict(boxstyle="square,pad=0.1",
                                                              fc="white", ec="none", alpha=0.8))
        det = ~s["nondetect"].to_numpy(bool)
        if det.any():
            ax.errorbar(sx[det], sv[det], yerr=sh[det], fmt="o", color=BLACK, markersize=5,
                        capsize=3, elinewidth=1, zorder=5,
                        label=f"step sample ± {interval * 100:g} % lab interval")
        if (~det).any():
            ax.errorbar(sx[~det], sv[~det], yerr=0.07 * ytop, uplims=True, fmt="o", color=BLACK,
                        mfc="white", markersize=6, zorder=5, label="non-detect, at detection limit")
        ax.set_ylim(0, ytop)
        ax.set_ylabel(f"concentration [{unit_label}]")
        ax.set_title(get_analyte(analyte).label(), loc="left", fontsize=10, fontweight="bold")
        _recommended(ax, window, units, annotate=(j == 0))
    axes[-1, 0].set_xlabel(f"pumping rate [{rate_label}]")
    axes[-1, 0].set_xlim(float(x.min()), float(x.max()))
    _title(fig, title or "Discharge quality against pumping rate", window, units)
    _figure_legend(fig, axes[:, 0], ncols=2)
    return plain_text(fig)


def zone_shares(pred: Prediction, zone_names: list[str], window: Window | None = None,
                units: str = "US", title: str | None = None) -> Figure:
    """Each zone's share of the discharge against rate, as stacked areas.

    The median share of each zone over the draws, renormalised to sum to one at each rate,
    stacked with the deepest zone at the bottom. A zone that takes water from the well (a thief
    zone) has zero share; its legend entry names the rates where it does.

    Parameters
    ----------
    pred : Prediction
        Shares (draws, rates, zones) [-], zone flows [m^3/d].
    zone_names : list of str
        Zones top to bottom, as in the prediction.
    window : Window, optional
        Drawn as a bar above the chart with the recommended rate as a line.
    units : {"US", "SI"}
    """
    nz = pred.shares.shape[2]
    if len(zone_names) != nz:
        raise InputError(f"{len(zone_names)} zone names given for {nz} zones", field="zone_names")
    keep = pred.rates > 0  # no discharge, no shares
    x, rate_label = _rate(pred.rates[keep], units)
    med = np.nan_to_num(np.median(pred.shares[:, keep, :], axis=0))
    total = med.sum(axis=1, keepdims=True)
    med = np.divide(med, total, out=np.zeros_like(med), where=total > 0)
    flow = np.median(pred.zone_flow[:, keep, :], axis=0)
    fig, axes = _figure(1, 1, (7.5, 4.6))
    ax = axes[0, 0]
    base = np.zeros(len(x))
    handles = []
    for i in reversed(range(nz)):
        colour, hatch = ZONE_FILLS[i % len(ZONE_FILLS)]
        label = zone_names[i]
        thief = flow[:, i] < 0
        if thief.any():
            rk = pred.rates[keep]
            r = rk[thief]
            above = rk[rk > r.max()]
            if r.min() == rk.min() and len(above):
                # thief at the lowest rates: say up to which rate, in one short phrase
                label += f" (takes water from the well below {_fmt_rate(above.min(), units)})"
            elif len(r) == 1 or _fmt_rate(r.min(), units) == _fmt_rate(r.max(), units):
                label += f" (takes water from the well at {_fmt_rate(r[0], units)})"
            else:
                label += (f" (takes water from the well from {_fmt_rate(r.min(), units).rsplit(' ', 1)[0]}"
                          f" to {_fmt_rate(r.max(), units)})")
        h = ax.fill_between(x, 100 * base, 100 * (base + med[:, i]), facecolor=colour,
                            hatch=hatch, edgecolor="#333333", linewidth=0.7, label=label)
        handles.append(h)
        base = base + med[:, i]
    ax.set_ylim(0, 100)
    ax.set_xlim(float(x.min()), float(x.max()))
    ax.set_ylabel("share of discharge [%]")
    ax.set_xlabel(f"pumping rate [{rate_label}]")
    for k, span in enumerate(_window_intervals(window, units)):  # a bar above the chart
        h = ax.plot(span, [1.03, 1.03], transform=ax.get_xaxis_transform(), clip_on=False,
                    color=WINDOW_COLOUR, linewidth=7, solid_capstyle="butt",
                    label="operating window")
        handles += [] if k else h
    rec = _recommended(ax, window, units, annotate=False)
    handles += [rec] if rec is not None else []
    labels = [h.get_label() for h in handles]
    # zones listed top to bottom, as they sit in the well and in the stack
    order = list(reversed(range(nz))) + list(range(nz, len(handles)))
    fig.legend([handles[k] for k in order], [labels[k] for k in order],
               loc="outside lower center", ncols=1 if nz > 3 else 2, fontsize=8,
               frameon=False)
    _title(fig, title or "Share of each zone in the discharge", window, units)
    return plain_text(fig)


def pumping_level(pred: Prediction, project: Project, window: Window | None = None,
                  units: str = "US", interval: float = 0.90, title: str | None = None) -> Figure:
    """Predicted pumping level against rate, with the pump intake and the top of the zones.

    Depth below the datum increases downward. Lines mark the pump intake, the intake less the
    required submergence (the deepest allowed level; drawn when the submergence is above zero)
    and the top of the uppermost zone; the measured levels at the end of each step are points.

    Parameters
    ----------
    pred : Prediction
        Rates [m^3/d], pumping level (draws, rates) [m depth below datum].
    project : Project
        Well (intake, submergence, datum), zones and steps.
    window : Window, optional
    units : {"US", "SI"}
        Rates in gpm or m^3/d, depths in ft or m.
    interval : float
        Central probability of the band [-].
    """
    x, rate_label = _rate(pred.rates, units)
    q = np.quantile(pred.pumping_level, [(1 - interval) / 2, 0.5, (1 + interval) / 2], axis=0)
    lo, med, hi = (_shown(q[k], "length", units)[0] for k in range(3))
    _, depth_label = _shown(0.0, "length", units)
    fig, axes = _figure(1, 1, (7.5, 4.8))
    ax = axes[0, 0]
    _window_spans(ax, window, units)
    # the band's width in words (it can be thinner than the line at this scale)
    at = window.recommended if window is not None and window.recommended is not None else \
        float(pred.rates[int(np.argmax(pred.rates))]) * 0.5
    k_at = int(np.argmin(np.abs(pred.rates - at)))
    half = 0.5 * float(hi[k_at] - lo[k_at])
    thin = 2.0 * half < 0.01 * (float(np.nanmax(hi)) - float(np.nanmin(lo)) + 1e-12)
    ax.fill_between(x, lo, hi, color=SKY, alpha=0.55, linewidth=0, zorder=2,
                    label=f"{interval * 100:g} % interval of prediction: "
                          f"± {half:.2g} {depth_label} at {_fmt_rate(at, units)}"
                          + (" (thinner than the line here)" if thin else ""))
    for edge in (lo, hi):
        ax.plot(x, edge, color=BLUE, linewidth=0.8, linestyle=(0, (3, 1.5)), zorder=2.5)
    horizon = project.settings.horizon
    ax.plot(x, med, color=BLUE, linewidth=1.6, zorder=3,
            label=f"median prediction after {horizon:g} days of pumping")
    well = project.well
    deepest = [float(np.nanmax(hi))]
    shallowest = [float(np.nanmin(lo))]

    def level_line(depth_m: float, text: str, **style) -> None:
        d = float(_shown(depth_m, "length", units)[0])
        deepest.append(d)
        ax.axhline(d, linewidth=1.4, label=f"{text} ({d:.3g} {depth_label})", **style)

    level_line(well.operating_intake, "pump intake", color=BLACK)
    if well.submergence > 0:
        level_line(well.operating_intake - well.submergence,
                   "intake less submergence (deepest allowed level)", color=VERMILLION,
                   linestyle="--")
    if project.zones:
        top = int(np.argmin(project.zone_top))
        level_line(float(project.zone_top[top]), f"top of uppermost zone {project.zones[top].name}",
                   color=PURPLE, linestyle=":")
    steps = project.steps
    measured = None
    if steps is not None and len(steps):
        lvl = pd.to_numeric(steps["pumping_level"], errors="coerce").to_numpy(float)
        rate = pd.to_numeric(steps["rate"], errors="coerce").to_numpy(float)
        ok = np.isfinite(lvl) & np.isfinite(rate)
        if ok.any():
            measured = (_rate(rate[ok], units)[0], _shown(lvl[ok], "length", units)[0])
            shallowest.append(float(np.min(measured[1])))
            ax.plot(*measured, "s", mfc="white", mec=BLACK, mew=1.3, markersize=6, zorder=5,
                    label="measured at end of step (hours of pumping)")
    _recommended(ax, window, units, annotate=True)
    ax.set_xlim(float(x.min()), float(x.max()))
    # depth increases downward; the axis spans the levels drawn, not the datum, so the band
    # shows
    span = max(deepest) - min(shallowest)
    ax.set_ylim(max(deepest) + 0.08 * span, max(0.0, min(shallowest) - 0.12 * span))
    # the horizon on the chart: a label on the median line, clear of the window's hatching
    text = f"operating horizon: {horizon:g} days of pumping"
    # width of the label [axes fraction]: about 0.051 in per character at 8 pt over an axes
    # about 0.77 of the figure's width (this chart's layout)
    where = _free_x(ax, window, units, len(text) * 0.051 / (0.77 * fig.get_figwidth()) + 0.02)
    if where is not None:
        # the label sits on the deeper side of the line (the measured test levels lie on the
        # shallower side), below the deepest point of the line over its width and above the
        # next limit line, with an arrow to the line
        x0, x1 = ax.get_xlim()
        half_w = 0.5 * len(text) * 0.051 / (0.77 * fig.get_figwidth()) * (x1 - x0)
        over = (x >= where - half_w) & (x <= where + half_w)
        line_deep = float(np.nanmax(hi[over])) if over.any() else float(np.interp(where, x, hi))
        below = [d for d in deepest[1:] if d > line_deep]
        floor = min(below) if below else max(deepest) + 0.08 * span
        y_text = line_deep + 0.4 * (floor - line_deep)
        ax.annotate(text,
                    (where, float(np.interp(where, x, med))), xytext=(where, y_text),
                    ha="center", va="center", fontsize=8, color=BLUE, zorder=6,
                    gid="horizon label",
                    arrowprops=dict(arrowstyle="-|>", color=BLUE, linewidth=0.9,
                                    shrinkA=2, shrinkB=2),
                    bbox=dict(boxstyle="square,pad=0.15", fc="white", ec="none", alpha=0.85))
    ax.set_xlabel(f"pumping rate [{rate_label}]")
    ax.set_ylabel(f"depth to water below {well.datum} [{depth_label}]")
    _title(fig, title or "Pumping level against pumping rate", window, units)
    _figure_legend(fig, axes, ncols=2)
    return plain_text(fig)


def zone_estimates(zone_table: pd.DataFrame, analytes: list[str] | None = None,
                   limits: dict[str, Limit] | None = None, title: str | None = None) -> Figure:
    """Each zone's estimated concentration and interval, one panel per analyte.

    Zones run top to bottom as in the well. A resolved zone is a filled point with its interval;
    a weakly resolved zone an open point; a zone the data do not resolve is a hatched bar over
    the range of values the data allow (to the panel's edge when the data set no upper bound),
    never a point.

    Parameters
    ----------
    zone_table : DataFrame
        From :func:`blendq.fit.diagnostics.zone_table` (concentrations in mg/L canonical).
    analytes : list of str, optional
        Analytes to show (default: all in the table, in order).
    limits : dict analyte -> Limit, optional
        Drawn as a vertical line for reference.
    """
    need = {"zone", "analyte", "estimate", "lower", "upper", "verdict", "range_low", "range_high"}
    if missing := need - set(zone_table.columns):
        raise InputError(f"zone table lacks columns {sorted(missing)}", field="zone_table")
    analytes = list(dict.fromkeys(zone_table["analyte"])) if analytes is None else list(analytes)
    unknown = [a for a in analytes if a not in set(zone_table["analyte"])]
    if unknown or not analytes:
        raise InputError(f"no zone estimates for {unknown or 'any analyte'}", field="analytes")
    zones = list(dict.fromkeys(zone_table["zone"]))
    ypos = {z: k for k, z in enumerate(zones)}
    fig, axes = _figure(1, len(analytes), (1.0 + 3.3 * len(analytes), 1.9 + 0.55 * len(zones)),
                        sharey=True)
    for ax, analyte in zip(axes[0], analytes, strict=True):
        t = zone_table[zone_table["analyte"] == analyte]
        _, unit_label = _conc_unit(analyte)
        finite = pd.concat([t["upper"], t["estimate"], t["range_low"], t["range_high"]])
        finite = _conc(finite[np.isfinite(finite.to_numpy(float))], analyte)
        right = float(np.max(finite)) * 1.15 if finite.size else 1.0
        lim = (limits or {}).get(analyte)
        if lim is not None:
            v = float(_conc(lim.canonical(), analyte))
            right = max(right, 1.15 * v)
            ax.axvline(v, color=BLACK, linewidth=1.3, label="limit")
        right = max(right, 1e-12)
        for _, row in t.iterrows():
            y = ypos[row["zone"]]
            if row["verdict"] == "not resolved":
                low = float(np.nan_to_num(_conc(row["range_low"], analyte)))
                open_top = not np.isfinite(row["range_high"])
                high = right if open_top else float(_conc(row["range_high"], analyte))
                bar = ax.barh(y, max(high - low, right * 0.004), left=low, height=0.5,
                              facecolor="#e6e6e6", edgecolor="#555555", hatch="////",
                              linewidth=0.8, label="not resolved: range the data allow")
                bar.patches[0].set_gid(f"unresolved:{analyte}:{row['zone']}")
                text = "not resolved" + (": no upper bound from the data" if open_top else "")
                short = (high - low) < 0.25 * right  # a short bar: label beside it, not on it
                ax.annotate(text, (high if short else (low + high) / 2, y),
                            xytext=(4, 0) if short else (0, 0), textcoords="offset points",
                            ha="left" if short else "center", va="center", fontsize=7.5,
                            bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="#555555",
                                      linewidth=0.6))
                continue
            est, lo_, hi_ = (float(_conc(row[c], analyte)) for c in ("estimate", "lower", "upper"))
            weak = row["verdict"] != "resolved"
            ax.errorbar(est, y, xerr=[[max(est - lo_, 0)], [max(hi_ - est, 0)]],
                        fmt="D" if weak else "o", color=BLUE, mfc="white" if weak else BLUE,
                        markersize=6, capsize=3,
                        label="weakly resolved: estimate and interval" if weak else
                        "resolved: estimate and interval", gid=f"estimate:{analyte}:{row['zone']}")
        ax.set_xlim(-0.02 * right, right)
        ax.set_xlabel(f"concentration [{unit_label}]")
        ax.set_title(get_analyte(analyte).label(), loc="left", fontsize=10, fontweight="bold")
    axes[0, 0].set_yticks(range(len(zones)), zones)
    axes[0, 0].set_ylim(len(zones) - 0.4, -0.6)  # uppermost zone at the top
    axes[0, 0].set_ylabel("zone (top to bottom)")
    fig.suptitle(title or "Estimated water quality of each zone", fontsize=10.5)
    _figure_legend(fig, axes[0], ncols=2)
    return plain_text(fig)


def save_figure(fig: Figure, path_stem: str | Path, dpi: int = 150) -> list[Path]:
    """Write ``<path_stem>.png`` (``dpi`` dots per inch) and ``<path_stem>.svg``.

    Neither file records the date or the software version.

    Returns
    -------
    list of Path
        The PNG and SVG paths.
    """
    stem = Path(path_stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    out = []
    for ext, meta in (("png", {"Software": None}), ("svg", {"Date": None, "Creator": None})):
        path = stem.with_name(f"{stem.name}.{ext}")
        fig.savefig(path, format=ext, dpi=dpi, metadata=meta)
        out.append(path)
    return out
