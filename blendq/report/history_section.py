"""The report section on the monitoring history: time models, the years ahead, the check.

:func:`history_section` turns an analysis with a monitoring history into a
:class:`~blendq.report.document.Section` with key ``"history"``: the time model of each
analyte beside the Mann-Kendall test and Sen's slope, the forecast sentences and chart of the
operating window year by year, the latest year each rate stays compliant, the results outside
their leave-one-out bands with what they may suggest, and the monitoring triggers.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.decide.analysis import Analysis
from blendq.decide.forecast import Forecast, forecast
from blendq.report.document import BulletList, Callout, Paragraph, Section, Table
from blendq.units import format_quantity


def _conc(analyte: str, value: float) -> str:
    an = get_analyte(analyte)
    return f"{float(an.in_display_unit(value)):.3g}"


def model_table(a: Analysis, fc: Forecast) -> pd.DataFrame:
    """One row per analyte: time model, trend and season (per zone or of the blend), the
    temporal variability, and the Mann-Kendall test with Sen's slope, in display units."""
    rows = []
    tests = fc.trend_tests.set_index("analyte")
    for analyte, tf in a.history.items():
        unit = get_analyte(analyte).display_unit
        trend, sd = tf.trend()
        if tf.resolution("trend") == "zone":
            shown = "; ".join(f"{z} {_conc(analyte, b)} ± {_conc(analyte, e)}" for z, b, e
                              in zip(a.project.zone_names, trend, sd, strict=True))
        elif tf.resolution("trend") == "blend":
            shown = f"blend {_conc(analyte, trend[0])} ± {_conc(analyte, sd[0])}"
        else:
            shown = "-"
        amp = tf.amplitude()
        season = "-" if tf.resolution("seasonal") is None else (
            "; ".join(f"{z} {_conc(analyte, v)}" for z, v in zip(a.project.zone_names, amp,
                                                                 strict=True))
            if tf.resolution("seasonal") == "zone" else f"blend {_conc(analyte, amp[0])}")
        t = tests.loc[analyte]
        rows.append({
            "Analyte": get_analyte(analyte).label(), "Results used": tf.n,
            "Time model (AICc)": tf.model,
            "Trend per year ± sd": shown if shown == "-" else f"{shown} {unit}",
            "Seasonal amplitude": season if season == "-" else f"{season} {unit}",
            "Temporal CV (replaces the setting)": f"{tf.temporal_cv:.1%}",
            "Mann-Kendall S, p": f"{t['S']:.0f}, {t['p']:.2g} ({t['trend']})",
            "Sen's slope per year": f"{_conc(analyte, t['sen_slope_per_year'])} {unit}",
        })
    return pd.DataFrame(rows)


def last_year_table(a: Analysis, fc: Forecast, units: str, rows: int = 12) -> pd.DataFrame:
    """The latest year each rate stays compliant, for about ``rows`` rates of the pump range."""
    w = a.project.well
    keep = (fc.rates >= w.rate_min) & (fc.rates <= (w.rate_max if np.isfinite(w.rate_max)
                                                    else fc.rates[-1]))
    idx = np.where(keep)[0]
    idx = idx[:: max(1, len(idx) // rows)]
    last = int(fc.years[-1])
    return pd.DataFrame({
        "Rate": [format_quantity(float(fc.rates[i]), "rate", units) for i in idx],
        "Compliant through": ["not in " + str(int(fc.years[0])) if not np.isfinite(v)
                              else f"{int(v)} (whole horizon)" if v == last else str(int(v))
                              for v in fc.last_year[idx]],
    })


def outside_table(a: Analysis, fc: Forecast, units: str) -> pd.DataFrame:
    out = fc.check[fc.check["outside"]]
    return pd.DataFrame({
        "Sampled": [pd.Timestamp(t).strftime("%Y-%m-%d") for t in out["sampled_at"]],
        "Analyte": [get_analyte(k).label() for k in out["analyte"]],
        "Rate": [format_quantity(float(q), "rate", units) for q in out["rate"]],
        "Result": [_conc(k, v) + " " + get_analyte(k).display_unit
                   for k, v in zip(out["analyte"], out["value"], strict=True)],
        "Band": [f"{_conc(k, lo)} to {_conc(k, hi)}" for k, lo, hi in
                 zip(out["analyte"], out["lower"], out["upper"], strict=True)],
        "May suggest": list(out["suggests"]),
        "Row": list(out["source_row"]),
    })


def history_section(a: Analysis, units: str = "US", fc: Forecast | None = None) -> Section | None:
    """The monitoring-history section, or None when the project has no usable history."""
    fc = fc if fc is not None else forecast(a, units)
    if fc is None:
        return None
    from blendq.report.charts.forecast import forecast_window_chart, history_chart
    from blendq.report.charts.render import chart_figure

    s = a.project.settings
    n_out, n_all = int(fc.check["outside"].sum()), len(fc.check)
    notes = [n for tf in a.history.values() for n in tf.notes] + fc.notes
    blocks = [
        Paragraph("Each zone's concentration is modelled over time (a constant, a linear "
                  "trend, an annual harmonic, or both; chosen per analyte by the smallest "
                  "AICc unless set), anchored at the step test's zone values, with each "
                  "history result's zone shares taken from the fitted hydraulic model at the "
                  "rate the pump log gives for its time. A trend or season the history's "
                  "rates cannot attribute to a zone is fitted as a term of the blend. The "
                  "scatter about the model gives the water's temporal variability, which "
                  "replaces the temporal_cv setting in the operating window. Beside it, the "
                  "Mann-Kendall test and Sen's slope on the blended results, whatever the "
                  "rate."),
        Table(model_table(a, fc), "Time models of the monitoring history."),
        *([BulletList(notes)] if notes else []),
        BulletList(fc.sentences),
        chart_figure(f"Operating window year by year over {s.forecast_years} years: the rates "
                     "that meet every limit as it is judged (the season's peak month for "
                     "limits judged on single samples, the year's mean for annual means) and "
                     "the pumping level, from the posterior draws of the time models and the "
                     "zone shares.", forecast_window_chart(
                         fc, units, a.window.recommended, 1 - s.exceedance_probability)),
        Table(last_year_table(a, fc, units), "The latest year each rate stays compliant."),
        Paragraph(f"Predictive check: {n_out} of {n_all} history results lie outside the "
                  f"{s.interval:.0%} band the model gives for their date and rate with the "
                  f"result left out (about {1 - s.interval:.0%} expected by chance)."),
        *([Table(outside_table(a, fc, units), "History results outside their band.")]
          if n_out else []),
        chart_figure("History results against date with their leave-one-out bands.",
                     history_chart(fc.check, a.limits, s.margin, s.interval), svg=False),
        *([BulletList(fc.triggers)] if fc.triggers else []),
        Callout("The forecast assumes each time model holds over the horizon (a trend goes on "
                "as fitted); it is a planning aid, not a compliance determination. New "
                "results outside their band are the first sign that it does not.", "caution"),
    ]
    return Section("Monitoring history and the years ahead", tuple(blocks), "history")


def history_json(a: Analysis, fc: Forecast | None = None) -> dict | None:
    """The monitoring-history results for summary.json, in base units (mg/L on each analyte's
    canonical basis, m^3/d, calendar years), or None without a usable history.

    Per analyte: the time model chosen, the trend per year of each zone (or of the blend)
    with its sd and its two-sided interval at ``settings.interval`` (normal: the model is
    linear in its coefficients), where the trend is attributed ("zone", "blend", or null for
    a model without a trend), the temporal CV from the history, and the Mann-Kendall test with
    Sen's slope on the blended results. Then the latest year the recommended rate stays
    compliant (its nearest rate of the grid) and the rate that stays compliant longest.
    """
    from scipy.stats import norm

    fc = fc if fc is not None else forecast(a)
    if fc is None:
        return None
    s = a.project.settings
    z = float(norm.ppf(0.5 + s.interval / 2))
    tests = fc.trend_tests.set_index("analyte")
    analytes = {}
    for analyte, tf in a.history.items():
        where = tf.resolution("trend")
        trend, sd = tf.trend()
        names = a.project.zone_names if where == "zone" else ["blend"] if where else []
        t = tests.loc[analyte]
        analytes[analyte] = {
            "time_model": tf.model,
            "results_used": int(tf.n),
            "trend_attribution": where,
            "trend_mg_per_l_per_year": {k: float(b) for k, b in zip(names, trend, strict=True)},
            "trend_sd_mg_per_l_per_year": {k: float(e) for k, e in zip(names, sd, strict=True)},
            "trend_interval_mg_per_l_per_year": {
                k: [float(b - z * e), float(b + z * e)]
                for k, b, e in zip(names, trend, sd, strict=True)},
            "temporal_cv": float(tf.temporal_cv),
            "mann_kendall_p": float(t["p"]),
            "mann_kendall_trend": str(t["trend"]),
            "sen_slope_mg_per_l_per_year": float(t["sen_slope_per_year"]),
        }

    def year(v):
        return int(v) if np.isfinite(v) else None

    rec = a.window.recommended
    at_rec = None
    if rec is not None and len(fc.rates):
        at_rec = year(fc.last_year[int(np.argmin(np.abs(fc.rates - rec)))])
    best = fc.best_rate
    best_year = (year(fc.last_year[int(np.argmin(np.abs(fc.rates - best)))])
                 if best is not None else None)
    return {
        "interval": float(s.interval),
        "horizon_years": [int(fc.years[0]), int(fc.years[-1])],
        "analytes": analytes,
        "latest_compliant_year_at_recommended_rate": at_rec,
        "longest_compliant_rate_m3_per_day": best,
        "longest_compliant_through_year": best_year,
        "results_outside_band": int(fc.check["outside"].sum()),
        "results_checked": len(fc.check),
    }
