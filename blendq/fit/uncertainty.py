"""Uncertainty of the zone estimates and of predicted discharge quality.

Two views, both propagated to predictions at any rate:

* linearised: the covariance of the hydraulic parameters from the Jacobian at the optimum,
  (J^T J)^-1, and of the zone values from the weighted normal equations plus the hydraulic part
  through the sensitivity dc/dtheta;
* Monte Carlo: every whitened residual (lab results, flow-log readings, pumping levels, prior
  values) is perturbed by a standard normal draw; the hydraulic parameters are refitted by one
  Gauss-Newton step from the optimum (theta_d = theta* + J^+ e_d, exact for a linear model and
  the usual linearisation otherwise) and the zone values are refitted exactly, bounds and
  censoring included, for all draws at once (:func:`blendq.fit.constrained_lsq.solve_censored_lsq_batch`).
  Draws are seeded and reproducible.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from blendq.chemistry.limits import exceedance_given_mean
from blendq.errors import ModelError
from blendq.fit import constrained_lsq as qp
from blendq.fit.estimation import FitResult, Problem, row_weights, scaled_pinv, solve_concentrations
from blendq.well.mixing import intake_weights, intake_weights_by_zone


def residual_layout(problem: Problem) -> dict[str, slice]:
    """Slices of the whitened residual vector holding each analyte's detected results."""
    p = problem.prior
    start = int(np.isfinite(p.log_conductance_sd).sum() + np.isfinite(p.static_head_sd).sum())
    start += len(problem.log_rows) + len(problem.level_rate)
    out = {}
    for analyte, d in problem.data.items():
        out[analyte] = slice(start, start + len(d.value))
        start += len(d.value) + (len(d.cens_limit) if len(d.cens_limit) else 0)
    return out


@dataclass(frozen=True)
class Draws:
    """Monte Carlo draws of the fitted quantities.

    Attributes
    ----------
    theta : ndarray (n_draws, n_theta)
        Hydraulic parameters.
    zone_values : ndarray (n_draws, n_zones, n_analytes)
        Zone values [mg/L].
    analytes : list of str
    seed : int
    """

    theta: np.ndarray
    zone_values: np.ndarray
    analytes: list[str]
    seed: int

    @property
    def n_draws(self) -> int:
        return self.theta.shape[0]


def monte_carlo(fit: FitResult, n_draws: int = 1000, seed: int = 0,
                progress: Callable[[int, int], None] | None = None,
                chunk: int = 250) -> Draws:
    """Seeded Monte Carlo refit of perturbed data.

    Parameters
    ----------
    fit : FitResult
    n_draws : int
    seed : int
    progress : callable(done, total), optional
        Called after each chunk of draws (the CLI shows a progress bar).
    chunk : int
        Draws solved together.
    """
    problem = fit.problem
    rng = np.random.default_rng(seed)
    jac = fit.jacobian
    m = jac.shape[0]
    eps = rng.standard_normal((n_draws, m))
    if problem.options.fit_hydraulics and jac.size:
        jplus = scaled_pinv(jac)
        theta = fit.theta[None, :] + eps @ jplus.T
    else:
        theta = np.repeat(fit.theta[None, :], n_draws, axis=0)
    layout = residual_layout(problem)
    n = problem.n_zones
    out = np.empty((n_draws, n, len(fit.analytes)))
    for lo in range(0, n_draws, chunk):
        hi = min(lo + chunk, n_draws)
        model = problem.model(theta[lo:hi])
        for j, analyte in enumerate(fit.analytes):
            d = problem.data[analyte]
            a = row_weights(model, d.rate, d.depth)
            y = d.value[None, :] + d.sigma[None, :] * eps[lo:hi, layout[analyte]]
            lb, ub = problem.bounds(analyte)
            if len(d.cens_limit):
                ac = row_weights(model, d.cens_rate, d.cens_depth)
                out[lo:hi, :, j] = qp.solve_censored_lsq_batch(a, y, d.sigma, lb, ub, ac,
                                                               d.cens_limit)
            else:
                out[lo:hi, :, j] = qp.solve_censored_lsq_batch(a, y, d.sigma, lb, ub)
        if progress is not None:
            progress(hi, n_draws)
    return Draws(theta, out, list(fit.analytes), seed)


def linearised_zone_sd(fit: FitResult) -> np.ndarray:
    """Linearised standard deviation of each zone value, shape (n_zones, n_analytes) [mg/L].

    Notes
    -----
    Var(c) = (A^T W^2 A)^+ + S Cov(theta) S^T with S = dc/dtheta by forward differences.
    Bounds and censoring are ignored here (the Monte Carlo honours them).
    """
    problem = fit.problem
    out = np.zeros((problem.n_zones, len(fit.analytes)))
    for j, analyte in enumerate(fit.analytes):
        d = problem.data[analyte]
        c0, a, _ = solve_concentrations(problem, fit.model, analyte)
        wa = a / d.sigma[:, None]
        cov = np.linalg.pinv(wa.T @ wa, rcond=1e-10)
        if problem.options.fit_hydraulics and fit.theta_cov.size:
            sens = np.empty((len(c0), len(fit.theta)))
            for k in range(len(fit.theta)):
                t = fit.theta.copy()
                step = 1e-6 * max(1.0, abs(t[k]))
                t[k] += step
                ck, _, _ = solve_concentrations(problem, problem.model(t), analyte)
                sens[:, k] = (ck - c0) / step
            cov = cov + sens @ fit.theta_cov @ sens.T
        out[:, j] = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    return out


def draws_model(fit: FitResult, draws: Draws, conductance_factor=None,
                changes: Callable | None = None):
    """The well model of every draw (batched), with the horizon factor and a scenario's
    changes applied: what :func:`predict` and :func:`predict_summary` evaluate."""
    model = fit.problem.model(draws.theta)
    if conductance_factor is not None:
        model = model.with_changes(conductance=model.conductance * np.asarray(conductance_factor))
    if changes is not None:
        model = changes(model)
    return model


@dataclass(frozen=True)
class Prediction:
    """Predicted discharge at each rate for every draw.

    Attributes
    ----------
    rates : ndarray (n_rates,) [m^3/d]
    concentration : ndarray (n_draws, n_rates, n_analytes) [mg/L]
    pumping_level : ndarray (n_draws, n_rates) [m depth]
    shares : ndarray (n_draws, n_rates, n_zones) discharge weights [-]
    zone_flow : ndarray (n_draws, n_rates, n_zones) [m^3/d]
    analytes : list of str
    """

    rates: np.ndarray
    concentration: np.ndarray
    pumping_level: np.ndarray
    shares: np.ndarray
    zone_flow: np.ndarray
    analytes: list[str]

    def quantiles(self, probs) -> np.ndarray:
        """Quantiles over draws of the concentration, shape (len(probs), n_rates, n_analytes)."""
        return np.quantile(self.concentration, probs, axis=0)

    def exceedance(self, thresholds) -> np.ndarray:
        """Probability that the concentration exceeds each analyte's threshold, (n_rates, n_analytes)."""
        return (self.concentration > np.asarray(thresholds, float)[None, None, :]).mean(0)


def predict(fit: FitResult, draws: Draws, rates, conductance_factor=None,
            changes: Callable | None = None) -> Prediction:
    """Discharge concentration, pumping level and zone shares at ``rates`` for every draw.

    Parameters
    ----------
    fit : FitResult
    draws : Draws
    rates : array_like (n_rates,) [m^3/d]
    conductance_factor : array_like (n_zones,), optional
        Multiplies every zone conductance (for example G(horizon)/G(test)).
    changes : callable(WellModel) -> WellModel, optional
        Applied to the batched model before prediction (scenarios).
    """
    rates = np.asarray(rates, float)
    model = draws_model(fit, draws, conductance_factor, changes)
    state = model.state(rates)
    # NaN where no water reaches the intake (zero rate): nothing is pumped, nothing to predict
    shares = intake_weights(state.zone_flow, model.geometry)
    conc = np.einsum("brn,bna->bra", shares, draws.zone_values)
    level = model.pumping_level_depth(rates, state)
    return Prediction(rates, conc, level, shares, state.zone_flow, list(draws.analytes))


@dataclass(frozen=True)
class PredictionSummary:
    """Per-rate summaries of a prediction over draws (what a sweep keeps of it).

    Attributes
    ----------
    rates : ndarray (n_rates,) [m^3/d]
    probs : ndarray (n_probs,)
        Probabilities of the quantiles.
    concentration : ndarray (n_probs, n_rates, n_analytes)
        Quantiles over draws of the discharge concentration [mg/L].
    exceedance : ndarray (n_thresholds, n_rates, n_analytes)
        Fraction of draws above each row of thresholds.
    pumping_level : ndarray (n_probs, n_rates)
        Quantiles over draws of the pumping-level depth [m].
    shares : ndarray (n_rates, n_zones) or None
        Median discharge weight of each zone [-] (when asked for).
    analytes : list of str
    """

    rates: np.ndarray
    probs: np.ndarray
    concentration: np.ndarray
    exceedance: np.ndarray
    pumping_level: np.ndarray
    shares: np.ndarray | None
    analytes: list[str]


def predict_summary(fit: FitResult, draws: Draws, rates, probs=(0.05, 0.5, 0.95),
                    thresholds=None, conductance_factor=None, changes: Callable | None = None,
                    shares: bool = False, chunk_points: int = 100_000,
                    log_sd=None) -> PredictionSummary:
    """Quantiles and exceedance probabilities over draws at every rate, in chunks of rates.

    The same numbers as :func:`predict` followed by quantiles over its draws, without holding
    (n_draws, n_rates, n_zones) arrays: the rates are taken a chunk at a time (every draw of a
    rate stays in one chunk, so the quantiles are exact), and the discharge weights come from
    :func:`intake_weights`.

    Parameters
    ----------
    fit : FitResult
    draws : Draws
    rates : array_like (n_rates,) [m^3/d]
    probs : sequence of float
        Quantile probabilities.
    thresholds : array_like (n_thresholds, n_analytes) or (n_analytes,), optional
        Concentrations [mg/L] whose exceedance probability is wanted.
    conductance_factor, changes
        As in :func:`predict`.
    shares : bool
        Also return the median discharge weights.
    chunk_points : int
        Largest number of (draw, rate) points computed at once.
    log_sd : array_like, broadcast to (n_thresholds, n_analytes), optional
        Spread of the judged statistic around the mean concentration
        (:func:`blendq.chemistry.limits.statistic_log_sd`); the exceedance is then the average
        over draws of the lognormal tail P(S > threshold | mean). Default 0: the fraction of
        draws whose mean exceeds.
    """
    rates = np.asarray(rates, float)
    probs = np.asarray(probs, float)
    model = draws_model(fit, draws, conductance_factor, changes)
    n_a = draws.zone_values.shape[-1]
    thr = np.zeros((0, n_a)) if thresholds is None else np.atleast_2d(np.asarray(thresholds, float))
    sd = np.broadcast_to(np.asarray(0.0 if log_sd is None else log_sd, float), thr.shape)
    n_r = len(rates)
    conc_q = np.empty((len(probs), n_r, n_a))
    exc = np.empty((len(thr), n_r, n_a))
    level_q = np.empty((len(probs), n_r))
    share_med = np.empty((n_r, draws.zone_values.shape[1])) if shares else None
    step = max(1, int(chunk_points) // max(draws.n_draws, 1))
    if not shares and not np.any(np.asarray(model.nonlinear_loss) > 0) \
            and np.ndim(model.conductance) == 2:
        # linear zones: closed-form wellbore head, rates by draws, one contiguous array a zone
        g = np.asarray(model.conductance, float)
        h0 = np.broadcast_to(np.asarray(model.static_head, float), g.shape)
        c_well = np.broadcast_to(np.asarray(model.well_loss, float), g.shape[:1])
        g_sum, gh_sum = g.sum(1), (g * h0).sum(1)
        zv = np.asarray(draws.zone_values, float)
        if np.any(g_sum <= 0):
            raise ModelError("no open zone: the sum of zone conductances is zero")
        for lo in range(0, n_r, step):
            r = rates[lo:lo + step, None]
            hw = (gh_sum - r) / g_sum  # (rates, draws)
            flows = [g[:, i] * (h0[:, i] - hw) for i in range(g.shape[1])]
            w = intake_weights_by_zone(flows, model.geometry)
            for a in range(n_a):
                conc = sum(w[i] * zv[:, i, a] for i in range(g.shape[1]))
                conc_q[:, lo:lo + step, a] = np.quantile(conc, probs, axis=1)
                for t in range(len(thr)):
                    exc[t, lo:lo + step, a] = exceedance_given_mean(conc, thr[t, a],
                                                                    sd[t, a]).mean(1)
            level = c_well * r**2 - hw
            level_q[:, lo:lo + step] = np.quantile(level, probs, axis=1)
        return PredictionSummary(rates, probs, conc_q, exc, level_q, None, list(draws.analytes))
    for lo in range(0, n_r, step):
        r = rates[lo:lo + step]
        state = model.state(r)
        w = intake_weights(state.zone_flow, model.geometry)
        conc = np.matmul(w, draws.zone_values)  # (draws, rates, analytes)
        conc_q[:, lo:lo + step] = np.quantile(conc, probs, axis=0)
        for t in range(len(thr)):
            for a in range(n_a):
                exc[t, lo:lo + step, a] = exceedance_given_mean(conc[..., a], thr[t, a],
                                                                sd[t, a]).mean(0)
        level_q[:, lo:lo + step] = np.quantile(model.pumping_level_depth(r, state), probs, axis=0)
        if shares:
            share_med[lo:lo + step] = np.median(w, axis=0)
    return PredictionSummary(rates, probs, conc_q, exc, level_q, share_med, list(draws.analytes))
