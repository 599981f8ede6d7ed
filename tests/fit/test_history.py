"""Tests of blendq.fit.history: zone time models from a monitoring history."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from blendq.errors import ModelError
from blendq.fit.history import condition_number, fit_time_model, resolve_terms, years_since
from blendq.well.model import model_from_parameters
from blendq.well.synthetic import synthetic_history, synthetic_project

# an invented two-zone well whose shares move with the rate (different static heads)
G = np.array([60.0, 100.0])
H0 = np.array([-8.0, -14.0])
TOP = np.array([30.0, 60.0])
BOT = TOP + 15.0
C0 = np.array([8.0, 1.0])
T0 = pd.Timestamp("2026-03-02 08:00")


def _two_zone_model():
    p = synthetic_project(G, H0, TOP, BOT, {"nitrate": C0}, [200.0, 1000.0, 2000.0], 25.0)
    return model_from_parameters(p, G, H0, 0.0)


def _monthly(n: int = 120):
    return [T0 - pd.Timedelta(days=30.44 * k) for k in range(n, 0, -1)]


def test_trend_of_one_zone_matches_linregress():
    # one zone, no anchor, equal lab errors: the weighted fit is ordinary least squares, so
    # slope, intercept and the slope's standard error are those of scipy.stats.linregress
    rng = np.random.default_rng(1)
    tau = np.sort(rng.uniform(-10.0, 0.0, 80))
    y = 5.0 + 0.3 * tau + 0.4 * rng.standard_normal(tau.size)
    r = fit_time_model(tau, np.ones((tau.size, 1)), y, np.full(tau.size, 0.05), [0.0],
                       [np.inf], "trend")
    ref = stats.linregress(tau, y)
    names = r["layout"].names
    assert r["coef"][names.index("b0")] == pytest.approx(ref.slope, rel=1e-9)
    assert r["coef"][names.index("a0")] == pytest.approx(ref.intercept, rel=1e-9)
    assert np.sqrt(r["cov"][1, 1]) == pytest.approx(ref.stderr, rel=1e-6)


def test_trend_and_season_recovered_with_calibrated_intervals():
    """Replicate histories of the two-zone well (true shares, the step-test anchor drawn with
    its sd): the 90 % interval of the upper zone's trend covers the truth in 85-95 % of
    replicates; the seasonal amplitude and the temporal sd are recovered on average."""
    model = _two_zone_model()
    dates = _monthly()
    anchor_sd = np.array([0.15, 0.05])
    truth = {"nitrate": {"c0": C0, "trend": np.array([0.25, 0.0]),
                         "amplitude": np.array([0.8, 0.0]), "phase": np.array([0.7, 0.0])}}
    rng = np.random.default_rng(7)
    hits, amps, sig = [], [], []
    for rep in range(300):
        rates = rng.uniform(200.0, 2000.0, len(dates))
        h = synthetic_history(model, T0, dates, rates, truth, 0.03, {"nitrate": 0.3},
                              seed=10_000 + rep)
        tau = years_since(h["sampled_at"], T0)
        w = model.weights(h["rate"].to_numpy())
        # the step test sees c_i(t0), the season included
        at_t0 = C0 + np.array([0.8 * np.sin(0.7), 0.0])
        anchor = at_t0 + anchor_sd * rng.standard_normal(2)
        r = fit_time_model(tau, w, h["value"].to_numpy(), h["uncertainty"].to_numpy(), anchor,
                           anchor_sd, "trend+seasonal")
        assert dict(r["layout"].terms) == {"trend": "zone", "seasonal": "zone"}
        names = r["layout"].names
        i = names.index("b0")
        hits.append(abs(r["coef"][i] - 0.25) <= stats.norm.ppf(0.95) * np.sqrt(r["cov"][i, i]))
        amps.append(np.hypot(r["coef"][names.index("s0")], r["coef"][names.index("k0")]))
        sig.append(r["sigma_temporal"])
    assert 0.85 <= np.mean(hits) <= 0.95
    assert np.mean(amps) == pytest.approx(0.8, rel=0.05)
    assert np.mean(sig) == pytest.approx(0.3, rel=0.05)


def test_trend_is_of_the_blend_when_rates_do_not_separate_the_zones():
    model = _two_zone_model()
    tau = np.linspace(-10.0, 0.0, 60)
    narrow = model.weights(np.full(60, 1000.0) + np.linspace(-5.0, 5.0, 60))
    wide = model.weights(np.linspace(200.0, 2000.0, 60)[np.random.default_rng(0).permutation(60)])
    layout, conds = resolve_terms("trend", narrow, tau, 30.0)
    assert dict(layout.terms) == {"trend": "blend"} and conds["trend"] > 30.0
    layout, conds = resolve_terms("trend", wide, tau, 30.0)
    assert dict(layout.terms) == {"trend": "zone"} and conds["trend"] <= 30.0


def test_blend_trend_recovers_the_blend_slope():
    # narrow rates: the trend of the blend is the shares-weighted zone trend at those rates
    model = _two_zone_model()
    dates = _monthly()
    rates = np.full(len(dates), 1000.0)
    truth = {"nitrate": {"c0": C0, "trend": np.array([0.25, 0.0])}}
    h = synthetic_history(model, T0, dates, rates, truth, 0.02, {"nitrate": 0.05}, seed=3)
    w = model.weights(rates)
    r = fit_time_model(years_since(h["sampled_at"], T0), w, h["value"].to_numpy(),
                       h["uncertainty"].to_numpy(), C0, np.array([0.05, 0.05]), "trend")
    assert dict(r["layout"].terms) == {"trend": "blend"}
    blend_slope = 0.25 * w[0, 0]
    i = r["layout"].names.index("b_blend")
    assert r["coef"][i] == pytest.approx(blend_slope, abs=3 * np.sqrt(r["cov"][i, i]))


def test_aicc_prefers_the_simplest_model_that_fits():
    model = _two_zone_model()
    dates = _monthly()
    rng = np.random.default_rng(11)
    rates = rng.uniform(200.0, 2000.0, len(dates))
    w = model.weights(rates)
    anchor_sd = np.array([0.05, 0.05])
    flat = synthetic_history(model, T0, dates, rates, {"nitrate": {"c0": C0}}, 0.03,
                             {"nitrate": 0.2}, seed=5)
    both = synthetic_history(model, T0, dates, rates, {"nitrate": {
        "c0": C0, "trend": np.array([0.4, 0.0]), "amplitude": np.array([1.5, 0.0])}}, 0.03,
        {"nitrate": 0.2}, seed=5)
    tau = years_since(flat["sampled_at"], T0)
    r_flat = fit_time_model(tau, w, flat["value"].to_numpy(), flat["uncertainty"].to_numpy(),
                            C0, anchor_sd)
    r_both = fit_time_model(tau, w, both["value"].to_numpy(), both["uncertainty"].to_numpy(),
                            C0, anchor_sd)
    assert r_flat["model"] == "constant"
    assert r_both["model"] == "trend+seasonal"
    assert set(r_both["aicc"]) == {"constant", "trend", "seasonal", "trend+seasonal"}


def test_condition_number_of_collinear_columns_is_infinite():
    x = np.column_stack([np.arange(5.0), 2 * np.arange(5.0)])
    assert condition_number(x) > 1e12
    assert condition_number(np.eye(3)) == pytest.approx(1.0)


def test_too_few_results_is_a_model_error():
    with pytest.raises(ModelError, match="at least"):
        fit_time_model(np.zeros(3), np.ones((3, 1)), np.ones(3), np.ones(3), [1.0], [1.0])


def test_singular_condition_numbers_are_not_printed_as_digits():
    # a block singular to working precision has a condition number of rounding noise: the
    # note says "singular", not 1.14e+16 one run and 2.07e+16 the next
    from blendq.fit.history import _condition_text

    assert _condition_text(1.14e16, 30) == "its per-zone block is singular"
    assert _condition_text(float("inf"), 30) == "its per-zone block is singular"
    assert _condition_text(45.2, 30) == "condition number 45.2 > 30"
