"""Turn an :class:`~blendq.decide.analysis.Analysis` into a report and machine-readable outputs.

Sections: the decision in one sentence; cautions; inputs and their review; zone estimates;
operating window; charts; assumptions; methods with references. Tables are converted to the
display units (US or SI) here, at the edge; the analysis itself stays in base units.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq import CAUTIONS, __version__
from blendq.chemistry.analytes import get_analyte
from blendq.decide.analysis import Analysis, decision_sentence
from blendq.decide.sweep import compliance_statistics, exceedance, statistic_quantiles
from blendq.report.document import (
    BulletList,
    Callout,
    Document,
    Figure,
    KeyValues,
    Paragraph,
    Section,
    Table,
)
from blendq.report.pump_section import pump_section_for
from blendq.report.scenario_section import scenario_section
from blendq.review.data_notes import data_notes, thin_data_note
from blendq.units import (
    DISPLAY_UNITS,
    display_unit_label,
    format_percent,
    format_quantity,
    from_base,
)

REFERENCES = [
    "Thiem, G. (1906) Hydrologische Methoden. Gebhardt, Leipzig.",
    "Cooper, H.H. and Jacob, C.E. (1946) A generalized graphical method for evaluating formation "
    "constants and summarizing well-field history. Trans. AGU 27(4), 526-534.",
    "Jacob, C.E. (1947) Drawdown test to determine effective radius of artesian well. Trans. ASCE 112.",
    "Rorabaugh, M.I. (1953) Graphical and theoretical analysis of step-drawdown test of artesian "
    "well. Proc. ASCE 79.",
    "Hawkins, M.F. (1956) A note on the skin effect. J. Petroleum Technology 8(12).",
    "Walton, W.C. (1962) Selected analytical methods for well and aquifer evaluation. Illinois "
    "State Water Survey Bulletin 49.",
    "Golub, G.H. and Pereyra, V. (1973) SIAM J. Numer. Anal. 10(2), 413-432 (variable projection).",
    "Oliver, D.S., He, N. and Reynolds, A.C. (1996) Conditioning permeability fields to pressure "
    "data. Proc. 5th European Conference on the Mathematics of Oil Recovery (randomised maximum "
    "likelihood).",
    "Kitanidis, P.K. (1995) Quasi-linear geostatistical theory for inversing. Water Resources "
    "Research 31(10), 2411-2419.",
    "Birge, R.T. (1932) The calculation of errors by the method of least squares. Physical "
    "Review 40, 207-227.",
    "Paillet, F.L. (1998) Water Resources Research 34(5), 997-1010 (flow-log analysis).",
    "Konikow, L.F., Hornberger, G.Z., Halford, K.J. and Hanson, R.T. (2009) Revised multi-node "
    "well (MNW2) package for MODFLOW. USGS Techniques and Methods 6-A30.",
    "Izbicki, J.A. and others, USGS reports on well-bore flow and depth-dependent sampling.",
    "US EPA, 40 CFR 141.62 and 141.66 (maximum contaminant levels); 40 CFR 136.3 (holding times).",
    "US EPA, 40 CFR 141.23 (nitrate confirmation sample; running annual average of quarterly "
    "samples for inorganics, 141.23(i)), as restated by state program guidance.",
    "Fenton, L.F. (1960) The sum of log-normal probability distributions in scatter transmission "
    "systems. IRE Trans. Communication Systems 8(1), 57-67.",
    "WHO (2017) Guidelines for Drinking-water Quality, 4th ed. incorporating the first addendum.",
    "Directive (EU) 2020/2184, Annex I.",
    "National Research Council (1995) Nitrate and Nitrite in Drinking Water.",
    "Standard Methods for the Examination of Water and Wastewater, 1030 E (ion balance).",
    "USGS National Field Manual for the Collection of Water-Quality Data, chapter A6.",
]

ASSUMPTIONS = [
    "Each zone joins the well through its own conductance and far-field head; zones connect "
    "only through the wellbore (layered, anisotropic aquifer).",
    "Zone conductances are constant over the step test; for the operating horizon each transient "
    "zone's response to pumping is scaled by the Cooper-Jacob ratio G(horizon)/G(test) (steady "
    "and given zones are not scaled) and the ambient crossflow is held.",
    "Complete mixing where streams meet in the well; steady flow; no reaction.",
    "Zone water quality does not change with rate (no induced inflow from elsewhere); it "
    "changes with time only as the monitoring history's time model says (a trend and a season "
    "where a history is given and the model is chosen; otherwise constant).",
    "A zone whose top the pumping level passes gives water in proportion to its saturated "
    "thickness (Dupuit-Thiem); the seepage face is neglected and water cascading from it is "
    "flagged, not modelled.",
    "Water that thief zones take in during an idle time returns first after a pump start, "
    "washed out of a well-mixed volume (crossflow memory); the stored volume is the ambient "
    "crossflow held steady over the idle time, an upper bound.",
    "Bands describe the uncertainty of the mean discharge concentration from lab error, "
    "flow-log and level error and the priors; they are not the spread of single future samples.",
    "The window judges each limit on the statistic its rule judges (a single sample with its "
    "confirmation sample, or the annual mean of quarterly samples): the water's temporal "
    "variability at a fixed rate (a coefficient of variation per analyte) and the lab's error "
    "of a compliance result are added to the mean as lognormal factors. Two samples taken "
    "within a day share one temporal draw; quarterly samples have independent ones.",
    "Non-detects are censored values: the fitted blend may not exceed the detection limit.",
]


def conc_display(analyte: str, value_mg_l):
    """Concentration in the analyte's display unit (mg/L or ug/L) and that unit."""
    an = get_analyte(analyte)
    return an.in_display_unit(value_mg_l), an.display_unit


def _sig(value: float, scale: float) -> str:
    """Three significant digits; values below a millionth of the analyte's scale print as 0."""
    if not np.isfinite(value):
        return "no upper limit"
    if abs(value) <= 1e-6 * scale:
        return "0"
    return f"{value:.3g}"


def zone_display_table(a: Analysis) -> pd.DataFrame:
    """Zone estimates in display units, unresolved zones as a range only."""
    rows = []
    scales = {an: conc_display(an, np.nanmax(np.abs(g[["estimate", "range_low"]].to_numpy(float))))[0]
              for an, g in a.zones.groupby("analyte")}
    for _, r in a.zones.iterrows():
        an = get_analyte(r["analyte"])
        vals, unit = conc_display(r["analyte"], [r["estimate"], r["lower"], r["upper"],
                                                 r["range_low"], r["range_high"]])
        est, lo, hi, rlo, rhi = vals
        sc = float(scales[r["analyte"]]) if np.isfinite(scales[r["analyte"]]) else 1.0
        if r["verdict"] == "not resolved":
            shown = f"{_sig(rlo, sc)} to {_sig(rhi, sc)}"
            interval = "-"
        else:
            shown = _sig(est, sc)
            interval = f"{_sig(lo, sc)} to {_sig(hi, sc)}"
        rows.append({"Zone": r["zone"], "Analyte": an.label(), "Unit": unit, "Estimate": shown,
                     f"{a.project.settings.interval:.0%} interval": interval,
                     "Verdict": r["verdict"]})
    return pd.DataFrame(rows)


def window_display_table(a: Analysis, units: str) -> pd.DataFrame:
    rows = []
    for lo, hi, why_lo, why_hi in a.window.intervals:
        rows.append({"From": format_quantity(lo, "rate", units),
                     "To": format_quantity(hi, "rate", units),
                     "Lower end set by": why_lo, "Upper end set by": why_hi})
    return pd.DataFrame(rows, columns=["From", "To", "Lower end set by", "Upper end set by"])


def compliance_table(a: Analysis) -> pd.DataFrame:
    """Each governing limit with the statistic the window judges it on."""
    rows = []
    for analyte, st in compliance_statistics(a.project, a.limits).items():
        b = st.limit.compliance
        rows.append({"Analyte": get_analyte(analyte).label(), "Limit": st.limit.label(),
                     "Judged on": b.describe(), "Rule": b.rule(),
                     "Source of the rule": f"{b.citation} ({b.status})",
                     "Temporal CV": f"{format_percent(st.temporal_cv)} ({st.temporal_cv_source})",
                     "Lab error": f"{format_percent(st.lab_cv)} ({st.lab_cv_source})"})
    return pd.DataFrame(rows, columns=["Analyte", "Limit", "Judged on", "Rule",
                                       "Source of the rule", "Temporal CV", "Lab error"])


def at_rate_table(a: Analysis, rate: float, units: str) -> pd.DataFrame:
    """Predicted quality and level at one rate: median and band of the mean, and the
    posterior probability that the judged statistic exceeds margin x limit in more than beta
    of samples."""
    k = int(np.argmin(np.abs(a.prediction.rates - rate)))
    s = a.project.settings
    q = [(1 - s.interval) / 2, 0.5, 1 - (1 - s.interval) / 2]
    stats = compliance_statistics(a.project, a.limits)
    rows = []
    for j, analyte in enumerate(a.prediction.analytes):
        c = a.prediction.concentration[:, k:k + 1, j]
        vals = np.quantile(c[:, 0], q)
        (lo, med, hi), unit = conc_display(analyte, vals)
        lim = a.limits.get(analyte)
        st = stats.get(analyte)
        sd = st.log_sd if st is not None else 0.0
        beta = st.sample_probability if st is not None else s.sample_exceedance_probability
        p = float(exceedance(c, s.margin * lim.canonical(), sd, beta)[0]) if lim else np.nan
        if st is not None:
            (slo, shi), _ = conc_display(analyte, statistic_quantiles(c, [q[0], q[2]], sd)[:, 0])
            judged = f"{st.limit.compliance.describe()}: {slo:.3g} to {shi:.3g} {unit}"
        else:
            judged = "-"
        rows.append({"Analyte": get_analyte(analyte).label(), "Median": f"{med:.3g} {unit}",
                     "Band": f"{lo:.3g} to {hi:.3g} {unit}",
                     "Judged statistic (band)": judged,
                     "Limit": lim.label() if lim else "none",
                     f"P(> {s.margin:.0%} of limit)": f"{p:.1%}" if lim else "-"})
    lv = np.quantile(a.prediction.pumping_level[:, k], q)
    rows.append({"Analyte": "Pumping level (depth)",
                 "Median": format_quantity(lv[1], "length", units),
                 "Band": f"{format_quantity(lv[0], 'length', units)} to "
                         f"{format_quantity(lv[2], 'length', units)}",
                 "Judged statistic (band)": "-",
                 "Limit": "intake - submergence " + format_quantity(
                     a.project.well.operating_intake - a.project.well.submergence, "length", units),
                 f"P(> {s.margin:.0%} of limit)": "-"})
    return pd.DataFrame(rows)


def sample_use_blocks(a: Analysis, units: str | None = None) -> list:
    """What the fit did with the samples the review flagged, the review decisions recorded in
    the project, and the window without each step's samples (which steps drive the result)."""
    use = a.sample_use
    mode = a.sample_mode
    flagged = use[use["reason"].astype(str) != ""] if len(use) else use
    text = {"keep": "Flagged samples stay in the fit (noted below).",
            "exclude": "Samples with a warning or error are left out of the fit.",
            "downweight": "Samples with a warning or error are kept with their uncertainty "
                          "multiplied by the down-weighting factor."}[mode]
    used = int(use["used"].astype(bool).sum()) if len(use) else 0
    blocks = [Paragraph(f"Samples in the fit ({mode}): {used} of {len(use)} samples used. {text}")]
    if len(flagged):
        t = flagged[["sample_id", "used", "sigma_factor", "reason"]].copy()
        t["used"] = t["used"].map(lambda v: "yes" if v else "no")
        t["sigma_factor"] = t["sigma_factor"].map(lambda v: f"{v:g}")
        blocks.append(Table(t.rename(columns={"sample_id": "Sample", "used": "Used",
                                              "sigma_factor": "Uncertainty x",
                                              "reason": "Flagged for"}),
                            "Use of the flagged samples in the fit."))
    decisions = a.decisions
    if len(decisions):
        t = decisions[["entry", "sample_id", "analyte", "action", "factor", "reason",
                       "results"]].copy()
        t["entry"] = t["entry"].map(lambda i: f"review[{i}]")
        t["analyte"] = t["analyte"].map(lambda v: v or "all")
        t["factor"] = [f"{f:g}" if act == "downweight" else "-"
                       for f, act in zip(t["factor"], t["action"], strict=True)]
        blocks.append(Table(t.rename(columns={
            "entry": "Decision", "sample_id": "Sample", "analyte": "Analyte",
            "action": "Action", "factor": "Uncertainty x", "reason": "Reason",
            "results": "Results"}), "Review decisions recorded in the project ([[review]] in "
            "project.toml); every command that fits uses them."))
    else:
        blocks.append(Paragraph("Review decisions: none recorded in the project."))
    # which steps drive the result: the window found again without each step's samples
    from blendq.decide.analysis import leave_one_step_out

    units = units or a.project.settings.display_units
    loo = leave_one_step_out(a)

    def rate(v):
        return "-" if not np.isfinite(v) else format_quantity(v, "rate", units)

    def shift(v):
        return "-" if not np.isfinite(v) else ("+" if v > 0 else "") + format_quantity(
            v, "rate", units)

    table = pd.DataFrame({
        "Left out": ["nothing" if s == "none" else f"step {s}" for s in loo["step"]],
        "Results": loo["results_left_out"].astype(int).astype(str),
        "Window": [f"{rate(lo)} to {rate(hi)}" if np.isfinite(lo) else "none"
                   for lo, hi in zip(loo["window_low"], loo["window_high"], strict=True)],
        "Recommended": [rate(v) for v in loo["recommended"]],
        "Lower end moves": ["-" if s == "none" else shift(v)
                            for s, v in zip(loo["step"], loo["shift_low"], strict=True)],
        "Upper end moves": ["-" if s == "none" else shift(v)
                            for s, v in zip(loo["step"], loo["shift_high"], strict=True)],
        "Note": loo["note"]})
    blocks.append(Table(table, "The operating window found again without each step's lab "
                               "samples (the step's levels stay): a step whose removal moves "
                               "an end by much carries that end alone. Every row, the first "
                               f"included, is a run with {loo.attrs.get('draws', '')} posterior "
                               "draws, so the rows compare like with like."))
    return blocks


def step_drawdown_figures(a: Analysis, units: str) -> list[Figure]:
    """The step-drawdown charts (none without a step-drawdown analysis)."""
    from blendq.report.charts import stepdrawdown as sd
    from blendq.report.charts.render import chart_figure

    lc = a.step_drawdown
    if lc is None or lc.result is None:
        return []
    res = lc.result
    figures = [
        chart_figure("Specific drawdown against rate with the fitted well-loss lines.",
                     sd.specific_drawdown_chart(res, units), svg=False),
        chart_figure("Drawdown against rate: steps, fits and the linear part.",
                     sd.drawdown_rate_chart(res, units), svg=False),
    ]
    if res.record is not None:
        figures.append(chart_figure("Water-level record with each step's extrapolation.",
                                    sd.step_record_chart(res, units), svg=False))
    return figures


def step_transmissivity_blocks(a: Analysis, units: str) -> list:
    """The apparent transmissivity from the step test's B (Cooper-Jacob at the well face), when
    the fit has a reference time: a paragraph, or nothing."""
    from blendq.well.stepdrawdown import ASSUMED_STORATIVITY, transmissivity_from_linear_loss

    res = a.step_drawdown.result
    if res.transmissivity_from_b is not None or not np.isfinite(res.reference_time):
        return []
    zone_s = [z.storativity for z in a.project.zones]
    assumed = not zone_s or None in zone_s
    t = transmissivity_from_linear_loss(res.jacob.linear_loss, res.reference_time,
                                        a.project.well.well_radius,
                                        ASSUMED_STORATIVITY if assumed else sum(zone_s))
    if not np.isfinite(t):
        return []
    how = (f"an assumed storativity of {ASSUMED_STORATIVITY:g} (common practice)" if assumed
           else "the zones' summed storativity")
    return [Paragraph(f"Apparent transmissivity from B (Cooper-Jacob at the well face, with the "
                      f"well radius and {how}): {format_quantity(t, 'transmissivity', units)}. "
                      "B also holds the linear losses of the skin, gravel pack and screen, so "
                      "this is at most the aquifer's transmissivity, not an aquifer test.")]


def step_drawdown_section(a: Analysis, units: str) -> Section:
    """Step-drawdown analysis, well condition, and which pumping-level prediction is used,
    with the step-drawdown charts."""
    lc = a.step_drawdown
    blocks: list = []
    if lc is None or lc.result is None:
        why = lc.reason if lc is not None else "not run"
        blocks.append(Paragraph(f"No step-drawdown analysis: {why}."))
        return Section("Step-drawdown test and well condition", tuple(blocks), "stepdrawdown")
    res = lc.result
    blocks.append(BulletList(res.summary_lines(units)))
    blocks += step_transmissivity_blocks(a, units)
    blocks.append(Paragraph("Walton's (1962) well-condition classes from the well-loss "
                            "coefficient C (below 5, 5-10, 10-40, above 40 s²/ft⁵, set from "
                            "field experience) are taken from a published restatement that "
                            "attributes them to Walton, not from the bulletin itself; check "
                            "them against the bulletin before relying on them."))
    if lc.comparison is not None:
        c = lc.comparison
        du = DISPLAY_UNITS[units]
        unit = f"{du['length']}/({du['rate']})"
        from blendq.units import Q_

        def per(v):
            return Q_(v, "d/m**2").to(f"{du['length']}/({du['rate']})").magnitude

        blocks.append(Paragraph(
            f"Linear loss: step test B = {per(c.step_linear_loss):.4g} ± "
            f"{per(c.step_stderr):.2g} {display_unit_label(unit)}; zone model 1/ΣG = "
            f"{per(c.zone_linear_loss):.4g} ± {per(c.zone_stderr):.2g} "
            f"{display_unit_label(unit)} (difference {c.relative_difference:+.1%}). "
            f"The window uses the pumping level from the {lc.source}: {lc.reason}."))
    else:
        blocks.append(Paragraph(f"The window uses the pumping level from the {lc.source}: "
                                f"{lc.reason}."))
    blocks += step_drawdown_figures(a, units)
    return Section("Step-drawdown test and well condition", tuple(blocks), "stepdrawdown")


def quality_chart(a: Analysis, units: str):
    """Discharge quality against rate (matplotlib Figure), as the report draws it."""
    from blendq.report.charts import quality

    s = a.project.settings
    return quality.quality_vs_rate(a.prediction, a.window, a.limits, s.margin, s.interval,
                                   a.project, units, None,
                                   compliance_statistics(a.project, a.limits))


def shares_chart(a: Analysis, units: str):
    """Each zone's share of the discharge against rate (matplotlib Figure)."""
    from blendq.report.charts import quality

    return quality.zone_shares(a.prediction, a.project.zone_names, a.window, units)


def levels_chart(a: Analysis, units: str):
    """Pumping level against rate at the operating horizon (matplotlib Figure)."""
    from blendq.report.charts import quality

    return quality.pumping_level(a.prediction, a.project, a.window, units)


def zones_chart(a: Analysis):
    """Zone estimates with intervals (matplotlib Figure)."""
    from blendq.report.charts import quality

    return quality.zone_estimates(a.zones, a.prediction.analytes)


def quality_figures(a: Analysis, units: str) -> list[Figure]:
    """The decision charts: quality, zone shares and pumping level against rate; zone
    estimates."""
    from blendq.report.charts.render import chart_figure

    s = a.project.settings
    stats = compliance_statistics(a.project, a.limits)
    single = [k for k, st in stats.items() if st.limit.compliance.statistic == "single sample"]
    extra = (f" Dashed: {s.interval:.0%} range of a compliance sample for the limits judged on "
             f"single samples ({', '.join(single)}), with the water's temporal variability and "
             "the lab's error." if single else "")
    if a.window.empty:  # the chart's title stays short; the reason is given here
        extra += f" No operating window: {a.window.reason_empty or 'no rate meets every criterion'}."
    return [
        chart_figure("Discharge quality against pumping rate: median and band of the mean "
                     "discharge concentration, limits, the step samples and the operating window."
                     + extra, quality_chart(a, units)),
        chart_figure("Share of the discharge from each zone against pumping rate.",
                     shares_chart(a, units)),
        chart_figure(f"Pumping level against rate after {s.horizon:g} days of pumping (the "
                     "operating horizon), with the intake and screen limits. The measured step "
                     "levels are from the hours-long test and so lie above the long-term "
                     "prediction.", levels_chart(a, units)),
        chart_figure("Zone estimates with intervals; unresolved zones as the range the data "
                     "allow.", zones_chart(a)),
    ]


ADDED_REFERENCES = [
    "Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data, "
    "2nd ed. ILRI Publication 47, Wageningen (step-drawdown tests; Hantush-Bierschenk method).",
    "Day-Lewis, F.D. and others (2011) USGS Techniques and Methods 4-D2 (two-condition "
    "flow-log analysis).",
    "Halford, K.J. and Hanson, R.T. (2002) USGS Open-File Report 02-293 (multi-node wells).",
    "Bureau International des Poids et Mesures (2019) The International System of Units (SI), "
    "9th ed., section 5.4.4 (digits grouped in threes by a small space).",
    "Strack, O.D.L. (1989) Groundwater Mechanics. Prentice Hall (discharge potential of "
    "confined-unconfined flow).",
    "Levenspiel, O. (1999) Chemical Reaction Engineering, 3rd ed. Wiley (washout of an ideal "
    "mixed vessel).",
    "Mann, H.B. (1945) Nonparametric tests against trend. Econometrica 13(3), 245-259.",
    "Sen, P.K. (1968) Estimates of the regression coefficient based on Kendall's tau. J. Am. "
    "Stat. Assoc. 63(324), 1379-1389.",
    "Hurvich, C.M. and Tsai, C.-L. (1989) Regression and time series model selection in small "
    "samples. Biometrika 76(2), 297-307.",
]


def report_paper(a: Analysis) -> str:
    """Paper of the PDF: the project's ``paper`` setting, else Letter for a US project and A4
    for an SI one (the project's display units, not a one-off ``--units``)."""
    s = a.project.settings
    if s.paper:
        return s.paper
    return "letter" if s.display_units == "US" else "a4"


def report_date(a: Analysis) -> str:
    """Date of the report (ISO 8601): the project's ``report_date``, else the day given by
    ``SOURCE_DATE_EPOCH`` (UTC) when that asks for a reproducible build, else today."""
    import datetime as dt
    import os

    if a.project.settings.report_date:
        return a.project.settings.report_date
    epoch = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    if epoch:
        try:
            return dt.datetime.fromtimestamp(int(epoch), dt.timezone.utc).date().isoformat()
        except (ValueError, OverflowError, OSError):
            pass  # not a whole number of seconds: ignore it, as ReportLab does not
    return dt.date.today().isoformat()


def report_identity_block(a: Analysis, created: str) -> KeyValues:
    """Date, who prepared and who reviewed the report, and the program that wrote it."""
    s = a.project.settings
    return KeyValues([
        ("Report date", report_date(a)),
        ("Prepared by", s.prepared_by or "not stated (set prepared_by in project.toml)"),
        ("Reviewed by", s.reviewed_by or "not yet reviewed: a licensed professional reviews "
                                         "any operating change"),
        ("Written by", created or f"blendq {__version__}"),
    ])


def _rounded_text(values, units: str, digits: int = 4) -> list[str]:
    """Numbers as the report writes them (thousands grouped by the unit system's rule)."""
    from blendq.units import significant

    return ["" if not np.isfinite(v) else significant(float(v), digits, units)
            for v in np.asarray(values, float)]


def _clock(value) -> str:
    """A date and time to the second (an end computed from a duration in days can miss the
    minute by a rounding error), seconds shown only when not zero."""
    if value is None or pd.isna(value):
        return ""
    t = pd.Timestamp(value).round("s")
    return t.strftime("%Y-%m-%d %H:%M:%S" if t.second else "%Y-%m-%d %H:%M")


def raw_data_appendix(a: Analysis, units: str) -> Section:
    """Appendix: the data as given - steps, water levels and lab results with qualifiers."""
    p = a.project
    du = DISPLAY_UNITS[units]
    rate_u, len_u = du["rate"], du["length"]
    blocks: list = [Paragraph(
        "The test data as read from the project's files, in the report's units (lab results "
        "as the lab reported them). Row: the data row of the source file.")]
    st = p.steps
    if len(st):
        def when(col):
            return [_clock(v) for v in st[col]] if col in st else [""] * len(st)
        steps = pd.DataFrame({
            "Step": st["step"].astype(str),
            f"Rate [{display_unit_label(rate_u)}]": _rounded_text(
                from_base(st["rate"].to_numpy(float), "rate", rate_u), units),
            "Start": when("start"), "End": when("end"),
            "Duration [min]": _rounded_text(st["duration"].to_numpy(float) * 1440.0, units),
            f"Pumping level [{display_unit_label(len_u)} depth]": _rounded_text(
                from_base(st["pumping_level"].to_numpy(float), "length", len_u), units),
            "Recovered before": ["yes" if bool(v) is True and not pd.isna(v) else "no"
                                 for v in st["recovered_before"]],
            "Row": st["source_row"].astype(str),
        })
        blocks.append(Table(steps, f"Steps ({p.files.get('steps', 'steps')})."))
    lv = p.levels
    if len(lv):
        levels = pd.DataFrame({
            "Time": [_clock(v) for v in lv["time"]],
            f"Level [{display_unit_label(len_u)} depth]": _rounded_text(
                from_base(lv["level"].to_numpy(float), "length", len_u), units),
            "Row": lv["source_row"].astype(str),
        })
        blocks.append(Table(levels, f"Water levels ({p.files.get('levels', 'levels')})."))
    else:
        blocks.append(Paragraph("No water-level record was given (levels table)."))
    sm = p.samples
    if len(sm):
        def text(col):
            return ["" if col not in sm or pd.isna(v) else str(v) for v in
                    (sm[col] if col in sm else [None] * len(sm))]

        def reported(i):
            r = sm.iloc[i]
            if bool(r.get("nondetect", False)) and not pd.isna(r.get("detection_limit")):
                an = get_analyte(r["analyte"])
                dl = an.in_display_unit([r["detection_limit"]])[0]
                return f"< {dl:.4g} {an.display_unit}"
            val = r.get("reported_value")
            if val is None or (isinstance(val, float) and np.isnan(val)):
                an = get_analyte(r["analyte"])
                return f"{an.in_display_unit([r['value']])[0]:.4g} {an.display_unit}"
            unit = "" if pd.isna(r.get("reported_unit")) else str(r.get("reported_unit"))
            basis = "" if pd.isna(r.get("reported_basis")) else str(r.get("reported_basis"))
            num = f"{float(val):.4g}" if isinstance(val, (int, float)) else str(val)
            return " ".join(x for x in (num, unit, basis) if x)

        lab = pd.DataFrame({
            "Sample": text("sample_id"), "Step": text("step"),
            "Analyte": [get_analyte(x).label() for x in sm["analyte"]],
            "Result as reported": [reported(i) for i in range(len(sm))],
            "Qualifier": text("qualifier"),
            "Sampled": [_clock(v) for v in sm["sampled_at"]],
            "Duplicate of": text("duplicate_of"),
            "Row": sm["source_row"].astype(str),
        })
        depth = pd.to_numeric(sm["depth"], errors="coerce").to_numpy(float) \
            if "depth" in sm else np.full(len(sm), np.nan)
        if np.isfinite(depth).any():  # samples taken inside the well
            lab.insert(3, f"Depth [{display_unit_label(len_u)}]",
                       _rounded_text(from_base(depth, "length", len_u), units))
        blocks.append(Table(lab, f"Lab results ({p.files.get('samples', 'samples')}), with "
                                 "the lab's qualifiers."))
    return Section("Appendix: the data", tuple(blocks), "appendix-data")


def memory_section(a: Analysis, units: str) -> Section:
    """Crossflow memory: the water the thief zones stored while the well stood idle, the step
    samples that may carry it, and how long to pump before a compliance sample."""
    from blendq.well.memory import memory_lines

    flag = float(a.qa.options["returned_water_flag"])
    exclude = float(a.qa.options["returned_water_exclude"])
    return Section("Crossflow memory and first flush", (
        Paragraph("At rest, ambient crossflow carries water from the zones of high head into "
                  "thief zones through the open well; when the pump starts, they return that "
                  "water first. Volumes below are the fitted zone model's ambient crossflow "
                  "times the idle time; the return is modelled as the washout of a well-mixed "
                  "volume (blendq docs methods). A step sample predicted to hold more than "
                  f"{flag:.0%} of returned water is flagged and its uncertainty widened by "
                  f"its predicted error in the fit; above {exclude:.0%} it is left out. "
                  "The advice is a planning figure: compliance samples follow the regulator's "
                  "sampling rules."),
        BulletList(memory_lines(a.memory, flag, units)),
    ), "memory")


def build_document(a: Analysis, units: str = "US", created: str = "") -> Document:
    """The report of an analysis as a renderer-neutral document (its charts drawn here)."""
    p = a.project
    s = p.settings
    w = p.well
    decision = decision_sentence(a, units)
    inputs = KeyValues([
        ("Well", w.name), ("Location", w.location or "-"), ("Depth datum", w.datum),
        ("Pump intake" + (" (step test)" if w.operating_intake_depth is not None else ""),
         format_quantity(w.pump_intake_depth, "length", units)),
        *([("Pump intake (operation)", format_quantity(w.operating_intake, "length", units))]
          if w.operating_intake_depth is not None else []),
        ("Required submergence", format_quantity(w.submergence, "length", units)),
        ("Pump range", f"{format_quantity(w.rate_min, 'rate', units)} to "
                       f"{format_quantity(w.rate_max, 'rate', units) if np.isfinite(w.rate_max) else 'unlimited'}"),
        ("Demand", format_quantity(w.demand, "rate", units) if w.demand else "-"),
        ("Steps", str(len(p.steps))), ("Lab results", str(len(p.samples))),
        ("Flow logs", str(p.flowlogs["log"].nunique()) if len(p.flowlogs) else "none"),
        ("Limits", "; ".join(f"{get_analyte(k).label()}: {lim.label()}, judged on "
                             f"{lim.compliance.describe()}"
                             for k, lim in sorted(a.limits.items())) or "none"),
        ("Margin", f"{s.margin:.0%} of each limit"),
        ("Samples that may exceed the margin (beta)", f"{s.sample_exceedance_probability:.0%}"),
        ("Confidence of the window (1 - alpha)", f"{1 - s.exceedance_probability:.0%}"),
        ("Posterior draws / seed", f"{a.draws.n_draws} / {a.draws.seed}"),
    ])
    zones_geo = pd.DataFrame([{"Zone": z.name,
                               "Top": format_quantity(z.top, "length", units),
                               "Bottom": format_quantity(z.bottom, "length", units),
                               "Static level": format_quantity(z.static_level, "length", units)
                               if z.static_level is not None else "-"} for z in p.zones])
    qa_lines = a.qa.summary_lines()
    qa_table = a.qa.findings[["severity", "rule", "sample_id", "analyte", "message"]].copy() \
        if len(a.qa.findings) else pd.DataFrame(columns=["severity", "rule", "message"])
    skipped = [f"{rule}: {why}" for rule, why in a.qa.skipped]
    du = DISPLAY_UNITS[units]
    hyd = pd.DataFrame({
        "Zone": a.hydraulics["zone"],
        f"Conductance [{display_unit_label(du['conductance'])}]": [
            f"{from_base(g, 'conductance', du['conductance']):.3g}" for g in a.hydraulics["conductance"]],
        "± (relative)": [f"{v:.0%}" for v in a.hydraulics["conductance_rel_sd"]],
        "Conductance from": a.hydraulics["conductance_from"],
        f"Static level [{display_unit_label(du['length'])}]": [
            f"{from_base(-h, 'length', du['length']):.4g}" for h in a.hydraulics["static_head"]],
        "Static level from": a.hydraulics["static_head_from"],
    })
    diag = a.analyte_diagnostics.copy()
    diag["condition"] = diag["condition"].map(lambda v: f"{v:.3g}")
    diag["chi_square"] = diag["chi_square"].map(lambda v: f"{v:.3g}")
    not_fitted = [f"{k}: {v}" for k, v in a.not_fitted.items()]
    rec_rate = a.window.recommended if a.window.recommended is not None else (w.demand or a.prediction.rates[-1])
    sections = [
        Section("Decision", (Callout(decision, "decision"),
                             *(Callout(n, "note") for n in a.notes),
                             *([Callout("Thin data: " + thin_data_note(p), "caution")]
                               if thin_data_note(p) else [])), "decision"),
        Section("Cautions", tuple(Callout(c, "caution") for c in CAUTIONS), "cautions"),
        Section("Inputs and their review", (
            inputs, Table(zones_geo, "Zones (depths below the datum)."),
            Paragraph("Lab and field review: " + "; ".join(qa_lines) + "."),
            Table(qa_table, "Findings of the lab and field review."),
            *( [BulletList(skipped)] if skipped else []),
            *sample_use_blocks(a, units),
            *( [Paragraph("Not fitted: " + "; ".join(not_fitted) + ".")] if not_fitted else []),
        ), "inputs"),
        Section("Zone estimates", (
            Paragraph("Each zone's water quality estimated from the blended step samples "
                      "(and any depth samples), with the zone hydraulics fitted jointly. A zone "
                      "the data do not resolve is reported as the range of values the data "
                      "allow, never as one number."),
            Table(zone_display_table(a), "Zone water quality."),
            Table(hyd, "Zone hydraulics (fitted; 'prior' means the data added little to the "
                       "zone properties)."),
            Table(diag, "Identifiability per analyte: rank and condition number of the weight "
                        "matrix, chi-square of the fit."),
        ), "zones"),
        Section("Operating window", (
            Table(window_display_table(a, units), "Rates that meet every criterion."),
            Table(compliance_table(a),
                  "The statistic each limit is judged on. At a rate in the window, with "
                  f"{1 - a.project.settings.exceedance_probability:.0%} confidence, this "
                  "statistic exceeds margin x limit in at most "
                  f"{a.project.settings.sample_exceedance_probability:.0%} of samples. The "
                  "temporal CV should be estimated from the well's monitoring history where "
                  "one exists."),
            Table(at_rate_table(a, rec_rate, units),
                  f"Predicted discharge at {format_quantity(rec_rate, 'rate', units)}."),
        ), "window"),
        *([memory_section(a, units)] if a.memory is not None else []),
        *filter(None, [pump_section_for(a, units)]),
        Section("Charts", tuple(quality_figures(a, units)), "charts"),
    ]
    if a.history:  # the monitoring history's time models and the years ahead
        from blendq.report.history_section import history_section

        history = history_section(a, units)
        sections += [history] if history is not None else []
    if p.scenarios:
        from blendq.decide.scenarios import compare

        sections.append(scenario_section(a, compare(a), units))
    sections += [
        step_drawdown_section(a, units),
        Section("Assumptions", (BulletList(ASSUMPTIONS),), "assumptions"),
        Section("Methods and references", (
            Paragraph("Zone inflow: common wellbore head, q_i = G_i (h0_i - h_w) with optional "
                      "nonlinear loss; conductances from Thiem or Cooper-Jacob with skin; "
                      "a zone's saturated thickness once the level falls into it "
                      "(Dupuit-Thiem, by its discharge potential); optional entrance losses per "
                      "zone B q + C q^P (MNW2). "
                      "Wellbore mixing: upwind mass balance along the well. Zone "
                      "concentrations: weighted, bounded and censored least squares; hydraulics "
                      "by variable projection with scipy least_squares on flow-log, level, "
                      "prior and quality residuals. Uncertainty: seeded posterior draws by "
                      "randomised maximum likelihood (every datum and prior perturbed by its "
                      "stated error, each draw refitted in full), data groups that the best fit "
                      "misses widened by their Birge ratio, zone values the data cannot pin "
                      "spread over what the data allow. Window: for every analyte, S the "
                      "statistic its limit is judged on (a single sample averaged with its "
                      "confirmation sample, or the annual mean of quarterly samples; the mean "
                      "concentration times a lognormal factor for temporal variability and lab "
                      "error), the share of draws for which P(S > margin x limit) exceeds beta "
                      "is at most alpha; pumping level above intake plus submergence, pump "
                      "range; the rates a step's sample speaks for are left out when it "
                      "exceeded margin x limit, whatever the model says; a fit that misses a "
                      "lab result by more than 3 standard deviations makes the decision "
                      "provisional. Crossflow memory: the volume thief zones store during an "
                      "idle time, washed out of a well-mixed volume after a start; step "
                      "samples likely to carry returned water are flagged and widened by their "
                      "predicted error. Monitoring history (where given): each zone's "
                      "concentration a constant, trend and annual season (chosen by AICc), "
                      "fitted by weighted least squares on the history's results at their "
                      "rates with the step test as the anchor; a trend the rates cannot place "
                      "in a zone is one of the blend; Mann-Kendall test and Sen's slope on the "
                      "blended history beside it."),
            BulletList(REFERENCES + ADDED_REFERENCES),
            Paragraph(f"blendq {__version__}."),
        ), "methods"),
    ]
    sections.append(raw_data_appendix(a, units))
    sections.insert(0, Section("About this report", (report_identity_block(a, created),),
                               "about"))
    stamp = f"{report_date(a)} · {created or f'blendq {__version__}'}"
    return Document(title=f"Discharge quality and operating window: {w.name}",
                    subtitle=p.name, created=stamp, sections=tuple(sections))


def summary_json(a: Analysis, units: str = "US") -> dict:
    """Machine-readable summary (base units, with the display strings beside them)."""
    from blendq.report.history_section import history_json
    from blendq.well.memory import memory_lines

    w = a.window
    history = history_json(a) if a.history else None
    return {
        "blendq_version": __version__,
        "project": a.project.name,
        "well": a.project.well.name,
        "decision": decision_sentence(a, units),
        "window_m3_per_day": [[lo, hi] for lo, hi, _, _ in w.intervals],
        "window_limiting": [[lo_r, hi_r] for _, _, lo_r, hi_r in w.intervals],
        "recommended_rate_m3_per_day": w.recommended,
        "reason_empty": w.reason_empty,
        "cascading_zones": [{"zone": z, "from_rate_m3_per_day": r, "inside_window": inside}
                            for z, r, inside in w.cascading],
        "demand_m3_per_day": w.demand if w.demand else None,
        "demand_met": w.demand_met,
        "headroom": w.headroom,
        "headroom_kept": w.headroom_kept,
        "compliance_basis": {k: st.as_dict()
                             for k, st in compliance_statistics(a.project, a.limits).items()},
        "zones": a.zones.to_dict(orient="records"),
        "not_fitted": a.not_fitted,
        "qa": a.qa.summary_lines(),
        "notes": data_notes(a.project),
        **({"crossflow_memory": memory_lines(
            a.memory, float(a.qa.options["returned_water_flag"]), units)}
           if a.memory is not None else {}),
        **({"monitoring_history": history} if history is not None else {}),
        "draws": a.draws.n_draws,
        "seed": a.draws.seed,
        "cautions": list(CAUTIONS),
        "units_note": "concentrations in mg/L on each analyte's canonical basis (nitrate as N); "
                      "rates in m3/d; depths in m below the datum; headroom as a share of the "
                      "recommended rate kept from every end of the window; demand_met null "
                      "when no demand is given; monitoring_history trends in mg/L per year "
                      "with their interval at its interval, years as calendar years",
    }


def output_files(a: Analysis, units: str = "US", created: str = "") -> dict[str, bytes | str]:
    """All files of a report folder: report.html, report.pdf, CSV tables, summary.json, charts."""
    from blendq.report.csv_tables import CSV_TITLES, csv_tables
    from blendq.report.html import render_html
    from blendq.report.outputs import csv_comments, to_csv_safe, to_json_stable
    from blendq.report.pdf import render_pdf_bytes

    doc = build_document(a, units, created)
    files: dict[str, bytes | str] = {
        "report.html": render_html(doc),
        "report.pdf": render_pdf_bytes(doc, report_paper(a)),
        "summary.json": to_json_stable(summary_json(a, units)),
    }
    files.update({name: to_csv_safe(t, comments=csv_comments(
        f"{CSV_TITLES[name]} ({units} display units); blendq report of {a.project.name}"))
        for name, t in csv_tables(a, units).items()})
    for k, block in enumerate(b for sec in doc.sections for b in sec.blocks if isinstance(b, Figure)):
        if block.png is not None:
            files[f"charts/chart_{k + 1}.png"] = block.png
        if block.svg is not None:
            files[f"charts/chart_{k + 1}.svg"] = block.svg
    return files
