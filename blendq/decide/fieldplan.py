"""The blending plan of a wellfield: from the wellfield file and the wells' batch analyses to the
program of :mod:`blendq.decide.blendplan`, its plan and its N-1 outages.

Each in-service well whose analysis did not fail becomes a :class:`BlendWell`:

* its rates: the longest run of its rate grid that every hydraulic and pump criterion of its own
  window allows (``WellSummary.hydraulic_ok``, which already holds the wellfield file's
  ``rate_min``/``rate_max``), the lowest of them its least rate when on;
* its concentration draws: the well's predictive draws of the mean discharge concentration,
  each multiplied by a lognormal factor of mean 1 with the log sd of the statistic its limit is
  judged on (temporal variability and lab error, :attr:`blendq.decide.sweep.Statistic.log_sd`),
  one factor per well, draw and analyte from a seeded generator and the same at every rate of
  the well. A draw of the wellfield is then one compliance statistic at every entry point, and
  the chance constraint of the plan holds the blend's statistic under margin x limit with the
  chosen probability (see docs/methods.md, "Blending plan of a wellfield", for what this
  neglects);
* its pumping level per rate (the median of the draws), its deepest allowed level (intake minus
  submergence) and, with the interference table of the file, every other well's drawdown at it;
* its energy per volume per rate when its project has a ``[pump]`` table.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from blendq.decide import blendplan as bp
from blendq.errors import InputError

#: default draws of the chance constraint kept in the program (:data:`blendplan.PLAN_DRAWS`)
PLAN_DRAWS = bp.PLAN_DRAWS


@dataclass
class PlanInputs:
    """What the plan is built from (base units: m^3/d, mg/L, m, kWh/m^3).

    Attributes
    ----------
    wells : list of BlendWell
        In the wellfield file's order; a well out of service is ``available=False``.
    entry_points : list of blendplan.EntryPoint
    others : list of blendplan.OtherSource
    limits : dict analyte -> float
        Governing limit of each planned analyte [mg/L canonical]: the strictest across wells.
    analytes : list of str
        Analytes every planned well predicts.
    interference : ndarray (n_wells, n_wells) or None [m per m^3/d]
    margin, probability : float
    seed : int
    left_out : dict well -> str
        Wells not in the plan and why (failed, out of service, no allowed rate).
    notes : list of str
    """

    wells: list
    entry_points: list
    others: list
    limits: dict[str, float]
    analytes: list[str]
    interference: np.ndarray | None
    margin: float
    probability: float
    seed: int
    left_out: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def _longest_run(mask: np.ndarray) -> tuple[int, int] | None:
    """Index range [a, b] of the longest True run of ``mask`` (the first on a tie), or None."""
    edges = np.flatnonzero(np.diff(np.r_[0, mask.astype(int), 0]))
    runs = [(int(a), int(b) - 1) for a, b in zip(edges[::2], edges[1::2], strict=True)]
    return max(runs, key=lambda r: r[1] - r[0], default=None)


def variability_factors(seed: int, name: str, n_draws: int, log_sd) -> np.ndarray:
    """Lognormal factors of mean 1, shape (n_draws, n_analytes), for one well.

    ``F = exp(sigma Z - sigma^2 / 2)`` with Z standard normal from a generator seeded by the
    plan's seed and the well's name (SHA-256, as the wells' own seeds), so that a well's
    factors do not depend on the other wells or their order.

    References
    ----------
    Aitchison, J. and Brown, J.A.C. (1957) The Lognormal Distribution. Cambridge University
    Press (mean of a lognormal: exp(mu + sigma^2 / 2)).
    """
    digest = hashlib.sha256(f"{int(seed)}:plan:{name}".encode()).digest()
    rng = np.random.default_rng(int.from_bytes(digest[:8], "big"))
    sd = np.asarray(log_sd, float)
    z = rng.standard_normal((int(n_draws), sd.size))
    return np.exp(sd * z - 0.5 * sd**2)


def plan_inputs(wellfield, outcomes, seed: int | None = None) -> PlanInputs:
    """The wells, entry points, other sources, limits and interference of the plan.

    Parameters
    ----------
    wellfield : blendq.inputs.wellfield_file.Wellfield
    outcomes : list of blendq.decide.batch.WellOutcome
        The batch analyses, in the file's order.
    seed : int, optional
        Seed of the variability factors and of the program's draw subset (default: the
        wellfield's seed, else 0).

    Returns
    -------
    PlanInputs

    Raises
    ------
    InputError
        An other source lacking a concentration of a planned analyte (naming the file and
        ``sources[i]``), or no well to plan.
    """
    seed = int(seed if seed is not None else (wellfield.seed or 0))
    by_name = {o.name: o for o in outcomes}
    notes: list[str] = []
    left_out: dict[str, str] = {}
    use = []
    for w in wellfield.wells:
        o = by_name.get(w.name)
        if not w.in_service:
            left_out[w.name] = "out of service"
        elif o is None or o.summary is None:
            left_out[w.name] = "analysis failed"
        else:
            run = _longest_run(o.summary.hydraulic_ok & (o.summary.rates > 0))
            if run is None:
                left_out[w.name] = "no rate meets its hydraulic limits"
            else:
                use.append((w, o.summary, run))
    if not use:
        raise InputError("no well can take part in the blending plan (each is out of service, "
                         "failed, or has no rate inside its hydraulic limits)",
                         file=wellfield.path.name, field="wells")
    analytes = [a for a in use[0][1].analytes if all(a in s.analytes for _, s, _ in use)]
    dropped = sorted({a for _, s, _ in use for a in s.analytes} - set(analytes))
    if dropped:
        notes.append("not planned (not fitted at every planned well): " + ", ".join(dropped))
    limits: dict[str, float] = {}
    for a in analytes:
        values = {s.name: s.limits[a] for _, s, _ in use if a in s.limits}
        if not values:
            continue
        limits[a] = min(values.values())
        if max(values.values()) > limits[a] * (1 + 1e-9):
            strict = min(values, key=values.get)
            notes.append(f"{a}: the wells' governing limits differ; the strictest "
                         f"({limits[a]:.4g} mg/L, of {strict}) is used at every entry point")
    n_draws = min(s.concentration.shape[0] for _, s, _ in use)
    if any(s.concentration.shape[0] != n_draws for _, s, _ in use):
        notes.append(f"the wells have different numbers of draws; the first {n_draws} of "
                     "each are used")
    wells = []
    planned = {w.name for w, _, _ in use}
    for w in wellfield.wells:
        if w.name not in planned:
            continue
        s, (a, b) = next((s, r) for x, s, r in use if x.name == w.name)
        cols = [s.analytes.index(x) for x in analytes]
        conc = s.concentration[:n_draws][:, a:b + 1][:, :, cols]
        sd = [s.log_sd.get(x, 0.0) for x in analytes]
        conc = conc * variability_factors(seed, w.name, n_draws, sd)[:, None, :]
        rates = s.rates[a:b + 1]
        energy = None if s.energy is None else np.asarray(s.energy[a:b + 1], float)
        if energy is not None and not np.all(np.isfinite(energy)):
            notes.append(f"{w.name}: its pump cannot deliver every allowed rate; its energy "
                         "is not known over the whole range, so the plan spreads the wells "
                         "evenly")
            energy = None
        level = None if s.pumping_level is None else np.asarray(s.pumping_level[a:b + 1], float)
        wells.append(bp.BlendWell(w.name, w.entry_point, rates, conc, float(rates[0]),
                                  float(rates[-1]), energy, level, s.level_limit))
    interference = _interference(wellfield, [w.name for w in wells])
    eps = [bp.EntryPoint(e.name, float(e.demand)) for e in wellfield.entry_points]
    others = []
    for k, o in enumerate(wellfield.sources, start=1):
        missing = [a for a in analytes if a not in o.concentrations]
        if missing:
            raise InputError(f"gives no concentration of {', '.join(missing)}; the blending "
                             "plan needs every analyte the wells are planned for",
                             file=wellfield.path.name, field=f"sources[{k}]")
        conc = {a: float(o.concentrations[a]) for a in analytes}
        if o.rate is not None:
            others.append(bp.OtherSource(o.name, o.entry_point, float(o.rate), conc))
        else:
            others.append(bp.OtherSource(o.name, o.entry_point, 0.0, conc, float(o.max_rate)))
    return PlanInputs(wells, eps, others, limits, analytes, interference,
                      float(wellfield.margin), float(wellfield.probability), seed, left_out,
                      notes)


def _interference(wellfield, names: list[str]) -> np.ndarray | None:
    """Drawdown at each planned well per unit rate of each other [m per m^3/d], from the
    file's coordinates and ``[interference]`` table; None without them."""
    from blendq.well.interference import interference_matrix

    inter = wellfield.interference
    entries = [wellfield.well(n) for n in names]
    if inter is None or any(w.x is None for w in entries) or len(entries) < 2:
        return None
    x = np.array([w.x for w in entries], float)
    y = np.array([w.y for w in entries], float)
    return interference_matrix(x, y, inter.transmissivity, storativity=inter.storativity,
                               time=inter.time, radius_of_influence=inter.radius_of_influence)


@dataclass
class FieldPlan:
    """The blending plan of a wellfield and its N-1 outages.

    Attributes
    ----------
    inputs : PlanInputs
    plan : blendplan.BlendPlan
    outages : list of blendplan.OutageResult
        One per planned well (a well out of service or failed has no outage of its own).
    outcomes : list of list of EntryOutcome
        Per outage (in the order of ``outages``), what happens at each entry point: met, fails
        by itself (and why), or without a plan only through the link of the wells' drawdown
        (:func:`entry_outcomes`).
    """

    inputs: PlanInputs
    plan: bp.BlendPlan
    outages: list
    outcomes: list = field(default_factory=list)


def field_plan(wellfield, outcomes, seed: int | None = None,
               max_draws: int | None = PLAN_DRAWS, time_limit: float = bp.TIME_LIMIT,
               n_minus_one: bool = True, units: str = "SI") -> FieldPlan:
    """The blending plan of a wellfield (:func:`blendplan.blending_plan`, objective "auto":
    least energy when every planned well has an energy curve, else the most even use) and,
    when asked, the plan with each planned well out of service in turn
    (:func:`blendplan.n_minus_one`).

    Parameters
    ----------
    wellfield : blendq.inputs.wellfield_file.Wellfield
    outcomes : list of blendq.decide.batch.WellOutcome
    seed : int, optional
        As :func:`plan_inputs`.
    max_draws : int or None
        Draws kept in each program.
    time_limit : float
        Wall-clock limit of each program [s] (reaching it is a ModelError).
    n_minus_one : bool
    units : str
        Display unit system of the diagnosis texts.

    Returns
    -------
    FieldPlan

    References
    ----------
    Charnes, A., Cooper, W.W. (1959) Chance-constrained programming. Management Science 6(1),
    73-79.
    """
    p = plan_inputs(wellfield, outcomes, seed)
    args = (p.wells, p.entry_points, p.limits, p.margin, p.probability, p.analytes, p.others,
            p.interference)
    kw = dict(max_draws=max_draws, seed=p.seed, time_limit=time_limit, units=units)
    plan = bp.blending_plan(*args, **kw)
    outages = bp.n_minus_one(*args, **kw) if n_minus_one else []
    outcomes = [entry_outcomes(p, r, **kw) for r in outages]
    return FieldPlan(p, plan, outages, outcomes)


# --------------------------------------------------------------------------------------------
# N-1: which entry point fails, and why


@dataclass
class EntryOutcome:
    """What one outage does at one entry point.

    Attributes
    ----------
    entry_point : str
    fails : str
        ``"no"`` (demand and every limit met by the re-optimised plan), ``"itself"`` (no plan
        for this entry point even with only its own wells and sources, the other entry points'
        wells off) or ``"through the link"`` (its own wells and sources meet its demand and
        limits, but it shares one program with linked entry points, through the wells'
        drawdown at one another, and that program has no plan).
    linked : list of str
        The other entry points in the same program (the wells' drawdown links them).
    failing : list of str
        For ``"through the link"``: the linked entry points that fail by themselves (empty
        when each meets its demand alone and only the joint program fails).
    demand : float
        [m^3/d]
    shortfall : float
        Demand it cannot receive with every limit met [m^3/d], from its own program alone;
        0 when met or failing only through the link.
    over : list of tuple (str, float, float, bool)
        Analytes over margin x limit in its own program alone: (analyte, lowest achievable
        blend quantile [mg/L], margin x limit [mg/L], True when found with only this analyte
        constrained, other limits binding too).
    level_excess : float
        Depth below the deepest allowed pumping level a plan would need [m] (its own program,
        or, for linked entry points that each meet their demand alone, their joint one); NaN
        when the level limits do not bind.
    rate_excess : float
        Total rate outside the wells' rate limits a plan would need [m^3/d]; NaN when the rate
        limits do not bind.
    """

    entry_point: str
    fails: str
    linked: list[str]
    failing: list[str]
    demand: float
    shortfall: float = 0.0
    over: list = field(default_factory=list)
    level_excess: float = float("nan")
    rate_excess: float = float("nan")

    def cause(self) -> str:
        """What fails, without figures: ``short``, ``<analyte> over margin x limit``,
        ``level limits``, ``rate limits`` (``; ``-separated), or "" when met."""
        parts = ["short"] if self.shortfall > 0 else []
        parts += [f"{a} over margin x limit" for a, *_ in self.over]
        if np.isfinite(self.level_excess):
            parts.append("level limits")
        if np.isfinite(self.rate_excess):
            parts.append("rate limits")
        return "; ".join(parts)


def _links(inputs: PlanInputs, out: str | None) -> list[list[str]]:
    """Entry points one program holds together: linked when a well of one has drawdown at a
    well of the other (interference), the well ``out`` (out of service) not counted."""
    names = [e.name for e in inputs.entry_points]
    parent = {n: n for n in names}

    def root(n: str) -> str:
        while parent[n] != n:
            n = parent[n]
        return n

    if inputs.interference is not None:
        wells = inputs.wells
        for i, wi in enumerate(wells):
            for j, wj in enumerate(wells):
                if (out not in (wi.name, wj.name) and wi.entry_point != wj.entry_point
                        and inputs.interference[i, j] != 0):
                    parent[root(wi.entry_point)] = root(wj.entry_point)
    groups: dict[str, list[str]] = {}
    for n in names:
        groups.setdefault(root(n), []).append(n)
    return list(groups.values())


def _sub_plan(inputs: PlanInputs, out: str, eps: list[str], **kw) -> bp.BlendPlan:
    """The plan of the entry points ``eps`` alone, with the well ``out`` out of service: their
    own wells and sources only, the drawdown among those wells kept."""
    idx = [k for k, w in enumerate(inputs.wells) if w.entry_point in eps]
    wells = [replace(inputs.wells[k], available=inputs.wells[k].name != out) for k in idx]
    inter = (None if inputs.interference is None
             else inputs.interference[np.ix_(idx, idx)])
    return bp.blending_plan(wells, [e for e in inputs.entry_points if e.name in eps],
                            inputs.limits, inputs.margin, inputs.probability, inputs.analytes,
                            [o for o in inputs.others if o.entry_point in eps], inter, **kw)


def _fill_cause(o: EntryOutcome, plan: bp.BlendPlan, own: bool = True) -> None:
    """The figures of ``plan``'s diagnosis for ``o``. With ``own`` (a plan of this entry point
    alone): its shortfall, its analytes over margin x limit, and the level and rate limits.
    Else (a plan of linked entry points that each meet their demand alone) only the level and
    rate limits, the constraints the wells' drawdown couples: how the program spreads a joint
    shortfall among the entry points is one of many equal choices, not a finding."""
    for r in plan.diagnosis:
        if own and r.family == "demand" and r.entry_point == o.entry_point:
            o.shortfall = max(float(r.target - r.value), 0.0)
        elif own and r.family == "quality" and r.entry_point == o.entry_point:
            o.over.append((r.analyte, float(r.value), float(r.target), not r.opens))
        elif r.family == "level limits":
            o.level_excess = float(r.value)
        elif r.family == "rate limits":
            o.rate_excess = float(r.value)


def entry_outcomes(inputs: PlanInputs, result, max_draws: int | None = PLAN_DRAWS,
                   seed: int = 0, time_limit: float = bp.TIME_LIMIT,
                   units: str = "SI") -> list[EntryOutcome]:
    """What an outage does at each entry point: met, fails by itself (why), or only through
    the link of the wells' drawdown.

    An entry point the re-optimised plan leaves without a plan is planned again alone (its
    own wells, minus the one out, and its own sources; the drawdown among its own wells kept,
    the other entry points' wells off). Without a plan then, it fails by itself, and the
    diagnosis of that plan says why (short by how much, which analyte over margin x limit,
    which hydraulic limit binds). With one, it fails only because it shares the program with
    linked entry points: those that fail by themselves are named; when none does, the linked
    entry points are planned together alone and that diagnosis says what binds.

    Parameters
    ----------
    inputs : PlanInputs
    result : blendplan.OutageResult
    max_draws, seed, time_limit, units
        As :func:`field_plan` (the programs solved here use the same).

    Returns
    -------
    list of EntryOutcome
        In the order of the wellfield file's entry points.
    """
    kw = dict(max_draws=max_draws, seed=seed, time_limit=time_limit, units=units)
    unmet = set(result.plan.unmet)
    groups = {n: g for g in _links(inputs, result.well) for n in g}
    demand = {e.name: float(e.demand) for e in inputs.entry_points}
    out: dict[str, EntryOutcome] = {}
    for e in inputs.entry_points:
        linked = [n for n in groups[e.name] if n != e.name]
        out[e.name] = EntryOutcome(e.name, "no" if e.name not in unmet else "itself",
                                   linked, [], demand[e.name])
    for name in (n for n in out if n in unmet):
        o = out[name]
        if len(unmet) == 1:  # its own program, alone: the outage's diagnosis is its own
            _fill_cause(o, result.plan)
            continue
        alone = _sub_plan(inputs, result.well, [name], **kw)
        if alone.feasible:
            o.fails = "through the link"
        else:
            _fill_cause(o, alone)
    for name in (n for n in out if out[n].fails == "through the link"):
        o = out[name]
        o.failing = [n for n in o.linked if out[n].fails == "itself"]
    # a linked group whose entry points each meet their demand alone: what binds jointly
    for g in {tuple(groups[n]) for n in out if out[n].fails == "through the link"
              and not out[n].failing}:
        joint = _sub_plan(inputs, result.well, list(g), **kw)
        for n in g:
            _fill_cause(out[n], joint, own=False)
    return list(out.values())


def _outcomes(fp: FieldPlan) -> list[list[EntryOutcome]]:
    """``fp.outcomes``, worked out here for a FieldPlan made without them (same seed and
    draws as its plan)."""
    if len(fp.outcomes) == len(fp.outages):
        return fp.outcomes
    p = fp.plan
    max_draws = p.draws_used if p.draws_used < p.draws_total else None
    return [entry_outcomes(fp.inputs, r, max_draws=max_draws, seed=fp.inputs.seed)
            for r in fp.outages]


def outage_table(fp: FieldPlan) -> pd.DataFrame:
    """The N-1 table: :func:`blendplan.outage_table` with what fails at each entry point.

    Columns: ``well_out``, ``entry_point``, ``met``, ``plan_found`` (as
    :func:`blendplan.outage_table`), ``fails`` (``no``, ``itself``, ``through the link``),
    ``linked_to`` (for ``through the link``: the linked entry points that fail by themselves,
    else every linked one; ``; ``-separated), ``cause`` (:meth:`EntryOutcome.cause`), ``shortfall_m3_d`` and
    ``noncompliant`` (of this entry point's own diagnosis, :func:`entry_outcomes`: 0 and
    empty for an entry point failing only through the link of an entry point that fails
    itself), ``level_excess_m`` [m] and ``rate_excess_m3_d`` [m^3/d] (NaN when they do not
    bind).
    """
    rows = []
    for r, entries in zip(fp.outages, _outcomes(fp), strict=True):
        for o in entries:
            rows.append({"well_out": r.well, "entry_point": o.entry_point,
                         "met": o.fails == "no", "plan_found": r.feasible, "fails": o.fails,
                         "linked_to": "; ".join((o.failing or o.linked)
                                                if o.fails == "through the link" else []),
                         "cause": o.cause(), "shortfall_m3_d": o.shortfall,
                         "noncompliant": ", ".join(a for a, *_ in o.over),
                         "level_excess_m": o.level_excess, "rate_excess_m3_d": o.rate_excess})
    return pd.DataFrame(rows)


# --------------------------------------------------------------------------------------------
# text for the command line and the text output

#: words of each objective in the text
OBJECTIVE_TEXT = {"energy": "least total pumping energy",
                  "even": "most even use of the wells (least largest share of a well's range)"}


def _conc(analyte: str, value: float) -> str:
    from blendq.chemistry.analytes import get_analyte

    an = get_analyte(analyte)
    v = float(an.in_display_unit(np.asarray([value]))[0])
    return f"{v:.3g} {an.display_unit}" if np.isfinite(v) else "-"


def plan_lines(fp: FieldPlan, units: str = "US") -> list[str]:
    """The plan as text: rates per well in the display unit, the blend at each entry point
    (median and the chosen-probability quantile against margin x limit, the share of all draws
    meeting every limit), the objective; without a plan, its status and what would open one."""
    from blendq.units import format_quantity

    def q(v: float) -> str:
        return format_quantity(v, "rate", units, digits=4)

    p, inp = fp.plan, fp.inputs
    # (no solve time here: the text is byte-identical for the same seed; BlendPlan has it)
    out = [f"Blending plan: {p.status} (objective: {OBJECTIVE_TEXT[p.objective]}; "
           f"{p.draws_used} of {p.draws_total} draws in the program)"]
    if p.feasible:
        eps = {w.name: w.entry_point for w in inp.wells}
        for name, rate in p.rates.items():
            out.append(f"  {name} ({eps[name]}): " + (q(rate) if rate > 0 else "off"))
        for o in inp.others:
            out.append(f"  {o.name} (other source, {o.entry_point}): {q(p.other_rates[o.name])}")
    for name, why in inp.left_out.items():
        out.append(f"  {name}: not in the plan ({why})")
    pct = f"{100 * p.probability:g} %"
    for e in inp.entry_points:
        rows = p.blend[p.blend["entry_point"] == e.name]
        if not p.feasible and e.name in p.unmet:
            continue
        parts = []
        for r in rows.itertuples(index=False):
            target = (f" against {p.margin:g} x limit = {_conc(r.analyte, r.target_mg_l)}"
                      if np.isfinite(r.target_mg_l) else " (no limit)")
            parts.append(f"{r.analyte} median {_conc(r.analyte, r.median_mg_l)}, {pct} quantile "
                         f"{_conc(r.analyte, r.quantile_mg_l)}{target}")
        out.append(f"  at {e.name} (demand {q(e.demand)}): " + "; ".join(parts))
        out.append(f"    every limit met in {100 * p.compliance[e.name]:.1f} % of all "
                   f"{p.draws_total} draws (asked: {pct})")
    if not p.feasible:
        out.append("  No plan meets every constraint. Each constraint relaxed in turn:")
        for r in p.diagnosis:
            out.append(f"    {'opens a plan' if r.opens else 'does not open one'}: {r.text}")
    out += [f"  note: {n}" for n in [*inp.notes, *p.notes]]
    return out


def _names(names: list[str]) -> str:
    """``A``, ``A and B``, ``A, B and C``."""
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _possessive(names: list[str]) -> str:
    return _names(names) + "'" + ("" if _names(names).endswith("s") else "s")


def entry_outcome_text(o: EntryOutcome, units: str = "US", probability: float = 0.95) -> str:
    """One entry point's N-1 outcome in words, figures in the display units.

    Parameters
    ----------
    o : EntryOutcome
    units : str
        Display unit system ("US", "SI", "SI-L/s").
    probability : float
        The plan's probability [-] (the quantile the analytes are judged at).
    """
    from blendq.units import format_quantity

    def rate(v: float) -> str:
        return format_quantity(v, "rate", units)

    if o.fails == "no":
        return f"{o.entry_point}: met"
    why = []
    if o.shortfall > 0:
        why.append(f"short {rate(o.shortfall)} of its {rate(o.demand)} demand")
    pct = f"{100 * probability:g} %"
    for analyte, lowest, target, alone in o.over:
        why.append(f"{analyte} over margin x limit (lowest achievable {pct} quantile "
                   f"{_conc(analyte, lowest)} against {_conc(analyte, target)}"
                   + ("; other limits bind too" if alone else "") + ")")
    if np.isfinite(o.level_excess):
        why.append(f"pumping levels would reach {format_quantity(o.level_excess, 'length', units)}"
                   " below the deepest allowed (level limits bind)")
    if np.isfinite(o.rate_excess):
        why.append(f"rates {rate(o.rate_excess)} outside the wells' rate limits needed (rate "
                   "limits bind)")
    if o.fails == "itself":
        return (f"{o.entry_point} fails on its own wells: " + "; ".join(why) if why else
                f"{o.entry_point} fails on its own wells: no plan meets its constraints")
    if o.failing:
        return (f"{o.entry_point}: meets demand and limits on its own wells, but no joint plan "
                f"exists because its wells' drawdown is linked to {_possessive(o.failing)}")
    return (f"{o.entry_point}: meets demand and limits on its own wells, and so does "
            f"{_names(o.linked)}; together no plan exists because the wells' drawdown links "
            "them" + (": " + "; ".join(why) if why else ""))


def outage_lines(fp: FieldPlan, units: str = "US") -> list[str]:
    """The N-1 outcome as text: per well out of service, each entry point left without a plan,
    whether it fails on its own wells (short by how much, which analyte over margin x limit,
    which hydraulic limit binds; figures in the display units) or only because the wells'
    drawdown links it to one that fails."""
    out = ["N-1 (each planned well out of service in turn):"]
    if not fp.outages:
        return out + ["  no well to take out"]
    outcomes = _outcomes(fp)
    if fp.inputs.interference is not None and any(
            o.fails != "no" for entries in outcomes for o in entries):
        out.append("  (an entry point left without a plan is planned again on its own wells, "
                   "the other entry points' wells off: what it can do before their drawdown, "
                   "so a shortfall stated is the least it would be)")
    for r, entries in zip(fp.outages, outcomes, strict=True):
        bad = [entry_outcome_text(o, units, fp.inputs.probability)
               for o in entries if o.fails != "no"]
        if not bad:
            out.append(f"  {r.well} out: every entry point met (plan re-optimised)")
            continue
        out.append(f"  {r.well} out:")
        out += [f"    {line}" for line in bad]
    return out
