"""What the data can and cannot tell: identifiability, data-allowed ranges, residuals.

For each analyte the weighted weight matrix W A at the fitted hydraulics gives the rank and
condition number. A zone whose direction lies in the (numerical) null space of W A, or whose
data-allowed range is unbounded, is *not resolved*: it is reported as the range of values the
data allow, never as one number. The range comes from two linear programmes (scipy
``linprog``): the smallest and largest zone value such that every fitted blend stays within
``z`` standard deviations of its result, every non-detect blend stays at or below its
detection limit, and all zone values stay within their bounds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, special

from blendq.fit.estimation import FitResult, solve_concentrations
from blendq.fit.uncertainty import Draws, linearised_zone_sd

#: relative singular-value threshold below which a direction counts as unseen by the data
NULL_TOL = 1e-6
#: a zone whose interval is wider than this share of its own value is weakly resolved (common
#: practice: a 90 % interval half the value wide is a relative sd of about 15 %)
WEAK_WIDTH_SHARE = 0.5
#: for a zone near zero the width is compared with this share of the analyte's largest zone
#: value instead (so the floor is a tenth of it at WEAK_WIDTH_SHARE = 0.5)
NEAR_ZERO_SHARE = 0.2


def weakly_resolved(width, estimate, largest) -> bool:
    """Whether a zone value the data see is only *weakly resolved*.

    The interval's width is judged against the zone's own value: wider than
    ``WEAK_WIDTH_SHARE`` x max(|estimate|, ``NEAR_ZERO_SHARE`` x largest), i.e. wider than half
    its value, or than a tenth of the analyte's largest zone value for a zone near zero (where
    a share of its own value means nothing). A precision relative to the zone's own value is
    what makes its number usable; judged against the largest zone alone, a zone at 1 mg/L with
    an interval from 0.1 to 8 mg/L would pass as resolved beside a zone at 20 mg/L.

    Parameters
    ----------
    width : float
        Width of the zone's interval [mg/L].
    estimate : float
        The zone's estimate [mg/L].
    largest : float
        Largest absolute zone estimate of the analyte [mg/L].
    """
    return bool(width > WEAK_WIDTH_SHARE * max(abs(estimate), NEAR_ZERO_SHARE * largest))


def null_space_zones(wa: np.ndarray, tol: float = NULL_TOL) -> list[int]:
    """Zones the rows of a weighted weight matrix W A (m, n_zones) do not resolve.

    A zone is not resolved when a direction of the (numerical) null space of W A has a
    component above 0.1 on it, or when no row gives it weight: the rule of :func:`zone_table`.
    """
    n = wa.shape[1]
    if not wa.size:
        return list(range(n))
    _, s, vt = np.linalg.svd(wa, full_matrices=True)
    null = vt[int(np.sum(s > tol * (s[0] if len(s) else 1))):]
    unseen = np.abs(wa).max(0) <= 1e-9 * max(float(np.abs(wa).max()), 1e-300)
    return [i for i in range(n)
            if (null.shape[0] > 0 and np.abs(null[:, i]).max() > 0.1) or unseen[i]]


def data_allowed_range(a, y, sigma, lb, ub, a_cens=None, dl=None, z: float = 2.0):
    """Smallest and largest value of each zone consistent with the data.

    Returns
    -------
    lo, hi : ndarray (n_zones,)
        ``hi`` is ``inf`` where the data put no upper limit on the zone.
    """
    n = a.shape[1]
    a_ub = [a, -a]
    b_ub = [y + z * sigma, -(y - z * sigma)]
    if a_cens is not None and len(a_cens):
        a_ub.append(a_cens)
        b_ub.append(dl)
    a_ub = np.vstack(a_ub)
    b_ub = np.concatenate(b_ub)
    bounds = [(lb[i], ub[i] if np.isfinite(ub[i]) else None) for i in range(n)]
    lo = np.full(n, np.nan)
    hi = np.full(n, np.nan)
    for i in range(n):
        cvec = np.zeros(n)
        cvec[i] = 1.0
        r1 = optimize.linprog(cvec, A_ub=a_ub, b_ub=b_ub, bounds=bounds, method="highs")
        r2 = optimize.linprog(-cvec, A_ub=a_ub, b_ub=b_ub, bounds=bounds, method="highs")
        if r1.status == 0:
            lo[i] = r1.x[i]
        if r2.status == 0:
            hi[i] = r2.x[i]
        elif r2.status == 3:  # unbounded
            hi[i] = np.inf
    return lo, hi


def zone_basis(fit: FitResult) -> list[dict]:
    """What :func:`zone_table` takes from the fit alone (not from the draws), per analyte: the
    zone values, their linearised sd, the data-allowed range, which zones the data cannot see,
    and the analyte's scale. Worked out once when the table is made for several sets of draws
    of one fit."""
    problem = fit.problem
    sd_lin = linearised_zone_sd(fit)
    out = []
    for j, analyte in enumerate(fit.analytes):
        d = problem.data[analyte]
        c, a, ac = solve_concentrations(problem, fit.model, analyte)
        lb, ub = problem.bounds(analyte)
        wa = a / d.sigma[:, None]
        _, s_full, vt = np.linalg.svd(wa, full_matrices=True) if wa.size else (None, [], np.eye(len(c)))
        null = vt[int(np.sum(np.asarray(s_full) > NULL_TOL * (s_full[0] if len(s_full) else 1))):]
        # the residual spread decides how loose "consistent with the data" is
        chi = np.abs(a @ c - d.value) / d.sigma
        z = max(2.0, float(chi.max()) * 1.05 if chi.size else 2.0)
        lo, hi = data_allowed_range(a, d.value, d.sigma, lb, ub, ac if len(ac) else None,
                                    d.cens_limit if len(ac) else None, z=z)
        unseen = [(null.shape[0] > 0 and np.abs(null[:, i]).max() > 0.1)
                  or (a[:, i].max() if a.size else 0.0) <= 1e-9 or not np.isfinite(hi[i])
                  for i in range(len(c))]
        out.append(dict(c=c, sd=sd_lin[:, j], lo=lo, hi=hi, unseen=unseen,
                        scale=max(float(np.nanmax(np.abs(c))), 1e-12)))
    return out


def zone_table(fit: FitResult, draws: Draws, interval: float = 0.90,
               basis: list[dict] | None = None) -> pd.DataFrame:
    """One row per zone and analyte: estimate, sd, interval, verdict and data-allowed range.

    A zone is *weakly resolved* when its interval is wider than half its own value (or than a
    tenth of the analyte's largest zone value, for zones near zero; :func:`weakly_resolved`),
    *resolved* otherwise.
    The data-allowed range is computed at the fitted hydraulics; the interval also carries the
    hydraulic uncertainty, so the two need not nest.

    Columns: zone, analyte, estimate, sd, lower, upper, verdict, range_low, range_high
    (concentrations in mg/L on the analyte's canonical basis). ``estimate``, ``sd``, ``lower``
    and ``upper`` are NaN for a zone the data do not resolve. ``basis``: :func:`zone_basis` of
    the same fit, when the caller has it already.
    """
    basis = zone_basis(fit) if basis is None else basis
    q = [(1 - interval) / 2, 1 - (1 - interval) / 2]
    rows = []
    for j, analyte in enumerate(fit.analytes):
        b = basis[j]
        c = b["c"]
        lower, upper = np.quantile(draws.zone_values[:, :, j], q, axis=0)
        for i, zone in enumerate(fit.zone_names):
            if b["unseen"][i]:
                verdict = "not resolved"
            elif weakly_resolved(upper[i] - lower[i], c[i], b["scale"]):
                verdict = "weakly resolved"
            else:
                verdict = "resolved"
            shown = verdict != "not resolved"
            rows.append(dict(zone=zone, analyte=analyte,
                             estimate=c[i] if shown else np.nan,
                             sd=b["sd"][i] if shown else np.nan,
                             lower=lower[i] if shown else np.nan,
                             upper=upper[i] if shown else np.nan,
                             verdict=verdict, range_low=b["lo"][i], range_high=b["hi"][i]))
    return pd.DataFrame(rows)


def analyte_diagnostics(fit: FitResult) -> pd.DataFrame:
    """Per analyte: results used, non-detects, rank and condition number of W A, chi-square."""
    problem = fit.problem
    rows = []
    for analyte in fit.analytes:
        d = problem.data[analyte]
        c, a, ac = solve_concentrations(problem, fit.model, analyte)
        wa = a / d.sigma[:, None]
        sv = np.linalg.svd(wa, compute_uv=False) if wa.size else np.zeros(0)
        rank = int(np.sum(sv > NULL_TOL * sv[0])) if len(sv) else 0
        cond = float(sv[0] / sv[-1]) if len(sv) and sv[-1] > 0 else np.inf
        r = (a @ c - d.value) / d.sigma
        rows.append(dict(analyte=analyte, results=len(d.value), nondetects=len(d.cens_limit),
                         zones=problem.n_zones, rank=rank, condition=cond,
                         chi_square=float(r @ r), dof=max(len(d.value) - rank, 0)))
    return pd.DataFrame(rows)


def residual_table(fit: FitResult, outlier_z: float | None = None) -> pd.DataFrame:
    """One row per lab result: observed, fitted, sigma, standardised residual, outlier flag.

    Non-detects show the detection limit as ``observed`` and are flagged when the fitted blend
    exceeds it.
    """
    z_out = fit.problem.options.outlier_z if outlier_z is None else outlier_z
    rows = []
    for analyte in fit.analytes:
        d = fit.problem.data[analyte]
        c, a, ac = solve_concentrations(fit.problem, fit.model, analyte)
        fitted = a @ c
        for k in range(len(d.value)):
            z = (d.value[k] - fitted[k]) / d.sigma[k]
            rows.append(dict(sample_id=d.sample_id[k], step=d.step[k], analyte=analyte,
                             depth=d.depth[k], observed=d.value[k], fitted=fitted[k],
                             sigma=d.sigma[k], standardised=z, nondetect=False,
                             outlier=bool(abs(z) > z_out)))
        if len(ac):
            fc = ac @ c
            for k in range(len(d.cens_limit)):
                rows.append(dict(sample_id=d.cens_sample_id[k], step=d.cens_step[k],
                                 analyte=analyte, depth=d.cens_depth[k],
                                 observed=d.cens_limit[k], fitted=fc[k], sigma=np.nan,
                                 standardised=np.nan, nondetect=True,
                                 outlier=bool(fc[k] > d.cens_limit[k] * (1 + 1e-6))))
    return pd.DataFrame(rows)


def hydraulics_table(fit: FitResult) -> pd.DataFrame:
    """Fitted zone conductances and heads with sd, prior and whether the data informed them.

    A parameter counts as informed by the data when its posterior sd is below 70 % of its prior
    sd (common practice for flagging prior-dominated parameters).
    """
    p = fit.problem.prior
    n = fit.problem.n_zones
    sd = np.sqrt(np.clip(np.diag(fit.theta_cov), 0, None)) if fit.theta_cov.size else np.full(len(fit.theta), np.nan)
    rows = []
    for i, zone in enumerate(fit.zone_names):
        g = float(np.exp(fit.theta[i]))
        def informed(post, prior):
            if not fit.problem.options.fit_hydraulics:
                return "fixed"
            if not np.isfinite(prior):
                return "data"
            return "data" if post < 0.7 * prior else "prior"
        rows.append(dict(zone=zone, conductance=g, conductance_rel_sd=sd[i],
                         conductance_from=informed(sd[i], p.log_conductance_sd[i]),
                         static_head=fit.theta[n + i], static_head_sd=sd[n + i],
                         static_head_from=informed(sd[n + i], p.static_head_sd[i]),
                         prior_source=p.source[i] if i < len(p.source) else ""))
    return pd.DataFrame(rows)


def interval_z(interval: float) -> float:
    """Two-sided standard-normal quantile of a central interval (1.645 for 0.90)."""
    return float(special.ndtri(0.5 + interval / 2))
