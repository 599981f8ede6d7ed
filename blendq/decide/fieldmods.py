"""Well modifications that would open a wellfield's blending plan.

When the plan of :mod:`blendq.decide.fieldplan` has no solution at some entry points, each
analysed in-service well feeding them (the entry points its drawdown links included) is
modified in turn, and the plan of those entry points re-solved with the modified well:

* the modifications of a well are its own project's ``[[scenarios]]`` that change the well
  (seal zones, redevelop a zone, move the pump intake; not a blend with an outside source, a
  new pump or lowered static heads, which are not changes of the well); a well without any gets
  the standard one: seal the zone that is the main source of each analyte that binds at its
  entry point (the zone with the largest median load share of that analyte over the well's
  allowed rates, :func:`main_source`);
* each is evaluated with the well's own posterior draws and rate grid
  (:func:`blendq.decide.scenarios.evaluate`, common random numbers), the modified well's
  summary built as :func:`blendq.decide.wellfield.summarise` builds it, and the plan
  re-solved with the same seed, the same variability factors and the same draws in the program;
* at most :data:`MAX_RESOLVES` plans are re-solved; the candidates beyond are listed as not
  tried.

A modification that opens a plan is a planning idea: the licensed professional checks it (the
seal's leakage, the zone's data, the work's feasibility) before anything is done to a well.
Base units throughout (m^3/d, mg/L, m); the texts and the table in the display units.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from blendq.decide import blendplan as bp
from blendq.decide import scenarios as sc
from blendq.decide.fieldplan import PLAN_DRAWS, PlanInputs, plan_inputs
from blendq.errors import BlendqError, ModelError

#: most re-solved plans in one search (common practice for an interactive tool: each
#: re-solve is one mixed-integer program of the linked entry points)
MAX_RESOLVES = 12

#: statuses of a candidate
OPENS, NO_PLAN, NOT_TRIED, FAILED = "opens a plan", "no plan", "not tried", "failed"


@dataclass
class Candidate:
    """One modification of one well.

    Attributes
    ----------
    well : str
    scenario : blendq.decide.scenarios.Scenario
    origin : str
        ``"scenario"`` (the well's own ``[[scenarios]]`` entry) or ``"standard"``.
    reason : str
        Why a standard modification was chosen (the analyte whose main source it seals).
    status : str
        :data:`OPENS`, :data:`NO_PLAN`, :data:`NOT_TRIED` or :data:`FAILED`.
    plan : blendplan.BlendPlan or None
        The re-solved plan of the unmet entry points (None when not tried or failed).
    error : str
        One-line error of a failed evaluation.
    """

    well: str
    scenario: sc.Scenario
    origin: str
    reason: str = ""
    status: str = NOT_TRIED
    plan: bp.BlendPlan | None = None
    error: str = ""

    @property
    def opens(self) -> bool:
        return self.status == OPENS

    @property
    def words(self) -> str:
        """The modification in words: the scenario's name, or the standard change."""
        changes = "; ".join(self.scenario.changes)
        if self.origin == "scenario":
            return f'its scenario "{self.scenario.name}": {changes}'
        return f"{changes}, {self.reason}"


@dataclass
class Modifications:
    """The search for well modifications that open the plan.

    Attributes
    ----------
    unmet : list of str
        Entry points without a plan (empty when the plan exists: no search).
    binding : dict entry point -> list of str
        Analytes binding at each unmet entry point.
    candidates : list of Candidate
        In the order tried.
    left_out : list of str
        Scenarios and wells not tried and why (not changes of the well, no analysis, ...).
    inputs : PlanInputs or None
        The plan's inputs of the unmet entry points (the wells as analysed).
    seconds : float
        Wall-clock time of the search [s] (never in the texts: they stay byte-identical).
    max_resolves : int
    """

    unmet: list[str] = field(default_factory=list)
    binding: dict[str, list[str]] = field(default_factory=dict)
    candidates: list[Candidate] = field(default_factory=list)
    left_out: list[str] = field(default_factory=list)
    inputs: PlanInputs | None = None
    seconds: float = 0.0
    max_resolves: int = MAX_RESOLVES

    @property
    def tried(self) -> list[Candidate]:
        return [c for c in self.candidates if c.status in (OPENS, NO_PLAN, FAILED)]

    @property
    def opening(self) -> list[Candidate]:
        return [c for c in self.candidates if c.opens]


# --------------------------------------------------------------------------------------------
# candidates


def is_well_change(scenario: sc.Scenario) -> str:
    """Why a scenario is not a modification of the well ("" when it is one: it seals,
    redevelops or moves the intake, without a blend, a new pump or lowered heads)."""
    if scenario.blend is not None:
        return "a blend with an outside source"
    if scenario.pump is not None:
        return "a new pump"
    if scenario.head_drop != 0.0:
        return "lowered static heads (a condition, not a change of the well)"
    if not scenario.changes_well:
        return "no change of the well"
    return ""


def main_source(analysis, analyte: str, allowed: np.ndarray) -> int | None:
    """Index of the zone that is the main source of ``analyte`` in the well's discharge.

    The load share of zone i at rate k in draw d is w_dki c_dia, with w the discharge weights
    and c the zone values of the draw (the blend C = sum_i w_i c_i is a flow-weighted mean of
    the zone concentrations: complete mixing in the borehole); the main source is the zone
    with the largest median share, averaged over the rates ``allowed`` (bool, n_rates). None
    when the analyte is not fitted or no rate is allowed.

    References
    ----------
    Appelo, C.A.J. and Postma, D. (2005) Geochemistry, Groundwater and Pollution, 2nd ed.
    Balkema, section 2.3 (mixing of waters: conservative mass balance).
    """
    pred = analysis.prediction
    if analyte not in pred.analytes or not np.any(allowed):
        return None
    a = pred.analytes.index(analyte)
    load = pred.shares[:, allowed, :] * analysis.draws.zone_values[:, None, :, a]
    return int(np.argmax(np.median(load, axis=0).mean(axis=0)))


def _binding(plan: bp.BlendPlan, inputs: PlanInputs, unmet: list[str]) -> dict[str, list]:
    """Analytes binding at each unmet entry point: those the diagnosis finds above margin x
    limit at their lowest achievable quantile; without any while the quality limits together
    bind, the limited analytes some well of the entry point carries above margin x limit
    (median over its rates)."""
    out: dict[str, list[str]] = {e: [] for e in unmet}
    for r in plan.diagnosis:
        if r.family == "quality" and r.entry_point in out and r.analyte not in out[r.entry_point]:
            out[r.entry_point].append(r.analyte)
    quality = any(r.family == "all quality" and r.opens for r in plan.diagnosis)
    for e in unmet:
        if out[e] or not quality:
            continue
        for j, a in enumerate(inputs.analytes):
            if a not in inputs.limits:
                continue
            target = inputs.margin * inputs.limits[a]
            if any(np.max(np.median(w.concentration[..., j], axis=0)) > target
                   for w in inputs.wells if w.entry_point == e):
                out[e].append(a)
    return out


def _richness(summary, analytes: list[str], limits: dict) -> float:
    """Largest median concentration over margin-free limit of the binding analytes at the
    well's allowed rates [-] (orders the wells: the richest first)."""
    allowed = summary.hydraulic_ok & (summary.rates > 0)
    best = 0.0
    for a in analytes:
        if a in summary.analytes and a in limits and np.any(allowed):
            c = np.median(summary.concentration[:, allowed, summary.analytes.index(a)], axis=0)
            best = max(best, float(np.max(c)) / limits[a])
    return best


def _analysis_of(wellfield, outcome):
    """The outcome's analysis, or the well analysed again with its seed and draws (the same
    analysis: the analysis is deterministic for a seed) when the batch did not keep it."""
    if outcome.analysis is not None:
        return outcome.analysis
    from blendq.decide.batch import WellTask, analyse_well

    w = wellfield.well(outcome.name)
    s = outcome.summary
    task = WellTask(w.name, w.entry_point, w.project, s.seed, s.draws, w.rate_min, w.rate_max,
                    True, wellfield.path.name, w.key)
    again = analyse_well(task)
    if again.analysis is None:
        raise ModelError(again.error or "the well's analysis could not be repeated")
    return again.analysis


def candidates_of(wellfield, outcome, analysis, binding: list[str],
                  left_out: list[str]) -> list[Candidate]:
    """The modifications of one well: its own scenarios that change the well, else a seal of
    the main source zone of each binding analyte (not when it has one zone)."""
    project = analysis.project
    name = outcome.name
    try:
        own = sc.project_scenarios(project)
    except BlendqError as err:
        left_out.append(f"{name}: its scenarios cannot be read ({err})")
        own = []
    out = []
    for s in own:
        why = is_well_change(s)
        if why:
            left_out.append(f'{name}: scenario "{s.name}" ({why})')
        else:
            out.append(Candidate(name, s, "scenario"))
    if out:
        return out
    if not binding:
        left_out.append(f"{name}: no scenario of its own changes the well and no analyte "
                        f"binds at {outcome.entry_point}")
        return out
    if len(project.zones) < 2:
        left_out.append(f"{name}: one zone only, nothing to seal")
        return out
    allowed = outcome.summary.hydraulic_ok & (outcome.summary.rates > 0)
    zones = {}
    for a in binding:
        z = main_source(analysis, a, allowed)
        if z is not None:
            zones.setdefault(z, []).append(a)
    for z, analytes in zones.items():
        zone = project.zone_names[z]
        s = sc.parse_scenario({"name": f"Seal {zone}", "seal": [zone]}, 0, project,
                              prefix="standard seal")
        out.append(Candidate(name, s, "standard",
                             reason="the main source of " + ", ".join(analytes)))
    return out


# --------------------------------------------------------------------------------------------
# one modification


def modified_summary(summary, analysis, result: sc.ScenarioResult):
    """The :class:`blendq.decide.wellfield.WellSummary` of the modified well, built from the
    scenario's evaluation as :func:`blendq.decide.wellfield.summarise` builds the base one:
    the window and its hydraulic and pump criteria, the concentration draws, the median
    pumping level, the deepest allowed level at the (possibly moved) intake, and the energy
    against the modified levels when the well has a ``[pump]`` table."""
    from blendq.decide.wellfield import energy_curve

    w, pred = result.window, result.prediction
    well = analysis.project.well
    hydraulic = np.ones(len(w.rates), bool)
    for c in w.criteria:
        if c.kind in ("hydraulic", "pump"):
            hydraulic &= np.asarray(c.ok, bool)
    intake = result.scenario.intake_depth
    level = np.asarray(pred.pumping_level, float)
    energy = None if summary.energy is None else energy_curve(analysis, level, intake)
    return replace(summary, ok=np.asarray(w.ok, bool).copy(), hydraulic_ok=hydraulic,
                   intervals=list(w.intervals), recommended=w.recommended,
                   reason_empty=w.reason_empty,
                   concentration=np.asarray(pred.concentration, float).copy(),
                   pumping_level=np.median(level, axis=0),
                   level_limit=float((well.operating_intake if intake is None else intake)
                                     - well.submergence),
                   energy=energy)


def restrict(inputs: PlanInputs, entry_points: list[str]) -> tuple[PlanInputs, str]:
    """The plan's inputs of the named entry points only, and the objective of the whole
    wellfield (the entry points a program links separate from the others, so their plan is
    the same; the objective must stay the wellfield's)."""
    keep = [i for i, w in enumerate(inputs.wells) if w.entry_point in entry_points]
    objective = ("energy" if inputs.wells and all(w.energy is not None for w in inputs.wells)
                 else "even")
    inter = None if inputs.interference is None else inputs.interference[np.ix_(keep, keep)]
    return replace(inputs, wells=[inputs.wells[i] for i in keep],
                   entry_points=[e for e in inputs.entry_points if e.name in entry_points],
                   others=[o for o in inputs.others if o.entry_point in entry_points],
                   interference=inter), objective


def solve(inputs: PlanInputs, entry_points: list[str], max_draws: int | None,
          time_limit: float, units: str) -> bp.BlendPlan:
    """The plan of ``entry_points`` alone (no diagnosis), with the inputs' seed."""
    sub, objective = restrict(inputs, entry_points)
    return bp.blending_plan(sub.wells, sub.entry_points, sub.limits, sub.margin,
                            sub.probability, sub.analytes, sub.others, sub.interference,
                            objective=objective, max_draws=max_draws, seed=sub.seed,
                            time_limit=time_limit, diagnose=False, units=units)


def try_modification(wellfield, outcomes, outcome, analysis, cand: Candidate, seed: int,
                     unmet: list[str], max_draws: int | None, time_limit: float,
                     units: str) -> Candidate:
    """Evaluate one candidate and re-solve the plan of the unmet entry points with it."""
    try:
        res = sc.evaluate(analysis, cand.scenario)
        summary = modified_summary(outcome.summary, analysis, res)
        changed = [replace(o, summary=summary, analysis=None) if o.name == outcome.name else o
                   for o in outcomes]
        inputs = plan_inputs(wellfield, changed, seed)
        if outcome.name in inputs.left_out:
            return replace(cand, status=NO_PLAN, error=f"modified, {outcome.name} leaves the "
                           f"plan: {inputs.left_out[outcome.name]}")
        plan = solve(inputs, unmet, max_draws, time_limit, units)
    except BlendqError as err:
        from blendq.inputs.tables import one_line

        return replace(cand, status=FAILED, error=one_line(str(err)))
    return replace(cand, status=OPENS if plan.feasible else NO_PLAN, plan=plan)


# --------------------------------------------------------------------------------------------
# the search


def search(wellfield, outcomes, inputs: PlanInputs, plan: bp.BlendPlan,
           max_draws: int | None = PLAN_DRAWS, time_limit: float = bp.TIME_LIMIT,
           units: str = "SI", max_resolves: int = MAX_RESOLVES) -> Modifications:
    """Well modifications that open the plan at its unmet entry points.

    Parameters
    ----------
    wellfield : blendq.inputs.wellfield_file.Wellfield
    outcomes : list of blendq.decide.batch.WellOutcome
        The batch analyses; a well whose analysis was not kept is analysed again with its
        seed and draws when it has a modification to try.
    inputs : PlanInputs
        The plan's inputs (:func:`blendq.decide.fieldplan.plan_inputs`).
    plan : blendplan.BlendPlan
        The plan solved from them, with its diagnosis.
    max_draws, time_limit : as :func:`blendq.decide.fieldplan.field_plan`
    units : str
        Display unit system of the re-solved plans' texts.
    max_resolves : int
        Most plans re-solved.

    Returns
    -------
    Modifications
        Empty (no unmet entry point) when the plan exists.

    References
    ----------
    Charnes, A., Cooper, W.W. (1959) Chance-constrained programming. Management Science 6(1),
    73-79 (the plan re-solved). Glasserman, P. (2003) Monte Carlo Methods in Financial
    Engineering. Springer, section 4.2 (common random numbers: the modified well keeps its
    draws, the plan its variability factors and draw subset).
    """
    start = time.perf_counter()
    out = Modifications(max_resolves=int(max_resolves))
    if plan.feasible:
        return out
    unmet = list(plan.unmet)
    out.unmet = unmet
    out.binding = _binding(plan, inputs, unmet)
    out.inputs = restrict(inputs, unmet)[0]
    limits = inputs.limits
    feeding = []
    for o in outcomes:
        w = wellfield.well(o.name)
        if o.entry_point not in unmet or not w.in_service:
            continue
        if o.summary is None:
            out.left_out.append(f"{o.name}: its analysis failed")
            continue
        binding = out.binding.get(o.entry_point, [])
        feeding.append((-_richness(o.summary, binding, limits), len(feeding), o, binding))
    feeding.sort(key=lambda t: t[:2])
    resolves = 0
    for _, _, o, binding in feeding:
        try:  # past the cap, a kept analysis still lists the well's candidates (not tried)
            analysis = _analysis_of(wellfield, o) if resolves < max_resolves else o.analysis
        except BlendqError as err:
            out.left_out.append(f"{o.name}: its analysis could not be repeated ({err})")
            continue
        if analysis is None:
            out.left_out.append(f"{o.name}: not looked at (at most {max_resolves} plans "
                                "re-solved)")
            continue
        for cand in candidates_of(wellfield, o, analysis, binding, out.left_out):
            if resolves >= max_resolves:
                out.candidates.append(cand)
                continue
            resolves += 1
            out.candidates.append(try_modification(wellfield, outcomes, o, analysis, cand,
                                                   inputs.seed, unmet, max_draws, time_limit,
                                                   units))
    out.seconds = time.perf_counter() - start
    return out


# --------------------------------------------------------------------------------------------
# table and text


def _sources(mods: Modifications) -> list[str]:
    inp = mods.inputs
    return [w.name for w in inp.wells] + [o.name for o in inp.others]


def modification_table(mods: Modifications, units: str = "US") -> pd.DataFrame:
    """One row per candidate: ``well``, ``modification`` (in words), ``origin`` (scenario or
    standard), ``status``, ``opens_plan``, the re-solved plan's rate of every well and other
    source of the unmet entry points (``<name> [<rate unit>]``, NaN without a plan), the share
    of all draws meeting every limit at each unmet entry point (``compliance <entry point>``
    [-]) and ``note`` (an error, or why the modified well left the plan)."""
    from blendq import CAUTIONS
    from blendq.units import DISPLAY_UNITS, display_unit_label, from_base

    unit = DISPLAY_UNITS[units]["rate"]
    label = display_unit_label(unit)
    names = _sources(mods) if mods.inputs is not None else []
    cols = ["well", "modification", "origin", "status", "opens_plan",
            *(f"{n} [{label}]" for n in names), *(f"compliance {e}" for e in mods.unmet), "note"]
    rows = []
    for c in mods.candidates:
        row = [c.well, c.words, c.origin, c.status, c.opens]
        p = c.plan if c.opens else None
        for n in names:
            v = (p.rates.get(n, p.other_rates.get(n)) if p is not None else None)
            row.append(np.nan if v is None else float(f"{float(from_base(v, 'rate', unit)):.4g}"))
        row += [float(p.compliance[e]) if p is not None else np.nan for e in mods.unmet]
        row.append(c.error)
        rows.append(row)
    table = pd.DataFrame(rows, columns=cols)
    table.attrs["cautions"] = [CAUTIONS[0], CAUTIONS[1], CAUTIONS[3]]
    return table


def modification_lines(mods: Modifications, units: str = "US") -> list[str]:
    """The search as text (display units): each modification that opens a plan with the
    plan's rates and compliance at each unmet entry point, those that do not, those not
    tried, or that none opens one."""
    from blendq.units import DISPLAY_UNITS, display_unit_label, from_base

    if not mods.unmet:
        return []
    unit = DISPLAY_UNITS[units]["rate"]
    label = display_unit_label(unit)

    def q(v: float) -> str:
        return f"{float(from_base(v, 'rate', unit)):,.4g}"

    out = ["  Well modifications tried (planning ideas, each to be checked by a licensed "
           "professional before any work on a well; the modified well is evaluated with its "
           "own draws and rate grid and the plan re-solved with the same seed and draws):"]
    inp = mods.inputs
    for c in mods.tried:
        what = f"{c.well}, {c.words}"
        if c.status == FAILED:
            out.append(f"    could not be evaluated: {what} ({c.error}).")
            continue
        if not c.opens:
            out.append(f"    does not open one: {what}" + (f" ({c.error})." if c.error else "."))
            continue
        p = c.plan
        parts = []
        for e in inp.entry_points:
            srcs = [(w.name, p.rates[w.name]) for w in inp.wells if w.entry_point == e.name]
            srcs += [(o.name, p.other_rates[o.name]) for o in inp.others
                     if o.entry_point == e.name and p.other_rates[o.name] > 0]
            rates = ", ".join(f"{n} {q(r)}" if r > 0 else f"{n} off" for n, r in srcs)
            parts.append(f"{e.name} {q(e.demand)} {label} from {rates} {label}, every limit "
                         f"met in {100 * p.compliance[e.name]:.1f} % of all {p.draws_total} "
                         f"draws (asked: {100 * p.probability:g} %)")
        out.append(f"    opens a plan: {what}. The plan: " + "; ".join(parts) + ".")
    skipped = [c for c in mods.candidates if c.status == NOT_TRIED]
    if skipped:
        n = mods.max_resolves
        out.append(f"    not tried (at most {n} plan{'s' if n != 1 else ''} re-solved): "
                   + "; ".join(f"{c.well}: {c.words}" for c in skipped))
    if mods.left_out:
        out.append("    not tried as a modification: " + "; ".join(mods.left_out))
    if not mods.opening:
        n = len(mods.tried)
        binding = sorted({a for v in mods.binding.values() for a in v})
        what = ("treatment or another source lower in " + ", ".join(binding)
                if binding else "more capacity (another well or source)")
        out.append(f"    none of the {n} modification{'s' if n != 1 else ''} tried opens a "
                   f"plan; {what} remains (see the constraints relaxed above)." if n else
                   f"    no modification to try; {what} remains (see the constraints relaxed "
                   "above).")
    return out
