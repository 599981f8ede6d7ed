"""Estimate zone concentrations, jointly with the zone hydraulics, from step-test data.

For fixed hydraulics the blend at step k is linear in the zone values: y_kj = sum_i a_i(Q_k) c_ij.
For each analyte j the zone values solve a weighted, bounded and censored least-squares problem
(:mod:`blendq.fit.constrained_lsq`). The hydraulic parameters theta = (ln G_i, h0_i[, C]) are fitted by
``scipy.optimize.least_squares`` on the combined residuals of the flow logs, the pumping
levels, the priors and the quality data, with the concentrations projected out at every theta
(variable projection, Golub and Pereyra 1973). Every analyte shares the same hydraulics.

The fit starts from data-driven values (the total conductance of the pumping levels, the
two-condition flow-log estimates, the priors), restarts from the next one when a fit fails or
misses the data, and stops with a :class:`~blendq.errors.ModelError` when no start converges
within the time budget: a failed fit never yields a result.

References
----------
Jacob, C.E. (1947) Drawdown test to determine effective radius of artesian well. Trans. ASCE
112, 1047-1064.
Paillet, F.L. (1998) Flow modeling and permeability estimation using borehole flow logs in
heterogeneous fractured formations. Water Resources Research 34(5), 997-1010.
Golub, G.H. and Pereyra, V. (1973) The differentiation of pseudo-inverses and nonlinear least
squares problems whose variables separate. SIAM J. Numer. Anal. 10(2), 413-432.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import optimize, stats

from blendq.errors import InputError, ModelError
from blendq.fit import constrained_lsq as qp
from blendq.fit.observations import AnalyteData, quality_data
from blendq.inputs.project import Project
from blendq.well import mixing
from blendq.well.flowlog import calibrate, log_error
from blendq.well.model import (
    HydraulicPrior,
    WellModel,
    elapsed_test_time,
    model_from_parameters,
    prior_hydraulics,
    transient_slope,
)
from blendq.well.transient import Schedule, step_levels, step_schedule


def row_weights(model: WellModel, rate, depth) -> np.ndarray:
    """Weights of each zone in samples taken at ``rate`` [m^3/d] and ``depth`` [m].

    ``depth`` NaN means the discharge. Returns shape (..., m, n_zones) for a model whose
    parameters have batch shape (...).
    """
    return row_weights_sets(model, [(rate, depth)])[0]


def row_weights_sets(model: WellModel, sets) -> list[np.ndarray]:
    """:func:`row_weights` of several (rate, depth) sets at one model, e.g. one per analyte.

    The model's state and discharge weights are worked out once per distinct set of sampled
    rates (analytes sampled at the same steps share them), so each array is the one a separate
    :func:`row_weights` call gives, element for element.
    """
    n = np.asarray(model.conductance).shape[-1]
    batch = np.broadcast_shapes(np.shape(model.conductance)[:-1], np.shape(model.static_head)[:-1])
    at_rates: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}
    result = []
    for rate, depth in sets:
        rate = np.asarray(rate, float)
        depth = np.asarray(depth, float)
        out = np.zeros(batch + (len(rate), n))
        if len(rate) == 0:
            result.append(out)
            continue
        uniq, inv = np.unique(rate, return_inverse=True)
        key = uniq.tobytes()
        if key not in at_rates:
            flows = model.state(uniq).zone_flow  # (..., n_uniq, n)
            at_rates[key] = flows, mixing.discharge_weights(flows, model.geometry)
        flows, disch = at_rates[key]
        out[...] = disch[..., inv, :]
        for k in np.flatnonzero(np.isfinite(depth)):
            comp = mixing.wellbore_composition(flows[..., inv[k], :], model.geometry, [depth[k]])
            out[..., k, :] = comp[..., 0, :]
        result.append(np.nan_to_num(out, nan=0.0))
    return result


@dataclass(frozen=True)
class FitOptions:
    """Options of the fit.

    Attributes
    ----------
    fit_hydraulics : bool
        Fit the hydraulic parameters jointly (True) or keep the prior values (False).
    fit_well_loss : bool
        Fit Jacob's well-loss coefficient C from the pumping levels.
    lower, upper : dict
        Per-analyte bounds on the zone values [mg/L]: {analyte: array (n_zones,)}.
    outlier_z : float
        |standardised residual| above which a result is flagged as an outlier.
    fit_entrance_losses : bool or None
        Fit each zone's nonlinear entrance loss C_i (exponent P_i as given), keeping those the
        data resolve (:func:`fit`); None: the project's ``settings.fit_entrance_losses``.
    """

    fit_hydraulics: bool = True
    fit_well_loss: bool = True
    lower: dict = field(default_factory=dict)
    upper: dict = field(default_factory=dict)
    outlier_z: float = 3.0
    fit_entrance_losses: bool | None = None


@dataclass
class Problem:
    """Everything the residual function needs, in base units."""

    project: Project
    prior: HydraulicPrior
    data: dict[str, AnalyteData]
    options: FitOptions
    log_rows: pd.DataFrame
    log_sd: np.ndarray
    level_rate: np.ndarray
    level_depth: np.ndarray
    level_sd: float
    fit_c: bool
    n_zones: int
    #: the step schedule when some zone is transient (levels superposed in time), else None
    schedule: Schedule | None = None
    #: 1 / (4 pi T_i) per zone [d/m^2] (0 for steady zones)
    slope: np.ndarray | None = None
    #: index into the project's steps of each step level row (the static row is last)
    level_step: np.ndarray | None = None
    #: zones whose nonlinear entrance loss is a parameter (after the well loss in theta)
    loss_zones: np.ndarray = field(default_factory=lambda: np.zeros(0, int))
    #: reference zone flow [m^3/d]: a loss parameter is C_i q_ref^P_i, the loss [m] at q_ref
    loss_reference: float = 1.0

    def bounds(self, analyte: str):
        n = self.n_zones
        lb = np.asarray(self.options.lower.get(analyte, np.zeros(n)), float)
        ub = np.asarray(self.options.upper.get(analyte, np.full(n, np.inf)), float)
        return lb, ub

    def unpack(self, theta):
        n = self.n_zones
        g = np.exp(theta[..., :n])
        h0 = theta[..., n:2 * n]
        c = theta[..., 2 * n] if self.fit_c else self.project.well.well_loss
        return g, h0, c

    @property
    def n_theta(self) -> int:
        """Length of theta."""
        return 2 * self.n_zones + int(self.fit_c) + len(self.loss_zones)

    def lower_bounds(self) -> np.ndarray:
        """Lower bound of each entry of theta (0 for the well loss and the entrance losses)."""
        lo = np.full(self.n_theta, -np.inf)
        lo[2 * self.n_zones:] = 0.0
        return lo

    def entrance_losses(self, theta) -> np.ndarray:
        """Nonlinear entrance loss C_i of each zone [d^P/m^(3P-1)], (..., n_zones): the
        project's values, with the fitted ones from theta."""
        theta = np.asarray(theta, float)
        base = np.array([z.nonlinear_loss for z in self.project.zones], float)
        out = np.broadcast_to(base, theta.shape[:-1] + base.shape).copy()
        if len(self.loss_zones):
            k = 2 * self.n_zones + int(self.fit_c)
            expo = np.array([self.project.zones[i].loss_exponent for i in self.loss_zones])
            out[..., self.loss_zones] = theta[..., k:] / self.loss_reference ** expo
        return out

    def model(self, theta) -> WellModel:
        theta = np.asarray(theta, float)
        g, h0, c = self.unpack(theta)
        loss = self.entrance_losses(theta) if len(self.loss_zones) else None
        return model_from_parameters(self.project, g, h0, c, loss)


def build_problem(project: Project, options: FitOptions | None = None,
                  sample_use: pd.DataFrame | None = None, loss_zones=None) -> Problem:
    """Collect the data of a project for :func:`fit` (``loss_zones``: the zones whose
    nonlinear entrance loss is fitted, by default none)."""
    options = options or FitOptions()
    prior = prior_hydraulics(project)
    data = quality_data(project, sample_use)
    s = project.settings
    logs = project.flowlogs
    if logs is None or logs.empty:
        logs = pd.DataFrame(columns=["log", "rate", "depth", "upward_flow"])
    log_sd = log_error(logs["upward_flow"].astype(float), s.flowlog_relative_error,
                       s.flowlog_absolute_error) if len(logs) else np.zeros(0)
    steps = project.steps
    lv = steps[np.isfinite(steps["pumping_level"].astype(float))] if len(steps) else steps
    rates = list(lv["rate"].astype(float)) if len(lv) else []
    depths = list(lv["pumping_level"].astype(float)) if len(lv) else []
    if project.well.static_level is not None:
        rates.append(0.0)
        depths.append(project.well.static_level)
    fit_c = options.fit_hydraulics and options.fit_well_loss and len(lv) >= 2
    slope = transient_slope(project)
    schedule, level_step = None, None
    if len(lv) and np.any(slope > 0):
        # transient zones: each step's level with the rate increments superposed in time
        schedule = step_schedule(project, elapsed_test_time(project))
        level_step = np.flatnonzero(np.isfinite(steps["pumping_level"].astype(float)))
    loss_zones = np.asarray([] if loss_zones is None or not options.fit_hydraulics
                            else loss_zones, int)
    q_ref = float(np.nanmax(steps["rate"].astype(float))) / len(project.zones) \
        if len(steps) else 1.0
    return Problem(project, prior, data, options, logs.reset_index(drop=True), np.asarray(log_sd),
                   np.array(rates, float), np.array(depths, float), s.level_error, fit_c,
                   len(project.zones), schedule, slope, level_step, loss_zones,
                   q_ref if np.isfinite(q_ref) and q_ref > 0 else 1.0)


def solve_concentrations(problem: Problem, model: WellModel, analyte: str, values=None,
                         weights=None):
    """Zone values [mg/L] of one analyte for fixed hydraulics; also the weight matrices
    (``weights``: the analyte's (a, ac) from :func:`analyte_weights`, else worked out here)."""
    d = problem.data[analyte]
    a, ac = weights if weights is not None else analyte_weights(problem, model, [analyte])[0]
    lb, ub = problem.bounds(analyte)
    y = d.value if values is None else values
    c = qp.solve_censored_lsq(a, y, d.sigma, lb, ub, ac if len(ac) else None,
                              d.cens_limit if len(ac) else None)
    return c, a, ac


def analyte_weights(problem: Problem, model: WellModel, analytes) -> list:
    """(a, ac) of each analyte: the weights of its detected results and of its non-detects
    (:func:`row_weights_sets`, the model's state once per distinct set of sampled rates)."""
    sets = []
    for analyte in analytes:
        d = problem.data[analyte]
        sets += [(d.rate, d.depth), (d.cens_rate, d.cens_depth)]
    w = row_weights_sets(model, sets)
    return [(w[2 * k], w[2 * k + 1]) for k in range(len(analytes))]


def _log_groups(logs: pd.DataFrame) -> list[tuple[float, np.ndarray, np.ndarray]]:
    """(rate, row positions, depths [m]) of each rate of the flow-log rows, worked out once per
    table (the residuals are evaluated many times: every step of the fit and its Jacobian)."""
    key = id(logs)
    if _LOG_GROUPS.get(key, (None,))[0] is not logs:
        rates = logs["rate"].to_numpy(float)
        depths = logs["depth"].to_numpy(float)
        groups = [(float(r), np.flatnonzero(rates == r), depths[rates == r])
                  for r in np.unique(rates)]
        _LOG_GROUPS.clear()  # one table at a time: no growth
        _LOG_GROUPS[key] = (logs, groups)
    return _LOG_GROUPS[key][1]


_LOG_GROUPS: dict[int, tuple[pd.DataFrame, list]] = {}


def _hydraulic_residuals(problem: Problem, theta, model: WellModel) -> list[np.ndarray]:
    p = problem.prior
    n = problem.n_zones
    res = []
    finite = np.isfinite(p.log_conductance_sd)
    res.append((theta[:n][finite] - p.log_conductance[finite]) / p.log_conductance_sd[finite])
    finite = np.isfinite(p.static_head_sd)
    res.append((theta[n:2 * n][finite] - p.static_head[finite]) / p.static_head_sd[finite])
    logs = problem.log_rows
    if len(logs):
        pred = np.empty(len(logs))
        groups = _log_groups(logs)
        flows = model.state(np.array([g[0] for g in groups], float)).zone_flow
        for k, (_, at, depths) in enumerate(groups):
            pred[at] = mixing.wellbore_flow(flows[k], model.geometry, depths)
        res.append((pred - logs["upward_flow"].to_numpy(float)) / problem.log_sd)
    if len(problem.level_rate):
        res.append((level_depths(problem, model) - problem.level_depth) / problem.level_sd)
    return res


def level_depths(problem: Problem, model: WellModel) -> np.ndarray:
    """Predicted depth of each level row [m] (..., n_levels): the steps' pumping levels, then
    the static level when given.

    Steady zones: the common-head model at each step's rate. With a transient zone: the rate
    increments of the step schedule superposed in time per zone (:mod:`blendq.well.transient`),
    recoveries included, read at the end of each step; the well loss C Q^2 at the step's rate.
    """
    if problem.schedule is None:
        return model.pumping_level_depth(problem.level_rate)
    hw, _ = step_levels(model.conductance, model.static_head, model.nonlinear_loss,
                        problem.slope, problem.schedule, model.loss_exponent, model.linear_loss)
    k = len(problem.level_step)
    rate = problem.level_rate[:k]
    c = np.asarray(model.well_loss, float)[..., None]
    steps = -(hw[..., problem.level_step] - c * rate**2)
    if len(problem.level_rate) == k:
        return steps
    static = model.pumping_level_depth(problem.level_rate[k:])
    return np.concatenate([steps, static], -1)


def residuals(problem: Problem, theta) -> np.ndarray:
    """Whitened residual vector of the joint problem at theta (concentrations projected out)."""
    theta = np.asarray(theta, float)
    model = problem.model(theta)
    res = _hydraulic_residuals(problem, theta, model)
    weights = analyte_weights(problem, model, list(problem.data))
    for (analyte, d), w in zip(problem.data.items(), weights, strict=True):
        c, a, ac = solve_concentrations(problem, model, analyte, weights=w)
        res.append((a @ c - d.value) / d.sigma)
        if len(ac):
            res.append(np.maximum(ac @ c - d.cens_limit, 0.0) / np.maximum(d.cens_limit, 1e-12))
    return np.concatenate(res) if res else np.zeros(0)


def hydraulic_residuals_batch(problem: Problem, theta, model: WellModel,
                              levels: np.ndarray | None = None) -> np.ndarray:
    """Prior, flow-log and level residuals (stated errors) of a batch of theta (B, n_theta)
    with its batched ``model``: shape (B, rows), rows as in :func:`residuals`. ``levels``:
    :func:`level_depths` of the batch when the caller has them already."""
    p = problem.prior
    n = problem.n_zones
    theta = np.asarray(theta, float)
    bsz = theta.shape[0]
    parts = []
    fg = np.isfinite(p.log_conductance_sd)
    parts.append((theta[:, :n][:, fg] - p.log_conductance[fg]) / p.log_conductance_sd[fg])
    fh = np.isfinite(p.static_head_sd)
    parts.append((theta[:, n:2 * n][:, fh] - p.static_head[fh]) / p.static_head_sd[fh])
    logs = problem.log_rows
    if len(logs):
        pred = np.empty((bsz, len(logs)))
        groups = _log_groups(logs)
        flows = model.state(np.array([g[0] for g in groups], float)).zone_flow
        for k, (_, at, depths) in enumerate(groups):
            pred[:, at] = mixing.wellbore_flow(flows[:, k], model.geometry, depths)
        parts.append((pred - logs["upward_flow"].to_numpy(float)) / problem.log_sd)
    if len(problem.level_rate):
        # the same level model as the fit (superposed in time where a zone is transient)
        if levels is None:
            levels = level_depths(problem, model)
        parts.append((levels - problem.level_depth) / problem.level_sd)
    return np.concatenate(parts, axis=1) if parts else np.zeros((bsz, 0))


def residuals_batch(problem: Problem, theta) -> np.ndarray:
    """Whitened residuals of :func:`residuals` at a batch of theta (B, n_theta), (B, rows).

    The zone values of each analyte are solved for the whole batch at once: the constrained
    solve of the first row (:func:`solve_concentrations`) gives the starting active set, the
    equality-constrained problem on it is solved for every row, and a row whose solution
    breaks the Karush-Kuhn-Tucker conditions moves constraints in and out of its active set
    (:func:`blendq.fit.constrained_lsq.solve_by_active_sets`); only a row left unsolved falls
    back to the one-problem solver. Meant for nearby theta (a finite-difference Jacobian).
    """
    theta = np.asarray(theta, float)
    model = problem.model(theta)
    parts = [hydraulic_residuals_batch(problem, theta, model)]
    weights = analyte_weights(problem, model, list(problem.data))
    for (analyte, d), (a, ac) in zip(problem.data.items(), weights, strict=True):
        cens = len(d.cens_limit) > 0
        ac = ac if cens else None
        lb, ub = problem.bounds(analyte)
        g, h = qp.constraint_rows(lb, ub, ac, d.cens_limit if cens else None)
        c0 = qp.solve_censored_lsq(a[0], d.value, d.sigma, lb, ub, ac[0] if cens else None,
                                   d.cens_limit if cens else None)
        start = qp.active_constraints(c0[None], g[:1], h)[0]
        y = np.broadcast_to(d.value, a.shape[:2])
        act = np.broadcast_to(start, (len(theta), len(h))).copy()
        c, optimal = qp.solve_on_active_set(a, y, d.sigma, g, h, act)
        if not np.all(optimal):
            bad = np.flatnonzero(~optimal)
            c[bad], solved, _ = qp.solve_by_active_sets(
                a[bad], y[bad], d.sigma, g if g.shape[0] == 1 else g[bad], h, act[bad])
            for b in bad[~solved]:
                c[b] = qp.solve_censored_lsq(a[b], d.value, d.sigma, lb, ub,
                                             ac[b] if cens else None,
                                             d.cens_limit if cens else None)
        parts.append((np.einsum("bmn,bn->bm", a, c) - d.value) / d.sigma)
        if cens:
            parts.append(np.maximum(np.einsum("bpn,bn->bp", ac, c) - d.cens_limit, 0.0)
                         / np.maximum(d.cens_limit, 1e-12))
    return np.concatenate(parts, axis=1)


def initial_theta(problem: Problem) -> np.ndarray:
    """The prior values of theta (flat priors: G = 100 m^2/d per zone, h0 = 0)."""
    p = problem.prior
    h0 = np.where(np.isfinite(p.static_head), p.static_head, 0.0)
    parts = [p.log_conductance, h0]
    if problem.fit_c:
        parts.append([max(problem.project.well.well_loss, 0.0)])
    zones = problem.project.zones
    parts.append([zones[i].nonlinear_loss * problem.loss_reference ** zones[i].loss_exponent
                  for i in problem.loss_zones])
    return np.concatenate(parts).astype(float)


def _step_drawdown_start(problem: Problem):
    """Total conductance [m^2/d], well loss C [d^2/m^5] and static level depth [m] from the
    pumping levels, or None.

    For linear zones depth(Q) = d0 + Q / sum G + C Q^2 exactly (section 2 of the model:
    h_w = (sum G h0 - Q) / sum G and the pumping level lies C Q^2 below h_w; Jacob 1947), so
    a bounded linear least-squares fit of the levels gives the specific-capacity estimate of
    the total conductance.
    """
    q = problem.level_rate
    depth = problem.level_depth
    if len(np.unique(q)) < 3:
        return None
    x = np.column_stack([np.ones_like(q), q, q**2 if problem.fit_c else np.zeros_like(q)])
    lo = [-np.inf, 1e-12, 0.0]
    sol = optimize.lsq_linear(x, depth, bounds=(lo, [np.inf, np.inf, np.inf]))
    d0, inv_g, c = sol.x
    if not np.isfinite(inv_g) or inv_g <= 1e-12:
        return None
    return 1.0 / inv_g, float(c), float(d0)


def starting_points(problem: Problem) -> list[np.ndarray]:
    """Candidate starting values of theta, the most data-driven first.

    1. The priors scaled to the total conductance of the pumping levels (specific capacity;
       Jacob 1947), with the fitted well loss and, where no zone head is known, the static
       level of the level fit;
    2. where flow logs exist, the two-condition flow-log conductances and heads (Paillet
       1998) at the wellbore heads of start 1;
    3. the priors themselves.
    """
    n = problem.n_zones
    base = initial_theta(problem)
    starts = []
    sd = _step_drawdown_start(problem)
    if sd is not None:
        g_total, c, d0 = sd
        t = base.copy()
        t[:n] += np.log(g_total / np.exp(base[:n]).sum())
        known = np.isfinite(problem.prior.static_head)
        t[n:2 * n] = np.where(known, base[n:2 * n], -d0)
        if problem.fit_c:
            t[2 * n] = c
        starts.append(t)
        logs = problem.log_rows
        if len(logs) and "log" in logs and logs["log"].nunique() >= 2:
            g0, h0 = np.exp(t[:n]), t[n:2 * n]
            heads = {name: float(((g0 * h0).sum() - float(rate)) / g0.sum())
                     for name, rate in logs.groupby("log")["rate"].first().items()}
            pr = problem.project
            s = pr.settings
            try:
                cal = calibrate(logs, heads, pr.zone_names, pr.zone_top, pr.zone_bottom,
                                pr.well.pump_intake_depth, s.flowlog_relative_error,
                                s.flowlog_absolute_error)
            except (InputError, ValueError, KeyError):
                cal = None
            if cal is not None:
                ok = np.isfinite(cal.conductance) & (cal.conductance > 0)
                t2 = t.copy()
                t2[:n] = np.where(ok, np.log(np.where(ok, cal.conductance, 1.0)), t[:n])
                okh = ok & np.isfinite(cal.static_head)
                t2[n:2 * n] = np.where(okh, cal.static_head, t[n:2 * n])
                starts.append(t2)
    starts.append(base)
    unique = []
    for t in starts:
        if np.all(np.isfinite(t)) and not any(np.allclose(t, u) for u in unique):
            unique.append(t)
    return unique


class _OutOfTime(Exception):
    pass


@dataclass
class FitResult:
    """Outcome of :func:`fit`.

    Attributes
    ----------
    problem : Problem
    theta : ndarray
        Fitted hydraulic parameters (ln G_i [ln(m^2/d)], h0_i [m][, C [d^2/m^5]]).
    theta_cov : ndarray
        Linearised covariance of theta.
    jacobian : ndarray
        Jacobian of the whitened residuals at theta.
    model : WellModel
        The well at the fitted parameters.
    concentrations : DataFrame
        Index zone names, columns analytes: zone values [mg/L canonical].
    analytes : list of str
    success : bool
    message : str
    """

    problem: Problem
    theta: np.ndarray
    theta_cov: np.ndarray
    jacobian: np.ndarray
    model: WellModel
    concentrations: pd.DataFrame
    analytes: list[str]
    success: bool
    message: str
    cost: float
    #: per zone with a fitted entrance loss: zone, exponent, coefficient [d^P/m^(3P-1)] (NaN
    #: when not resolved), loss_at_reference [m], its sd [m], verdict (:func:`fit`); None when
    #: no entrance loss was fitted
    entrance_losses: pd.DataFrame | None = None

    @property
    def zone_names(self) -> list[str]:
        return self.problem.project.zone_names

    def zone_values(self) -> np.ndarray:
        """Zone values, shape (n_zones, n_analytes) [mg/L]."""
        return self.concentrations[self.analytes].to_numpy(float)

    def predict(self, rates) -> np.ndarray:
        """Discharge concentration at each rate [mg/L], shape (n_rates, n_analytes)."""
        w = self.model.weights(np.asarray(rates, float))
        return w @ self.zone_values()


#: a fitted entrance loss counts as resolved when its linearised sd is below this fraction of
#: its value (two sd from zero; common practice for calling a parameter determined by the data)
LOSS_RESOLVED_FRACTION = 0.5


def fit(project: Project, options: FitOptions | None = None,
        sample_use: pd.DataFrame | None = None, start: np.ndarray | None = None) -> FitResult:
    """Fit zone concentrations (and, by default, zone hydraulics) to a project's data.

    With ``fit_entrance_losses`` (option or ``settings.fit_entrance_losses``) each open zone's
    nonlinear entrance loss C_i (MNW2 form C_i q |q|^(P_i-1), P_i as given) is a parameter,
    as the head loss C_i q_ref^P_i [m] at a reference zone flow q_ref (the largest step rate
    over the number of zones), bounded below by zero. A loss is resolved when its linearised
    sd, with every other parameter free (1 / ||(I - P_others) J_k||, so that a loss the
    data cannot tell from the well loss or a conductance has an unbounded sd), is below
    :data:`LOSS_RESOLVED_FRACTION` of its value; the fit is then repeated with the losses
    not resolved held at the zones' given values, and :attr:`FitResult.entrance_losses`
    reports each as resolved (with its value) or "not resolved" (without a number).

    Parameters
    ----------
    project : Project
    options : FitOptions, optional
    sample_use : DataFrame, optional
        Per-sample use from the lab review (see :func:`blendq.fit.observations.quality_data`).
    start : ndarray, optional
        Theta of an earlier fit of the same project (e.g. before some results were widened):
        tried as the first starting point when its length matches, then the usual ones
        (:func:`starting_points`) if it does not give an acceptable fit.

    Returns
    -------
    FitResult

    Raises
    ------
    ModelError
        If the project has no quality data at a known step.
    """
    options = options or FitOptions()
    want = project.settings.fit_entrance_losses if options.fit_entrance_losses is None \
        else options.fit_entrance_losses
    if not (want and options.fit_hydraulics):
        return _fit(project, options, sample_use, start=start)
    trial = _fit(project, options, sample_use, np.arange(len(project.zones)))
    problem = trial.problem
    k0 = 2 * problem.n_zones + int(problem.fit_c)
    rows, keep = [], []
    for j, i in enumerate(problem.loss_zones):
        value = float(trial.theta[k0 + j])
        sd = _conditional_sd(trial.jacobian, k0 + j)
        ok = bool(np.isfinite(sd) and value > 0 and sd <= LOSS_RESOLVED_FRACTION * value)
        if ok:
            keep.append(i)
        z = project.zones[i]
        rows.append(dict(zone=z.name, exponent=z.loss_exponent,
                         coefficient=value / problem.loss_reference ** z.loss_exponent
                         if ok else np.nan,
                         loss_at_reference=value if ok else np.nan,
                         loss_at_reference_sd=sd if ok else np.nan,
                         reference_flow=problem.loss_reference,
                         verdict="resolved" if ok else "not resolved"))
    result = trial if len(keep) == len(problem.loss_zones) else \
        _fit(project, options, sample_use, np.array(keep, int))
    # the resolved losses as the final fit has them
    k1 = 2 * result.problem.n_zones + int(result.problem.fit_c)
    for j, i in enumerate(result.problem.loss_zones):
        row = rows[list(problem.loss_zones).index(i)]
        row["loss_at_reference"] = float(result.theta[k1 + j])
        row["loss_at_reference_sd"] = _conditional_sd(result.jacobian, k1 + j)
        row["coefficient"] = row["loss_at_reference"] / problem.loss_reference ** row["exponent"]
    result.entrance_losses = pd.DataFrame(rows)
    return result


def _conditional_sd(jac: np.ndarray, k: int) -> float:
    """Linearised sd of parameter k with all others free: 1 / ||(I - P_others) J_k|| (the
    k-th diagonal of (J^T J)^-1 without a cut-off of small singular values); inf when column
    k lies in the span of the others."""
    if not jac.size:
        return float("inf")
    col = jac[:, k]
    others = np.delete(jac, k, axis=1)
    norms = np.linalg.norm(others, axis=0)
    others = others / np.where(norms > 0, norms, 1.0)
    coef, *_ = np.linalg.lstsq(others, col, rcond=None)
    r = float(np.linalg.norm(col - others @ coef))
    if r <= 1e-9 * max(float(np.linalg.norm(col)), 1e-300):
        return float("inf")
    return 1.0 / r


def _fit(project: Project, options: FitOptions | None = None,
         sample_use: pd.DataFrame | None = None, loss_zones=None,
         start: np.ndarray | None = None) -> FitResult:
    """One fit of :func:`fit` with the entrance losses of ``loss_zones`` as parameters."""
    problem = build_problem(project, options, sample_use, loss_zones)
    if not problem.data:
        raise ModelError("no lab results at a known step: nothing to fit")
    if problem.options.fit_hydraulics:
        theta, jac, message, cost = _fit_hydraulics(problem, start)
    else:
        theta = initial_theta(problem)
        jac = _jacobian(problem, theta)
        r = residuals(problem, theta)
        message, cost = "hydraulics fixed at prior values", 0.5 * float(r @ r)
    theta_cov = scaled_pinv(jac) @ scaled_pinv(jac).T if jac.size else np.zeros((0, 0))
    model = problem.model(theta)
    conc = {}
    for analyte in problem.data:
        conc[analyte], _, _ = solve_concentrations(problem, model, analyte)
    table = pd.DataFrame(conc, index=pd.Index(project.zone_names, name="zone"))
    return FitResult(problem, theta, theta_cov, jac, model, table, list(problem.data), True,
                     str(message), float(cost))


def _fit_hydraulics(problem: Problem, start: np.ndarray | None = None):
    """Least-squares fit of theta from each starting point in turn (:func:`starting_points`,
    after ``start`` when given).

    The next start is tried only when the fit so far failed or misses the data by more than the
    95 % quantile of its chi-square (a local minimum is then suspected); the best converged fit
    is kept. The time budget (``settings.fit_time_budget``) covers every start; running out of
    it is always an error, never a result from fewer starts, so the result does not depend on
    the machine's speed or load (same input, same seed: same output or a ModelError). The
    budget counts this process's CPU time, not the wall clock, so that other work on a busy
    machine does not use it up.
    """
    budget = float(problem.project.settings.fit_time_budget)
    t_end = time.process_time() + budget
    lo = problem.lower_bounds()
    hi = np.full(lo.shape, np.inf)

    def fun(t):
        if time.process_time() > t_end:
            raise _OutOfTime
        return residuals(problem, t)

    def jac(t):
        # scipy's 2-point differences, all columns in one batched residual call
        if time.process_time() > t_end:
            raise _OutOfTime
        return jacobian_batch(problem, t, difference_steps(t))

    best, failures = None, []
    starts = starting_points(problem)
    if start is not None and np.shape(start) == np.shape(starts[0]) \
            and np.all(np.isfinite(start)):
        starts = [np.asarray(start, float), *starts]
    for k, theta0 in enumerate(starts):
        try:
            sol = optimize.least_squares(fun, np.clip(theta0, lo, hi), jac=jac,
                                         bounds=(lo, hi), method="trf", x_scale="jac", xtol=1e-12, ftol=1e-12,
                                         gtol=1e-12, max_nfev=400 * (len(theta0) + 1))
        except _OutOfTime:
            failures.append(f"start {k + 1} ran out of time")
            break
        if not sol.success or not np.all(np.isfinite(sol.x)):
            failures.append(f"start {k + 1}: {sol.message}")
            continue
        if best is None or sol.cost < best.cost:
            best = sol
        m = len(sol.fun)
        if 2 * best.cost <= stats.chi2.ppf(0.95, max(m - len(theta0), 1)):
            break
    if failures and failures[-1].endswith("ran out of time"):
        raise ModelError(f"the hydraulic fit did not finish within fit_time_budget = "
                         f"{budget:g} s ({'; '.join(failures)}); check the levels, flow "
                         "logs and zone properties, or raise the setting")
    if best is None:
        raise ModelError("the hydraulic fit did not converge from any starting point ("
                         + "; ".join(failures) + "); check the levels, flow logs and zone "
                         "properties")
    return best.x, best.jac, best.message, best.cost


def scaled_pinv(jac: np.ndarray, rcond: float = 1e-10) -> np.ndarray:
    """Pseudo-inverse of a Jacobian after scaling its columns to unit norm.

    Parameters differ by many orders of magnitude (ln G ~ 5, C ~ 1e-7 d^2/m^5), so the columns
    are equilibrated before the cut-off of small singular values and scaled back after.
    """
    norms = np.linalg.norm(jac, axis=0)
    norms = np.where(norms > 0, norms, 1.0)
    return np.linalg.pinv(jac / norms, rcond=rcond) / norms[:, None]


def _jacobian(problem: Problem, theta) -> np.ndarray:
    """Forward-difference Jacobian of the whitened residuals (:func:`jacobian_batch` with the
    steps 1e-6 max(1, |theta_k|))."""
    theta = np.asarray(theta, float)
    return jacobian_batch(problem, theta, 1e-6 * np.maximum(1.0, np.abs(theta)))


def difference_steps(theta) -> np.ndarray:
    """The forward-difference steps of scipy's ``2-point`` scheme: sqrt(eps) sign(theta)
    max(1, |theta|), sign(0) = +1, rounded to representable increments (theta lies inside its
    bounds, which are lower bounds at zero on entries that are >= 0, so no step leaves them)."""
    theta = np.asarray(theta, float)
    sign = np.where(theta >= 0, 1.0, -1.0)
    h = np.sqrt(np.finfo(float).eps) * sign * np.maximum(1.0, np.abs(theta))
    return (theta + h) - theta


def jacobian_batch(problem: Problem, theta, steps) -> np.ndarray:
    """Forward-difference Jacobian of the whitened residuals at ``theta`` with ``steps``,
    every perturbed parameter set evaluated in one batched residual call (:func:`residuals_batch`,
    the unperturbed point in the same batch so that its zone values come from the same solver).

    Equals the column-by-column difference of :func:`residuals` up to the rounding of the zone
    solve (the tests check rtol 1e-8).
    """
    theta = np.asarray(theta, float)
    steps = np.asarray(steps, float)
    p = len(theta)
    pert = np.repeat(theta[None], p + 1, axis=0)
    pert[np.arange(1, p + 1), np.arange(p)] += steps
    r = residuals_batch(problem, pert)
    return ((r[1:] - r[0]) / steps[:, None]).T
