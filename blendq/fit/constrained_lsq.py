"""Small bound- and inequality-constrained weighted least-squares problems.

The zone-concentration fit of one analyte is

    minimise ||W (A c - y)||^2   subject to  lb <= c <= ub,   A_nd c <= dl

where the last rows are the censored (non-detect) samples: the fitted blend at a non-detect step
may not exceed the detection limit. Problems are tiny (a few zones), so:

* :func:`solve_censored_lsq` solves one problem with scipy (``lsq_linear`` for the bounds, then
  ``minimize(method="SLSQP")`` if a censoring constraint is violated);
* :func:`solve_censored_lsq_batch` solves thousands of them at once (one per posterior draw)
  by enumerating active sets: for each candidate set of active constraints the equality-
  constrained least-squares problem is solved for every draw with one batched linear solve, and
  each draw keeps its best feasible candidate. For a convex problem the optimum is the solution
  of the equality problem on its own active set, so the best feasible candidate is the optimum.
  The tests check it against the scipy solvers.
"""

from __future__ import annotations

import itertools

import numpy as np
from scipy import optimize

_MAX_COMBINATIONS = 4096


def solve_censored_lsq(a, y, sigma, lb, ub, a_censored=None, dl=None):
    """Solve one censored, bounded weighted least-squares problem with scipy.

    Parameters
    ----------
    a : ndarray, shape (m, n)
        Weights of each zone in each measured sample.
    y : ndarray, shape (m,)
        Measured values [mg/L].
    sigma : ndarray, shape (m,)
        Standard deviation of each measurement [mg/L].
    lb, ub : ndarray, shape (n,)
        Bounds on the zone values [mg/L] (``ub`` may be ``inf``).
    a_censored : ndarray, shape (p, n), optional
        Weights of each non-detect sample.
    dl : ndarray, shape (p,), optional
        Detection limits [mg/L].

    Returns
    -------
    ndarray, shape (n,)
        Zone values c [mg/L].
    """
    a = np.asarray(a, float)
    w = 1.0 / np.asarray(sigma, float)
    lb = np.asarray(lb, float)
    ub = np.asarray(ub, float)
    n = a.shape[1]
    if a.shape[0] > 0:
        res = optimize.lsq_linear(a * w[:, None], np.asarray(y, float) * w, bounds=(lb, ub),
                                  method="bvls", tol=1e-14, lsmr_tol=None)
        c = res.x
    else:
        c = np.clip(np.zeros(n), lb, ub)
    if a_censored is None or len(a_censored) == 0:
        return c
    ac = np.asarray(a_censored, float)
    dl = np.asarray(dl, float)
    if np.all(ac @ c <= dl * (1 + 1e-12) + 1e-15):
        return c
    wa = a * w[:, None]
    wy = np.asarray(y, float) * w
    hess = wa.T @ wa
    grad0 = wa.T @ wy
    scale = max(1.0, float(np.abs(wy).max()) if wy.size else 1.0)

    def fun(x):
        r = wa @ x - wy
        return float(r @ r) / scale**2

    def jac(x):
        return 2.0 * (hess @ x - grad0) / scale**2

    start = np.clip(np.minimum(c, np.where(ac.max(0) > 0, dl.min() / np.maximum(ac.max(0), 1e-300), c)), lb, ub)
    cons = [{"type": "ineq", "fun": lambda x: dl - ac @ x, "jac": lambda x: -ac}]
    bounds = list(zip(lb, np.where(np.isfinite(ub), ub, None), strict=False))
    out = optimize.minimize(fun, start, jac=jac, bounds=bounds, constraints=cons, method="SLSQP",
                            options={"ftol": 1e-15, "maxiter": 500})
    return np.clip(out.x, lb, ub)


def solve_censored_lsq_batch(a, y, sigma, lb, ub, a_censored=None, dl=None, rtol=1e-9):
    """Solve many problems of the form of :func:`solve_censored_lsq` at once.

    Parameters
    ----------
    a : ndarray, shape (B, m, n)
    y : ndarray, shape (B, m)
    sigma : ndarray, shape (m,) or (B, m)
    lb, ub : ndarray, shape (n,)
    a_censored : ndarray, shape (B, p, n), optional
    dl : ndarray, shape (p,), optional

    Returns
    -------
    ndarray, shape (B, n)
    """
    a = np.asarray(a, float)
    bsz, m, n = a.shape
    w = 1.0 / np.broadcast_to(np.asarray(sigma, float), (bsz, m))
    wa = a * w[..., None]
    wy = np.asarray(y, float) * w
    hess = np.einsum("bmi,bmj->bij", wa, wa)
    grad = np.einsum("bmi,bm->bi", wa, wy)
    lb = np.asarray(lb, float)
    ub = np.asarray(ub, float)
    ac = np.zeros((bsz, 0, n)) if a_censored is None else np.asarray(a_censored, float)
    dl = np.zeros(0) if dl is None else np.asarray(dl, float)
    p = ac.shape[1]
    # constraint list: (kind, index) with kind 0 = lower bound, 1 = upper bound, 2 = censor row
    cons = [(0, i) for i in range(n) if np.isfinite(lb[i])]
    cons += [(1, i) for i in range(n) if np.isfinite(ub[i])]
    cons += [(2, k) for k in range(p)]
    combos = []
    for k in range(0, min(len(cons), n) + 1):
        for sub in itertools.combinations(range(len(cons)), k):
            vars_bound = [cons[j][1] for j in sub if cons[j][0] < 2]
            if len(vars_bound) != len(set(vars_bound)):
                continue
            combos.append(sub)
            if len(combos) > _MAX_COMBINATIONS:
                return np.stack([
                    solve_censored_lsq(a[b], y[b], 1.0 / w[b], lb, ub, ac[b] if p else None,
                                       dl if p else None) for b in range(bsz)])
    best = np.full((bsz, n), np.nan)
    best_obj = np.full(bsz, np.inf)
    yy = np.einsum("bm,bm->b", wy, wy)
    # feasibility tolerances relative to each constraint's own value (one large bound must not
    # loosen a small detection limit)
    tol_lb = rtol * (1.0 + np.abs(np.where(np.isfinite(lb), lb, 0.0)))
    tol_ub = rtol * (1.0 + np.abs(np.where(np.isfinite(ub), ub, 0.0)))
    tol_dl = rtol * (1.0 + np.abs(dl))
    for sub in combos:
        k = len(sub)
        e = np.zeros((bsz, k, n))
        rhs = np.zeros((bsz, k))
        for r, j in enumerate(sub):
            kind, idx = cons[j]
            if kind == 0:
                e[:, r, idx] = 1.0
                rhs[:, r] = lb[idx]
            elif kind == 1:
                e[:, r, idx] = 1.0
                rhs[:, r] = ub[idx]
            else:
                e[:, r, :] = ac[:, idx, :]
                rhs[:, r] = dl[idx]
        kkt = np.zeros((bsz, n + k, n + k))
        kkt[:, :n, :n] = hess
        kkt[:, :n, n:] = np.swapaxes(e, 1, 2)
        kkt[:, n:, :n] = e
        vec = np.concatenate([grad, rhs], axis=1)
        sol = np.einsum("bij,bj->bi", np.linalg.pinv(kkt, rcond=1e-12), vec)
        c = sol[:, :n]
        slack = 1e-9 * np.abs(c).max(1, keepdims=True)
        feas = np.all(c >= lb - tol_lb - slack, 1) & np.all(c <= ub + tol_ub + slack, 1)
        if p:
            feas &= np.all(np.einsum("bpn,bn->bp", ac, c) <= dl + tol_dl + slack, 1)
        # the equality solve must actually satisfy its own constraints (pinv of a singular KKT)
        feas &= np.all(np.abs(np.einsum("bkn,bn->bk", e, c) - rhs) <= rtol * (1.0 + np.abs(rhs)) + slack, 1)
        obj = np.einsum("bi,bij,bj->b", c, hess, c) - 2.0 * np.einsum("bi,bi->b", grad, c) + yy
        margin = np.where(np.isfinite(best_obj), 1e-12 * (1.0 + np.abs(best_obj)), 0.0)
        better = feas & (obj < best_obj - margin)
        best[better] = c[better]
        best_obj[better] = obj[better]
    missing = ~np.isfinite(best_obj)
    for b in np.flatnonzero(missing):
        best[b] = solve_censored_lsq(a[b], y[b], 1.0 / w[b], lb, ub, ac[b] if p else None,
                                     dl if p else None)
    return np.clip(best, lb, ub)


def solve_each(mat, rhs, rcond: float = 1e-12) -> np.ndarray:
    """Solve the stacked systems mat x = rhs, (B, k, k) and (B, k, r); a singular system is
    solved by least squares (pseudo-inverse, ``rcond``) on its own, so each problem's solution
    does not depend on the problems solved with it."""
    try:
        return np.linalg.solve(mat, rhs)
    except np.linalg.LinAlgError:
        out = np.empty(np.broadcast_shapes(mat.shape[:-1], rhs.shape[:-2] + (1,))[:-1]
                       + rhs.shape[-2:])
        for b in range(mat.shape[0]):
            try:
                out[b] = np.linalg.solve(mat[b], rhs[b])
            except np.linalg.LinAlgError:
                out[b] = np.linalg.pinv(mat[b], rcond=rcond) @ rhs[b]
        return out


def constraint_rows(lb, ub, a_censored=None, dl=None):
    """The constraints of :func:`solve_censored_lsq_batch` as rows G c <= h.

    Order: the finite lower bounds (-c_i <= -lb_i), the finite upper bounds (c_i <= ub_i), then
    the censored rows (A_nd c <= dl).

    Parameters
    ----------
    lb, ub : ndarray (n,)
    a_censored : ndarray (B, p, n), optional
    dl : ndarray (p,), optional

    Returns
    -------
    g : ndarray (B, K, n) or (1, K, n) without censored rows
    h : ndarray (K,)
    """
    lb = np.asarray(lb, float)
    ub = np.asarray(ub, float)
    n = len(lb)
    eye = np.eye(n)
    lo_i = np.flatnonzero(np.isfinite(lb))
    hi_i = np.flatnonzero(np.isfinite(ub))
    rows = np.concatenate([-eye[lo_i], eye[hi_i]])[None]
    h = np.concatenate([-lb[lo_i], ub[hi_i]])
    if a_censored is None or np.shape(a_censored)[1] == 0:
        return rows, h
    ac = np.asarray(a_censored, float)
    rows = np.concatenate([np.broadcast_to(rows, (ac.shape[0],) + rows.shape[1:]), ac], axis=1)
    return rows, np.concatenate([h, np.asarray(dl, float)])


def active_constraints(c, g, h, rtol=1e-9):
    """Which constraints G c <= h hold with equality at c, shape (B, K)."""
    gc = np.einsum("bkn,bn->bk", np.broadcast_to(g, (c.shape[0],) + g.shape[1:]), c)
    scale = 1.0 + np.abs(h) + np.abs(c).max(1, keepdims=True)
    return gc >= h - rtol * scale


def solve_on_active_set(a, y, sigma, g, h, active, rtol=1e-9, with_changes: bool = False):
    """Solve the weighted least-squares problems with a given set of active constraints, and
    tell which solutions are the constrained optimum.

    For every problem b, minimise ||W (A c - y)||^2 subject to G_S c = h_S on its active set S
    (the KKT system). By the Karush-Kuhn-Tucker conditions of a convex problem (Nocedal and
    Wright 2006, Theorem 16.4) the solution is the optimum of the inequality-constrained problem
    exactly when every constraint holds and every active multiplier is >= 0.

    Parameters
    ----------
    a : ndarray (B, m, n)
    y : ndarray (B, m)
    sigma : ndarray (m,) or (B, m)
    g, h : constraint rows from :func:`constraint_rows`
    active : ndarray (B, K) of bool

    Returns
    -------
    c : ndarray (B, n)
    optimal : ndarray (B,) of bool
    violated, released : ndarray (B, K) of bool
        With ``with_changes`` only: the constraints each solution violates, and the active
        constraints whose multiplier is negative.

    References
    ----------
    Nocedal, J. and Wright, S.J. (2006) Numerical Optimization, 2nd ed. Springer.
    """
    a = np.asarray(a, float)
    bsz, m, n = a.shape
    g = np.broadcast_to(g, (bsz,) + g.shape[1:])
    k = g.shape[1]
    w = 1.0 / np.broadcast_to(np.asarray(sigma, float), (bsz, m))
    wa = a * w[..., None]
    hess = np.einsum("bmi,bmj->bij", wa, wa)
    grad = np.einsum("bmi,bm->bi", wa, np.asarray(y, float) * w)
    # equilibrate the objective so that its curvature and the constraint rows have one scale
    s = np.maximum(np.einsum("bii->bi", hess).max(1), 1e-300)
    hess = hess / s[:, None, None]
    grad = grad / s[:, None]
    act = np.asarray(active, float)
    c = np.empty((bsz, n))
    lam = np.empty((bsz, k))
    # problems whose active constraints are bounds, at most one a zone: the reduced system;
    # the others (and every problem with censored rows) the KKT system. Chosen problem by
    # problem, so a solution does not depend on the problems solved with it
    fast = _bounds_only_problems(g, act)
    if fast.any():
        c[fast], lam[fast] = _solve_bounds_only(hess[fast], grad[fast], g[fast], h, act[fast])
    rest = np.flatnonzero(~fast)
    if len(rest):
        gr, ar = g[rest], act[rest]
        kkt = np.zeros((len(rest), n + k, n + k))
        kkt[:, :n, :n] = hess[rest]
        kkt[:, :n, n:] = np.swapaxes(gr, 1, 2) * ar[:, None, :]
        kkt[:, n:, :n] = gr * ar[:, :, None]
        kkt[:, n:, n:] = np.eye(k)[None] * (1.0 - ar)[:, :, None]
        rhs = np.concatenate([grad[rest], ar * h[None, :]], axis=1)
        # a tiny ridge on the curvature (1e-10 of its largest value) keeps the system regular
        # where the data do not see a zone; such a zone then takes the least-norm value, as
        # with a pseudo-inverse, and the fitted blends are unchanged
        kkt[:, :n, :n] += 1e-10 * np.eye(n)
        # dependent active constraints: least squares for that problem
        sol = solve_each(kkt, rhs[..., None])[..., 0]
        c[rest], lam[rest] = sol[:, :n], sol[:, n:]
    return _optimality(c, lam, g, h, act, grad, rtol, with_changes)


def _optimality(c, lam, g, h, act, grad, rtol, with_changes):
    """The Karush-Kuhn-Tucker checks of :func:`solve_on_active_set`."""
    gc = np.einsum("bkn,bn->bk", g, c)
    scale = 1.0 + np.abs(h)[None, :] + np.abs(c).max(1, keepdims=True)
    violated = gc > h + rtol * scale
    on_set = np.all(np.where(act > 0, np.abs(gc - h) <= rtol * scale, True), axis=1)
    lam_tol = rtol * (1.0 + np.abs(grad).max(1, keepdims=True))
    released = (act > 0) & (lam < -lam_tol)
    optimal = ~violated.any(axis=1) & on_set & ~released.any(axis=1)
    if with_changes:
        return c, optimal, violated, released
    return c, optimal


def _bounds_only_problems(g, act) -> np.ndarray:
    """Which problems :func:`_solve_bounds_only` solves: every constraint row of the problem
    a bound (one entry, +1 or -1) and no zone with two active bounds; shape (B,) of bool.
    A property of each problem alone (a censored row that holds one zone only counts as its
    bound), so the choice does not depend on the problems solved with it."""
    nz = g != 0
    unit = np.all((nz.sum(2) == 1) & (np.abs(g).sum(2) == 1.0), axis=1)
    twice = np.any(np.einsum("bk,bkn->bn", act, nz.astype(float)) > 1, axis=1)
    return np.broadcast_to(unit, act.shape[:1]) & ~twice


def _solve_bounds_only(hess, grad, g, h, act):
    """The system of :func:`solve_on_active_set` for the problems of
    :func:`_bounds_only_problems`: the zones on an active bound are fixed at it and the free
    zones solve an n x n system instead of the (n + K) square KKT system (the same solution;
    the multiplier of an active bound is the gradient left in its zone's row)."""
    bsz, n = grad.shape
    onehot = np.abs(g)  # (B, K, n): the zone of each bound
    sgn = g.sum(2)  # +1 upper, -1 lower: sgn c_i <= h at equality c_i = sgn h
    fixed = np.einsum("bk,bkn->bn", act, onehot) > 0
    value = np.einsum("bk,bkn->bn", act * sgn * h[None, :], onehot)
    free = ~fixed
    mat = hess + 1e-10 * np.eye(n)[None]
    rhs = np.where(free, grad - np.einsum("bij,bj->bi", mat, value), value)
    red = np.where(free[:, :, None] & free[:, None, :], mat, 0.0)
    red[:, np.arange(n), np.arange(n)] += fixed
    c = solve_each(red, rhs[..., None])[..., 0]
    left = grad - np.einsum("bij,bj->bi", mat, c)  # G^T lam on the fixed zones
    lam = act * sgn * np.einsum("bn,bkn->bk", left, onehot)
    return c, lam


def solve_by_active_sets(a, y, sigma, g, h, active, max_iter: int = 60, rtol=1e-9):
    """Solve the problems of :func:`solve_on_active_set` from a starting active set by moving
    constraints in and out of it until the Karush-Kuhn-Tucker conditions hold.

    At each pass every problem that is not yet optimal adds the constraints its solution
    violates and releases the active constraints whose multiplier is negative (a primal-dual
    active-set step, Hintermueller, Ito and Kunisch 2002), all problems at once. The work
    grows with the number of passes, not with the number of possible active sets (which grows
    as 2^n with the zones); problems still not optimal after ``max_iter`` passes are returned
    flagged.

    Returns
    -------
    c : ndarray (B, n)
    optimal : ndarray (B,) of bool
    active : ndarray (B, K) of bool

    References
    ----------
    Hintermueller, M., Ito, K. and Kunisch, K. (2002) The primal-dual active set strategy as a
    semismooth Newton method. SIAM Journal on Optimization 13(3), 865-888.
    Nocedal, J. and Wright, S.J. (2006) Numerical Optimization, 2nd ed. Springer, ch. 16.
    """
    a = np.asarray(a, float)
    bsz = a.shape[0]
    g = np.broadcast_to(g, (bsz,) + np.shape(g)[1:])
    sigma = np.broadcast_to(np.asarray(sigma, float), (bsz, a.shape[1]))
    act = np.array(active, bool, copy=True)
    c = np.zeros((bsz, a.shape[2]))
    optimal = np.zeros(bsz, bool)
    todo = np.arange(bsz)
    seen: list[set] = [set() for _ in range(bsz)]  # active sets tried: a cycle stops a problem
    for _ in range(max_iter):
        if not len(todo):
            break
        ct, ok, violated, released = solve_on_active_set(
            a[todo], y[todo], sigma[todo], g[todo], h, act[todo], rtol, with_changes=True)
        c[todo] = ct
        optimal[todo] = ok
        keep = []
        for pos, b in enumerate(todo):
            if ok[pos]:
                continue
            seen[b].add(act[b].tobytes())
            act[b] = (act[b] & ~released[pos]) | violated[pos]
            if act[b].tobytes() not in seen[b]:
                keep.append(b)
        todo = np.array(keep, int)
    return c, optimal, act
