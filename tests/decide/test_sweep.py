"""Tests of blendq.decide.sweep: the operating window on hand-built predictions, and the rate sweep.

Sources:
- Definition (docs/methods.md, section 8): the window is the set of rates where, for every
  analyte, P(C > margin x limit) <= alpha, and the pumping level stays above the intake plus the
  required submergence (and, if asked, above the top screen), within the pump's range; it may
  be several intervals; the recommended rate is the largest compliant rate not above the
  demand; an empty window comes with its reason.
- US EPA 40 CFR 141.62(b): nitrate MCL 10 mg/L as N; WHO GDWQ 4th ed.: nitrate 50 mg/L as NO3
  (11.3 mg/L as N), so the US MCL is the stricter of the two.
- The statistic a limit is judged on (docs/methods.md, section 8): nitrate on a sample and its
  confirmation sample averaged (40 CFR 141.23, secondary), arsenic on the annual mean of four
  quarterly samples (40 CFR 141.23(i), secondary); checked against a seeded Monte Carlo of the
  rule itself and scipy.stats.norm.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pytest
import synthetic_wells as sw
from hypothesis import given
from hypothesis import strategies as st
from scipy.stats import lognorm
from scipy.stats import norm as stats_norm

from blendq.chemistry.limits import (
    ANNUAL_MEAN,
    CATALOGUE,
    RATIO_RULES,
    SINGLE_SAMPLE,
    ComplianceBasis,
    Limit,
    exceedance_given_mean,
    mean_threshold,
)
from blendq.decide import sweep
from blendq.fit import uncertainty
from blendq.fit.estimation import FitOptions, fit
from blendq.fit.uncertainty import Prediction

RATES = np.arange(0.0, 1100.0, 100.0)  # 0, 100, ..., 1000 m^3/d
NITRATE_MCL = Limit("nitrate", 10.0, "mg/L", "N", "US-EPA", "MCL", "40 CFR 141.62(b)")
LIMITS = {"nitrate": NITRATE_MCL}
QUALITY = "nitrate (P > 0.8 x limit above 0.05)"
LEVEL = "pumping level above intake + submergence"


def _prediction(nitrate_by_rate, level_by_rate=None, n_draws=40, spread=0.3, seed=0):
    """Draws scattered +-spread around a given nitrate curve [mg/L] and pumping level [m]."""
    rng = np.random.default_rng(seed)
    base = np.asarray(nitrate_by_rate, float)
    conc = base[None, :, None] + rng.uniform(-spread, spread, (n_draws, len(RATES), 1))
    level = np.asarray(level_by_rate if level_by_rate is not None else 10.0 + 0.01 * RATES, float)
    levels = level[None, :] + rng.uniform(-0.2, 0.2, (n_draws, len(RATES)))
    shares = np.full((n_draws, len(RATES), 2), 0.5)
    return Prediction(RATES, conc, levels, shares, shares * RATES[None, :, None], ["nitrate"])


def _window(pred, margin=0.8, alpha=0.05, intake=60.0, submergence=5.0, rate_min=0.0,
            rate_max=np.inf, demand=None, top_of_screen=None):
    return sweep.operating_window(pred, LIMITS, margin, alpha, intake, submergence, rate_min,
                                  rate_max, demand, top_of_screen)


def test_two_interval_window():
    # a nitrate peak at 300-400 m^3/d (for example a thief zone turning into a source) splits
    # the window in two: threshold 0.8 x 10 = 8 mg/L
    pred = _prediction([5, 5, 5, 9, 9, 5, 5, 5, 5, 5, 5])
    w = _window(pred, demand=650.0)
    assert not w.empty and w.reason_empty == ""
    assert w.intervals == [(100.0, 200.0, "zero rate", QUALITY),
                           (500.0, 1000.0, QUALITY, "highest rate of the sweep")]
    np.testing.assert_array_equal(w.ok, [False, True, True, False, False] + [True] * 6)
    assert w.recommended == 600.0  # largest compliant rate not above the demand
    assert _window(pred, demand=450.0).recommended == 200.0  # 300, 400 fail
    assert _window(pred).recommended == 1000.0  # no demand: the largest compliant rate
    # below the smallest compliant rate: the compliant rate nearest the demand
    assert _window(pred, demand=50.0).recommended == 100.0
    kinds = {c.kind for c in w.criteria}
    assert kinds == {"quality", "hydraulic", "pump"}


def test_empty_window_quality_everywhere():
    pred = _prediction([12.0] * len(RATES))
    w = _window(pred, demand=500.0)
    assert w.empty and w.intervals == [] and w.recommended is None
    assert w.reason_empty == f"{QUALITY} fails at every rate"


def test_empty_window_no_rate_meets_all_at_once():
    # quality only at high rates, pumping level only at low rates
    pred = _prediction([9, 9, 9, 9, 9, 9, 5, 5, 5, 5, 5], level_by_rate=10.0 + 0.08 * RATES)
    w = _window(pred)
    assert w.empty and w.recommended is None
    assert w.reason_empty.startswith("no rate meets all criteria at once: ")
    assert QUALITY in w.reason_empty and LEVEL in w.reason_empty


def test_hydraulic_limit_binds_before_quality():
    # level 10 m + 0.05 m per m^3/d against intake 60 m with 5 m submergence: deeper than 55 m
    # from 900 m^3/d; nitrate crosses 8 mg/L only at 1000 m^3/d
    pred = _prediction([4, 4, 4, 4, 4, 5, 5, 6, 6, 7, 9], level_by_rate=10.0 + 0.05 * RATES)
    w = _window(pred)
    assert w.intervals == [(100.0, 800.0, "zero rate", LEVEL)]
    # asking also for the top screen at 40 m moves the end to 500 m^3/d (level 35-40 m)
    w2 = _window(pred, top_of_screen=40.0)
    assert w2.intervals[0][1] == 500.0
    assert w2.intervals[0][3] == "pumping level above top of screen"


def test_margin_moves_an_end():
    # nitrate rising 1 mg/L per 100 m^3/d: under 0.8 x 10 mg/L up to 700 m^3/d (800 has draws
    # at 8 +- 0.3), under the full limit up to 900 m^3/d
    pred = _prediction(RATES / 100.0)
    w08 = _window(pred, margin=0.8)
    w10 = _window(pred, margin=1.0)
    assert w08.intervals == [(100.0, 700.0, "zero rate", QUALITY)]
    assert w10.intervals[0][:2] == (100.0, 900.0)
    assert w10.intervals[0][3] == "nitrate (P > 1 x limit above 0.05)"


def test_alpha_is_the_allowed_exceedance_probability():
    # at 500 m^3/d exactly 4 of 40 draws (10 %) exceed 8 mg/L
    pred = _prediction([5.0] * len(RATES), spread=0.0)
    conc = np.array(pred.concentration, copy=True)
    conc[:4, 5, 0] = 8.5
    pred = Prediction(RATES, conc, pred.pumping_level, pred.shares, pred.zone_flow, ["nitrate"])
    assert not _window(pred, alpha=0.05).ok[5]
    assert _window(pred, alpha=0.10).ok[5]  # P <= alpha passes


def test_pump_range_bounds_the_window():
    pred = _prediction([5.0] * len(RATES))
    w = _window(pred, rate_min=250.0, rate_max=750.0, demand=2000.0)
    assert w.intervals == [(300.0, 700.0, "pump rate range", "pump rate range")]
    assert w.recommended == 700.0


def test_governing_limit_is_the_strictest():
    limits = CATALOGUE["US-EPA"] + CATALOGUE["WHO"]
    gov = sweep.governing_limits(limits, ["nitrate", "arsenic"])
    assert set(gov) == {"nitrate", "arsenic"}
    # 10 mg/L as N (40 CFR 141.62) is below 50 mg/L as NO3 = 11.3 mg/L as N (WHO)
    assert gov["nitrate"].authority == "US-EPA"
    assert gov["nitrate"].canonical() == pytest.approx(10.0, rel=1e-12)
    assert gov["arsenic"].canonical() == pytest.approx(0.010, rel=1e-12)


@pytest.fixture(scope="module")
def fitted():
    result = fit(sw.project(relative_error=0.05, seed=2), FitOptions(fit_hydraulics=False))
    return result, uncertainty.monte_carlo(result, 200, seed=3)


def test_rate_grid_and_sweep(fitted):
    result, draws = fitted
    grid = sweep.rate_grid(result, points=13)
    # 1.2 x the largest step rate (no pump range or demand in the synthetic well)
    np.testing.assert_allclose(grid, np.linspace(0.0, 1.2 * sw.RATES.max(), 13), rtol=1e-12)
    rates = grid[1:]
    pred = sweep.sweep(result, draws, rates)
    # no storativity: the horizon leaves the conductances as fitted
    ref = uncertainty.predict(result, draws, rates)
    np.testing.assert_allclose(pred.concentration, ref.concentration, rtol=1e-12)
    table = sweep.sweep_table(pred, sweep.governing_limits(CATALOGUE["US-EPA"], pred.analytes),
                              0.8, 0.9, result.zone_names)
    assert len(table) == len(rates)
    for col in ("rate", "nitrate_median", "nitrate_lower", "nitrate_upper",
                "nitrate_p_exceed_margin", "nitrate_p_exceed_limit", "arsenic_p_exceed_limit",
                "pumping_level_median", "pumping_level_deep", "share_Z1", "share_Z4"):
        assert col in table.columns
    assert np.all(table["nitrate_lower"] <= table["nitrate_median"])
    assert np.all(table["nitrate_median"] <= table["nitrate_upper"])
    assert np.all(table["nitrate_p_exceed_limit"] <= table["nitrate_p_exceed_margin"])
    np.testing.assert_allclose(table[[f"share_{z}" for z in result.zone_names]].sum(axis=1), 1.0,
                               rtol=0.05)


def test_who_nitrate_nitrite_ratio_rule_closes_the_window():
    # WHO GDWQ 4th ed.: nitrate/50 + nitrite/3 <= 1 (both as the ion). 8 mg/L nitrate as N is
    # 35.41 mg/L NO3 (ratio 0.708); 0.5 mg/L nitrite as N is 1.642 mg/L NO2 (ratio 0.547):
    # the sum 1.255 breaks the rule although each is under its own guideline value.
    from blendq.chemistry.limits import RATIO_RULES, limit_set

    rates = np.linspace(0.0, 100.0, 11)
    conc = np.zeros((20, 11, 2))
    conc[:, :, 0] = 8.0
    conc[:, :, 1] = 0.5
    pred = Prediction(rates, conc, np.zeros((20, 11)), np.zeros((20, 11, 1)),
                      np.zeros((20, 11, 1)), ["nitrate", "nitrite"])
    limits = {lim.analyte: lim for lim in limit_set("WHO")}
    without = sweep.operating_window(pred, limits, 1.0, 0.05, 100.0, 0.0, 0.0, 1e9)
    assert not without.empty
    with_rule = sweep.operating_window(pred, limits, 1.0, 0.05, 100.0, 0.0, 0.0, 1e9,
                                 ratio_rules=RATIO_RULES["WHO"])
    assert with_rule.empty
    assert "nitrite/3" in with_rule.reason_empty
    # half the nitrite: 0.708 + 0.274 = 0.982 <= 1, the window opens again
    pred.concentration[:, :, 1] = 0.25
    assert not sweep.operating_window(pred, limits, 1.0, 0.05, 100.0, 0.0, 0.0, 1e9,
                                ratio_rules=RATIO_RULES["WHO"]).empty


def test_us_nitrate_plus_nitrite_mcl_from_separate_results_closes_the_window():
    # 40 CFR 141.62(b): nitrate 10, nitrite 1 and nitrate+nitrite 10 mg/L, all as N. Nitrate
    # 9.5 and nitrite 0.8 mg/L as N each pass their own MCL; their nitrogen sum 10.3 breaks
    # the nitrate+nitrite MCL, which the window applies to the separate results
    from blendq.chemistry.limits import limit_set

    rates = np.linspace(0.0, 100.0, 11)
    conc = np.zeros((20, 11, 2))
    conc[:, :, 0] = 9.5
    conc[:, :, 1] = 0.8
    pred = Prediction(rates, conc, np.zeros((20, 11)), np.zeros((20, 11, 1)),
                      np.zeros((20, 11, 1)), ["nitrate", "nitrite"])
    us = limit_set("US-EPA")
    limits = sweep.governing_limits(us, pred.analytes)
    rules, notes = sweep.applicable_ratio_rules(("US-EPA",), pred.analytes, us)
    assert len(rules) == 1 and "separate nitrate and nitrite" in notes[0]
    args = (pred, limits, 1.0, 0.05, 100.0, 0.0, 0.0, 1e9)
    assert not sweep.operating_window(*args).empty
    closed = sweep.operating_window(*args, ratio_rules=rules)
    assert closed.empty and "nitrate + nitrite (as N) <= 10 mg/L as N" in closed.reason_empty
    # nitrite 0.4: the sum 9.9 passes
    pred.concentration[:, :, 1] = 0.4
    assert not sweep.operating_window(*args, ratio_rules=rules).empty


def _two_zone_fit(nitrate, relative_error=0.05, s1_value=None):
    from blendq.inputs.project import Settings
    from blendq.well.synthetic import synthetic_project

    g, h0 = np.array([150.0, 300.0]), np.array([-10.0, -11.0])
    p = synthetic_project(g, h0, [20, 40], [25, 50], {"nitrate": np.asarray(nitrate, float)},
                          [300.0, 800.0, 1500.0], 15.0,
                          settings=Settings(conductance_model="given",
                                            default_relative_uncertainty=relative_error))
    if s1_value is not None:
        p.samples.loc[p.samples["step"] == "S1", "value"] = s1_value
    return fit(p, FitOptions(fit_hydraulics=False))


def test_a_measured_exceedance_closes_its_own_rate_whatever_the_model_says():
    # the model may miss a sample; the rate at which a sample broke margin x limit is never
    # recommended on the strength of the model (a safety rule, common practice)
    res = _two_zone_fit([6.0, 1.0], s1_value=8.5)  # S1 at 300 m3/d, above 0.8 x 10 mg/L
    limits = {"nitrate": NITRATE_MCL}
    rates = np.linspace(0.0, 2000.0, 201)  # every 10 m3/d
    crit = sweep.measured_exceedances(res, limits, 0.8, rates)
    assert len(crit) == 1 and "step S1" in crit[0].name
    # the rates within 5 % (the default tolerance, 15 m3/d) of 300 fail: 290, 300 and 310
    np.testing.assert_allclose(rates[~crit[0].ok], [290.0, 300.0, 310.0], atol=1e-9)
    # a prediction that calls every rate compliant (5 mg/L): 300 m3/d stays out of the window
    conc = np.full((20, len(rates), 1), 5.0)
    pred = Prediction(rates, conc, np.zeros((20, len(rates))), np.zeros((20, len(rates), 2)),
                      np.zeros((20, len(rates), 2)), ["nitrate"])
    model_only = sweep.operating_window(pred, limits, 0.8, 0.05, 100.0, 0.0, 0.0, 1e9)
    assert model_only.ok[1:].all()
    w = sweep.operating_window(pred, limits, 0.8, 0.05, 100.0, 0.0, 0.0, 1e9,
                               extra_criteria=crit)
    assert not w.ok[30]
    assert not any(lo <= 300.0 <= hi for lo, hi, _, _ in w.intervals)
    # a grid without 300 m3/d and no tolerance: the two rates bracketing it fail, so the
    # measured rate cannot fall inside a reported interval
    coarse = np.arange(0.0, 2000.0, 40.0)
    crit = sweep.measured_exceedances(res, limits, 0.8, coarse, tolerance=0.0)
    np.testing.assert_allclose(coarse[~crit[0].ok], [280.0, 320.0], atol=1e-9)
    # a wider band is a setting
    crit = sweep.measured_exceedances(res, limits, 0.8, rates, tolerance=0.2)
    np.testing.assert_allclose(rates[~crit[0].ok], np.arange(240.0, 361.0, 10.0), atol=1e-9)
    # no sample above the margin: no criterion
    assert sweep.measured_exceedances(res, limits, 0.9, rates) == []


def test_a_measured_exceedance_leaves_the_rates_the_model_shows_compliant():
    # nitrate 13 and 2 mg/L in the two zones: S1 (300 m3/d) measured 9.33 mg/L, above 8;
    # the fit reproduces it and, from the three samples together, shows the blend below
    # 8 mg/L with 95 % probability from 490 m3/d on
    res = _two_zone_fit([13.0, 2.0], relative_error=0.01)
    np.testing.assert_allclose(res.problem.data["nitrate"].value[0], 9.0 + 1.0 / 3.0,
                               rtol=1e-9)
    limits = {"nitrate": NITRATE_MCL}
    rates = np.linspace(0.0, 2000.0, 201)
    pred = uncertainty.predict(res, uncertainty.monte_carlo(res, 200, 1), rates)
    model_only = sweep.operating_window(pred, limits, 0.8, 0.05, 100.0, 0.0, 0.0, 1e9)
    crit = sweep.measured_exceedances(res, limits, 0.8, rates)
    w = sweep.operating_window(pred, limits, 0.8, 0.05, 100.0, 0.0, 0.0, 1e9,
                               extra_criteria=crit)
    # the model's low end (490 m3/d with these draws) lies beyond the measured rate's 5 %
    # band but within 250 m3/d of it: the earlier rule (every rate within half the distance
    # to S2 at 800 m3/d) closed it and pinned the low end at 560; the model's end now stands
    low = model_only.intervals[0][0]
    assert 315.0 < low <= 550.0
    assert w.intervals[0][0] == pytest.approx(low)
    np.testing.assert_array_equal(w.ok, model_only.ok)
    assert not crit[0].ok[rates == 300.0].all()
# ------------------------------------------------ the statistic each limit is judged on
CONFIRMATION = ComplianceBasis(SINGLE_SAMPLE, 2, "40 CFR 141.23", "secondary")
ANNUAL = ComplianceBasis(ANNUAL_MEAN, 4, "40 CFR 141.23(i)", "secondary")


def _statistic(basis, temporal_cv, lab_cv, analyte="nitrate"):
    lim = replace(NITRATE_MCL, analyte=analyte, compliance=basis)
    return sweep.Statistic(analyte, lim, temporal_cv, "setting", lab_cv, "setting")


def test_annual_mean_without_variability_is_todays_mean_based_result_exactly():
    pred = _prediction(RATES / 100.0, spread=0.5, n_draws=200)
    stats = {"nitrate": _statistic(ANNUAL, 0.0, 0.0)}
    assert stats["nitrate"].log_sd == 0.0
    c = pred.concentration[:, :, 0]
    for thr in (6.0, 8.0, 10.0):
        np.testing.assert_array_equal(sweep.exceedance(c, thr, stats["nitrate"].log_sd),
                                      (c > thr).mean(0))
    w_mean = _window(pred)
    w_stat = sweep.operating_window(pred, LIMITS, 0.8, 0.05, 60.0, 5.0, 0.0, np.inf,
                                    statistics=stats)
    np.testing.assert_array_equal(w_stat.ok, w_mean.ok)
    assert w_stat.intervals == w_mean.intervals
    table = sweep.sweep_table(pred, LIMITS, 0.8, 0.9, ["a", "b"], stats)
    np.testing.assert_array_equal(table["nitrate_p_exceed_margin"], (c > 8.0).mean(0))
    # with no spread the statistic's band is the band of the mean
    np.testing.assert_allclose(table["nitrate_statistic_upper"], table["nitrate_upper"],
                               rtol=1e-12)


@given(mean=st.floats(4.0, 7.99), cv=st.floats(0.05, 1.0), lab=st.floats(0.0, 0.3))
def test_variability_raises_the_exceedance_of_a_mean_below_the_threshold(mean, cv, lab):
    # judged on the mean, a mean below the threshold never exceeds; a sample of it may
    c = np.full((5, 1), mean)
    for basis in (CONFIRMATION, ANNUAL):
        p = exceedance_given_mean(c, 8.0, basis.log_sd(cv, lab)).mean(0)[0]
        assert 0.0 == (c > 8.0).mean() < p < 0.5
    # a single sample (one temporal draw) spreads more than the mean of four quarters
    assert CONFIRMATION.log_sd(cv, lab) > ANNUAL.log_sd(cv, lab)


@given(mean=st.floats(0.5, 20.0), sd=st.one_of(st.just(0.0), st.floats(1e-3, 1.0)),
       beta=st.floats(0.001, 0.5))
def test_the_window_counts_draws_whose_statistic_exceeds_too_often(mean, sd, beta):
    # a draw counts against a rate when P(S > t | its mean) > beta; mean_threshold is the mean
    # at which that probability is beta exactly (the lognormal tail: scipy.stats.lognorm)
    t = 8.0
    m_star = mean_threshold(t, sd, beta)
    if sd > 0:
        tail = lognorm.sf(t, sd, scale=m_star * np.exp(-0.5 * sd**2))
        assert tail == pytest.approx(beta, rel=1e-9)
    else:
        assert m_star == t
    c = np.array([[mean * 0.9], [mean], [mean * 1.1]])
    expected = (exceedance_given_mean(c, t, sd) > beta).mean(0)
    if not np.any(np.isclose(c, m_star, rtol=1e-9)):  # exactly on the edge: either side
        np.testing.assert_array_equal(sweep.exceedance(c, t, sd, beta), expected)


def test_variability_closes_rates_the_mean_allows():
    # every draw's mean 7 mg/L as N, under 0.8 x 10: judged on the mean every rate passes;
    # judged on a sample with its confirmation (CV 10 %, lab 5 %) the probability is
    # Phi((ln(7/8) - s^2/2)/s) with s^2 = ln(1.01) + ln(1.00125), s = 0.1058: about 0.094 > 0.05
    pred = _prediction([7.0] * len(RATES), spread=0.0)
    stats = {"nitrate": _statistic(CONFIRMATION, 0.10, 0.05)}
    s = stats["nitrate"].log_sd
    expected = stats_norm.cdf((np.log(7 / 8) - s**2 / 2) / s)  # scipy.stats.norm
    assert expected == pytest.approx(0.0943, abs=5e-4)
    w = sweep.operating_window(pred, LIMITS, 0.8, 0.05, 60.0, 5.0, 0.0, np.inf,
                               statistics=stats)
    assert w.empty and QUALITY in w.reason_empty
    assert not _window(pred).empty
    # every draw's statistic exceeds 8 mg/L in 9.4 % of samples, more than beta = 5 %
    table = sweep.sweep_table(pred, LIMITS, 0.8, 0.9, ["a", "b"], stats)
    np.testing.assert_array_equal(table["nitrate_p_exceed_margin"], 1.0)
    # a tolerance of 10 % of samples above the margin lets every rate through
    loose = {"nitrate": replace(stats["nitrate"], sample_probability=0.10)}
    assert not sweep.operating_window(pred, LIMITS, 0.8, 0.05, 60.0, 5.0, 0.0, np.inf,
                                      statistics=loose).empty
    # the ratio rules take the spread of their terms too
    assert sweep.rule_log_sd(RATIO_RULES["WHO"][0], stats) > 0.0


@pytest.mark.parametrize(("mean", "cv", "lab"), [(7.0, 0.10, 0.05), (7.5, 0.25, 0.15),
                                                 (6.0, 0.05, 0.20)])
def test_average_of_two_against_a_monte_carlo_of_the_rule(mean, cv, lab):
    # the rule itself, drawn: a first sample and its confirmation taken within 24 h share one
    # draw of the water's temporal factor and carry independent lab errors; compliance is
    # judged on their average. Seeded Monte Carlo of 400,000 pairs: its standard error is at
    # most 0.0008; the tolerance 0.004 also covers the moment-matched lognormal of the average
    # of two lab factors (Fenton 1960)
    rng = np.random.default_rng(11)
    n, thr = 400_000, 8.0

    def factor(cv_, size):  # lognormal with mean 1 and coefficient of variation cv_
        s2 = np.log1p(cv_**2)
        return np.exp(rng.normal(-s2 / 2, np.sqrt(s2), size))

    t = factor(cv, n)
    x1, x2 = mean * t * factor(lab, n), mean * t * factor(lab, n)
    mc = np.mean((x1 + x2) / 2 > thr)
    got = exceedance_given_mean(np.array([mean]), thr, CONFIRMATION.log_sd(cv, lab))[0]
    assert got == pytest.approx(mc, abs=0.004)
    # the full rule confirms only a first sample above the threshold: never more often than
    # the average alone, so judging the average is on the safe side
    assert np.mean((x1 > thr) & ((x1 + x2) / 2 > thr)) <= mc
    # four quarterly samples: independent temporal and lab factors, averaged
    q = mean * factor(cv, (n, 4)) * factor(lab, (n, 4))
    mc4 = np.mean(q.mean(1) > 0.9 * mean)
    got4 = exceedance_given_mean(np.array([mean]), 0.9 * mean, ANNUAL.log_sd(cv, lab))[0]
    assert got4 == pytest.approx(mc4, abs=0.006)


def test_statistic_quantiles_invert_the_mixture():
    rng = np.random.default_rng(5)
    c = rng.uniform(5.0, 9.0, (300, 4))
    c[:, 0] = np.nan  # nothing pumped
    c[:10, 3] = 0.0  # a few draws of zero concentration
    s = 0.15
    q = sweep.statistic_quantiles(c, [0.05, 0.5, 0.95], s)
    assert np.all(np.isnan(q[:, 0]))
    # at each quantile the average over draws of the lognormal CDF is the probability
    for k, p in enumerate([0.05, 0.5, 0.95]):
        for r in (1, 2, 3):
            cdf = 1.0 - exceedance_given_mean(c[:, r], q[k, r], s).mean()
            assert cdf == pytest.approx(p, abs=1e-9)
    # zero spread: the quantiles of the draws
    np.testing.assert_allclose(sweep.statistic_quantiles(c[:, 1:], [0.1, 0.9], 0.0),
                               np.quantile(c[:, 1:], [0.1, 0.9], axis=0), rtol=1e-12)


def _bisection_quantiles(c, probs, s, iterations=60):
    """The mixture quantiles by plain bisection on ln S over the whole bracket (the reference
    the Newton iteration of statistic_quantiles must reproduce)."""
    from scipy.special import ndtr

    probs = np.asarray(probs, float)
    valid = np.isfinite(c)
    n = valid.sum(0)
    pos = valid & (c > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = np.where(pos, np.log(np.where(pos, c, 1.0)) - 0.5 * s * s, np.nan)
    zero_frac = np.where(n > 0, (valid & ~pos).sum(0) / np.maximum(n, 1), np.nan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        lo = np.nanmin(lm, axis=0) - 9 * s
        hi = np.nanmax(lm, axis=0) + 9 * s
    lo = np.where(np.isfinite(lo), lo, 0.0)[None, :].repeat(len(probs), 0)
    hi = np.where(np.isfinite(hi), hi, 0.0)[None, :].repeat(len(probs), 0)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        z = (mid[:, None, :] - lm[None, :, :]) / s
        cdf = (np.where(pos[None], ndtr(z), 0.0).sum(1) + (valid & ~pos).sum(0)) \
            / np.maximum(n, 1)
        below = cdf < probs[:, None]
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    out = np.exp(0.5 * (lo + hi))
    out = np.where(zero_frac[None, :] >= probs[:, None], 0.0, out)
    return np.where(n[None, :] > 0, out, np.nan)


@pytest.mark.parametrize("s", [0.01, 0.15, 0.6, 1.5])
def test_statistic_quantiles_equal_a_plain_bisection(s):
    rng = np.random.default_rng(11)
    c = np.exp(rng.normal(1.5, 0.4, (400, 7)))
    c[:, 1] = np.nan  # nothing pumped
    c[:30, 2] = 0.0  # some draws of zero concentration
    c[:, 3] = 0.0  # every draw zero
    c[:200, 4] = np.nan  # half the draws missing
    c[:, 5] = np.where(np.arange(400) < 100, 0.2, 40.0) * rng.uniform(0.9, 1.1, 400)  # two modes
    c[:380, 6] = 0.0  # zeros beyond the lowest probability
    probs = [0.025, 0.05, 0.3, 0.5, 0.95, 0.975]
    got = sweep.statistic_quantiles(c, probs, s)
    ref = _bisection_quantiles(c, probs, s)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(ref))
    np.testing.assert_allclose(got, ref, rtol=1e-10, atol=0.0)


def test_predict_summary_counts_draws_above_each_threshold(fitted):
    result, draws = fitted
    rates = np.linspace(100.0, 1500.0, 9)
    pred = uncertainty.predict(result, draws, rates)
    # thresholds on the mean, as the window uses them (mean_threshold of each statistic)
    sd = np.array([CONFIRMATION.log_sd(0.1, 0.05), ANNUAL.log_sd(0.1, 0.05)])
    thr = np.array([[mean_threshold(8.0, sd[0], 0.05), mean_threshold(0.008, sd[1], 0.05)],
                    [10.0, 0.010]])
    for shares in (False, True):  # the fast path and the general one
        summ = uncertainty.predict_summary(result, draws, rates, thresholds=thr,
                                           shares=shares, chunk_points=500)
        for t in range(2):
            for a in range(2):
                np.testing.assert_array_equal(
                    summ.exceedance[t, :, a], (pred.concentration[:, :, a] > thr[t, a]).mean(0))


def test_lab_error_of_a_compliance_result():
    import pandas as pd

    samples = pd.DataFrame({"analyte": ["nitrate"] * 4 + ["arsenic"],
                            "value": [5.0, 8.0, np.nan, 4.0, 0.005],
                            "uncertainty": [0.25, 0.8, np.nan, np.nan, np.nan],
                            "nondetect": [False, False, True, False, False]})
    # median of 0.25/5 = 0.05 and 0.8/8 = 0.10
    assert sweep.lab_relative_error(samples, "nitrate", 0.07) == (
        pytest.approx(0.075, rel=1e-12), "median stated by the lab")
    assert sweep.lab_relative_error(samples, "arsenic", 0.07) == (
        0.07, "default lab uncertainty setting")


# --- the recommended rate keeps a headroom inside the window; the demand is weighed ---------
# Check values by hand on a grid of 0, 10, ..., 1000 with a window of 400-600 and a 5 % headroom
# (a rate r holds it when 0.95 r and 1.05 r both lie in the window): from the top, r <= 600 /
# 1.05 = 571.4, so 570 on the grid; from below, r >= 400 / 0.95 = 421.05, so 430.

def _grid_window(lo=400.0, hi=600.0):
    rates = np.arange(0.0, 1001.0, 10.0)
    return rates, (rates >= lo) & (rates <= hi)


def test_recommended_rate_keeps_the_headroom_from_the_top_end():
    rates, ok = _grid_window()
    rec, kept = sweep.recommended_rate(rates, ok, demand=800.0, headroom=0.05)
    assert kept and rec == pytest.approx(570.0, abs=0)
    # no headroom: the old rule, the top of the window
    assert sweep.recommended_rate(rates, ok, 800.0, 0.0) == (600.0, True)
    # a demand inside the window and far from its ends is recommended as it is
    assert sweep.recommended_rate(rates, ok, 500.0, 0.05) == (500.0, True)


def test_recommended_rate_keeps_the_headroom_from_the_bottom_end():
    rates, ok = _grid_window()
    # demand below the window: the smallest rate whose band stays inside, 420
    rec, kept = sweep.recommended_rate(rates, ok, demand=100.0, headroom=0.05)
    assert kept and rec == pytest.approx(430.0, abs=0)


def test_window_narrower_than_the_headroom_is_reported():
    rates, ok = _grid_window(500.0, 520.0)
    rec, kept = sweep.recommended_rate(rates, ok, demand=800.0, headroom=0.05)
    assert not kept and rec == pytest.approx(510.0, abs=0)
    assert sweep.recommended_rate(rates, np.zeros_like(ok), 800.0, 0.05) == (None, True)


@given(st.floats(0.0, 0.3), st.floats(50.0, 1000.0))
def test_recommended_rate_is_always_compliant(headroom, demand):
    rates, ok = _grid_window()
    rec, kept = sweep.recommended_rate(rates, ok, demand, headroom)
    assert ok[rates == rec].all()
    if kept:
        assert 400.0 * (1 - 1e-12) <= rec * (1 - headroom)
        assert rec * (1 + headroom) <= 600.0 * (1 + 1e-12)


def test_window_says_whether_the_demand_is_met():
    rates, ok = _grid_window()
    w = sweep.Window(rates, ok, [(400.0, 600.0, "a", "b")], 570.0, "", [], demand=700.0,
                     headroom=0.05)
    assert w.demand_met is False
    w = replace(w, recommended=500.0, demand=500.0)
    assert w.demand_met is True
    assert replace(w, demand=None).demand_met is None


def test_keep_level_above_a_zone_is_a_hard_limit():
    # level 10 m + 0.04 m per m^3/d: 22 m at 300, 26 m at 400, 30 m at 500 m^3/d
    pred = _prediction(np.full(len(RATES), 2.0), 10.0 + 0.04 * RATES)
    free = _window(pred)
    assert free.intervals[0][1] == 1000.0
    kept = sweep.operating_window(pred, LIMITS, 0.8, 0.05, 60.0, 5.0, 0.0, np.inf,
                                  keep_above=[("Upper sand", 27.0)])
    # 26 m +- 0.2 at 400 stays above 27 m; 30 m at 500 does not
    assert kept.intervals[0][1] == 400.0
    assert kept.intervals[0][3] == "pumping level above top of Upper sand"
    assert any(c.name == "pumping level above top of Upper sand" and c.kind == "hydraulic"
               for c in kept.criteria)


def test_cascading_water_is_flagged_per_zone():
    # two zones with tops at 27 m and 80 m; the level passes 27 m between 400 and 500 m^3/d
    pred = _prediction(np.full(len(RATES), 2.0), 10.0 + 0.04 * RATES)
    prob = sweep.cascade_probability(pred, [27.0, 80.0])
    np.testing.assert_array_equal(prob[:, 0], (RATES >= 500.0).astype(float))
    np.testing.assert_array_equal(prob[:, 1], 0.0)
    w = sweep.operating_window(pred, LIMITS, 0.8, 0.05, 60.0, 5.0, 0.0, np.inf,
                               zone_top=[27.0, 80.0], zone_names=["Upper", "Lower"])
    assert w.cascading == [("Upper", 500.0, True)]
    # a zone that takes water from the well (a thief) does not cascade
    thief = Prediction(pred.rates, pred.concentration, pred.pumping_level, pred.shares,
                       -pred.zone_flow, pred.analytes)
    assert sweep.cascading_zones(thief, [27.0, 80.0], ["Upper", "Lower"], 0.05) == []
    table = sweep.sweep_table(pred, LIMITS, 0.8, 0.9, ["Upper", "Lower"], zone_top=[27.0, 80.0])
    np.testing.assert_array_equal(table["cascading_Upper"], prob[:, 0])
