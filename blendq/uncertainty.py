"""Uncertainty of the zone estimates and of predicted discharge quality.

Two views, both propagated to predictions at any rate:

* linearised: the covariance of the hydraulic parameters from the Jacobian at the optimum,
  (J^T J)^-1, and of the zone values from the weighted normal equations plus the hydraulic part
  through the sensitivity dc/dtheta;
* Monte Carlo: every whitened residual (lab results, flow-log readings, pumping levels, prior
  values) is perturbed by a standard normal draw; the hydraulic parameters are refitted by one
  Gauss-Newton step from the optimum (theta_d = theta* + J^+ e_d, exact for a linear model and
  the usual linearisation otherwise) and the zone values are refitted exactly, bounds and
  censoring included, for all draws at once (:func:`blendq.qp.solve_censored_lsq_batch`).
  Draws are seeded and reproducible.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from blendq import qp
from blendq.estimation import FitResult, Problem, row_weights, scaled_pinv, solve_concentrations


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
    model = fit.problem.model(draws.theta)
    if conductance_factor is not None:
        model = model.with_changes(conductance=model.conductance * np.asarray(conductance_factor))
    if changes is not None:
        model = changes(model)
    state = model.state(rates)
    from blendq.mixing import discharge_weights

    # NaN where no water reaches the intake (zero rate): nothing is pumped, nothing to predict
    shares = discharge_weights(state.zone_flow, model.geometry)
    conc = np.einsum("brn,bna->bra", shares, draws.zone_values)
    level = model.pumping_level_depth(rates, state)
    return Prediction(rates, conc, level, shares, state.zone_flow, list(draws.analytes))
