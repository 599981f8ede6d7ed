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
from blendq.report.scenario_section import scenario_section
from blendq.units import DISPLAY_UNITS, display_unit_label, format_quantity, from_base

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
    "Zone conductances are constant over the step test; for the operating horizon they are "
    "scaled by the Cooper-Jacob ratio G(horizon)/G(test) where storativity is known.",
    "Complete mixing where streams meet in the well; steady flow; no reaction.",
    "Zone water quality does not change with rate or time (no induced inflow from elsewhere, no "
    "trend).",
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
                     "Temporal CV": f"{st.temporal_cv:.0%} ({st.temporal_cv_source})",
                     "Lab error": f"{st.lab_cv:.0%} ({st.lab_cv_source})"})
    return pd.DataFrame(rows, columns=["Analyte", "Limit", "Judged on", "Rule",
                                       "Source of the rule", "Temporal CV", "Lab error"])


def at_rate_table(a: Analysis, rate: float, units: str) -> pd.DataFrame:
    """Predicted quality and level at one rate: median and band of the mean, and the
    probability that the judged statistic exceeds margin x limit."""
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
        p = float(exceedance(c, s.margin * lim.canonical(), sd)[0]) if lim else np.nan
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
                     a.project.well.pump_intake_depth - a.project.well.submergence, "length", units),
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
                               "an end by much carries that end alone."))
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


def build_document(a: Analysis, units: str = "US", created: str = "") -> Document:
    """The report of an analysis as a renderer-neutral document (its charts drawn here)."""
    p = a.project
    s = p.settings
    w = p.well
    decision = decision_sentence(a, units)
    inputs = KeyValues([
        ("Well", w.name), ("Location", w.location or "-"), ("Depth datum", w.datum),
        ("Pump intake", format_quantity(w.pump_intake_depth, "length", units)),
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
        ("Accepted exceedance probability", f"{s.exceedance_probability:.0%}"),
        ("Monte Carlo draws / seed", f"{a.draws.n_draws} / {a.draws.seed}"),
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
                             *(Callout(n, "note") for n in a.notes)), "decision"),
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
                  "The statistic each limit is judged on. The window asks that the probability "
                  "of this statistic exceeding margin x limit stay at or below the accepted "
                  "exceedance probability. The temporal CV should be estimated from the well's "
                  "monitoring history where one exists."),
            Table(at_rate_table(a, rec_rate, units),
                  f"Predicted discharge at {format_quantity(rec_rate, 'rate', units)}."),
        ), "window"),
        Section("Charts", tuple(quality_figures(a, units)), "charts"),
    ]
    if p.scenarios:
        from blendq.decide.scenarios import compare

        sections.append(scenario_section(a, compare(a), units))
    sections += [
        step_drawdown_section(a, units),
        Section("Assumptions", (BulletList(ASSUMPTIONS),), "assumptions"),
        Section("Methods and references", (
            Paragraph("Zone inflow: common wellbore head, q_i = G_i (h0_i - h_w) with optional "
                      "nonlinear loss; conductances from Thiem or Cooper-Jacob with skin. "
                      "Wellbore mixing: upwind mass balance along the well. Zone "
                      "concentrations: weighted, bounded and censored least squares; hydraulics "
                      "by variable projection with scipy least_squares on flow-log, level, "
                      "prior and quality residuals. Uncertainty: linearised covariance and a "
                      "seeded Monte Carlo refit. Window: P(S > margin x limit) <= alpha for "
                      "every analyte, S the statistic its limit is judged on (a single sample "
                      "averaged with its confirmation sample, or the annual mean of quarterly "
                      "samples), each draw's mean concentration times a lognormal factor for "
                      "temporal variability and lab error, averaged over the draws; pumping level above intake plus submergence, pump range; "
                      "rates near a step whose sample exceeded margin x limit are left out "
                      "whatever the model says; a fit that misses a lab result by more than "
                      "3 standard deviations makes the decision provisional."),
            BulletList(REFERENCES),
            Paragraph(f"blendq {__version__}."),
        ), "methods"),
    ]
    return Document(title=f"Discharge quality and operating window: {w.name}",
                    subtitle=p.name, created=created, sections=tuple(sections))


def summary_json(a: Analysis, units: str = "US") -> dict:
    """Machine-readable summary (base units, with the display strings beside them)."""
    w = a.window
    return {
        "blendq_version": __version__,
        "project": a.project.name,
        "well": a.project.well.name,
        "decision": decision_sentence(a, units),
        "window_m3_per_day": [[lo, hi] for lo, hi, _, _ in w.intervals],
        "window_limiting": [[lo_r, hi_r] for _, _, lo_r, hi_r in w.intervals],
        "recommended_rate_m3_per_day": w.recommended,
        "reason_empty": w.reason_empty,
        "compliance_basis": {k: st.as_dict()
                             for k, st in compliance_statistics(a.project, a.limits).items()},
        "zones": a.zones.to_dict(orient="records"),
        "not_fitted": a.not_fitted,
        "qa": a.qa.summary_lines(),
        "draws": a.draws.n_draws,
        "seed": a.draws.seed,
        "cautions": list(CAUTIONS),
        "units_note": "concentrations in mg/L on each analyte's canonical basis (nitrate as N); "
                      "rates in m3/d; depths in m below the datum",
    }


def output_files(a: Analysis, units: str = "US", created: str = "") -> dict[str, bytes | str]:
    """All files of a report folder: report.html, report.pdf, CSV tables, summary.json, charts."""
    from blendq.report.html import render_html
    from blendq.report.outputs import to_csv_safe, to_json_stable
    from blendq.report.pdf import render_pdf_bytes

    doc = build_document(a, units, created)
    files: dict[str, bytes | str] = {
        "report.html": render_html(doc),
        "report.pdf": render_pdf_bytes(doc),
        "summary.json": to_json_stable(summary_json(a, units)),
        "tables/zones.csv": to_csv_safe(a.zones),
        "tables/sweep.csv": to_csv_safe(a.sweep_table),
        "tables/residuals.csv": to_csv_safe(a.residuals),
        "tables/hydraulics.csv": to_csv_safe(a.hydraulics),
        "tables/qa_findings.csv": to_csv_safe(a.qa.findings),
    }
    for k, block in enumerate(b for sec in doc.sections for b in sec.blocks if isinstance(b, Figure)):
        if block.png is not None:
            files[f"charts/chart_{k + 1}.png"] = block.png
        if block.svg is not None:
            files[f"charts/chart_{k + 1}.svg"] = block.svg
    return files
