"""Zone hydraulics: zone conductances and the common-wellbore-head inflow model.

Every zone i joins the well through a conductance G_i [m^2/d] and optional entrance losses at
its node (MNW2 form, B_i q + C_i q |q|^(P_i-1)); all zones share one wellbore head h_w [m]:

    psi_i(h0_i) - psi_i(h_f,i) = q_i / G_i,   h_f,i - h_w = B_i q_i + C_i q_i |q_i|^(P_i-1),
    sum_i q_i = Q

with q_i > 0 inflow to the well, h_f,i the head at the zone's well face and psi_i the zone's
discharge potential (:func:`saturated_potential`: psi = h for a confined zone; its
transmissivity follows the saturated thickness once the head falls into its open interval).
The sum of zone flows decreases strictly with h_w while a zone face is wet, so the root is
unique. Heads are elevations relative to the depth datum (head = -depth to water).

All functions work on plain floats or numpy arrays in base units (m, m^3/d, d) and broadcast
over leading batch dimensions.

References
----------
Thiem, G. (1906) Hydrologische Methoden. Gebhardt, Leipzig.
Cooper, H.H. and Jacob, C.E. (1946) A generalized graphical method for evaluating formation
constants and summarizing well-field history. Trans. AGU 27(4), 526-534.
Hawkins, M.F. (1956) A note on the skin effect. J. Petroleum Technology 8(12), 65-66.
Konikow, L.F., Hornberger, G.Z., Halford, K.J., Hanson, R.T. (2009) Revised multi-node well
(MNW2) package for MODFLOW ground-water flow model. USGS Techniques and Methods 6-A30.
Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data, 2nd ed.
ILRI Publication 47.
Strack, O.D.L. (1989) Groundwater Mechanics. Prentice Hall.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from blendq.errors import ModelError


def thiem_conductance(transmissivity, radius_of_influence, well_radius, skin=0.0):
    """Steady zone conductance from the Thiem equation with a skin factor.

    Parameters
    ----------
    transmissivity : float or array
        Zone transmissivity T = K_h b [m^2/d].
    radius_of_influence : float or array
        Radius R at which the static head holds [m].
    well_radius : float or array
        Effective well radius r_w [m].
    skin : float or array, default 0
        Dimensionless skin factor s (positive for clogging).

    Returns
    -------
    float or array
        Conductance G [m^2/d]: zone inflow q = G (h0 - h_w).

    Notes
    -----
    G = 2 pi T / (ln(R / r_w) + s)   (Thiem 1906; skin after Hawkins 1956).
    """
    t = np.asarray(transmissivity, dtype=float)
    denom = np.log(np.asarray(radius_of_influence, float) / np.asarray(well_radius, float))
    denom = denom + np.asarray(skin, float)
    if np.any(denom <= 0):
        raise ModelError("ln(R/r_w) + skin must be positive; check the radius of influence and skin")
    return 2.0 * np.pi * t / denom


def cooper_jacob_conductance(transmissivity, storativity, time, well_radius, skin=0.0):
    """Transient zone conductance at elapsed time t (Cooper-Jacob approximation with skin).

    Parameters
    ----------
    transmissivity : float or array
        T [m^2/d].
    storativity : float or array
        S [-].
    time : float or array
        Time since pumping began [d].
    well_radius : float or array
        r_w [m].
    skin : float or array, default 0
        Skin factor s [-].

    Returns
    -------
    float or array
        Conductance G [m^2/d].

    Notes
    -----
    G = 4 pi T / (ln(2.25 T t / (r_w^2 S)) + 2 s)   (Cooper and Jacob 1946). Valid once
    u = r_w^2 S / (4 T t) is small (below about 0.01); a non-positive denominator is an error.
    """
    t_ = np.asarray(transmissivity, float)
    arg = 2.25 * t_ * np.asarray(time, float) / (np.asarray(well_radius, float) ** 2
                                                  * np.asarray(storativity, float))
    denom = np.log(arg) + 2.0 * np.asarray(skin, float)
    if np.any(~np.isfinite(denom)) or np.any(denom <= 0):
        raise ModelError("Cooper-Jacob conductance undefined: ln(2.25 T t/(r_w^2 S)) + 2 s <= 0; "
                         "the time is too short or the skin too negative")
    return 4.0 * np.pi * t_ / denom


def hawkins_skin(conductivity, skin_conductivity, skin_radius, well_radius):
    """Skin factor of a damaged (or improved) annulus around the well.

    Parameters
    ----------
    conductivity : float or array
        Formation hydraulic conductivity K [m/d].
    skin_conductivity : float or array
        Conductivity of the skin annulus K_s [m/d].
    skin_radius : float or array
        Outer radius of the annulus r_s [m].
    well_radius : float or array
        r_w [m].

    Returns
    -------
    float or array
        s = (K / K_s - 1) ln(r_s / r_w)   (Hawkins 1956).
    """
    k = np.asarray(conductivity, float)
    ks = np.asarray(skin_conductivity, float)
    return (k / ks - 1.0) * np.log(np.asarray(skin_radius, float) / np.asarray(well_radius, float))


def zone_flow_from_head_difference(head_difference, conductance, nonlinear_loss=0.0, exponent=2.0):
    """Zone flow q [m^3/d] that a head difference h0 - h_w [m] drives.

    Solves dh = q/G + D q |q|^(P-1) for q. Returns (q, dq/d(dh)).
    """
    dh = np.asarray(head_difference, float)
    g = np.asarray(conductance, float)
    d = np.asarray(nonlinear_loss, float)
    a = np.abs(dh)
    sign = np.sign(dh)
    if np.all(d == 0):
        return g * dh, np.broadcast_to(g, dh.shape).astype(float)
    if exponent == 2.0:
        # stable root of D x^2 + x/G - a = 0: x = 2 a G / (1 + sqrt(1 + 4 D G^2 a))
        x = 2.0 * a * g / (1.0 + np.sqrt(1.0 + 4.0 * d * g * g * a))
    else:
        # f(x) = x/G + D x^P - a is convex and increasing for x >= 0; Newton from the right
        # (x0 = G a, where f >= 0) converges monotonically.
        x = g * a
        for _ in range(100):
            with np.errstate(divide="ignore", invalid="ignore"):
                f = np.where(g > 0, x / np.where(g > 0, g, 1.0), 0.0) + d * x**exponent - a
                fp = np.where(g > 0, 1.0 / np.where(g > 0, g, 1.0), 0.0) + exponent * d * np.where(
                    x > 0, x ** (exponent - 1.0), 0.0)
                step = np.where(fp > 0, f / fp, 0.0)
            x = np.maximum(x - step, 0.0)
            if np.all(np.abs(step) <= 1e-13 * (1.0 + x)):
                break
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_g = np.where(g > 0, 1.0 / np.where(g > 0, g, 1.0), np.inf)
        deriv = 1.0 / (inv_g + exponent * d * np.where(x > 0, x ** (exponent - 1.0), 0.0))
    deriv = np.where(g > 0, deriv, 0.0)
    return sign * x, deriv


def saturated_potential(head, top=None, bottom=None):
    """Discharge potential of a zone per unit conductance, psi(h) [m], and dpsi/dh [-].

    With the zone's open interval between the elevations ``bottom`` < ``top`` [m] (heads and
    elevations relative to the datum, = -depth) and b = top - bottom, u = h - bottom:

        psi = u - b/2      for u >= b      (confined: the whole thickness saturated)
        psi = u^2 / (2 b)  for 0 < u < b   (unconfined: saturated thickness u)
        psi = 0            for u <= 0      (dry)

    Zone inflow q = G (psi(h0) - psi(h_f)) with G = 2 pi K b / ln(R/r_w) is then Thiem's law
    while the head at the well face h_f stays above the top, the unconfined Thiem (Dupuit)
    law q = pi K (h0^2 - h_f^2) / ln(R/r_w) (heads above the zone bottom) when both heads lie
    in the interval, and the confined-unconfined form pi K (2 b h0 - b^2 - h_f^2) / ln(R/r_w)
    in between: the transmissivity follows the saturated thickness, dq/dh_f = -G u / b. It is
    the Girinskii-Strack discharge potential of a confined-unconfined aquifer divided by K b.
    Without ``top`` and ``bottom``, psi = h (the confined law everywhere).

    Parameters
    ----------
    head : array_like
        h [m].
    top, bottom : array_like or None
        Elevations of the top and the bottom of the open interval [m].

    Returns
    -------
    (psi, dpsi) : arrays [m], [-]

    References
    ----------
    Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data,
    2nd ed. ILRI Publication 47 (Thiem-Dupuit equation for an unconfined aquifer).
    Strack, O.D.L. (1989) Groundwater Mechanics. Prentice Hall (discharge potential of
    confined-unconfined flow).
    """
    h = np.asarray(head, float)
    if top is None or bottom is None:
        return h, np.ones_like(h)
    bot = np.asarray(bottom, float)
    b = np.asarray(top, float) - bot
    u = h - bot
    wet = np.clip(u / b, 0.0, 1.0)
    psi = np.where(u >= b, u - 0.5 * b, 0.5 * u * wet)
    return psi, wet


def head_of_potential(psi, top, bottom):
    """Inverse of :func:`saturated_potential` [m] for psi >= 0 (psi < 0 gives the bottom)."""
    p = np.asarray(psi, float)
    bot = np.asarray(bottom, float)
    b = np.asarray(top, float) - bot
    return bot + np.where(p >= 0.5 * b, p + 0.5 * b, np.sqrt(2.0 * b * np.maximum(p, 0.0)))


def entrance_loss(flow, linear=0.0, coefficient=0.0, exponent=2.0):
    """Head loss of a zone node [m] and its derivative [d/m^2] (MNW2 form).

        L(q) = B q + C q |q|^(P-1),   dL/dq = B + P C |q|^(P-1)

    Parameters
    ----------
    flow : array_like
        Zone inflow q [m^3/d] (negative out of the well: the loss changes sign).
    linear : array_like
        B [d/m^2].
    coefficient : array_like
        C [d^P/m^(3P-1)].
    exponent : array_like
        P [-].

    References
    ----------
    Konikow, L.F., Hornberger, G.Z., Halford, K.J., Hanson, R.T. (2009) Revised multi-node well
    (MNW2) package for MODFLOW ground-water flow model. USGS Techniques and Methods 6-A30.
    """
    q = np.asarray(flow, float)
    a = np.abs(q)
    p = np.asarray(exponent, float)
    if np.all(p == 2.0):
        ap = a
    else:
        with np.errstate(divide="ignore"):
            ap = np.where(a > 0, a ** (p - 1.0), np.where(p == 1.0, 1.0, 0.0))
    c = np.asarray(coefficient, float)
    return linear * q + c * q * ap, linear + p * c * ap


@dataclass(frozen=True)
class WellState:
    """The well's hydraulic state at each rate.

    Attributes
    ----------
    rate : ndarray, shape (..., n_rates)
        Pumping rate Q [m^3/d].
    wellbore_head : ndarray, shape (..., n_rates)
        Head in the well at the zones h_w [m] (before the well loss above the zones).
    zone_flow : ndarray, shape (..., n_rates, n_zones)
        Inflow from each zone q_i [m^3/d]; negative for a zone taking water from the well.
    """

    rate: np.ndarray
    wellbore_head: np.ndarray
    zone_flow: np.ndarray


def solve_wellbore_head(
    rate,
    conductance,
    static_head,
    nonlinear_loss=None,
    exponent=2.0,
    rtol: float = 1e-12,
    max_iter: int = 100,
    *,
    linear_loss=None,
    zone_top=None,
    zone_bottom=None,
) -> WellState:
    """Wellbore head and zone flows for each pumping rate.

    Parameters
    ----------
    rate : array_like, shape (n_rates,) or broadcastable to (..., n_rates)
        Pumping rate Q [m^3/d], Q >= 0.
    conductance : array_like, shape (..., n_zones)
        Zone conductance G_i [m^2/d] (0 for a sealed zone).
    static_head : array_like, shape (..., n_zones)
        Far-field head h0_i [m] (elevation relative to the datum).
    nonlinear_loss : array_like, shape (..., n_zones), optional
        Nonlinear entrance loss coefficient C_i [d^P/m^(3P-1)]; zero or None for none.
    exponent : float or array_like (..., n_zones), default 2
        Exponent P_i >= 1 of the nonlinear entrance loss C_i q |q|^(P_i-1).
    linear_loss : array_like, shape (..., n_zones), optional
        Linear entrance loss coefficient B_i [d/m^2].
    zone_top, zone_bottom : array_like, shape (n_zones,), optional
        Depths of each zone's open interval [m]. Given, a zone's transmissivity follows its
        saturated thickness once the head at its well face falls into the interval
        (:func:`saturated_potential`); not given, every zone is confined.
    rtol, max_iter : float, int
        Tolerance and iterations of the bracketed solve (points the Newton iteration leaves).

    Returns
    -------
    WellState
        Arrays of shape (..., n_rates) and (..., n_rates, n_zones). At a rate above what the
        zones can yield with the well dewatered to the bottom of every zone (only with
        ``zone_top`` and ``zone_bottom``) there is no steady state: head and flows are NaN.

    Notes
    -----
    Each zone node (Konikow and others 2009, MNW2, with a discharge potential for the
    dewatered part):

        psi_i(h0_i) - psi_i(h_f,i) = q_i / G_i,   h_f,i - h_w = B_i q_i + C_i q_i |q_i|^(P_i-1)

    with h_f,i the head at the zone's well face, and sum_i q_i = Q. Confined linear zones
    without entrance losses have the closed form h_w = (sum G_i h0_i - Q) / sum G_i (the
    fast path). Otherwise a vectorised Newton iteration on all points at once, in the unknowns
    (q_1..q_n, h_w), starts from that linear solution: eliminating the zone flows leaves one
    scalar step in h_w per point, and the mass balance sum q_i = Q holds after every step.
    Points where it does not converge (a kink of psi at a zone bottom) are solved by a
    bracketed Newton-bisection on h_w with each zone's flow solved in its own bracket.

    The rounding left in sum_i q_i - Q is shared out over the zones in proportion to
    dq_i/dh_w, so that the zone flows sum to Q to rounding of the flows themselves.

    References
    ----------
    Konikow, L.F., Hornberger, G.Z., Halford, K.J., Hanson, R.T. (2009) Revised multi-node well
    (MNW2) package for MODFLOW ground-water flow model. USGS Techniques and Methods 6-A30.
    """
    g = np.asarray(conductance, float)[..., None, :]
    h0 = np.asarray(static_head, float)[..., None, :]
    q = np.asarray(rate, float)
    if np.any(q < 0) or not np.all(np.isfinite(q)):
        raise ModelError("pumping rates must be finite and >= 0")
    if np.any(g < 0):
        raise ModelError("zone conductances must be >= 0")
    g_total = g.sum(-1)
    if np.any(g_total <= 0):
        raise ModelError("no open zone: the sum of zone conductances is zero")

    def per_zone(x):
        return np.zeros_like(g) if x is None else np.asarray(x, float)[..., None, :]

    d, bl = per_zone(nonlinear_loss), per_zone(linear_loss)
    if np.any(d < 0) or np.any(bl < 0):
        raise ModelError("nonlinear and linear zone losses must be >= 0")
    p = np.asarray(exponent, float)
    if np.any(p < 1) or not np.all(np.isfinite(p)):
        raise ModelError("the exponent of a nonlinear zone loss must be finite and >= 1")
    if p.ndim > 1:
        raise ModelError("the loss exponent is one number per zone, not per draw")
    dewater = zone_top is not None and zone_bottom is not None
    et = -per_zone(zone_top) if dewater else None
    eb = -per_zone(zone_bottom) if dewater else None
    shape = np.broadcast_shapes(g.shape[:-1], h0.shape[:-1], q.shape)
    q = np.broadcast_to(q, shape)
    h_lin = ((g * h0).sum(-1) - q) / g_total
    lossy = bool(np.any(d > 0) or np.any(bl > 0))
    confined = True
    if dewater:
        confined = bool(np.all((g == 0) | ((h0 >= et) & (h_lin[..., None] >= et))))
    if not lossy and confined:
        hw = np.broadcast_to(h_lin, shape).copy()
        flow = g * (h0 - hw[..., None])
        flow = flow + (g / g_total[..., None]) * (q - flow.sum(-1))[..., None]
        return WellState(rate=q, wellbore_head=hw, zone_flow=flow)

    n = g.shape[-1]
    pz = np.broadcast_to(p, g.shape[-1:]) if p.ndim else float(p)
    full = shape + g.shape[-1:]

    def zones(x):
        return [x[..., i] for i in range(n)]

    hw, flows = solve_by_zone(q, zones(g), zones(h0), zones(d) if np.any(d > 0) else None,
                              list(pz) if np.ndim(pz) else pz,
                              zones(bl) if np.any(bl > 0) else None,
                              zone_top if dewater else None, zone_bottom if dewater else None,
                              rtol, max_iter)
    flow = np.stack(np.broadcast_arrays(*flows), -1)
    gb, db, blb = (np.broadcast_to(x, full) for x in (g, d, bl))
    loss, dloss = entrance_loss(flow, blb, db, pz)
    _, wet = saturated_potential(hw[..., None] + loss, et, eb)
    is_open = gb > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.where(is_open, wet / (wet * dloss + 1.0 / np.where(is_open, gb, 1.0)), 0.0)
        total = slope.sum(-1, keepdims=True)
        share = np.where(total > 0, slope / total, gb / g_total[..., None])
    flow = flow + share * (q - flow.sum(-1))[..., None]
    return WellState(rate=q, wellbore_head=hw, zone_flow=flow)


#: Newton iterations of :func:`solve_wellbore_head` on all points at once before the points
#: left over go to the bracketed solve
NEWTON_ITERATIONS = 30
#: relative accuracy of the Newton iteration
NEWTON_TOL = 1e-12
#: relative size of the last Newton step (about sqrt(NEWTON_TOL) times a safety factor): the
#: error after a step of that size is of order NEWTON_TOL (quadratic convergence)
NEWTON_STOP = 1e-7


def solve_by_zone(rate, conductance, static_head, nonlinear_loss=None, exponent=2.0,
                  linear_loss=None, zone_top=None, zone_bottom=None, rtol: float = 1e-12,
                  max_iter: int = 100):
    """:func:`solve_wellbore_head` on zone-by-zone arrays: the fast layout of a sweep.

    Parameters
    ----------
    rate : array_like
        Q [m^3/d], broadcastable to the points' shape (e.g. (n_rates, 1)).
    conductance, static_head : list of array_like
        Per zone, G_i [m^2/d] and h0_i [m], each broadcastable to the points' shape
        (e.g. (n_draws,)).
    nonlinear_loss, exponent, linear_loss : list of array_like, optional
        Per zone C_i, P_i, B_i (as in :func:`solve_wellbore_head`).
    zone_top, zone_bottom : sequence of float, optional
        Per zone depths of the open interval [m] (dewatering).
    rtol, max_iter : float, int
        Tolerance and iterations of the bracketed solve of the points the Newton iteration
        leaves.

    Returns
    -------
    (wellbore_head, zone_flows)
        h_w [m] of the points' shape and a list of q_i [m^3/d]; NaN where no steady state
        exists (rate above what the zones can yield).

    Notes
    -----
    The vectorised Newton iteration of :func:`solve_wellbore_head` (same equations), started
    from the linear solution; points it leaves unconverged are solved by the bracketed method.
    Without entrance losses and with every zone confined it is the closed form.
    """
    n = len(conductance)
    q = np.asarray(rate, float)
    g = [np.asarray(x, float) for x in conductance]
    h0 = [np.asarray(x, float) for x in static_head]
    d = [np.asarray(x, float) for x in nonlinear_loss] if nonlinear_loss is not None else [None] * n
    bl = [np.asarray(x, float) for x in linear_loss] if linear_loss is not None else [None] * n
    p = list(exponent) if np.ndim(exponent) else [float(exponent)] * n
    d = [None if x is None or not np.any(x > 0) else x for x in d]
    bl = [None if x is None or not np.any(x > 0) else x for x in bl]
    g_sum = sum(g)
    if np.any(g_sum <= 0):
        raise ModelError("no open zone: the sum of zone conductances is zero")
    shape = np.broadcast_shapes(q.shape, *(x.shape for x in g), *(x.shape for x in h0))
    hw = np.broadcast_to((sum(gi * hi for gi, hi in zip(g, h0, strict=True)) - q) / g_sum,
                         shape).copy()
    flows = [np.broadcast_to(gi * (hi - hw), shape).copy() for gi, hi in zip(g, h0, strict=True)]
    dewater = zone_top is not None and zone_bottom is not None
    et = [-float(x) for x in zone_top] if dewater else [None] * n
    eb = [-float(x) for x in zone_bottom] if dewater else [None] * n
    psi0 = [saturated_potential(hi, t, b)[0] for hi, t, b in zip(h0, et, eb, strict=True)]
    closed = [bool(np.any(gi == 0)) for gi in g]
    inv_g = [np.where(gi > 0, 1.0 / np.where(gi > 0, gi, 1.0), 0.0) if c else 1.0 / gi
             for gi, c in zip(g, closed, strict=True)]
    feasible = np.ones(shape, bool)
    if dewater:
        feasible = q < (1.0 - 1e-9) * sum(gi * ps for gi, ps in zip(g, psi0, strict=True))
        feasible = np.broadcast_to(feasible, shape)
    # zones whose static head is above the top are confined while h_w stays above the top
    wet_above = [True if t is None else bool(np.all(hi >= t)) for hi, t in zip(h0, et, strict=True)]
    lossless = all(x is None for x in d) and all(x is None for x in bl)
    if lossless and all(w and (t is None or hw.min() >= t) for w, t in zip(wet_above, et, strict=True)):
        return hw, flows
    all_feasible = bool(np.all(feasible))
    pd = [None if d[i] is None else p[i] * d[i] for i in range(n)]
    h0_max = max(float(np.max(np.abs(hi))) for hi in h0)
    tol_q = NEWTON_TOL * (float(np.max(np.abs(q))) + 1e-3 * float(np.max(g_sum)) * (1 + h0_max))
    bad = np.zeros(shape, bool)  # points the iteration cannot step (left to the bracketed solve)
    converged = False
    step = np.full(shape, np.inf)
    for _ in range(NEWTON_ITERATIONS):
        num, den, parts = 0.0, 0.0, []
        for i in range(n):
            qi = flows[i]
            hf, dl = hw, 0.0
            if d[i] is not None or bl[i] is not None:
                loss = 0.0
                if d[i] is not None:
                    a = np.abs(qi)
                    ap = a if p[i] == 2.0 else np.where(a > 0, a ** (p[i] - 1.0),
                                                         1.0 if p[i] == 1.0 else 0.0)
                    loss, dl = (d[i] * ap) * qi, pd[i] * ap
                if bl[i] is not None:
                    loss, dl = loss + bl[i] * qi, dl + bl[i]
                hf = hw + loss
            if et[i] is not None and not (wet_above[i] and hf.min() >= et[i]):
                psi_f, wet = saturated_potential(hf, et[i], eb[i])
                resid = psi0[i] - psi_f - qi * inv_g[i]
                ia = 1.0 / (wet * dl + inv_g[i] + closed[i] * (g[i] == 0))
                wia = wet * ia
            else:  # confined at every point: psi(h0) - psi(h_f) = h0 - h_f, wet = 1
                resid = h0[i] - hf - qi * inv_g[i]
                ia = 1.0 / (dl + inv_g[i] + closed[i] * (g[i] == 0))
                wia = ia
            if closed[i]:
                resid = np.where(g[i] > 0, resid, 0.0)
                ia = np.where(g[i] > 0, ia, 0.0)
                wia = np.where(g[i] > 0, wia, 0.0)
            num = num + resid * ia
            den = den + wia
            parts.append((resid, wia, ia))
        with np.errstate(divide="ignore", invalid="ignore"):
            step = num / den
        finite = np.isfinite(step)
        if not (all_feasible and finite.all()):
            finite &= feasible
            bad |= ~finite
            step = np.where(finite, step, 0.0)
        hw += step
        dq_max = 0.0
        for i, (resid, wia, ia) in enumerate(parts):
            inc = resid * ia - wia * step
            if not finite.all():
                inc = np.where(finite, inc, 0.0)
            flows[i] += inc
            dq_max = max(dq_max, float(np.abs(inc).max()))
        # quadratic convergence: once a step is below sqrt(tol), the error after it is ~tol
        h_step = float((np.abs(step) / (1.0 + np.abs(hw))).max())
        if h_step <= NEWTON_STOP and \
                dq_max <= NEWTON_STOP / NEWTON_TOL * tol_q:
            converged = True
            break
    done = ~bad
    if not converged:
        done &= np.abs(step) <= NEWTON_STOP * (1.0 + np.abs(hw))
    done |= ~feasible
    if not np.all(done):
        idx = np.nonzero(~done)
        m = len(idx[0])

        def take(xs):
            return np.stack([np.broadcast_to(x, shape)[idx] for x in xs], -1)

        zeros = [np.zeros(())] * n
        sub_p = np.broadcast_to(np.asarray(p, float), (m, n))
        sub_et = np.broadcast_to(np.asarray(et, float), (m, n)) if dewater else None
        sub_eb = np.broadcast_to(np.asarray(eb, float), (m, n)) if dewater else None
        gs = take(g)
        h_sub, q_sub = _bracketed_head(
            np.broadcast_to(q, shape)[idx], gs, take(h0),
            take([x if x is not None else z for x, z in zip(d, zeros, strict=True)]),
            take([x if x is not None else z for x, z in zip(bl, zeros, strict=True)]),
            take(psi0), take(inv_g) * (gs > 0), sub_p, sub_et, sub_eb, rtol, max_iter)
        hw[idx] = h_sub
        for i in range(n):
            flows[i][idx] = q_sub[:, i]
    if not np.all(feasible):
        hw = np.where(feasible, hw, np.nan)
        flows = [np.where(feasible, f, np.nan) for f in flows]
    return hw, flows


def _zone_flows_at(hw, g, psi0, inv_g, bl, d, p, et, eb, iterations: int = 200):
    """Each zone's flow [m^3/d] at wellbore head ``hw`` (M,) and dq/dh_w, each zone solved in
    its own bracket: F(x) = psi(h0) - psi(h_w + L(x)) - x / G decreases in x, and the root lies
    between 0 and the flow without entrance loss."""
    is_open = g > 0
    psi_w, wet_w = saturated_potential(hw[..., None], et, eb)
    x0 = np.where(is_open, g * (psi0 - psi_w), 0.0)
    lo, hi = np.minimum(x0, 0.0), np.maximum(x0, 0.0)
    x = x0.copy()
    lossy = bool(np.any(d > 0) or np.any(bl > 0))
    for _ in range(iterations if lossy else 0):
        loss, dloss = entrance_loss(x, bl, d, p)
        psi_f, wet = saturated_potential(hw[..., None] + loss, et, eb)
        f = np.where(is_open, psi0 - psi_f - x * inv_g, 0.0)
        lo = np.where(f > 0, x, lo)
        hi = np.where(f < 0, x, hi)
        fp = wet * dloss + inv_g
        with np.errstate(divide="ignore", invalid="ignore"):
            new = x + f / fp
        bad = (new <= lo) | (new >= hi) | ~np.isfinite(new)
        new = np.where(bad, 0.5 * (lo + hi), new)
        conv = (np.abs(new - x) <= 1e-13 * (1.0 + np.abs(x))) | (hi - lo <= 1e-13 * (1 + np.abs(x)))
        x = np.where(is_open, new, 0.0)
        if np.all(conv):
            break
    loss, dloss = entrance_loss(x, bl, d, p)
    _, wet = saturated_potential(hw[..., None] + loss, et, eb)
    dq = np.where(is_open, -wet / (wet * dloss + inv_g + ~is_open), 0.0)
    return x, dq


def _bracketed_head(q, g, h0, d, bl, psi0, inv_g, p, et, eb, rtol, max_iter):
    """Wellbore head (M,) and zone flows (M, n) by a safeguarded Newton-bisection on h_w: the
    sum of the zone flows decreases with h_w (strictly while a zone face is wet)."""
    is_open = g > 0
    hi = np.where(is_open, h0, -np.inf).max(-1)
    if et is not None:
        hi = np.maximum(hi, np.where(is_open, et, -np.inf).max(-1))
    span = 1.0 + np.abs(hi)
    lo = hi - span
    for _ in range(200):  # widen downwards until the zones give Q
        flow, _ = _zone_flows_at(lo, g, psi0, inv_g, bl, d, p, et, eb)
        short = flow.sum(-1) < q
        if not np.any(short):
            break
        span = np.where(short, 2.0 * span, span)
        lo = np.where(short, hi - span, lo)
    else:
        raise ModelError("wellbore head: no head gives the rate (check the zone losses)")
    hw = 0.5 * (lo + hi)
    scale = q + 1e-12 * g.sum(-1) * (np.abs(h0).max(-1) + 1.0)
    for _ in range(max_iter):
        flow, dflow = _zone_flows_at(hw, g, psi0, inv_g, bl, d, p, et, eb)
        f = flow.sum(-1) - q  # decreasing in hw
        lo = np.where(f > 0, hw, lo)
        hi = np.where(f < 0, hw, hi)
        slope = -dflow.sum(-1)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = hw + f / np.where(slope > 0, slope, np.inf)
        bad = (newton <= lo) | (newton >= hi) | ~np.isfinite(newton)
        new = np.where(bad, 0.5 * (lo + hi), newton)
        done = (np.abs(f) <= 1e3 * rtol * (scale + np.abs(flow).sum(-1))) \
            | (hi - lo <= 1e-14 * (1 + np.abs(hw)))
        hw = np.where(done, hw, new)
        if np.all(done):
            break
    else:
        raise ModelError("wellbore head iteration did not converge")
    flow, _ = _zone_flows_at(hw, g, psi0, inv_g, bl, d, p, et, eb)
    return hw, flow


def pumping_level_head(wellbore_head, rate, well_loss=0.0, well_loss_exponent=2.0):
    """Head of the pumping level in the well [m]: h_pwl = h_w - C Q^n (Jacob 1947 well loss).

    Parameters
    ----------
    wellbore_head : array_like
        h_w [m].
    rate : array_like
        Q [m^3/d].
    well_loss : float or array
        C [d^n/m^(3n-1)]; [d^2/m^5] for n = 2.
    well_loss_exponent : float, default 2
        n (Rorabaugh 1953); 2 for Jacob (1947).
    """
    return np.asarray(wellbore_head, float) - np.asarray(well_loss, float) * np.asarray(rate, float) ** well_loss_exponent


def dewatered_zones(pumping_level_depth, zone_top):
    """Boolean mask (..., n_zones): True where the pumping level [m depth] is below a zone top [m]."""
    return np.asarray(pumping_level_depth, float)[..., None] > np.asarray(zone_top, float)


@dataclass(frozen=True)
class FlowSensitivity:
    """First derivatives of a :class:`WellState` by each zone's own parameters, rate held.

    A change dx_k of a parameter of zone k alone moves the zone flows and the wellbore head by

        dq_i = (delta_ik - s_i / S) l_k dx_k,   dh_w = l_k dx_k / S,   S = sum_i s_i,

    with l_k the zone's local response (what its flow would do with h_w held) and s_i = -dq_i/dh_w
    (the flow of each zone eases as h_w rises, and the balance sum_i q_i = Q moves h_w).

    Attributes
    ----------
    log_conductance : ndarray (..., n_rates, n_zones)
        l_k for x_k = ln G_k [m^3/d].
    static_head : ndarray (..., n_rates, n_zones)
        l_k for x_k = h0_k [m^2/d].
    nonlinear_loss : ndarray (..., n_rates, n_zones)
        l_k for x_k = C_k [m^3/d per d^P/m^(3P-1)].
    slope : ndarray (..., n_rates, n_zones)
        s_i = -dq_i/dh_w [m^2/d].
    """

    log_conductance: np.ndarray
    static_head: np.ndarray
    nonlinear_loss: np.ndarray
    slope: np.ndarray

    def flow_derivative(self, local: np.ndarray) -> np.ndarray:
        """dq_i/dx_k from the local responses l_k of one kind of parameter,
        shape (..., n_rates, n_zones i, n_zones k)."""
        s = self.slope
        total = s.sum(-1)
        eye = np.eye(s.shape[-1])
        with np.errstate(invalid="ignore", divide="ignore"):  # NaN where no zone yields water
            return (eye - (s / total[..., None])[..., :, None]) * local[..., None, :]

    def head_derivative(self, local: np.ndarray) -> np.ndarray:
        """dh_w/dx_k, shape (..., n_rates, n_zones k)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return local / self.slope.sum(-1)[..., None]


def flow_sensitivity(state: WellState, conductance, static_head, nonlinear_loss=None,
                     exponent=2.0, *, linear_loss=None, zone_top=None,
                     zone_bottom=None) -> FlowSensitivity:
    """Derivatives of the zone flows and the wellbore head of :func:`solve_wellbore_head` by
    each zone's conductance, static head and nonlinear loss, at the rates of ``state``.

    Parameters
    ----------
    state : WellState
        The solution (:func:`solve_wellbore_head` with the same parameters).
    conductance, static_head, nonlinear_loss, exponent, linear_loss, zone_top, zone_bottom
        As in :func:`solve_wellbore_head`.

    Returns
    -------
    FlowSensitivity

    Notes
    -----
    Implicit differentiation of each zone node's equation (Konikow and others 2009, with the
    discharge potential psi of the dewatered part),

        G_i [psi_i(h0_i) - psi_i(h_w + L_i(q_i))] - q_i = 0,   sum_i q_i = Q,

    with L_i(q) = B_i q + C_i q |q|^(P_i-1): writing w_0 = psi_i'(h0_i), w_f = psi_i'(h_f,i) and
    k_i = 1 / (1 + G_i w_f L_i'(q_i)),

        dq_i = k_i (q_i d ln G_i + G_i w_0 dh0_i - G_i w_f q_i |q_i|^(P_i-1) dC_i) - s_i dh_w

    with s_i = G_i w_f k_i, and the balance gives dh_w = sum_i (dq_i + s_i dh_w) / S. At a kink
    of psi (the head at a zone's top or bottom) the derivative of the side the head is on.

    References
    ----------
    Konikow, L.F., Hornberger, G.Z., Halford, K.J., Hanson, R.T. (2009) Revised multi-node well
    (MNW2) package for MODFLOW ground-water flow model. USGS Techniques and Methods 6-A30.
    """
    g = np.asarray(conductance, float)[..., None, :]
    h0 = np.asarray(static_head, float)[..., None, :]
    q = state.zone_flow
    zero = np.zeros_like(g)
    d = zero if nonlinear_loss is None else np.asarray(nonlinear_loss, float)[..., None, :]
    bl = zero if linear_loss is None else np.asarray(linear_loss, float)[..., None, :]
    dewater = zone_top is not None and zone_bottom is not None
    et = -np.asarray(zone_top, float) if dewater else None
    eb = -np.asarray(zone_bottom, float) if dewater else None
    loss, dloss = entrance_loss(q, bl, d, exponent)
    _, wet_f = saturated_potential(state.wellbore_head[..., None] + loss, et, eb)
    _, wet_0 = saturated_potential(h0, et, eb)
    k = 1.0 / (1.0 + g * wet_f * dloss)
    gwk = g * wet_f * k
    p = np.asarray(exponent, float)
    a = np.abs(q)
    with np.errstate(divide="ignore"):
        ap = a if np.all(p == 2.0) else np.where(a > 0, a ** (p - 1.0), np.where(p == 1.0, 1.0, 0.0))
    shape = np.broadcast_shapes(q.shape, g.shape)
    return FlowSensitivity(
        log_conductance=np.broadcast_to(k * q, shape),
        static_head=np.broadcast_to(g * wet_0 * k, shape),
        nonlinear_loss=np.broadcast_to(-gwk * q * ap, shape),
        slope=np.broadcast_to(gwk, shape))
