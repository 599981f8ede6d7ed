"""The whole analysis in one pass: review -> fit -> uncertainty -> sweep -> window.

Data flow one way: each stage takes the objects of the stages before it and returns new ones.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from blendq.chemistry.limits import Limit, limit_notes
from blendq.decide import sweep
from blendq.decide.levelcheck import LevelCheck, check_levels
from blendq.errors import ModelError
from blendq.fit import diagnostics, estimation, history, observations, uncertainty, unresolved
from blendq.inputs.project import Project
from blendq.review.data_notes import data_notes, thin_data_note  # noqa: F401 (re-exported)
from blendq.units import format_percent
from blendq.well import memory
from blendq.well.model import (
    FLOWLOG_SOURCE,
    NO_PRIOR_SOURCE,
    START_CONDUCTANCE,
    elapsed_test_time,
    horizon_scaling,
    operating_geometry,
)


@dataclass
class Analysis:
    """Everything one run of blendq computes for a project (base units throughout)."""

    project: Project
    qa: object
    sample_use: pd.DataFrame
    sample_mode: str
    fit: estimation.FitResult
    draws: uncertainty.Draws
    zones: pd.DataFrame
    analyte_diagnostics: pd.DataFrame
    residuals: pd.DataFrame
    hydraulics: pd.DataFrame
    prediction: uncertainty.Prediction
    window: sweep.Window
    limits: dict[str, Limit]
    not_fitted: dict[str, str] = field(default_factory=dict)
    step_drawdown: LevelCheck | None = None
    notes: list[str] = field(default_factory=list)
    result_use: pd.DataFrame | None = None
    #: crossflow memory (:class:`blendq.well.memory.MemorySummary`); None without idle times
    memory: object | None = None
    #: analyte -> time model fitted to the monitoring history (blendq.fit.history)
    history: dict = field(default_factory=dict)

    @functools.cached_property
    def sweep_table(self) -> pd.DataFrame:
        """The sweep as a table, one row per rate (:func:`blendq.decide.sweep.sweep_table`),
        made on first use (a batch of wells that keeps only their summaries never needs it)."""
        p = self.project
        return sweep.sweep_table(self.prediction, self.limits, p.settings.margin,
                                 p.settings.interval, p.zone_names,
                                 sweep.compliance_statistics(p, self.limits), p.zone_top)

    @property
    def decisions(self) -> pd.DataFrame:
        """The project's review decisions as the fit used them
        (:func:`blendq.review.decisions.decision_table`)."""
        return self.qa.decisions


def fit_analytes(project: Project) -> tuple[list[str], dict[str, str]]:
    """Analytes to fit (a limit applies and at least one result is detected) and the others
    with the reason they are not fitted."""
    s = project.samples
    limited = {lim.analyte for lim in project.limits}
    fitted, skipped = [], {}
    for analyte in project.analytes():
        rows = s[s["analyte"] == analyte]
        if analyte not in limited:
            skipped[analyte] = "no limit applies (reviewed only)"
        elif rows["nondetect"].astype(bool).all():
            dl = rows["detection_limit"].astype(float).max()
            skipped[analyte] = f"every result is a non-detect (below {dl:g} mg/L)"
        else:
            fitted.append(analyte)
    return fitted, skipped


def analyse(project: Project, draws: int | None = None, seed: int | None = None,
            sample_mode: str = "keep",
            progress: Callable[[int, int], None] | None = None) -> Analysis:
    """Run the full analysis of a project.

    Parameters
    ----------
    project : Project
    draws : int, optional
        Posterior draws (default: the project's setting).
    seed : int, optional
        Random seed (default: the project's setting).
    sample_mode : {"keep", "exclude", "downweight"}
        Use of samples that the lab review flags.
    progress : callable(done, total), optional
    """
    from blendq.review import decisions as decisions_module
    from blendq.review import findings as qa_module

    # crossflow memory: the review runs before the fit, so it sees the zone model of the
    # zone properties; the fit's weighting below uses the fitted model
    mem = memory.review_memory(project)[0]
    review = qa_module.review(project, memory=mem)
    use = review.sample_weights(sample_mode).reset_index()
    # the reviewer's decisions recorded in the project come after the mode: per result for the
    # fit, per sample (whole-sample decisions) for the table of sample use
    per_result = decisions_module.result_use(use, review.results, review.decisions)
    for d in review.decisions.itertuples(index=False):
        if d.analyte == "":
            hit = use["sample_id"] == d.sample_id
            use.loc[hit, "used"] = d.action != "exclude"
            use.loc[hit, "sigma_factor"] = d.factor if d.action == "downweight" else 1.0
            use.loc[hit, "reason"] = decisions_module.describe(d._asdict())
    analytes, skipped = fit_analytes(project)
    if not analytes:
        raise ModelError("no analyte with a limit has a detected result: nothing to fit")
    fit_project = replace(project, samples=project.samples[project.samples["analyte"].isin(analytes)])
    fit = estimation.fit(fit_project, sample_use=per_result)
    flag = float(review.options["returned_water_flag"])
    if mem is not None and len(mem) and (mem["returned_fraction"] > flag).any():
        # widen (or drop) the step samples that may carry returned water by their error
        # predicted with the first fit's zones, then fit once more
        mem_fit = memory.sample_memory(project, fit.model)
        bias = memory.sample_bias(fit.model, mem_fit, fit.concentrations[fit.analytes])
        per_result = observations.returned_water_use(
            per_result, mem_fit, bias, flag, float(review.options["returned_water_exclude"]))
        # from the first fit's parameters: the widened results move the optimum little
        fit = estimation.fit(fit_project, sample_use=per_result, start=fit.theta)
    s = project.settings
    d = uncertainty.monte_carlo(fit, s.draws if draws is None else draws,
                                s.seed if seed is None else seed, progress=progress)
    # zone values the data cannot pin spread over what the data allow (every draw still
    # reproduces the samples); the table's intervals then come from those draws
    basis = diagnostics.zone_basis(fit)
    d = unresolved.redraw_unresolved(fit, d, diagnostics.zone_table(fit, d, s.interval, basis))
    zones = diagnostics.zone_table(fit, d, s.interval, basis)
    time_fits = history.history_time_fits(project, fit, d)
    if time_fits:  # the history's scatter replaces the temporal_cv setting
        s = replace(s, temporal_cv={**s.temporal_cv, **{k: f.temporal_cv
                                                         for k, f in time_fits.items()}},
                    temporal_cv_history=tuple(time_fits))
        project = replace(project, settings=s)
        fit.problem.project = replace(fit.problem.project, settings=s)
    pred = sweep.sweep(fit, d)
    levels = check_levels(fit, d, pred, s.exceedance_probability, s.horizon)
    window = sweep.window_for(fit, pred, level_deep=levels.level_deep)
    limits = sweep.governing_limits(project.limits, pred.analytes)
    notes = list(d.notes)
    hyd = diagnostics.hydraulics_table(fit)
    if (hyd["conductance_from"] == "prior").any():
        notes.append("Some zone conductances rest on the zone properties (priors) rather than "
                     "on the test data; zone shares carry that uncertainty.")
    if (hyd["prior_source"] == NO_PRIOR_SOURCE).any():
        notes.append(f"No zone transmissivity, conductivity or conductance is given: the zone "
                     f"conductances rest on the flow logs and levels alone (the fit starts from "
                     f"{START_CONDUCTANCE:g} m2/d per zone, a start value with no weight).")
    if (hyd["prior_source"] == FLOWLOG_SOURCE).any():
        notes.append('conductance_model = "flowlog": the zone conductances rest on the flow logs '
                     "and levels, not on the zone properties (which only carry them to the "
                     "operating horizon).")
    if project.flowlogs.empty:
        notes.append("No flow log: drawdown alone identifies only the total conductance and "
                     "the well loss; zone shares come from zone properties (priors).")
    residuals = diagnostics.residual_table(fit)
    table_outliers = residuals[residuals["outlier"] & residuals["analyte"].isin(limits)]
    if len(table_outliers):
        listed = ", ".join(f"{r.sample_id} ({r.analyte}, step {r.step})"
                           for r in table_outliers.itertuples())
        notes.insert(0, f"The fit does not reproduce {len(table_outliers)} lab result(s) of an "
                        f"analyte with a limit: {listed}. The model and these results disagree; "
                        "explain them (sampling, lab, or a zone the model lacks) before relying "
                        "on the window.")
    notes += entrance_loss_notes(fit)
    horizon_note = horizon_scaling(project, elapsed_test_time(project), s.horizon).note(project)
    if horizon_note:
        notes.append(horizon_note)
    notes.append(f"Pumping level in the window from the {levels.source}: {levels.reason}.")
    notes += [n + "." for n in sweep.applicable_ratio_rules(s.limit_sets, pred.analytes,
                                                            project.limits)[1]]
    notes += limit_notes(project.limits, s.limit_sets, project.analytes())
    rate = window.recommended if window.recommended else project.well.demand
    mem_summary = memory.summarise(
        project, fit.model, fit.model.with_changes(geometry=operating_geometry(project)),
        fit.concentrations[fit.analytes], rate)
    for k, f in time_fits.items():
        notes.append(f"Temporal variability of {k} estimated from the monitoring history "
                     f"({f.n} results; CV {format_percent(f.temporal_cv)} about a {f.model} time model): it "
                     "replaces the temporal_cv setting.")
    return Analysis(project, review, use, sample_mode, fit, d, zones, diagnostics.analyte_diagnostics(fit),
                    residuals, hyd, pred, window, limits, skipped,
                    levels, notes, per_result, mem_summary, time_fits)


def entrance_loss_notes(fit) -> list[str]:
    """One sentence per zone whose nonlinear entrance loss was fitted: its value where the
    data resolve it, else "not resolved" (no number)."""
    table = fit.entrance_losses
    if table is None:
        return []
    out = []
    for r in table.itertuples(index=False):
        if r.verdict == "resolved":
            out.append(f"Entrance loss of {r.zone} fitted (C q^P with P = {r.exponent:g}): "
                       f"C = {r.coefficient:.3g} d^{r.exponent:g}/m^{3 * r.exponent - 1:g}, a "
                       f"head loss of {r.loss_at_reference:.2g} m +- "
                       f"{r.loss_at_reference_sd:.2g} m at a zone inflow of "
                       f"{r.reference_flow:.4g} m3/d.")
        else:
            out.append(f"Entrance loss of {r.zone}: not resolved by the data (its sd is not "
                       "below half its value); held at the zone's given value.")
    return out


def demand_sentence(a: Analysis, units: str = "US") -> str:
    """Whether the demand is met, in one sentence ("" when the project gives no demand)."""
    from blendq.units import format_quantity

    w = a.window
    demand = a.project.well.demand
    if not demand:
        return "No demand is given in the project, so none is weighed."
    d = format_quantity(demand, "rate", units)
    if w.empty:
        return f"The demand of {d} cannot be met from this well: no rate meets every limit."
    if w.demand_met:
        return f"The demand of {d} is met."
    top = max(hi for _, hi, _, _ in w.intervals)
    rec = format_quantity(w.recommended, "rate", units)
    if top < demand:
        return (f"The demand of {d} cannot be met from this well: the window ends at "
                f"{format_quantity(top, 'rate', units)} and the recommended {rec} keeps the "
                f"headroom below that end; the shortfall of "
                f"{format_quantity(demand - w.recommended, 'rate', units)} needs another source "
                "or an option that widens the window.")
    return (f"The demand of {d} is not met at the recommended {rec}: rates up to the demand do "
            "not comply with the headroom kept.")


def headroom_sentence(a: Analysis, units: str = "US") -> str:
    """How far the recommended rate stays inside the window ("" when there is no window)."""
    from blendq.units import format_quantity

    w = a.window
    if w.empty or w.recommended is None:
        return ""
    if w.headroom <= 0:
        return "The recommended rate may sit on an end of the window (no headroom set)."
    if not w.headroom_kept:
        return (f"The window is too narrow to keep the {w.headroom:.0%} headroom "
                "(settings.recommended_headroom) from both ends; the recommended rate is the "
                "middle of the window, with no room for the rate to drift.")
    return (f"The recommended rate keeps a headroom of {w.headroom:.0%} of the rate "
            f"({format_quantity(w.headroom * w.recommended, 'rate', units)}) from every end of "
            "the window (settings.recommended_headroom; common practice).")


def decision_sentence(a: Analysis, units: str = "US") -> str:
    """The decision in a few sentences: the window and the recommended rate, whether the demand
    is met, and the headroom kept inside every hard limit."""
    from blendq.units import format_quantity

    w = a.window
    s = a.project.settings
    if w.empty:
        options = window_options(a, units)
        tail = f" Options that could open a window: {'; '.join(options)}." if options else ""
        drivers = failure_drivers(a, units)
        driven = f" {' '.join(drivers)}" if drivers else ""
        demand = a.project.well.demand
        dem = (f" The demand of {format_quantity(demand, 'rate', units)} cannot be met from "
               "this well." if demand else "")
        return (f"No pumping rate meets every limit with the {s.margin:.0%} margin at "
                f"{1 - s.exceedance_probability:.0%} confidence: {w.reason_empty}.{driven}"
                f"{dem}{tail}{cascade_sentence(a, units)}")
    parts = [f"{format_quantity(lo, 'rate', units)} and {format_quantity(hi, 'rate', units)}"
             for lo, hi, _, _ in w.intervals]
    rec = format_quantity(w.recommended, "rate", units) if w.recommended is not None else "none"
    res = a.residuals
    n_out = int((res["outlier"] & res["analyte"].isin(a.limits)).sum()) if len(res) else 0
    caveat = (f" Provisional: the fit does not reproduce {n_out} lab result(s); see the notes."
              if n_out else "")
    return (f"Operate between {' and between '.join(parts)}; recommended rate {rec} "
            f"(with {1 - s.exceedance_probability:.0%} confidence, each limit's judged "
            f"statistic stays below {s.margin:.0%} of the limit in at least "
            f"{1 - s.sample_exceedance_probability:.0%} of samples, and the pumping level "
            f"above the intake plus submergence). {demand_sentence(a, units)} "
            f"{headroom_sentence(a, units)}{caveat}{cascade_sentence(a, units)}")


def cascade_sentence(a: Analysis, units: str = "US") -> str:
    """The zones water cascades from above the pumping level (" ..." or "")."""
    from blendq.units import format_quantity

    parts = [f"{name} from {format_quantity(rate, 'rate', units)}"
             + (" (inside the window)" if inside else "")
             for name, rate, inside in a.window.cascading]
    if not parts:
        return ""
    return (f" Water cascades into the well above the pumping level (the level below a "
            f"producing zone's top) from {'; '.join(parts)}: the zone is dewatered at the well "
            "face, its inflow follows its saturated thickness, and the falling water entrains "
            "air; set zones[i].keep_level_above to make its top a hard limit.")


def failure_drivers(a: Analysis, units: str = "US") -> list[str]:
    """For each analyte whose limit fails at some rate, the lab result that drives the
    failure: a result the review marks as an error (a gross outlier), else one the fit does not
    reproduce; where the limit fails at every rate and neither exists, its highest result.

    Returns
    -------
    list of str
        One sentence per analyte, naming the sample, step, value and input row.
    """
    w = a.window
    binding = [c for c in w.criteria if c.kind == "quality" and not np.all(c.ok[w.rates > 0])]
    everywhere = {c.name.split(" ")[0] for c in binding if not np.any(c.ok[w.rates > 0])}
    out, seen = [], set()
    samples = a.project.samples
    file = a.project.files.get("samples", "samples.csv")
    for crit in binding:
        analyte = crit.name.split(" ")[0]
        if analyte not in a.limits or analyte in seen:
            continue
        seen.add(analyte)
        rows = samples[(samples["analyte"] == analyte) & ~samples["nondetect"].astype(bool)]
        if rows.empty:
            continue
        f = a.qa.findings
        errors = f[(f["analyte"] == analyte) & (f["severity"] == "error")
                   & (f["sample_id"] != "")] if len(f) else f
        res = a.residuals
        missed = res[res["outlier"] & (res["analyte"] == analyte)] if len(res) else res
        if len(errors):
            sid, why = str(errors.iloc[0]["sample_id"]), f"the review's {errors.iloc[0]['rule']} error"
        elif len(missed):
            sid, why = str(missed.iloc[0]["sample_id"]).split("+")[0], "a result the fit does not reproduce"
        elif analyte not in everywhere:
            continue
        else:
            k = rows["value"].astype(float).idxmax()
            sid, why = str(rows.loc[k, "sample_id"]), "its highest result"
        row = rows[rows["sample_id"].astype(str) == sid]
        if row.empty:
            continue
        r = row.iloc[0]
        from blendq.chemistry.analytes import get_analyte

        an = get_analyte(analyte)
        value = float(an.in_display_unit(float(r["value"])))
        where = f"{file} row {int(r['source_row'])}" if pd.notna(r["source_row"]) else file
        out.append(f"The {analyte} failure is driven by sample {sid} (step {r['step']}, "
                   f"{value:.4g} {an.display_unit}, {where}), {why}; if that result is wrong, "
                   "record a [[review]] decision in project.toml.")
    return out


#: Largest number of posterior draws of each rerun of :func:`leave_one_step_out`.
LEAVE_ONE_OUT_DRAWS = 300


def leave_one_step_out(a: Analysis, draws: int | None = None) -> pd.DataFrame:
    """The window found again without each step's lab samples (the step's hydraulic data stay).

    Shows which steps drive the result: a step whose removal moves an end of the window by much
    carries that end alone.

    Parameters
    ----------
    a : Analysis
    draws : int, optional
        Posterior draws of each rerun (default: those of ``a``, at most
        :data:`LEAVE_ONE_OUT_DRAWS`); the seed is ``a``'s. The table shows how much each step
        moves the window, not the decision, so fewer draws serve (a window end found with 300
        draws lies within a grid step or two of the one found with 1,000 on the demo).

    Returns
    -------
    DataFrame
        One row per step with lab samples, the base case first (step ``"none"``): ``step``,
        ``results_left_out``, ``window_low``, ``window_high`` [m^3/d] (the lowest and highest
        rates of the window; NaN when empty), ``recommended`` [m^3/d], ``shift_low``,
        ``shift_high`` [m^3/d] (against the base case), ``note``.
    """
    from blendq.errors import BlendqError

    def row(step, n, win, note=""):
        lo = min((i[0] for i in win.intervals), default=np.nan) if win is not None else np.nan
        hi = max((i[1] for i in win.intervals), default=np.nan) if win is not None else np.nan
        rec = np.nan if win is None or win.recommended is None else win.recommended
        return {"step": step, "results_left_out": n, "window_low": lo, "window_high": hi,
                "recommended": rec, "note": note or ("" if win is None or not win.empty
                                                     else "no window")}

    p = a.project
    steps = p.samples["step"].astype(str)
    n_draws = min(a.draws.n_draws, LEAVE_ONE_OUT_DRAWS) if draws is None else draws
    # the reference row takes the reruns' draws, so that the shifts compare like with like
    base = a if n_draws == a.draws.n_draws else _run(p, draws=n_draws, seed=a.draws.seed,
                                                     sample_mode=a.sample_mode)
    rows = [row("none", 0, base.window)]
    for step in dict.fromkeys(steps):
        keep = steps != step
        left = p.samples[keep.to_numpy()]
        # decisions on the samples left out go with them
        ids = set(left["sample_id"].astype(str))
        kept = tuple(d for d in p.settings.review_decisions if d["sample"] in ids)
        sub = replace(p, samples=left, settings=replace(p.settings, review_decisions=kept))
        try:
            b = _run(sub, draws=n_draws, seed=a.draws.seed, sample_mode=a.sample_mode)
            rows.append(row(step, int((~keep).sum()), b.window))
        except BlendqError as exc:
            rows.append(row(step, int((~keep).sum()), None, f"no fit: {exc}"))
            continue
        if b.window.empty:
            rows[-1]["note"] = f"no window: {b.window.reason_empty}"
    out = pd.DataFrame(rows)
    out["shift_low"] = out["window_low"] - out["window_low"].iloc[0]
    out["shift_high"] = out["window_high"] - out["window_high"].iloc[0]
    out = out[["step", "results_left_out", "window_low", "window_high", "recommended",
               "shift_low", "shift_high", "note"]]
    out.attrs["draws"] = n_draws
    return out


def richest_source(zones: pd.DataFrame, analyte: str) -> str | None:
    """The zone that is the richest source of an analyte, or None when the data cannot say.

    A zone qualifies only when the data resolve it (verdict "resolved" or "weakly resolved")
    and the lower end of its interval lies above the upper end of every other zone's interval
    (or, for a zone not resolved, above the top of its data-allowed range).
    """
    z = zones[zones["analyte"] == analyte]
    if z.empty:
        return None
    shown = z["verdict"] != "not resolved"
    top = z["upper"].where(shown, z["range_high"]).astype(float)
    for k in z.index[shown]:
        others = top.drop(k)
        if len(others) and float(z.loc[k, "lower"]) > float(others.max()):
            return str(z.loc[k, "zone"])
    return None


def window_options(a: Analysis, units: str = "US") -> list[str]:
    """Options that could open (or widen) the window, from what binds (planning prompts for
    the scenario comparison, not results).

    A zone is named as the richest source of an analyte only where the data resolve it and its
    interval lies above the others' (:func:`richest_source`); otherwise the prompt names the
    measurements that would find the source (:func:`blendq.fit.unresolved.what_would_tell`).
    """
    from blendq.units import format_quantity

    out = []
    rates = a.window.rates
    for crit in a.window.criteria:
        if np.all(crit.ok[rates > 0]):
            continue  # this criterion holds everywhere: nothing to open
        if crit.kind == "quality":
            analyte = crit.name.split(" ")[0]
            z = a.zones[a.zones["analyte"] == analyte]
            if len(z):
                richest = richest_source(a.zones, analyte)
                if richest is not None:
                    out.append(f"seal, line or case off the {richest} (the richest source of "
                               f"{analyte})")
                else:
                    unseen = unresolved.unresolved_zones(a.zones, analyte, a.fit.zone_names)
                    idx = unseen or list(range(len(a.fit.zone_names)))
                    tell = unresolved.what_would_tell(a.fit, idx, units)
                    out.append(f"find the source of {analyte} before sealing any zone (the data "
                               f"cannot say which zone is richest): {'; '.join(tell)}")
            out.append(f"blend with a source lower in {analyte}")
            ok = crit.ok & (rates > 0)
            if ok.any() and not ok[-1]:
                out.append(f"a rate at or below {format_quantity(rates[ok].max(), 'rate', units)}"
                           f" where {analyte} complies")
        elif crit.kind == "hydraulic":
            skins = [(z.skin, z.name) for z in a.project.zones]
            worst = max(skins)
            if worst[0] > 0:
                out.append(f"redevelop the {worst[1]} (skin {worst[0]:g} in the zone properties)")
            out.append("lower the pump intake if the screen and the pump allow")
    return list(dict.fromkeys(out))


#: the pipeline itself, for reruns inside this module (unaffected by wrappers of ``analyse``)
_run = analyse
