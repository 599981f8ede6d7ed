"""Zone values the data cannot pin: draw them over what the data allow, and say what would tell.

With n zones and fewer independent weight patterns than zones (for example discharge samples
only: with linear zone losses every zone flow is a + b Q, so the discharge weights of any rate
lie in a plane and the rank is at most 2), some combinations of zone values leave every fitted
blend unchanged: the null space of the weighted weight matrix W A. A least-squares solver
returns one point of that set (often a corner with zeros), which is not a measurement.

:func:`redraw_unresolved` moves every posterior draw along the null space of its own W A,
uniformly over the part of the null space that the bounds, the non-detects and a cap on zones
with no upper limit allow (hit-and-run sampling: a seeded random direction, a uniform step
along the feasible chord, repeated). A move along the null space leaves every fitted blend of
the draw unchanged, so it is the same as fixing the unresolved values and re-solving the others
by the censored least squares: every draw still reproduces the samples as before. The marginal
of each unresolved zone then spans its data-allowed range (:func:`blendq.fit.diagnostics.
data_allowed_range`) instead of sitting at the solver's corner.

:func:`unresolved_sets` gives, at the fitted hydraulics, the corners (vertices) of the set of
zone values with the fitted blends, so that the range of any linear function of the zone
values, such as an option's discharge concentration, is the range over these corners.
:func:`what_would_tell` names the measurements that would pin an unresolved zone, from the well
geometry: depth samples where the zone's water flows in the wellbore, a pumped flow log, a step
at a rate where a zone takes water from the well.

References
----------
Izbicki, J.A. and others, USGS reports on well-bore flow and depth-dependent sampling (zone
values by mass balance from depth samples above and below a zone). Smith, R.L. (1984) Efficient
Monte Carlo procedures for generating points uniformly distributed over bounded regions.
Operations Research 32(6), 1296-1308 (hit-and-run).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from blendq.fit.diagnostics import NULL_TOL
from blendq.fit.estimation import FitResult, row_weights, solve_concentrations
from blendq.fit.uncertainty import Draws
from blendq.units import format_quantity

#: hit-and-run steps per null-space dimension (plus a fixed start); the walk starts at the
#: least-squares solution, often a corner of the set
_STEPS_PER_DIM = 30
_MAX_VERTEX_SUBSETS = 200_000


def unresolved_zones(zones: pd.DataFrame, analyte: str, names: list[str]) -> list[int]:
    """Indices of the zones whose value of ``analyte`` the data do not resolve."""
    z = zones[(zones["analyte"] == analyte) & (zones["verdict"] == "not resolved")]
    return [names.index(n) for n in z["zone"]]


def value_cap(fit: FitResult, analyte: str) -> float:
    """Largest zone value [mg/L] drawn where the data set no upper limit.

    ``settings.unseen_zone_factor`` times the largest of the analyte's results, detection limits
    and fitted zone values (a named setting, common practice).
    """
    d = fit.problem.data[analyte]
    vals = [*np.abs(d.value), *d.cens_limit, *np.abs(fit.concentrations[analyte].to_numpy(float))]
    top = max([v for v in vals if np.isfinite(v)], default=0.0)
    return fit.problem.project.settings.unseen_zone_factor * max(top, 1e-12)


def _bounds(fit: FitResult, analyte: str):
    lb, ub = fit.problem.bounds(analyte)
    cap = value_cap(fit, analyte)
    return np.maximum(lb, -cap), np.minimum(ub, np.maximum(cap, lb + cap))


def _rank(wa: np.ndarray) -> int:
    sv = np.linalg.svd(wa, compute_uv=False) if wa.size else np.zeros(0)
    return int(np.sum(sv > NULL_TOL * sv[0])) if len(sv) and sv[0] > 0 else 0


def _constraints(c, null, lb, ub, ac, dl):
    """Rows G t <= h of the feasible moves t along the null space (batched over draws).

    c : (B, n), null : (B, n, k), ac : (B, p, n) or None, dl : (p,).
    """
    g = [null, -null]
    h = [ub[None, :] - c, c - lb[None, :]]
    if ac is not None and ac.shape[1]:
        g.append(np.einsum("bpn,bnk->bpk", ac, null))
        h.append(dl[None, :] - np.einsum("bpn,bn->bp", ac, c))
    gm = np.concatenate(g, axis=1)
    hm = np.concatenate(h, axis=1)
    keep = np.isfinite(hm)
    return np.where(keep[..., None], gm, 0.0), np.where(keep, np.maximum(hm, 0.0), 1.0)


def redraw_unresolved(fit: FitResult, draws: Draws, zones: pd.DataFrame,
                      seed: int | None = None, chunk: int = 250) -> Draws:
    """Draws whose unresolved zone values spread over what the data allow.

    Parameters
    ----------
    fit : FitResult
    draws : Draws
        Posterior draws (any method); their hydraulics are kept.
    zones : DataFrame
        :func:`blendq.fit.diagnostics.zone_table` (the verdicts say which analytes to redraw).
    seed : int, optional
        Seed of the walk (default: the draws' seed).
    chunk : int
        Draws handled together.

    Returns
    -------
    Draws
        The same hydraulics; for every analyte with a zone "not resolved", zone values moved
        along the null space of each draw's weighted weight matrix, uniformly over the feasible
        part (bounds [mg/L], non-detects, and :func:`value_cap`). Other analytes are unchanged.

    Notes
    -----
    Every fitted blend of a draw is unchanged by the move (A N = 0), so each draw reproduces
    the samples exactly as well as before. The uniform distribution over the feasible set is a
    documented choice: the data say nothing inside it.
    """
    problem = fit.problem
    rng = np.random.default_rng(draws.seed if seed is None else seed)
    out = np.array(draws.zone_values, float, copy=True)
    for j, analyte in enumerate(draws.analytes):
        if not unresolved_zones(zones, analyte, fit.zone_names):
            continue
        d = problem.data[analyte]
        _, a0, _ = solve_concentrations(problem, fit.model, analyte)
        k = problem.n_zones - _rank(a0 / d.sigma[:, None])
        if k <= 0:
            continue
        lb, ub = _bounds(fit, analyte)
        for lo in range(0, draws.n_draws, chunk):
            hi = min(lo + chunk, draws.n_draws)
            model = problem.model(draws.theta[lo:hi])
            a = row_weights(model, d.rate, d.depth)
            ac = row_weights(model, d.cens_rate, d.cens_depth) if len(d.cens_limit) else None
            _, _, vt = np.linalg.svd(a / d.sigma[None, :, None], full_matrices=True)
            null = np.swapaxes(vt[:, -k:, :], 1, 2)  # (B, n, k)
            c = out[lo:hi, :, j]
            t = _hit_and_run(rng, c, null, lb, ub, ac, d.cens_limit, _STEPS_PER_DIM * k + 10)
            out[lo:hi, :, j] = np.clip(c + np.einsum("bnk,bk->bn", null, t), lb, ub)
    return replace(draws, zone_values=out)


def _hit_and_run(rng, c, null, lb, ub, ac, dl, steps: int) -> np.ndarray:
    """Hit-and-run walk in the null-space coordinates t, from t = 0 (Smith 1984)."""
    b, _, k = null.shape
    gm, hm = _constraints(c, null, lb, ub, ac, dl)
    t = np.zeros((b, k))
    for _ in range(steps):
        u = rng.standard_normal((b, k))
        u /= np.linalg.norm(u, axis=1, keepdims=True)
        gu = np.einsum("bmk,bk->bm", gm, u)
        slack = np.maximum(hm - np.einsum("bmk,bk->bm", gm, t), 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = slack / gu
        s_max = np.where(gu > 1e-12, ratio, np.inf).min(1)
        s_min = np.where(gu < -1e-12, ratio, -np.inf).max(1)
        s_max = np.where(np.isfinite(s_max), s_max, 0.0)
        s_min = np.where(np.isfinite(s_min), s_min, 0.0)
        s = s_min + rng.random(b) * np.maximum(s_max - s_min, 0.0)
        t = t + s[:, None] * u
    return t


@dataclass(frozen=True)
class UnresolvedSet:
    """Zone values of one analyte with the fitted blends, at the fitted hydraulics.

    Attributes
    ----------
    analyte : str
    zones : list of int
        Zones "not resolved".
    vertices : ndarray (n_vertices, n_zones)
        Corners of the set {c : W A c = W A c*, bounds, non-detects, cap} [mg/L]; the range of
        any linear function of c over the set is its range over these corners.
    """

    analyte: str
    zones: list[int]
    vertices: np.ndarray

    def value_range(self, weights) -> tuple[np.ndarray, np.ndarray]:
        """Smallest and largest of ``weights @ c`` over the set, for weights (..., n_zones)."""
        v = np.asarray(weights, float) @ self.vertices.T
        return v.min(-1), v.max(-1)


def unresolved_sets(fit: FitResult, zones: pd.DataFrame) -> dict[str, UnresolvedSet]:
    """One :class:`UnresolvedSet` per analyte with a zone "not resolved" and a null space."""
    problem = fit.problem
    out = {}
    for analyte in fit.analytes:
        idx = unresolved_zones(zones, analyte, fit.zone_names)
        if not idx:
            continue
        d = problem.data[analyte]
        c, a, ac = solve_concentrations(problem, fit.model, analyte)
        wa = a / d.sigma[:, None]
        k = problem.n_zones - _rank(wa)
        if k <= 0:
            continue
        null = np.linalg.svd(wa, full_matrices=True)[2][-k:].T  # (n, k)
        lb, ub = _bounds(fit, analyte)
        gm, hm = _constraints(c[None], null[None], lb, ub, ac[None] if len(ac) else None,
                              d.cens_limit)
        verts = _vertices(gm[0], hm[0])
        out[analyte] = UnresolvedSet(analyte, idx, c[None, :] + verts @ null.T)
    return out


def _vertices(g: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Vertices of the bounded polytope {t : g t <= h} (t = 0 inside), by enumeration."""
    m, k = g.shape
    subsets = list(itertools.islice(itertools.combinations(range(m), k), _MAX_VERTEX_SUBSETS))
    sub = np.array(subsets, int)
    gs, hs = g[sub], h[sub]  # (S, k, k), (S, k)
    ok = np.abs(np.linalg.det(gs)) > 1e-12 * np.maximum(np.abs(gs).max((1, 2)) ** k, 1e-300)
    t = np.zeros((len(sub), k))
    if ok.any():
        t[ok] = np.linalg.solve(gs[ok], hs[ok][..., None])[..., 0]
    tol = 1e-9 * (1.0 + np.abs(h)).max()
    feas = ok & np.all(t @ g.T <= h[None, :] + tol, axis=1)
    pts = t[feas]
    if not len(pts):
        return np.zeros((1, k))
    return np.unique(np.round(pts, 12), axis=0)


# ----------------------------------------------------------------- what would tell
def _gap_text(upper: float, lower: float, units: str) -> str:
    return f"between {format_quantity(upper, 'length', units)} and " \
           f"{format_quantity(lower, 'length', units)}"


def reversal_rate(fit: FitResult, zone: int) -> float:
    """Largest pumping rate [m^3/d] at which a zone takes water from the well at the fitted
    hydraulics (as tested); 0 when it gives water at every rate above zero.

    With confined linear zones h_w = (sum G h0 - Q) / sum G, so zone i reverses at
    Q = sum_k G_k (h0_k - h0_i); with entrance losses, or where a zone is dewatered at that
    head (section 2 of docs/methods.md), the sign is checked on a rate grid.
    """
    m = fit.model
    g = np.asarray(m.conductance, float)
    h0 = np.asarray(m.static_head, float)
    elev_top = -np.asarray(m.geometry.zone_top, float)
    confined = bool(np.all((g == 0) | ((h0 >= elev_top) & (h0[zone] >= elev_top))))
    if confined and not np.any(np.asarray(m.nonlinear_loss) > 0) \
            and not np.any(np.asarray(m.linear_loss) > 0):
        return float(max(np.sum(g * (h0 - h0[zone])), 0.0))
    top = 2.0 * float(np.max(fit.problem.project.steps["rate"].to_numpy(float), initial=1.0))
    rates = np.linspace(0.0, top, 401)
    q = m.state(rates).zone_flow[:, zone]
    taking = rates[q < 0]
    return float(taking.max()) if len(taking) else 0.0


def what_would_tell(fit: FitResult, zones: list[int], units: str = "US") -> list[str]:
    """Measurements that would pin the values of these zones (planning prompts).

    For each zone: depth samples in the wellbore just toward the intake from the zone (where its
    water flows during pumping) and, when zones lie beyond it, just beyond it (the difference
    of the two is the zone's water by mass balance; Izbicki and co-workers, USGS), during a
    pumped step at a rate where the zone gives water; a flow log at the same rate when the test
    had none while pumping. Also a step at a rate below the largest rate at which a zone takes
    water from the well, when no step was run there and the pump can run there (above
    ``well.rate_min``): a blend without that zone adds a weight pattern the other steps lack.
    """
    project = fit.problem.project
    top, bottom = project.zone_top, project.zone_bottom
    intake = project.well.pump_intake_depth
    n = len(top)
    logs = project.flowlogs
    pumped_log = logs is not None and len(logs) and (logs["rate"].astype(float) > 0).any()
    out = []
    for i in sorted(set(zones)):
        name = project.zone_names[i]
        gaps = []
        if top[i] >= intake:  # below the intake: its water flows up
            toward = (max(bottom[i - 1], intake) if i > 0 and bottom[i - 1] >= intake
                      else intake, top[i])
            beyond = (bottom[i], top[i + 1]) if i + 1 < n else None
        elif bottom[i] <= intake:  # above the intake: its water flows down
            toward = (bottom[i], min(top[i + 1], intake) if i + 1 < n and top[i + 1] <= intake
                      else intake)
            beyond = (bottom[i - 1], top[i]) if i > 0 else None
        else:
            toward, beyond = None, None
        for gap in (toward, beyond):
            if gap is not None and gap[1] > gap[0]:
                gaps.append(_gap_text(*gap, units))
        q_rev = reversal_rate(fit, i)
        when = "during a pumped step"
        if q_rev > 0:
            when += f" above {format_quantity(q_rev, 'rate', units)} (below it the zone takes " \
                    "water from the well)"
        if gaps:
            text = f"{name}: a depth sample {' and one '.join(gaps)} {when}"
        else:
            text = f"{name}: depth samples above and below the pump intake {when}"
        if not pumped_log:
            text += ", with a flow log at the same rate"
        out.append(text)
    steps = project.steps["rate"].astype(float) if len(project.steps) else pd.Series(dtype=float)
    lowest = float(steps[steps > 0].min()) if (steps > 0).any() else np.inf
    for i in range(n):
        q_rev = reversal_rate(fit, i)
        if q_rev > max(project.well.rate_min, 0.0) and lowest > q_rev:
            out.append(f"a step at a rate below {format_quantity(q_rev, 'rate', units)}, where "
                       f"the {project.zone_names[i]} takes water from the well (a blend without "
                       "it)")
    return list(dict.fromkeys(out))
