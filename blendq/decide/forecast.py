"""The years ahead: the operating window year by year from the monitoring history's time models.

For every year of the forecast horizon (``settings.forecast_years`` from the step test's year),
every rate of the sweep and every posterior draw, the discharge concentration is
c(Q, t) = sum_i a_i(Q) c_i(t) (the draw's zone shares and the draw of the time-model
coefficients, :mod:`blendq.fit.history`). The statistic a limit is judged on is the year's mean
of the monthly values for an annual-mean basis, and the year's highest monthly value for a
single-sample basis (a sample may fall in the seasonal peak); a rate is compliant in a year, as
in the window of the step test (:mod:`blendq.decide.sweep`), when the share of draws whose
statistic exceeds the mean threshold m* (margin x limit with the temporal and lab spread) is at
most alpha, and it meets the hydraulic criteria. Also here: the predictive check of each history
result against its leave-one-out band, the monitoring triggers, and the Mann-Kendall test with
Sen's slope on the blended history.

References
----------
Mann, H.B. (1945) Nonparametric tests against trend. Econometrica 13(3), 245-259.
Sen, P.K. (1968) Estimates of the regression coefficient based on Kendall's tau. Journal of
the American Statistical Association 63(324), 1379-1389.
Gilbert, R.O. (1987) Statistical Methods for Environmental Pollution Monitoring, ch. 16-17.
Van Nostrand Reinhold.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.stats import norm

from blendq.chemistry.analytes import get_analyte
from blendq.chemistry.limits import ANNUAL_MEAN, mean_threshold
from blendq.decide.analysis import Analysis
from blendq.decide.sweep import compliance_statistics
from blendq.fit.history import YEAR, TimeFit, years_since
from blendq.units import format_quantity

#: months evaluated in each year (mid-month times) for the annual mean and the seasonal peak
MONTHS = 12
#: most posterior draws the forecast uses (the first ones of the analysis)
MAX_DRAWS = 500
#: seed offset of the time-model draws from the analysis seed
_SEED_OFFSET = 15


@dataclass
class Forecast:
    """The operating window year by year and what the history says.

    Attributes
    ----------
    years : ndarray of int (n_years,)
        Calendar years of the horizon.
    rates : ndarray (n_rates,) [m^3/d]
    ok : ndarray of bool (n_years, n_rates)
        Every criterion met in that year (quality with confidence 1 - alpha, hydraulics).
    likely : ndarray of bool (n_years, n_rates)
        Quality met in at least half of the draws and hydraulics met (the band's outer edge).
    last_year : ndarray (n_rates,)
        Last year of the horizon up to which the rate stays compliant every year (NaN when not
        compliant in the first year; ``years[-1]`` when compliant throughout).
    best_rate : float or None
        The rate that stays compliant longest (the largest such rate on a tie) [m^3/d].
    crossings : DataFrame
        analyte, rate, year (median), low, high (the interval), beyond (True when the median
        is after the horizon): when the annual mean reaches margin x limit.
    check : DataFrame
        Each history result against its leave-one-out band.
    trend_tests : DataFrame
        Mann-Kendall and Sen's slope on the blended history of each analyte.
    sentences : list of str
    triggers : list of str
    notes : list of str
    """

    years: np.ndarray
    rates: np.ndarray
    ok: np.ndarray
    likely: np.ndarray
    last_year: np.ndarray
    best_rate: float | None
    crossings: pd.DataFrame
    check: pd.DataFrame
    trend_tests: pd.DataFrame
    sentences: list = field(default_factory=list)
    triggers: list = field(default_factory=list)
    notes: list = field(default_factory=list)


def zone_paths(tf: TimeFit, coef: np.ndarray, tau: np.ndarray, with_season: bool = True):
    """Zone concentrations and the blend's own terms at times ``tau`` for coefficient draws.

    Returns (zone (n_draws, n_times, n_zones) [mg/L], blend (n_draws, n_times) [mg/L]): the
    discharge at shares a is a @ zone + blend.
    """
    n_zones = tf.layout.n_zones
    terms = None if with_season else ("trend",)
    eye = tf.layout.rows(np.broadcast_to(np.eye(n_zones)[None], (len(tau), n_zones, n_zones)),
                         np.repeat(np.asarray(tau, float)[:, None], n_zones, 1), terms)
    zero = tf.layout.rows(np.zeros((len(tau), n_zones)), np.asarray(tau, float), terms)
    blend = np.einsum("tc,dc->dt", zero, coef)
    # a row with unit share of zone i holds the zone terms of zone i plus the blend terms
    zone = np.einsum("tic,dc->dti", eye, coef) - blend[:, :, None]
    return zone, blend


def discharge(tf: TimeFit, coef: np.ndarray, shares: np.ndarray, tau: np.ndarray,
              anchor: np.ndarray | None = None, with_season: bool = True) -> np.ndarray:
    """Discharge concentration (n_draws, n_rates, n_times) [mg/L] for the draws' shares
    (n_draws, n_rates, n_zones) and coefficients (n_draws, n_coef).

    With ``anchor`` (n_draws, n_zones) [mg/L], the zone constants are the step test's draws
    (whose shares and zone values are correlated through the fit) and only the time terms
    come from ``coef``.
    """
    if anchor is not None:
        coef = coef.copy()
        coef[:, :tf.layout.n_zones] = anchor
    zone, blend = zone_paths(tf, coef, tau, with_season)
    out = np.broadcast_to(blend[:, None, :], (shares.shape[0], shares.shape[1], len(tau))).copy()
    for i in range(tf.layout.n_zones):  # few zones: a sum of outer products is fastest
        out += shares[:, :, i, None] * zone[:, None, :, i]
    return out


def _annual_mean(tf: TimeFit, coef, shares, taus, anchor) -> np.ndarray:
    """Mean of the monthly discharge of each year (n_draws, n_rates, n_years) [mg/L]."""
    coef = coef.copy()
    coef[:, :tf.layout.n_zones] = anchor
    n_zones = tf.layout.n_zones
    eye = np.eye(n_zones)
    rows = np.stack([tf.layout.rows(np.broadcast_to(eye, (MONTHS, n_zones, n_zones)),
                                    np.repeat(t[:, None], n_zones, 1)).mean(axis=0)
                     for t in taus])  # (n_years, n_zones, n_coef): unit-share rows
    blend_rows = np.stack([tf.layout.rows(np.zeros((MONTHS, n_zones)), t).mean(axis=0)
                           for t in taus])  # (n_years, n_coef)
    blend = coef @ blend_rows.T  # (n_draws, n_years)
    zone = np.einsum("yic,dc->dyi", rows, coef) - blend[:, :, None]
    out = np.broadcast_to(blend[:, None, :], (shares.shape[0], shares.shape[1],
                                              len(taus))).copy()
    for i in range(n_zones):
        out += shares[:, :, i, None] * zone[:, None, :, i]
    return out


def _anchor(a: Analysis, analyte: str, n: int) -> np.ndarray:
    """The step test's zone values of the first ``n`` draws (n, n_zones) [mg/L]."""
    return a.draws.zone_values[:n, :, a.draws.analytes.index(analyte)]


def _year_times(t0: pd.Timestamp, years: np.ndarray) -> np.ndarray:
    """tau [a] of mid-month times of each year, shape (n_years, MONTHS)."""
    out = np.empty((len(years), MONTHS))
    for k, y in enumerate(years):
        mids = [pd.Timestamp(year=int(y), month=m, day=15) for m in range(1, MONTHS + 1)]
        out[k] = years_since(mids, t0)
    return out


def sen_slope(t, y) -> float:
    """Sen's slope: the median of the slopes (y_j - y_i) / (t_j - t_i) over the pairs with
    t_j > t_i [unit of y per unit of t] (Sen 1968)."""
    t, y = np.asarray(t, float), np.asarray(y, float)
    i, j = np.triu_indices(len(t), 1)
    dt = t[j] - t[i]
    keep = dt != 0
    return float(np.median((y[j] - y[i])[keep] / dt[keep])) if keep.any() else float("nan")


def trend_tests(a: Analysis) -> pd.DataFrame:
    """Mann-Kendall test and Sen's slope on the blended history of each analyte with a time
    model (detected results in time order, whatever the rate): the plain statistic
    practitioners expect beside the zone-resolved model (Mann 1945; Gilbert 1987)."""
    import pymannkendall as mk

    rows = []
    for analyte, tf in a.history.items():
        h = tf.used
        y = h["value"].to_numpy(float)
        res = mk.original_test(y, alpha=1 - a.project.settings.interval)
        rows.append({"analyte": analyte, "n": len(y), "S": float(res.s),
                     "z": float(res.z), "p": float(res.p), "kendall_tau": float(res.Tau),
                     "trend": res.trend, "sen_slope_per_year": sen_slope(h["tau"], y)})
    return pd.DataFrame(rows, columns=["analyte", "n", "S", "z", "p", "kendall_tau", "trend",
                                       "sen_slope_per_year"])


def predictive_check(a: Analysis) -> pd.DataFrame:
    """Each history result against the band the model gives for its date and rate when the
    result itself is left out (exact for a linear model: residual r_j / (1 - h_jj) with
    variance sigma_j^2 / (1 - h_jj); Draper and Smith 1998, section 8.1)."""
    z_band = float(norm.ppf(0.5 + a.project.settings.interval / 2))
    frames = []
    for analyte, tf in a.history.items():
        h = tf.used
        lev = np.clip(tf.leverage, 0.0, 1.0 - 1e-9)
        loo = tf.residuals / (1.0 - lev)
        sd = tf.sigma / np.sqrt(1.0 - lev)
        value = h["value"].to_numpy(float)
        centre = value - loo
        z = loo / sd
        frames.append(pd.DataFrame({
            "analyte": analyte, "sampled_at": h["sampled_at"].to_numpy(),
            "rate": h["rate"].to_numpy(float), "value": value, "expected": centre,
            "lower": centre - z_band * sd, "upper": centre + z_band * sd, "z": z,
            "outside": np.abs(z) > z_band, "source_row": h["source_row"].to_numpy()}))
    if not frames:
        return pd.DataFrame(columns=["analyte", "sampled_at", "rate", "value", "expected",
                                     "lower", "upper", "z", "outside", "source_row",
                                     "suggests"])
    out = pd.concat(frames, ignore_index=True)
    out["suggests"] = ""
    for _, idx in out.groupby("analyte").groups.items():
        sub = out.loc[idx]
        sign = np.sign(sub["z"].to_numpy()) * sub["outside"].to_numpy()
        for k, i in enumerate(idx):
            if not out.at[i, "outside"]:
                continue
            near = [sign[m] for m in (k - 1, k + 1) if 0 <= m < len(sign)]
            late = k >= len(sign) - 4
            if sign[k] in near and late:
                why = ("one of several recent results on the same side: the trend may be "
                       "changing, or a new source is reaching the well")
            elif sign[k] in near:
                why = ("part of a run on the same side: a period the time model misses (a "
                       "change of trend, a season stronger than fitted, or a new source)")
            else:
                why = ("isolated: a lab or sampling problem (check the chain of custody, "
                       "the holding time, the sample point), or a short event")
            out.at[i, "suggests"] = why
    return out


def forecast(a: Analysis, units: str = "US") -> Forecast | None:
    """The forecast of an analysis whose project has a monitoring history (None otherwise).

    Parameters
    ----------
    a : Analysis
        With :attr:`Analysis.history` (time models fitted by :func:`blendq.decide.analysis.
        analyse`).
    units : str
        "US" or "SI", for the sentences.
    """
    if not a.history:
        return None
    p, s = a.project, a.project.settings
    tf0 = next(iter(a.history.values()))
    t0 = tf0.t0
    years = np.arange(t0.year, t0.year + s.forecast_years)
    taus = _year_times(t0, years)
    n = min(a.draws.n_draws, MAX_DRAWS)
    shares = a.prediction.shares[:n]
    rates = a.prediction.rates
    rng = np.random.default_rng(s.seed + _SEED_OFFSET)
    stats = compliance_statistics(p, a.limits)
    hydraulic = np.ones(len(rates), bool)
    if len(a.window.rates) == len(rates) and np.allclose(a.window.rates, rates):
        for c in a.window.criteria:
            if c.kind != "quality":
                hydraulic &= np.asarray(c.ok, bool)
    ok = np.broadcast_to(hydraulic, (len(years), len(rates))).copy()
    likely = ok.copy()
    annual_means = {}
    notes = []
    for analyte, tf in a.history.items():
        coef = tf.draws(n, rng)
        anchor = _anchor(a, analyte, n)
        # the year's mean: the model is linear in time functions, so the mean of the monthly
        # values is the model with the monthly means of its time functions
        mean = _annual_mean(tf, coef, shares, taus, anchor)
        annual_means[analyte] = mean
        if analyte not in a.limits:
            continue
        st = stats[analyte]
        threshold = s.margin * a.limits[analyte].canonical()
        # the season is in the model here: the spread about it is the residual scatter
        log_sd = st.limit.compliance.log_sd(tf.residual_cv, st.lab_cv)
        m_star = float(mean_threshold(threshold, log_sd, s.sample_exceedance_probability))
        if st.limit.compliance.statistic == ANNUAL_MEAN:
            judged = mean
        elif all(res == "blend" for _, res in tf.layout.terms):
            # time terms of the blend alone: the same at every rate, so the year's highest
            # month is the zone constants' blend plus the highest month of the blend's terms
            _, blend = zone_paths(tf, coef, taus.reshape(-1))
            peak = blend.reshape(n, len(years), MONTHS).max(axis=2)
            judged = np.einsum("drz,dz->dr", shares, anchor)[:, :, None] + peak[:, None, :]
        elif tf.resolution("seasonal") is None:  # no season: the year's end or start
            judged = np.maximum(*(discharge(tf, coef, shares, taus[:, m], anchor)
                                  for m in (0, MONTHS - 1)))
        else:
            judged = discharge(tf, coef, shares, taus.reshape(-1), anchor)
            judged = judged.reshape(n, len(rates), len(years), MONTHS).max(axis=3)
        bad = np.where(np.isfinite(judged), judged > m_star, True)
        frac = bad.mean(axis=0).T  # (n_years, n_rates)
        ok &= frac <= s.exceedance_probability
        likely &= frac <= 0.5
    missing = [k for k in a.limits if k not in a.history]
    if missing:
        notes.append("No time model for " + ", ".join(missing) + " (no usable history): the "
                     "forecast holds them at the step test's values.")
        for analyte in missing:
            crit = [c for c in a.window.criteria if c.kind == "quality" and c.name == analyte]
            for c in crit:
                ok &= np.asarray(c.ok, bool)[None, :]
                likely &= np.asarray(c.ok, bool)[None, :]
    last = np.full(len(rates), np.nan)
    for r in range(len(rates)):
        run = np.cumprod(ok[:, r])
        if run[0]:
            last[r] = years[int(run.sum()) - 1]
    best = None
    if np.isfinite(last).any():
        top = np.nanmax(last)
        best = float(rates[np.where(last == top)[0][-1]])
    crossings = _crossings(a, annual_means, years, rates, best)
    fc = Forecast(years, rates, ok, likely, last, best, crossings, predictive_check(a),
                  trend_tests(a), notes=notes)
    fc.sentences = forecast_sentences(a, fc, units)
    fc.triggers = trigger_sentences(a, fc, annual_means, units)
    return fc


def _focus_rates(a: Analysis, best: float | None) -> list[float]:
    """The rates the sentences speak of: the recommended rate (else the demand), the rate
    that stays compliant longest, and the ends of the step test's window."""
    rates = []
    if a.window.recommended is not None:
        rates.append(float(a.window.recommended))
    elif a.project.well.demand:
        rates.append(float(a.project.well.demand))
    ends = [float(x) for lo, hi, _, _ in a.window.intervals for x in (lo, hi)]
    for q in ([best] if best is not None else []) + ends:
        if all(abs(q - r) > 1e-9 for r in rates):
            rates.append(q)
    return rates


def _crossings(a: Analysis, annual_means: dict, years, rates, best) -> pd.DataFrame:
    s = a.project.settings
    lo_q, hi_q = 0.5 - s.interval / 2, 0.5 + s.interval / 2
    rows = []
    for rate in _focus_rates(a, best):
        r = int(np.argmin(np.abs(rates - rate)))
        for analyte, mean in annual_means.items():
            if analyte not in a.limits:
                continue
            threshold = s.margin * a.limits[analyte].canonical()
            reached = mean[:, r, :] >= threshold  # (n_draws, n_years)
            first = np.where(reached.any(axis=1), years[np.argmax(reached, axis=1)], np.inf)
            med, low, high = np.quantile(first, [0.5, lo_q, hi_q], method="inverted_cdf")
            rows.append({"analyte": analyte, "rate": float(rates[r]), "year": med, "low": low,
                         "high": high, "beyond": not np.isfinite(med),
                         "already": bool(med <= years[0])})
    return pd.DataFrame(rows, columns=["analyte", "rate", "year", "low", "high", "beyond",
                                       "already"])


def _year(v: float, last: int) -> str:
    return f"after {last}" if not np.isfinite(v) else f"{int(v)}"


def forecast_sentences(a: Analysis, fc: Forecast, units: str = "US") -> list[str]:
    """Sentences for the report and the command line."""
    s = a.project.settings
    last_year = int(fc.years[-1])
    out = []
    below: dict[str, list[str]] = {}
    for c in fc.crossings.itertuples(index=False):
        if not np.isfinite(c.low):
            below.setdefault(c.analyte, []).append(format_quantity(c.rate, "rate", units))
    for analyte, rates in below.items():
        out.append(f"The annual mean {get_analyte(analyte).label()} stays below "
                   f"{s.margin:.0%} of the limit through {last_year} in more than "
                   f"{1 - (1 - s.interval) / 2:.0%} of the draws at "
                   + (", ".join(rates[:-1]) + " and " + rates[-1] if len(rates) > 1
                      else rates[0]) + ".")
    for c in fc.crossings.itertuples(index=False):
        label = get_analyte(c.analyte).label()
        rate = format_quantity(c.rate, "rate", units)
        if not np.isfinite(c.low):
            continue
        band = f"({s.interval:.0%}: {_year(c.low, last_year)} to {_year(c.high, last_year)})"
        if c.beyond:
            out.append(f"At {rate} the annual mean {label} does not reach {s.margin:.0%} of the "
                       f"limit by {last_year} in most draws {band}.")
        else:
            when = "already in" if c.already else "in"
            out.append(f"At {rate} the annual mean {label} reaches {s.margin:.0%} of the limit "
                       f"{when} {int(c.year)} {band}.")
    for rate in _focus_rates(a, fc.best_rate):
        r = int(np.argmin(np.abs(fc.rates - rate)))
        where = format_quantity(float(fc.rates[r]), "rate", units)
        if np.isfinite(fc.last_year[r]):
            out.append(f"At {where} every limit (as it is judged) and the pumping level hold "
                       f"through {int(fc.last_year[r])}"
                       + (" (the whole horizon)." if fc.last_year[r] == last_year else "."))
        else:
            out.append(f"At {where} some criterion fails already in {int(fc.years[0])}.")
    first_year_note = _first_year_note(a, fc)
    if first_year_note:
        out.append(first_year_note)
    if fc.best_rate is None:
        out.append(f"No rate is compliant in {int(fc.years[0])} on the forecast.")
    else:
        top = np.nanmax(fc.last_year)
        long = fc.rates[fc.last_year == top]
        span = (format_quantity(long.min(), "rate", units) + " to "
                + format_quantity(long.max(), "rate", units)) if len(long) > 1 else \
            format_quantity(long[0], "rate", units)
        through = ("through the whole horizon (" + str(last_year) + ")" if top == last_year
                   else f"through {int(top)}")
        out.append(f"Rates that stay compliant longest: {span}, {through}; the largest is "
                   f"{format_quantity(fc.best_rate, 'rate', units)}.")
    return out


def _first_year_note(a: Analysis, fc: Forecast) -> str:
    """Why the forecast's first year can close rates the operating window keeps ("" when it
    closes none): the two judge the season differently."""
    inside = np.zeros(len(fc.rates), bool)
    for interval in a.window.intervals:
        lo, hi = interval[0], interval[1]
        inside |= (fc.rates >= lo - 1e-9) & (fc.rates <= hi + 1e-9)
    closed = inside & ~fc.ok[0]
    if not closed.any():
        return ""
    return (f"In {int(fc.years[0])} the forecast keeps fewer rates than the operating window "
            f"({int(closed.sum())} of {int(inside.sum())} rates of the window close): the "
            "window counts the season as part of the water's temporal variability, while the "
            "forecast follows the fitted season and trend, judging a limit on single samples "
            "at the year's highest month and an annual-mean limit at the year's mean.")


def trigger_sentences(a: Analysis, fc: Forecast, annual_means: dict,
                      units: str = "US") -> list[str]:
    """The quarterly nitrate monitoring trigger: results at or above
    ``settings.quarterly_trigger_fraction`` of the limit in the history, and when the
    forecast reaches it at the focus rates (the median draw's highest monthly mean)."""
    s = a.project.settings
    out = []
    analyte = "nitrate"
    if analyte not in a.limits:
        return out
    limit = a.limits[analyte].canonical()
    level = s.quarterly_trigger_fraction * limit
    label = get_analyte(analyte).label()
    rule = (f"quarterly monitoring once a result reaches {s.quarterly_trigger_fraction:.0%} "
            "of the MCL (setting, common practice; read in a state rule restating 40 CFR "
            "141.23(d)(2), a secondary source)")
    h = a.project.history
    rows = h[(h["analyte"] == analyte) & ~h["nondetect"].astype(bool)] if len(h) else h
    over = rows[rows["value"] >= level] if len(rows) else rows
    now = False
    if len(over):
        first = pd.Timestamp(over["sampled_at"].min()).date()
        latest = pd.Timestamp(over["sampled_at"].max()).date()
        out.append(f"The history crosses the {label} trigger ({rule}): {len(over)} of "
                   f"{len(rows)} results at or above it, the first on {first}, the latest on "
                   f"{latest}.")
        now = bool(rows.sort_values("sampled_at")["value"].iloc[-1] >= level)
        if now:
            out.append(f"The latest {label} result is at or above the trigger: quarterly "
                       "monitoring applies now.")
    elif len(rows):
        out.append(f"No {label} result of the history reaches the trigger ({rule}).")
    if analyte in a.history and not now:
        tf = a.history[analyte]
        rng = np.random.default_rng(s.seed + _SEED_OFFSET + 1)
        n = min(a.draws.n_draws, MAX_DRAWS)
        taus = _year_times(tf.t0, fc.years)
        for rate in _focus_rates(a, fc.best_rate):
            r = int(np.argmin(np.abs(fc.rates - rate)))
            conc = discharge(tf, tf.draws(n, rng), a.prediction.shares[:n, r:r + 1],
                             taus.reshape(-1), _anchor(a, analyte, n))[:, 0]
            conc = conc.reshape(n, len(fc.years), MONTHS)
            peak = np.median(conc.max(axis=2), axis=0)
            hit = np.where(peak >= level)[0]
            where = format_quantity(float(fc.rates[r]), "rate", units)
            if len(hit):
                out.append(f"At {where} the forecast's highest monthly {label} reaches the "
                           f"trigger in {int(fc.years[hit[0]])} (median of the draws).")
            else:
                out.append(f"At {where} the forecast stays below the {label} trigger through "
                           f"{int(fc.years[-1])} (median of the draws).")
    return out


def years_axis(t0: pd.Timestamp, tau) -> np.ndarray:
    """Decimal calendar years of times tau [a] after t0 (for charts)."""
    return t0.year + (t0.dayofyear - 1) / 365.25 + np.asarray(tau, float) * YEAR / 365.25
