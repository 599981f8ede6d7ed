"""Rate sweep and operating window (docs/methods.md, section 8).

For a grid of rates: predicted discharge concentration per analyte with its band, the
probability of exceeding margin x limit, the pumping level and each zone's share. The window is
the set of rates where, for every analyte, P(S > margin x limit) <= alpha, the pumping level
stays above the pump intake plus the required submergence (and, if asked, above the top of the
uppermost zone), within the pump's rate range. It may be several intervals.

S is the statistic the limit is judged on (its :class:`~blendq.chemistry.limits.ComplianceBasis`:
a single sample, averaged with its confirmation sample where the rule has one, or the annual
mean of quarterly samples). Given the mean discharge concentration m, P(S > t | m) is a
lognormal tail that carries the water's temporal variability and the lab's error
(:func:`~blendq.chemistry.limits.exceedance_given_mean`). A rate is compliant when that
probability is at most beta (``settings.sample_exceedance_probability``), that is when
m <= m*(t) (:func:`~blendq.chemistry.limits.mean_threshold`); the window keeps the rates where
the posterior probability of m > m* is at most alpha. So the window is a statement with
confidence 1 - alpha about the well's water, not a prediction averaged over what the data do
not know: with calibrated draws it sticks out of the true window at a rate no more often than
alpha, whatever the share of the spread that is lab error or temporal variability.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from blendq.chemistry.limits import Limit, RatioRule, mean_threshold
from blendq.fit.estimation import FitResult
from blendq.fit.uncertainty import Draws, Prediction, predict
from blendq.units import format_percent
from blendq.well.model import (
    elapsed_test_time,
    horizon_factor_of,
    operating_geometry,
    transient_slope,
)


@dataclass(frozen=True)
class Criterion:
    """One condition a rate must meet.

    Attributes
    ----------
    name : str
        Printable name ("nitrate", "pumping level above intake + submergence", ...).
    ok : ndarray of bool (n_rates,)
    kind : str
        "quality", "hydraulic" or "pump".
    """

    name: str
    ok: np.ndarray
    kind: str


@dataclass
class Window:
    """The operating window and why it ends where it does.

    Attributes
    ----------
    rates : ndarray (n_rates,) [m^3/d]
    ok : ndarray of bool (n_rates,)
    intervals : list of (low, high, low_reason, high_reason)
        Rates [m^3/d] of each compliant interval and the criterion that binds at each end.
    recommended : float or None
        The recommended rate (:func:`recommended_rate`): the largest rate not above the demand
        that stays ``headroom`` x the rate inside both ends of its interval.
    reason_empty : str
        Why there is no window (empty string when there is one).
    criteria : list of Criterion
    demand : float or None
        The well's demand [m^3/d].
    headroom : float
        Relative distance [-] kept between the recommended rate and every end of the window.
    headroom_kept : bool
        False when no rate of the window keeps the headroom (the window is too narrow); the
        recommended rate is then the middle of the interval nearest the demand.
    cascading : list of (str, float, bool)
        Per zone that water cascades from (the pumping level below its top while it gives
        water, in more than alpha of the draws): its name, the lowest such rate [m^3/d], and
        whether that happens at a rate inside the window.
    """

    rates: np.ndarray
    ok: np.ndarray
    intervals: list[tuple[float, float, str, str]]
    recommended: float | None
    reason_empty: str
    criteria: list[Criterion] = field(default_factory=list)
    demand: float | None = None
    headroom: float = 0.0
    headroom_kept: bool = True
    cascading: list = field(default_factory=list)

    @property
    def empty(self) -> bool:
        return not self.intervals

    @property
    def demand_met(self) -> bool | None:
        """True when the recommended rate reaches the demand (to within half a grid step);
        None when no demand is given."""
        if not self.demand:
            return None
        if self.recommended is None:
            return False
        step = float(np.min(np.diff(self.rates))) if len(self.rates) > 1 else 0.0
        return bool(self.recommended >= self.demand - 0.5 * step)


def rate_grid(fit: FitResult, points: int | None = None, rate_max: float | None = None) -> np.ndarray:
    """Rates of the sweep [m^3/d]: 0 to 1.2 x the largest of the pump range, demand and steps."""
    project = fit.problem.project
    s = project.settings
    points = points or s.rate_grid_points
    if rate_max is None:
        rate_max = s.rate_grid_max
    if rate_max is None:
        cands = [float(project.steps["rate"].max()) if len(project.steps) else 0.0]
        if np.isfinite(project.well.rate_max):
            cands.append(project.well.rate_max)
        if project.well.demand:
            cands.append(project.well.demand)
        rate_max = 1.2 * max(cands)
    return np.linspace(0.0, rate_max, points)


def sweep(fit: FitResult, draws: Draws, rates=None, horizon: float | None = None,
          changes=None) -> Prediction:
    """Predictions over the rate grid for operation: at the operating horizon (each transient
    zone's response carried there by Cooper-Jacob with each draw's own conductance, the ambient
    crossflow held; docs/methods.md, section 1) and with the operating intake
    (``well.operating_intake_depth``), then the scenario's ``changes``."""
    project = fit.problem.project
    rates = rate_grid(fit) if rates is None else np.asarray(rates, float)
    horizon = project.settings.horizon if horizon is None else horizon
    slope = transient_slope(project)
    t_ref = elapsed_test_time(project) if np.any(slope > 0) else np.nan
    geometry = operating_geometry(project)

    def operate(model):
        model = model.at_horizon(horizon_factor_of(model.conductance, slope, t_ref, horizon))
        model = model.with_changes(geometry=geometry)
        return model if changes is None else changes(model)

    return predict(fit, draws, rates, changes=operate)


def cascade_probability(pred: Prediction, zone_top) -> np.ndarray:
    """Share of draws in which water cascades from each zone at each rate [-], (n_rates,
    n_zones): the pumping level [m depth] below the zone's top while the zone gives water, so
    that the part of its open interval above the level spills into the well (air entrainment,
    a zone dewatered at the well face; docs/methods.md, section 2)."""
    top = np.asarray(zone_top, float)
    with np.errstate(invalid="ignore"):
        falls = (pred.pumping_level[..., None] > top) & (pred.zone_flow > 0)
    return falls.mean(0)


def cascading_zones(pred: Prediction, zone_top, zone_names, alpha: float,
                    ok=None) -> list[tuple[str, float, bool]]:
    """Zones water cascades from in more than ``alpha`` of the draws at some rate: (name,
    lowest such rate [m^3/d], whether at a rate where ``ok``), in zone order."""
    prob = cascade_probability(pred, zone_top)
    out = []
    for i, name in enumerate(zone_names):
        hit = (prob[:, i] > alpha) & (pred.rates > 0)
        if hit.any():
            inside = bool(np.any(hit & ok)) if ok is not None else False
            out.append((name, float(pred.rates[hit].min()), inside))
    return out


def governing_limits(limits: list[Limit], analytes: list[str]) -> dict[str, Limit]:
    """For each analyte, the strictest applicable limit (lowest canonical value)."""
    out = {}
    for lim in limits:
        if lim.analyte in analytes:
            if lim.analyte not in out or lim.canonical() < out[lim.analyte].canonical():
                out[lim.analyte] = lim
    return out


@dataclass(frozen=True)
class Statistic:
    """The statistic an analyte's governing limit is judged on, and its spread at a fixed rate.

    Attributes
    ----------
    analyte : str
    limit : Limit
        Governing limit; ``limit.compliance`` is the basis (single sample or annual mean).
    temporal_cv : float
        Coefficient of variation of the water's concentration from sample to sample [-].
    temporal_cv_source : str
        "setting" or "default setting, common practice".
    lab_cv : float
        Relative one-sd lab error of a compliance result [-].
    lab_cv_source : str
    sample_probability : float
        beta: the largest tolerated probability that the statistic exceeds a threshold [-]
        (``settings.sample_exceedance_probability``).
    """

    analyte: str
    limit: Limit
    temporal_cv: float
    temporal_cv_source: str
    lab_cv: float
    lab_cv_source: str
    sample_probability: float = 0.05

    @property
    def log_sd(self) -> float:
        """sd of ln(S / m) [-] (:func:`blendq.chemistry.limits.statistic_log_sd`)."""
        return self.limit.compliance.log_sd(self.temporal_cv, self.lab_cv)

    def describe(self) -> str:
        """One line such as ``"nitrate: single sample with confirmation (40 CFR 141.23,
        secondary), temporal CV 10 % (default setting, common practice), lab error 5 % (...)"``."""
        b = self.limit.compliance
        return (f"{self.analyte}: {b.describe()} ({b.citation}; {b.status}), temporal CV "
                f"{format_percent(self.temporal_cv)} ({self.temporal_cv_source}), lab error "
                f"{format_percent(self.lab_cv)} ({self.lab_cv_source})")

    def as_dict(self) -> dict:
        b = self.limit.compliance
        return {"limit": self.limit.label(), "limit_mg_per_l": self.limit.canonical(),
                "statistic": b.statistic, "samples_averaged": b.samples,
                "description": b.describe(), "rule": b.rule(), "citation": b.citation,
                "status": b.status, "temporal_cv": self.temporal_cv,
                "temporal_cv_source": self.temporal_cv_source, "lab_cv": self.lab_cv,
                "lab_cv_source": self.lab_cv_source, "log_sd": self.log_sd,
                "sample_exceedance_probability": self.sample_probability}


def lab_relative_error(samples: pd.DataFrame, analyte: str, default: float) -> tuple[float, str]:
    """Relative one-sd lab error [-] of a compliance result of ``analyte``.

    The median of uncertainty / value over the detected results whose lab stated an
    uncertainty; ``default`` (``settings.default_relative_uncertainty``) where none did.
    """
    if len(samples) and "uncertainty" in samples:
        rows = samples[(samples["analyte"] == analyte)
                       & ~samples["nondetect"].astype(bool)]
        value = rows["value"].to_numpy(float)
        unc = rows["uncertainty"].to_numpy(float)
        good = np.isfinite(value) & np.isfinite(unc) & (value > 0)
        if good.any():
            return float(np.median(unc[good] / value[good])), "median stated by the lab"
    return float(default), "default lab uncertainty setting"


def compliance_statistics(project, limits: dict[str, Limit]) -> dict[str, Statistic]:
    """The statistic each governing limit is judged on, with the project's temporal CV and the
    lab error of its results.

    Parameters
    ----------
    project : blendq.inputs.project.Project
    limits : dict analyte -> Limit
        Governing limits (:func:`governing_limits`).
    """
    s = project.settings
    out = {}
    for analyte, lim in limits.items():
        cv, cv_source = s.temporal_cv_for(analyte)
        lab, lab_source = lab_relative_error(project.samples, analyte,
                                             s.default_relative_uncertainty)
        out[analyte] = Statistic(analyte, lim, cv, cv_source, lab, lab_source,
                                 s.sample_exceedance_probability)
    return out


def exceedance(concentration, threshold: float, log_sd: float = 0.0,
               sample_probability: float = 0.05) -> np.ndarray:
    """Posterior probability that the judged statistic exceeds ``threshold`` more often than
    ``sample_probability`` allows, at each rate.

    Parameters
    ----------
    concentration : ndarray (n_draws, n_rates)
        Mean discharge concentration of each draw [mg/L].
    threshold : float
        t [mg/L], e.g. margin x limit.
    log_sd : float
        Spread of the statistic around the mean (:attr:`Statistic.log_sd`); 0 judges the mean.
    sample_probability : float
        beta [-]: a draw counts when P(S > t | its mean) > beta, that is when its mean exceeds
        :func:`~blendq.chemistry.limits.mean_threshold`.

    Returns
    -------
    ndarray (n_rates,)
        The share of draws whose mean exceeds m*(t) [-]; with ``log_sd`` 0, the share whose
        mean exceeds t.
    """
    c = np.asarray(concentration, float)
    with np.errstate(invalid="ignore"):
        return (c > mean_threshold(threshold, log_sd, sample_probability)).mean(0)


def statistic_quantiles(concentration, probs, log_sd: float, iterations: int = 100) -> np.ndarray:
    """Quantiles of the predictive distribution of the judged statistic at each rate.

    The distribution is the mixture over draws of S = m_d F (F lognormal with mean 1 and
    ``log_sd``); its CDF is the average of the lognormal CDFs, F(x) = mean_d Phi((x - mu_d) /
    s) in x = ln S, inverted by Newton's method kept inside a bracket of the root (a bisection
    step wherever Newton's would leave the bracket or shrink it too slowly; Press et al. 2007,
    section 9.4, ``rtsafe``) until the step or the bracket is below 1e-14 (1 + |x|).

    Parameters
    ----------
    concentration : ndarray (n_draws, n_rates)
        Mean discharge concentration of each draw [mg/L] (NaN where nothing is pumped).
    probs : sequence of float
    log_sd : float
    iterations : int
        Most steps per quantile (a bisection step at least every second step halves the
        bracket, so 100 reach the rounding of x from any bracket).

    Returns
    -------
    ndarray (n_probs, n_rates) [mg/L]; NaN at a rate whose draws are all NaN.

    References
    ----------
    Press, W.H., Teukolsky, S.A., Vetterling, W.T. and Flannery, B.P. (2007) Numerical
    Recipes, 3rd ed. Cambridge University Press, section 9.4.
    """
    from scipy.special import ndtr, ndtri

    c = np.asarray(concentration, float)
    probs = np.asarray(probs, float)
    if log_sd <= 0:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return np.nanquantile(c, probs, axis=0)
    s = float(log_sd)
    valid = np.isfinite(c)
    n = valid.sum(0)
    pos = valid & (c > 0)
    n_zero = (valid & ~pos).sum(0)
    with np.errstate(divide="ignore", invalid="ignore"):
        # mu_d = ln m_d - s^2 / 2; +inf for a draw of zero or NaN (its CDF term is 0 or left out)
        mu = np.where(pos, np.log(np.where(pos, c, 1.0)) - 0.5 * s * s, np.inf)
    zero_frac = np.where(n > 0, n_zero / np.maximum(n, 1), np.nan)
    n_pos = pos.sum(0)
    mu_sorted = np.sort(mu, axis=0).T.copy()  # (n_rates, n_draws), the finite values first
    n_r = c.shape[1]
    out = np.full((len(probs), n_r), np.nan)
    with np.errstate(invalid="ignore"):
        out[(zero_frac[None, :] >= probs[:, None]) & (n[None, :] > 0)] = 0.0
    # the quantiles to solve: rates with a positive draw whose zeros stay below the probability
    k_prob, k_rate = np.nonzero((n_pos[None, :] > 0) & ~(zero_frac[None, :] >= probs[:, None]))
    if not len(k_rate):
        return out
    p = probs[k_prob]
    rows = mu_sorted[k_rate]
    npos = n_pos[k_rate]
    lo = rows[:, 0] - 9 * s
    hi = rows[np.arange(len(k_rate)), npos - 1] + 9 * s
    # start: the quantile of mu among the positive draws, moved by the lognormal's own
    pp = np.clip((p - zero_frac[k_rate]) / (1.0 - zero_frac[k_rate]), 0.0, 1.0)
    start = rows[np.arange(len(k_rate)), np.minimum((pp * npos).astype(int), npos - 1)]
    x = np.clip(start + s * ndtri(np.clip(pp, 1e-6, 1 - 1e-6)), lo, hi)
    zeros = n_zero[k_rate]
    count = n[k_rate]
    step_old = hi - lo
    step = step_old.copy()
    todo = np.arange(len(k_rate))
    for _ in range(iterations):
        z = (x[todo, None] - rows[todo]) / s
        cdf = (ndtr(z).sum(1) + zeros[todo]) / count[todo]
        pdf = np.exp(-0.5 * z * z).sum(1) / (count[todo] * s * np.sqrt(2 * np.pi))
        f = cdf - p[todo]
        below = f < 0
        lo[todo] = np.where(below, x[todo], lo[todo])
        hi[todo] = np.where(below, hi[todo], x[todo])
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = x[todo] - f / pdf
        tol = 1e-14 * (1.0 + np.abs(x[todo]))
        # a Newton step below the tolerance ends the iteration even where rounding puts it on
        # the bracket's end
        small = np.abs(newton - x[todo]) <= tol
        bisect = ~(small | ((newton > lo[todo]) & (newton < hi[todo]))) \
            | (np.abs(2.0 * f) > np.abs(step_old[todo] * pdf))
        step_old[todo] = step[todo]
        x_new = np.where(bisect, 0.5 * (lo[todo] + hi[todo]), newton)
        step[todo] = np.abs(x_new - x[todo])
        x[todo] = x_new
        done = (step[todo] <= tol) | (hi[todo] - lo[todo] <= tol)
        todo = todo[~done]
        if not len(todo):
            break
    out[k_prob, k_rate] = np.exp(x)
    return out


def _sample_probability(statistics: dict[str, Statistic] | None) -> float:
    """beta of the project (every statistic carries the same setting)."""
    return next(iter(statistics.values())).sample_probability if statistics else 0.05


def rule_log_sd(rule: RatioRule, statistics: dict[str, Statistic] | None) -> float:
    """Spread of a ratio rule's sum: the largest of its terms' (each term judged on its own
    limit's basis with its analyte's temporal CV and lab error). Taking one common factor for
    every term treats them as varying together, which gives the sum its largest spread."""
    if not statistics:
        return 0.0
    sds = [term.compliance.log_sd(statistics[term.analyte].temporal_cv,
                                  statistics[term.analyte].lab_cv)
           for term in rule.terms if term.analyte in statistics]
    return max(sds, default=0.0)


def operating_window(pred: Prediction, limits: dict[str, Limit], margin: float, alpha: float,
                     intake_depth: float, submergence: float, rate_min: float, rate_max: float,
                     demand: float | None = None, top_of_screen: float | None = None,
                     level_quantile: float | None = None, level_deep=None,
                     ratio_rules=(), extra_criteria=(),
                     statistics: dict[str, Statistic] | None = None,
                     headroom: float = 0.0, keep_above=(), zone_top=None,
                     zone_names=None) -> Window:
    """Find the rates that meet every quality and hydraulic criterion.

    Parameters
    ----------
    pred : Prediction
    limits : dict analyte -> Limit
    margin : float
        Fraction of each limit to stay under.
    alpha : float
        Largest acceptable probability of exceeding margin x limit.
    intake_depth, submergence : float [m]
        The pumping level must stay above intake_depth - submergence.
    rate_min, rate_max : float [m^3/d]
        The pump's range.
    demand : float, optional [m^3/d]
    top_of_screen : float, optional [m]
        If given, the pumping level must also stay above it.
    level_quantile : float, optional
        Quantile of the pumping-level draws to test (default 1 - alpha: the deep side).
    level_deep : array_like (n_rates,), optional
        Deep-side pumping level [m depth] from another source (the step-drawdown fit) to use
        instead of the zone model's draws.
    ratio_rules : sequence of RatioRule
        Combined rules (sum of concentration / value <= 1, WHO and EU nitrate-nitrite); each is
        tested like an analyte: P(sum > margin) <= alpha. Rules whose analytes are not all
        predicted are left out (see :func:`applicable_ratio_rules`).
    extra_criteria : sequence of Criterion
        Further conditions on the same rate grid (see :func:`measured_exceedances`).
    statistics : dict analyte -> Statistic, optional
        The statistic each limit is judged on (:func:`compliance_statistics`); a draw counts
        against a rate when its statistic exceeds margin x limit in more than beta of samples
        (:func:`exceedance`). An analyte without one is judged on the mean (the share of draws
        whose mean exceeds).
    headroom : float
        Relative distance [-] the recommended rate keeps from every end of the window
        (:func:`recommended_rate`).
    keep_above : sequence of (str, float)
        Zones the pumping level must stay above (``zones[i].keep_level_above``): name and top
        depth [m]; each is a hard limit like the intake's.
    zone_top, zone_names : array_like, list of str, optional
        Zone tops [m depth] and names, to flag the zones water cascades from
        (:func:`cascading_zones`).
    """
    rates = pred.rates
    statistics = statistics or {}
    crit = []
    for j, analyte in enumerate(pred.analytes):
        if analyte not in limits:
            continue
        thr = margin * limits[analyte].canonical()
        st = statistics.get(analyte)
        p_exc = exceedance(pred.concentration[:, :, j], thr, st.log_sd if st else 0.0,
                           st.sample_probability if st else 0.05)
        crit.append(Criterion(f"{analyte} (P > {margin:g} x limit above {alpha:g})",
                              p_exc <= alpha, "quality"))
    for rule in ratio_rules:
        total = sum(pred.concentration[:, :, pred.analytes.index(t.analyte)] / t.canonical()
                    for t in rule.terms)
        p_exc = exceedance(total, margin, rule_log_sd(rule, statistics),
                           _sample_probability(statistics))
        crit.append(Criterion(f"{rule.authority} {rule.name} (P > {margin:g} above {alpha:g})",
                              p_exc <= alpha, "quality"))
    crit.extend(extra_criteria)
    lq = 1 - alpha if level_quantile is None else level_quantile
    if level_deep is not None:
        level = np.asarray(level_deep, float)
    else:
        level = np.quantile(pred.pumping_level, lq, axis=0)
    crit.append(Criterion("pumping level above intake + submergence",
                          level <= intake_depth - submergence, "hydraulic"))
    if top_of_screen is not None:
        crit.append(Criterion("pumping level above top of screen", level <= top_of_screen,
                              "hydraulic"))
    for name, top in keep_above:
        crit.append(Criterion(f"pumping level above top of {name}", level <= top, "hydraulic"))
    crit.append(Criterion("pump rate range", (rates >= rate_min) & (rates <= rate_max), "pump"))
    ok = np.logical_and.reduce([c.ok for c in crit]) & (rates > 0)
    intervals = []
    k = 0
    n = len(rates)
    while k < n:
        if not ok[k]:
            k += 1
            continue
        j = k
        while j + 1 < n and ok[j + 1]:
            j += 1
        low_reason = _binding(crit, k - 1) if k > 0 else "lowest rate of the sweep"
        if k > 0 and rates[k - 1] == 0 and low_reason == "":
            low_reason = "zero rate"
        high_reason = _binding(crit, j + 1) if j + 1 < n else "highest rate of the sweep"
        intervals.append((float(rates[k]), float(rates[j]), low_reason or "zero rate", high_reason))
        k = j + 1
    recommended, kept = recommended_rate(rates, ok, demand, headroom)
    reason = "" if intervals else _why_empty(crit, rates)
    cascading = [] if zone_top is None else cascading_zones(pred, zone_top, zone_names, alpha,
                                                           ok)
    return Window(rates, ok, intervals, recommended, reason, crit, demand or None,
                  float(headroom), kept, cascading)


def recommended_rate(rates, ok, demand: float | None = None,
                     headroom: float = 0.0) -> tuple[float | None, bool]:
    """The recommended rate of a window and whether it keeps the headroom.

    A rate r keeps the headroom when r (1 - headroom) and r (1 + headroom) both lie within its
    compliant interval (between the interval's lowest and highest compliant grid rates), so
    that the rate can drift by that fraction (meter error, pump wear, a falling water table)
    without leaving the window. The recommended rate is the largest such rate not above the
    demand (the smallest when none is below it; the largest of all when no demand is given).
    When no rate keeps the headroom, it is the middle of the compliant interval nearest the
    demand (or of the widest) and the headroom is reported as not kept.

    Parameters
    ----------
    rates : ndarray (n_rates,) [m^3/d]
        Rising rate grid.
    ok : ndarray of bool (n_rates,)
        Rates meeting every criterion.
    demand : float, optional [m^3/d]
    headroom : float
        Relative distance [-] from every end of the window (``settings.recommended_headroom``;
        common practice 0.05).

    Returns
    -------
    (float or None, bool)
        The rate [m^3/d] (None when nothing complies) and whether it keeps the headroom.
    """
    rates = np.asarray(rates, float)
    ok = np.asarray(ok, bool) & (rates > 0)
    if not ok.any():
        return None, True
    edges = np.flatnonzero(np.diff(np.r_[0, ok.astype(int), 0]))
    spans = [(rates[a], rates[b - 1]) for a, b in zip(edges[::2], edges[1::2], strict=True)]
    inside = np.zeros_like(ok)
    tol = 1e-12
    for lo, hi in spans:
        inside |= (ok & (rates >= lo) & (rates <= hi)
                   & (rates * (1 - headroom) >= lo * (1 - tol))
                   & (rates * (1 + headroom) <= hi * (1 + tol)))
    if inside.any():
        good = rates[inside]
        if demand and np.any(good <= demand):
            return float(good[good <= demand].max()), True
        if demand:
            return float(good.min()), True
        return float(good.max()), True
    # the window is narrower than the headroom: the middle of the interval nearest the demand
    if demand:
        lo, hi = min(spans, key=lambda s: 0.0 if s[0] <= demand <= s[1]
                     else min(abs(s[0] - demand), abs(s[1] - demand)))
    else:
        lo, hi = max(spans, key=lambda s: s[1] - s[0])
    middle = 0.5 * (lo + hi)
    compliant = rates[ok]
    return float(compliant[np.argmin(np.abs(compliant - middle))]), False


def _binding(crit: list[Criterion], k: int) -> str:
    names = [c.name for c in crit if not c.ok[k]]
    return "; ".join(names)


def _why_empty(crit: list[Criterion], rates) -> str:
    parts = []
    for c in crit:
        if not np.any(c.ok & (rates > 0)):
            parts.append(f"{c.name} fails at every rate")
    if not parts:
        parts.append("no rate meets all criteria at once: " + ", ".join(
            c.name for c in crit if not np.all(c.ok[rates > 0])))
    return "; ".join(parts)


def applicable_ratio_rules(limit_sets, analytes, limits=()) -> tuple[list, list[str]]:
    """Ratio rules of the project's limit sets whose analytes are all predicted, and a note for
    each rule left out; with the project's ``limits``, also each nitrate+nitrite limit applied
    to the sum of separate nitrate and nitrite results
    (:func:`blendq.chemistry.limits.species_sum_rules`), with a note saying so."""
    from blendq.chemistry.limits import RATIO_RULES, species_sum_rules

    rules, notes = [], []
    for rule in species_sum_rules(limits, analytes):
        rules.append(rule)
        notes.append(f"{rule.authority} nitrate+nitrite limit applied to the sum of the separate "
                     f"nitrate and nitrite results as N: {rule.name}")
    for name in limit_sets:
        for rule in RATIO_RULES.get(name, []):
            missing = [t.analyte for t in rule.terms if t.analyte not in analytes]
            if missing:
                notes.append(f"{rule.authority} rule {rule.name} not applied: no prediction of "
                             f"{', '.join(missing)}")
            else:
                rules.append(rule)
    return rules, notes


def measured_exceedances(fit: FitResult, limits: dict[str, Limit], margin: float,
                         rates, tolerance: float | None = None) -> list[Criterion]:
    """Rates at which a discharge sample measured above margin x limit.

    A measurement speaks for the rate at which it was taken, within that rate's own tolerance
    (a step's rate is held and metered to within a few percent): the rates within
    ``tolerance`` x the step's rate of it fail, whatever the fitted blend says there, and so do
    the two grid rates that bracket the step's rate, so that the measured rate can never lie
    inside a reported window. Every other rate is judged by the model, which is fitted to the
    same sample (docs/methods.md, section 8; common practice).

    Parameters
    ----------
    fit : FitResult
    limits : dict analyte -> Limit
    margin : float
        Fraction of each limit [-].
    rates : array_like (n_rates,)
        Rate grid [m^3/d].
    tolerance : float, optional
        Relative band around the step's rate [-] (default:
        ``settings.measured_exceedance_rate_tolerance``).

    Returns
    -------
    list of Criterion
        One "quality" criterion per analyte with a measured exceedance.
    """
    rates = np.asarray(rates, float)
    if tolerance is None:
        tolerance = fit.problem.project.settings.measured_exceedance_rate_tolerance
    out = []
    for analyte, d in fit.problem.data.items():
        if analyte not in limits:
            continue
        thr = margin * limits[analyte].canonical()
        above = ~np.isfinite(d.depth) & (d.value > thr)  # discharge samples only
        if not above.any():
            continue
        ok = np.ones(len(rates), bool)
        for q in np.unique(d.rate[above]):
            ok &= np.abs(rates - q) > tolerance * q
            below, beyond = rates[rates <= q], rates[rates >= q]
            if len(below):
                ok &= rates != below.max()
            if len(beyond):
                ok &= rates != beyond.min()
        steps = ", ".join(sorted(set(d.step[above].astype(str))))
        out.append(Criterion(f"{analyte} measured above {margin:g} x limit (step {steps})", ok,
                             "quality"))
    return out


def window_for(fit: FitResult, pred: Prediction, margin: float | None = None,
               alpha: float | None = None, level_deep=None) -> Window:
    """The operating window of a fitted project with its own settings."""
    project = fit.problem.project
    s = project.settings
    w = project.well
    limits = governing_limits(project.limits, pred.analytes)
    statistics = compliance_statistics(project, limits)
    return operating_window(
        pred, limits, s.margin if margin is None else margin,
        s.exceedance_probability if alpha is None else alpha,
        w.operating_intake, w.submergence, w.rate_min, w.rate_max, w.demand,
        float(project.zone_top.min()) if w.keep_above_screen else None, level_deep=level_deep,
        ratio_rules=applicable_ratio_rules(s.limit_sets, pred.analytes, project.limits)[0],
        extra_criteria=measured_exceedances(fit, limits, s.margin if margin is None else margin,
                                            pred.rates),
        statistics=statistics, headroom=s.recommended_headroom,
        keep_above=[(z.name, z.top) for z in project.zones if z.keep_level_above],
        zone_top=project.zone_top, zone_names=project.zone_names)


def sweep_table(pred: Prediction, limits: dict[str, Limit], margin: float, interval: float,
                zone_names: list[str],
                statistics: dict[str, Statistic] | None = None,
                zone_top=None) -> pd.DataFrame:
    """A long-format table of the sweep: one row per rate (base units).

    Columns: per analyte the median and band of the mean concentration (``<a>_median``,
    ``<a>_lower``, ``<a>_upper``); where a limit applies, the posterior probability that the
    judged statistic exceeds margin x limit (and the limit) in more than beta of samples
    (:func:`exceedance`; ``<a>_p_exceed_margin``,
    ``<a>_p_exceed_limit``), and, when ``statistics`` are given, the band of the judged
    statistic (``<a>_statistic_lower``, ``<a>_statistic_upper``); the pumping level; the
    median share of each zone; with ``zone_top`` [m depth], the share of draws in which water
    cascades from each zone (``cascading_<zone>``, :func:`cascade_probability`).
    """
    q = [(1 - interval) / 2, 0.5, 1 - (1 - interval) / 2]
    cq = pred.quantiles(q)
    statistics = statistics or {}
    data = {"rate": pred.rates}
    for j, a in enumerate(pred.analytes):
        data[f"{a}_median"] = cq[1, :, j]
        data[f"{a}_lower"] = cq[0, :, j]
        data[f"{a}_upper"] = cq[2, :, j]
        if a in limits:
            sd = statistics[a].log_sd if a in statistics else 0.0
            beta = statistics[a].sample_probability if a in statistics else 0.05
            c = pred.concentration[:, :, j]
            data[f"{a}_p_exceed_margin"] = exceedance(c, margin * limits[a].canonical(), sd,
                                                      beta)
            data[f"{a}_p_exceed_limit"] = exceedance(c, limits[a].canonical(), sd, beta)
            if a in statistics:
                sq = statistic_quantiles(c, [q[0], q[2]], sd)
                data[f"{a}_statistic_lower"], data[f"{a}_statistic_upper"] = sq[0], sq[1]
    lq = np.quantile(pred.pumping_level, q, axis=0)
    data["pumping_level_median"] = lq[1]
    data["pumping_level_deep"] = lq[2]
    with warnings.catch_warnings():  # rates where nothing is pumped stay NaN
        warnings.simplefilter("ignore", RuntimeWarning)
        share = np.nanmedian(pred.shares, axis=0)
    for i, z in enumerate(zone_names):
        data[f"share_{z}"] = share[:, i]
    if zone_top is not None:
        cascade = cascade_probability(pred, zone_top)
        for i, z in enumerate(zone_names):
            data[f"cascading_{z}"] = cascade[:, i]
    return pd.DataFrame(data)
