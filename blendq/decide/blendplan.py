"""A blending plan for a wellfield: rates for every well that meet each entry point's demand with
every analyte at the entry point under margin x limit in a chosen share of the predictive draws.

Each well is off or on; when on, its rate lies anywhere between its lowest and highest operating
rate, and the mass load it sends (rate x concentration) is the piecewise-linear interpolation of
``rates[l] * concentration[d, l, a]`` on the well's rate grid, for every predictive draw ``d``.
The blend at an entry point is linear in the loads, so the plan is a mixed-integer linear
program (scipy.optimize.milp, HiGHS): an on/off binary per well, a lambda weight on every grid
point and one binary per grid segment (a special ordered set of type 2 written with segment
binaries), and one violation binary per entry point and draw for the chance constraint. The
demand at each entry point is an equality: the wells and other sources deliver exactly it.

Pure numerical core in base units: rates [m^3/d], concentrations [mg/L], levels [m depth],
energy [kWh/m^3]; the objective in energy mode is [kWh/d].
"""

from __future__ import annotations

import math
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from scipy.optimize import Bounds, LinearConstraint, milp
from scipy.sparse import coo_array

from blendq.chemistry.analytes import get_analyte
from blendq.errors import InputError, ModelError
from blendq.units import format_quantity

#: draws of the chance constraint kept in the program when a well has more (common practice in
#: the sample approximation of chance constraints: a few hundred scenarios); the plan is then
#: checked against all draws
PLAN_DRAWS = 200
#: relative optimality gap asked of the branch and bound (common practice for a plan that is
#: compared against a grid search; HiGHS's own default is 1e-4)
MIP_GAP = 1e-6
#: wall-clock limit of one program [s] (common practice for an interactive tool); a program
#: that reaches it is an error, never a plan cut off by the clock (the same seed gives the
#: same plan)
TIME_LIMIT = 60.0
#: tolerance on a constraint counted as met or as binding (relative to its right-hand side)
TOLERANCE = 1e-7


@dataclass
class BlendWell:
    """A well of the wellfield as the plan sees it.

    Attributes
    ----------
    name : str
    entry_point : str
        Entry point the well feeds.
    rates : ndarray (n_levels,)
        Candidate rates [m^3/d], increasing; ``rates[0]`` may be above zero.
    concentration : ndarray (n_draws, n_levels, n_analytes)
        Predictive draws of the well's discharge concentration at each rate [mg/L]. Draw ``d``
        of every well is taken together as one scenario of the wellfield.
    min_rate, max_rate : float
        Lowest and highest rate the well may run at when on [m^3/d] (hydraulic and operating
        limits). The plan uses the part of ``rates`` between them.
    energy : ndarray (n_levels,) or None
        Energy per volume pumped at each rate [kWh/m^3], when a pump is known.
    drawdown : ndarray (n_levels,) or None
        The well's own pumping level at each rate [m depth].
    level_limit : float or None
        Deepest allowed pumping level [m depth].
    available : bool
        False for a well out of service (its rate is then 0).
    """

    name: str
    entry_point: str
    rates: np.ndarray
    concentration: np.ndarray
    min_rate: float
    max_rate: float
    energy: np.ndarray | None = None
    drawdown: np.ndarray | None = None
    level_limit: float | None = None
    available: bool = True


@dataclass
class OtherSource:
    """A source other than the planned wells feeding an entry point (purchased water, a
    treated stream, a spring).

    Attributes
    ----------
    name, entry_point : str
    rate : float
        Its rate [m^3/d]: fixed when ``max_rate`` is None; otherwise the least it delivers
        (0 for a source that may be shut), the plan choosing its rate up to ``max_rate``.
    concentration : dict of str to float
        Its concentration of every analyte [mg/L] (taken as certain).
    max_rate : float or None
        Highest rate [m^3/d] when the plan may choose it.
    """

    name: str
    entry_point: str
    rate: float
    concentration: dict[str, float]
    max_rate: float | None = None


@dataclass
class EntryPoint:
    """Where water enters the distribution system, with its demand [m^3/d]."""

    name: str
    demand: float


@dataclass
class Relaxation:
    """One constraint family relaxed in turn when no plan exists.

    Attributes
    ----------
    family : str
        ``"demand"``, ``"quality"`` (one analyte at one entry point), ``"all quality"``,
        ``"rate limits"`` or ``"level limits"``.
    entry_point, analyte : str or None
    opens : bool
        True when relaxing this family alone yields a plan.
    value : float
        The figure of the relaxation: the largest deliverable demand meeting every limit
        [m^3/d] (demand); the lowest achievable blend quantile [mg/L] (quality); the total rate
        outside the wells' rate limits [m^3/d] (rate limits); the depth below the deepest
        allowed level [m] (level limits); NaN when it does not apply.
    target : float
        What the value is compared with: the demand [m^3/d], margin x limit [mg/L], 0.
    text : str
        Plain-language finding and what would open a plan.
    """

    family: str
    entry_point: str | None
    analyte: str | None
    opens: bool
    value: float
    target: float
    text: str


@dataclass
class BlendPlan:
    """Rates for the wells of a wellfield and the blend they give at each entry point.

    Attributes
    ----------
    feasible : bool
    status : str
        Plain-language status of the program.
    objective : str
        ``"energy"`` (least total energy [kWh/d]) or ``"even"`` (least largest share of a
        well's max rate [-]).
    objective_value : float
        [kWh/d] or [-]; NaN without a plan.
    rates : dict of str to float
        Rate of each well [m^3/d], 0 when off or out of service.
    other_rates : dict of str to float
        Rate of each other source [m^3/d].
    blend : DataFrame
        Per entry point and analyte: ``entry_point``, ``analyte``, ``limit_mg_l``,
        ``target_mg_l`` (margin x limit), ``median_mg_l``, ``quantile_mg_l`` (at
        ``probability``, over all draws), ``quantile_in_plan_mg_l`` (over the draws used).
    compliance : dict of str to float
        Share of ALL draws in which every analyte at the entry point meets margin x limit.
    compliance_in_plan : dict of str to float
        The same over the draws the program used (at least ``probability`` for a plan).
    probability : float
    margin : float
    draws_used, draws_total : int
    binding : list of str
        Constraints active at the plan, or, without a plan, the relaxations that open one.
    diagnosis : list of Relaxation
        Without a plan: each constraint family relaxed in turn.
    notes : list of str
    solve_seconds : float
        Wall-clock time of the programs solved [s].
    unmet : list of str
        Entry points without a plan (their wells are shown off; the others keep their plan).
    """

    feasible: bool
    status: str
    objective: str
    objective_value: float
    rates: dict[str, float]
    other_rates: dict[str, float]
    blend: pd.DataFrame
    compliance: dict[str, float]
    compliance_in_plan: dict[str, float]
    probability: float
    margin: float
    draws_used: int
    draws_total: int
    binding: list[str] = field(default_factory=list)
    diagnosis: list[Relaxation] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    solve_seconds: float = 0.0
    unmet: list[str] = field(default_factory=list)
    _sources: pd.DataFrame | None = field(default=None, repr=False)

    def table(self) -> pd.DataFrame:
        """One row per well and other source, then one blend row per entry point.

        Columns: ``entry_point``, ``source``, ``kind`` (well, other source, blend),
        ``rate_m3_d``, ``use_of_max`` (rate over max rate [-]), for every analyte
        ``<analyte>_median_mg_l`` and ``<analyte>_q<percent>_mg_l`` (over all draws), and
        ``compliance`` (share of all draws meeting every margin x limit, blend rows only).
        The cautions of the package travel in ``attrs["cautions"]``.
        """
        from blendq import CAUTIONS

        out = self._sources.copy() if self._sources is not None else pd.DataFrame()
        out.attrs["cautions"] = CAUTIONS
        return out


@dataclass
class OutageResult:
    """The plan with one well out of service.

    Attributes
    ----------
    well : str
    plan : BlendPlan
    shortfall : dict of str to float
        Per entry point, the demand that cannot be delivered with every limit met [m^3/d]
        (0 when the demand is met).
    noncompliant : dict of str to list of str
        Per entry point, the analytes whose lowest achievable blend quantile at the demand
        (that analyte alone constrained) lies above margin x limit.
    """

    well: str
    plan: BlendPlan
    shortfall: dict[str, float]
    noncompliant: dict[str, list[str]]

    @property
    def feasible(self) -> bool:
        return self.plan.feasible


# --------------------------------------------------------------------------------------------
# the problem, checked and laid out


@dataclass
class _Well:
    name: str
    ep: int
    grid: np.ndarray        # (n_levels,) the full rate grid [m^3/d]
    load: np.ndarray        # (n_draws, n_levels, n_analytes) rate x concentration [mg/L m^3/d]
    energy: np.ndarray | None
    drawdown: np.ndarray | None
    level_limit: float | None
    min_rate: float
    max_rate: float
    lo: float               # working range inside the grid [m^3/d]
    hi: float
    index: int              # position in the caller's list


@dataclass
class _Problem:
    wells: list[_Well]
    names: list[str]                  # every well's name, in the caller's order
    eps: list[EntryPoint]
    others: list[OtherSource]
    other_ep: list[int]
    other_c: np.ndarray               # (n_others, n_analytes) [mg/L]
    analytes: list[str]
    limited: list[int]                # analyte positions with a limit
    targets: np.ndarray               # (n_analytes,) margin x limit, inf without a limit
    limits: np.ndarray                # (n_analytes,) limit, nan without one
    margin: float
    probability: float
    used: np.ndarray                  # draw indices of the program
    n_draws: int
    interference: np.ndarray | None   # (n_all, n_all) [m per m^3/d]
    objective: str
    notes: list[str]
    units: str = "SI"                  # display units of the texts (blendq.units)


def _interp(grid: np.ndarray, values: np.ndarray, x, axis: int = 1) -> np.ndarray:
    """Piecewise-linear interpolation of ``values`` along ``axis`` on ``grid`` at ``x``."""
    x = np.atleast_1d(np.asarray(x, float))
    if grid.size == 1:
        return np.take(values, np.zeros(x.size, int), axis=axis)
    j = np.clip(np.searchsorted(grid, x, side="right") - 1, 0, grid.size - 2)
    t = (x - grid[j]) / (grid[j + 1] - grid[j])
    shape = [1] * values.ndim
    shape[axis] = x.size
    t = t.reshape(shape)
    return np.take(values, j, axis=axis) * (1 - t) + np.take(values, j + 1, axis=axis) * t


def _points(w: _Well, full: bool) -> np.ndarray:
    """Grid points of the program: the working range's ends and the grid points inside."""
    lo, hi = (w.grid[0], w.grid[-1]) if full else (w.lo, w.hi)
    inner = w.grid[(w.grid > lo) & (w.grid < hi)]
    return np.unique(np.concatenate([[lo], inner, [hi]]))


def _check(wells, entry_points, limits, margin, probability, analytes, other_sources,
           interference, objective, max_draws, seed) -> _Problem:
    eps = list(entry_points)
    ep_index = {e.name: k for k, e in enumerate(eps)}
    if len(ep_index) != len(eps):
        raise InputError("entry point names repeat", field="entry_point")
    for e in eps:
        if not (np.isfinite(e.demand) and e.demand >= 0):
            raise InputError(f"demand of {e.name} is {e.demand}; expected >= 0 [m^3/d]",
                             field="demand")
    if not 0 < probability <= 1:
        raise InputError(f"probability is {probability}; expected in (0, 1]", field="probability")
    if not margin > 0:
        raise InputError(f"margin is {margin}; expected > 0", field="margin")
    analytes = list(analytes)
    n_a = len(analytes)
    for a, v in limits.items():
        if a not in analytes:
            raise InputError(f"limit given for {a}, which is not among the analytes {analytes}",
                             field="limits")
        if not v > 0:
            raise InputError(f"limit of {a} is {v}; expected > 0 [mg/L]", field="limits")
    lim = np.array([limits.get(a, np.nan) for a in analytes], float)
    targets = np.where(np.isnan(lim), np.inf, margin * lim)
    notes: list[str] = []
    names = [w.name for w in wells]
    if len(set(names)) != len(names):
        raise InputError("well names repeat", field="name")
    out, n_draws = [], None
    for i, w in enumerate(wells):
        where = f"well {w.name}"
        if w.entry_point not in ep_index:
            raise InputError(f"{where} feeds {w.entry_point!r}, not an entry point",
                             field="entry_point")
        r = np.asarray(w.rates, float)
        c = np.asarray(w.concentration, float)
        if r.ndim != 1 or r.size < 1 or np.any(np.diff(r) <= 0) or r[0] < 0:
            raise InputError(f"{where}: rates must be increasing and >= 0 [m^3/d]", field="rates")
        if c.ndim != 3 or c.shape[1:] != (r.size, n_a):
            raise InputError(f"{where}: concentration has shape {c.shape}; expected (n_draws, "
                             f"{r.size}, {n_a})", field="concentration")
        if not np.all(np.isfinite(c)) or np.any(c < 0):
            raise InputError(f"{where}: concentrations must be finite and >= 0 [mg/L]",
                             field="concentration")
        if n_draws is None:
            n_draws = c.shape[0]
        elif c.shape[0] != n_draws:
            raise InputError(f"{where} has {c.shape[0]} draws, the others {n_draws}",
                             field="concentration")
        arrays = {}
        for key in ("energy", "drawdown"):
            v = getattr(w, key)
            if v is not None:
                v = np.asarray(v, float)
                if v.shape != r.shape or not np.all(np.isfinite(v)):
                    raise InputError(f"{where}: {key} must be finite with shape {r.shape}",
                                     field=key)
            arrays[key] = v
        if not 0 <= w.min_rate <= w.max_rate:
            raise InputError(f"{where}: rate limits {w.min_rate}..{w.max_rate}; expected "
                             "0 <= min_rate <= max_rate [m^3/d]", field="min_rate")
        if (w.level_limit is None) != (w.drawdown is None):
            notes.append(f"{w.name}: a level limit needs both the pumping levels and the "
                         "deepest allowed level; its level is not checked.")
        if not w.available:
            continue
        lo, hi = max(w.min_rate, r[0]), min(w.max_rate, r[-1])
        if lo > hi:
            notes.append(f"{w.name}: its rate limits {w.min_rate:g}..{w.max_rate:g} m^3/d lie "
                         f"outside its rate grid {r[0]:g}..{r[-1]:g}; left off.")
            continue
        if lo > w.min_rate or hi < w.max_rate:
            notes.append(f"{w.name}: planned within {lo:g}..{hi:g} m^3/d, the part of its rate "
                         "limits its predictions cover.")
        out.append(_Well(w.name, ep_index[w.entry_point], r, r[None, :, None] * c,
                         arrays["energy"], arrays["drawdown"], w.level_limit, float(w.min_rate),
                         float(w.max_rate), float(lo), float(hi), i))
    if n_draws is None:
        n_draws = 1
    others = list(other_sources)
    oc = np.zeros((len(others), n_a))
    for k, o in enumerate(others):
        if o.entry_point not in ep_index:
            raise InputError(f"source {o.name} feeds {o.entry_point!r}, not an entry point",
                             field="entry_point")
        if not (o.rate >= 0 and (o.max_rate is None or o.max_rate >= o.rate)):
            raise InputError(f"source {o.name}: rate {o.rate}, max_rate {o.max_rate}; expected "
                             "0 <= rate <= max_rate [m^3/d]", field="rate")
        for j, a in enumerate(analytes):
            if a not in o.concentration:
                raise InputError(f"source {o.name} gives no concentration of {a}",
                                 field="concentration")
            oc[k, j] = float(o.concentration[a])
    A = None
    if interference is not None:
        A = np.asarray(interference, float)
        if A.shape != (len(wells), len(wells)) or not np.all(np.isfinite(A)):
            raise InputError(f"interference has shape {A.shape}; expected ({len(wells)}, "
                             f"{len(wells)}) [m per m^3/d]", field="interference")
    if objective == "auto":
        objective = "energy" if out and all(w.energy is not None for w in out) else "even"
    elif objective not in ("energy", "even"):
        raise InputError(f"objective {objective!r}; expected auto, energy or even",
                         field="objective")
    elif objective == "energy":
        missing = [w.name for w in out if w.energy is None]
        if missing:
            raise InputError(f"objective energy needs the energy of every well; missing for "
                             f"{', '.join(missing)}", field="energy")
    if max_draws is not None and n_draws > max_draws:
        rng = np.random.default_rng(seed)
        used = np.sort(rng.choice(n_draws, size=max_draws, replace=False))
    else:
        used = np.arange(n_draws)
    return _Problem(out, names, eps, others, [ep_index[o.entry_point] for o in others], oc,
                    analytes, [j for j in range(n_a) if np.isfinite(targets[j])], targets, lim,
                    float(margin), float(probability), used, n_draws, A, objective, notes)


# --------------------------------------------------------------------------------------------
# the program


class _Program:
    """Variables and sparse constraint rows for scipy.optimize.milp."""

    def __init__(self):
        self.lb, self.ub, self.integer, self.cost = [], [], [], []
        self.rows, self.cols, self.vals, self.rlo, self.rhi = [], [], [], [], []

    def var(self, lb=0.0, ub=np.inf, integer=False, cost=0.0, n=None):
        start = len(self.lb)
        k = 1 if n is None else n
        self.lb += [lb] * k
        self.ub += [ub] * k
        self.integer += [int(integer)] * k
        self.cost += [cost] * k
        return start if n is None else np.arange(start, start + k)

    def row(self, cols, vals, lo=-np.inf, hi=np.inf):
        r = len(self.rlo)
        cols = np.atleast_1d(np.asarray(cols, int))
        vals = np.broadcast_to(np.asarray(vals, float), cols.shape)
        self.rows.append(np.full(cols.size, r))
        self.cols.append(cols)
        self.vals.append(vals)
        self.rlo.append(lo)
        self.rhi.append(hi)

    def solve(self, time_limit, feasibility: bool = False):
        """The program through HiGHS; ``feasibility``: with a zero objective (HiGHS stops at
        the first point meeting every constraint, or at the proof that there is none)."""
        n = len(self.lb)
        cons = ()
        if self.rlo:
            a = coo_array((np.concatenate(self.vals), (np.concatenate(self.rows),
                                                       np.concatenate(self.cols))),
                          shape=(len(self.rlo), n)).tocsr()
            cons = LinearConstraint(a, self.rlo, self.rhi)
        cost = np.zeros(n) if feasibility else np.array(self.cost, float)
        with _solver_console_silenced():
            return milp(cost, integrality=np.array(self.integer),
                        bounds=Bounds(self.lb, self.ub), constraints=cons,
                        options={"time_limit": time_limit, "mip_rel_gap": MIP_GAP,
                                 "disp": False})


@contextmanager
def _solver_console_silenced() -> Iterator[None]:
    """Send the process's standard output (file descriptor 1) to the null device while HiGHS
    solves: it writes a debugging line of its own now and then
    ("HighsMipSolverData::transformNewIntegerFeasibleSolution ..."), whatever its display
    option. The C library's buffers are flushed before the descriptor is restored, so nothing
    of the solver's comes out later; where the descriptor cannot be duplicated nothing is
    changed."""
    import ctypes
    import os
    import sys

    def c_flush() -> None:
        try:
            ctypes.CDLL(None).fflush(None)
        except (OSError, AttributeError, TypeError):  # no C library handle (Windows)
            pass

    try:
        sys.stdout.flush()
        saved = os.dup(1)
    except (OSError, ValueError, AttributeError):
        yield
        return
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        try:
            os.dup2(null, 1)
        finally:
            os.close(null)
        yield
    finally:
        c_flush()
        os.dup2(saved, 1)
        os.close(saved)


@dataclass
class _Layout:
    prog: _Program
    pts: list[np.ndarray]       # per well its program grid points [m^3/d]
    lam: list[np.ndarray]       # per well its lambda variables
    on: list[int]
    other: list[int | None]     # variable of a chosen other-source rate, None when fixed
    extra: dict


def _build(p: _Problem, mode: str = "plan", focus: tuple[int, int] | None = None,
           dropped: frozenset = frozenset(), floor: float = 0.0) -> _Layout:
    """Lay out the program. ``mode``: plan, demand, quality (``focus`` = (entry point,
    analyte) with a free threshold, not below ``floor`` [mg/L]), rates, levels; ``dropped``
    quality constraints (e, a)."""
    prog = _Program()
    full = mode == "rates"
    pts, lam, on = [], [], []
    for w in p.wells:
        x = _points(w, full)
        z = prog.var(0, 1, True)
        lam_w = prog.var(0, 1, n=x.size)
        prog.row(np.r_[lam_w, z], np.r_[np.ones(x.size), -1.0], 0, 0)   # sum lambda = on
        if x.size > 1:
            y = prog.var(0, 1, True, n=x.size - 1)
            prog.row(np.r_[y, z], np.r_[np.ones(y.size), -1.0], 0, 0)    # one segment when on
            for k in range(x.size):                                      # SOS2 adjacency
                adj = [y[s] for s in (k - 1, k) if 0 <= s < y.size]
                prog.row(np.r_[lam_w[k], adj], np.r_[1.0, -np.ones(len(adj))], hi=0)
        pts.append(x)
        lam.append(lam_w)
        on.append(z)
    other = []
    for o in p.others:
        other.append(None if o.max_rate is None else prog.var(o.rate, o.max_rate))
    extra: dict = {}
    n_e = len(p.eps)
    fixed_other = np.zeros(n_e)
    for k, o in enumerate(p.others):
        if other[k] is None:
            fixed_other[p.other_ep[k]] += o.rate
    # demand
    delivered = [None] * n_e
    for e, ep in enumerate(p.eps):
        cols = [lam[i] for i, w in enumerate(p.wells) if w.ep == e]
        vals = [pts[i] for i, w in enumerate(p.wells) if w.ep == e]
        ocols = [other[k] for k in range(len(p.others)) if p.other_ep[k] == e
                 and other[k] is not None]
        cols = np.concatenate(cols + [np.array(ocols, int)]).astype(int)
        vals = np.concatenate(vals + [np.ones(len(ocols))])
        rhs = ep.demand - fixed_other[e]
        if mode == "demand":
            d = prog.var(0, ep.demand, cost=-1.0)
            delivered[e] = d
            prog.row(np.r_[cols, d], np.r_[vals, -1.0], -fixed_other[e], -fixed_other[e])
        else:
            prog.row(cols, vals, rhs, rhs)
    extra["delivered"] = delivered
    # chance constraints: one violation binary per entry point and draw, shared by analytes
    n_used = p.used.size
    allowed = math.floor((1 - p.probability) * n_used + 1e-9)
    extra["free"] = None
    for e, ep in enumerate(p.eps):
        active = [a for a in p.limited if (e, a) not in dropped]
        if mode == "quality" and focus[0] == e and focus[1] not in active:
            active.append(focus[1])
        if not active:
            continue
        mine = [i for i, w in enumerate(p.wells) if w.ep == e]
        ok = [k for k in range(len(p.others)) if p.other_ep[k] == e]
        v = prog.var(0, 1 if allowed > 0 else 0, True, n=n_used)
        prog.row(v, 1.0, hi=allowed)
        fixed_load = sum(p.others[k].rate * p.other_c[k] for k in ok if other[k] is None)
        fixed_load = np.zeros(len(p.analytes)) + fixed_load
        fixed_rate = sum(p.others[k].rate for k in ok if other[k] is None)
        var_ok = [k for k in ok if other[k] is not None]
        rows = []    # per analyte: a, free, loads, big-M, rhs, rows needed, draws it may exceed
        for a in active:
            free = mode == "quality" and (e, a) == tuple(focus)
            loads = [_interp(p.wells[i].grid, p.wells[i].load[p.used][..., a], pts[i])
                     for i in mine]                                      # (n_used, n_pts)
            # bounds on the load of each draw for the big-M and for draws decided in advance
            conc = [ld / np.maximum(pts[i], 1e-300) for i, ld in zip(mine, loads, strict=True)]
            positive = [pts[i] > 0 for i in mine]
            # (an entry point may have no supply left to choose: every well out of service)
            c_hi = _columns([c.max(axis=1) for c in conc]
                            + [np.full(n_used, p.other_c[k, a]) for k in var_ok], n_used)
            c_lo = _columns([np.where(pos, c, np.inf).min(axis=1, initial=np.inf)
                             if pos.any() else np.zeros(n_used)
                             for c, pos in zip(conc, positive, strict=True)]
                            + [np.full(n_used, p.other_c[k, a]) for k in var_ok], n_used)
            caps = np.r_[[pts[i][-1] for i in mine], [p.others[k].max_rate for k in var_ok]]
            target = 0.0 if free else p.targets[a]
            scale = max(1.0, target * ep.demand)
            if mode == "demand":
                lmax = fixed_load[a] + sum(ld.max(axis=1) for ld in loads) + sum(
                    p.others[k].max_rate * p.other_c[k, a] for k in var_ok)
                big = np.minimum(lmax, ep.demand * np.maximum(c_hi.max(axis=1, initial=0.0)
                                                                - target, 0))
                need = np.ones(n_used, bool)
                could = need
            else:
                rest = ep.demand - fixed_rate
                big = fixed_load[a] + _fill(c_hi, caps, rest, True) - target * ep.demand
                low = fixed_load[a] + _fill(c_lo, caps, rest, False) - target * ep.demand
                need = free | (big > 1e-9 * scale)          # else met whatever the rates
                could = need.copy()
                if not free:
                    forced = need & (low > 1e-7 * scale)    # exceeded whatever the rates
                    for s in np.flatnonzero(forced):
                        prog.lb[v[s]] = 1
                    need &= ~forced
            rhs = -fixed_load[a] + (0.0 if (free or mode == "demand") else target * ep.demand)
            rows.append((a, free, loads, big, rhs, need, could))
        # a draw dominated (load no lower at every rate of every well, for every analyte it
        # could exceed) by more draws than may be violated must be met (Luedtke and Ahmed 2008)
        must = np.zeros(n_used, bool)
        if allowed > 0:
            dominated_by = np.zeros((n_used, n_used), bool)
            for s in range(n_used):
                ge = np.ones(n_used, bool)
                for (_, _, loads, _, _, _, could) in rows:
                    if could[s]:
                        for ld in loads:
                            ge &= np.all(ld >= ld[s], axis=1)
                ge[s] = False
                dominated_by[s] = ge
            must = dominated_by.sum(axis=1) > allowed
            for s in np.flatnonzero(must):
                prog.ub[v[s]] = 0
        for (a, free, loads, big, rhs, need, _) in rows:
            if free:
                u = prog.var(floor, np.inf, cost=1.0)
                extra["free"] = u
            for s in np.flatnonzero(need):
                cols = [lam[i] for i in mine] + [np.array([other[k] for k in var_ok], int)]
                vals = [ld[s] for ld in loads] + [p.other_c[var_ok, a]]
                cols, vals = np.concatenate(cols).astype(int), np.concatenate(vals)
                if free:
                    cols, vals = np.r_[cols, u], np.r_[vals, -ep.demand]
                elif mode == "demand":
                    cols, vals = np.r_[cols, delivered[e]], np.r_[vals, -p.targets[a]]
                if allowed > 0 and not must[s]:
                    m = max(float(big[s]), 0.0) * (1 + 1e-9) + 1e-9
                    cols, vals = np.r_[cols, v[s]], np.r_[vals, -m]
                prog.row(cols, vals, hi=rhs)
    # pumping levels: own drawdown plus interference from the others, when on
    slack = None
    if mode == "levels":
        slack = prog.var(0, np.inf, cost=1.0)
        extra["slack"] = slack
    for i, w in enumerate(p.wells):
        if w.drawdown is None or w.level_limit is None:
            continue
        dd = _interp(w.grid, w.drawdown, pts[i], axis=0)
        cols, vals = [lam[i]], [dd]
        reach = 0.0
        if p.interference is not None:
            for j, o in enumerate(p.wells):
                g = p.interference[w.index, o.index]
                if j != i and g != 0:
                    cols.append(lam[j])
                    vals.append(g * pts[j])
                    reach += max(g, 0) * pts[j][-1]
        m = max(np.abs(dd).max() + reach - w.level_limit, 0.0) + 1.0
        cols = np.r_[np.concatenate(cols), on[i]]
        vals = np.r_[np.concatenate(vals), m]
        if slack is not None:
            cols, vals = np.r_[cols, slack], np.r_[vals, -1.0]
        prog.row(cols, vals, hi=w.level_limit + m)
    # objective
    if mode == "plan":
        if p.objective == "energy":
            for i, w in enumerate(p.wells):
                # Q e(Q) [kWh/d] interpolated on the well's grid, as the loads are
                use = _interp(w.grid, w.grid * w.energy, pts[i], axis=0)
                for k, col in enumerate(lam[i]):
                    prog.cost[col] = float(use[k])
        else:
            t = prog.var(0, np.inf, cost=1.0)
            extra["even"] = t
            for i, w in enumerate(p.wells):
                if w.max_rate > 0:
                    prog.row(np.r_[lam[i], t], np.r_[pts[i] / w.max_rate, -1.0], hi=0)
    elif mode == "rates":
        excess = prog.var(0, np.inf, cost=1.0, n=len(p.wells))
        extra["excess"] = excess
        for i, w in enumerate(p.wells):
            prog.row(np.r_[lam[i], excess[i]], np.r_[pts[i], -1.0], hi=w.max_rate)
            prog.row(np.r_[lam[i], on[i], excess[i]], np.r_[-pts[i], w.min_rate, -1.0], hi=0)
    return _Layout(prog, pts, lam, on, other, extra)


def _columns(cols: list, n: int) -> np.ndarray:
    """The columns side by side, (n, 0) when there is none."""
    return np.column_stack(cols) if cols else np.zeros((n, 0))


def _fill(conc: np.ndarray, caps: np.ndarray, volume: float, richest: bool) -> np.ndarray:
    """Largest (``richest``) or smallest load [mg/L m^3/d] of ``volume`` [m^3/d] drawn from
    sources of capacity ``caps`` [m^3/d] at concentrations ``conc`` (n_draws, n_sources)
    [mg/L], filling the richest (or leanest) first: a bound on the load of each draw."""
    if conc.shape[1] == 0:
        return np.zeros(conc.shape[0])
    order = np.argsort(-conc if richest else conc, axis=1, kind="stable")
    c = np.take_along_axis(conc, order, axis=1)
    cap = caps[order]
    before = np.cumsum(cap, axis=1) - cap
    take = np.clip(max(volume, 0.0) - before, 0.0, cap)
    return np.sum(np.where(take > 0, take * c, 0.0), axis=1)


def _run(p: _Problem, lay: _Layout, time_limit: float, optimise: bool = True,
         check: bool = True):
    """Solve the program. With ``check``, first with a zero objective, which proves that no
    point meets the constraints several times sooner than the search for the optimum does
    (benchmarks/bench_blendplan.py), then with the objective only when a point exists; the
    result is that of the program with its objective (the constraints are the same), only the
    time differs. ``optimise`` False stops at the feasibility answer; ``check`` False (for a
    program that nearly always has a point) goes straight to the optimum."""
    t0 = time.perf_counter()
    res = None
    if check or not optimise:
        res = lay.prog.solve(time_limit, feasibility=True)
    if res is None or (optimise and res.status == 0 and any(lay.prog.cost)):
        res = lay.prog.solve(time_limit)
    if res.status == 1:  # a clock that cuts the search would make the plan differ run to run
        raise ModelError(f"the blending program did not finish within {time_limit:g} s: raise "
                         "the time limit or use fewer draws in the program (max_draws)")
    return res, time.perf_counter() - t0


def _rates_of(p: _Problem, lay: _Layout, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    q = np.zeros(len(p.names))
    for i, w in enumerate(p.wells):
        if x[lay.on[i]] > 0.5:
            q[w.index] = float(np.clip(lay.pts[i] @ x[lay.lam[i]], lay.pts[i][0],
                                       lay.pts[i][-1]))
    qo = np.array([o.rate if lay.other[k] is None else float(x[lay.other[k]])
                   for k, o in enumerate(p.others)])
    return q, qo


# --------------------------------------------------------------------------------------------
# evaluation of a set of rates against every draw


def _blend(p: _Problem, q: np.ndarray, qo: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Blend concentration (n_eps, n_draws, n_analytes) [mg/L] and delivered rate per entry
    point [m^3/d] at well rates ``q`` (caller's order) and other-source rates ``qo``."""
    n_e = len(p.eps)
    load = np.zeros((n_e, p.n_draws, len(p.analytes)))
    total = np.zeros(n_e)
    for w in p.wells:
        if q[w.index] > 0:
            load[w.ep] += _interp(w.grid, w.load, q[w.index])[:, 0, :]
            total[w.ep] += q[w.index]
    for k in range(len(p.others)):
        load[p.other_ep[k]] += qo[k] * p.other_c[k]
        total[p.other_ep[k]] += qo[k]
    with np.errstate(invalid="ignore", divide="ignore"):
        return load / total[:, None, None], total


def _meets(p: _Problem, conc: np.ndarray) -> np.ndarray:
    """(n_eps, n_draws) True where every limited analyte meets margin x limit."""
    t = p.targets[p.limited]
    return np.all(conc[..., p.limited] <= t * (1 + TOLERANCE) + 1e-12, axis=-1)


def _quantile(x: np.ndarray, prob: float) -> float:
    # the smallest value not exceeded in at least ``prob`` of the draws (inverted empirical CDF)
    return float(np.quantile(x, prob, method="inverted_cdf")) if x.size else float("nan")


def _report(p: _Problem, q, qo, conc, total):
    ok = _meets(p, conc)
    rows, blend = [], []
    pct = f"q{100 * p.probability:g}".replace(".", "_")
    for e, ep in enumerate(p.eps):
        for a, name in enumerate(p.analytes):
            x = conc[e, :, a]
            blend.append({"entry_point": ep.name, "analyte": name,
                          "limit_mg_l": p.limits[a], "target_mg_l": p.targets[a],
                          "median_mg_l": float(np.median(x)),
                          "quantile_mg_l": _quantile(x, p.probability),
                          "quantile_in_plan_mg_l": _quantile(x[p.used], p.probability)})
    for w in p.wells:
        row = {"entry_point": p.eps[w.ep].name, "source": w.name, "kind": "well",
               "rate_m3_d": q[w.index],
               "use_of_max": q[w.index] / w.max_rate if w.max_rate > 0 else np.nan}
        c = (_interp(w.grid, w.load, q[w.index])[:, 0, :] / q[w.index] if q[w.index] > 0
             else np.full((p.n_draws, len(p.analytes)), np.nan))
        for a, name in enumerate(p.analytes):
            row[f"{name}_median_mg_l"] = float(np.median(c[:, a]))
            row[f"{name}_{pct}_mg_l"] = _quantile(c[:, a], p.probability)
        rows.append(row)
    for k, o in enumerate(p.others):
        row = {"entry_point": p.eps[p.other_ep[k]].name, "source": o.name,
               "kind": "other source", "rate_m3_d": qo[k],
               "use_of_max": qo[k] / o.max_rate if o.max_rate else np.nan}
        for a, name in enumerate(p.analytes):
            row[f"{name}_median_mg_l"] = row[f"{name}_{pct}_mg_l"] = p.other_c[k, a]
        rows.append(row)
    for e, ep in enumerate(p.eps):
        row = {"entry_point": ep.name, "source": "blend", "kind": "blend",
               "rate_m3_d": total[e], "use_of_max": np.nan}
        for a, name in enumerate(p.analytes):
            row[f"{name}_median_mg_l"] = float(np.median(conc[e, :, a]))
            row[f"{name}_{pct}_mg_l"] = _quantile(conc[e, :, a], p.probability)
        row["compliance"] = float(ok[e].mean())
        rows.append(row)
    return (pd.DataFrame(blend), pd.DataFrame(rows),
            {ep.name: float(ok[e].mean()) for e, ep in enumerate(p.eps)},
            {ep.name: float(ok[e, p.used].mean()) for e, ep in enumerate(p.eps)})


def _binding(p: _Problem, q, conc) -> list[str]:
    out = []
    for w in p.wells:
        r = q[w.index]
        if r > 0 and r >= w.hi * (1 - TOLERANCE):
            out.append(f"{w.name} at its highest rate {w.hi:g} m^3/d")
        elif r > 0 and r <= w.lo * (1 + TOLERANCE) + 1e-9:
            out.append(f"{w.name} at its lowest rate {w.lo:g} m^3/d")
    for w in p.wells:
        if w.drawdown is None or w.level_limit is None or q[w.index] <= 0:
            continue
        level = float(_interp(w.grid, w.drawdown, q[w.index], axis=0)[0])
        if p.interference is not None:
            row = p.interference[w.index].copy()
            row[w.index] = 0.0
            level += float(row @ q)
        if level >= w.level_limit - 1e-6 * max(1.0, abs(w.level_limit)):
            out.append(f"{w.name} pumping level at its deepest allowed {w.level_limit:g} m")
    for e, ep in enumerate(p.eps):
        for a in p.limited:
            qq = _quantile(conc[e, p.used, a], p.probability)
            if qq >= p.targets[a] * (1 - 1e-6):
                out.append(f"{p.analytes[a]} at {ep.name}: the {100 * p.probability:g} % "
                           f"quantile of the blend at margin x limit {p.targets[a]:g} mg/L")
    return out


# --------------------------------------------------------------------------------------------
# no plan: relax each family in turn


def _richest(p: _Problem, e: int, a: int) -> list[str]:
    """Wells of entry point ``e`` by median concentration of analyte ``a``, richest first,
    those above margin x limit."""
    out = []
    for w in p.wells:
        if w.ep == e:
            pts = _points(w, False)
            c = np.median(_interp(w.grid, w.load[..., a], pts) / np.maximum(pts, 1e-300), 0)
            if np.max(c) > p.targets[a]:
                out.append((-float(np.max(c)), w.name))
    return [n for _, n in sorted(out)]


def _rate(v: float, units: str) -> str:
    """A rate [m^3/d] in the display units of the texts."""
    return format_quantity(float(v), "rate", units)


def _length(v: float, units: str) -> str:
    """A length [m] in the display units of the texts."""
    return format_quantity(float(v), "length", units)


def _conc(analyte: str, v: float) -> str:
    """A concentration [mg/L] in the analyte's display unit."""
    an = get_analyte(analyte)
    return f"{float(an.in_display_unit(np.asarray([v]))[0]):.4g} {an.display_unit}"


def _diagnose(p: _Problem, time_limit: float) -> tuple[list[Relaxation], float]:
    """Relax each constraint family of ``p`` in turn; only for a problem whose plan program
    has been proved to have no point (the quality programs rely on it)."""
    out, spent = [], 0.0
    pr = f"{100 * p.probability:g} %"
    # demand
    lay = _build(p, "demand")
    res, dt = _run(p, lay, time_limit, check=False)   # delivering nothing is nearly always met
    spent += dt
    if res.x is not None:
        for e, ep in enumerate(p.eps):
            got = float(res.x[lay.extra["delivered"][e]])
            if got < ep.demand * (1 - 1e-6) - 1e-9:
                out.append(Relaxation(
                    "demand", ep.name, None, True, got, ep.demand,
                    f"{ep.name}: at most {_rate(got, p.units)} of the demand "
                    f"{_rate(ep.demand, p.units)} can be delivered with every limit met (short "
                    f"{_rate(ep.demand - got, p.units)}): another source, treatment, or a well modification (seal a zone "
                    "or move an intake; see each well's scenarios) would make up the rest."))
    else:
        out.append(Relaxation("demand", None, None, False, float("nan"), float("nan"),
                              "lowering the demands alone does not open a plan (the fixed "
                              "other sources or the lowest rates exceed a demand)."))
    # every quality limit at once
    all_q = frozenset((e, a) for e in range(len(p.eps)) for a in p.limited)
    lay = _build(p, "plan", dropped=all_q)
    res, dt = _run(p, lay, time_limit, optimise=False)   # a yes or no
    spent += dt
    quality_opens = res.x is not None
    out.append(Relaxation("all quality", None, None, quality_opens, float("nan"), float("nan"),
                          "without the quality limits the demands can be met inside the "
                          "hydraulic limits: water quality binds." if quality_opens else
                          "even without any quality limit the wells cannot meet the demands "
                          "inside their hydraulic limits."))
    # each analyte at each entry point
    for e, ep in enumerate(p.eps):
        for a in p.limited:
            name, tgt = p.analytes[a], p.targets[a]
            # the plan has no point, so every point of these programs has its threshold above
            # margin x limit (at or below it, the plan would have one): that floor removes no
            # point, and the branch and bound starts from it rather than from a weak bound
            lay = _build(p, "quality", focus=(e, a), dropped=frozenset({(e, a)}), floor=tgt)
            res, dt = _run(p, lay, time_limit, check=False)
            spent += dt
            alone = False
            if res.x is None:
                # this analyte alone under margin x limit: when a point meets it, its lowest
                # quantile is under the limit and there is nothing to report (a feasibility
                # answer, far quicker than the lowest quantile itself)
                lay = _build(p, "plan", dropped=all_q - {(e, a)})
                res, dt = _run(p, lay, time_limit, optimise=False)
                spent += dt
                if res.x is not None:
                    continue
                lay = _build(p, "quality", focus=(e, a), dropped=all_q, floor=tgt)
                res, dt = _run(p, lay, time_limit, check=False)   # a point: as all quality
                spent += dt
                alone = True
            if res.x is None:
                continue
            u = float(res.x[lay.extra["free"]])
            if u <= tgt * (1 + 1e-6):
                continue
            who = _richest(p, e, a)
            cut = 100 * (1 - tgt / u)
            text = (f"{name} at {ep.name}: the lowest achievable {pr} quantile of the blend at "
                    f"the demand is {_conc(name, u)} against margin x limit {_conc(name, tgt)}"
                    + (" (with this analyte alone constrained; other limits bind too)"
                       if alone else "")
                    + f": treatment removing at least {cut:.0f} % of the {name}, another "
                    f"source lower in {name}, or a well modification (seal a zone or move an "
                    "intake; see each well's scenarios)"
                    + (f" on {', '.join(who)}" if who else "") + ".")
            out.append(Relaxation("quality", ep.name, name, not alone, u, float(tgt), text))
    # hydraulic limits: rate limits, then level limits
    if any(w.lo > w.grid[0] or w.hi < w.grid[-1] for w in p.wells):
        lay = _build(p, "rates")
        res, dt = _run(p, lay, time_limit)
        spent += dt
        if res.x is not None:
            q, _ = _rates_of(p, lay, res.x)
            over = []
            for w in p.wells:
                r = q[w.index]
                if r > w.max_rate * (1 + 1e-6):
                    over.append(f"{w.name} at {_rate(r, p.units)}, {_rate(r - w.max_rate, p.units)} above its "
                                "highest rate")
                elif 0 < r < w.min_rate * (1 - 1e-6):
                    over.append(f"{w.name} at {_rate(r, p.units)}, {_rate(w.min_rate - r, p.units)} below its "
                                "lowest rate")
            total = float(sum(res.x[lay.extra["excess"]]))
            out.append(Relaxation("rate limits", None, None, True, total, 0.0,
                                  "a plan exists only outside the wells' rate limits: "
                                  + "; ".join(over) + " (a pump or well change)."))
    if any(w.drawdown is not None and w.level_limit is not None for w in p.wells):
        lay = _build(p, "levels")
        res, dt = _run(p, lay, time_limit)
        spent += dt
        if res.x is not None:
            s = float(res.x[lay.extra["slack"]])
            if s > 1e-6:
                out.append(Relaxation("level limits", None, None, True, s, 0.0,
                                      f"a plan exists only with pumping levels up to {_length(s, p.units)} "
                                      "below the deepest allowed (lower the pump intake, or "
                                      "spread the pumping to wells farther apart)."))
    return out, spent


# --------------------------------------------------------------------------------------------
# public functions


def blending_plan(wells, entry_points, limits: dict[str, float], margin: float,
                  probability: float, analytes: list[str], other_sources=(),
                  interference: np.ndarray | None = None, objective: str = "auto",
                  max_draws: int | None = PLAN_DRAWS, seed: int = 0,
                  time_limit: float = TIME_LIMIT, diagnose: bool = True,
                  units: str = "SI", feasibility_first: bool = False) -> BlendPlan:
    """Rates for the wells that meet every entry point's demand and, in at least
    ``probability`` of the draws, every analyte's margin x limit at every entry point.

    Parameters
    ----------
    wells : sequence of BlendWell
    entry_points : sequence of EntryPoint
    limits : dict of str to float
        Limit of each constrained analyte [mg/L]; an analyte without one is reported only.
    margin : float
        Fraction of the limit to stay under (e.g. 0.8) [-].
    probability : float
        Share of the draws in which all analytes at an entry point must meet margin x limit,
        in (0, 1] [-].
    analytes : list of str
        Names along the last axis of every well's ``concentration``.
    other_sources : sequence of OtherSource
    interference : ndarray (n_wells, n_wells) or None
        ``interference[i, j]`` is the drawdown at well i per unit rate of well j
        [m per m^3/d] (in the order of ``wells``); the diagonal is not used (each well's own
        level is its ``drawdown``).
    objective : {"auto", "energy", "even"}
        ``energy``: least total energy sum Q_i e_i(Q_i) [kWh/d], Q e(Q) interpolated on the
        well's grid; ``even``: least largest
        Q_i / max_rate_i [-]; ``auto``: energy when every available well has an energy curve.
    max_draws : int or None
        Draws kept in the program (a seeded random subset when there are more); the plan is
        then checked against all draws.
    seed : int
        Seed of the subset.
    time_limit : float
        Wall-clock limit of each program [s]; a program that reaches it raises ModelError
        (a plan cut off by the clock would differ from run to run).
    units : str
        Display unit system of the diagnosis texts ("US", "SI", "SI-L/s").
    diagnose : bool
        Relax each constraint family in turn when no plan exists.
    feasibility_first : bool
        Solve each plan program first with a zero objective, then with the objective when a
        plan exists: the same plan, about three times sooner when there is none, up to about
        twice the time when there is one (benchmarks/bench_blendplan.py). :func:`n_minus_one`
        sets it (an outage often leaves no plan).

    Returns
    -------
    BlendPlan

    Notes
    -----
    Variables per well i: on/off z_i, weights lambda_ik >= 0 on its grid points r_ik with
    sum_k lambda_ik = z_i, segment binaries y_is with sum_s y_is = z_i and
    lambda_ik <= y_i,k-1 + y_ik (a special ordered set of type 2), so that Q_i = sum_k r_ik
    lambda_ik and the load of draw d, L_id = sum_k r_ik c_dk lambda_ik, is the
    piecewise-linear interpolation of r c(r). The grid is the part of ``rates`` between the
    well's min_rate and max_rate, with the two limits added as points.

    Demand (equality): sum_i Q_i + sum_o Q_o = D_e at each entry point e.

    Chance constraint, joint across analytes: one binary v_ed per entry point and draw;
    sum_i L_ida + sum_o Q_o c_oa - m L_a D_e <= M_eda v_ed for every limited analyte a, and
    sum_d v_ed <= floor((1 - p) n), with M_eda the largest the left side can be for that draw
    (the sample approximation of the chance constraint P(blend <= m L for all a) >= p). The
    plan's compliance over all draws is reported as an out-of-sample check.

    Pumping level (when ``drawdown`` and ``level_limit`` are given, while the well is on):
    s_i(Q_i) + sum_j A_ij Q_j <= level_limit_i.

    References
    ----------
    Charnes, A., Cooper, W.W. (1959) Chance-constrained programming. Management Science 6(1),
    73-79 (the chance constraint).
    Luedtke, J., Ahmed, S. (2008) A sample approximation approach for optimization with
    probabilistic constraints. SIAM Journal on Optimization 19(2), 674-699 (draws with
    violation binaries and a count limit).
    Calafiore, G., Campi, M.C. (2006) The scenario approach to robust control design. IEEE
    Transactions on Automatic Control 51(5), 742-753 (optimizing over sampled scenarios).
    Beale, E.M.L., Tomlin, J.A. (1970) Special facilities in a general mathematical
    programming system for non-convex problems using ordered sets of variables. Proceedings
    of the 5th International Conference on Operational Research, 447-454 (ordered sets for
    piecewise-linear functions).
    """
    p = replace(_check(wells, entry_points, limits, margin, probability, analytes,
                       other_sources, interference, objective, max_draws, seed), units=units)
    base = dict(objective=p.objective, probability=p.probability, margin=p.margin,
                draws_used=int(p.used.size), draws_total=int(p.n_draws))
    notes = list(p.notes)
    if p.used.size < p.n_draws:
        notes.append(f"the program used {p.used.size} of the {p.n_draws} draws (seed {seed}); "
                     "compliance is reported over all of them.")
    q = np.zeros(len(p.names))
    qo = np.array([o.rate for o in p.others], float)
    spent, values, statuses, failed, diagnosis, unmet = 0.0, [], [], [], [], []
    for group in _groups(p):
        sub = _restrict(p, group)
        lay = _build(sub, "plan")
        res, dt = _run(sub, lay, time_limit, check=feasibility_first)
        spent += dt
        names = ", ".join(sub_ep.name for sub_ep in sub.eps)
        if res.x is None:
            failed.append(names)
            unmet += [x.name for x in sub.eps]
            statuses.append(res.status)
            if diagnose and res.status == 2:
                found, dt = _diagnose(sub, time_limit)
                diagnosis += found
                spent += dt
            continue
        statuses.append(res.status)
        values.append(float(res.fun))
        q_sub, qo_sub = _rates_of(sub, lay, res.x)
        q += q_sub
        for k, o in enumerate(sub.others):
            qo[p.others.index(o)] = qo_sub[k]
    conc, total = _blend(p, q, qo)
    blend, sources, comp, comp_in = _report(p, q, qo, conc, total)
    rates = {n: float(r) for n, r in zip(p.names, q, strict=True)}
    other_rates = {o.name: float(r) for o, r in zip(p.others, qo, strict=True)}
    if failed:
        status = "no plan meets every constraint at " + "; ".join(failed)
        if len(failed) < len(statuses):
            notes.append("the rates shown for the other entry points are their own plan; the "
                         "wells of " + "; ".join(failed) + " are shown off.")
        return BlendPlan(False, status, objective_value=float("nan"), rates=rates,
                         other_rates=other_rates, blend=blend, compliance=comp,
                         compliance_in_plan=comp_in,
                         binding=[_label(r) for r in diagnosis if r.opens],
                         diagnosis=diagnosis, notes=notes, solve_seconds=spent,
                         unmet=unmet, _sources=sources, **base)
    status = "optimal plan"
    low = [e for e, c in comp.items() if c < p.probability]
    if low:
        notes.append("over all draws the compliance at " + ", ".join(
            f"{e} is {comp[e]:.3f}" for e in low) + f", below {p.probability:g}: more draws "
            "in the program (max_draws) would narrow the difference.")
    value = (sum(values) if p.objective == "energy" else max(values, default=0.0))
    return BlendPlan(True, status, objective_value=value, rates=rates, other_rates=other_rates,
                     blend=blend, compliance=comp, compliance_in_plan=comp_in,
                     binding=_binding(p, q, conc), notes=notes, solve_seconds=spent,
                     _sources=sources, **base)


def _groups(p: _Problem) -> list[list[int]]:
    """Entry points that interference links (through wells feeding different ones); each group
    is a program of its own, since the demands, the chance constraints and the objective
    (a sum, or a largest share) separate by entry point."""
    parent = list(range(len(p.eps)))

    def root(e):
        while parent[e] != e:
            e = parent[e]
        return e

    if p.interference is not None:
        for wi in p.wells:
            for wj in p.wells:
                if wi.ep != wj.ep and p.interference[wi.index, wj.index] != 0:
                    parent[root(wi.ep)] = root(wj.ep)
    out: dict[int, list[int]] = {}
    for e in range(len(p.eps)):
        out.setdefault(root(e), []).append(e)
    return list(out.values())


def _restrict(p: _Problem, group: list[int]) -> _Problem:
    """The problem of the entry points in ``group`` only."""
    new = {e: k for k, e in enumerate(group)}
    wells = [replace(w, ep=new[w.ep]) for w in p.wells if w.ep in new]
    keep = [k for k in range(len(p.others)) if p.other_ep[k] in new]
    return replace(p, wells=wells, eps=[p.eps[e] for e in group],
                   others=[p.others[k] for k in keep],
                   other_ep=[new[p.other_ep[k]] for k in keep],
                   other_c=p.other_c[keep].reshape(len(keep), len(p.analytes)))


def _label(r: Relaxation) -> str:
    where = " at ".join(x for x in (r.analyte, r.entry_point) if x)
    return f"{r.family}: {where}" if where else r.family


def n_minus_one(wells, entry_points, limits: dict[str, float], margin: float,
                probability: float, analytes: list[str], other_sources=(),
                interference: np.ndarray | None = None, objective: str = "auto",
                max_draws: int | None = PLAN_DRAWS, seed: int = 0,
                time_limit: float = TIME_LIMIT, units: str = "SI") -> list[OutageResult]:
    """The blending plan with each available well out of service in turn.

    Parameters are those of :func:`blending_plan`.

    Returns
    -------
    list of OutageResult
        One per available well, in the order of ``wells``: the re-optimised plan, the demand
        each entry point cannot receive with every limit met [m^3/d], and the analytes each
        entry point cannot keep under margin x limit at its demand.

    References
    ----------
    Charnes and Cooper (1959); Luedtke and Ahmed (2008), as in :func:`blending_plan`.
    """
    wells = list(wells)
    out = []
    for i, w in enumerate(wells):
        if not w.available:
            continue
        trial = [replace(x, available=False) if k == i else x for k, x in enumerate(wells)]
        plan = blending_plan(trial, entry_points, limits, margin, probability, analytes,
                             other_sources, interference, objective, max_draws, seed,
                             time_limit, units=units, feasibility_first=True)
        short = {e.name: 0.0 for e in entry_points}
        bad: dict[str, list[str]] = {e.name: [] for e in entry_points}
        for r in plan.diagnosis:
            if r.family == "demand" and r.entry_point is not None:
                short[r.entry_point] = r.target - r.value
            elif r.family == "quality":
                bad[r.entry_point].append(r.analyte)
        out.append(OutageResult(w.name, plan, short, bad))
    return out


def outage_table(results: list[OutageResult]) -> pd.DataFrame:
    """One row per outage and entry point: ``well_out``, ``entry_point``, ``met`` (demand and
    every limit met at this entry point), ``plan_found`` (for the whole wellfield),
    ``shortfall_m3_d``, ``noncompliant`` (analytes, comma-separated)."""
    rows = []
    for r in results:
        failed = set(r.plan.unmet)
        for ep, s in r.shortfall.items():
            rows.append({"well_out": r.well, "entry_point": ep, "met": ep not in failed,
                         "plan_found": r.feasible, "shortfall_m3_d": s,
                         "noncompliant": ", ".join(r.noncompliant[ep])})
    return pd.DataFrame(rows)
