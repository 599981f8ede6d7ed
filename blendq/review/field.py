"""Field rules of the step-test review: parameter stabilisation, purge volume, sample timing.

Each sample (one ``sample_id``, many analyte rows) is checked against the field readings logged
before it, the volume pumped since pumping last started, and the point of its step at which it
was taken. Times are pandas Timestamps; durations [d]; rates [m^3/d]; volumes [m^3].

References
----------
USGS National Field Manual for the Collection of Water-Quality Data, chapter A6 (field
measurements). The stabilisation criteria used here were not checked against the current
edition (USGS revised the specific-conductance and pH criteria in 2023, chapters A6.3 and
A6.4): they are settings (``qa.stable_*``, ``qa.field_readings``), described as common
practice, that a project sets to its own sampling plan.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.review.rules import (
    SRC_COMMON,
    Outcome,
    exceeds,
    fmt,
    row_number,
    rows_of,
    step_key,
    text,
)

SRC_NFM = ("common practice (settings qa.stable_* and qa.field_readings; after the USGS "
           "National Field Manual, chapter A6, not checked against its 2023 revision)")

#: field parameters of the ``field`` table, with printable names and units
FIELD_PARAMETERS: dict[str, tuple[str, str]] = {
    "temperature": ("temperature", "C"),
    "ph": ("pH", ""),
    "specific_conductance": ("specific conductance", "uS/cm"),
    "dissolved_oxygen": ("dissolved oxygen", "mg/L"),
    "turbidity": ("turbidity", "FNU"),
}


# ------------------------------------------------------------------ tables

def sample_table(samples: pd.DataFrame) -> pd.DataFrame:
    """One row per sample: step, step_key, sampled_at (earliest given), depth, duplicate_of,
    source_row (first row of the sample), indexed by sample_id."""
    grouped = samples.groupby("sample_id", sort=False)
    return pd.DataFrame({
        "step": grouped["step"].first(),
        "step_key": grouped["step_key"].first(),
        "sampled_at": grouped["sampled_at"].min(),
        "depth": grouped["depth"].first(),
        "duplicate_of": grouped["duplicate_of"].first(),
        "source_row": grouped["source_row"].min(),
    })


def _flag(value) -> bool:
    return text(value).lower() in ("true", "1", "1.0", "yes", "y")


def step_schedule(steps: pd.DataFrame) -> pd.DataFrame:
    """Steps in the order pumped, with start and end filled from neighbours and durations.

    A missing start is the previous step's end; a missing end is start + duration; a missing
    duration is end - start.

    Returns
    -------
    DataFrame
        Indexed by step key: ``rate`` [m^3/d], ``start``, ``end`` (Timestamps or NaT),
        ``duration`` [d] (NaN if unknown), ``recovered_before`` (bool), ``source_row``.
    """
    s = steps.copy()
    start = pd.to_datetime(s["start"], errors="coerce")
    if start.notna().all() and len(s):
        s = s.iloc[np.argsort(start.to_numpy(), kind="stable")]
    start = list(pd.to_datetime(s["start"], errors="coerce"))
    end = list(pd.to_datetime(s["end"], errors="coerce"))
    duration = list(pd.to_numeric(s["duration"], errors="coerce").astype(float))
    one_day = pd.Timedelta(days=1)
    for i in range(len(s)):
        if pd.isna(start[i]) and i > 0 and pd.notna(end[i - 1]):
            start[i] = end[i - 1]
        if pd.isna(end[i]) and pd.notna(start[i]) and np.isfinite(duration[i]):
            end[i] = start[i] + duration[i] * one_day
        if not np.isfinite(duration[i]) and pd.notna(start[i]) and pd.notna(end[i]):
            duration[i] = (end[i] - start[i]) / one_day
    return pd.DataFrame({
        "rate": pd.to_numeric(s["rate"], errors="coerce").astype(float).to_numpy(),
        "start": pd.to_datetime(pd.Series(start, dtype="datetime64[ns]")).to_numpy(),
        "end": pd.to_datetime(pd.Series(end, dtype="datetime64[ns]")).to_numpy(),
        "duration": duration,
        "recovered_before": [_flag(v) for v in s["recovered_before"]],
        "source_row": pd.to_numeric(s["source_row"], errors="coerce").to_numpy(),
    }, index=pd.Index([step_key(v) for v in s["step"]], name="step"))


def readings_by_step(field: pd.DataFrame, schedule: pd.DataFrame) -> pd.DataFrame:
    """Field readings with a ``step_key``: the reading's step, or the step whose start-end span
    holds the reading's time when no step is given."""
    f = field.copy()
    f["time"] = pd.to_datetime(f["time"], errors="coerce")
    keys = []
    for step, time in zip(f["step"], f["time"], strict=True):
        key = step_key(step)
        if key == "" and pd.notna(time):
            inside = schedule[(schedule["start"] <= time) & (time <= schedule["end"])]
            key = inside.index[-1] if len(inside) else ""
        keys.append(key)
    f["step_key"] = keys
    for col in FIELD_PARAMETERS:
        f[col] = pd.to_numeric(f[col], errors="coerce").astype(float)
    return f


# ------------------------------------------------------------------ stabilisation

def field_tolerance(parameter: str, median: float, opts: dict) -> float:
    """Allowed deviation of a field reading from the median of the last readings.

    Parameters
    ----------
    parameter : str
        A key of :data:`FIELD_PARAMETERS`.
    median : float
        Median of the readings, in the parameter's unit.
    opts : dict
        QA options (``stable_temperature`` [C], ``stable_ph`` [-], ``stable_sc_percent_low``,
        ``stable_sc_percent_high`` [%] below / above ``stable_sc_break`` [uS/cm],
        ``stable_do`` [mg/L], ``stable_turbidity`` [FNU], ``stable_turbidity_percent`` [%]).

    Returns
    -------
    float
        Tolerance in the parameter's unit.

    Notes
    -----
    Specific conductance: 5 % of the median up to 100 uS/cm, 3 % above; turbidity: the greater
    of 0.5 FNU and 10 % of the median.

    References
    ----------
    Common practice, after the USGS National Field Manual, chapter A6 (not checked against the
    2023 revision of chapters A6.3 and A6.4); each tolerance is a setting.
    """
    if parameter == "temperature":
        return opts["stable_temperature"]
    if parameter == "ph":
        return opts["stable_ph"]
    if parameter == "dissolved_oxygen":
        return opts["stable_do"]
    if parameter == "specific_conductance":
        pct = (opts["stable_sc_percent_low"] if abs(median) <= opts["stable_sc_break"]
               else opts["stable_sc_percent_high"])
        return pct / 100.0 * abs(median)
    if parameter == "turbidity":
        return max(opts["stable_turbidity"], opts["stable_turbidity_percent"] / 100.0 * abs(median))
    raise KeyError(parameter)


def assess_stability(window: pd.DataFrame, opts: dict) -> tuple[list[str], list[str]]:
    """Unstable and under-read parameters of a window of successive field readings.

    Every reading of a parameter must lie within :func:`field_tolerance` of the window's median.

    Returns
    -------
    (list of str, list of str)
        Descriptions of parameters outside their tolerance, and names of parameters read fewer
        than ``opts["field_readings"]`` times in the window (parameters never read are ignored).
    """
    unstable, short = [], []
    for col, (name, unit) in FIELD_PARAMETERS.items():
        values = window[col].dropna().to_numpy()
        if values.size == 0:
            continue
        if values.size < opts["field_readings"]:
            short.append(name)
            continue
        median = float(np.median(values))
        spread = float(np.max(np.abs(values - median)))
        tol = field_tolerance(col, median, opts)
        if exceeds(spread, tol):
            unstable.append(f"{name} varies by +-{fmt(spread)} {unit}".rstrip()
                            + f" around {fmt(median)} (allowed +-{fmt(tol)})")
    return unstable, short


def check_field_stability(samples, field, schedule, opts) -> tuple[Outcome, dict[str, bool]]:
    """Last ``field_readings`` (default 5) readings before each sample within the tolerances of
    :func:`field_tolerance`; fewer readings is a finding.

    Returns
    -------
    (Outcome, dict)
        Findings, and for each sample_id whether the field parameters were stable.
    """
    out = Outcome()
    stable: dict[str, bool] = {}
    if field.empty:
        out.skip("field_stability", "no field readings")
        return out, stable
    readings = readings_by_step(field, schedule)
    by_step = {key: group for key, group in readings.groupby("step_key", sort=False)}
    need = opts["field_readings"]
    windows: dict = {}  # samples of one step at one time share their readings (a long table)
    for sid, s in rows_of(sample_table(samples)):
        row = {"sample_id": sid, "step": s["step"], "source_row": s["source_row"]}
        key = (s["step_key"], s["sampled_at"])
        if key not in windows:
            window = by_step.get(s["step_key"], readings.iloc[:0])
            if pd.notna(s["sampled_at"]):
                window = window[~(window["time"] > s["sampled_at"])]
            window = window.sort_values("time", kind="stable", na_position="first").tail(need)
            windows[key] = (window, assess_stability(window, opts) if len(window) >= need
                            else None,
                            row_number(window["source_row"].iloc[-1]) if len(window) else None)
        window, assessed, last = windows[key]
        if len(window) < need:
            stable[sid] = False
            out.add("warning", "field_readings_few",
                    f"{len(window)} field reading{'s' if len(window) != 1 else ''} before the "
                    f"sample in step {s['step_key']}; stabilisation needs {need} successive "
                    "readings", SRC_NFM, row, analyte="")
            continue
        unstable, short = assessed
        stable[sid] = not unstable and not short
        row["source_row"] = last if last is not None else row["source_row"]
        if unstable:
            out.add("warning", "field_stability",
                    f"field parameters not stable over the last {need} readings: "
                    + "; ".join(unstable), SRC_NFM, row, analyte="")
        if short:
            out.add("warning", "field_readings_few",
                    f"fewer than {need} readings of " + ", ".join(short)
                    + " before the sample", SRC_NFM, row, analyte="")
    return out, stable


# ------------------------------------------------------------------ purge volume

def casing_volume(radius, water_column):
    """Volume of water standing in the casing [m^3].

    Notes
    -----
    V = pi r^2 L with r the casing radius [m] and L the water column [m].
    """
    return np.pi * np.square(radius) * np.asarray(water_column, dtype=float)


def static_level(project, opts: dict) -> tuple[float | None, str]:
    """Depth to static water in the well before the test [m below datum], and where it came
    from: ``qa.static_level``, the well's ``static_level``, the last level reading at or before
    the first step's start, or the shallowest of the zones' static levels.

    The well's composite level is the conductance-weighted mean of the zone levels (Konikow
    and others 2009, USGS TM 6-A30), which lies at or below the shallowest zone level; the
    review does not know the conductances, so it takes that bound: the longest water column,
    the largest casing volume, and so the fewest casing volumes pumped (the check errs towards
    a warning)."""
    if opts["static_level"] is not None:
        return float(opts["static_level"]), "qa.static_level"
    if project.well.static_level is not None:
        return float(project.well.static_level), "the well's static_level"
    levels = project.levels
    if not levels.empty:
        time = pd.to_datetime(levels["time"], errors="coerce")
        level = pd.to_numeric(levels["level"], errors="coerce")
        start = pd.to_datetime(project.steps["start"], errors="coerce").min()
        before = level[(time <= start) & level.notna()] if pd.notna(start) else level[:0]
        if len(before):
            return float(before.iloc[-1]), "the level record before pumping"
    zone_levels = [z.static_level for z in project.zones if z.static_level is not None]
    if zone_levels and len(zone_levels) == len(project.zones):
        return float(np.min(zone_levels)), ("the shallowest zone static level (the well's "
                                            "composite level is at or below it)")
    return None, "no static water level (qa.static_level, well.static_level, a level before " \
                 "pumping, or every zone's static level)"


def pumped_volume(schedule: pd.DataFrame, step: str, sampled_at) -> tuple[float, bool]:
    """Volume pumped [m^3] since pumping last started until the sample.

    Pumping starts at the first step, or at the latest step up to ``step`` that began after a
    recovery. With a sample time and step times the volume is the sum of rate x overlap of each
    step with that span; otherwise the sample is taken at the end of its step.

    Returns
    -------
    (float, bool)
        The volume (NaN if the schedule cannot give it) and whether the sample time was used.
    """
    keys = list(schedule.index)
    k = keys.index(step)
    p = max([j for j in range(k + 1) if schedule["recovered_before"].iloc[j]] or [0])
    span = schedule.iloc[p:k + 1]
    if pd.notna(sampled_at) and span["start"].notna().all() and span["end"].notna().all():
        finish = span["end"].clip(upper=sampled_at)
        overlap = ((finish - span["start"]) / pd.Timedelta(days=1)).clip(lower=0.0)
        return float(np.sum(span["rate"].to_numpy() * overlap.to_numpy())), True
    return float(np.sum(span["rate"].to_numpy() * span["duration"].to_numpy())), False


def check_purge(project, samples, schedule, stable: dict[str, bool], opts,
                stored: dict[str, float] | None = None) -> Outcome:
    """Casing volumes pumped before each sample; fewer than ``casing_volumes_min`` (default 3)
    is a warning unless the field parameters were stable (common practice: three to five).

    Casing volume: radius ``qa.casing_radius`` (default the well radius), water column from the
    static level to the well bottom (the deepest zone bottom). ``stored`` gives, per sample_id,
    the volume [m^3] the thief zones stored during the idle time before the pump start the
    sample follows (crossflow memory, :mod:`blendq.review.returned`): that water comes back
    first, so the purge must also remove it, once (n casing volumes + the stored volume).
    """
    out = Outcome()
    if schedule.empty:
        out.skip("purge_volume", "no steps table")
        return out
    level, how = static_level(project, opts)
    if level is None:
        out.skip("purge_volume", how)
        return out
    bottom = float(np.max(project.zone_bottom)) if project.zones else np.nan
    column = bottom - level
    if not column > 0:
        out.skip("purge_volume", f"water column {fmt(column)} m is not positive (static level "
                                 f"{fmt(level)} m, well bottom {fmt(bottom)} m)")
        return out
    radius = opts["casing_radius"] or project.well.well_radius
    volume = float(casing_volume(radius, column))
    no_times, volumes = [], {}
    for sid, s in rows_of(sample_table(samples)):
        if s["step_key"] not in schedule.index:
            continue
        key = (s["step_key"], s["sampled_at"])
        if key not in volumes:  # samples of one step at one time (a long table)
            volumes[key] = pumped_volume(schedule, s["step_key"], s["sampled_at"])
        pumped, timed = volumes[key]
        if not np.isfinite(pumped):
            no_times.append(sid)
            continue
        n = pumped / volume
        extra = float((stored or {}).get(sid, 0.0))
        extra = extra if np.isfinite(extra) and extra > 0 else 0.0
        need = opts["casing_volumes_min"] * volume + extra
        if not exceeds(need, pumped):
            continue
        row = {"sample_id": sid, "step": s["step"], "source_row": s["source_row"]}
        basis = "" if timed else " (sample taken as at the end of its step)"
        msg = (f"{fmt(pumped)} m^3 pumped before the sample{basis} is {n:.2f} casing volumes "
               f"of {fmt(volume)} m^3 (radius {fmt(radius)} m, water column {fmt(column)} m "
               f"below a static level from {how})")
        if extra > 0:
            msg += (f", less than {opts['casing_volumes_min']:g} casing volumes plus the "
                    f"{fmt(extra)} m^3 the thief zones stored while the well stood idle "
                    f"({fmt(need)} m^3)")
        else:
            msg += f"; fewer than {opts['casing_volumes_min']:g}"
        if stable.get(sid):
            out.add("info", "purge_volume", msg + ", but field parameters were stable",
                    SRC_COMMON, row, analyte="")
        else:
            out.add("warning", "purge_volume", msg, SRC_COMMON, row, analyte="")
    if no_times:
        out.skip("purge_volume", "no step times or durations for samples " + ", ".join(no_times))
    return out


# ------------------------------------------------------------------ timing

def check_timing(samples, schedule, opts) -> Outcome:
    """A sample taken before ``early_sample_share`` (default 0.5) of its step had elapsed (the
    blend may not have settled), after its step ended, or naming a step the test did not have.
    Common practice."""
    out = Outcome()
    table = sample_table(samples)
    if schedule.empty:
        out.skip("early_sample", "no steps table")
        return out
    share_min = opts["early_sample_share"]
    known = table["step_key"].isin(schedule.index).to_numpy()
    start = table["step_key"].map(schedule["start"])
    duration = table["step_key"].map(schedule["duration"]).to_numpy(float)
    timed = known & table["sampled_at"].notna().to_numpy() & start.notna().to_numpy() \
        & (duration > 0)
    untimed = int((known & ~timed).sum())
    with np.errstate(invalid="ignore"):
        shares = ((table["sampled_at"] - start) / pd.Timedelta(days=1)).to_numpy(float) / duration
    early = timed & (shares < share_min)
    late = timed & (shares > 1.0 + opts["late_sample_share"])
    noted = ~known | early | late  # only these rows are read
    for (sid, s), is_known, share, days in zip(rows_of(table[noted]), known[noted],
                                               shares[noted], duration[noted], strict=True):
        row = {"sample_id": sid, "step": s["step"], "source_row": s["source_row"]}
        if not is_known:
            out.add("error", "step_unknown",
                    f'sample names step "{s["step_key"]}", which is not in the steps table '
                    f"(steps: {', '.join(schedule.index)})", SRC_COMMON, row, analyte="")
            continue
        elapsed = _hours(share * days)
        if share < share_min:
            out.add("warning", "early_sample",
                    f"sampled {elapsed} into a {_hours(days)} step "
                    f"({100 * share:.0f} % of it, less than {100 * share_min:.0f} %): the blend "
                    "may not have settled", SRC_COMMON, row, analyte="")
        else:
            out.add("warning", "late_sample",
                    f"sampled {elapsed} after the start of a {_hours(days)} step, "
                    "after it ended: check the step the sample belongs to", SRC_COMMON, row,
                    analyte="")
    if untimed:
        out.skip("early_sample", f"no sample or step times for {untimed} of {len(table)} "
                                 "samples")
    return out


def _hours(days: float) -> str:
    return f"{days * 24:.1f} h" if days < 2 else f"{days:.2f} d"
