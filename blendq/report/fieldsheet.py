"""The field sheet of a planned step test (PDF and CSV) and the text of a plan.

One row per action in the order the crew does them: the static level (and an ambient flow log
when planned), then every step with its rate, start and duration, the water to purge before
its sample, the discharge sample, the depth samples and the pumped flow log taken during it.

The purge volume is :func:`blendq.decide.plan.planned_purge`: casing volumes plus the water the
thief zones store during the idle time before the test (crossflow memory), the rule the review
checks a finished test against.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from blendq import CAUTIONS
from blendq.decide.plan import Design, PlanReport, planned_purge, window_ends
from blendq.errors import ModelError
from blendq.report.document import BulletList, Callout, Document, KeyValues, Section, Table
from blendq.report.outputs import csv_comments, to_csv_safe
from blendq.units import BASE_UNITS, DISPLAY_UNITS, format_quantity, from_base

#: columns of the field sheet (CSV in display units named in the header)
COLUMNS = ("order", "action", "step", "rate", "start_hour", "duration_h", "purge_volume",
           "purge_hours", "depth", "what")


def _unit(kind: str, units: str) -> str:
    return DISPLAY_UNITS[units].get(kind, BASE_UNITS[kind])


def actions(report: PlanReport, design: Design, units: str = "US") -> list[dict]:
    """The actions of a design in field order, in base units (rate m^3/d, volume m^3, depth
    m, times h)."""
    plan_purge = planned_purge(report.basis)
    purge = plan_purge.total
    made_of = (f"{format_quantity(plan_purge.casing, 'volume', units)} casing volumes + "
               f"{format_quantity(plan_purge.stored.total, 'volume', units)} stored by thief "
               f"zones in {plan_purge.stored.idle_time * 24:.3g} h idle")
    rows = []
    t = 0.0

    def add(action, step="", rate=np.nan, duration=np.nan, purge_v=np.nan, purge_h=np.nan,
            depth=np.nan, what=""):
        rows.append(dict(order=len(rows) + 1, action=action, step=step, rate=rate,
                         start_hour=round(t, 2), duration_h=duration, purge_volume=purge_v,
                         purge_hours=purge_h, depth=depth, what=what))

    add("static level", what="read the static water level before pumping")
    if 0.0 in design.log_rates:
        add("flow log", rate=0.0, duration=report.costs.flowlog_hours,
            what="run an ambient flow log (pump off) through every zone")
        t += report.costs.flowlog_hours
    for k, (q, hours) in enumerate(zip(design.rates, design.step_hours, strict=True)):
        name = f"S{k + 1}"
        purge_h = purge / max(q, 1e-12) * 24.0
        add("step", name, q, hours,
            what=f"pump at {format_quantity(q, 'rate', units)} for {hours:.1f} h; read the "
                 "level at the end of the step")
        add("discharge sample", name, q, purge_v=purge, purge_h=purge_h,
            what=f"sample the discharge after at least {format_quantity(purge, 'volume', units)}"
                 f" ({made_of}) pumped at this rate, near the end of the step with the level "
                 "steady")
        for j, d in design.depth_samples:
            if j == k:
                add("depth sample", name, q, depth=d,
                    what=f"sample inside the well at {format_quantity(d, 'length', units)} "
                         "while pumping, after the discharge sample")
        if any(abs(r - q) <= 1e-9 * max(q, 1.0) for r in design.log_rates if r > 0):
            add("flow log", name, q, duration=report.costs.flowlog_hours,
                what="run a flow log while pumping at this rate (level steady)")
        t += hours
    return rows


def field_sheet(report: PlanReport, design: Design, units: str = "US") -> pd.DataFrame:
    """The actions of a design in field order, in display units.

    Columns: order, action, step, rate, start_hour [h from the start], duration_h [h],
    purge_volume (volume to pump before the step's sample), purge_hours [h at the step's rate],
    depth (of a depth sample), what (the instruction). ``attrs["units"]`` names the units.
    """
    table = pd.DataFrame(actions(report, design, units), columns=list(COLUMNS))
    u = {"rate": _unit("rate", units), "volume": _unit("volume", units),
         "depth": _unit("length", units)}
    for col, kind, unit in (("rate", "rate", u["rate"]), ("purge_volume", "volume", u["volume"]),
                            ("depth", "length", u["depth"])):
        table[col] = [float(from_base(v, kind, unit)) if np.isfinite(v) else np.nan
                      for v in table[col].astype(float)]
    table.attrs["units"] = u
    return table


def write_csv(table: pd.DataFrame, path):
    """Write a field sheet as CSV (a path or a text buffer) with the units in the header,
    after ``# `` comment lines (what it is, the blendq version, the cautions;
    :func:`blendq.report.outputs.csv_comments`), formula-like text made inert."""
    u = table.attrs.get("units", {})
    names = {"rate": f"rate [{u.get('rate', '')}]", "purge_volume":
             f"purge_volume [{u.get('volume', '')}]", "depth": f"depth [{u.get('depth', '')}]",
             "start_hour": "start [h]", "duration_h": "duration [h]", "purge_hours": "purge [h]"}
    text = to_csv_safe(table.rename(columns=names), float_format="%.4g", comments=csv_comments(
        "Field sheet of the planned step test: each action in order"))
    if hasattr(path, "write"):
        path.write(text)
    else:
        Path(path).write_text(text, encoding="utf-8", newline="")
    return path


def plan_lines(report: PlanReport, units: str = "US") -> list[str]:
    """The plan as text lines (what the command prints)."""
    out = []
    ends = report.plan.ends if report.plan else None
    purge_line = planned_purge(report.basis).sentence(units)
    if report.plan is not None:
        p = report.plan
        ev = p.evaluation
        d = p.design
        out.append(f"Planned test: {d.n_steps} steps, {len(d.log_rates)} flow logs, "
                   f"{len(d.depth_samples)} depth samples; cost {ev.cost:,.0f}"
                   + (f" of a budget of {p.budget:,.0f}" if p.budget else ""))
        out += _end_lines(ends, ev.end_sd, units)
        out += _unresolved_lines(ev.unresolved)
        out.append("Value of each item of the planned test (its spreads without and with it):")
        out += [f"  {v.sentence(units)} (cost {v.cost:,.0f})" for v in p.values]
        out.append(purge_line)
    else:
        out.append("The finished test leaves:")
        out += _end_lines(window_ends(report.basis), report.current.end_sd, units)
        out += _unresolved_lines(report.current.unresolved)
        out.append("The single extra measurement with the most value first:")
        out += [f"  {v.sentence(units)} (cost {v.cost:,.0f})" for v in report.next_items[:8]]
        out.append(purge_line)
    return out


def _end_lines(ends, sd: dict, units: str) -> list[str]:
    lines = []
    for e in ends:
        spread = sd.get(e.side, 0.0)
        what = ("fixed" if e.gradient is None else
                "+-unbounded" if not np.isfinite(spread)
                else f"+-{format_quantity(spread, 'rate', units)} (1 sd expected)")
        lines.append(f"  window {e.side} end near {format_quantity(e.rate, 'rate', units)}, "
                     f"set by {e.reason}: {what}")
    return lines


def _unresolved_lines(unresolved: dict) -> list[str]:
    zones = sorted({z for v in unresolved.values() for z in v})
    if not zones:
        return ["  every zone resolved by the planned samples"]
    return [f"  zones the samples leave unresolved: {', '.join(zones)}"]


def field_sheet_document(report: PlanReport, design: Design, units: str = "US",
                         created: str = "") -> Document:
    """The field sheet as a document for :func:`blendq.report.pdf.render_pdf`."""
    rows = actions(report, design, units)

    def fmt(v, kind):
        return format_quantity(v, kind, units) if np.isfinite(v) else ""

    shown = pd.DataFrame(rows, columns=list(COLUMNS))
    shown["rate"] = [fmt(v, "rate") for v in shown["rate"].astype(float)]
    shown["depth"] = [fmt(v, "length") for v in shown["depth"].astype(float)]
    shown["purge_volume"] = [fmt(v, "volume") for v in shown["purge_volume"].astype(float)]
    shown = shown[["order", "action", "step", "rate", "start_hour", "duration_h",
                   "purge_volume", "depth", "what"]].rename(columns={
                       "order": "#", "action": "Action", "step": "Step", "rate": "Rate",
                       "start_hour": "Start [h]", "duration_h": "Hours",
                       "purge_volume": "Purge first", "depth": "Depth", "what": "What to do"})
    shown = shown.astype(object).where(shown.notna(), "")
    facts = KeyValues((("Well", report.project.well.name),
                       ("Steps", str(design.n_steps)),
                       ("Flow logs", str(len(design.log_rates))),
                       ("Depth samples", str(len(design.depth_samples))),
                       ("Planned cost", f"{report.costs.of(design):,.0f}")), "The planned test")
    note = (planned_purge(report.basis).sentence(units) + " Pump at least that much at the "
            "step's rate before sampling.")
    cautions = Callout(" ".join(CAUTIONS[:2] + CAUTIONS[3:4]))
    sections = (
        Section("Field sheet", (cautions, facts, Table(shown, "Actions in field order",
                                                         note=note)), "field-sheet"),
        Section("What the plan expects", (BulletList(tuple(plan_lines(report, units))),),
                "expectations"),
    )
    return Document(f"Step-test field sheet: {report.project.well.name}", report.project.name,
                    created, sections)



def sheet_design(report: PlanReport) -> Design:
    """The design the field sheet is for: the planned test, or after a finished test the
    single extra measurement with the most value (as a short test of its own)."""
    if report.plan is not None:
        return report.plan.design
    if not report.next_items:
        raise ModelError("no extra measurement to plan: the finished test leaves nothing that "
                         "one more step, log or depth sample would narrow")
    return report.next_items[0].item.alone(report.basis)


def candidates_table(report: PlanReport, units: str = "US") -> pd.DataFrame:
    """Every candidate design evaluated, cheapest first: steps and their rates, flow logs,
    depth samples, cost, the expected sd of each window end and the zones left unresolved
    (display units named in ``attrs["units"]``). Empty after a finished test."""
    rate_unit, len_unit = _unit("rate", units), _unit("length", units)
    rows = []
    for ev in report.plan.candidates if report.plan is not None else []:
        d = ev.design

        def rate(q):
            return f"{float(from_base(q, 'rate', rate_unit)):.4g}"

        rows.append(dict(
            steps=d.n_steps, rates=" ".join(rate(q) for q in d.rates),
            flow_logs=" ".join(rate(q) for q in d.log_rates),
            depth_samples=" ".join(f"S{k + 1}@{float(from_base(x, 'length', len_unit)):.4g}"
                                   for k, x in d.depth_samples),
            cost=ev.cost,
            low_end_sd=float(from_base(ev.end_sd.get("low", 0.0), "rate", rate_unit)),
            high_end_sd=float(from_base(ev.end_sd.get("high", 0.0), "rate", rate_unit)),
            unresolved=" ".join(sorted({z for v in ev.unresolved.values() for z in v}))))
    out = pd.DataFrame(rows, columns=["steps", "rates", "flow_logs", "depth_samples", "cost",
                                      "low_end_sd", "high_end_sd", "unresolved"])
    out.attrs["units"] = {"rate": rate_unit, "depth": len_unit}
    return out


def field_sheet_files(report: PlanReport, units: str = "US", created: str = "") -> dict:
    """The files of ``blendq plan --out``: fieldsheet.pdf, fieldsheet.csv, plan.txt and, for a
    new test, candidates.csv (every candidate design with its expected end spreads)."""
    import io

    from blendq.report.pdf import render_pdf_bytes

    design = sheet_design(report)
    buf = io.StringIO()
    write_csv(field_sheet(report, design, units), buf)
    text = "\n".join([*plan_lines(report, units), "", *CAUTIONS[:2], CAUTIONS[3]]) + "\n"
    files = {"fieldsheet.pdf": render_pdf_bytes(field_sheet_document(report, design, units,
                                                                     created)),
             "fieldsheet.csv": buf.getvalue(), "plan.txt": text}
    if report.plan is not None:
        table = candidates_table(report, units)
        u = table.attrs["units"]
        files["candidates.csv"] = to_csv_safe(table.rename(columns={
            "rates": f"rates [{u['rate']}]", "flow_logs": f"flow_logs [{u['rate']}]",
            "depth_samples": f"depth_samples [step@{u['depth']}]",
            "low_end_sd": f"low_end_sd [{u['rate']}]",
            "high_end_sd": f"high_end_sd [{u['rate']}]"}), float_format="%.4g",
            comments=csv_comments("Candidate step-test designs with their cost, expected "
                                  "spreads of the window's ends and unresolved zones"))
    return files
