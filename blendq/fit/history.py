"""Zone concentrations over time, c_i(t), from the monitoring history and the step test.

Each zone's concentration follows a time model: a constant, a linear trend, an annual
harmonic, or both,

    c_i(t) = a_i + b_i tau + s_i sin(2 pi tau) + k_i cos(2 pi tau),   tau = (t - t0) / year,

with t0 the date of the step test. The step test fixes the zone mixing (each history sample's
zone shares come from the fitted hydraulic model at its rate) and anchors c_i(t0) (the zone
values of the step fit, with their spread, as prior rows); the history samples, each at its
rate and date, then inform the coefficients: a weighted linear least-squares problem
(Draper and Smith 1998, ch. 9). A history sample's error is its lab error and the water's
variability from sample to sample, sigma_T, estimated from the residual scatter: that is the
temporal variability of the analyte, which replaces the ``temporal_cv`` setting.

A time term (trend or season) is resolved per zone only when the history's rates move the
zone shares enough to tell the zones' terms apart: the column-scaled condition number of its
block of the design at most ``settings.history_condition_limit``. Otherwise the term is one
term of the blend, added at every rate, and reported as such rather than invented per zone.
The model (when "auto") is the one with the smallest corrected Akaike information criterion
(AICc; Hurvich and Tsai 1989).

References
----------
Draper, N.R. and Smith, H. (1998) Applied Regression Analysis, 3rd ed. Wiley.
Hurvich, C.M. and Tsai, C.-L. (1989) Regression and time series model selection in small
samples. Biometrika 76(2), 297-307.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from blendq.errors import ModelError

#: days in a year of the time models [d] (the Julian year)
YEAR = 365.25
#: the time models, in order of complexity
MODELS = ("constant", "trend", "seasonal", "trend+seasonal")
#: fewest detected history results of an analyte for a time model
MIN_SAMPLES = 6
_ITERATIONS = 30


def years_since(times, t0: pd.Timestamp) -> np.ndarray:
    """(t - t0) in years [a] (:data:`YEAR` days each)."""
    t = pd.to_datetime(pd.Series(times)).to_numpy("datetime64[ns]")
    return (t - np.datetime64(t0, "ns")) / np.timedelta64(1, "D") / YEAR


def _terms(model: str) -> list[str]:
    return {"constant": [], "trend": ["trend"], "seasonal": ["seasonal"],
            "trend+seasonal": ["trend", "seasonal"]}[model]


def _basis(term: str, tau: np.ndarray) -> np.ndarray:
    """Time functions of a term, shape (n, 1 or 2)."""
    if term == "trend":
        return tau[:, None]
    return np.column_stack([np.sin(2 * np.pi * tau), np.cos(2 * np.pi * tau)])


@dataclass(frozen=True)
class Layout:
    """Columns of the design: zone constants, then each term per zone or for the blend.

    Attributes
    ----------
    n_zones : int
    terms : list of (term, resolution)
        term "trend" or "seasonal"; resolution "zone" or "blend".
    """

    n_zones: int
    terms: tuple

    @property
    def names(self) -> list[str]:
        out = [f"a{i}" for i in range(self.n_zones)]
        for term, res in self.terms:
            parts = ["b"] if term == "trend" else ["s", "k"]
            if res == "zone":
                out += [f"{p}{i}" for i in range(self.n_zones) for p in parts]
            else:
                out += [f"{p}_blend" for p in parts]
        return out

    def rows(self, shares: np.ndarray, tau: np.ndarray, terms=None) -> np.ndarray:
        """Design rows for samples with ``shares`` (..., n_zones) at times ``tau`` (...).

        ``terms`` limits the time terms evaluated (others give zero columns): the annual
        mean leaves out the season.
        """
        shares = np.asarray(shares, float)
        tau = np.broadcast_to(np.asarray(tau, float), shares.shape[:-1])
        flat_w = shares.reshape(-1, self.n_zones)
        flat_t = tau.reshape(-1)
        cols = [flat_w]
        for term, res in self.terms:
            f = _basis(term, flat_t)
            if terms is not None and term not in terms:
                f = np.zeros_like(f)
            if res == "zone":
                cols.append((flat_w[:, :, None] * f[:, None, :]).reshape(len(flat_t),
                                                                         f.shape[1] * self.n_zones))
            else:
                cols.append(f)
        x = np.concatenate(cols, axis=1)
        return x.reshape(*shares.shape[:-1], x.shape[-1])


@dataclass
class TimeFit:
    """The time model of one analyte fitted to its history and the step test.

    Attributes
    ----------
    analyte : str
    model : str
        One of :data:`MODELS`.
    layout : Layout
    coef : ndarray (n_coef,)
        Coefficients [mg/L, mg/L/a] in the order of ``layout.names``.
    cov : ndarray (n_coef, n_coef)
        Their covariance.
    sigma_temporal : float
        sd of the water's concentration from sample to sample about the model [mg/L].
    temporal_cv : float
        The water's variability at a fixed rate over the mean of the history results [-]:
        the scatter about the model and the fitted season (a sample may fall anywhere in it),
        what the step test's window takes as ``temporal_cv``.
    residual_cv : float
        sigma_temporal over the mean of the history results [-]: the spread about the time
        model, season included in the model (the forecast's).
    aicc : dict
        AICc of each model tried.
    conditions : dict
        Term -> column-scaled condition number of its per-zone block.
    t0 : Timestamp
        Date of the step test (tau = 0).
    n : int
        History results used.
    residuals : ndarray (n,)
        History result minus fitted value [mg/L].
    leverage : ndarray (n,)
        Diagonal of the hat matrix of the history rows [-].
    sigma : ndarray (n,)
        Error of each history result: lab and temporal [mg/L].
    used : DataFrame
        The history rows used (with their shares), in time order.
    notes : list of str
    """

    analyte: str
    model: str
    layout: Layout
    coef: np.ndarray
    cov: np.ndarray
    sigma_temporal: float
    temporal_cv: float
    residual_cv: float
    aicc: dict
    conditions: dict
    t0: pd.Timestamp
    n: int
    residuals: np.ndarray
    leverage: np.ndarray
    sigma: np.ndarray
    used: pd.DataFrame
    notes: list = field(default_factory=list)

    def resolution(self, term: str) -> str | None:
        """"zone", "blend", or None when the model has no such term."""
        return dict(self.layout.terms).get(term)

    def draws(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """Posterior draws of the coefficients, shape (n, n_coef) (Gaussian: the model is
        linear in them)."""
        return rng.multivariate_normal(self.coef, self.cov, size=n, method="eigh")

    def trend(self) -> tuple[np.ndarray, np.ndarray]:
        """Trend of each zone (or of the blend, one value) [mg/L/a] and its sd."""
        idx = [i for i, n in enumerate(self.layout.names) if n.startswith("b")]
        return self.coef[idx], np.sqrt(np.diag(self.cov)[idx])

    def amplitude(self) -> np.ndarray:
        """Seasonal amplitude sqrt(s^2 + k^2) of each zone (or the blend) [mg/L]."""
        names = self.layout.names
        s = [i for i, n in enumerate(names) if n.startswith("s")]
        k = [i for i, n in enumerate(names) if n.startswith("k")]
        return np.hypot(self.coef[s], self.coef[k])


def condition_number(block: np.ndarray) -> float:
    """Ratio of the largest to the smallest singular value of ``block`` with unit columns
    (inf for a zero column or a rank-deficient block)."""
    norms = np.linalg.norm(block, axis=0)
    if block.shape[1] == 0:
        return 1.0
    if np.any(norms <= 0):
        return np.inf
    sv = np.linalg.svd(block / norms, compute_uv=False)
    return float(sv[0] / sv[-1]) if sv[-1] > 0 else np.inf


def resolve_terms(model: str, shares: np.ndarray, tau: np.ndarray,
                  condition_limit: float) -> tuple[Layout, dict]:
    """Per zone or for the blend, each time term of ``model``, decided from the conditioning
    of its per-zone block of the design; returns the layout and the condition numbers."""
    n_zones = shares.shape[1]
    terms, conds = [], {}
    for term in _terms(model):
        zone = Layout(n_zones, ((term, "zone"),)).rows(shares, tau)[:, n_zones:]
        conds[term] = condition_number(zone) if n_zones > 1 else 1.0
        terms.append((term, "zone" if conds[term] <= condition_limit else "blend"))
    return Layout(n_zones, tuple(terms)), conds


def _solve(x, y, sd):
    """Weighted least squares: coefficients, covariance, hat diagonal of all rows."""
    xw, yw = x / sd[:, None], y / sd
    u, sv, vt = np.linalg.svd(xw, full_matrices=False)
    keep = sv > sv[0] * 1e-12
    u, sv, vt = u[:, keep], sv[keep], vt[keep]
    coef = vt.T @ ((u.T @ yw) / sv)
    cov = (vt.T / sv**2) @ vt
    hat = np.sum(u**2, axis=1)
    return coef, cov, hat


def fit_time_model(tau, shares, values, lab_sd, anchor, anchor_sd, model: str = "auto",
                   condition_limit: float = 30.0) -> dict:
    """Fit a time model to history results and the step-test anchor.

    Parameters
    ----------
    tau : array_like (n,)
        Time of each history result since the step test [a].
    shares : array_like (n, n_zones)
        Zone shares of the discharge at each result's rate [-].
    values : array_like (n,)
        Results [mg/L].
    lab_sd : array_like (n,)
        Lab error of each result (1 sd) [mg/L].
    anchor, anchor_sd : array_like (n_zones,)
        Zone values of the step fit at tau = 0 and their sd [mg/L]; an infinite sd leaves a
        zone unanchored.
    model : str
        One of :data:`MODELS`, or "auto" for the smallest AICc.
    condition_limit : float
        Largest condition number of a term's per-zone block for a per-zone term [-].

    Returns
    -------
    dict
        model, layout, coef, cov, sigma_temporal, aicc, conditions, residuals, leverage, sigma.
    """
    tau, values = np.asarray(tau, float), np.asarray(values, float)
    shares, lab_sd = np.asarray(shares, float), np.asarray(lab_sd, float)
    anchor, anchor_sd = np.asarray(anchor, float), np.asarray(anchor_sd, float)
    n, n_zones = shares.shape
    if n < MIN_SAMPLES:
        raise ModelError(f"a time model needs at least {MIN_SAMPLES} detected history results "
                         f"(got {n})")
    tried = MODELS if model == "auto" else (model,)
    fits = {}
    for name in tried:
        layout, conds = resolve_terms(name, shares, tau, condition_limit)
        fits[name] = _fit_one(layout, conds, tau, shares, values, lab_sd, anchor, anchor_sd)
        fits[name]["model"] = name
    aicc = {k: f["aicc"] for k, f in fits.items()}
    best = min(tried, key=lambda k: (aicc[k], MODELS.index(k)))
    out = fits[best]
    out["aicc"] = aicc
    return out


def _fit_one(layout, conds, tau, shares, values, lab_sd, anchor, anchor_sd) -> dict:
    n, n_zones = shares.shape
    x_hist = layout.rows(shares, tau)
    pinned = np.isfinite(anchor_sd) & (anchor_sd > 0)
    x_anchor = layout.rows(np.eye(n_zones)[pinned], np.zeros(int(pinned.sum())))
    x = np.vstack([x_hist, x_anchor])
    y = np.concatenate([values, anchor[pinned]])
    p = x.shape[1]
    var_t = max(float(np.var(values)), 1e-30)
    for _ in range(_ITERATIONS):
        sd = np.concatenate([np.sqrt(lab_sd**2 + var_t), anchor_sd[pinned]])
        coef, cov, hat = _solve(x, y, sd)
        r = values - x_hist @ coef
        dof = max(n - float(np.sum(hat[:n])), 1.0)
        # method of moments: E(r_j^2) = (sigma_lab^2 + sigma_T^2)(1 - h_jj)
        new = max(float(np.sum(r**2) - np.sum(lab_sd**2 * (1 - hat[:n]))) / dof, 0.0)
        if abs(new - var_t) <= 1e-10 * max(var_t, 1e-30):
            var_t = new
            break
        var_t = new
    sd = np.concatenate([np.sqrt(lab_sd**2 + var_t), anchor_sd[pinned]])
    coef, cov, hat = _solve(x, y, sd)
    r = values - x_hist @ coef
    k = p + 1
    # AICc of the history rows, the temporal sd fitted (Hurvich and Tsai 1989): -2 ln L of
    # independent normal errors sigma_j plus the penalty of k parameters
    neg2_log_l = float(np.sum(np.log(2 * np.pi * sd[:n] ** 2) + (r / sd[:n]) ** 2))
    aicc = neg2_log_l + 2 * k + (2 * k * (k + 1) / (n - k - 1) if n - k - 1 > 0 else np.inf)
    return dict(layout=layout, conditions=conds, coef=coef, cov=cov,
                sigma_temporal=float(np.sqrt(var_t)), aicc=float(aicc), residuals=r,
                leverage=hat[:n], sigma=sd[:n])


def history_time_fits(project, fit, draws=None) -> dict[str, TimeFit]:
    """The time model of every fitted analyte that has a history.

    Parameters
    ----------
    project : blendq.inputs.project.Project
        With ``history`` (:mod:`blendq.inputs.monitoring`).
    fit : blendq.fit.estimation.FitResult
        The step fit: the hydraulic model gives each history sample's shares; its zone values
        anchor c_i(t0).
    draws : blendq.fit.uncertainty.Draws, optional
        Posterior draws of the step fit: the spread of the anchor (else the linearised sd).

    Returns
    -------
    dict
        Analyte -> :class:`TimeFit`; an analyte with fewer than :data:`MIN_SAMPLES` usable
        results (detected, at a known rate) is left out.
    """
    h = project.history
    s = project.settings
    out = {}
    if h is None or h.empty:
        return out
    t0 = step_test_date(project)
    for analyte in fit.analytes:
        rows = h[(h["analyte"] == analyte)]
        usable = rows[~rows["nondetect"].astype(bool) & np.isfinite(rows["rate"].to_numpy(float))
                      & (rows["rate"].to_numpy(float) > 0)]
        if len(usable) < MIN_SAMPLES:
            continue
        usable = usable.sort_values("sampled_at", kind="stable").reset_index(drop=True)
        tau = years_since(usable["sampled_at"], t0)
        shares = np.asarray(fit.model.weights(usable["rate"].to_numpy(float)), float)
        values = usable["value"].to_numpy(float)
        lab = usable["uncertainty"].to_numpy(float)
        lab = np.where(np.isfinite(lab), lab, s.default_relative_uncertainty * values)
        j = fit.analytes.index(analyte)
        anchor = fit.zone_values()[:, j]
        if draws is not None:
            anchor_sd = np.std(draws.zone_values[:, :, j], axis=0)
        else:
            from blendq.fit.uncertainty import linearised_zone_sd

            anchor_sd = linearised_zone_sd(fit)[:, j]
        floor = 1e-6 * max(float(np.max(np.abs(values))), 1e-12)
        anchor_sd = np.maximum(anchor_sd, floor)
        model = s.time_model.get(analyte, s.time_model.get("default", "auto"))
        res = fit_time_model(tau, shares, values, lab, anchor, anchor_sd, model,
                             s.history_condition_limit)
        notes = []
        nondetect = int(rows["nondetect"].astype(bool).sum())
        no_rate = len(rows) - len(usable) - nondetect
        if nondetect:
            notes.append(f"{nondetect} non-detect history result(s) of {analyte} not used")
        if no_rate:
            notes.append(f"{no_rate} history result(s) of {analyte} not used: no pumping rate "
                         "known at the sample's time, or the pump was off")
        for term, res_kind in res["layout"].terms:
            word = "season" if term == "seasonal" else term
            if res_kind == "blend":
                notes.append(f"the {word} of {analyte} is fitted as a {word} of the blend: the "
                             "history's rates move the zone shares too little to tell which "
                             "zone it belongs to ("
                             + _condition_text(res["conditions"][term],
                                               s.history_condition_limit) + ")")
        used = usable.assign(tau=tau)
        # the fitted season's variance at the history's rates and dates: mean square of the
        # seasonal part (a sinusoid of amplitude A has variance A^2 / 2)
        x_all = res["layout"].rows(shares, tau)
        x_trend = res["layout"].rows(shares, tau, terms=("trend",))
        season_var = float(np.mean(((x_all - x_trend) @ res["coef"]) ** 2))
        mean = float(np.mean(values))
        for i, z in enumerate(project.zone_names):
            used[f"share_{z}"] = shares[:, i]
        out[analyte] = TimeFit(
            analyte, res["model"], res["layout"], res["coef"], res["cov"],
            res["sigma_temporal"], float(np.sqrt(res["sigma_temporal"] ** 2 + season_var)) / mean,
            res["sigma_temporal"] / mean, res["aicc"],
            res["conditions"], t0, len(usable), res["residuals"], res["leverage"], res["sigma"],
            used, notes)
    return out


def step_test_date(project) -> pd.Timestamp:
    """Date of the step test: the first step's start (the first history sample after it
    otherwise is no better; without step times, the last history sample's date)."""
    starts = project.steps["start"].dropna() if "start" in project.steps else pd.Series([])
    if len(starts):
        return pd.Timestamp(starts.min())
    if project.history is not None and len(project.history):
        return pd.Timestamp(project.history["sampled_at"].max())
    raise ModelError("neither the steps nor a history give a date for the step test")


#: condition numbers above this are a singular block: printed as such, not as rounding noise
SINGULAR_CONDITION = 1e12


def _condition_text(value: float, limit: float) -> str:
    """Why a term is the blend's: its block's condition number against the limit, or "its
    per-zone block is singular" when the number is above :data:`SINGULAR_CONDITION` (the digits
    of such a number are rounding noise)."""
    if not np.isfinite(value) or value > SINGULAR_CONDITION:
        return "its per-zone block is singular"
    return f"condition number {value:.3g} > {limit:g}"
