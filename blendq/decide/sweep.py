"""Rate sweep and operating window (docs/methods.md, section 8).

For a grid of rates: predicted discharge concentration per analyte with its band, the
probability of exceeding margin x limit, the pumping level and each zone's share. The window is
the set of rates where, for every analyte, P(C > margin x limit) <= alpha, the pumping level
stays above the pump intake plus the required submergence (and, if asked, above the top of the
uppermost zone), within the pump's rate range. It may be several intervals.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from blendq.chemistry.limits import Limit
from blendq.fit.estimation import FitResult
from blendq.fit.uncertainty import Draws, Prediction, predict
from blendq.well.model import elapsed_test_time, horizon_factor


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
        Largest compliant rate not above the demand (or the compliant rate nearest the demand).
    reason_empty : str
        Why there is no window (empty string when there is one).
    criteria : list of Criterion
    """

    rates: np.ndarray
    ok: np.ndarray
    intervals: list[tuple[float, float, str, str]]
    recommended: float | None
    reason_empty: str
    criteria: list[Criterion] = field(default_factory=list)

    @property
    def empty(self) -> bool:
        return not self.intervals


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
    """Predictions over the rate grid at the operating horizon (conductances scaled by
    Cooper-Jacob from the test duration to the horizon where storativity is known)."""
    project = fit.problem.project
    rates = rate_grid(fit) if rates is None else np.asarray(rates, float)
    horizon = project.settings.horizon if horizon is None else horizon
    factor = horizon_factor(project, elapsed_test_time(project), horizon)
    return predict(fit, draws, rates, conductance_factor=factor, changes=changes)


def governing_limits(limits: list[Limit], analytes: list[str]) -> dict[str, Limit]:
    """For each analyte, the strictest applicable limit (lowest canonical value)."""
    out = {}
    for lim in limits:
        if lim.analyte in analytes:
            if lim.analyte not in out or lim.canonical() < out[lim.analyte].canonical():
                out[lim.analyte] = lim
    return out


def operating_window(pred: Prediction, limits: dict[str, Limit], margin: float, alpha: float,
                     intake_depth: float, submergence: float, rate_min: float, rate_max: float,
                     demand: float | None = None, top_of_screen: float | None = None,
                     level_quantile: float | None = None, level_deep=None,
                     ratio_rules=(), extra_criteria=()) -> Window:
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
    """
    rates = pred.rates
    crit = []
    for j, analyte in enumerate(pred.analytes):
        if analyte not in limits:
            continue
        thr = margin * limits[analyte].canonical()
        p_exc = (pred.concentration[:, :, j] > thr).mean(0)
        crit.append(Criterion(f"{analyte} (P > {margin:g} x limit above {alpha:g})",
                              p_exc <= alpha, "quality"))
    for rule in ratio_rules:
        total = sum(pred.concentration[:, :, pred.analytes.index(t.analyte)] / t.canonical()
                    for t in rule.terms)
        crit.append(Criterion(f"{rule.authority} {rule.name} (P > {margin:g} above {alpha:g})",
                              (total > margin).mean(0) <= alpha, "quality"))
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
    recommended = None
    if intervals:
        good = rates[ok]
        if demand is not None and np.any(good <= demand):
            recommended = float(good[good <= demand].max())
        elif demand is not None:
            recommended = float(good[np.argmin(np.abs(good - demand))])
        else:
            recommended = float(good.max())
    reason = "" if intervals else _why_empty(crit, rates)
    return Window(rates, ok, intervals, recommended, reason, crit)


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


def applicable_ratio_rules(limit_sets, analytes) -> tuple[list, list[str]]:
    """Ratio rules of the project's limit sets whose analytes are all predicted, and a note for
    each rule left out."""
    from blendq.chemistry.limits import RATIO_RULES

    rules, notes = [], []
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
    return operating_window(
        pred, limits, s.margin if margin is None else margin,
        s.exceedance_probability if alpha is None else alpha,
        w.pump_intake_depth, w.submergence, w.rate_min, w.rate_max, w.demand,
        float(project.zone_top.min()) if w.keep_above_screen else None, level_deep=level_deep,
        ratio_rules=applicable_ratio_rules(s.limit_sets, pred.analytes)[0],
        extra_criteria=measured_exceedances(fit, limits, s.margin if margin is None else margin,
                                            pred.rates))


def sweep_table(pred: Prediction, limits: dict[str, Limit], margin: float, interval: float,
                zone_names: list[str]) -> pd.DataFrame:
    """A long-format table of the sweep: one row per rate with median and band per analyte,
    exceedance probabilities, pumping level and zone shares (base units)."""
    q = [(1 - interval) / 2, 0.5, 1 - (1 - interval) / 2]
    cq = pred.quantiles(q)
    data = {"rate": pred.rates}
    for j, a in enumerate(pred.analytes):
        data[f"{a}_median"] = cq[1, :, j]
        data[f"{a}_lower"] = cq[0, :, j]
        data[f"{a}_upper"] = cq[2, :, j]
        if a in limits:
            data[f"{a}_p_exceed_margin"] = (pred.concentration[:, :, j] > margin * limits[a].canonical()).mean(0)
            data[f"{a}_p_exceed_limit"] = (pred.concentration[:, :, j] > limits[a].canonical()).mean(0)
    lq = np.quantile(pred.pumping_level, q, axis=0)
    data["pumping_level_median"] = lq[1]
    data["pumping_level_deep"] = lq[2]
    with warnings.catch_warnings():  # rates where nothing is pumped stay NaN
        warnings.simplefilter("ignore", RuntimeWarning)
        share = np.nanmedian(pred.shares, axis=0)
    for i, z in enumerate(zone_names):
        data[f"share_{z}"] = share[:, i]
    return pd.DataFrame(data)
