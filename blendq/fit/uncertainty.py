"""Uncertainty of the zone estimates and of predicted discharge quality.

Two views, both propagated to predictions at any rate:

* linearised: the covariance of the hydraulic parameters from the Jacobian at the optimum,
  (J^T J)^-1, and of the zone values from the weighted normal equations plus the hydraulic part
  through the sensitivity dc/dtheta;
* posterior draws by randomised maximum likelihood (Oliver, He and Reynolds 1996; Kitanidis
  1995): every datum (lab results, flow-log readings, pumping levels) is perturbed by its stated
  error and every prior mean by its prior sd, and each draw is refitted fully -- the hydraulics
  by batched Levenberg-Marquardt from the best fit, the zone values projected out exactly at
  every step, bounds and censoring included. Exact for a linear-Gaussian problem, the accepted
  approximation otherwise. A data group the best fit misses by more than its stated errors has
  them widened by its Birge ratio (Birge 1932) for the draws, with a note for the report.
  Draws are seeded and reproducible.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from blendq.errors import ModelError
from blendq.fit import constrained_lsq as qp
from blendq.fit.estimation import (
    FitResult,
    Problem,
    _log_groups,
    hydraulic_residuals_batch,
    level_depths,
    row_weights,
    row_weights_sets,
    scaled_pinv,
    solve_concentrations,
)
from blendq.well import mixing
from blendq.well.hydraulics import solve_by_zone
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


#: quantile of a data group's chi-square above which its best-fit misfit counts as a model
#: discrepancy and its errors are widened for the draws (common practice: the 95 % quantile)
DISCREPANCY_QUANTILE = 0.95

#: Levenberg-Marquardt iterations allowed per posterior draw
MAX_DRAW_ITERATIONS = 100

#: a draw has converged when an accepted step lowers its chi-square by less than this
DRAW_CHI2_TOL = 1e-6

#: memory the draws refitted together may take for their Jacobians [bytes]; the draws do not
#: depend on how they are grouped, only the time and the peak memory do (a numerical setting)
DRAW_CHUNK_BYTES = 256e6


@dataclass(frozen=True)
class GroupFit:
    """Misfit of one data group at the best fit.

    Attributes
    ----------
    group : str
        "pumping levels", "flow logs" or an analyte name.
    rows : slice
        Its rows in the whitened residual vector of the draws (:func:`draw_layout`).
    chi_square : float
        Sum of squared whitened residuals at the best fit.
    dof : float
        Effective degrees of freedom: rows minus their leverage (hat-matrix diagonal of the
        hydraulic Jacobian) minus, for an analyte, the rank of its weighted weight matrix over
        the zones not held on a bound.
    scale : float
        Factor applied to the group's stated errors for the draws (the Birge ratio
        sqrt(chi_square / dof) where the misfit exceeds the quantile
        :data:`DISCREPANCY_QUANTILE` of its chi-square distribution, else 1).
    """

    group: str
    rows: slice
    chi_square: float
    dof: float
    scale: float

    @property
    def note(self) -> str | None:
        """The sentence a report prints about a widened group, or None."""
        if self.scale <= 1.0:
            return None
        what = self.group if self.group in ("pumping levels", "flow logs") \
            else f"{self.group} lab results"
        return (f"{what[0].upper()}{what[1:]}: the best fit misses them by {self.scale:.1f}x their stated error "
                f"(chi-square {self.chi_square:.1f} on {self.dof:.1f} degrees of freedom); "
                "their errors are widened by that factor for the uncertainty bands (model "
                "discrepancy, Birge ratio).")


def draw_layout(problem: Problem) -> dict[str, slice]:
    """Rows of the draws' whitened residual vector: "priors", "flow logs", "pumping levels",
    then each analyte's detected results (non-detects are constraints, not rows)."""
    p = problem.prior
    k = int(np.isfinite(p.log_conductance_sd).sum() + np.isfinite(p.static_head_sd).sum())
    out = {"priors": slice(0, k)}
    out["flow logs"] = slice(k, k + len(problem.log_rows))
    k += len(problem.log_rows)
    out["pumping levels"] = slice(k, k + len(problem.level_rate))
    k += len(problem.level_rate)
    for analyte, d in problem.data.items():
        out[analyte] = slice(k, k + len(d.value))
        k += len(d.value)
    return out


def discrepancy(fit: FitResult, quantile: float = DISCREPANCY_QUANTILE) -> list[GroupFit]:
    """Best-fit misfit of every data group, and the Birge ratio that widens its errors.

    A group whose chi-square exceeds the ``quantile`` of the chi-square distribution with its
    effective degrees of freedom is missed by the model by more than its stated errors allow;
    its errors are scaled by sqrt(chi2 / dof) (Birge 1932) for the draws. Groups with less than
    half a degree of freedom are not judged.

    References
    ----------
    Birge, R.T. (1932) The calculation of errors by the method of least squares. Physical
    Review 40, 207-227.
    """
    problem = fit.problem
    layout = draw_layout(problem)
    # leverage of each row of the fit's residual vector (its layout also has censored rows)
    jac = fit.jacobian
    lev_all = np.einsum("ij,ji->i", jac, scaled_pinv(jac)) if jac.size else np.zeros(0)
    full = residual_layout(problem)
    lev = {"flow logs": lev_all[layout["flow logs"]] if jac.size else None,
           "pumping levels": lev_all[layout["pumping levels"]] if jac.size else None}
    out = []
    r_hyd = draw_residuals_at(fit, fit.theta[None, :], fit.zone_values()[None])[0] \
        if problem.options.fit_hydraulics else None
    for group, rows in layout.items():
        if group == "priors":
            continue
        m = rows.stop - rows.start
        if m == 0:
            continue
        if group in problem.data:
            d = problem.data[group]
            c, a, _ = solve_concentrations(problem, fit.model, group)
            r = (a @ c - d.value) / d.sigma
            lb, ub = problem.bounds(group)
            with np.errstate(invalid="ignore"):
                free = ((c > lb + 1e-9 * (1 + np.abs(lb))) | ~np.isfinite(lb)) \
                    & ((c < ub - 1e-9 * (1 + np.abs(ub))) | ~np.isfinite(ub))
            wa = (a / d.sigma[:, None])[:, free]  # a zone held on a bound is no free parameter
            sv = np.linalg.svd(wa, compute_uv=False) if wa.size else np.zeros(0)
            rank = int(np.sum(sv > 1e-6 * sv[0])) if len(sv) and sv[0] > 0 else 0
            used = float(lev_all[full[group]].sum()) if jac.size else 0.0
            dof = m - rank - used
        else:
            if r_hyd is None:
                continue
            r = r_hyd[rows]
            dof = m - (float(lev[group].sum()) if lev[group] is not None else 0.0)
        chi2 = float(r @ r)
        scale = 1.0
        if dof >= 0.5 and chi2 > stats.chi2.ppf(quantile, dof):
            scale = float(np.sqrt(chi2 / dof))
        out.append(GroupFit(group, rows, chi2, float(dof), scale))
    return out


def draw_residuals_at(fit: FitResult, theta, zone_values) -> np.ndarray:
    """Whitened residuals of given draws against the *measured* data (stated errors),
    rows as in :func:`draw_layout`, shape (n_draws, n_rows)."""
    problem = fit.problem
    theta = np.asarray(theta, float)
    model = problem.model(theta)
    parts = [_hydraulic_residuals_batch(problem, theta, model)]
    for j, analyte in enumerate(fit.analytes):
        d = problem.data[analyte]
        a = row_weights(model, d.rate, d.depth)
        parts.append((np.einsum("bmn,bn->bm", a, zone_values[:, :, j]) - d.value) / d.sigma)
    return np.concatenate(parts, axis=1)


def draw_misfit(fit: FitResult, draws: Draws) -> dict[str, np.ndarray]:
    """Chi-square of every draw against the measured data of each group (stated errors), and
    the total: {group: (n_draws,)}. The test of a posterior sample: each group's misfit
    follows (approximately) a chi-square distribution with as many degrees of freedom as the
    group has rows."""
    r = draw_residuals_at(fit, draws.theta, draws.zone_values)
    out = {g: (r[:, sl] ** 2).sum(1) for g, sl in draw_layout(fit.problem).items()
           if sl.stop > sl.start}
    out["total"] = (r**2).sum(1)
    return out


#: the prior, flow-log and level residuals of a batch (shared with the fit's Jacobian)
_hydraulic_residuals_batch = hydraulic_residuals_batch


def exact_derivatives(problem: Problem, theta, analytes, steps=None):
    """Hydraulic residuals and discharge weights of a batch of theta with their derivatives by
    theta, or None where the model has what they do not cover (a sample taken at a depth in
    the well, or a transient zone without ``steps``).

    Parameters
    ----------
    problem : Problem
    theta : ndarray (B, p)
    analytes : list of str
    steps : ndarray (p,), optional
        Forward-difference steps for the pumping levels of a transient zone model (the step
        levels superposed in time, :func:`blendq.well.transient.step_levels`): those rows
        alone are differenced; without steps such a problem gives None.

    Returns
    -------
    r_h : ndarray (B, rows)
        :func:`hydraulic_residuals_batch` (priors, flow logs, pumping levels; stated errors).
    j_h : ndarray (B, rows, p)
        Its derivative by theta.
    weights : dict {analyte: (a (B, m, n), da (B, m, n, p), ac (B, mc, n), dac (B, mc, n, p))}
        :func:`row_weights` of each analyte's results and its derivative by theta, then the
        same of its non-detects.

    Notes
    -----
    Exact first derivatives (what forward differences of the same functions approximate):
    the zone flows by implicit differentiation of the well's equations
    (:func:`blendq.well.hydraulics.flow_sensitivity`), the discharge weights through the
    pass-through products of the wellbore mixing
    (:func:`blendq.well.mixing.intake_weights_jacobian`), the flow-log readings through the
    wellbore mass balance (linear in the zone flows) and the pumping levels as
    d(C Q^2 - h_w). Work per draw: a few (n x n) products per rate, where differencing needs
    a full model evaluation per parameter.
    """
    at_depth = any(np.isfinite(problem.data[a].depth).any()
                   or np.isfinite(problem.data[a].cens_depth).any() for a in analytes)
    if steps is None and (problem.schedule is not None or at_depth):
        return None
    theta = np.asarray(theta, float)
    bsz, p = theta.shape
    n = problem.n_zones
    model = problem.model(theta)
    logs = problem.log_rows
    groups = _log_groups(logs) if len(logs) else []
    rate_sets = [problem.data[a].rate for a in analytes]
    rate_sets += [problem.data[a].cens_rate for a in analytes]
    rate_sets += [np.array([g[0] for g in groups], float), problem.level_rate]
    uniq, inv = np.unique(np.concatenate(rate_sets), return_inverse=True)
    state = model.state(uniq)
    sens = model.sensitivity(state)
    at = np.cumsum([0] + [len(r) for r in rate_sets])
    k0 = 2 * n + int(problem.fit_c)
    expo = np.broadcast_to(np.asarray(model.loss_exponent, float), (n,))[problem.loss_zones]
    per = 1.0 / problem.loss_reference ** expo  # dC_i / dtheta of the fitted losses
    kinds = [(slice(0, n), sens.log_conductance), (slice(n, 2 * n), sens.static_head)]
    if len(problem.loss_zones):
        kinds.append((slice(k0, p), sens.nonlinear_loss[..., problem.loss_zones] * per))
    level_diff = levels = None
    if steps is not None:  # what is differenced: every theta of the batch moved in turn
        steps = np.asarray(steps, float)
        pert = np.repeat(theta[None], p + 1, axis=0)
        pert[np.arange(1, p + 1), :, np.arange(p)] += steps[:, None]
        flat_model = problem.model(pert.reshape((p + 1) * bsz, p))

        def differenced(x):
            x = x.reshape((p + 1, bsz) + x.shape[1:])
            return x[0], np.moveaxis((x[1:] - x[0][None])
                                     / steps.reshape((p,) + (1,) * (x.ndim - 1)), 0, -1)

        if len(problem.level_rate) and problem.schedule is not None:
            levels, level_diff = differenced(level_depths(problem, flat_model))
    r_h = hydraulic_residuals_batch(problem, theta, model, levels)
    parts = []
    pr = problem.prior
    fg = np.flatnonzero(np.isfinite(pr.log_conductance_sd))
    fh = np.flatnonzero(np.isfinite(pr.static_head_sd))
    for cols, sd in ((fg, pr.log_conductance_sd[fg]), (n + fh, pr.static_head_sd[fh])):
        block = np.zeros((len(cols), p))
        block[np.arange(len(cols)), cols] = 1.0 / sd
        parts.append(np.broadcast_to(block, (bsz, len(cols), p)))
    # a parameter x_k of zone k alone moves the zone flows by dq_i = (delta_ik - s_i / S) l_k
    # and the wellbore head by l_k / S (s the slopes, S their sum, l the local responses)
    with np.errstate(invalid="ignore", divide="ignore"):  # NaN where no zone yields water
        s_rel = sens.slope / sens.slope.sum(-1)[..., None]
    zones_of = [slice(None), slice(None), problem.loss_zones]
    if len(logs):
        pos = inv[at[-3]:at[-2]]
        dpred = np.zeros((bsz, len(logs), p))
        eye = np.eye(n)
        for k, (_, rows, depths) in enumerate(groups):
            # the upward flow is linear in the zone flows: per unit flow of zone k (its flow
            # in, the balance taken up by every zone in proportion to s), times l_k
            unit = eye[None] - s_rel[:, pos[k], None, :]  # (B, k, i)
            m = mixing.wellbore_flow(unit, model.geometry, depths)  # (B, k, depths)
            for (cols, local), zk in zip(kinds, zones_of, strict=False):
                dpred[:, rows, cols] = np.swapaxes(m[:, zk] * local[:, pos[k], :, None], 1, 2)
        parts.append(dpred / problem.log_sd[:, None])
    if len(problem.level_rate) and problem.schedule is not None:
        # the levels superposed in time: forward differences of those rows alone
        parts.append(level_diff / problem.level_sd)
    elif len(problem.level_rate):
        pos = inv[at[-2]:]
        dlev = np.zeros((bsz, len(pos), p))
        total = sens.slope.sum(-1)[:, pos, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            for cols, local in kinds:
                dlev[..., cols] = -local[:, pos] / total  # -dh_w
        if problem.fit_c:
            dlev[..., 2 * n] += problem.level_rate**2
        parts.append(dlev / problem.level_sd)
    j_h = np.concatenate(parts, axis=1) if parts else np.zeros((bsz, 0, p))
    # the weights at the rates of the results, and da/dx_k = (J_a[:, k] - J_a s / S) l_k
    q_pos, q_inv = np.unique(inv[:at[2 * len(analytes)]], return_inverse=True)
    w, jw = mixing.intake_weights_jacobian(state.zone_flow[:, q_pos], model.geometry)
    w = np.nan_to_num(w, nan=0.0)
    jw = np.nan_to_num(jw, nan=0.0)
    jm = jw - np.matmul(jw, s_rel[:, q_pos, :, None])
    da_all = np.zeros(w.shape + (p,))  # (B, rates, n, p)
    for (cols, local), zk in zip(kinds, zones_of, strict=False):
        da_all[..., cols] = jm[..., zk] * local[:, q_pos, None, :]
    seen: dict[bytes, tuple] = {}

    def rows_at(j):
        pos = q_inv[at[j]:at[j + 1]]
        key = pos.tobytes()
        if key not in seen:  # analytes sampled together share the arrays
            if np.array_equal(pos, np.arange(len(q_pos))):  # one result a rate, in order
                seen[key] = (w, da_all)
            else:
                seen[key] = (w[:, pos], da_all[:, pos])
        return seen[key]

    na = len(analytes)
    weights = {analyte: rows_at(j) + rows_at(na + j) for j, analyte in enumerate(analytes)}
    if at_depth:  # a sample taken at a depth in the well: forward differences of its rows
        done: dict[bytes, tuple] = {}  # analytes of one sample share the differences
        for analyte in analytes:
            d = problem.data[analyte]
            arrays = list(weights[analyte])
            for k, (rate, depth) in enumerate(((d.rate, d.depth), (d.cens_rate, d.cens_depth))):
                rows = np.flatnonzero(np.isfinite(depth))
                if len(rows):
                    key = rate[rows].tobytes() + depth[rows].tobytes()
                    if key not in done:
                        done[key] = differenced(row_weights(flat_model, rate[rows], depth[rows]))
                    a0, da = arrays[2 * k].copy(), arrays[2 * k + 1].copy()
                    a0[:, rows], da[:, rows] = done[key]
                    arrays[2 * k:2 * k + 2] = a0, da
            weights[analyte] = tuple(arrays)
    return r_h, j_h, weights


class _PerturbedData:
    """The data of a chunk of draws, each datum perturbed by its (widened) error and each
    prior mean by its prior sd: the randomised maximum-likelihood objective of every draw."""

    def __init__(self, problem: Problem, eps: np.ndarray, scale: dict[str, float],
                 analytes: list[str], model):
        self.problem = problem
        self.analytes = analytes
        layout = draw_layout(problem)
        self.layout = layout
        self.eps = eps
        # whitened hydraulic residuals of draw b: (pred - obs) / (s sd) - e_b, with the group
        # scale s (1 for the priors); dividing the stated-error residual by s does it
        hyd_scale = np.ones(layout["pumping levels"].stop)
        for g in ("flow logs", "pumping levels"):
            hyd_scale[layout[g]] = scale.get(g, 1.0)
        self.hyd_scale = hyd_scale
        self.n_hyd = len(hyd_scale)
        self.y, self.sigma, self.start_active = {}, {}, {}
        for analyte in analytes:
            d = problem.data[analyte]
            lb, ub = problem.bounds(analyte)
            c, _, ac = solve_concentrations(problem, model, analyte)
            g, h = qp.constraint_rows(lb, ub, ac[None] if len(ac) else None,
                                      d.cens_limit if len(ac) else None)
            self.start_active[analyte] = qp.active_constraints(c[None], g, h)[0]
            sig = d.sigma * scale.get(analyte, 1.0)
            self.sigma[analyte] = sig
            self.y[analyte] = d.value[None, :] + sig[None, :] * eps[:, layout[analyte]]

    def residuals(self, theta, idx, active=None, check=True):
        """Residuals (B, rows), zone values (B, n, n_analytes) and active sets of the draws
        ``idx`` at ``theta`` (B, n_theta). With ``check`` the zone values are the exact
        constrained optimum (warm-started from ``active``); without, ``active`` is kept."""
        problem = self.problem
        model = problem.model(theta)
        bsz = theta.shape[0]
        r_h = _hydraulic_residuals_batch(problem, theta, model) / self.hyd_scale \
            - self.eps[idx, :self.n_hyd]
        parts = [r_h]
        zv = np.empty((bsz, problem.n_zones, len(self.analytes)))
        new_active = {}
        # one model state per distinct set of sampled rates, shared by the analytes
        sets = []
        for analyte in self.analytes:
            d = problem.data[analyte]
            sets += [(d.rate, d.depth), (d.cens_rate, d.cens_depth)]
        all_weights = row_weights_sets(model, sets)
        for j, analyte in enumerate(self.analytes):
            d = problem.data[analyte]
            a = all_weights[2 * j]
            ac = all_weights[2 * j + 1] if len(d.cens_limit) else None
            lb, ub = problem.bounds(analyte)
            g, h = qp.constraint_rows(lb, ub, ac, d.cens_limit if ac is not None else None)
            y = self.y[analyte][idx]
            sig = self.sigma[analyte]
            if active is None:  # start from the active constraints of the best fit
                act = np.broadcast_to(self.start_active[analyte], (bsz, len(h))).copy()
            else:
                act = active[analyte]
            c, optimal = qp.solve_on_active_set(a, y, sig, g, h, act)
            if check and not np.all(optimal):
                bad = np.flatnonzero(~optimal)
                gb = g if g.shape[0] == 1 else g[bad]
                act = act.copy()
                # move constraints in and out of the active sets (cost grows with the passes,
                # not with the 2^zones possible active sets); enumerate only what is left
                c[bad], solved, act[bad] = qp.solve_by_active_sets(a[bad], y[bad], sig, gb, h,
                                                                   act[bad])
                rest = bad[~solved]
                if len(rest):
                    c[rest] = qp.solve_censored_lsq_batch(
                        a[rest], y[rest], sig, lb, ub, ac[rest] if ac is not None else None,
                        d.cens_limit if ac is not None else None)
                    act[rest] = qp.active_constraints(c[rest], g if g.shape[0] == 1
                                                      else g[rest], h)
            new_active[analyte] = act
            zv[:, :, j] = c
            parts.append((np.einsum("bmn,bn->bm", a, c) - y) / sig)
        return np.concatenate(parts, axis=1), zv, new_active


    def jacobian(self, theta, idx, active, steps):
        """Residuals (B, rows) and their Jacobian (B, rows, p) at ``theta`` (B, p) with the
        active sets held fixed.

        The weights and the hydraulic residuals are differentiated exactly where
        :func:`exact_derivatives` covers the model, else differenced forward with ``steps``;
        the zone values are differentiated exactly on their active set (variable projection,
        Golub and Pereyra 1973). With the zones on a bound fixed and no non-detect active, the
        free zones solve H c = A^T W^2 y, so dc = H_free^-1 (-dA^T W^2 (A c - y) - A^T W^2 dA c)
        and dr = W (dA c + A dc): one factorisation per draw instead of one solve per
        parameter. A non-detect on its limit (a_nd c = limit, a row that moves with theta)
        adds its row to the equality-constrained (KKT) system
        [H G_S^T; G_S 0] [c; mu] = [A^T W^2 y; h_S], whose derivative is
        [H G_S^T; G_S 0] [dc; dmu] = [-dA^T W^2 (A c - y) - A^T W^2 dA c - dG_S^T mu; -dG_S c]
        (Nocedal and Wright 2006, section 16.1).
        """
        problem = self.problem
        bsz, p = theta.shape
        bounds = {}
        for analyte in self.analytes:
            lb, ub = problem.bounds(analyte)
            g, h = qp.constraint_rows(lb, ub)
            bounds[analyte] = (g, h, (g[0] != 0).astype(float))
        n = problem.n_zones
        exact = exact_derivatives(problem, theta, self.analytes, steps)
        if exact is None:
            pert = np.repeat(theta[None], p + 1, axis=0)
            pert[np.arange(1, p + 1), :, np.arange(p)] += steps[:, None]
            flat = pert.reshape((p + 1) * bsz, p)
            model = problem.model(flat)
            rh = (_hydraulic_residuals_batch(problem, flat, model) / self.hyd_scale).reshape(
                p + 1, bsz, -1)
            res = [rh[0] - self.eps[idx, :self.n_hyd]]
            jac = [np.moveaxis((rh[1:] - rh[0][None]) / steps[:, None, None], 0, -1)]
            sets = []
            for k in self.analytes:
                d = problem.data[k]
                sets += [(d.rate, d.depth), (d.cens_rate, d.cens_depth)]
            all_weights = row_weights_sets(model, sets)

            def split(aa):
                aa = aa.reshape((p + 1, bsz) + aa.shape[1:])
                return aa[0], np.moveaxis((aa[1:] - aa[0][None])
                                          / steps[:, None, None, None], 0, -1)

            weights = {k: split(all_weights[2 * j]) + split(all_weights[2 * j + 1])
                       for j, k in enumerate(self.analytes)}
        else:
            r_h, j_h, weights = exact
            res = [r_h / self.hyd_scale - self.eps[idx, :self.n_hyd]]
            jac = [j_h / self.hyd_scale[:, None]]
        for analyte in self.analytes:
            d = problem.data[analyte]
            g, h, onehot = bounds[analyte]
            a, da, ac, dac = weights[analyte]  # (B, m, n), (B, m, n, p), non-detects alike
            y = self.y[analyte][idx]
            sig = self.sigma[analyte]
            act = active[analyte]
            censored = len(d.cens_limit) > 0
            if censored:
                g, h = qp.constraint_rows(*problem.bounds(analyte), ac, d.cens_limit)
            c, _ = qp.solve_on_active_set(a, y, sig, g, h, act)
            w2 = 1.0 / sig**2
            wa = a * w2[None, :, None]
            hess = np.matmul(np.swapaxes(wa, 1, 2), a)
            raw = np.einsum("bmn,bn->bm", a, c) - y
            dac_c = np.matmul(c[:, None, None, :], da)[:, :, 0]  # dA c (B, m, p)
            rhs = -(np.matmul((raw * w2)[:, None, :], da.reshape(bsz, len(y[0]), n * p)).reshape(
                bsz, n, p) + np.matmul(np.swapaxes(wa, 1, 2), dac_c))
            # the ridge of the active-set solve (1e-10 of the largest curvature)
            ridge = 1e-10 * np.maximum(np.einsum("bii->bi", hess).max(1), 1e-300)
            on_bound = act[:, :onehot.shape[0]].astype(float) @ onehot
            fixed = on_bound > 0
            free = ~fixed
            red = np.where(free[:, :, None] & free[:, None, :], hess, 0.0)
            red[:, np.arange(n), np.arange(n)] += np.where(fixed, 1.0, ridge[:, None])
            dc = qp.solve_each(red, np.where(free[:, :, None], rhs, 0.0))  # (B, n, p)
            # a draw with a non-detect on its limit, or a zone on both its bounds: the KKT
            # system (draw by draw, so a draw's Jacobian does not depend on the draws refitted
            # with it)
            general = (on_bound > 1).any(1)
            if censored:
                general |= act[:, onehot.shape[0]:].any(1)
            k = np.flatnonzero(general)
            if len(k):
                gk = np.broadcast_to(g, (bsz,) + g.shape[1:])[k]
                dc[k] = _active_set_derivative(hess[k], wa[k], y[k], gk, h, act[k], c[k],
                                               rhs[k], dac[k])
            res.append(raw / sig)
            jac.append((dac_c + np.matmul(a, dc)) / sig[:, None])
        return np.concatenate(res, axis=1), np.concatenate(jac, axis=1)


def _active_set_derivative(hess, wa, y, g, h, act, c, rhs, dac):
    """dc (B, n, p) of :meth:`_PerturbedData.jacobian` when non-detects are active: the
    derivative of the KKT system of :func:`blendq.fit.constrained_lsq.solve_on_active_set`
    (same equilibration and ridge), the inactive constraints held out by unit rows; a
    singular system (dependent active constraints) by least squares."""
    bsz, n = c.shape
    k = g.shape[1]
    nb = k - dac.shape[1]  # the bound rows come first; their rows do not move with theta
    s = np.maximum(np.einsum("bii->bi", hess).max(1), 1e-300)
    actf = np.asarray(act, float)
    kkt = np.zeros((bsz, n + k, n + k))
    kkt[:, :n, :n] = hess / s[:, None, None] + 1e-10 * np.eye(n)
    kkt[:, :n, n:] = np.swapaxes(g, 1, 2) * actf[:, None, :]
    kkt[:, n:, :n] = g * actf[:, :, None]
    kkt[:, n:, n:] = np.eye(k)[None] * (1.0 - actf)[:, :, None]
    grad = np.einsum("bmi,bm->bi", wa, y) / s[:, None]
    sol = qp.solve_each(kkt, np.concatenate([grad, actf * h[None, :]], 1)[..., None])
    mu = sol[:, n + nb:, 0] * actf[:, nb:]  # scaled multipliers of the non-detect rows
    top = rhs / s[:, None, None] - np.einsum("bj,bjnp->bnp", mu, dac)
    bottom = np.zeros((bsz, k, rhs.shape[-1]))
    bottom[:, nb:] = -np.einsum("bjnp,bn->bjp", dac, c) * actf[:, nb:, None]
    return qp.solve_each(kkt, np.concatenate([top, bottom], 1))[:, :n]


def _take(state, rows):
    return {k: v[rows] for k, v in state.items()}


def levenberg_marquardt_batch(fun, theta, lower, steps, max_iter: int = MAX_DRAW_ITERATIONS,
                              tol: float = DRAW_CHI2_TOL, jac_fun=None):
    """Minimise many sums of squares at once by Levenberg-Marquardt.

    Parameters
    ----------
    fun : callable(theta (B, p), rows (B,), state, check) -> (r (B, m), extra (B, ...), state)
        Residuals of the problems ``rows`` at ``theta``. ``state`` is a dict of per-problem
        arrays (for example the active constraints of an inner solve; None the first time);
        with ``check`` False it must be held fixed (used for the finite-difference Jacobian).
    theta : ndarray (B, p)
        Starting values.
    lower : ndarray (p,)
        Lower bounds (-inf for none), honoured by projection.
    steps : ndarray (p,)
        Forward-difference steps.
    max_iter : int
    tol : float
    jac_fun : callable(theta (B, p), rows (B,), state) -> (r (B, m), J (B, m, p)) or None
        Residuals and Jacobian of the problems ``rows`` with ``state`` held fixed; when absent
        or returning None the Jacobian is differenced forward from ``fun``.
        A problem has converged when an accepted step, or the full Gauss-Newton step, lowers its
        sum of squares by less than ``tol`` (1 + sum of squares).

    Returns
    -------
    theta : ndarray (B, p)
    extra : ndarray (B, ...)
        ``extra`` of the last accepted point.
    converged : ndarray (B,) of bool

    References
    ----------
    Marquardt, D.W. (1963) An algorithm for least-squares estimation of nonlinear parameters.
    J. SIAM 11(2), 431-441. Nielsen, H.B. (1999) Damping parameter in Marquardt's method.
    IMM-REP-1999-05, Technical University of Denmark (the damping update).
    """
    theta = np.array(theta, float)
    bsz, p = theta.shape
    rows = np.arange(bsz)
    r, extra, state = fun(theta, rows, None, True)
    extra = np.array(extra)
    cost = (r**2).sum(1)
    lam = np.full(bsz, 1e-3)
    nu = np.full(bsz, 2.0)
    done = np.zeros(bsz, bool)
    eye = np.eye(p)[None]
    # the Jacobian of each problem at its current point, kept until a step is accepted (a
    # rejected step leaves theta and the state as they were, so it would come out the same)
    jtj_all = np.zeros((bsz, p, p))
    grad_all = np.zeros((bsz, p))
    fresh = np.zeros(bsz, bool)
    for _ in range(max_iter):
        todo = np.flatnonzero(~done)
        if not todo.size:
            break
        st = _take(state, todo)
        th = theta[todo]
        new_j = todo[~fresh[todo]]
        exact = jac_fun(theta[new_j], new_j, _take(state, new_j)) \
            if jac_fun is not None and new_j.size else None
        if exact is not None:
            r0, jac = exact
            jtj_all[new_j] = np.matmul(np.swapaxes(jac, 1, 2), jac)
            grad_all[new_j] = np.einsum("bmi,bm->bi", jac, r0)
            fresh[new_j] = True
        elif new_j.size:
            # forward differences, every parameter of every problem in one call, state fixed;
            # the unperturbed point in the same call
            sj = _take(state, new_j)
            nj = len(new_j)
            pert = np.repeat(theta[new_j][None], p + 1, axis=0)
            for k in range(p):
                pert[k + 1, :, k] += steps[k]
            rk, _, _ = fun(pert.reshape((p + 1) * nj, p), np.tile(new_j, p + 1),
                           {k: np.tile(v, (p + 1,) + (1,) * (v.ndim - 1)) for k, v in sj.items()},
                           False)
            rk = rk.reshape(p + 1, nj, -1)
            jac = np.moveaxis((rk[1:] - rk[0][None]) / steps[:, None, None], 0, -1)
            jtj_all[new_j] = np.matmul(np.swapaxes(jac, 1, 2), jac)
            grad_all[new_j] = np.einsum("bmi,bm->bi", jac, rk[0])
            fresh[new_j] = True
        jtj = jtj_all[todo]
        grad = grad_all[todo]
        # a parameter resting on its bound with the gradient pushing out of it stays there
        pinned = (th <= lower[None, :]) & (grad > 0)
        dg = np.sqrt(np.einsum("bii->bi", jtj))
        dg = np.where(dg > 0, dg, 1.0)
        mat = jtj / dg[:, :, None] / dg[:, None, :]
        gs = np.where(pinned, 0.0, grad / dg)
        mat = np.where(pinned[:, :, None] | pinned[:, None, :], 0.0, mat)
        # the Gauss-Newton decrease still available: below the tolerance the problem is done
        gn = np.linalg.solve(mat + eye * np.where(pinned, 1.0, 1e-12)[:, None, :],
                             gs[..., None])[..., 0]
        done[todo[np.einsum("bi,bi->b", gs, gn) <= tol * (1.0 + cost[todo])]] = True
        mat = mat + eye * np.where(pinned, 1.0, lam[todo, None])[:, None, :]
        step = -np.linalg.solve(mat, gs[..., None])[..., 0] / dg
        new = np.maximum(th + step, lower[None, :])
        r_new, x_new, st_new = fun(new, todo, st, True)
        c_new = (r_new**2).sum(1)
        ok = np.isfinite(c_new) & (c_new <= cost[todo])
        gain = cost[todo] - c_new
        h = new - th
        pred = -(2.0 * np.einsum("bi,bi->b", h, grad) + np.einsum("bi,bij,bj->b", h, jtj, h))
        rho = np.clip(np.where(ok, gain / np.maximum(pred, 1e-300), 0.0), 0.0, 1.0)
        acc = todo[ok]
        fresh[acc] = False
        theta[acc] = new[ok]
        r[acc] = r_new[ok]
        extra[acc] = x_new[ok]
        cost[acc] = c_new[ok]
        for k in state:
            state[k][acc] = st_new[k][ok]
        # Nielsen's damping update: shrink by up to 3 after a step whose gain matches its
        # prediction, grow by a doubling factor after a failed step
        lam[acc] = np.maximum(lam[acc] * np.maximum(1 / 3, 1 - (2 * rho[ok] - 1) ** 3), 1e-12)
        nu[acc] = 2.0
        bad = todo[~ok]
        lam[bad] *= nu[bad]
        nu[bad] *= 2.0
        done[acc[gain[ok] <= tol * (1.0 + c_new[ok])]] = True
        # no step of a thousandth of the Gauss-Newton length lowers the sum: a minimum (at a
        # kink where the set of zone values on their bounds changes, the sum is not smooth)
        done[bad[lam[bad] > 1e3]] = True
    return theta, extra, done


def _refit_draws(fit: FitResult, data: _PerturbedData, idx: np.ndarray):
    """Refit of the draws ``idx`` from the best fit; returns theta (B, p), zone values
    (B, n, a) and a converged flag (B,)."""
    problem = fit.problem
    theta = np.repeat(fit.theta[None, :], len(idx), axis=0)

    def fun(th, rows, state, check):
        return data.residuals(th, idx[rows], state, check)

    if not problem.options.fit_hydraulics or fit.jacobian.size == 0:
        _, zv, _ = fun(theta, np.arange(len(idx)), None, True)
        return theta, zv, np.ones(len(idx), bool)
    lower = problem.lower_bounds()
    sd = np.sqrt(np.clip(np.diag(fit.theta_cov), 0.0, None))
    steps = 1e-4 * np.where(sd > 0, sd, 1e-6 * np.maximum(1.0, np.abs(fit.theta)))
    def jac_fun(th, rows, state):
        return data.jacobian(th, idx[rows], state, steps)

    return levenberg_marquardt_batch(fun, theta, lower, steps, jac_fun=jac_fun)


@dataclass(frozen=True)
class Draws:
    """Posterior draws of the fitted quantities.

    Attributes
    ----------
    theta : ndarray (n_draws, n_theta)
        Hydraulic parameters.
    zone_values : ndarray (n_draws, n_zones, n_analytes)
        Zone values [mg/L].
    analytes : list of str
    seed : int
    groups : list of GroupFit
        Best-fit misfit of each data group and the factor its errors were widened by.
    notes : list of str
        Sentences for the report (widened groups, draws that did not converge).
    """

    theta: np.ndarray
    zone_values: np.ndarray
    analytes: list[str]
    seed: int
    groups: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    @property
    def n_draws(self) -> int:
        return self.theta.shape[0]


def monte_carlo(fit: FitResult, n_draws: int = 1000, seed: int = 0,
                progress: Callable[[int, int], None] | None = None,
                chunk: int | None = None, widen: bool = True) -> Draws:
    """Seeded posterior draws by randomised maximum likelihood.

    Every datum (lab result, flow-log reading, pumping level) is perturbed by its stated error
    (widened by its group's Birge ratio where the best fit misses the group, see
    :func:`discrepancy`) and every prior mean by its prior sd; each draw is then refitted fully:
    the hydraulics by Levenberg-Marquardt from the best fit, the zone values projected out
    exactly at every step with bounds and non-detects honoured. Exact for a linear-Gaussian
    problem; the accepted approximation otherwise.

    Parameters
    ----------
    fit : FitResult
    n_draws : int
    seed : int
    progress : callable(done, total), optional
        Called after each chunk of draws (the CLI shows a progress bar).
    chunk : int, optional
        Draws refitted together (the draws themselves do not depend on it); default: as many
        as :data:`DRAW_CHUNK_BYTES` allows for their Jacobians, at least 100.
    widen : bool
        Widen the errors of groups the best fit misses (model discrepancy).

    References
    ----------
    Kitanidis, P.K. (1995) Quasi-linear geostatistical theory for inversing. Water Resources
    Research 31(10), 2411-2419.
    Oliver, D.S., He, N. and Reynolds, A.C. (1996) Conditioning permeability fields to pressure
    data. 5th European Conference on the Mathematics of Oil Recovery.
    """
    problem = fit.problem
    rng = np.random.default_rng(seed)
    layout = draw_layout(problem)
    m = max(sl.stop for sl in layout.values())
    eps = rng.standard_normal((n_draws, m))
    groups = discrepancy(fit) if widen else []
    scale = {g.group: g.scale for g in groups}
    data = _PerturbedData(problem, eps, scale, list(fit.analytes), fit.model)
    theta = np.empty((n_draws, len(fit.theta)))
    out = np.empty((n_draws, problem.n_zones, len(fit.analytes)))
    converged = np.empty(n_draws, bool)
    if chunk is None:  # the Jacobian's (p + 1) model evaluations of every row and zone weight
        per_draw = 8.0 * (len(fit.theta) + 1) * (m + 1) * (problem.n_zones + 1)
        chunk = int(min(n_draws, max(100, DRAW_CHUNK_BYTES // per_draw)))
    for lo in range(0, n_draws, chunk):
        hi = min(lo + chunk, n_draws)
        theta[lo:hi], out[lo:hi], converged[lo:hi] = _refit_draws(fit, data, np.arange(lo, hi))
        if progress is not None:
            progress(hi, n_draws)
    notes = [g.note for g in groups if g.note]
    if not converged.all():
        notes.append(f"{int((~converged).sum())} of {n_draws} posterior draws did not converge "
                     f"in {MAX_DRAW_ITERATIONS} iterations and are kept at their last iterate.")
    return Draws(theta, out, list(fit.analytes), seed, groups, notes)


def linearised_zone_sd(fit: FitResult) -> np.ndarray:
    """Linearised standard deviation of each zone value, shape (n_zones, n_analytes) [mg/L].

    Notes
    -----
    Var(c) = (A^T W^2 A)^+ + S Cov(theta) S^T with S = dc/dtheta by forward differences.
    Bounds and censoring are ignored here (the posterior draws honour them).
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
        model = model.at_horizon(conductance_factor)
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
        Scales each zone's response to pumping, the ambient crossflow held (G(horizon)/G(test);
        :meth:`blendq.well.model.WellModel.at_horizon`).
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
                    shares: bool = False, chunk_points: int = 100_000) -> PredictionSummary:
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
    """
    rates = np.asarray(rates, float)
    probs = np.asarray(probs, float)
    model = draws_model(fit, draws, conductance_factor, changes)
    n_a = draws.zone_values.shape[-1]
    thr = np.zeros((0, n_a)) if thresholds is None else np.atleast_2d(np.asarray(thresholds, float))
    n_r = len(rates)
    conc_q = np.empty((len(probs), n_r, n_a))
    exc = np.empty((len(thr), n_r, n_a))
    level_q = np.empty((len(probs), n_r))
    share_med = np.empty((n_r, draws.zone_values.shape[1])) if shares else None
    step = max(1, int(chunk_points) // max(draws.n_draws, 1))
    if not shares and np.ndim(model.conductance) == 2:
        # rates by draws, one contiguous array a zone: the closed-form wellbore head for
        # confined linear zones, else the Newton iteration on all points from it
        g = np.asarray(model.conductance, float)
        n_z = g.shape[1]
        h0 = np.broadcast_to(np.asarray(model.static_head, float), g.shape)
        c_well = np.broadcast_to(np.asarray(model.well_loss, float), g.shape[:1])
        zv = np.asarray(draws.zone_values, float)
        if np.any(g.sum(1) <= 0):
            raise ModelError("no open zone: the sum of zone conductances is zero")

        def by_zone(x):
            x = np.broadcast_to(np.asarray(x, float), g.shape)
            return [np.ascontiguousarray(x[:, i]) for i in range(n_z)] if np.any(x > 0) \
                else None

        g_z, h0_z = by_zone(g), [np.ascontiguousarray(h0[:, i]) for i in range(n_z)]
        d_z, b_z = by_zone(model.nonlinear_loss), by_zone(model.linear_loss)
        expo = np.broadcast_to(np.asarray(model.loss_exponent, float), (n_z,))
        if np.any(np.asarray(model.nonlinear_loss) < 0) or np.any(g < 0):
            raise ModelError("zone conductances and losses must be >= 0")
        for lo in range(0, n_r, step):
            r = rates[lo:lo + step, None]
            hw, flows = solve_by_zone(r, g_z, h0_z, d_z, list(expo), b_z,
                                      model.geometry.zone_top, model.geometry.zone_bottom)
            w = intake_weights_by_zone(flows, model.geometry)
            for a in range(n_a):
                conc = sum(w[i] * zv[:, i, a] for i in range(g.shape[1]))
                conc_q[:, lo:lo + step, a] = np.quantile(conc, probs, axis=1)
                for t in range(len(thr)):
                    exc[t, lo:lo + step, a] = (conc > thr[t, a]).mean(1)
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
                exc[t, lo:lo + step, a] = (conc[..., a] > thr[t, a]).mean(0)
        level_q[:, lo:lo + step] = np.quantile(model.pumping_level_depth(r, state), probs, axis=0)
        if shares:
            share_med[lo:lo + step] = np.median(w, axis=0)
    return PredictionSummary(rates, probs, conc_q, exc, level_q, share_med, list(draws.analytes))
