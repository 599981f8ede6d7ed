"""Tests of blendq.fit.uncertainty: Monte Carlo draws, predictions, and interval coverage.

Sources:
- Coverage of a confidence interval (e.g. Efron and Tibshirani 1993, An Introduction to the
  Bootstrap, ch. 12-13): over repeated synthetic experiments, a 90 % interval
  contains the true value in about 90 % of them. With the lab error stated correctly and a
  linear model, the parametric bootstrap interval is exact up to Monte Carlo noise.
- Linearised least squares (Golub and Pereyra 1973; any regression text): for residuals
  r = J dtheta - e with e ~ N(0, I), the Gauss-Newton refit dtheta = J^+ e has covariance
  (J^T J)^-1, and the zone values of a linear problem have covariance (A^T W^2 A)^-1.
- Continuity at every node of the wellbore (Konikow et al. 2009, USGS TM 6-A30): discharge
  weights are >= 0 and sum to one; the pass-through computation of intake_weights must equal
  the node-by-node mixing of a full composition vector (blendq.well.mixing.discharge_composition).
- Linear zone law q_i = G_i (h0_i - h_w) with sum q_i = Q (Thiem 1906, one conductance per zone): scaling every G_i
  by f gives at rate Q the zone flows of rate Q / f, times f, hence the same shares.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import synthetic_wells as sw
from hypothesis import given, settings
from hypothesis import strategies as st

from blendq.fit import diagnostics, uncertainty
from blendq.fit.estimation import FitOptions, fit
from blendq.well import mixing
from blendq.well.flowlog import log_error
from blendq.well.model import PRIOR_HEAD_SD_MEASURED, PRIOR_LOG_CONDUCTANCE_SD
from blendq.well.synthetic import synthetic_project

NOISE = dict(relative_error=0.05, absolute_error={"nitrate": 0.1, "arsenic": 0.0005})


@pytest.fixture(scope="module")
def joint():
    result = fit(sw.project(seed=11, level_noise=0.05, **NOISE))
    return result, uncertainty.monte_carlo(result, 2000, seed=4)


@pytest.fixture(scope="module")
def fixed():
    result = fit(sw.project(seed=12, **NOISE), FitOptions(fit_hydraulics=False))
    return result, uncertainty.monte_carlo(result, 2000, seed=5)


def test_same_seed_same_draws(joint):
    result, draws = joint
    again = uncertainty.monte_carlo(result, 2000, seed=4)
    np.testing.assert_array_equal(again.theta, draws.theta)
    np.testing.assert_array_equal(again.zone_values, draws.zone_values)
    other = uncertainty.monte_carlo(result, 50, seed=99)
    assert not np.allclose(other.zone_values, draws.zone_values[:50])
    # the chunk size changes how draws are grouped, not the draws
    chunked = uncertainty.monte_carlo(result, 300, seed=4, chunk=7)
    np.testing.assert_allclose(chunked.zone_values, draws.zone_values[:300], rtol=1e-12,
                               atol=1e-15)
    assert draws.n_draws == 2000 and draws.seed == 4 and draws.analytes == result.analytes
    assert draws.zone_values.shape == (2000, 4, 2)


def test_progress_reports_each_chunk(fixed):
    result, _ = fixed
    calls = []
    uncertainty.monte_carlo(result, 25, seed=0, chunk=10, progress=lambda d, t: calls.append((d, t)))
    assert calls == [(10, 25), (20, 25), (25, 25)]


def test_fixed_hydraulics_draws_keep_theta(fixed):
    result, draws = fixed
    np.testing.assert_array_equal(draws.theta, np.repeat(result.theta[None], 2000, axis=0))


def test_theta_draws_have_the_linearised_covariance(joint):
    # a well with flow logs is close to linear in theta over its posterior spread, so the
    # randomised-maximum-likelihood draws have about the linearised covariance (J^T J)^-1 (the
    # fitted theta_cov): 2000 draws give the sd to about 1.6 % (1 sd), so 10 % is a loose bound
    result, draws = joint
    sd_mc = draws.theta.std(axis=0, ddof=1)
    sd_lin = np.sqrt(np.diag(result.theta_cov))
    assert np.all(sd_lin > 0)
    np.testing.assert_allclose(sd_mc, sd_lin, rtol=0.10)
    # centred near the optimum: the posterior mean of a mildly nonlinear problem differs from
    # its mode by a small fraction of a sd (here < 0.15 sd, Monte Carlo error 0.02 sd)
    assert np.all(np.abs(draws.theta.mean(0) - result.theta) <= 0.15 * sd_lin)


def test_linearised_zone_sd_matches_monte_carlo(fixed):
    # a linear problem whose zone values sit far from the zero bound: both views agree
    result, draws = fixed
    sd_lin = uncertainty.linearised_zone_sd(result)
    sd_mc = draws.zone_values.std(axis=0, ddof=1)
    far = result.zone_values() > 4 * sd_lin
    assert far.sum() >= 6
    np.testing.assert_allclose(sd_mc[far], sd_lin[far], rtol=0.10)


def test_predict_shapes_and_consistency(joint):
    result, draws = joint
    rates = np.array([150.0, 600.0, 1200.0, 2500.0])
    pred = uncertainty.predict(result, draws, rates)
    assert pred.concentration.shape == (2000, 4, 2)
    assert pred.pumping_level.shape == (2000, 4)
    assert pred.shares.shape == (2000, 4, 4) and pred.zone_flow.shape == (2000, 4, 4)
    assert pred.analytes == result.analytes
    np.testing.assert_allclose(pred.shares.sum(-1), 1.0, rtol=1e-12)
    assert np.all(pred.shares >= 0)
    np.testing.assert_allclose(pred.concentration,
                               np.einsum("brn,bna->bra", pred.shares, draws.zone_values),
                               rtol=1e-12)
    np.testing.assert_allclose(pred.zone_flow.sum(-1), np.broadcast_to(rates, (2000, 4)),
                               rtol=1e-10)
    # the draw-median prediction lies close to the fitted prediction
    med = pred.quantiles([0.5])[0]
    assert med.shape == (4, 2)
    np.testing.assert_allclose(med, result.predict(rates), rtol=0.1)
    # deeper pumping level at a higher rate, draw by draw
    assert np.all(np.diff(pred.pumping_level, axis=1) > 0)


def test_conductance_factor_is_a_rate_rescaling(fixed):
    # linear zone law: all G x f at rate Q <=> rate Q / f (same shares, same blend)
    result, draws = fixed
    rates = np.array([300.0, 900.0, 2400.0])
    f = 0.6
    a = uncertainty.predict(result, draws, rates, conductance_factor=np.full(4, f))
    b = uncertainty.predict(result, draws, rates / f)
    np.testing.assert_allclose(a.shares, b.shares, rtol=1e-10, atol=1e-13)
    np.testing.assert_allclose(a.concentration, b.concentration, rtol=1e-10)


def test_changes_hook_seals_a_zone(fixed):
    # a scenario: seal Z1 (conductance zero) -- it then has no share at any rate
    result, draws = fixed

    def seal(model):
        g = np.array(model.conductance, copy=True)
        g[..., 0] = 0.0
        return model.with_changes(conductance=g)

    pred = uncertainty.predict(result, draws, np.array([500.0, 2000.0]), changes=seal)
    np.testing.assert_array_equal(pred.shares[..., 0], 0.0)
    np.testing.assert_allclose(pred.shares.sum(-1), 1.0, rtol=1e-12)


def test_exceedance_and_quantiles_hand_built():
    # five draws at two rates of one analyte: P(C > 2) counts draws strictly above
    conc = np.array([[1.0, 3.0], [2.0, 3.0], [3.0, 1.0], [4.0, 3.0], [5.0, 0.5]])[:, :, None]
    pred = uncertainty.Prediction(np.array([100.0, 200.0]), conc, np.zeros((5, 2)),
                                  np.zeros((5, 2, 1)), np.zeros((5, 2, 1)), ["nitrate"])
    np.testing.assert_allclose(pred.exceedance([2.0])[:, 0], [0.6, 0.6])
    np.testing.assert_allclose(pred.exceedance([5.0])[:, 0], [0.0, 0.0])
    np.testing.assert_allclose(pred.quantiles([0.5])[0, :, 0], [3.0, 3.0])
    assert pred.quantiles([0.05, 0.5, 0.95]).shape == (3, 2, 1)


@settings(max_examples=150, deadline=None)
@given(st.integers(0, 2**32 - 1), st.floats(0.0, 120.0), st.integers(1, 5))
def test_intake_weights_equal_mixing(seed, intake, n):
    # any zone flows (thieves included) and any intake depth: the pass-through weights equal the
    # node-by-node mixing of a full composition vector (blendq.well.mixing.discharge_composition with
    # the identity as zone values), sum to one and are never negative
    rng = np.random.default_rng(seed)
    top = np.sort(rng.uniform(5.0, 110.0, n))
    bot = top + rng.uniform(0.5, 5.0, n)
    geo = mixing.WellGeometry(top, bot, intake)
    flows = rng.normal(0.0, 100.0, (64, n))
    flows[::2] = np.abs(flows[::2])
    a = mixing.discharge_composition(flows, geo)
    b = uncertainty.intake_weights(flows, geo)
    np.testing.assert_array_equal(mixing.discharge_weights(flows, geo), b)
    np.testing.assert_array_equal(np.isfinite(a), np.isfinite(b))
    ok = np.isfinite(b).all(-1)
    np.testing.assert_allclose(b[ok], a[ok], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(b[ok].sum(-1), 1.0, rtol=1e-10)
    assert np.all(b[ok] >= 0)


def test_predict_summary_equals_predict(joint):
    result, draws = joint
    sub = dataclasses.replace(draws, theta=draws.theta[:300], zone_values=draws.zone_values[:300])
    rates = np.linspace(50.0, 3000.0, 37)
    thr = np.array([[8.0, 0.012], [5.0, 0.02]])
    probs = (0.05, 0.5, 0.95)
    pred = uncertainty.predict(result, sub, rates)
    # a small chunk forces several chunks of rates
    summ = uncertainty.predict_summary(result, sub, rates, probs, thr, shares=True,
                                       chunk_points=3000)
    np.testing.assert_allclose(summ.concentration, pred.quantiles(probs), rtol=1e-12, atol=1e-15)
    for t in range(2):
        np.testing.assert_array_equal(summ.exceedance[t], pred.exceedance(thr[t]))
    np.testing.assert_allclose(summ.pumping_level, np.quantile(pred.pumping_level, probs, axis=0),
                               rtol=1e-12)
    np.testing.assert_allclose(summ.shares, np.median(pred.shares, axis=0), rtol=1e-12, atol=1e-15)
    assert summ.analytes == result.analytes
    # horizon factor and scenario hooks pass through
    factor = np.array([0.9, 0.8, 1.0, 0.7])
    pred_f = uncertainty.predict(result, sub, rates, conductance_factor=factor)
    summ_f = uncertainty.predict_summary(result, sub, rates, probs, conductance_factor=factor)
    np.testing.assert_allclose(summ_f.concentration, pred_f.quantiles(probs), rtol=1e-12)
    assert summ_f.exceedance.shape == (0, 37, 2) and summ_f.shares is None


def _coverage_project(seed, joint_fit):
    p = synthetic_project(sw.G, sw.H0, sw.TOP, sw.BOT, {"nitrate": sw.CONC["nitrate"]}, sw.RATES,
                          25.0, relative_error=0.05, absolute_error={"nitrate": 0.1},
                          well_loss=sw.WELL_LOSS,
                          flowlog_rates=[0.0, 1000.0] if joint_fit else None,
                          flowlog_depths=sw.LOG_DEPTHS, level_noise=0.05 if joint_fit else 0.0,
                          depth_samples=sw.depth_samples(25.0), seed=seed)
    if joint_fit:
        # every datum the fit weighs gets the noise its stated sd claims: flow-log readings
        # (log_error with the default settings) and the prior values of G and h0 themselves
        rng = np.random.default_rng(10_000 + seed)
        f = p.flowlogs["upward_flow"].to_numpy(float)
        p.flowlogs["upward_flow"] = f + log_error(f, 0.05, 2.7) * rng.standard_normal(len(f))
        sd_g = 0.25 * PRIOR_LOG_CONDUCTANCE_SD  # prior sd of a given conductance
        p.zones = [dataclasses.replace(
            z, conductance=z.conductance * np.exp(sd_g * rng.standard_normal()),
            static_level=z.static_level + PRIOR_HEAD_SD_MEASURED * rng.standard_normal())
            for z in p.zones]
    return p


@pytest.mark.slow
def test_interval_coverage_fixed_hydraulics():
    # 200 seeded experiments x 4 zones: the 90 % zone-table interval must contain the truth in
    # 85-95 % of the cases where the table shows one (verdict "resolved" or "weakly resolved";
    # binomial sd of the rate ~1.1 % if independent)
    hits = []
    for seed in range(200):
        result = fit(_coverage_project(seed, False), FitOptions(fit_hydraulics=False))
        table = diagnostics.zone_table(result, uncertainty.monte_carlo(result, 200, seed=seed),
                                       interval=0.90)
        resolved = (table["verdict"] != "not resolved").to_numpy()
        truth = sw.CONC["nitrate"]
        inside = (table["lower"].to_numpy() <= truth) & (truth <= table["upper"].to_numpy())
        hits.extend(inside[resolved])
    assert len(hits) >= 0.95 * 800
    assert 0.85 <= np.mean(hits) <= 0.95


def test_interval_coverage_joint_fit():
    # a smaller check of the joint fit (hydraulics refitted by the linearised step): 40
    # experiments x 4 zones, with a wider band for the smaller sample (and correlated zones)
    hits = []
    for seed in range(40):
        result = fit(_coverage_project(seed, True))
        table = diagnostics.zone_table(result, uncertainty.monte_carlo(result, 200, seed=seed))
        resolved = (table["verdict"] != "not resolved").to_numpy()
        truth = sw.CONC["nitrate"]
        inside = (table["lower"].to_numpy() <= truth) & (truth <= table["upper"].to_numpy())
        hits.extend(inside[resolved])
    assert len(hits) >= 0.9 * 160
    assert 0.78 <= np.mean(hits) <= 0.98
