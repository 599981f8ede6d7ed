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
from dataclasses import dataclass, field

import numpy as np

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
    """

    inputs: PlanInputs
    plan: bp.BlendPlan
    outages: list


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
    return FieldPlan(p, plan, outages)


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
    from blendq.units import DISPLAY_UNITS, display_unit_label, from_base

    unit = DISPLAY_UNITS[units]["rate"]
    label = display_unit_label(unit)

    def q(v: float) -> str:
        return f"{float(from_base(v, 'rate', unit)):,.4g} {label}"

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


def outage_lines(fp: FieldPlan, units: str = "US") -> list[str]:
    """The N-1 outcome as text: per well out of service, the entry points left short (with the
    shortfall in the display unit) or non-compliant."""
    from blendq.units import DISPLAY_UNITS, display_unit_label, from_base

    unit = DISPLAY_UNITS[units]["rate"]
    label = display_unit_label(unit)
    out = ["N-1 (each planned well out of service in turn):"]
    if not fp.outages:
        return out + ["  no well to take out"]
    for r in fp.outages:
        bad = []
        for ep, short in r.shortfall.items():
            if ep not in r.plan.unmet:
                continue
            what = []
            if short > 0:
                what.append(f"short {float(from_base(short, 'rate', unit)):,.4g} {label}")
            if r.noncompliant[ep]:
                what.append("over margin x limit: " + ", ".join(r.noncompliant[ep]))
            if not what:
                what.append("no plan for the entry points the wells' drawdown links")
            bad.append(f"{ep} not met ({'; '.join(what)})")
        out.append(f"  {r.well} out: " + ("; ".join(bad) if bad else
                                          "every entry point met (plan re-optimised)"))
    return out
