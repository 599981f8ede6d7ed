"""Plan a step test: what a design of test is expected to tell about the operating window.

A *design* is the list of step rates with their durations, the flow logs (ambient or pumped, at
which rate) and the depth samples (depth, during which step). A *basis* is what is known before
the design is run: nominal hydraulics and zone chemistry (the priors of a project without test
data, or the fit of a finished test) with their spreads, and, after a test, the information its
data already hold.

The expected uncertainty of a design is that of the linearised (Laplace) posterior: the Fisher
information of the planned observations, J^T W J with W the inverse error variances and J their
derivatives with respect to the parameters phi = (ln G_i, h0_i, C, zone values), plus the prior
information (Bard 1974, ch. 7; Atkinson, Donev and Tobias 2007, ch. 9, D- and c-optimality):
Cov(phi) ~ F^-1. Each end of the window is the rate q_e where a criterion's curve g(q, phi)
crosses its threshold (a discharge concentration reaching the mean threshold m* of its limit, or
the pumping level reaching the intake less the submergence); its spread follows by the delta
method on g(q_e, phi) = 0: dq_e/dphi = -(dg/dphi) / (dg/dq) (implicit function theorem), and
sd(q_e) = sqrt(dq_e/dphi^T Cov dq_e/dphi). The derivatives do not depend on the design, so
comparing many designs costs one small linear solve each.

Zones a design leaves unresolved are found as the diagnostics do after a fit
(:func:`blendq.fit.diagnostics.null_space_zones` on the weighted weight matrix of each analyte's
planned samples).

References
----------
Bard, Y. (1974) Nonlinear Parameter Estimation. Academic Press, ch. 7 (covariance of estimates,
design of experiments).
Atkinson, A.C., Donev, A.N. and Tobias, R.D. (2007) Optimum Experimental Designs, with SAS.
Oxford University Press, ch. 9 and 10 (information matrix; c-optimum designs for a linear
function of the parameters).
Izbicki, J.A. and others, USGS reports on depth-dependent sampling (zone values by mass balance
from depth samples in the flowing well).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from scipy import optimize

from blendq.chemistry.limits import mean_threshold
from blendq.decide.sweep import compliance_statistics, governing_limits, lab_relative_error
from blendq.errors import InputError, ModelError
from blendq.fit.diagnostics import null_space_zones
from blendq.fit.estimation import FitResult, row_weights
from blendq.fit.estimation import fit as fit_project
from blendq.fit.unresolved import value_cap
from blendq.inputs.plan_file import PlanInputs
from blendq.inputs.project import Project
from blendq.units import format_quantity
from blendq.well import mixing
from blendq.well.flowlog import log_error
from blendq.well.memory import StoredWater, stored_water
from blendq.well.model import model_from_parameters, prior_hydraulics

#: finite-difference steps of ln G [-], h0 [m] and C [d^2/m^5] (the model is smooth in each)
_STEP_LOG_G, _STEP_HEAD, _STEP_WELL_LOSS = 1e-5, 1e-4, 1e-9

#: shortest step a plan proposes [h]: long enough for the level to settle and the field
#: readings to stabilise before sampling (common practice for step-rate tests: 1 to 4 h)
MIN_STEP_HOURS = 2.0


@dataclass(frozen=True)
class Design:
    """One design of step test.

    Attributes
    ----------
    rates : tuple of float
        Rate of each step, in the order they are run [m^3/d].
    step_hours : tuple of float
        Duration of each step [h] (one value per step).
    log_rates : tuple of float
        Rate [m^3/d] at which each flow log is run (0 for an ambient log).
    depth_samples : tuple of (int, float)
        Samples inside the well: (index of the step, depth [m]); all planned analytes.
    """

    rates: tuple
    step_hours: tuple
    log_rates: tuple = ()
    depth_samples: tuple = ()

    @property
    def n_steps(self) -> int:
        return len(self.rates)

    def with_step(self, rate: float, hours: float) -> Design:
        """The design with one more step, steps sorted by rate (a rising step test)."""
        rates = (*self.rates, float(rate))
        hrs = (*self.step_hours, float(hours))
        order = sorted(range(len(rates)), key=lambda k: rates[k])  # stable: ties keep order
        position = {k: i for i, k in enumerate(order)}
        samples = tuple((position[k], d) for k, d in self.depth_samples)
        return replace(self, rates=tuple(rates[k] for k in order),
                       step_hours=tuple(hrs[k] for k in order), depth_samples=samples)


@dataclass(frozen=True)
class Costs:
    """Unit costs of a step test, in the user's currency (named settings).

    The defaults are common-practice orders of magnitude for planning only; replace them with
    the quotes of the job (``[plan]`` in the project file).

    Attributes
    ----------
    lab_sample : float
        One sample set sent to the lab (all planned analytes).
    flowlog_run : float
        Mobilising and running one flow log (tool and operator, beyond rig time).
    rig_hour : float
        One hour of rig, crew and pump on the well.
    flowlog_hours : float
        Rig hours one flow-log run takes [h].
    depth_sample_hours : float
        Rig hours one depth sample takes (lowering and retrieving the sampler) [h].
    """

    lab_sample: float = 250.0
    flowlog_run: float = 1500.0
    rig_hour: float = 200.0
    flowlog_hours: float = 2.0
    depth_sample_hours: float = 0.5

    def of(self, design: Design) -> float:
        """Cost of a design: its lab samples, log runs and rig hours."""
        samples = design.n_steps + len(design.depth_samples)
        hours = (sum(design.step_hours) + self.flowlog_hours * len(design.log_rates)
                 + self.depth_sample_hours * len(design.depth_samples))
        return (self.lab_sample * samples + self.flowlog_run * len(design.log_rates)
                + self.rig_hour * hours)


@dataclass
class Basis:
    """What is known before a design is run, in base units.

    Attributes
    ----------
    project : Project
        Geometry, well, limits and settings (its tables are not read here).
    analytes : list of str
    theta : ndarray (2 n + 1,)
        Nominal ln G_i [ln(m^2/d)], h0_i [m] and C [d^2/m^5].
    zone_values : ndarray (n, n_analytes)
        Nominal zone concentrations [mg/L].
    theta_sd : ndarray (2 n + 1,)
        Prior sd of theta (inf: no prior information).
    value_sd : ndarray (n, n_analytes)
        Prior sd of the zone values [mg/L] (inf: none).
    relative_error : float or dict
        Relative one-sd error of a lab result [-] (or analyte -> error).
    absolute_error : dict
        Analyte -> absolute floor of the lab error [mg/L].
    log_depths : ndarray
        Depths of the readings of a flow log [m].
    existing : Design or None
        The test already run (its information is added to every design's).
    min_step_hours : float
        Shortest planned step [h] (:data:`MIN_STEP_HOURS` unless ``[plan]`` sets it).
    """

    project: Project
    analytes: list
    theta: np.ndarray
    zone_values: np.ndarray
    theta_sd: np.ndarray
    value_sd: np.ndarray
    relative_error: float | dict
    absolute_error: dict = field(default_factory=dict)
    log_depths: np.ndarray = field(default_factory=lambda: np.zeros(0))
    existing: Design | None = None
    min_step_hours: float = MIN_STEP_HOURS
    # caches, never copied by dataclasses.replace (a changed basis computes its own)
    _existing: tuple | None = field(default=None, repr=False, init=False)
    _rows: dict = field(default_factory=dict, repr=False, init=False)

    @property
    def n_zones(self) -> int:
        return len(self.project.zones)

    @property
    def n_params(self) -> int:
        return len(self.theta) + self.zone_values.size

    def model(self, theta):
        n = self.n_zones
        theta = np.asarray(theta, float)
        return model_from_parameters(self.project, np.exp(theta[..., :n]), theta[..., n:2 * n],
                                     theta[..., 2 * n])

    def existing_jacobian(self):
        """:func:`jacobian` of the test already run (computed once)."""
        if self._existing is None:
            self._existing = jacobian(self, self.existing)
        return self._existing

    def lab_error(self, analyte: str) -> float:
        """Relative one-sd lab error of ``analyte`` [-]."""
        if isinstance(self.relative_error, dict):
            return float(self.relative_error[analyte])
        return float(self.relative_error)

    @property
    def free(self) -> np.ndarray:
        """Mask of the parameters not held fixed (a prior sd of 0 holds one fixed)."""
        return np.concatenate([self.theta_sd, self.value_sd.T.ravel()]) != 0

    def prior_information(self) -> np.ndarray:
        """Diagonal prior information 1 / sd^2 of phi (0 where no prior, and for the fixed)."""
        sd = np.concatenate([self.theta_sd, self.value_sd.T.ravel()])
        with np.errstate(divide="ignore"):
            return np.where(np.isfinite(sd) & (sd > 0), 1.0 / np.square(sd), 0.0)


def planning_rate_max(project: Project) -> float:
    """Largest rate a plan considers [m^3/d]: ``settings.rate_grid_max``, else 1.2 x the largest
    of the pump's range, the demand and the steps run (the sweep's rule)."""
    s, w = project.settings, project.well
    if s.rate_grid_max is not None:
        return float(s.rate_grid_max)
    cands = [float(project.steps["rate"].max()) if len(project.steps) else 0.0]
    if np.isfinite(w.rate_max):
        cands.append(w.rate_max)
    if w.demand:
        cands.append(w.demand)
    top = max(cands)
    if top <= 0:
        raise ModelError("no pump range, demand or step gives the rates to plan for: give "
                         "well.rate_max or well.demand")
    return 1.2 * top


def default_log_depths(project: Project) -> np.ndarray:
    """Reading depths of a planned flow log [m]: above the top zone, in the middle of every gap
    between zones and below the bottom zone (one reading between each pair of neighbours is
    what separates their flows; Paillet 1998)."""
    top, bottom = project.zone_top, project.zone_bottom
    gaps = 0.5 * (bottom[:-1] + top[1:])
    above = max(top[0] - 1.0, 0.5 * top[0])
    return np.concatenate([[above], gaps, [bottom[-1] + 1.0]])


def _perturbed_theta(basis: Basis) -> tuple[np.ndarray, np.ndarray]:
    """theta and its finite-difference perturbations: (p + 1, p), steps (p,)."""
    n = basis.n_zones
    steps = np.concatenate([np.full(n, _STEP_LOG_G), np.full(n, _STEP_HEAD), [_STEP_WELL_LOSS]])
    th = np.repeat(basis.theta[None, :], len(steps) + 1, axis=0)
    th[1:] += np.diag(steps)
    return th, steps


#: a depth sample is taken in flowing water only when the wellbore flow past its depth is at
#: least this fraction of the step's rate (common practice: the sampler must see water renewed
#: from the zones; near a zone's reversal the water there stands and its mix is ill-defined)
STAGNANT_FRACTION = 0.02


def stagnant(basis: Basis, design: Design) -> np.ndarray:
    """For each depth sample of a design: True where the water at its depth barely flows
    (:data:`STAGNANT_FRACTION`) at the nominal values; such a sample counts as no data."""
    if not design.depth_samples:
        return np.zeros(0, bool)
    model = basis.model(basis.theta)
    out = []
    for k, depth in design.depth_samples:
        q = float(design.rates[k])
        st = model.state(np.array([q]))
        up = mixing.wellbore_flow(st.zone_flow[0], model.geometry, np.array([depth]))[0]
        out.append(not abs(up) >= STAGNANT_FRACTION * max(q, 1e-12))
    return np.array(out, bool)


def _rows(basis: Basis, key: tuple) -> tuple[np.ndarray, dict]:
    """Whitened Jacobian rows of one observation (computed once per basis): ("sample", rate,
    depth) a lab sample of every analyte (depth NaN for the discharge), ("log", rate) a flow
    log's readings, ("level", rate) a pumping level (rate 0: the static level)."""
    if key in basis._rows:
        return basis._rows[key]
    n, p_theta = basis.n_zones, len(basis.theta)
    s = basis.project.settings
    th, steps = _perturbed_theta(basis)
    model = basis.model(th)
    kind, rate = key[0], float(key[1])
    quality = {}
    if kind == "sample":
        depth = float(key[2])
        a = row_weights(model, np.array([rate]), np.array([depth]))  # (p + 1, 1, n)
        if np.isfinite(depth) and stagnant(basis, Design((rate,), (1.0,), (), ((0, depth),)))[0]:
            a = np.zeros_like(a)  # standing water tells nothing
        blocks = []
        for j, analyte in enumerate(basis.analytes):
            y = a @ basis.zone_values[:, j]  # (p + 1, 1)
            sig = max(float(np.hypot(basis.lab_error(analyte) * abs(y[0, 0]),
                                     basis.absolute_error.get(analyte, 0.0))), 1e-12)
            block = np.zeros((1, basis.n_params))
            block[:, :p_theta] = ((y[1:] - y[0]) / steps[:, None]).T
            block[:, p_theta + j * n:p_theta + (j + 1) * n] = a[0]
            blocks.append(block / sig)
            quality[analyte] = a[0] / sig
        rows = np.vstack(blocks)
    elif kind == "log":
        st = model.state(np.array([rate]))
        f = mixing.wellbore_flow(st.zone_flow[:, 0], model.geometry, basis.log_depths)
        sig = log_error(f[0], s.flowlog_relative_error, s.flowlog_absolute_error)
        rows = np.zeros((len(basis.log_depths), basis.n_params))
        rows[:, :p_theta] = ((f[1:] - f[0]) / steps[:, None]).T / np.maximum(sig, 1e-12)[:, None]
    else:
        lv = model.pumping_level_depth(np.array([rate]))[:, 0]
        rows = np.zeros((1, basis.n_params))
        rows[0, :p_theta] = (lv[1:] - lv[0]) / steps / s.level_error
    basis._rows[key] = (rows, quality)
    return rows, quality


def observations(design: Design) -> list[tuple]:
    """The observations of a design (keys of :func:`_rows`): a discharge sample and a pumping
    level at every step, the static level read before the first, every depth sample and every
    flow log."""
    keys = [("sample", r, np.nan) for r in design.rates]
    keys += [("sample", design.rates[k], d) for k, d in design.depth_samples]
    keys += [("log", r) for r in design.log_rates]
    keys += [("level", r) for r in design.rates]
    if design.rates:
        keys.append(("level", 0.0))
    return keys


def jacobian(basis: Basis, design: Design) -> tuple[np.ndarray, dict]:
    """Whitened Jacobian of a design's observations with respect to phi.

    Rows: for each observation of :func:`observations`, its derivatives (forward differences in
    theta, exact in the zone values, on which the samples are linear) divided by its error at
    the nominal values (lab: relative error with its floor; logs: ``settings.flowlog_*_error``;
    levels: ``settings.level_error``). A depth sample in standing water (:func:`stagnant`)
    counts as no data.

    Returns
    -------
    J : ndarray (m, n_params)
    quality : dict analyte -> ndarray (rows, n_zones)
        Weighted weight matrix W A of each analyte's planned samples (for the resolution check).
    """
    parts = [_rows(basis, key) for key in observations(design)]
    jac = np.vstack([r for r, _ in parts]) if parts else np.zeros((0, basis.n_params))
    quality = {a: np.vstack([q[a] for _, q in parts if a in q] or
                            [np.zeros((0, basis.n_zones))]) for a in basis.analytes}
    return jac, quality


def information(basis: Basis, design: Design) -> tuple[np.ndarray, dict]:
    """Fisher information of phi after a design: its J^T J, the existing test's and the
    prior's; and the weighted weight matrices of each analyte's samples (both tests)."""
    jac, quality = jacobian(basis, design)
    info = jac.T @ jac + np.diag(basis.prior_information())
    if basis.existing is not None:
        jx, qx = basis.existing_jacobian()
        info = info + jx.T @ jx
        quality = {a: np.vstack([quality[a], qx[a]]) for a in quality}
    return info, quality


#: relative eigenvalue of the (equilibrated) information below which a direction counts as
#: not informed at all by the data and the priors
_NO_INFORMATION = 1e-10


def linear_sd(info: np.ndarray, gradients: np.ndarray, free: np.ndarray | None = None):
    """sd of linear functions g . phi under the covariance info^-1.

    The information is equilibrated (its diagonal scaled to one: the parameters differ by many
    orders of magnitude) and decomposed into eigenvectors; a function with weight on a
    direction that nothing informs has an infinite sd (a pseudo-inverse would give it none).
    Parameters not ``free`` are held fixed and carry no variance.

    Parameters
    ----------
    info : ndarray (p, p)
    gradients : ndarray (k, p)
    free : ndarray of bool (p,), optional

    Returns
    -------
    ndarray (k,)
    """
    g = np.atleast_2d(np.asarray(gradients, float))
    if free is not None and not np.all(free):
        idx = np.flatnonzero(free)
        info, g = info[np.ix_(idx, idx)], g[:, idx]
    if not g.size:
        return np.zeros(len(g))
    d = np.sqrt(np.clip(np.diag(info), 0.0, None))
    d = np.where(d > 0, d, 1.0)
    lam, vec = np.linalg.eigh(info / d[:, None] / d[None, :])
    gs = (g / d[None, :]) @ vec  # gradient in the eigenbasis of the scaled information
    none = lam <= _NO_INFORMATION * max(float(lam.max()), 1e-300)
    var = np.sum(gs[:, ~none] ** 2 / lam[None, ~none], axis=1)
    blind = np.sum(gs[:, none] ** 2, axis=1) > 1e-12 * np.maximum(np.sum(gs**2, axis=1), 1e-300)
    return np.where(blind, np.inf, np.sqrt(var))


# ------------------------------------------------------------------ window ends
@dataclass(frozen=True)
class WindowEnd:
    """One end of the window at the nominal values and what moves it.

    Attributes
    ----------
    side : str
        "low" or "high".
    rate : float
        q_e [m^3/d].
    reason : str
        The criterion that binds there.
    gradient : ndarray (n_params,) or None
        dq_e/dphi; None where the end is fixed (the pump's range, the sweep's edge).
    """

    side: str
    rate: float
    reason: str
    gradient: np.ndarray | None


def _criteria(basis: Basis):
    """Criteria g(q, phi) <= 0 of the window: name, function of (rates, theta batch, values)."""
    project = basis.project
    s, w = project.settings, project.well
    limits = governing_limits(project.limits, basis.analytes)
    stats = compliance_statistics(project, limits)
    out = []
    for j, analyte in enumerate(basis.analytes):
        if analyte not in limits:
            continue
        st = stats[analyte]
        m_star = float(mean_threshold(s.margin * limits[analyte].canonical(), st.log_sd,
                                      st.sample_probability))

        def quality(q, theta, values, j=j, m_star=m_star):
            wts = basis.model(theta).weights(np.atleast_1d(q))
            return np.nan_to_num(wts @ values[..., j:j + 1], nan=0.0)[..., 0] - m_star

        out.append((analyte, quality, j))
    bottom = w.operating_intake - w.submergence

    def level(q, theta, values):
        return basis.model(theta).pumping_level_depth(np.atleast_1d(q)) - bottom

    out.append(("pumping level above intake + submergence", level, None))
    return out


def window_ends(basis: Basis, rate_max: float | None = None, points: int | None = None) -> list[WindowEnd]:
    """The ends of the window at the nominal values, with their sensitivities.

    The window is the widest interval of rates in (0, rate_max] where every criterion holds at
    the nominal values and within the pump's range. An end where a criterion crosses is refined
    by Brent's method; its gradient follows from the implicit function theorem.
    """
    points = points or basis.project.settings.rate_grid_points
    rate_max = planning_rate_max(basis.project) if rate_max is None else rate_max
    w = basis.project.well
    grid = np.linspace(0.0, rate_max, points)[1:]
    crit = _criteria(basis)
    theta0 = basis.theta[None, :]
    values0 = basis.zone_values[None]
    g = np.array([f(grid, theta0, values0)[0] for _, f, _ in crit])  # (k, rates)
    ok = np.all(g <= 0, axis=0) & (grid >= w.rate_min) & (grid <= w.rate_max)
    if not ok.any():
        raise ModelError("no rate meets every criterion at the planning values: the plan "
                         "measures the uncertainty of the window's ends, and there is none")
    edges = np.flatnonzero(np.diff(np.r_[0, ok.astype(int), 0]))
    spans = list(zip(edges[::2], edges[1::2] - 1, strict=True))
    lo, hi = max(spans, key=lambda s: grid[s[1]] - grid[s[0]])
    ends = []
    for side, k_in, k_out in (("low", lo, lo - 1), ("high", hi, hi + 1)):
        if k_out < 0 or k_out >= len(grid):
            ends.append(WindowEnd(side, float(grid[k_in]), "edge of the planned rates", None))
            continue
        failing = [c for c in range(len(crit)) if g[c, k_out] > 0]
        pump = grid[k_out] < w.rate_min or grid[k_out] > w.rate_max
        if pump or not failing:
            rate = w.rate_min if side == "low" else w.rate_max
            ends.append(WindowEnd(side, float(rate), "pump rate range", None))
            continue
        c = failing[0]
        name, fun, _ = crit[c]

        def scalar(q, fun=fun):
            return float(fun(np.array([q]), theta0, values0)[0, 0])

        a, b = sorted((grid[k_in], grid[k_out]))
        q_e = optimize.brentq(scalar, a, b, xtol=1e-9 * rate_max)
        ends.append(WindowEnd(side, float(q_e), name, _end_gradient(basis, fun, q_e)))
    return ends


def _end_gradient(basis: Basis, fun, q_e: float) -> np.ndarray:
    """dq_e/dphi = -(dg/dphi) / (dg/dq) at the crossing (implicit function theorem)."""
    n, n_a = basis.n_zones, len(basis.analytes)
    th, steps = _perturbed_theta(basis)
    v = np.repeat(basis.zone_values[None], len(th), axis=0)
    g = fun(np.array([q_e]), th, v)[:, 0]
    grad = np.zeros(basis.n_params)
    grad[:len(steps)] = (g[1:] - g[0]) / steps
    dv = 1e-6 * max(float(np.abs(basis.zone_values).max()), 1e-9)
    vb = np.repeat(basis.zone_values[None], n * n_a, axis=0)
    for j in range(n_a):
        for i in range(n):
            vb[j * n + i, i, j] += dv
    gv = fun(np.array([q_e]), np.repeat(basis.theta[None], n * n_a, axis=0), vb)[:, 0]
    grad[len(steps):] = (gv - g[0]) / dv
    h = 1e-6 * max(q_e, 1.0)
    dq = (fun(np.array([q_e + h]), basis.theta[None], basis.zone_values[None])[0, 0]
          - fun(np.array([q_e - h]), basis.theta[None], basis.zone_values[None])[0, 0]) / (2 * h)
    if dq == 0 or not np.isfinite(dq):
        raise ModelError(f"the criterion is flat at the window's end ({q_e:g} m3/d): its "
                         "position is not defined by the data")
    return -grad / dq


@dataclass(frozen=True)
class Evaluation:
    """Expected outcome of one design.

    Attributes
    ----------
    design : Design
    cost : float
    end_sd : dict side -> float
        Expected sd of each window end [m^3/d] (0 for an end fixed by the pump's range).
    unresolved : dict analyte -> list of str
        Zones the design's samples would leave unresolved.
    """

    design: Design
    cost: float
    end_sd: dict
    unresolved: dict

    @property
    def objective(self) -> float:
        """The expected window uncertainty: the root sum of squares of the ends' sd [m^3/d]."""
        return float(np.sqrt(sum(v * v for v in self.end_sd.values())))


def evaluate(basis: Basis, design: Design, ends: list[WindowEnd], costs: Costs) -> Evaluation:
    """Expected sd of the window's ends and the unresolved zones after a design."""
    info, quality = information(basis, design)
    moving = [e for e in ends if e.gradient is not None]
    sds = linear_sd(info, np.array([e.gradient for e in moving]), basis.free) if moving else []
    sd = {e.side: 0.0 for e in ends}
    sd.update({e.side: float(v) for e, v in zip(moving, sds, strict=True)})
    names = basis.project.zone_names
    unresolved = {a: [names[i] for i in null_space_zones(wa)] for a, wa in quality.items()}
    return Evaluation(design, costs.of(design), sd, unresolved)


# ------------------------------------------------------------------ bases
def design_of(project: Project) -> Design:
    """The design of a test already run: its steps, flow logs and depth samples."""
    steps = project.steps
    rates = tuple(float(r) for r in steps["rate"].astype(float)) if len(steps) else ()
    hours = tuple(24.0 * float(d) if np.isfinite(d) else 0.0
                  for d in steps["duration"].astype(float)) if len(steps) else ()
    index = {str(s): k for k, s in enumerate(steps["step"].astype(str))} if len(steps) else {}
    logs = project.flowlogs
    log_rates = tuple(float(r) for r in logs.groupby("log")["rate"].first().astype(float)) \
        if logs is not None and len(logs) else ()
    samples = project.samples
    depth = ()
    if len(samples):
        inside = samples[np.isfinite(samples["depth"].astype(float))
                         & samples["step"].astype(str).isin(index)]
        pairs = dict.fromkeys((index[str(s)], float(d))
                              for s, d in zip(inside["step"], inside["depth"], strict=True))
        depth = tuple(pairs)
    return Design(rates, hours, log_rates, depth)


def basis_from_fit(fit: FitResult, value_sd=None) -> Basis:
    """The basis of a finished test: its fit as nominal values, its priors, its data.

    Parameters
    ----------
    fit : blendq.fit.estimation.FitResult
    value_sd : ndarray (n, n_analytes), optional
        Prior sd of the zone values [mg/L]. Default: the sd of a uniform spread from 0 to the
        value the draws of an unresolved zone are capped at (:func:`blendq.fit.unresolved.
        value_cap`), cap / sqrt(12): what blendq assumes where the data say nothing.
    """
    problem = fit.problem
    project = problem.project
    n = problem.n_zones
    theta = np.asarray(fit.theta, float)
    if not problem.fit_c:
        theta = np.concatenate([theta[:2 * n], [project.well.well_loss]])
    prior = problem.prior
    c_sd = np.inf if problem.fit_c else 0.0
    theta_sd = np.concatenate([prior.log_conductance_sd, prior.static_head_sd, [c_sd]])
    if not problem.options.fit_hydraulics:
        theta_sd[:2 * n] = 0.0
    values = fit.zone_values()
    if value_sd is None:
        caps = np.array([value_cap(fit, a) for a in fit.analytes])
        value_sd = np.repeat(caps[None, :] / np.sqrt(12.0), n, axis=0)
    s = project.settings
    lab = {a: lab_relative_error(project.samples, a, s.default_relative_uncertainty)[0]
           for a in fit.analytes}
    return Basis(project, list(fit.analytes), theta, values, theta_sd,
                 np.asarray(value_sd, float), lab,
                 log_depths=default_log_depths(project), existing=design_of(project))



# ------------------------------------------------------------------ step durations and purging
#: casing volumes purged before a sample (common practice: three casing volumes)
PURGE_CASING_VOLUMES = 3.0

#: idle time before the test when the project gives no ``[test] idle_time_before`` [h]
#: (common practice: the well rests overnight before a step test so the levels recover)
DEFAULT_IDLE_HOURS = 12.0


def casing_purge_volume(project: Project) -> float:
    """:data:`PURGE_CASING_VOLUMES` times the volume of water standing in the well [m^3]:
    pi r_w^2 times the column from the static level (or the shallowest zone static level, or
    the top zone) to the bottom of the deepest zone (volume of a cylinder)."""
    w = project.well
    levels = [z.static_level for z in project.zones if z.static_level is not None]
    top = w.static_level if w.static_level is not None else (
        min(levels) if levels else float(project.zone_top.min()))
    column = max(float(project.zone_bottom.max()) - top, 0.0)
    return PURGE_CASING_VOLUMES * np.pi * w.well_radius**2 * column


@dataclass(frozen=True)
class Purge:
    """Water to pump before a step's sample: the review's rule (casing volumes plus the
    water the thief zones stored while the well stood idle, :func:`blendq.review.field.
    check_purge`).

    Attributes
    ----------
    casing : float
        :data:`PURGE_CASING_VOLUMES` casing volumes [m^3].
    stored : StoredWater
        Water stored by the thief zones during the idle time before the test (the plan's
        zone model, prior or fitted).
    idle_given : bool
        The idle time is the project's ``[test] idle_time_before`` (else
        :data:`DEFAULT_IDLE_HOURS`).
    """

    casing: float
    stored: StoredWater
    idle_given: bool

    @property
    def total(self) -> float:
        """Casing volumes plus the stored volume [m^3]."""
        return float(self.casing + self.stored.total)

    def sentence(self, units: str = "US") -> str:
        """One sentence: the purge volume and what it is made of."""
        idle = self.stored.idle_time * 24.0
        source = ("[test] idle_time_before" if self.idle_given else
                  "no [test] idle_time_before: an overnight rest, common practice")
        return (f"Purge before each step's sample: {format_quantity(self.total, 'volume', units)}"
                f" = {PURGE_CASING_VOLUMES:g} casing volumes "
                f"({format_quantity(self.casing, 'volume', units)}) + "
                f"{format_quantity(self.stored.total, 'volume', units)} stored by the thief "
                f"zones ({', '.join(self.stored.thieves) or 'none'}) during {idle:.3g} h idle "
                f"before the test ({source}; crossflow held steady, an upper bound).")


def planned_purge(basis: Basis) -> Purge:
    """The purge before each step's sample: casing volumes plus the volume the thief zones of
    the basis's zone model store during the idle time before the test
    (:func:`blendq.well.memory.stored_water`). The stored volume is counted at every step: a
    thief zone returns its water at the first step whose rate turns it to inflow, so this is
    cautious."""
    if ("purge",) not in basis._rows:  # the search asks for it at every candidate step
        idle = basis.project.settings.idle_time_before_test
        given = idle is not None
        idle = float(idle) if given else DEFAULT_IDLE_HOURS / 24.0
        stored = stored_water(basis.model(basis.theta), idle, basis.project.zone_names)
        basis._rows[("purge",)] = Purge(casing_purge_volume(basis.project), stored, given)
    return basis._rows[("purge",)]


def purge_volume(basis: Basis) -> float:
    """Water to pump before a step's sample [m^3]: :func:`planned_purge` in total."""
    return planned_purge(basis).total


def step_hours(basis: Basis, rate: float) -> float:
    """Planned duration of a step [h]: the longer of the time to pump the purge volume
    (:func:`purge_volume`) at its rate and the minimum step time (the level settles and the
    readings stabilise while the purge water is pumped)."""
    purge = purge_volume(basis) / max(rate, 1e-12) * 24.0
    return float(max(basis.min_step_hours, purge))


# ------------------------------------------------------------------ candidates and the search
def top_step_rate(basis: Basis, rate_max: float | None = None) -> float:
    """Highest step rate a plan proposes [m^3/d]: the pump's largest rate, the planning rate
    range, and 95 % of the rate at which the nominal pumping level reaches the intake less its
    submergence, whichever is least."""
    w = basis.project.well
    top = planning_rate_max(basis.project) if rate_max is None else rate_max
    if np.isfinite(w.rate_max):
        top = min(top, w.rate_max)
    grid = np.linspace(0.0, top, 401)[1:]
    level = basis.model(basis.theta).pumping_level_depth(grid)
    deep = level > w.pump_intake_depth - w.submergence
    if deep.any():
        top = min(top, 0.95 * float(grid[np.argmax(deep)]))
    return float(top)


def reversal_rates(basis: Basis) -> np.ndarray:
    """Rate [m^3/d] below which each zone takes water from the well at the nominal values
    (linear zones: Q = sum_k G_k (h0_k - h0_i); 0 for a zone that gives water at every rate)."""
    n = basis.n_zones
    g = np.exp(basis.theta[:n])
    h0 = basis.theta[n:2 * n]
    return np.maximum((g[None, :] * (h0[None, :] - h0[:, None])).sum(1), 0.0)


def depth_sample_depths(project: Project) -> np.ndarray:
    """Depths [m] where a planned depth sample may be taken: the middle of each gap between
    zones (the water there is the mix of the zones on one side; Izbicki and co-workers)."""
    top, bottom = project.zone_top, project.zone_bottom
    return 0.5 * (bottom[:-1] + top[1:])


def _low_rate(basis: Basis, top: float) -> float | None:
    """A step rate below the largest reversal rate (where a thief zone takes water), above the
    pump's least rate; None when there is no such rate."""
    q_rev = float(reversal_rates(basis).max())
    low = max(basis.project.well.rate_min, 0.05 * top)
    return 0.5 * (low + q_rev) if q_rev > low * 1.05 and q_rev < top else None


def candidate_designs(basis: Basis, rate_max: float | None = None) -> list[Design]:
    """Candidate designs: 3 to 7 steps spaced evenly or geometrically up to
    :func:`top_step_rate` (and an even set with a step below the largest reversal rate);
    no flow log, an ambient log, ambient and pumped at the top, the middle or the lowest step;
    no depth sample, or one in each gap between zones during the top step, the
    middle step, or both."""
    top = top_step_rate(basis, rate_max)
    w = basis.project.well
    low_rate = _low_rate(basis, top)
    floor = max(w.rate_min, 0.05 * top)
    patterns = []
    for n in range(3, 8):
        patterns.append(np.linspace(top / n, top, n))
        patterns.append(np.geomspace(max(floor, top / 2 ** (n - 1)), top, n))
        if low_rate is not None:
            patterns.append(np.r_[low_rate, np.linspace(top / (n - 1), top, n - 1)])
    gaps = depth_sample_depths(basis.project)
    out = []
    for rates in patterns:
        rates = tuple(float(r) for r in np.maximum(rates, floor))
        hours = tuple(step_hours(basis, r) for r in rates)
        k_top, k_mid = len(rates) - 1, len(rates) // 2
        logs_options = [(), (0.0,), (0.0, rates[k_top]), (0.0, rates[k_mid]), (0.0, rates[0])]
        depth_options = [(), tuple((k_top, d) for d in gaps), tuple((k_mid, d) for d in gaps),
                         tuple((k, d) for k in (k_mid, k_top) for d in gaps)]
        for logs in logs_options:
            for depth in depth_options:
                out.append(Design(rates, hours, logs, depth))
    return out


@dataclass(frozen=True)
class Item:
    """One measurement a plan may add.

    Attributes
    ----------
    kind : str
        "step", "flow log" or "depth sample".
    rate : float
        Step rate, or the rate of the log or of the step sampled [m^3/d].
    depth : float
        Depth of a depth sample [m] (NaN otherwise).
    """

    kind: str
    rate: float
    depth: float = float("nan")

    def add_to(self, design: Design, basis: Basis) -> Design:
        if self.kind == "step":
            return design.with_step(self.rate, step_hours(basis, self.rate))
        if self.kind == "flow log":
            return replace(design, log_rates=(*design.log_rates, self.rate))
        k = int(np.argmin(np.abs(np.asarray(design.rates) - self.rate)))
        return replace(design, depth_samples=(*design.depth_samples, (k, self.depth)))

    def alone(self, basis: Basis) -> Design:
        """The item as a test of its own, after a finished test: a step at its rate (with its
        discharge sample and level), with the log or the depth sample taken during it; an
        ambient log alone."""
        if self.kind == "flow log" and self.rate == 0:
            return Design((), (), (0.0,))
        step = Design((self.rate,), (step_hours(basis, self.rate),))
        return step if self.kind == "step" else self.add_to(step, basis)

    def describe(self, units: str = "US") -> str:
        if self.kind == "step":
            return f"a step at {format_quantity(self.rate, 'rate', units)}"
        if self.kind == "flow log":
            return ("an ambient flow log" if self.rate == 0 else
                    f"a flow log while pumping {format_quantity(self.rate, 'rate', units)}")
        return (f"a depth sample at {format_quantity(self.depth, 'length', units)} while "
                f"pumping {format_quantity(self.rate, 'rate', units)}")


def candidate_items(basis: Basis, design: Design, rate_max: float | None = None) -> list[Item]:
    """Items that may be added to a design: a step at one of ten rates up to the top step rate
    (and below the largest reversal rate), an ambient log, a pumped log during any step, and a
    depth sample in any gap between zones during any step (not in standing water)."""
    top = top_step_rate(basis, rate_max)
    have = set(design.rates) | (set(basis.existing.rates) if basis.existing else set())
    rates = [float(r) for r in np.linspace(top / 10, top, 10)]
    low = _low_rate(basis, top)
    if low is not None:
        rates.append(low)
    rates = [r for r in rates if r >= basis.project.well.rate_min
             and not any(abs(r - h) <= 0.02 * r for h in have)]
    items = [Item("step", r) for r in sorted(rates)]
    logs = set(design.log_rates) | (set(basis.existing.log_rates) if basis.existing else set())
    if 0.0 not in logs:
        items.append(Item("flow log", 0.0))
    items += [Item("flow log", r) for r in dict.fromkeys(design.rates) if r not in logs]
    taken = {(float(design.rates[k]), d) for k, d in design.depth_samples}
    for r in dict.fromkeys(design.rates):
        for d in depth_sample_depths(basis.project):
            if (r, float(d)) in taken:
                continue
            probe = Design((r,), (1.0,), (), ((0, float(d)),))
            if not stagnant(basis, probe)[0]:
                items.append(Item("depth sample", r, float(d)))
    return items


@dataclass(frozen=True)
class ItemValue:
    """What one item is worth: the expected end spreads without and with it.

    Attributes
    ----------
    item : Item
    cost : float
        Its cost (lab sample, log run, rig hours).
    without, with_ : dict side -> float
        Expected sd of each window end [m^3/d].
    """

    item: Item
    cost: float
    without: dict
    with_: dict

    @property
    def gain(self) -> float:
        """Drop of the expected window uncertainty (root sum of squares of the ends) [m^3/d]."""
        return _rss(self.without) - _rss(self.with_)

    def sentence(self, units: str = "US") -> str:
        """E.g. "a depth sample at 164 ft during the step at 600 gpm narrows the window's high
        end from +-60 to +-15 gpm"."""
        parts = []
        for side in ("low", "high"):
            a, b = self.without.get(side, 0.0), self.with_.get(side, 0.0)
            if a > 0 and (b < a * 0.98 or not np.isfinite(a)):
                parts.append(f"the window's {side} end from {_pm(a, units)} to {_pm(b, units)}")
        what = " and ".join(parts) if parts else "neither end of the window noticeably"
        return f"{self.item.describe(units)} narrows {what}"


def _pm(sd: float, units: str) -> str:
    return "+-unbounded" if not np.isfinite(sd) else f"+-{format_quantity(sd, 'rate', units)}"


def _rss(sd: dict) -> float:
    return float(np.sqrt(sum(v * v for v in sd.values())))


def _better(gain: float, before: float, after: float) -> float:
    """Gain used to rank items: a finite spread after an unbounded one ranks first."""
    if not np.isfinite(before):
        return np.inf if np.isfinite(after) else 0.0
    return gain


@dataclass
class Plan:
    """The outcome of :func:`choose_design`.

    Attributes
    ----------
    design : Design
        The chosen design.
    evaluation : Evaluation
    ends : list of WindowEnd
        The window's ends at the planning values.
    steps_taken : list of ItemValue
        The items in the order the search added them, with the spreads before and after.
    values : list of ItemValue
        The value of every item of the chosen design: the spreads without it (the design less
        that item) and with it.
    candidates : list of Evaluation
        The candidate designs evaluated, cheapest first.
    budget : float or None
    """

    design: Design
    evaluation: Evaluation
    ends: list
    steps_taken: list
    values: list
    candidates: list
    budget: float | None


def _items_of(design: Design) -> list[Item]:
    items = [Item("step", r) for r in design.rates]
    items += [Item("flow log", r) for r in design.log_rates]
    items += [Item("depth sample", design.rates[k], d) for k, d in design.depth_samples]
    return items


def _without(design: Design, item: Item) -> Design:
    if item.kind == "flow log":
        logs = list(design.log_rates)
        logs.remove(item.rate)
        return replace(design, log_rates=tuple(logs))
    if item.kind == "depth sample":
        k = design.rates.index(item.rate)
        samples = list(design.depth_samples)
        samples.remove((k, item.depth))
        return replace(design, depth_samples=tuple(samples))
    k = design.rates.index(item.rate)
    keep = [j for j in range(design.n_steps) if j != k]
    index = {j: i for i, j in enumerate(keep)}
    return Design(tuple(design.rates[j] for j in keep), tuple(design.step_hours[j] for j in keep),
                  tuple(r for r in design.log_rates if r == 0 or r != item.rate),
                  tuple((index[j], d) for j, d in design.depth_samples if j != k))


def start_design(basis: Basis, rate_max: float | None = None) -> Design:
    """The least test a plan starts from: three steps evenly up to :func:`top_step_rate` (a
    curve of level against rate needs three)."""
    top = top_step_rate(basis, rate_max)
    rates = tuple(float(r) for r in np.linspace(top / 3, top, 3))
    return Design(rates, tuple(step_hours(basis, r) for r in rates))


def choose_design(basis: Basis, costs: Costs, budget: float | None = None,
                  rate_max: float | None = None, max_items: int = 30,
                  candidates: list[Design] | None = None) -> Plan:
    """The design with the smallest expected window uncertainty for its cost, by a greedy
    search.

    From :func:`start_design`, the item (:func:`candidate_items`) with the largest drop of the
    expected window uncertainty (root sum of squares of the ends' sd) per unit cost is added
    while one fits the budget and lowers it by more than 0.5 % (Atkinson, Donev and Tobias
    2007, ch. 12: sequential construction of a design). Without a budget the search stops when
    no item is worth 0.5 %. The candidate designs (:func:`candidate_designs`, unless given) are
    evaluated too and the best of them within the budget replaces the greedy result when it is
    better.

    Raises
    ------
    ModelError
        When the budget does not pay for the start design.
    """
    ends = window_ends(basis, rate_max)
    design = start_design(basis, rate_max)
    if budget is not None and costs.of(design) > budget:
        raise ModelError(f"the budget ({budget:g}) does not pay for three steps "
                         f"({costs.of(design):g} with the unit costs given)")
    current = evaluate(basis, design, ends, costs)
    taken = []
    for _ in range(max_items):
        best, best_score = None, 0.0
        for item in candidate_items(basis, design, rate_max):
            trial = item.add_to(design, basis)
            if budget is not None and costs.of(trial) > budget:
                continue
            ev = evaluate(basis, trial, ends, costs)
            before, after = current.objective, ev.objective
            gain = _better(before - after, before, after)
            if not gain > 5e-3 * (after if np.isfinite(after) else 1.0):
                continue
            score = gain / max(ev.cost - current.cost, 1e-12)
            if score > best_score:
                best, best_score = (item, ev), score
        if best is None:
            break
        item, ev = best
        taken.append(ItemValue(item, ev.cost - current.cost, current.end_sd, ev.end_sd))
        design, current = ev.design, ev
    cands = [evaluate(basis, d, ends, costs)
             for d in (candidate_designs(basis, rate_max) if candidates is None else candidates)]
    affordable = [c for c in cands if budget is None or c.cost <= budget]
    if affordable:
        top = min(affordable, key=lambda c: (c.objective, c.cost))
        if top.objective < current.objective * (1 - 1e-9):
            design, current, taken = top.design, top, []
    values = []
    for item in _items_of(design):
        less = _without(design, item)
        if less.n_steps < 2:
            continue
        ev = evaluate(basis, less, ends, costs)
        values.append(ItemValue(item, current.cost - ev.cost, ev.end_sd, current.end_sd))
    return Plan(design, current, ends, taken, values,
                sorted(cands, key=lambda c: (c.cost, c.objective)), budget)


def what_next(basis: Basis, costs: Costs, rate_max: float | None = None) -> list[ItemValue]:
    """After a finished test: every single extra measurement (a step at another rate, an
    ambient or pumped flow log, a depth sample while pumping at a step's rate), each as a short
    test of its own added to the data in hand, ranked by the drop of the expected window
    uncertainty it brings (largest first)."""
    if basis.existing is None:
        raise ModelError("what to measure next needs a finished test")
    ends = window_ends(basis, rate_max)
    empty = Design((), ())
    now = evaluate(basis, empty, ends, costs)
    done = basis.existing
    items = candidate_items(basis, Design(done.rates, done.step_hours, done.log_rates,
                                          done.depth_samples), rate_max)
    top = top_step_rate(basis, rate_max)
    if not any(abs(top - r) <= 0.02 * top for r in done.log_rates):
        items.append(Item("flow log", top))
    out = []
    for item in items:
        ev = evaluate(basis, item.alone(basis), ends, costs)
        out.append(ItemValue(item, ev.cost, now.end_sd, ev.end_sd))
    return sorted(out, key=lambda v: -_better(v.gain, _rss(v.without), _rss(v.with_)))


def basis_from_priors(project: Project, inputs: PlanInputs) -> Basis:
    """The basis of a project without test data: its zones' prior ranges (``[plan]``).

    Each zone's conductance is the one its conductance model gives for the geometric middle of
    its transmissivity range (or its ``[[zones]]`` transmissivity), with a spread of ln G of a
    quarter of ln(high / low): the range read as +-2 sd (common practice for a range quoted from
    logs or nearby tests); the zone static levels and their spreads as for a fit
    (:func:`blendq.well.model.prior_hydraulics`); the well loss C from ``well.well_loss``, free.
    Each zone value is the middle of its range with a quarter of its width as sd.

    Raises
    ------
    InputError
        When a zone has no transmissivity or lacks the range of a planned analyte.
    """
    analytes = inputs.analytes
    if not analytes:
        raise InputError("no prior range of any analyte: give each zone's ranges in "
                         "[[plan.zones]] (e.g. nitrate = [\"2 mg/L\", \"8 mg/L\"])",
                         file=inputs.file, field="plan.zones")
    zones, log_sd = [], []
    for z in project.zones:
        if z.name in inputs.transmissivity:
            low, high = inputs.transmissivity[z.name]
            zones.append(replace(z, transmissivity=float(np.sqrt(low * high)), conductivity=None))
            log_sd.append(np.log(high / low) / 4.0 if high > low else 0.0)
        else:
            zones.append(z)
            log_sd.append(np.nan)
        missing = [a for a in analytes if a not in inputs.chemistry.get(z.name, {})]
        if missing:
            raise InputError(f'zone "{z.name}" has no prior range of {", ".join(missing)}',
                             file=inputs.file, field=f"plan.zones ({z.name})")
    hours = inputs.min_step_hours or MIN_STEP_HOURS
    steps = pd.DataFrame({"step": ["S1", "S2", "S3"], "rate": [1.0, 2.0, 3.0],
                          "start": pd.NaT, "end": pd.NaT, "duration": hours / 24.0,
                          "pumping_level": np.nan, "recovered_before": False,
                          "source_row": [1, 2, 3]})
    planned = replace(project, zones=zones, steps=steps)
    prior = prior_hydraulics(planned, need_properties=True)
    n = len(zones)
    g_sd = np.where(np.isfinite(log_sd), log_sd, prior.log_conductance_sd)
    theta = np.concatenate([prior.log_conductance, prior.static_head, [project.well.well_loss]])
    theta_sd = np.concatenate([g_sd, prior.static_head_sd, [np.inf]])
    values = np.zeros((n, len(analytes)))
    value_sd = np.zeros_like(values)
    for i, z in enumerate(zones):
        for j, a in enumerate(analytes):
            low, high = inputs.chemistry[z.name][a]
            values[i, j], value_sd[i, j] = 0.5 * (low + high), (high - low) / 4.0
    value_sd = np.maximum(value_sd, 1e-6 * np.maximum(values, 1e-12))
    planned = replace(planned, steps=project.steps)
    return Basis(planned, analytes, theta, values, theta_sd, value_sd,
                 project.settings.default_relative_uncertainty,
                 log_depths=default_log_depths(project), min_step_hours=hours)


def costs_of(inputs: PlanInputs) -> Costs:
    """The unit costs of ``[plan]`` over the defaults of :class:`Costs`."""
    return replace(Costs(), **inputs.costs)


@dataclass
class PlanReport:
    """What ``blendq plan`` reports.

    Attributes
    ----------
    project : Project
    basis : Basis
    costs : Costs
    plan : Plan or None
        The chosen design (a project without test data).
    current : Evaluation or None
        The finished test's expected spreads (a project with a test).
    next_items : list of ItemValue
        After a test: the extra measurements, most valuable first.
    """

    project: Project
    basis: Basis
    costs: Costs
    plan: Plan | None = None
    current: Evaluation | None = None
    next_items: list = field(default_factory=list)


def plan_test(project: Project, inputs: PlanInputs, finished: bool,
              budget: float | None = None) -> PlanReport:
    """Plan a step test (no test yet) or the next measurement (after a test).

    Parameters
    ----------
    project : Project
    inputs : PlanInputs
        The ``[plan]`` table (priors, unit costs, budget).
    finished : bool
        The project holds a test: fit it and rank the single extra measurements.
    budget : float, optional
        Overrides ``[plan] budget``.
    """
    costs = costs_of(inputs)
    budget = inputs.budget if budget is None else budget
    if finished:
        basis = basis_from_fit(fit_project(project))
        ends = window_ends(basis)
        current = evaluate(basis, Design((), ()), ends, costs)
        return PlanReport(project, basis, costs, current=current,
                          next_items=what_next(basis, costs))
    basis = basis_from_priors(project, inputs)
    return PlanReport(project, basis, costs, plan=choose_design(basis, costs, budget))
