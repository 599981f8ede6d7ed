"""The report section comparing what-if scenarios (seal, redevelop, intake, heads, blend, a
new pump).

:func:`scenario_section` turns a :class:`~blendq.decide.scenarios.Comparison` into a
:class:`~blendq.report.document.Section` with key ``"scenarios"``: a sentence naming the option with the
widest operating window, the comparison table in display units, a new pump's drive settings and
energy against the current pump's, and the chart.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.decide.scenarios import BASE_NAME, Comparison, ScenarioResult
from blendq.report.document import Figure, Paragraph, Section, Table
from blendq.report.pump_section import energy_unit
from blendq.units import format_quantity


def _rate_text(value: float, units: str) -> str:
    """A rate [m^3/d] in the display unit, three significant digits (as the CLI and charts)."""
    return format_quantity(value, "rate", units)


def _conc_text(analyte: str, values) -> tuple[str, str]:
    an = get_analyte(analyte)
    unit = an.display_unit
    lo, med, hi = (float(v) for v in an.in_display_unit(values))
    if not np.isfinite(med):
        return "-", "-"
    return f"{med:.3g} {unit}", f"{lo:.3g} to {hi:.3g} {unit}"


def has_pump(comparison: Comparison) -> bool:
    return any(res.scenario.pump is not None for res in comparison.results)


def pump_error_text(res: ScenarioResult, units: str = "US") -> str:
    """Why an option's pump has no setting, in ``units`` (empty when it has one)."""
    err = res.pump_error
    if err is None:
        return ""
    return err.in_units(units) if hasattr(err, "in_units") else str(err)


def pump_cells(res: ScenarioResult, row, units: str = "US") -> dict[str, str]:
    """Drive setting, rates delivered and energy of an option's pump, as text cells ("-" for an
    option without a pump of its own)."""
    if res.scenario.pump is None:
        return {"Drive setting": "-", "Pump delivers": "-", "Energy at setting": "-"}
    spec = res.scenario.pump
    if res.pump is None:
        return {"Drive setting": "no setting: " + pump_error_text(res, units),
                "Pump delivers": "-", "Energy at setting": "-"}
    if row["pump_per_season"]:
        setting = "per season: " + ", ".join(
            f"{r.season} {r.recommended:.1f} Hz" if np.isfinite(r.recommended)
            else f"{r.season} none" for r in res.pump.seasons.itertuples())
    else:
        setting = (f"{row['pump_setting']:.1f} Hz ({row['pump_frequency_low']:.1f} to "
                   f"{row['pump_frequency_high']:.1f} Hz all year)")
    low, high = row["pump_rate_low"], row["pump_rate_high"]
    span = (f"nothing at {spec.min_frequency:g} Hz (it cannot lift the water)" if low == 0
            else f"from {_rate_text(low, units)} at {spec.min_frequency:g} Hz")
    span += " to " + (f"beyond {_rate_text(res.prediction.rates[-1], units)}"
                      if not np.isfinite(high) else _rate_text(high, units))
    span += f" at {spec.max_frequency:g} Hz"
    if np.isfinite(row.get("pump_setting_rate_low", np.nan)):
        span += (f"; {_rate_text(row['pump_setting_rate_low'], units)} to "
                 f"{_rate_text(row['pump_setting_rate_high'], units)} at the setting across "
                 "the seasons")
    label, factor = energy_unit(units)
    kwh = row["pump_kwh_per_m3"]
    energy = "-" if not np.isfinite(kwh) else f"{kwh * factor:.3f} {label}"
    return {"Drive setting": setting, "Pump delivers": span, "Energy at setting": energy}


def pump_sentences(comparison: Comparison, units: str = "US") -> list[str]:
    """Each new pump against the current one: its setting, and its energy per volume at the
    setting against the current pump's and against its own cheapest compliant setting."""
    label, factor = energy_unit(units)
    rows = list(zip(comparison.results, (r for _, r in comparison.table.iterrows()),
                    strict=True))
    base = next(((res, r) for res, r in rows if r["scenario"] == BASE_NAME
                 and res.scenario.pump is not None), None)
    out = []
    if base is None:
        out.append("The project has no [pump] table: the new pumps are not compared with a "
                   "current one.")
    elif base[0].pump is None:
        out.append(f"The current pump ({base[1]['pump_curve']}) has no setting for the window: "
                   f"{pump_error_text(base[0], units)}.")
    for res, r in rows:
        if res.scenario.pump is None or r["scenario"] == BASE_NAME:
            continue
        name = f'"{r["scenario"]}" ({r["pump_curve"]})'
        if res.pump is None:
            out.append(f"{name}: no drive setting: {pump_error_text(res, units)}.")
            continue
        cells = pump_cells(res, r, units)
        text = f"{name}: drive {cells['Drive setting']}; it delivers {cells['Pump delivers']}."
        kwh = r["pump_kwh_per_m3"]
        if np.isfinite(kwh):
            text += f" At its setting it uses {kwh * factor:.3f} {label}"
            if base is not None and base[0].pump is not None \
                    and np.isfinite(base[1]["pump_kwh_per_m3"]):
                ref = base[1]["pump_kwh_per_m3"]
                change = kwh / ref - 1.0
                text += (f" against {ref * factor:.3f} for the current pump at its own setting "
                         f"({abs(change):.1%} {'less' if change < 0 else 'more'} per volume)")
            cheap = r["pump_cheapest_kwh_per_m3"]
            if np.isfinite(cheap):
                text += (f"; its cheapest compliant setting ({r['pump_cheapest_setting']:.1f} Hz) "
                         f"uses {cheap * factor:.3f} {label}")
            text += "."
        elif res.scenario.pump.curve_efficiency is None:
            text += " Its curve gives no efficiency: its energy is not computed."
        out.append(text)
    return out


def comparison_display_table(comparison: Comparison, units: str = "US",
                             interval: float = 0.9) -> pd.DataFrame:
    """The comparison in display units, one row per scenario, as text cells."""
    rows = []
    analytes = comparison.results[0].prediction.analytes if comparison.results else []
    for res, (_, r) in zip(comparison.results, comparison.table.iterrows(), strict=True):
        w = res.window
        told = not res.cannot_tell
        window = " and ".join(f"{_rate_text(lo, units)} to "
                              f"{_rate_text(hi, units)}"
                              for lo, hi, _, _ in w.intervals) or "none"
        row = {
            "Option": r["scenario"],
            "Changes": r["changes"],
            "Operating window": window if told else "cannot tell",
            "Width": _rate_text(r["window_width"], units) if told else "-",
            "Recommended": ("-" if w.recommended is None or not told
                            else _rate_text(w.recommended, units)),
            "Pumping-level yield": (("at least " if r["yield_beyond_grid"] else "")
                                    + _rate_text(r["yield"], units)),
        }
        if res.scenario.blend is not None:
            row["Delivered"] = ("-" if w.recommended is None or not told
                                else _rate_text(r["delivered"], units))
        else:
            row["Delivered"] = row["Recommended"]
        for a in analytes:
            med, band = (_conc_text(a, [r[f"{a}_lower"], r[f"{a}_median"], r[f"{a}_upper"]])
                         if told else ("-", "-"))
            label = get_analyte(a).label()
            row[f"{label} median"] = med
            row[f"{label} {interval:.0%} band"] = band
        row["Window limited by"] = (
            cannot_tell_text(r, units) if not told else
            f"low end: {r['lower_end_set_by']}; high end: {r['upper_end_set_by']}"
            if w.intervals else w.reason_empty or "no rate meets every criterion")
        if w.cascading:
            row["Window limited by"] += "; water cascades from " + ", ".join(
                f"{z} from {_rate_text(q, units)}" for z, q, _ in w.cascading)
        row["What would tell"] = "; ".join(res.would_tell.get(units, [])) if not told else ""
        if has_pump(comparison):
            row.update(pump_cells(res, r, units))
        rows.append(row)
    return pd.DataFrame(rows)


def cannot_tell_text(row, units: str = "US") -> str:
    """Why an option's window cannot be told, from a row of the comparison table."""
    names = row["undecided"].split(", ")
    which = " and ".join(names) if len(names) <= 2 else ", ".join(names)
    return (f"cannot tell: compliance with the {which} limit{'s' if len(names) > 1 else ''} "
            f"at rates from {_rate_text(row['undecided_low'], units)} to "
            f"{_rate_text(row['undecided_high'], units)} depends on zone values the data "
            "cannot pin")


def compact_display_table(comparison: Comparison, units: str = "US",
                          interval: float = 0.9) -> pd.DataFrame:
    """The comparison with fewer, wider columns for a printed page: the median and band of
    each analyte in one cell, the delivered rate beside the recommended one."""
    full = comparison_display_table(comparison, units, interval)
    out = full[["Option", "Operating window"]].copy()
    out["Recommended"] = [rec if rec == dlv else f"{rec} (delivered {dlv})"
                          for rec, dlv in zip(full["Recommended"], full["Delivered"], strict=True)]
    out["Pumping-level yield"] = full["Pumping-level yield"]
    for col in full.columns:
        if col.endswith(" median"):
            label = col[: -len(" median")]
            band = full[f"{label} {interval:.0%} band"]
            out[f"{label} at recommended rate ({interval:.0%} band)"] = [
                "-" if m == "-" else f"{m} ({b})" for m, b in zip(full[col], band, strict=True)]
    out["Window limited by"] = full["Window limited by"]
    if "Drive setting" in full:
        out["Pump: drive setting; energy at setting"] = [
            "-" if d == "-" else d if e == "-" else f"{d}; {e}"
            for d, e in zip(full["Drive setting"], full["Energy at setting"], strict=True)]
    return out


def widest_sentence(comparison: Comparison, units: str = "US") -> str:
    """A sentence naming the option with the widest operating window."""
    t = comparison.table
    told = ~t["cannot_tell"].astype(bool) if "cannot_tell" in t else pd.Series(True, t.index)
    untold = [f'"{n}"' for n in t.loc[~told, "scenario"]]
    listed = untold[0] if len(untold) == 1 else ", ".join(untold[:-1]) + " or " + untold[-1] \
        if untold else ""
    tail = (f" The data cannot tell whether {listed} would open a window: see what would tell."
            if untold else "")
    if t.empty or not ((t["window_width"] > 0) & told).any() \
            and not ((t["n_intervals"] > 0) & told).any():
        return "No option compared here opens an operating window that the data can vouch " \
               "for." + tail if untold else "No option compared here opens an operating window."
    k = int(np.argmax(np.where(told, t["window_width"].to_numpy(float), -np.inf)))
    name = t["scenario"].iloc[k]
    width = _rate_text(t["window_width"].iloc[k], units)
    base = t[t["scenario"] == BASE_NAME]
    if name == BASE_NAME:
        return (f"None of the options widens the operating window: the base case has the widest "
                f"({width}).{tail}")
    text = f'"{name}" opens the widest operating window ({width}'
    if len(base):
        text += f" against {_rate_text(base['window_width'].iloc[0], units)} as tested"
    return text + ")." + tail


def scenario_chart_figure(analysis, comparison: Comparison, units: str = "US") -> Figure:
    """The chart of the scenario section, drawn."""
    from blendq.report.charts.render import chart_figure
    from blendq.report.charts.scenarios import scenario_chart, window_summary

    return chart_figure(
        "Median delivered quality against the well's pumping rate for each option, with the "
        "limit and the operating margin; beneath, each option's operating window (which "
        "also accounts for the prediction bands), recommended rate and pumping-level yield.",
        scenario_chart(comparison, analysis.limits, units,
                       interval=analysis.project.settings.interval), svg=False,
        alt="Operating windows: " + "; ".join(window_summary(comparison, units)))


def scenario_section(analysis, comparison: Comparison, units: str = "US") -> Section:
    """The report section comparing scenarios.

    Parameters
    ----------
    analysis : blendq.decide.analysis.Analysis
    comparison : Comparison
        From :func:`blendq.decide.scenarios.compare`.
    units : {"US", "SI"}

    Returns
    -------
    Section
        Key ``"scenarios"``.
    """
    s = analysis.project.settings
    blocks = [
        Paragraph(widest_sentence(comparison, units)),
        Paragraph("Each option is the calibrated well model with the changes listed, evaluated "
                  "with the same posterior draws and rate grid as the base case, so that the "
                  "differences come from the changes alone. Rates are the well's own pumping "
                  "rate; a blend adds its rate to what is delivered. The pumping-level yield is "
                  "the largest rate at which the pumping level stays above the intake plus the "
                  "submergence. Options are planning estimates: sealing, redevelopment and pump "
                  "changes need a licensed professional's review and field confirmation."),
        Table(compact_display_table(comparison, units, s.interval),
              "Options compared at the recommended rate of each (median and band of the "
              "delivered concentration)."),
    ]
    if has_pump(comparison):
        blocks.append(Paragraph(
            "A new pump meets the system curve (lift from the option's pumping level across the "
            "seasonal static levels of [pump], column friction, fittings and discharge head) in "
            "the option's window; the base case shows the current pump in the same way (blendq "
            "docs methods, section 8c). Energy is wire-to-water per volume delivered, at the "
            "recommended setting, middle static level and median pumping level."))
        blocks += [Paragraph(text) for text in pump_sentences(comparison, units)]
    untold = [(res, r) for res, (_, r) in zip(comparison.results, comparison.table.iterrows(),
                                              strict=True) if res.cannot_tell]
    if untold:
        blocks.append(Paragraph(
            "Cannot tell: an option that changes the zone shares can bring into the blend a "
            "combination of zone values that no sample has seen. Where the option's delivered "
            "concentration, over the zone values the data allow, straddles the margin at rates "
            "the pump and the pumping level allow, blendq shows no window, rate or band for it: "
            "the data cannot decide it. The measurements that would decide it:"))
        for res, r in untold:
            blocks.append(Paragraph(f'"{r["scenario"]}": {cannot_tell_text(r, units)}. What '
                                    f"would tell: {'; '.join(res.would_tell.get(units, []))}."))
    blocks.append(scenario_chart_figure(analysis, comparison, units))
    return Section("Options compared", tuple(blocks), "scenarios")
