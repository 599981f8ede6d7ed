"""Step-drawdown analysis: well-loss fits, specific capacity, efficiency and well condition.

The drawdown in a pumped well at rate Q is split into a part linear in Q (aquifer loss plus any
linear loss in the skin, gravel pack and screen) and a nonlinear part (turbulent well loss):

    s_w = B Q + C Q^2           (Jacob 1947)
    s_w = B Q + C Q^n           (Rorabaugh 1953, 1 <= n <= 3.5)

When the steps of a test follow each other without recovery, the drawdown of a step also holds
the still-growing response to the earlier rate increments. The Hantush-Bierschenk procedure
(Kruseman and de Ridder 1990, step-drawdown tests) reads each step's drawdown increment at the
same elapsed time dt after the step began, against the previous step extrapolated in log-time;
the sum of the increments up to step k is s_w,k(dt) = B(dt) Q_k + C Q_k^2.

Everything here works on plain floats and numpy arrays in base units: lengths and depths [m]
(depths positive downward from the datum), rates [m^3/d], times [d], B [d/m^2], Jacob's C
[d^2/m^5]. pint is used only to report C in Walton's units and in :meth:`summary_lines`.

References
----------
Jacob, C.E. (1947) Drawdown test to determine effective radius of artesian well. Trans. ASCE
112, 1047-1064.
Rorabaugh, M.I. (1953) Graphical and theoretical analysis of step-drawdown test of artesian
well. Proc. ASCE 79, separate 362.
Cooper, H.H. and Jacob, C.E. (1946) A generalized graphical method for evaluating formation
constants and summarizing well-field history. Trans. AGU 27(4), 526-534.
Walton, W.C. (1962) Selected analytical methods for well and aquifer evaluation. Illinois State
Water Survey Bulletin 49.
Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data, 2nd ed.
ILRI Publication 47 (step-drawdown tests; Hantush-Bierschenk method).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import linalg, optimize, special

from blendq.errors import InputError, ModelError
from blendq.units import from_base

LN10 = math.log(10.0)
#: bounds of Rorabaugh's exponent n
RORABAUGH_EXPONENT_BOUNDS = (1.0, 3.5)

# Walton (1962) well-condition criteria on Jacob's C, in s^2/ft^5, as a published restatement
# attributes them to Walton (1962), "based on field experience" (a secondary source, not checked
# against Bulletin 49 itself): below 5 properly designed and developed; 5 to 10 mild
# deterioration or clogging; 10 to 40 severe deterioration or clogging; above 40 difficult to
# restore the well to its original capacity.
WALTON_THRESHOLDS_S2_FT5 = (5.0, 10.0, 40.0)
WALTON_LABELS = {
    0: "not classified (C < 0: losses fall with rate, check the data)",
    1: "properly designed and developed",
    2: "mild deterioration or clogging",
    3: "severe deterioration or clogging",
    4: "difficult to restore to original capacity",
}


# --------------------------------------------------------------------------------------------
# forward equations
# --------------------------------------------------------------------------------------------

def step_drawdown_equation(rate, linear_loss, well_loss, exponent=2.0):
    """Drawdown in the pumped well from the well-loss equation.

    Parameters
    ----------
    rate : float or array
        Pumping rate Q [m^3/d], >= 0.
    linear_loss : float or array
        B [d/m^2].
    well_loss : float or array
        C [d^n/m^(3n-1)]; [d^2/m^5] for n = 2.
    exponent : float or array, default 2
        n [-].

    Returns
    -------
    float or array
        s_w [m].

    Notes
    -----
    s_w = B Q + C Q^n (Jacob 1947 for n = 2; Rorabaugh 1953).
    """
    q = np.asarray(rate, float)
    return np.asarray(linear_loss, float) * q + np.asarray(well_loss, float) * q ** np.asarray(
        exponent, float)


def cooper_jacob_step_drawdown(time, step_start, step_rate, transmissivity, storativity,
                               well_radius, skin=0.0, well_loss=0.0, exponent=2.0):
    """Drawdown in a well pumped at a schedule of rates (Cooper-Jacob superposition).

    Parameters
    ----------
    time : array_like
        Times since the schedule's origin [d].
    step_start : array_like, shape (n_steps,)
        Time each rate begins [d], increasing; the rate holds until the next start. A zero rate
        models recovery.
    step_rate : array_like, shape (n_steps,)
        Pumping rate from each start on [m^3/d].
    transmissivity : float
        T [m^2/d].
    storativity : float
        S [-].
    well_radius : float
        r_w [m].
    skin : float, default 0
        Skin factor s [-]: a linear loss s Q / (2 pi T).
    well_loss : float, default 0
        C [d^n/m^(3n-1)] of the turbulent loss C Q(t)^n at the current rate.
    exponent : float, default 2
        n [-].

    Returns
    -------
    ndarray
        Drawdown [m] at each time (0 before the first start).

    Notes
    -----
    s(t) = sum_i dQ_i [ln(2.25 T (t - t_i) / (r_w^2 S)) + 2 s] / (4 pi T) + C Q(t)^n, summed over
    the rate increments dQ_i = Q_i - Q_(i-1) begun before t (Cooper and Jacob 1946). Valid once
    u = r_w^2 S / (4 T (t - t_i)) is small for every increment (below about 0.01).
    """
    t = np.asarray(time, float)
    t0 = np.asarray(step_start, float)
    q = np.asarray(step_rate, float)
    dq = np.diff(q, prepend=0.0)
    elapsed = t[..., None] - t0
    on = elapsed > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        unit_response = (np.log(2.25 * transmissivity * np.where(on, elapsed, 1.0)
                                / (well_radius**2 * storativity)) + 2.0 * skin) / (
            4.0 * np.pi * transmissivity)
    s = np.sum(np.where(on, dq * unit_response, 0.0), axis=-1)
    idx = np.searchsorted(t0, t, side="left") - 1
    current = np.where(idx >= 0, q[np.clip(idx, 0, None)], 0.0)
    return s + well_loss * current**exponent


# --------------------------------------------------------------------------------------------
# fits
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class StepFit:
    """A fitted well-loss equation s_w = B Q + C Q^n.

    Attributes
    ----------
    model : str
        "jacob" (n = 2 fixed) or "rorabaugh" (n fitted).
    linear_loss : float
        B [d/m^2] at the reference time.
    well_loss : float
        C [d^n/m^(3n-1)]; [d^2/m^5] for Jacob.
    exponent : float
        n [-].
    covariance : ndarray, shape (p, p)
        Covariance of (B, C) or (B, C, n) in base units; NaN where the fit leaves no degrees of
        freedom.
    dof : int
        Degrees of freedom of the fit (points minus parameters).
    residual_std : float
        Root-mean-square residual per degree of freedom (NaN for dof = 0): of s_w [m] for
        Rorabaugh, of the straight line s_w / Q [d/m^2] for Jacob.
    rate, drawdown : ndarray
        The fitted points [m^3/d], [m].
    reference_time : float
        Elapsed pumping time the fitted B belongs to [d]; NaN when not defined.
    exponent_at_bound : bool
        True when Rorabaugh's n stopped at a bound of :data:`RORABAUGH_EXPONENT_BOUNDS`.
    absolute_sigma : bool
        True when the covariance comes from given drawdown uncertainties.
    """

    model: str
    linear_loss: float
    well_loss: float
    exponent: float
    covariance: np.ndarray
    dof: int
    residual_std: float
    rate: np.ndarray
    drawdown: np.ndarray
    reference_time: float = np.nan
    exponent_at_bound: bool = False
    absolute_sigma: bool = False

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return ("B", "C") if self.model == "jacob" else ("B", "C", "n")

    @property
    def values(self) -> np.ndarray:
        """Parameter vector (B, C) or (B, C, n) in base units."""
        v = [self.linear_loss, self.well_loss, self.exponent]
        return np.array(v[: len(self.parameter_names)])

    @property
    def stderr(self) -> np.ndarray:
        """Standard errors of :attr:`values` (NaN where undefined)."""
        with np.errstate(invalid="ignore"):
            return np.sqrt(np.diag(self.covariance))

    def drawdown_at(self, rate):
        """Fitted drawdown s_w [m] at ``rate`` [m^3/d]."""
        return step_drawdown_equation(rate, self.linear_loss, self.well_loss, self.exponent)


def _check_points(rate, drawdown, sigma, need: int, model: str):
    q = np.asarray(rate, float).ravel()
    s = np.asarray(drawdown, float).ravel()
    if q.shape != s.shape:
        raise InputError(f"{q.size} rates but {s.size} drawdowns; one drawdown per step expected")
    if not (np.all(np.isfinite(q)) and np.all(q > 0)):
        raise InputError(f"rates {q.tolist()} m^3/d: every step rate must be a number > 0",
                         field="rate")
    if not np.all(np.isfinite(s)):
        raise InputError(f"drawdowns {s.tolist()} m: every step needs a finite drawdown",
                         field="drawdown")
    if np.unique(q).size < need:
        raise InputError(f"the {model} fit has {need} parameters and needs at least {need} steps "
                         f"at distinct rates; got {np.unique(q).size} distinct rate(s) "
                         f"{np.unique(q).tolist()} m^3/d", field="rate")
    sig = None
    if sigma is not None:
        sig = np.broadcast_to(np.asarray(sigma, float), s.shape)
        if not (np.all(np.isfinite(sig)) and np.all(sig > 0)):
            raise InputError(f"drawdown uncertainties {sig.tolist()} m must be > 0",
                             field="drawdown")
    return q, s, sig


def _curve_fit(func, x, y, p0, jac, sigma, **kwargs):
    """scipy curve_fit returning NaN covariance instead of inf when no dof remain."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", optimize.OptimizeWarning)
        popt, pcov = optimize.curve_fit(func, x, y, p0=p0, jac=jac, sigma=sigma,
                                        absolute_sigma=sigma is not None, **kwargs)
    if not np.all(np.isfinite(pcov)):
        pcov = np.full_like(pcov, np.nan)
    return popt, pcov


def _residual_std(resid, sigma, dof):
    r = resid if sigma is None else resid / sigma
    return float(np.sqrt(np.sum(r**2) / dof)) if dof > 0 else np.nan


def fit_jacob(rate, drawdown, sigma=None, reference_time: float = np.nan) -> StepFit:
    """Fit Jacob's well-loss equation as the Hantush-Bierschenk straight line s_w/Q = B + C Q.

    Parameters
    ----------
    rate : array_like, shape (n_steps,)
        Step rates Q [m^3/d], > 0, at least two distinct.
    drawdown : array_like, shape (n_steps,)
        Drawdowns s_w [m] (end of step, or Hantush-Bierschenk sums at equal elapsed time).
    sigma : float or array_like, optional
        One standard deviation of each drawdown [m]; the line's points then carry sigma / Q and
        the covariance uses them as is. Otherwise every point of the line has the same weight
        and the covariance is scaled by the residual variance.
    reference_time : float, optional
        Elapsed time the drawdowns belong to [d] (stored for horizon predictions).

    Returns
    -------
    StepFit
        ``residual_std`` is the root-mean-square residual of s_w / Q per degree of freedom
        [d/m^2] (of (s_w / Q) / (sigma / Q) [-] when ``sigma`` is given).

    Notes
    -----
    s_w = B Q + C Q^2 (Jacob 1947) divided by Q is the straight line s_w / Q = B + C Q with
    intercept B and slope C; the Hantush-Bierschenk procedure plots s_w / Q against Q and draws
    this line (Kruseman and de Ridder 1990, step-drawdown tests). blendq fits that line by
    ordinary least squares, every step with the same weight. In terms of s_w this is a
    least-squares fit weighted by 1 / Q^2: it takes the error of a drawdown to grow in
    proportion to its rate. The fit is done on x = Q / Q_max with parameters in metres
    (b = B Q_max, c = C Q_max^2) and transformed back, covariance included.

    References
    ----------
    Jacob, C.E. (1947) Trans. ASCE 112, 1047-1064.
    Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data,
    2nd ed. ILRI Publication 47 (step-drawdown tests; Hantush-Bierschenk method).
    """
    q, s, sig = _check_points(rate, drawdown, sigma, 2, "Jacob")
    q_ref = q.max()
    x = q / q_ref
    y = s / x  # s_w / Q scaled to metres: b + c x
    w = np.ones_like(y) if sig is None else x / sig  # 1 / sd of y
    design = np.column_stack([np.ones_like(x), x])
    coef, *_ = linalg.lstsq(design * w[:, None], y * w)
    resid = (y - design @ coef) * w
    dof = q.size - 2
    unscaled = linalg.pinv((design * w[:, None]).T @ (design * w[:, None]))
    if sig is not None:
        pcov = unscaled
    elif dof > 0:
        pcov = unscaled * float(resid @ resid) / dof
    else:
        pcov = np.full((2, 2), np.nan)
    scale = np.diag([1.0 / q_ref, 1.0 / q_ref**2])
    rstd = float(np.sqrt(resid @ resid / dof)) if dof > 0 else np.nan
    if sig is None:
        rstd /= q_ref  # residuals of s_w / Q in d/m^2
    return StepFit(model="jacob", linear_loss=float(coef[0] / q_ref),
                   well_loss=float(coef[1] / q_ref**2), exponent=2.0,
                   covariance=scale @ pcov @ scale, dof=dof, residual_std=rstd, rate=q,
                   drawdown=s, reference_time=float(reference_time),
                   absolute_sigma=sig is not None)


def fit_rorabaugh(rate, drawdown, sigma=None, reference_time: float = np.nan,
                  exponent_bounds: tuple[float, float] = RORABAUGH_EXPONENT_BOUNDS) -> StepFit:
    """Fit Rorabaugh's well-loss equation s_w = B Q + C Q^n with n bounded.

    Parameters
    ----------
    rate : array_like, shape (n_steps,)
        Step rates Q [m^3/d], > 0, at least three distinct.
    drawdown : array_like, shape (n_steps,)
        Drawdowns s_w [m].
    sigma : float or array_like, optional
        One standard deviation of each drawdown [m].
    reference_time : float, optional
        Elapsed time the drawdowns belong to [d].
    exponent_bounds : (float, float), default (1, 3.5)
        Bounds of n.

    Returns
    -------
    StepFit
        ``well_loss`` C is in [d^n/m^(3n-1)] (s_w in m for Q in m^3/d).

    Notes
    -----
    s_w = B Q + C Q^n (Rorabaugh 1953), B >= 0, C >= 0. A grid over n with B, C solved
    linearly at each n (variable projection) gives the start; scipy.optimize.curve_fit ('trf'
    with bounds) refines (b, c, n) on x = Q / Q_max, b = B Q_max, c = C Q_max^n [m]. With three
    steps the fit is exact and the standard errors are undefined (NaN). C and n are strongly
    correlated and C varies steeply with n, so the linearised interval of C alone is a rough
    guide; the prediction band of :func:`predict_drawdown` (all three together) is the better
    measure (about nominal coverage in repeated synthetic tests).

    References
    ----------
    Rorabaugh, M.I. (1953) Proc. ASCE 79, separate 362.
    """
    q, s, sig = _check_points(rate, drawdown, sigma, 3, "Rorabaugh")
    lo, hi = float(exponent_bounds[0]), float(exponent_bounds[1])
    if not (0.0 < lo < hi):
        raise InputError(f"exponent bounds {exponent_bounds} must satisfy 0 < low < high")
    q_ref = q.max()
    x = q / q_ref
    w = np.ones_like(s) if sig is None else 1.0 / sig
    grid = np.linspace(lo, hi, 101)[1:-1]
    design = np.stack([np.broadcast_to(x, (grid.size, x.size)), x[None, :] ** grid[:, None]],
                      axis=-1) * w[None, :, None]
    coef = np.einsum("gij,j->gi", np.linalg.pinv(design), s * w)
    coef = np.maximum(coef, 0.0)
    ssr = np.sum((np.einsum("gij,gj->gi", design, coef) - s * w) ** 2, axis=-1)
    best = int(np.argmin(ssr))
    p0 = [max(coef[best, 0], 1e-12 * s.max()), max(coef[best, 1], 1e-12 * s.max()), grid[best]]

    def func(x_, b, c, n):
        return b * x_ + c * x_**n

    def jac(x_, b, c, n):
        xn = x_**n
        return np.column_stack([x_, xn, c * xn * np.log(x_)])

    popt, pcov = _curve_fit(func, x, s, p0, jac, sig, bounds=([0.0, 0.0, lo], [np.inf, np.inf, hi]),
                            method="trf", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=2000)
    b, c, n = popt
    tr = np.array([[1.0 / q_ref, 0.0, 0.0],
                   [0.0, q_ref**-n, -c * math.log(q_ref) * q_ref**-n],
                   [0.0, 0.0, 1.0]])
    dof = q.size - 3
    at_bound = bool(min(n - lo, hi - n) <= 1e-6 * (hi - lo))
    return StepFit(model="rorabaugh", linear_loss=float(b / q_ref), well_loss=float(c * q_ref**-n),
                   exponent=float(n), covariance=tr @ pcov @ tr.T, dof=dof,
                   residual_std=_residual_std(s - func(x, *popt), sig, dof), rate=q, drawdown=s,
                   reference_time=float(reference_time), exponent_at_bound=at_bound,
                   absolute_sigma=sig is not None)


# --------------------------------------------------------------------------------------------
# Hantush-Bierschenk: drawdown increments at equal elapsed time
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class EqualTimeDrawdowns:
    """Hantush-Bierschenk increments at equal elapsed time dt after each step start.

    All arrays have shape (n_steps,).

    Attributes
    ----------
    elapsed : float
        dt [d].
    step_drawdown : ndarray
        Drawdown read at t_k + dt [m].
    extrapolated : ndarray
        Previous step's drawdown extrapolated to t_k + dt [m] (0 at the start of a sequence).
    increment : ndarray
        ds_k = step_drawdown - extrapolated [m].
    drawdown : ndarray
        s_w,k(dt): sum of the increments of the sequence up to step k [m].
    log_slope : ndarray
        Drawdown per log10 cycle of superposition time in each step's later part [m] (NaN when
        a step has fewer than two readings there).
    intercept : ndarray
        Intercept of that straight line [m].
    sequence_start : ndarray of bool
        True for a step that starts from static (first step, or recovered before it).
    """

    elapsed: float
    step_drawdown: np.ndarray
    extrapolated: np.ndarray
    increment: np.ndarray
    drawdown: np.ndarray
    log_slope: np.ndarray
    intercept: np.ndarray
    sequence_start: np.ndarray


def superposition_log_time(time, step_start, step_rate, sequence_start, step_index: int):
    """Superposed log-time of step k: X_k(t) = sum_i (dQ_i / Q_k) log10(t - t_i).

    Parameters
    ----------
    time : array_like
        Times [d] after the start of step ``step_index``.
    step_start, step_rate : array_like, shape (n_steps,)
        Start times [d] and rates [m^3/d], in time order.
    sequence_start : array_like of bool, shape (n_steps,)
        True where a step starts from static (no earlier increment carries into it).
    step_index : int
        k (0-based).

    Returns
    -------
    ndarray
        X_k(t) [-]; under Cooper-Jacob, drawdown in step k is a + b Q_k X_k(t) + C Q_k^2 with
        b = ln(10) / (4 pi T).
    """
    t0 = np.asarray(step_start, float)
    q = np.asarray(step_rate, float)
    first = int(np.flatnonzero(np.asarray(sequence_start, bool)[: step_index + 1])[-1])
    idx = np.arange(first, step_index + 1)
    dq = q[idx] - np.where(idx > first, q[np.maximum(idx - 1, 0)], 0.0)
    t = np.asarray(time, float)
    return np.sum(dq / q[step_index] * np.log10(t[..., None] - t0[idx]), axis=-1)


def equal_time_drawdowns(time, drawdown, step_start, step_end, step_rate, sequence_start,
                         elapsed: float, late_fraction: float = 0.5,
                         step_labels=None) -> EqualTimeDrawdowns:
    """Hantush-Bierschenk drawdown sums s_w,k(dt) from a drawdown record and the step schedule.

    Parameters
    ----------
    time : array_like
        Reading times [d] (same origin as the steps).
    drawdown : array_like
        Drawdown at each reading [m].
    step_start, step_end : array_like, shape (n_steps,)
        Step start and end times [d], in time order, not overlapping.
    step_rate : array_like, shape (n_steps,)
        Rates [m^3/d], > 0.
    sequence_start : array_like of bool, shape (n_steps,)
        True where a step starts from static (the first step, or one after full recovery).
    elapsed : float
        dt [d], at most the shortest step duration.
    late_fraction : float, default 0.5
        Share of each step (its later part) whose readings define the log-time straight line
        that is extrapolated into the next step.
    step_labels : sequence, optional
        Names of the steps for messages.

    Returns
    -------
    EqualTimeDrawdowns

    Raises
    ------
    InputError
        When dt exceeds a step, a step has no reading near t_k + dt, or a step followed by
        another without recovery has fewer than two readings in its later part.

    Notes
    -----
    In each step the readings of its later part are fitted by s = alpha_k + beta_k X_k(t), with
    X_k the superposed log-time of :func:`superposition_log_time`; under Cooper-Jacob this line
    is exact, so it extrapolates step k as if its rate went on. The increment of step k is
    ds_k = s(t_k + dt) - [alpha_(k-1) + beta_(k-1) X_(k-1)(t_k + dt)], and
    s_w,k(dt) = sum of ds over the sequence = B(dt) Q_k + C Q_k^2
    (Hantush-Bierschenk; Kruseman and de Ridder 1990). The graphical method extrapolates each
    step by eye on semi-log paper; the superposed log-time makes that extrapolation exact for
    Cooper-Jacob drawdown.

    References
    ----------
    Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data,
    2nd ed., step-drawdown tests (Hantush-Bierschenk method).
    """
    t = np.asarray(time, float)
    s = np.asarray(drawdown, float)
    t0 = np.asarray(step_start, float)
    t1 = np.asarray(step_end, float)
    q = np.asarray(step_rate, float)
    first = np.asarray(sequence_start, bool).copy()
    first[0] = True
    n = t0.size
    labels = list(step_labels) if step_labels is not None else [str(k + 1) for k in range(n)]
    if not (0.0 < late_fraction <= 1.0):
        raise InputError(f"late_fraction {late_fraction} must be in (0, 1]")
    duration = t1 - t0
    if not (np.isfinite(elapsed) and elapsed > 0):
        raise InputError(f"elapsed time {elapsed} d must be > 0")
    alpha = np.full(n, np.nan)
    beta = np.full(n, np.nan)
    at_dt = np.full(n, np.nan)
    for k in range(n):
        if elapsed > duration[k] * (1 + 1e-9):
            raise InputError(f"elapsed time {elapsed:.6g} d is longer than step {labels[k]} "
                             f"({duration[k]:.6g} d); use at most the shortest step", field="time")
        inside = (t > t0[k]) & (t <= t1[k] * (1 + 1e-15) + 1e-12) & np.isfinite(s)
        tk, sk = t[inside], s[inside]
        target = t0[k] + elapsed
        gap = 0.02 * duration[k] + 1e-9
        if tk.size == 0 or target < tk.min() - gap or target > tk.max() + gap:
            raise InputError(f"no water-level reading near {elapsed:.6g} d after the start of "
                             f"step {labels[k]} (readings in the step: {tk.size}); the levels "
                             "must cover each step", field="time")
        # interpolate on the superposed log-time (a straight line under Cooper-Jacob), or on
        # log elapsed time where a falling rate makes that non-monotonic
        xk_all = superposition_log_time(tk, t0, q, first, k)
        if np.all(np.diff(xk_all) > 0):
            at_dt[k] = np.interp(superposition_log_time(target, t0, q, first, k), xk_all, sk)
        else:
            at_dt[k] = np.interp(np.log(elapsed), np.log(tk - t0[k]), sk)
        late = tk - t0[k] >= (1.0 - late_fraction) * duration[k] - 1e-12
        needs_line = k + 1 < n and not first[k + 1]
        if np.count_nonzero(late) >= 2:
            xk = xk_all[late]
            if np.ptp(xk) > 0:
                beta[k], alpha[k] = np.polyfit(xk, sk[late], 1)
        if needs_line and not np.isfinite(beta[k]):
            raise InputError(f"step {labels[k]} has {np.count_nonzero(late)} water-level "
                             f"reading(s) at distinct times in its later {late_fraction:.0%}; "
                             "at least 2 are needed to extrapolate it into the next step",
                             field="time")
    extrapolated = np.zeros(n)
    for k in range(1, n):
        if not first[k]:
            xprev = superposition_log_time(t0[k] + elapsed, t0, q, first, k - 1)
            extrapolated[k] = alpha[k - 1] + beta[k - 1] * xprev
    increment = at_dt - extrapolated
    seq_id = np.cumsum(first)
    total = pd.Series(increment).groupby(seq_id).cumsum().to_numpy()
    return EqualTimeDrawdowns(elapsed=float(elapsed), step_drawdown=at_dt,
                              extrapolated=extrapolated, increment=increment, drawdown=total,
                              log_slope=beta, intercept=alpha, sequence_start=first)


# --------------------------------------------------------------------------------------------
# apparent transmissivity from the linear loss
# --------------------------------------------------------------------------------------------

#: Storativity [-] assumed for the apparent transmissivity from B when the zones give none.
#: Common practice for a confined aquifer; T from B depends on it only through a logarithm.
ASSUMED_STORATIVITY = 1e-4


def transmissivity_from_linear_loss(linear_loss: float, time: float, well_radius: float,
                                    storativity: float = ASSUMED_STORATIVITY) -> float:
    """Apparent transmissivity from Jacob's B read as a Cooper-Jacob drawdown per unit rate.

    Parameters
    ----------
    linear_loss : float
        B [d/m^2] at elapsed pumping time ``time``.
    time : float
        Elapsed pumping time B belongs to [d].
    well_radius : float
        r_w [m].
    storativity : float, default :data:`ASSUMED_STORATIVITY`
        S [-].

    Returns
    -------
    float
        T [m^2/d] solving B = ln(2.25 T t / (r_w^2 S)) / (4 pi T); NaN when B, t, r_w or S is
        not positive and finite.

    Notes
    -----
    Cooper and Jacob (1946) at the well face. B also holds any linear loss in the skin, gravel
    pack and screen, so the T found this way is apparent: a lower bound of the aquifer's T for a
    positive skin. The function ln(a T) / T falls for a T > e, so the root there is unique.

    References
    ----------
    Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU 27(4), 526-534.
    """
    b, t, r, st = (float(v) for v in (linear_loss, time, well_radius, storativity))
    if not all(np.isfinite(v) and v > 0 for v in (b, t, r, st)):
        return np.nan
    a = 2.25 * t / (r * r * st)

    def f(tt):
        return math.log(a * tt) / (4.0 * math.pi * tt) - b

    lo = math.e / a
    if f(lo) <= 0:
        return np.nan
    hi = lo * 10.0
    while f(hi) > 0:
        hi *= 10.0
        if hi > 1e12:
            return np.nan
    return float(optimize.brentq(f, lo, hi, xtol=1e-12 * hi, rtol=1e-12))


# --------------------------------------------------------------------------------------------
# well condition
# --------------------------------------------------------------------------------------------

def well_loss_in(well_loss, unit: str):
    """Jacob's C [d^2/m^5] in another unit (``"s**2/ft**5"``, ``"min**2/m**5"``), via pint."""
    return from_base(well_loss, "well_loss", unit)


def walton_class(well_loss):
    """Walton's (1962) well-condition class from Jacob's well-loss coefficient.

    Parameters
    ----------
    well_loss : float or array
        C [d^2/m^5].

    Returns
    -------
    int or ndarray of int
        0 for C < 0 (not classified), 1 for C < 5 s^2/ft^5, 2 for 5 <= C < 10, 3 for
        10 <= C < 40, 4 for C >= 40; labels in :data:`WALTON_LABELS`.

    Notes
    -----
    Thresholds 5, 10 and 40 s^2/ft^5 as a published restatement attributes them to Walton
    (1962), "based on field experience" (a secondary source; see
    :data:`WALTON_THRESHOLDS_S2_FT5`);
    in SI about 0.53, 1.06 and 4.2 min^2/m^5 (1 s^2/ft^5 = 0.1056 min^2/m^5).

    References
    ----------
    Walton, W.C. (1962) Illinois State Water Survey Bulletin 49.
    """
    c = np.asarray(well_loss_in(np.asarray(well_loss, float), "s**2/ft**5"), float)
    # a value on a threshold belongs to the class above it, allowing for unit round-off
    cls = np.where(c < 0, 0, 1 + np.searchsorted(WALTON_THRESHOLDS_S2_FT5, c * (1 + 1e-9),
                                                 side="right"))
    return int(cls) if cls.ndim == 0 else cls


# --------------------------------------------------------------------------------------------
# prediction
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class DrawdownPrediction:
    """Predicted drawdown and pumping level against rate.

    Attributes
    ----------
    rate : ndarray
        Q [m^3/d].
    drawdown, drawdown_low, drawdown_high : ndarray
        s_w and its central ``interval`` band [m].
    pumping_level, pumping_level_low, pumping_level_high : ndarray
        Static level + drawdown [m depth] (NaN without a static level); ``_low`` is the
        shallower bound.
    interval : float
    time : float
        Elapsed pumping time of the prediction [d] (the fit's reference time by default).
    model : str
    """

    rate: np.ndarray
    drawdown: np.ndarray
    drawdown_low: np.ndarray
    drawdown_high: np.ndarray
    pumping_level: np.ndarray
    pumping_level_low: np.ndarray
    pumping_level_high: np.ndarray
    interval: float
    time: float
    model: str


def _equation_gradient(q, values, model):
    """d s_w / d(B, C[, n]) at rates q; shape (n_rates, p)."""
    if model == "jacob":
        return np.stack([q, q * q], axis=-1)
    _, c, n = values
    qn = q**n
    with np.errstate(divide="ignore", invalid="ignore"):
        dn = np.where(q > 0, c * qn * np.log(np.where(q > 0, q, 1.0)), 0.0)
    return np.stack([q, qn, dn], axis=-1)


def predict_drawdown(fit: StepFit, rate, *, static_level: float | None = None,
                     time: float | None = None, transmissivity: float | None = None,
                     interval: float = 0.90, method: str = "delta", draws: int = 2000,
                     seed: int = 0) -> DrawdownPrediction:
    """Drawdown and pumping level at any rates, with a band from the fit covariance.

    Parameters
    ----------
    fit : StepFit
    rate : array_like
        Rates [m^3/d], >= 0.
    static_level : float, optional
        Static water level [m depth]; gives the pumping level.
    time : float, optional
        Elapsed pumping time [d] of the prediction (a horizon); needs ``transmissivity`` and a
        fit with a reference time.
    transmissivity : float, optional
        T [m^2/d] for the Cooper-Jacob time term.
    interval : float, default 0.90
        Central probability of the band.
    method : {"delta", "draws"}
        Linearised propagation (Student t with the fit's dof when the covariance is scaled by
        the residuals) or seeded multivariate-normal draws of the parameters.
    draws : int, default 2000
    seed : int, default 0

    Returns
    -------
    DrawdownPrediction

    Notes
    -----
    s_w(Q, t) = B(t) Q + C Q^n with B(t) = B(t0) + (2.3 / (4 pi T)) log10(t / t0) (Cooper and
    Jacob 1946), t0 the fit's reference time. The time term is taken as known: the band covers
    the fit's parameters only.
    """
    q = np.asarray(rate, float)
    if np.any(~np.isfinite(q)) or np.any(q < 0):
        raise ModelError("prediction rates must be finite and >= 0")
    if not (0.0 < interval < 1.0):
        raise InputError(f"interval {interval} must be between 0 and 1")
    shift = 0.0
    when = fit.reference_time
    if time is not None:
        if transmissivity is None or not np.isfinite(transmissivity) or transmissivity <= 0:
            raise ModelError("a prediction at another pumping time needs the transmissivity T > 0")
        if not np.isfinite(fit.reference_time) or fit.reference_time <= 0:
            raise ModelError("this fit has no reference time (steps without recovery read at "
                             "step ends); give the levels record for an equal-time analysis")
        if not (np.isfinite(time) and time > 0):
            raise ModelError(f"prediction time {time} d must be > 0")
        shift = math.log(time / fit.reference_time) / (4.0 * math.pi * transmissivity)
        when = float(time)
    values = fit.values
    mean = step_drawdown_equation(q, values[0] + shift, fit.well_loss, fit.exponent)
    cov = fit.covariance
    tail = 0.5 * (1.0 + interval)
    if not np.all(np.isfinite(cov)):
        low = high = np.full_like(mean, np.nan)
    elif method == "delta":
        grad = _equation_gradient(q.ravel(), values, fit.model)
        sd = np.sqrt(np.maximum(np.einsum("ri,ij,rj->r", grad, cov, grad), 0.0)).reshape(q.shape)
        # Student t and normal quantiles (scipy.special: the same functions scipy.stats uses)
        z = special.stdtrit(fit.dof, tail) if (fit.dof > 0 and not fit.absolute_sigma) else \
            special.ndtri(tail)
        low, high = mean - z * sd, mean + z * sd
    elif method == "draws":
        rng = np.random.default_rng(seed)
        p = rng.multivariate_normal(values, cov, size=int(draws), method="eigh")
        n = p[:, 2:3] if fit.model == "rorabaugh" else fit.exponent
        sims = (p[:, 0:1] + shift) * q.ravel() + p[:, 1:2] * q.ravel() ** n
        low, high = (np.quantile(sims, [1.0 - tail, tail], axis=0)).reshape((2,) + q.shape)
    else:
        raise InputError(f'method "{method}" is not known (expected "delta" or "draws")')
    base = np.nan if static_level is None else float(static_level)
    return DrawdownPrediction(rate=q, drawdown=mean, drawdown_low=low, drawdown_high=high,
                              pumping_level=base + mean, pumping_level_low=base + low,
                              pumping_level_high=base + high, interval=float(interval),
                              time=float(when), model=fit.model)


@dataclass(frozen=True)
class LinearLossComparison:
    """The step test's linear loss B against the zone model's 1 / sum(G_i).

    Attributes
    ----------
    step_linear_loss, step_stderr : float
        B from the step-drawdown fit and its standard error [d/m^2].
    zone_linear_loss, zone_stderr : float
        1 / sum(G_i) from the zone model and its standard error [d/m^2] (NaN if unknown).
    relative_difference : float
        (zone - step) / step [-].
    step_relative_stderr, zone_relative_stderr : float
    better_constrained : str
        "step test", "zone model" or "undetermined" (smaller relative standard error).
    """

    step_linear_loss: float
    step_stderr: float
    zone_linear_loss: float
    zone_stderr: float
    relative_difference: float
    step_relative_stderr: float
    zone_relative_stderr: float
    better_constrained: str


def compare_with_zone_model(fit: StepFit, conductance, conductance_stderr=None
                            ) -> LinearLossComparison:
    """Compare the fitted linear loss B with the zone model's linear term 1 / sum(G_i).

    Parameters
    ----------
    fit : StepFit
    conductance : array_like, shape (n_zones,) or (n_draws, n_zones)
        Zone conductances G_i [m^2/d] (see :mod:`blendq.well.hydraulics`), evaluated at the fit's
        reference time for a like-for-like comparison; a 2-D array holds draws.
    conductance_stderr : array_like, shape (n_zones,), optional
        Independent standard errors of G_i [m^2/d] (1-D conductance only).

    Returns
    -------
    LinearLossComparison

    Notes
    -----
    With a common wellbore head and linear zones, h_w = (sum G_i h0_i - Q) / sum G_i, so the
    zone model's drawdown per unit rate is 1 / sum G_i. Its standard error by the delta method
    is sd(sum G) / (sum G)^2. The step test's B also holds linear losses above the zones
    (screen, gravel pack), so B >= 1 / sum G is expected.
    """
    g = np.asarray(conductance, float)
    if g.ndim not in (1, 2) or g.shape[-1] == 0 or np.any(~np.isfinite(g)) or np.any(g < 0):
        raise InputError("zone conductances must be finite, >= 0, shaped (zones,) or "
                         "(draws, zones)")
    total = g.sum(-1)
    if np.any(total <= 0):
        raise ModelError("no open zone: the sum of zone conductances is zero")
    if g.ndim == 2:
        zone_b = 1.0 / total
        zone, zone_sd = float(zone_b.mean()), float(zone_b.std(ddof=1)) if zone_b.size > 1 \
            else np.nan
    else:
        zone = float(1.0 / total)
        if conductance_stderr is None:
            zone_sd = np.nan
        else:
            sd = np.broadcast_to(np.asarray(conductance_stderr, float), g.shape)
            zone_sd = float(np.sqrt(np.sum(sd**2)) / total**2)
    step, step_sd = fit.linear_loss, float(fit.stderr[0])
    rel_step = abs(step_sd / step) if step != 0 else np.nan
    rel_zone = abs(zone_sd / zone)
    if np.isfinite(rel_step) and np.isfinite(rel_zone):
        better = "step test" if rel_step <= rel_zone else "zone model"
    else:
        better = "undetermined"
    return LinearLossComparison(step_linear_loss=step, step_stderr=step_sd,
                                zone_linear_loss=zone, zone_stderr=zone_sd,
                                relative_difference=(zone - step) / step,
                                step_relative_stderr=rel_step, zone_relative_stderr=rel_zone,
                                better_constrained=better)

