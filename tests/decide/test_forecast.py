"""Tests of blendq.decide.forecast: the years ahead, the predictive check, triggers, trend tests."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pymannkendall as mk
import pytest
from scipy import stats

from blendq.api import demo_path, load_project
from blendq.decide.analysis import analyse
from blendq.decide.forecast import forecast, predictive_check, sen_slope
from blendq.fit.history import Layout, TimeFit, fit_time_model


def test_mann_kendall_and_sen_against_a_hand_computation():
    # y = 1, 3, 2, 5, 4 at t = 0..4. By hand (Mann 1945; Gilbert 1987, eq. 16.1-16.4):
    # S = sum over pairs of sign(y_j - y_i) = 8 positive - 2 negative = 6;
    # Var(S) = n(n - 1)(2n + 5) / 18 = 5 * 4 * 15 / 18 = 16.667 (no ties);
    # z = (S - 1) / sqrt(Var S) = 1.2247; two-sided p = 2 (1 - Phi(z)) = 0.2207.
    # Sen (1968): the ten pairwise slopes sorted are -1, -1, 0.5, 0.5, 0.75, 1, 1, 4/3, 2, 3;
    # their median is (0.75 + 1) / 2 = 0.875.
    y = [1.0, 3.0, 2.0, 5.0, 4.0]
    res = mk.original_test(y)
    assert res.s == 6
    assert res.var_s == pytest.approx(5 * 4 * 15 / 18, rel=1e-12)
    assert res.z == pytest.approx(5 / np.sqrt(5 * 4 * 15 / 18), rel=1e-12)
    assert res.p == pytest.approx(2 * (1 - stats.norm.cdf(5 / np.sqrt(50 / 3))), rel=1e-9)
    assert sen_slope(np.arange(5.0), y) == pytest.approx(0.875, rel=1e-12)
    assert res.slope == pytest.approx(0.875, rel=1e-12)


def test_sen_slope_uses_the_sample_times():
    # uneven times: the slopes are per unit of t, not per sample
    t = np.array([0.0, 0.5, 2.0, 2.5])
    y = 2.0 * t + 1.0
    assert sen_slope(t, y) == pytest.approx(2.0, rel=1e-12)


def _time_fit(n=60, seed=2):
    rng = np.random.default_rng(seed)
    tau = np.sort(rng.uniform(-8.0, 0.0, n))
    w1 = rng.uniform(0.2, 0.8, n)
    shares = np.column_stack([w1, 1 - w1])
    y = shares @ np.array([6.0, 1.0]) + 0.2 * tau * w1 + 0.25 * rng.standard_normal(n)
    lab = np.full(n, 0.05)
    r = fit_time_model(tau, shares, y, lab, [6.0, 1.0], [0.1, 0.1], "trend")
    used = pd.DataFrame({"sampled_at": pd.Timestamp("2026-01-01")
                         + pd.to_timedelta(tau * 365.25, unit="D"), "rate": 1.0, "value": y,
                         "source_row": np.arange(1, n + 1), "tau": tau})
    tf = TimeFit("nitrate", r["model"], r["layout"], r["coef"], r["cov"], r["sigma_temporal"],
                 0.0, 0.0, r["aicc"], r["conditions"], pd.Timestamp("2026-01-01"), n,
                 r["residuals"], r["leverage"], r["sigma"], used)
    return tf, tau, shares, y


def test_leave_one_out_band_equals_a_refit_without_the_result():
    tf, tau, shares, y = _time_fit()
    a = SimpleNamespace(history={"nitrate": tf}, project=SimpleNamespace(
        settings=SimpleNamespace(interval=0.9)))
    check = predictive_check(a)
    layout = tf.layout
    x = np.vstack([layout.rows(shares, tau), layout.rows(np.eye(2), np.zeros(2))])
    yy = np.concatenate([y, [6.0, 1.0]])
    sd = np.concatenate([tf.sigma, [0.1, 0.1]])
    for j in (0, 17, 59):
        keep = np.arange(len(yy)) != j
        coef, *_ = np.linalg.lstsq(x[keep] / sd[keep, None], yy[keep] / sd[keep], rcond=None)
        assert check["expected"][j] == pytest.approx(x[j] @ coef, rel=1e-9)
    # about 10 % of results fall outside their 90 % band when the model is right
    assert 0.02 <= check["outside"].mean() <= 0.2


def test_layout_names_follow_the_columns():
    layout = Layout(2, (("trend", "zone"), ("seasonal", "blend")))
    assert layout.names == ["a0", "a1", "b0", "b1", "s_blend", "k_blend"]
    row = layout.rows(np.array([[0.25, 0.75]]), np.array([0.25]))[0]
    assert row == pytest.approx([0.25, 0.75, 0.0625, 0.1875, 1.0, 0.0], abs=1e-12)


@pytest.fixture(scope="module")
def demo():
    a = analyse(load_project(demo_path()), draws=200)
    return a, forecast(a)


def test_demo_history_gives_time_models_and_a_forecast(demo):
    a, fc = demo
    assert set(a.history) == {"nitrate", "arsenic"}
    nitrate = a.history["nitrate"]
    # the invented history has a rising nitrate in the upper sand and a season: both found
    assert nitrate.model == "trend+seasonal"
    trend, sd = nitrate.trend()
    assert trend[0] > 3 * sd[0] > 0
    # four zones whose shares move together with the rate: the trend is the blend's
    assert nitrate.resolution("trend") == "blend"
    assert any("temporal_cv setting" in n for n in a.notes)
    st = a.project.settings.temporal_cv_for("nitrate")
    assert st == (pytest.approx(nitrate.temporal_cv), "monitoring history")
    assert list(fc.years) == list(range(2026, 2036))
    assert fc.ok.shape == (10, len(a.prediction.rates))
    # last_year is the end of each rate's first run of compliant years
    for r in range(len(fc.rates)):
        run = np.cumprod(fc.ok[:, r])
        expected = fc.years[run.sum() - 1] if run[0] else np.nan
        assert fc.last_year[r] == pytest.approx(expected, nan_ok=True)
    assert fc.best_rate is not None and fc.last_year[fc.rates == fc.best_rate][0] == \
        np.nanmax(fc.last_year)
    assert any(s.startswith("Rates that stay compliant longest") for s in fc.sentences)
    assert any("141.23(d)(2)" in s and "common practice" in s for s in fc.triggers)
    tests = fc.trend_tests.set_index("analyte")
    assert tests.loc["nitrate", "trend"] == "increasing"
    assert tests.loc["nitrate", "sen_slope_per_year"] > 0


def test_forecast_is_seeded(demo):
    a, fc = demo
    again = forecast(a)
    assert np.array_equal(again.ok, fc.ok)
    assert again.sentences == fc.sentences


def test_blend_terms_peak_shortcut_equals_the_monthly_maximum(demo):
    # with time terms of the blend alone, the forecast takes the year's highest month without
    # evaluating every rate at every month; the full evaluation gives the same numbers
    from blendq.decide import forecast as f

    a, _ = demo
    tf = a.history["nitrate"]
    n = 50
    coef = tf.draws(n, np.random.default_rng(0))
    taus = f._year_times(tf.t0, np.arange(2026, 2036))
    shares, anchor = a.prediction.shares[:n], f._anchor(a, "nitrate", n)
    full = f.discharge(tf, coef, shares, taus.reshape(-1), anchor)
    full = full.reshape(n, shares.shape[1], 10, f.MONTHS).max(axis=3)
    _, blend = f.zone_paths(tf, coef, taus.reshape(-1))
    fast = (np.einsum("drz,dz->dr", shares, anchor)[:, :, None]
            + blend.reshape(n, 10, f.MONTHS).max(axis=2)[:, None, :])
    assert np.allclose(full, fast, rtol=1e-12, atol=1e-12, equal_nan=True)


def test_first_year_narrower_than_the_window_is_explained(demo):
    # the demo's forecast follows the fitted season (nitrate judged at the year's highest
    # month) while the window counts the season as temporal variability: where the first year
    # closes rates of the window, the sentences say why; where it closes none, they do not
    a, fc = demo
    inside = np.zeros(len(fc.rates), bool)
    for interval in a.window.intervals:
        inside |= (fc.rates >= interval[0] - 1e-9) & (fc.rates <= interval[1] + 1e-9)
    closed = int((inside & ~fc.ok[0]).sum())
    assert closed > 0  # the demo's low end (nitrate's seasonal peak)
    notes = [s for s in fc.sentences if "keeps fewer rates than the operating window" in s]
    assert len(notes) == (1 if closed else 0)
    if closed:
        assert f"({closed} of {int(inside.sum())} rates of the window close)" in notes[0]
