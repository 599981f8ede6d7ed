"""A step-rate test from the project's tables: schedule, drawdown per step, fits, summary.

The equations, the fits (Jacob 1947, Rorabaugh 1953), the Hantush-Bierschenk increments, the
well-condition classes and the predictions live in :mod:`blendq.well.stepdrawdown`; this module
reads the steps table (and the water-level record when there is one), chooses the analysis,
and reports the result. Base units throughout: depths [m], rates [m^3/d], times [d].

References
----------
Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data, 2nd ed.
ILRI Publication 47 (step-drawdown tests; Hantush-Bierschenk method).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from blendq.errors import InputError, ModelError
from blendq.units import Q_, significant
from blendq.well.stepdrawdown import (
    ASSUMED_STORATIVITY,
    LN10,
    WALTON_LABELS,
    DrawdownPrediction,
    EqualTimeDrawdowns,
    StepFit,
    equal_time_drawdowns,
    fit_jacob,
    fit_rorabaugh,
    predict_drawdown,
    transmissivity_from_linear_loss,
    walton_class,
)

# --------------------------------------------------------------------------------------------
# the step table in, a result out
# --------------------------------------------------------------------------------------------

@dataclass
class StepDrawdownResult:
    """Outcome of a step-drawdown analysis (base units).

    Attributes
    ----------
    method : str
        "end of step" or "equal elapsed time" (Hantush-Bierschenk).
    static_level : float
        [m depth].
    reference_time : float
        Elapsed time the fitted B belongs to [d] (NaN when undefined).
    per_step : DataFrame
        step, rate [m^3/d]; drawdown_measured [m] (read at the step's end),
        specific_capacity_measured [m^2/d] and efficiency_measured [%] from it; for the
        equal-time method also drawdown_equal_time [m] (the superposed Hantush-Bierschenk sum
        the fit uses), specific_capacity_equal_time and efficiency_equal_time; then
        linear_drawdown BQ [m], nonlinear_drawdown CQ^2 [m] (Jacob), source_row. Efficiency
        100 B Q / s is NaN (withheld) above 100 % or for a negative C.
    parameters : DataFrame
        model, name, value, stderr, unit (base units).
    jacob : StepFit
    rorabaugh : StepFit or None
    walton_class : int
        See :data:`WALTON_LABELS`.
    apparent_transmissivity : float or None
        ln(10) / (4 pi b) from the median log-time slope per unit rate b of the steps [m^2/d]
        (equal-time analysis only).
    increments : EqualTimeDrawdowns or None
    warnings : list of str
    schedule : DataFrame
        step, rate [m^3/d], start, end [d from the first step's start], sequence_start, in time
        order.
    record : DataFrame or None
        The water-level record as time [d from the first step's start] and drawdown [m], when
        one was given.
    rorabaugh_withheld : str or None
        Why Rorabaugh's fit is not meaningful (B or n at a bound, n undetermined); None when
        it is shown.
    transmissivity_from_b : float or None
        Apparent T [m^2/d] from Jacob's B read as a Cooper-Jacob drawdown per unit rate at the
        reference time (needs the well radius), see
        :func:`blendq.well.stepdrawdown.transmissivity_from_linear_loss`.
    storativity_assumed : bool
        True when that T uses :data:`blendq.well.stepdrawdown.ASSUMED_STORATIVITY`.
    """

    method: str
    static_level: float
    reference_time: float
    per_step: pd.DataFrame
    parameters: pd.DataFrame
    jacob: StepFit
    rorabaugh: StepFit | None
    walton_class: int
    apparent_transmissivity: float | None = None
    increments: EqualTimeDrawdowns | None = None
    warnings: list[str] = field(default_factory=list)
    schedule: pd.DataFrame | None = None
    record: pd.DataFrame | None = None
    rorabaugh_withheld: str | None = None
    transmissivity_from_b: float | None = None
    storativity_assumed: bool = True

    @property
    def rorabaugh_shown(self) -> StepFit | None:
        """Rorabaugh's fit when it is meaningful (None when withheld or not fitted)."""
        return None if self.rorabaugh_withheld else self.rorabaugh

    @property
    def walton_label(self) -> str:
        return WALTON_LABELS[self.walton_class]

    def predict(self, rate, *, model: str = "jacob", time: float | None = None,
                transmissivity: float | None = None, interval: float = 0.90,
                method: str = "delta", draws: int = 2000, seed: int = 0) -> DrawdownPrediction:
        """Drawdown and pumping level at ``rate`` [m^3/d]; see :func:`predict_drawdown`.

        With ``time`` and no ``transmissivity`` the apparent transmissivity of the test is used.
        """
        fit = self.jacob if model == "jacob" else self.rorabaugh
        if fit is None:
            raise ModelError(f'no "{model}" fit in this result')
        if time is not None and transmissivity is None:
            transmissivity = self.apparent_transmissivity
        return predict_drawdown(fit, rate, static_level=self.static_level, time=time,
                                transmissivity=transmissivity, interval=interval, method=method,
                                draws=draws, seed=seed)

    def summary_lines(self, display_units: str = "US") -> list[str]:
        """Lines of text for the command line and the report, in US or SI display units."""
        return _summary_lines(self, display_units)

    def to_json_dict(self) -> dict:
        """Machine-readable result in base units, the unit in each key (``blendq drawdown
        --json``): the method and the elapsed time used, the per-step table, the parameters,
        the apparent transmissivities, the Rorabaugh fit's standing and the warnings."""
        def num(v):
            return None if v is None or not np.isfinite(v) else float(v)

        steps = self.per_step.rename(columns={
            "rate": "rate_m3_per_d", "drawdown_measured": "drawdown_measured_m",
            "specific_capacity_measured": "specific_capacity_measured_m2_per_d",
            "efficiency_measured": "efficiency_measured_percent",
            "drawdown_equal_time": "drawdown_equal_time_m",
            "specific_capacity_equal_time": "specific_capacity_equal_time_m2_per_d",
            "efficiency_equal_time": "efficiency_equal_time_percent",
            "linear_drawdown": "linear_drawdown_BQ_m",
            "nonlinear_drawdown": "nonlinear_drawdown_CQ2_m"})
        records = [{k: (num(v) if isinstance(v, float) else v) for k, v in r.items()}
                   for r in steps.to_dict(orient="records")]
        rora = self.rorabaugh
        method = {"method": self.method,
                  "fitted_drawdown": ("equal-time Hantush-Bierschenk sums"
                                      if self.method == "equal time" else
                                      "measured drawdown at the end of each step"),
                  "jacob_fit": "straight line s/Q = B + C Q, ordinary least squares, equal "
                               "weights (Hantush-Bierschenk; Jacob 1947)",
                  "elapsed_time_d": num(self.reference_time),
                  "elapsed_time_min": num(self.reference_time * 1440.0)}
        transmissivity = {
            "from_log_time_slopes_m2_per_d": num(self.apparent_transmissivity),
            "from_B_m2_per_d": num(self.transmissivity_from_b),
            "storativity_for_B": (None if self.transmissivity_from_b is None else
                                  "assumed" if self.storativity_assumed else "from the zones"),
            "note": "apparent: B also holds the linear losses of the skin, gravel pack and "
                    "screen (Cooper-Jacob from B), and the log-time slopes the whole open "
                    "interval; neither is an aquifer test"}
        return {
            "method": method,
            "steps": records,
            "parameters": [{k: (num(v) if isinstance(v, float) else v) for k, v in r.items()}
                           for r in self.parameters.to_dict(orient="records")],
            "walton_class": self.walton_class, "walton_label": self.walton_label,
            "apparent_transmissivity": transmissivity,
            "rorabaugh": None if rora is None else {
                "shown": self.rorabaugh_withheld is None,
                "withheld_because": self.rorabaugh_withheld,
                "exponent_at_bound": bool(rora.exponent_at_bound)},
            "static_level_m": num(self.static_level),
            "warnings": list(self.warnings),
        }


def validated_schedule(steps: pd.DataFrame, steps_file: str, need_times: bool):
    """Validated step schedule in time order (dict of arrays; times in d from the first start)."""
    if steps is None or len(steps) == 0:
        raise InputError("the steps table has no steps", file=steps_file)
    df = steps.reset_index(drop=True)
    rows = (df["source_row"].to_numpy() if "source_row" in df else np.arange(1, len(df) + 1))
    rows = [int(r) if pd.notna(r) else i + 1 for i, r in enumerate(rows)]
    rate = pd.to_numeric(df["rate"], errors="coerce").to_numpy(float)
    for i, r in enumerate(rate):
        if not (np.isfinite(r) and r > 0):
            raise InputError(f"rate {df['rate'].iloc[i]!r}: expected a pumping rate > 0",
                             file=steps_file, row=rows[i], field="rate")
    start = pd.to_datetime(df["start"]) if "start" in df else pd.Series(pd.NaT, index=df.index)
    end = pd.to_datetime(df["end"]) if "end" in df else pd.Series(pd.NaT, index=df.index)
    duration = pd.to_numeric(df.get("duration", np.nan), errors="coerce")
    duration = np.broadcast_to(np.asarray(duration, float), rate.shape).copy()
    have_start = start.notna().to_numpy()
    end = end.where(end.notna(), start + pd.to_timedelta(duration, unit="D"))
    recovered = df["recovered_before"] if "recovered_before" in df else pd.Series(False,
                                                                                  index=df.index)
    recovered = recovered.astype(object).where(recovered.notna(), False).astype(bool).to_numpy()
    order = np.arange(len(df))
    timed = bool(have_start.all() and end.notna().all())
    if need_times and not timed:
        i = int(np.flatnonzero(~(have_start & end.notna().to_numpy()))[0])
        fld = "start" if not have_start[i] else "end"
        raise InputError(f"{fld} {df[fld].iloc[i]!r}: the equal-time analysis needs each step's "
                         "start and end (or duration)", file=steps_file, row=rows[i], field=fld)
    t0 = t1 = np.full(len(df), np.nan)
    origin = None
    if timed:
        order = np.argsort(start.to_numpy(), kind="stable")
        origin = start.min()
        t0 = ((start - origin) / pd.Timedelta(days=1)).to_numpy(float)
        t1 = ((end - origin) / pd.Timedelta(days=1)).to_numpy(float)
        for i in range(len(df)):
            if not t1[i] > t0[i]:
                raise InputError(f"end {end.iloc[i]} is not after start {start.iloc[i]}",
                                 file=steps_file, row=rows[i], field="end")
        for a, b in zip(order[:-1], order[1:], strict=True):
            if t0[b] < t1[a] - 1e-9:
                raise InputError(f"step {df['step'].iloc[b]} starts at {start.iloc[b]}, before "
                                 f"step {df['step'].iloc[a]} ends at {end.iloc[a]}; steps must "
                                 "not overlap", file=steps_file, row=rows[b], field="start")
    first = recovered[order].copy()
    first[0] = True
    level = pd.to_numeric(df.get("pumping_level", np.nan), errors="coerce")
    level = np.broadcast_to(np.asarray(level, float), rate.shape)
    return {
        "label": [df["step"].iloc[i] if "step" in df else i + 1 for i in order],
        "row": [rows[i] for i in order], "rate": rate[order], "start": t0[order],
        "end": t1[order], "duration": (t1 - t0)[order] if timed else duration[order],
        "pumping_level": level[order], "sequence_start": first, "origin": origin, "timed": timed,
    }


def _levels_as_drawdown(levels: pd.DataFrame, origin, static_level):
    df = levels.reset_index(drop=True)
    t = ((pd.to_datetime(df["time"]) - origin) / pd.Timedelta(days=1)).to_numpy(float)
    lev = pd.to_numeric(df["level"], errors="coerce").to_numpy(float)
    rows = (df["source_row"].to_numpy() if "source_row" in df else np.arange(1, len(df) + 1))
    ok = np.isfinite(t) & np.isfinite(lev)
    order = np.argsort(t[ok], kind="stable")
    return t[ok][order], (lev[ok] - static_level)[order], np.asarray(rows)[ok][order]


def _check_drawdown(s, sched, where):
    for k, sk in enumerate(s):
        if not sk > 0:
            file, row, fld = where(k)
            raise InputError(f"step {sched['label'][k]} at {sched['rate'][k]:.6g} m^3/d: "
                             f"pumping level gives drawdown {sk:.6g} m; under pumping the level "
                             "must be below (deeper than) the static level", file=file, row=row,
                             field=fld)


def analyse_step_test(steps: pd.DataFrame, static_level: float, levels: pd.DataFrame | None = None,
                      *, method: str = "auto", elapsed: float | None = None,
                      late_fraction: float = 0.5, rorabaugh: bool | None = None,
                      steps_file: str = "steps", levels_file: str = "levels",
                      well_radius: float | None = None, storativity: float | None = None
                      ) -> StepDrawdownResult:
    """Step-drawdown analysis of a step table (and optionally the water-level record).

    Parameters
    ----------
    steps : DataFrame
        The project's steps table (see :data:`blendq.inputs.project.TABLE_COLUMNS`).
    static_level : float
        Static water level in the well [m depth below datum].
    levels : DataFrame, optional
        Water-level record (time, level [m depth], source_row).
    method : {"auto", "end of step", "equal time"}
        "end of step": drawdown at each step's end (from ``pumping_level``, or from ``levels``
        when given). "equal time": Hantush-Bierschenk sums at elapsed time ``elapsed`` (needs
        ``levels``). "auto": equal time when levels are given, else end of step.
    elapsed : float, optional
        dt [d] for the equal-time analysis; default the shortest step.
    late_fraction : float, default 0.5
        Later share of each step used for its log-time extrapolation.
    rorabaugh : bool, optional
        Fit Rorabaugh too: True requires it (at least 3 distinct rates), None fits it when
        there are at least 3 distinct rates, False skips it.
    steps_file, levels_file : str
        File names for messages.
    well_radius : float, optional
        r_w [m]; with a reference time, gives the apparent transmissivity from B.
    storativity : float, optional
        S [-] for that apparent transmissivity; default
        :data:`blendq.well.stepdrawdown.ASSUMED_STORATIVITY`.

    Returns
    -------
    StepDrawdownResult

    Raises
    ------
    InputError
        Overlapping steps, a rate <= 0, a pumping level at or above static while pumping,
        missing levels or times, too few steps for a fit.

    Notes
    -----
    Specific capacity Q / s_w; well efficiency 100 B Q / s_w, the linear share of the drawdown
    (B includes linear losses in the skin, pack and screen, so this is not an "aquifer loss
    share" alone). Walton's class uses Jacob's C.
    """
    if method not in ("auto", "end of step", "equal time"):
        raise InputError(f'method "{method}" is not known (expected "auto", "end of step" or '
                         '"equal time")')
    if not np.isfinite(static_level):
        raise InputError(f"static level {static_level!r} must be a finite depth [m]",
                         field="static_level")
    has_levels = levels is not None and len(levels) > 0
    if method == "auto" and has_levels and elapsed is None:
        # equal time where the record allows it; otherwise the ends of the steps, and say why
        # (an explicit elapsed time asks for the equal-time analysis: no fallback then)
        kw = dict(elapsed=elapsed, late_fraction=late_fraction, rorabaugh=rorabaugh,
                  steps_file=steps_file, levels_file=levels_file, well_radius=well_radius,
                  storativity=storativity)
        try:
            return analyse_step_test(steps, static_level, levels, method="equal time", **kw)
        except InputError as exc:
            result = analyse_step_test(steps, static_level, levels, method="end of step", **kw)
            result.warnings.append(f"the water-level record does not allow the equal-time "
                                   f"(Hantush-Bierschenk) analysis ({exc}); drawdown read at "
                                   "the end of each step instead")
            return result
    if method == "auto":
        method = "equal time" if has_levels else "end of step"
    if method == "equal time" and not has_levels:
        raise InputError("the equal-time (Hantush-Bierschenk) analysis needs the water-level "
                         "record", file=levels_file)
    sched = validated_schedule(steps, steps_file, need_times=has_levels)
    n = len(sched["rate"])
    notes: list[str] = []
    increments = None
    record = None
    apparent_t = None
    chained = not bool(np.all(sched["sequence_start"]))
    if method == "equal time":
        t, s_rec, lrows = _levels_as_drawdown(levels, sched["origin"], static_level)
        record = pd.DataFrame({"time": t, "drawdown": s_rec})
        dt = float(np.min(sched["duration"])) if elapsed is None else float(elapsed)
        try:
            increments = equal_time_drawdowns(t, s_rec, sched["start"], sched["end"],
                                              sched["rate"], sched["sequence_start"], dt,
                                              late_fraction, sched["label"])
        except InputError as exc:
            raise exc.located(file=levels_file) from None

        def where(k):
            target = sched["start"][k] + dt
            return levels_file, int(lrows[np.argmin(np.abs(t - target))]), "level"
        _check_drawdown(increments.step_drawdown, sched, where)
        drawdown = increments.drawdown
        if np.any(drawdown <= 0):
            k = int(np.flatnonzero(drawdown <= 0)[0])
            raise InputError(f"the summed drawdown increments of step {sched['label'][k]} come "
                             f"to {drawdown[k]:.6g} m; the level record does not show a drawdown "
                             "that grows with the steps", file=levels_file, field="level")
        measured = _end_of_step_drawdown(t, s_rec, sched, levels_file)
        reference_time = dt
        per_rate = increments.log_slope / sched["rate"]
        good = np.isfinite(per_rate) & (per_rate > 0)
        if np.any(good):
            apparent_t = float(LN10 / (4.0 * math.pi * np.median(per_rate[good])))
        for k in range(1, n):
            if not sched["sequence_start"][k] and sched["rate"][k] <= sched["rate"][k - 1]:
                notes.append(f"step {sched['label'][k]}: rate {sched['rate'][k]:.6g} m^3/d is not "
                             f"above the previous step's {sched['rate'][k - 1]:.6g} m^3/d; the "
                             "Hantush-Bierschenk method assumes rising rates, so this increment "
                             "rests on the log-time extrapolation alone")
    else:
        if has_levels:
            t, s_rec, lrows = _levels_as_drawdown(levels, sched["origin"], static_level)
            record = pd.DataFrame({"time": t, "drawdown": s_rec})
            drawdown = _end_of_step_drawdown(t, s_rec, sched, levels_file)

            def where(k):
                return levels_file, int(lrows[np.argmin(np.abs(t - sched["end"][k]))]), "level"
        else:
            level = sched["pumping_level"]
            for k in range(n):
                if not np.isfinite(level[k]):
                    raise InputError(f"no pumping level for step {sched['label'][k]} and no "
                                     "water-level record to read it from", file=steps_file,
                                     row=sched["row"][k], field="pumping_level")
            drawdown = level - static_level

            def where(k):
                return steps_file, sched["row"][k], "pumping_level"
        _check_drawdown(drawdown, sched, where)
        measured = drawdown
        dur = np.asarray(sched["duration"], float)
        if chained:
            reference_time = np.nan
            notes.append("steps follow each other without recovery and are read at their ends: "
                         "each drawdown also holds the growing response to earlier steps, which "
                         "biases B and C; give the water-level record for a Hantush-Bierschenk "
                         "analysis")
        elif np.all(np.isfinite(dur)) and np.all(dur > 0):
            reference_time = float(np.median(dur))
            if np.ptp(dur) > 0.1 * reference_time:
                notes.append(f"steps of unequal length ({dur.min():.3g} to {dur.max():.3g} d) "
                             "read at their ends: B belongs to a mix of pumping times")
        else:
            reference_time = np.nan
    q = sched["rate"]
    jacob = fit_jacob(q, drawdown, reference_time=reference_time)
    if jacob.dof == 0:
        notes.append("two steps fit Jacob's equation exactly: no standard errors")
    rora = None
    rora_withheld = None
    distinct = np.unique(q).size
    if rorabaugh or (rorabaugh is None and distinct >= 3):
        try:
            rora = fit_rorabaugh(q, drawdown, reference_time=reference_time)
        except InputError as exc:
            raise exc.located(file=steps_file) from None
        rora_withheld = _rorabaugh_degenerate(rora)
        if rora_withheld:
            notes.append(f"Rorabaugh's fit is not meaningful and is withheld: {rora_withheld}")
        if rora.dof == 0:
            notes.append("three steps fit Rorabaugh's equation exactly: no standard errors")
    elif rorabaugh is None:
        notes.append(f"Rorabaugh's equation not fitted: {distinct} distinct rate(s), 3 needed")
    if jacob.well_loss < 0:
        notes.append("Jacob's C is negative: the losses do not grow faster than the rate (well "
                     "developing during the test, or a drawdown error); efficiencies withheld")
    elif jacob.dof > 0 and np.isfinite(jacob.stderr[1]) and jacob.well_loss < 2.0 * \
            jacob.stderr[1]:
        notes.append("Jacob's C is smaller than two standard errors: the test does not show a "
                     "well loss distinguishable from zero")
    lin = jacob.linear_loss * q
    nonlin = jacob.well_loss * q**2
    columns = {"step": sched["label"], "rate": q}
    kinds = [("measured", measured)]
    if method == "equal time":
        kinds.append(("equal_time", drawdown))
    for kind, s_k in kinds:
        s_k = np.where(s_k > 0, s_k, np.nan)  # a record that shows no drawdown: no ratio
        eff = 100.0 * lin / s_k
        # a linear share above 100 % (or from a negative C) is not a result
        eff = np.where((eff > 100.0) | (jacob.well_loss < 0), np.nan, eff)
        columns[f"drawdown_{kind}"] = s_k
        columns[f"specific_capacity_{kind}"] = q / s_k
        columns[f"efficiency_{kind}"] = eff
    withheld = [k for k, _ in kinds
                if np.any(~np.isfinite(columns[f"efficiency_{k}"])) and jacob.well_loss >= 0]
    if withheld:
        notes.append("efficiency (linear share) above 100 % withheld for some steps: B Q exceeds "
                     f"the {' and '.join(k.replace('_', '-') for k in withheld)} drawdown there")
    columns.update({"linear_drawdown": lin, "nonlinear_drawdown": nonlin,
                    "source_row": sched["row"]})
    per_step = pd.DataFrame(columns)
    t_from_b = None
    if well_radius is not None and np.isfinite(reference_time):
        t_from_b = transmissivity_from_linear_loss(
            jacob.linear_loss, reference_time, well_radius,
            ASSUMED_STORATIVITY if storativity is None else storativity)
        t_from_b = float(t_from_b) if np.isfinite(t_from_b) else None
    return StepDrawdownResult(
        method=method, static_level=float(static_level), reference_time=float(reference_time),
        per_step=per_step, parameters=_parameter_table(jacob, rora), jacob=jacob,
        rorabaugh=rora, walton_class=walton_class(jacob.well_loss),
        apparent_transmissivity=apparent_t, increments=increments, warnings=notes,
        schedule=pd.DataFrame({"step": sched["label"], "rate": q, "start": sched["start"],
                               "end": sched["end"], "sequence_start": sched["sequence_start"]}),
        record=record, rorabaugh_withheld=rora_withheld, transmissivity_from_b=t_from_b,
        storativity_assumed=storativity is None)


#: Largest standard error of Rorabaugh's n [-] for the fit to be shown as a result; blendq's
#: setting (an n known no better than +- 0.5 does not tell a laminar from a turbulent loss).
RORABAUGH_EXPONENT_STDERR_MAX = 0.5


def _rorabaugh_degenerate(fit: StepFit) -> str | None:
    """Why a Rorabaugh fit is not meaningful (None when it is)."""
    scale = float(np.max(fit.drawdown) / np.max(fit.rate))  # a B carrying all the drawdown
    if fit.linear_loss <= 1e-6 * scale:
        return (f"B went to its bound 0 (B = {fit.linear_loss:.2g} d/m^2): all the drawdown is "
                "put in the term C Q^n")
    if fit.exponent_at_bound:
        return f"n stopped at a bound of its range (n = {fit.exponent:.3g})"
    if fit.well_loss <= 0:
        return "C went to its bound 0"
    sd_n = float(fit.stderr[2])
    if np.isfinite(sd_n) and sd_n > RORABAUGH_EXPONENT_STDERR_MAX:
        return (f"n = {fit.exponent:.3g} ± {sd_n:.2g}, not determined by the data (standard "
                f"error above {RORABAUGH_EXPONENT_STDERR_MAX})")
    return None


def _end_of_step_drawdown(t, s_rec, sched, levels_file):
    """Measured drawdown at each step's end from the water-level record [m]."""
    n = len(sched["rate"])
    out = np.empty(n)
    for k in range(n):
        inside = (t > sched["start"][k]) & (t <= sched["end"][k] + 1e-9)
        if not np.any(inside):
            raise InputError(f"no water-level reading during step {sched['label'][k]}",
                             file=levels_file, field="time")
        out[k] = np.interp(sched["end"][k], t[inside], s_rec[inside])
    return out


def _parameter_table(jacob: StepFit, rora: StepFit | None) -> pd.DataFrame:
    rows = []
    for fit in (jacob, rora):
        if fit is None:
            continue
        n = fit.exponent
        c_unit = "d**2/m**5" if fit.model == "jacob" else f"d**{n:.4g}/m**{3 * n - 1:.4g}"
        units = {"B": "d/m**2", "C": c_unit, "n": "dimensionless"}
        for name, value, sd in zip(fit.parameter_names, fit.values, fit.stderr, strict=True):
            rows.append({"model": fit.model, "name": name, "value": float(value),
                         "stderr": float(sd), "unit": units[name]})
    return pd.DataFrame(rows, columns=["model", "name", "value", "stderr", "unit"])


# --------------------------------------------------------------------------------------------
# text summary (pint at the edge)
# --------------------------------------------------------------------------------------------

_SUMMARY_UNITS = {
    "US": {"rate": "gpm", "length": "ft", "B": "ft/gpm", "C": "s**2/ft**5",
           "capacity": "gpm/ft", "T": "ft**2/d", "time": "min"},
    "SI": {"rate": "m**3/d", "length": "m", "B": "d/m**2", "C": "min**2/m**5",
           "capacity": "m**2/d", "T": "m**2/d", "time": "min"},
    "SI-L/s": {"rate": "L/s", "length": "m", "B": "m*s/L", "C": "min**2/m**5",
               "capacity": "L/s/m", "T": "m**2/d", "time": "min"},
}
_LABELS = {"gpm": "gpm", "ft": "ft", "ft/gpm": "ft/gpm", "s**2/ft**5": "s²/ft⁵",
           "gpm/ft": "gpm/ft", "ft**2/d": "ft²/d", "min": "min", "m**3/d": "m³/d", "m": "m",
           "d/m**2": "m/(m³/d)", "min**2/m**5": "min²/m⁵", "m**2/d": "m²/d", "L/s": "L/s",
           "m*s/L": "m/(L/s)", "L/s/m": "L/s/m"}


def _fmt(value, unit_from: str, unit_to: str, digits: int = 3, system: str = "US") -> str:
    if value is None or not np.isfinite(value):
        return "n/a"
    return _number(Q_(value, unit_from).to(unit_to).magnitude, digits, system)


def _number(mag: float, digits: int = 3, system: str = "US") -> str:
    """``digits`` significant figures, positional between 1e-3 and 1e6 (1000, not 1e+03);
    thousands grouped as everywhere in blendq's output (:func:`blendq.units.significant`)."""
    if mag == 0 or not (1e-3 <= abs(mag) < 1e6):
        return f"{mag:.{digits}g}"
    if abs(mag) >= 1e3:
        return significant(mag, digits, system)
    return np.format_float_positional(mag, precision=digits, unique=False, fractional=False,
                                      trim="-")


def _percent(value: float) -> str:
    return "withheld" if not np.isfinite(value) else f"{value:.0f} %"


def _summary_lines(res: StepDrawdownResult, system: str) -> list[str]:
    if system not in _SUMMARY_UNITS:
        raise InputError(f'display units "{system}" are not known (expected "US", "SI" or "SI-L/s")')
    u = _SUMMARY_UNITS[system]

    def fmt(value, unit_from, unit_to, digits=3):
        return _fmt(value, unit_from, unit_to, digits, system)

    def num(mag, digits=3):
        return _number(mag, digits, system)

    lab = {k: _LABELS[v] for k, v in u.items()}
    j = res.jacob
    sd = j.stderr
    if res.method == "equal time":
        head = (f"Step-drawdown analysis: Hantush-Bierschenk at "
                f"{fmt(res.reference_time, 'd', u['time'])} {lab['time']} after each step start")
    else:
        head = "Step-drawdown analysis: drawdown at the end of each step"
    head += "; Jacob fitted as the straight line s/Q = B + CQ"
    lines = [head, f"  static level {fmt(res.static_level, 'm', u['length'])} {lab['length']}"]
    lines.append(f"  Jacob  s = BQ + CQ²: B = {fmt(j.linear_loss, 'd/m**2', u['B'])} "
                 f"± {fmt(sd[0], 'd/m**2', u['B'])} {lab['B']}, "
                 f"C = {fmt(j.well_loss, 'd**2/m**5', u['C'])} "
                 f"± {fmt(sd[1], 'd**2/m**5', u['C'])} {lab['C']}")
    other = "min**2/m**5" if system == "US" else "s**2/ft**5"
    lines.append(f"  well condition (Walton 1962, C = {fmt(j.well_loss, 'd**2/m**5', other)} "
                 f"{_LABELS[other]}): class {res.walton_class}, {res.walton_label}")
    r = res.rorabaugh
    if r is not None and res.rorabaugh_withheld:
        lines.append(f"  Rorabaugh  s = BQ + CQⁿ: withheld ({res.rorabaugh_withheld})")
    elif r is not None:
        n = r.exponent
        # C Q^n with Q in display rate units and s in display length units
        f_len = Q_(1.0, "m").to(u["length"]).magnitude
        f_rate = Q_(1.0, "m**3/d").to(u["rate"]).magnitude
        c_disp = r.well_loss * f_len / f_rate**n
        c_sd = r.stderr[1] * f_len / f_rate**n
        lines.append(f"  Rorabaugh  s = BQ + CQⁿ: B = {fmt(r.linear_loss, 'd/m**2', u['B'])} "
                     f"± {fmt(r.stderr[0], 'd/m**2', u['B'])} {lab['B']}, "
                     f"C = {num(c_disp)} ± {num(c_sd, 2)} "
                     f"{lab['length']}/({lab['rate']})ⁿ, n = {num(n)} ± "
                     f"{num(r.stderr[2], 2)}")
    if res.apparent_transmissivity is not None:
        lines.append(f"  apparent transmissivity from the log-time slopes: "
                     f"{fmt(res.apparent_transmissivity, 'm**2/d', u['T'])} {lab['T']}")
    if res.transmissivity_from_b is not None:
        how = "assumed storativity" if res.storativity_assumed else "the zones' storativity"
        lines.append(f"  apparent transmissivity from B (Cooper-Jacob, {how}; B holds the "
                     f"linear well losses too): "
                     f"{fmt(res.transmissivity_from_b, 'm**2/d', u['T'])} {lab['T']}")
    equal = res.method == "equal time"
    for row in res.per_step.itertuples(index=False):
        text = (f"  step {row.step}: {fmt(row.rate, 'm**3/d', u['rate'])} {lab['rate']}, "
                f"measured drawdown {fmt(row.drawdown_measured, 'm', u['length'])} "
                f"{lab['length']} (specific capacity "
                f"{fmt(row.specific_capacity_measured, 'm**2/d', u['capacity'])} "
                f"{lab['capacity']}, linear share {_percent(row.efficiency_measured)})")
        if equal:
            text += (f"; equal-time drawdown {fmt(row.drawdown_equal_time, 'm', u['length'])} "
                     f"{lab['length']} (specific capacity "
                     f"{fmt(row.specific_capacity_equal_time, 'm**2/d', u['capacity'])} "
                     f"{lab['capacity']}, linear share {_percent(row.efficiency_equal_time)})")
        lines.append(text)
    if equal:
        lines.append("  measured: read at the end of each step; equal-time: the superposed "
                     "Hantush-Bierschenk sum at the elapsed time above, which the fit uses")
    lines += [f"  note: {w}" for w in res.warnings]
    return lines
