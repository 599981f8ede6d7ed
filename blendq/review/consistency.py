"""Links between the tables of a step test that the loader cannot judge alone: samples taken at
a step of zero rate, pumping levels at or above the static level, and samples taken below the
deepest zone.

Each rule is ``check_<topic>(project) -> Outcome`` on a :class:`~blendq.inputs.project.Project`
in base units (m, m^3/d). The hard contradictions (overlapping step times, a flow log's rate
against its step, two levels at one time, a depth far below the well) are refused by the loader
(:mod:`blendq.inputs.loader`); these rules report what the later stages would otherwise notice
only when they fit or draw.
"""

from __future__ import annotations

import numpy as np

from blendq.review.rules import (
    SRC_COMMON,
    Finding,
    Outcome,
    fmt,
    plain_value,
    row_number,
    rows_of,
    text,
)

#: rules of this module
RULES = ("zero_rate_samples", "pumping_level_above_static", "sample_below_zones")


def check_zero_rate_samples(project) -> Outcome:
    """Error for each step of rate zero that lab samples name: with no discharge, a sample is
    not a blend of the zones' inflows (it is ambient or bailed water), yet the fit would place
    it on the rate axis at zero."""
    out = Outcome()
    steps, samples = project.steps, project.samples
    if steps.empty or samples.empty:
        return out
    zero = {text(s) for s, q in zip(steps["step"], steps["rate"], strict=True) if q == 0}
    seen = set()
    if not zero:
        return out
    for _, row in rows_of(samples[[text(s) in zero for s in samples["step"]]]):
        if row["sample_id"] not in seen:
            seen.add(row["sample_id"])
            out.add("error", "zero_rate_samples",
                    f'sample {row["sample_id"]} is at step {row["step"]}, whose rate is 0: no '
                    "discharge to sample; correct the step's rate or leave the sample out",
                    SRC_COMMON, row, analyte="")
    return out


#: where a static level without the well's own comes from (see :func:`static_level`)
SHALLOWEST_ZONE = ("the shallowest zone static level, which the well's composite level (a "
                   "conductance-weighted mean of the zone levels) cannot be above")


def static_level(project) -> tuple[float | None, str]:
    """Static level in the well [m depth] and where it comes from: the well's ``static_level``,
    else the shallowest of the zones' static levels, else None.

    With no pumping the well stands at the conductance-weighted mean of the zone heads
    (Konikow and others 2009, USGS TM 6-A30), so its level is at or below the shallowest zone
    level whatever the conductances, which the review does not know (they come from the
    hydraulic model). The shallowest zone level is therefore a bound, not an estimate: a
    pumping level at or above it is above the composite level too.
    """
    if project.well.static_level is not None:
        return float(project.well.static_level), "the well's static_level"
    levels = [z.static_level for z in project.zones if z.static_level is not None]
    if levels and len(levels) == len(project.zones):
        return float(np.min(levels)), SHALLOWEST_ZONE
    return None, ""


def check_pumping_levels(project) -> Outcome:
    """A pumping level of a pumped step at or above the static level: an error against the
    well's stated static level (drawdown cannot be zero or negative while pumping), a warning
    against the shallowest zone static level (:func:`static_level`)."""
    out = Outcome()
    static, source = static_level(project)
    steps = project.steps
    if static is None or steps.empty:
        return out
    severity = "error" if project.well.static_level is not None else "warning"
    for step, rate, level, row in zip(steps["step"], steps["rate"], steps["pumping_level"],
                                      steps["source_row"], strict=True):
        if rate > 0 and np.isfinite(level) and level <= static:
            out.findings.append(Finding(
                severity, "pumping_level_above_static",
                f"step {step}: pumping level {fmt(level)} m is at or above the static level "
                f"{fmt(static)} m ({source}); while pumping the level must be deeper",
                SRC_COMMON, step=plain_value(step), source_row=row_number(row)))
    return out


def check_sample_depths(project) -> Outcome:
    """Warning for a sample taken below the bottom of the deepest zone: no zone's water enters
    there, so the sample shows the water standing in the well's sump, not a zone."""
    out = Outcome()
    samples = project.samples
    if samples.empty or not project.zones:
        return out
    deepest = max(z.bottom for z in project.zones)
    seen = set()
    below = np.isfinite(samples["depth"].to_numpy(float)) & (samples["depth"] > deepest)
    for _, row in rows_of(samples[below]):
        depth = row["depth"]
        if row["sample_id"] not in seen:
            seen.add(row["sample_id"])
            out.add("warning", "sample_below_zones",
                    f'sample {row["sample_id"]} was taken at {fmt(depth)} m, below the bottom '
                    f"of the deepest zone ({fmt(deepest)} m): no zone's inflow enters there",
                    SRC_COMMON, row, analyte="")
    return out
