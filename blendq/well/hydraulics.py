"""Zone hydraulics: zone conductances and the common-wellbore-head inflow model.

Every zone i joins the well through a conductance G_i [m^2/d] and an optional nonlinear loss
D_i [d^2/m^5]; all zones share one wellbore head h_w [m]:

    h0_i - h_w = q_i / G_i + D_i q_i |q_i|^(P-1),     sum_i q_i = Q

with q_i > 0 inflow to the well. The sum of zone flows decreases strictly with h_w, so the root
is unique. Heads are elevations relative to the depth datum (head = -depth to water).

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
    exponent: float = 2.0,
    rtol: float = 1e-12,
    max_iter: int = 100,
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
        D_i [d^2/m^5] (for exponent P = 2); zero or None for a linear zone.
    exponent : float, default 2
        Exponent P of the nonlinear zone loss D q |q|^(P-1).

    Returns
    -------
    WellState
        Arrays of shape (..., n_rates) and (..., n_rates, n_zones).

    Notes
    -----
    Linear case: h_w = (sum G_i h0_i - Q) / sum G_i. Otherwise a vectorised safeguarded Newton
    iteration on h_w inside a bracket [h_lo, max h0], where h_lo = min h0 - min_i(Q/G_i + D_i Q^P)
    is a head at which any single open zone alone would give Q.

    The rounding left in sum_i q_i - Q (about 1e-16 of G |h0|, which is large next to the zone
    flows when heads are elevations) is shared out over the zones in proportion to dq_i/dh_w,
    so that the zone flows sum to Q to rounding of the flows themselves; at Q = 0 they then
    sum to zero within 1e-16 of the crossflow.
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
    d = np.zeros_like(g) if nonlinear_loss is None else np.asarray(nonlinear_loss, float)[..., None, :]
    if np.any(d < 0):
        raise ModelError("nonlinear zone losses must be >= 0")
    g, h0, d = np.broadcast_arrays(g, h0, d)
    shape = np.broadcast_shapes(g.shape[:-1], q.shape)
    q = np.broadcast_to(q, shape)
    h_lin = ((g * h0).sum(-1) - q) / g_total
    if np.all(d == 0):
        hw = np.broadcast_to(h_lin, shape).copy()
        flow = g * (h0 - hw[..., None])
        flow = flow + (g / g_total[..., None]) * (q - flow.sum(-1))[..., None]
        return WellState(rate=q, wellbore_head=hw, zone_flow=flow)

    gb = np.broadcast_to(g, shape + g.shape[-1:])
    h0b = np.broadcast_to(h0, shape + g.shape[-1:])
    db = np.broadcast_to(d, shape + g.shape[-1:])
    with np.errstate(divide="ignore"):
        need = np.where(gb > 0, q[..., None] / np.where(gb > 0, gb, 1.0) + db * q[..., None] ** exponent,
                        np.inf)
    lo = h0b.min(-1) - need.min(-1) - 1e-9 * (1.0 + np.abs(h0b).max(-1))
    hi = h0b.max(-1).copy()
    hw = np.clip(h_lin, lo, hi)
    scale = q + 1e-12 * g_total * (np.abs(h0b).max(-1) + 1.0)
    for _ in range(max_iter):
        flow, dflow = zone_flow_from_head_difference(h0b - hw[..., None], gb, db, exponent)
        f = flow.sum(-1) - q  # decreasing in hw
        lo = np.where(f > 0, hw, lo)
        hi = np.where(f < 0, hw, hi)
        slope = dflow.sum(-1)
        newton = hw + f / np.where(slope > 0, slope, np.inf)
        bad = (newton <= lo) | (newton >= hi) | ~np.isfinite(newton)
        new = np.where(bad, 0.5 * (lo + hi), newton)
        done = (np.abs(f) <= rtol * (scale + np.abs(flow).sum(-1))) | (hi - lo <= 1e-14 * (1 + np.abs(hw)))
        hw = np.where(done, hw, new)
        if np.all(done):
            break
    else:
        raise ModelError("wellbore head iteration did not converge")
    flow, dflow = zone_flow_from_head_difference(h0b - hw[..., None], gb, db, exponent)
    share = dflow / dflow.sum(-1, keepdims=True)
    flow = flow + share * (q - flow.sum(-1))[..., None]
    return WellState(rate=q, wellbore_head=hw, zone_flow=flow)


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
