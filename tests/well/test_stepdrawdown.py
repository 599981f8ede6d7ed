"""Tests of blendq.well.stepdrawdown: well-loss fits, Hantush-Bierschenk, Walton class, predictions."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from blendq.errors import InputError, ModelError
from blendq.units import Q_
from blendq.well import hydraulics, steptest
from blendq.well import stepdrawdown as sd

ORIGIN = pd.Timestamp("2026-05-04 08:00")


def make_steps(rates, starts, ends, recovered=None, pumping_level=None):
    """A steps table in the project's layout (times as Timestamps)."""
    n = len(rates)
    starts = np.asarray(starts, float)
    ends = np.asarray(ends, float)
    return pd.DataFrame({
        "step": np.arange(1, n + 1),
        "rate": np.asarray(rates, float),
        "start": ORIGIN + pd.to_timedelta(starts, unit="D"),
        "end": ORIGIN + pd.to_timedelta(ends, unit="D"),
        "duration": ends - starts,
        "pumping_level": np.full(n, np.nan) if pumping_level is None else pumping_level,
        "recovered_before": np.zeros(n, bool) if recovered is None else recovered,
        "source_row": np.arange(1, n + 1),
    })


def make_levels(times, depth):
    return pd.DataFrame({"time": ORIGIN + pd.to_timedelta(np.asarray(times), unit="D"),
                         "level": np.asarray(depth), "source_row": np.arange(1, len(times) + 1)})


def step_times(starts, durations, per_step=30, first=1e-3):
    """Log-spaced reading times inside each step (relative times from `first` to the end)."""
    return np.concatenate([s + np.geomspace(first, d, per_step)
                           for s, d in zip(starts, durations, strict=True)])


# ---------------------------------------------------------------------------------------------
# exact recovery on synthetic data
# ---------------------------------------------------------------------------------------------

@settings(max_examples=40, deadline=None)
@given(b=st.floats(1e-4, 1e-2), c_over_b=st.floats(0.0, 5e-3),
       q1=st.floats(100.0, 2000.0), ratio=st.floats(1.2, 3.0), k=st.integers(3, 6))
def test_jacob_exact_recovery(b, c_over_b, q1, ratio, k):
    # synthetic data from s = BQ + CQ^2 (Jacob 1947) must be fitted exactly
    q = q1 * np.linspace(1.0, ratio, k)
    c = b * c_over_b / q1
    fit = sd.fit_jacob(q, b * q + c * q**2)
    assert fit.linear_loss == pytest.approx(b, rel=1e-6)
    assert fit.well_loss == pytest.approx(c, rel=1e-6, abs=1e-9 * b / q1)
    assert fit.dof == k - 2


@pytest.mark.parametrize("n", [1.4, 2.0, 2.7, 3.3])
def test_rorabaugh_exact_recovery(n):
    # synthetic data from s = BQ + CQ^n (Rorabaugh 1953)
    q = np.array([400.0, 800.0, 1200.0, 1600.0, 2000.0])
    b = 2.0e-3
    c = 0.4 * b * 2000.0 / 2000.0**n  # nonlinear part 40 % of linear at 2000 m^3/d
    fit = sd.fit_rorabaugh(q, b * q + c * q**n)
    assert fit.exponent == pytest.approx(n, rel=1e-6)
    assert fit.linear_loss == pytest.approx(b, rel=1e-6)
    assert fit.well_loss == pytest.approx(c, rel=1e-6)
    assert not fit.exponent_at_bound


def test_rorabaugh_three_steps_fit_exactly_without_stderr():
    q = np.array([500.0, 1000.0, 1500.0])
    s = 2e-3 * q + 1e-9 * q**2.5
    fit = sd.fit_rorabaugh(q, s)
    assert fit.exponent == pytest.approx(2.5, rel=1e-6)
    assert fit.dof == 0
    assert np.all(np.isnan(fit.stderr))


def test_cooper_jacob_step_drawdown_single_rate_is_cooper_jacob():
    # one constant rate: s = Q/(4 pi T) ln(2.25 T t/(r^2 S)) (Cooper and Jacob 1946) + Q s/(2 pi T)
    t = np.array([0.01, 0.1, 1.0])
    s = sd.cooper_jacob_step_drawdown(t, [0.0], [1000.0], 300.0, 2e-4, 0.1, skin=1.5,
                                      well_loss=3e-7)
    expect = (1000.0 / (4 * np.pi * 300.0) * np.log(2.25 * 300.0 * t / (0.01 * 2e-4))
              + 1000.0 * 1.5 / (2 * np.pi * 300.0) + 3e-7 * 1000.0**2)
    np.testing.assert_allclose(s, expect, rtol=1e-12)


def test_hantush_bierschenk_exact_on_cooper_jacob_data_with_a_recovered_step():
    # Cooper-Jacob superposition (Cooper and Jacob 1946) of a schedule with a recovery period:
    # steps 1-3 chained, 4 hours off, then steps 4-5 chained from static again.
    # The equal-time sums must equal B(dt) Q + C Q^2 (Kruseman and de Ridder 1990).
    tr, sto, rw, skin, c = 800.0, 5e-4, 0.12, 3.0, 2.5e-7
    rates = np.array([600.0, 1100.0, 1500.0, 900.0, 1800.0])
    starts = np.array([0.0, 0.1, 0.2, 0.5, 0.6])
    ends = starts + 0.1
    sched_start = np.array([0.0, 0.1, 0.2, 0.3, 0.5, 0.6])
    sched_rate = np.array([600.0, 1100.0, 1500.0, 0.0, 900.0, 1800.0])
    # the recovery period is long enough only in the model's bookkeeping: remove the memory of
    # the first sequence by simulating the two sequences separately (full recovery)
    t = step_times(starts, ends - starts)
    first = t <= 0.3
    s = np.where(first,
                 sd.cooper_jacob_step_drawdown(t, sched_start[:3], sched_rate[:3], tr, sto, rw,
                                               skin, c),
                 sd.cooper_jacob_step_drawdown(t - 0.5, [0.0, 0.1], [900.0, 1800.0], tr, sto,
                                               rw, skin, c))
    steps = make_steps(rates, starts, ends, recovered=[False, False, False, True, False])
    res = steptest.analyse_step_test(steps, 5.0, make_levels(t, 5.0 + s), elapsed=0.08)
    b_dt = (np.log(2.25 * tr * 0.08 / (rw**2 * sto)) + 2 * skin) / (4 * np.pi * tr)
    np.testing.assert_allclose(res.increments.drawdown, b_dt * rates + c * rates**2, rtol=1e-9)
    assert res.jacob.linear_loss == pytest.approx(b_dt, rel=1e-6)
    assert res.jacob.well_loss == pytest.approx(c, rel=1e-6)
    assert res.apparent_transmissivity == pytest.approx(tr, rel=1e-6)
    assert res.reference_time == pytest.approx(0.08)
    np.testing.assert_array_equal(res.increments.sequence_start, [True, False, False, True, False])
    # the rate falls from step 3 to step 4 but step 4 starts from static: no warning
    assert not any("rising rates" in w for w in res.warnings)


# ---------------------------------------------------------------------------------------------
# noisy data
# ---------------------------------------------------------------------------------------------

def test_jacob_interval_coverage_on_noisy_data():
    # repeated synthetic experiments: a 90 % t-interval from the fit covariance must cover the
    # true B and C in about 90 % of them (linear least squares with Gaussian errors is exact).
    # The Hantush-Bierschenk line s/Q = B + C Q is fitted with equal weights, which is right when
    # the error of s grows in proportion to Q; with a constant error in s given as sigma, the
    # line's points carry sigma / Q and the intervals are exact again.
    rng = np.random.default_rng(20261202)
    q = np.array([300.0, 600.0, 900.0, 1200.0, 1500.0, 1800.0])
    b, c, noise = 3e-3, 5e-7, 0.05
    reps = 400
    hits = np.zeros((reps, 6), bool)
    tq = stats.t.ppf(0.95, q.size - 2)
    zq = stats.norm.ppf(0.95)
    true_1500 = b * 1500 + c * 1500**2
    for i in range(reps):
        s = b * q + c * q**2 + rng.normal(0.0, noise, q.size) * q / q.max()
        fit = sd.fit_jacob(q, s)
        hits[i, 0] = abs(fit.linear_loss - b) <= tq * math.sqrt(fit.covariance[0, 0])
        hits[i, 1] = abs(fit.well_loss - c) <= tq * fit.stderr[1]
        pred = sd.predict_drawdown(fit, 1500.0, interval=0.90)
        hits[i, 2] = pred.drawdown_low <= true_1500 <= pred.drawdown_high
        s = b * q + c * q**2 + rng.normal(0.0, noise, q.size)
        fit = sd.fit_jacob(q, s, sigma=noise)
        hits[i, 3] = abs(fit.linear_loss - b) <= zq * fit.stderr[0]
        hits[i, 4] = abs(fit.well_loss - c) <= zq * fit.stderr[1]
        pred = sd.predict_drawdown(fit, 1500.0, interval=0.90)
        hits[i, 5] = pred.drawdown_low <= true_1500 <= pred.drawdown_high
    coverage = hits.mean(axis=0)
    # binomial standard error sqrt(0.9 * 0.1 / 400) = 0.015; allow 3 of them
    np.testing.assert_allclose(coverage, 0.90, atol=0.045)


def test_rorabaugh_noisy_band_coverage():
    # repeated synthetic experiments with s = BQ + CQ^n (Rorabaugh 1953) plus Gaussian noise:
    # the 90 % prediction band covers the true drawdown about 90 % of the time; the linearised
    # intervals of B and n hold roughly (the model is nonlinear in n)
    rng = np.random.default_rng(1)
    q = np.linspace(300.0, 2400.0, 8)
    b, c, n = 2e-3, 2e-9, 2.6
    check = np.array([1200.0, 2400.0])
    truth = b * check + c * check**n
    reps = 300
    band = np.zeros((reps, 2), bool)
    par = np.zeros((reps, 3), bool)
    for i in range(reps):
        fit = sd.fit_rorabaugh(q, b * q + c * q**n + rng.normal(0.0, 0.02, q.size))
        p = sd.predict_drawdown(fit, check, interval=0.90)
        band[i] = (p.drawdown_low <= truth) & (truth <= p.drawdown_high)
        par[i] = np.abs(fit.values - [b, c, n]) <= stats.t.ppf(0.95, fit.dof) * fit.stderr
    # binomial standard error 0.017 at 300 repetitions
    np.testing.assert_allclose(band.mean(axis=0), 0.90, atol=0.05)
    assert par[:, [0, 2]].mean(axis=0).min() > 0.8


def test_noisy_levels_hantush_bierschenk_within_intervals():
    tr, sto, rw, c = 400.0, 2e-4, 0.15, 6e-7
    rates = np.array([400.0, 800.0, 1200.0, 1600.0, 2000.0])
    starts = np.arange(5) * 0.125
    t = step_times(starts, np.full(5, 0.125), per_step=40)
    s = sd.cooper_jacob_step_drawdown(t, starts, rates, tr, sto, rw, 1.0, c)
    s = s + np.random.default_rng(11).normal(0.0, 0.01, t.size)
    res = steptest.analyse_step_test(make_steps(rates, starts, starts + 0.125), 20.0,
                               make_levels(t, 20.0 + s))
    b_dt = (np.log(2.25 * tr * 0.125 / (rw**2 * sto)) + 2.0) / (4 * np.pi * tr)
    fit = res.jacob
    assert abs(fit.linear_loss - b_dt) < 3 * fit.stderr[0]
    assert abs(fit.well_loss - c) < 3 * fit.stderr[1]
    assert res.apparent_transmissivity == pytest.approx(tr, rel=0.05)


# ---------------------------------------------------------------------------------------------
# against ttim (transient analytic-element model, PyPI)
# ---------------------------------------------------------------------------------------------

TT = {"T": 500.0, "b": 20.0, "S": 1e-4, "rw": 0.15, "res": 0.05}
TT_STARTS = np.array([0.0, 0.125, 0.25, 0.375])
TT_RATES = np.array([500.0, 1000.0, 1500.0, 2000.0])


def _ttim_well(tsandq, res):
    ttim = pytest.importorskip("ttim")
    ml = ttim.ModelMaq(kaq=[TT["T"] / TT["b"]], z=[0.0, -TT["b"]], Saq=[TT["S"] / TT["b"]],
                       tmin=1e-4, tmax=1.0, M=10)
    well = ttim.Well(ml, xw=0.0, yw=0.0, rw=TT["rw"], tsandQ=tsandq, res=res, layers=0)
    ml.solve(silent=True)
    return well


@pytest.fixture(scope="module")
def ttim_step_test():
    """A one-layer ttim model pumped in four steps without recovery, with a screen resistance."""
    well = _ttim_well(list(zip(TT_STARTS, TT_RATES, strict=True)), TT["res"])
    t = step_times(TT_STARTS, np.full(4, 0.125), per_step=30)
    return t, -well.headinside(t)[0]


def test_cooper_jacob_superposition_matches_ttim(ttim_step_test):
    # ttim (Bakker, PyPI) solves the transient well flow numerically (Laplace transform); once
    # u = r_w^2 S / (4 T dt) is small the Cooper-Jacob superposition of the rate increments
    # must agree. The screen resistance c of ttim is a skin s = c T / (r_w H).
    t, s_ttim = ttim_step_test
    skin = TT["res"] * TT["T"] / (TT["rw"] * TT["b"])
    s_cj = sd.cooper_jacob_step_drawdown(t, TT_STARTS, TT_RATES, TT["T"], TT["S"], TT["rw"], skin)
    u = TT["rw"] ** 2 * TT["S"] / (4 * TT["T"] * (t - TT_STARTS[np.searchsorted(TT_STARTS, t) - 1]))
    assert u.max() < 0.01
    np.testing.assert_allclose(s_cj, s_ttim, rtol=0.01)


def test_hantush_bierschenk_recovers_ttim_linear_loss(ttim_step_test):
    # ttim has no turbulent loss, so C = 0 and B(dt) = s(dt)/Q of a single constant-rate test in
    # the same ttim model (ttim's own linear loss, screen resistance included)
    t, s_ttim = ttim_step_test
    steps = make_steps(TT_RATES, TT_STARTS, TT_STARTS + 0.125)
    res = steptest.analyse_step_test(steps, 10.0, make_levels(t, 10.0 + s_ttim), elapsed=0.1)
    single = _ttim_well([(0.0, 1000.0)], TT["res"])
    b_ttim = -single.headinside(0.1)[0, 0] / 1000.0
    assert res.jacob.linear_loss == pytest.approx(b_ttim, rel=0.01)
    # nonlinear part below 1 % of the drawdown at the largest rate
    assert abs(res.jacob.well_loss) * TT_RATES[-1] ** 2 < \
        0.01 * res.per_step["drawdown_equal_time"].iloc[-1]
    assert res.apparent_transmissivity == pytest.approx(TT["T"], rel=0.01)
    # efficiencies within 1 % of 100 %; those above 100 % are withheld (NaN)
    eff = res.per_step["efficiency_equal_time"].to_numpy()
    lin_share = 100.0 * res.per_step["linear_drawdown"] / res.per_step["drawdown_equal_time"]
    np.testing.assert_allclose(lin_share, 100.0, atol=1.0)
    np.testing.assert_array_equal(np.isnan(eff), lin_share > 100.0)


def test_zone_model_comparison_against_ttim_without_resistance():
    # without a screen resistance the one-layer zone model's 1/G (Cooper-Jacob conductance from
    # blendq.well.hydraulics) is the linear loss; the step test on ttim's drawdown must agree
    well = _ttim_well(list(zip(TT_STARTS, TT_RATES, strict=True)), 0.0)
    t = step_times(TT_STARTS, np.full(4, 0.125), per_step=30)
    s = -well.headinside(t)[0]
    res = steptest.analyse_step_test(make_steps(TT_RATES, TT_STARTS, TT_STARTS + 0.125), 10.0,
                               make_levels(t, 10.0 + s))
    g = hydraulics.cooper_jacob_conductance(TT["T"], TT["S"], res.reference_time, TT["rw"])
    cmp_ = sd.compare_with_zone_model(res.jacob, [g], conductance_stderr=[0.1 * g])
    assert abs(cmp_.relative_difference) < 0.01
    assert cmp_.zone_relative_stderr == pytest.approx(0.1, rel=1e-9)
    assert cmp_.better_constrained == "step test"


# ---------------------------------------------------------------------------------------------
# zone comparison, Walton, units
# ---------------------------------------------------------------------------------------------

def test_compare_with_zone_model_several_zones_and_draws():
    fit = sd.fit_jacob([500.0, 1000.0, 1500.0, 2000.0],
                       np.array([1.1, 2.3, 3.4, 4.7]))
    g = np.array([100.0, 250.0, 50.0])
    out = sd.compare_with_zone_model(fit, g, conductance_stderr=[5.0, 5.0, 5.0])
    assert out.zone_linear_loss == pytest.approx(1 / 400.0, rel=1e-12)
    # delta method: sd(1/S) = sd(S)/S^2 with sd(S) = sqrt(3) 5
    assert out.zone_stderr == pytest.approx(math.sqrt(75.0) / 400.0**2, rel=1e-12)
    rng = np.random.default_rng(3)
    draws = g * (1 + 0.5 * rng.standard_normal((4000, 3))).clip(0.05)
    wide = sd.compare_with_zone_model(fit, draws)
    assert wide.zone_relative_stderr > 0.1
    assert wide.better_constrained == "step test"
    none = sd.compare_with_zone_model(fit, g)
    assert none.better_constrained == "undetermined"
    with pytest.raises(ModelError):
        sd.compare_with_zone_model(fit, [0.0, 0.0])


def test_walton_unit_conversion_by_pint():
    # 1 s^2/ft^5 = (1/60 min)^2 / (0.3048 m)^5 = 0.1056 min^2/m^5 (ft exactly 0.3048 m, NIST
    # SP 811), the 0.1056 quoted with the SI form of the criteria
    expect = (1 / 60.0) ** 2 / 0.3048**5
    assert expect == pytest.approx(0.1056, rel=5e-4)
    one = Q_(1.0, "s**2/ft**5").to("d**2/m**5").magnitude
    assert sd.well_loss_in(one, "min**2/m**5") == pytest.approx(expect, rel=1e-12)
    assert sd.well_loss_in(one, "s**2/ft**5") == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize(("c_s2ft5", "klass"), [
    (-0.5, 0), (0.0, 1), (4.999, 1), (5.0, 2), (9.99, 2), (10.0, 3), (39.9, 3), (40.0, 4),
    (120.0, 4),
])
def test_walton_class_boundaries(c_s2ft5, klass):
    # Walton (1962) criteria on C in s^2/ft^5, thresholds 5, 10, 40 (a secondary source:
    # a published restatement attributing them to Walton 1962)
    c = Q_(c_s2ft5, "s**2/ft**5").to("d**2/m**5").magnitude
    assert sd.walton_class(c) == klass
    assert sd.WALTON_LABELS[klass]


def test_walton_class_vectorised():
    c = Q_(np.array([1.0, 7.0, 20.0, 50.0]), "s**2/ft**5").to("d**2/m**5").magnitude
    np.testing.assert_array_equal(sd.walton_class(c), [1, 2, 3, 4])


# ---------------------------------------------------------------------------------------------
# end of step, result tables, predictions
# ---------------------------------------------------------------------------------------------

def test_end_of_step_from_pumping_levels_and_from_levels_agree():
    rates = np.array([500.0, 1000.0, 1500.0, 2000.0])
    b, c = 2.4e-3, 3e-7
    s = b * rates + c * rates**2
    starts = np.array([0.0, 0.5, 1.0, 1.5])
    ends = starts + 0.125  # recovered between steps: independent steps
    steps = make_steps(rates, starts, ends, recovered=[False, True, True, True],
                       pumping_level=12.0 + s)
    direct = steptest.analyse_step_test(steps, 12.0)
    assert direct.method == "end of step"
    assert direct.reference_time == pytest.approx(0.125)
    t = np.concatenate([[st + 0.05, en] for st, en in zip(starts, ends, strict=True)])
    lev = make_levels(t, 12.0 + np.repeat(s, 2) * np.tile([0.9, 1.0], 4))
    from_levels = steptest.analyse_step_test(steps, 12.0, lev, method="end of step")
    np.testing.assert_allclose(from_levels.per_step["drawdown_measured"], s, rtol=1e-12)
    ps = direct.per_step
    assert list(ps.columns) == ["step", "rate", "drawdown_measured",
                                "specific_capacity_measured", "efficiency_measured",
                                "linear_drawdown", "nonlinear_drawdown", "source_row"]
    np.testing.assert_allclose(ps["linear_drawdown"] + ps["nonlinear_drawdown"], s, rtol=1e-9)
    np.testing.assert_allclose(ps["specific_capacity_measured"], rates / s, rtol=1e-12)
    np.testing.assert_allclose(ps["efficiency_measured"], 100 * b * rates / s, rtol=1e-6)
    par = direct.parameters
    assert list(par.columns) == ["model", "name", "value", "stderr", "unit"]
    row = par[(par.model == "jacob") & (par.name == "C")].iloc[0]
    assert row.value == pytest.approx(c, rel=1e-6) and row.unit == "d**2/m**5"


def test_chained_steps_read_at_ends_warn_and_refuse_horizon():
    rates = np.array([500.0, 1000.0, 1500.0])
    starts = np.array([0.0, 0.1, 0.2])
    steps = make_steps(rates, starts, starts + 0.1, pumping_level=[11.0, 12.1, 13.3])
    res = steptest.analyse_step_test(steps, 10.0)
    assert any("without recovery" in w for w in res.warnings)
    assert math.isnan(res.reference_time)
    with pytest.raises(ModelError, match="reference time"):
        res.predict([1000.0], time=365.0, transmissivity=500.0)


def test_predictions_horizon_and_bands():
    rng = np.random.default_rng(5)
    q = np.array([400.0, 800.0, 1200.0, 1600.0, 2000.0])
    s = 2e-3 * q + 4e-7 * q**2 + rng.normal(0, 0.03, q.size)
    fit = sd.fit_jacob(q, s, reference_time=0.125)
    rate = np.linspace(0.0, 2500.0, 11)
    now = sd.predict_drawdown(fit, rate, static_level=15.0)
    np.testing.assert_allclose(now.pumping_level, 15.0 + now.drawdown, rtol=1e-12)
    assert np.all(now.drawdown_low <= now.drawdown) and np.all(now.drawdown <= now.drawdown_high)
    # B(t) = B(t0) + 2.3/(4 pi T) log10(t/t0) (Cooper and Jacob 1946)
    later = sd.predict_drawdown(fit, rate, time=365.0, transmissivity=600.0)
    shift = math.log10(365.0 / 0.125) * math.log(10) / (4 * math.pi * 600.0)
    np.testing.assert_allclose(later.drawdown - now.drawdown, shift * rate, rtol=1e-10, atol=1e-12)
    # seeded draws agree with the delta method for a model linear in its parameters; the
    # draws use the normal quantile, so compare with a normal-quantile delta band
    drawn = sd.predict_drawdown(fit, rate[1:], method="draws", draws=20000, seed=1)
    delta_sd = (now.drawdown_high - now.drawdown)[1:]
    delta_sd = delta_sd / stats.t.ppf(0.95, fit.dof) * stats.norm.ppf(0.95)
    np.testing.assert_allclose(drawn.drawdown_high - drawn.drawdown, delta_sd, rtol=0.05)
    again = sd.predict_drawdown(fit, rate[1:], method="draws", draws=20000, seed=1)
    np.testing.assert_array_equal(drawn.drawdown_high, again.drawdown_high)
    with pytest.raises(ModelError, match="transmissivity"):
        sd.predict_drawdown(fit, rate, time=30.0)
    with pytest.raises(ModelError):
        sd.predict_drawdown(fit, [-5.0])


def test_rorabaugh_prediction_band_uses_exponent():
    rng = np.random.default_rng(9)
    q = np.linspace(300.0, 2400.0, 7)
    s = 2e-3 * q + 2e-9 * q**2.6 + rng.normal(0.0, 0.02, q.size)
    fit = sd.fit_rorabaugh(q, s)
    p = sd.predict_drawdown(fit, [0.0, 1000.0, 3000.0])
    assert p.drawdown_low[0] == 0.0 == p.drawdown_high[0]
    width = p.drawdown_high - p.drawdown_low
    assert width[2] > width[1] > 0


def test_summary_lines_in_both_unit_systems():
    q = np.array([500.0, 1000.0, 1500.0, 2000.0])
    c = Q_(7.0, "s**2/ft**5").to("d**2/m**5").magnitude
    s = 2.5e-3 * q + c * q**2
    steps = make_steps(q, [0, 1, 2, 3], [0.1, 1.1, 2.1, 3.1], recovered=[False, True, True, True],
                       pumping_level=10.0 + s)
    res = steptest.analyse_step_test(steps, 10.0)
    us = "\n".join(res.summary_lines("US"))
    si = "\n".join(res.summary_lines("SI"))
    assert "C = 7 ± " in us and "s²/ft⁵" in us and "gpm" in us
    assert "class 2, mild deterioration or clogging" in us
    assert "C = 0.739 ± " in si and "min²/m⁵" in si  # 7 x 0.1056
    assert "m³/d" in si and "gpm" not in si
    with pytest.raises(InputError):
        res.summary_lines("imperial")


# ---------------------------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------------------------

def test_overlapping_steps_are_an_input_error():
    steps = make_steps([500.0, 1000.0, 1500.0], [0.0, 0.1, 0.15], [0.1, 0.2, 0.3],
                       pumping_level=[11.0, 12.0, 13.0])
    with pytest.raises(InputError) as err:
        steptest.analyse_step_test(steps, 10.0, steps_file="steps.csv")
    assert err.value.file == "steps.csv" and err.value.row == 3 and err.value.field == "start"
    assert "overlap" in str(err.value)


def test_pumping_level_above_static_names_row_and_field():
    steps = make_steps([500.0, 1000.0, 1500.0], [0, 1, 2], [0.1, 1.1, 2.1],
                       recovered=[False, True, True], pumping_level=[11.0, 9.5, 13.0])
    with pytest.raises(InputError) as err:
        steptest.analyse_step_test(steps, 10.0, steps_file="steps.csv")
    e = err.value
    assert (e.file, e.row, e.field) == ("steps.csv", 2, "pumping_level")
    assert "-0.5 m" in e.message and "static" in e.message


def test_level_record_above_static_names_levels_row():
    starts = np.array([0.0, 0.125, 0.25])
    t = step_times(starts, np.full(3, 0.125), per_step=10)
    s = sd.cooper_jacob_step_drawdown(t, starts, [500.0, 1000.0, 1500.0], 500.0, 1e-4, 0.15)
    s[15:20] = -0.3  # readings in step 2 above static
    with pytest.raises(InputError) as err:
        steptest.analyse_step_test(make_steps([500.0, 1000.0, 1500.0], starts, starts + 0.125), 10.0,
                             make_levels(t, 10.0 + s), elapsed=0.02, levels_file="levels.csv")
    assert err.value.file == "levels.csv" and err.value.field == "level"
    assert err.value.row in range(16, 21)


def test_falling_rate_in_chained_steps_is_a_warning():
    starts = np.array([0.0, 0.125, 0.25, 0.375])
    rates = np.array([500.0, 1000.0, 800.0, 1500.0])
    t = step_times(starts, np.full(4, 0.125))
    s = sd.cooper_jacob_step_drawdown(t, starts, rates, 500.0, 1e-4, 0.15, 0.0, 4e-7)
    res = steptest.analyse_step_test(make_steps(rates, starts, starts + 0.125), 10.0,
                               make_levels(t, 10.0 + s))
    assert any("step 3" in w and "rising rates" in w for w in res.warnings)
    # the increments still follow the superposition, so the fit holds
    assert res.jacob.well_loss == pytest.approx(4e-7, rel=1e-6)


def test_too_few_steps():
    with pytest.raises(InputError, match="at least 3 steps"):
        sd.fit_rorabaugh([500.0, 1000.0], [1.0, 2.2])
    with pytest.raises(InputError, match="at least 2 steps"):
        sd.fit_jacob([500.0, 500.0], [1.0, 1.1])
    steps = make_steps([500.0, 1000.0], [0, 1], [0.1, 1.1], recovered=[False, True],
                       pumping_level=[11.0, 12.2])
    with pytest.raises(InputError, match="at least 3 steps"):
        steptest.analyse_step_test(steps, 10.0, rorabaugh=True)
    res = steptest.analyse_step_test(steps, 10.0)
    assert res.rorabaugh is None and any("not fitted" in w for w in res.warnings)
    assert np.all(np.isnan(res.jacob.stderr))


@pytest.mark.parametrize(("field", "value", "match"), [
    ("rate", 0.0, "rate"), ("rate", np.nan, "rate"), ("pumping_level", np.nan, "no pumping level"),
])
def test_bad_step_values(field, value, match):
    steps = make_steps([500.0, 1000.0, 1500.0], [0, 1, 2], [0.1, 1.1, 2.1],
                       recovered=[False, True, True], pumping_level=[11.0, 12.0, 13.0])
    steps.loc[1, field] = value
    with pytest.raises(InputError, match=match) as err:
        steptest.analyse_step_test(steps, 10.0, steps_file="steps.csv")
    assert (err.value.row, err.value.field) == (2, field)


def test_equal_time_needs_levels_and_fitting_elapsed_time():
    starts = np.array([0.0, 0.125, 0.25])
    steps = make_steps([500.0, 1000.0, 1500.0], starts, starts + 0.125)
    with pytest.raises(InputError, match="water-level record"):
        steptest.analyse_step_test(steps, 10.0, method="equal time")
    t = step_times(starts, np.full(3, 0.125), per_step=10)
    s = sd.cooper_jacob_step_drawdown(t, starts, [500.0, 1000.0, 1500.0], 500.0, 1e-4, 0.15)
    with pytest.raises(InputError, match="longer than step") as err:
        steptest.analyse_step_test(steps, 10.0, make_levels(t, 10.0 + s), elapsed=0.2,
                             levels_file="levels.csv")
    assert err.value.file == "levels.csv"
    # a chained step with a single late reading cannot be extrapolated
    keep = ~((t > 0.125 + 0.0625) & (t < 0.24))
    with pytest.raises(InputError, match="step 2 has 1 water-level"):
        steptest.analyse_step_test(steps, 10.0, make_levels(t[keep], 10.0 + s[keep]), elapsed=0.01)
    with pytest.raises(InputError, match="start"):
        bad = steps.copy()
        bad.loc[0, "start"] = pd.NaT
        steptest.analyse_step_test(bad, 10.0, make_levels(t, 10.0 + s))


def test_auto_falls_back_to_step_ends_when_the_record_is_too_sparse():
    # chained steps with one reading per step: no log-time extrapolation is possible, so "auto"
    # reads each step at its end and says why (the explicit "equal time" still refuses)
    rates = np.array([500.0, 1000.0, 1500.0])
    starts = np.array([0.0, 0.125, 0.25])
    s = 2.4e-3 * rates + 3e-7 * rates**2
    steps = make_steps(rates, starts, starts + 0.125, pumping_level=12.0 + s)
    sparse = make_levels(starts + 0.1, 12.0 + s)
    with pytest.raises(InputError):
        steptest.analyse_step_test(steps, 12.0, sparse, method="equal time")
    res = steptest.analyse_step_test(steps, 12.0, sparse)
    assert res.method == "end of step"
    assert any("does not allow the equal-time" in w for w in res.warnings)


# ---------------------------------------------------------------------------------------------
# the Jacob line, measured against equal-time drawdowns, degenerate fits, the JSON result
# ---------------------------------------------------------------------------------------------

def test_jacob_fit_is_the_hantush_bierschenk_straight_line_worked_by_hand():
    # Worked example of Jacob (1947) s = BQ + CQ^2 as the straight line s/Q = B + CQ
    # (Hantush-Bierschenk plot, Kruseman and de Ridder 1990), solved by hand with the ordinary
    # least-squares formulas for a straight line (slope Sxy/Sxx, intercept ybar - slope xbar):
    #   Q   = 1000, 2000, 3000, 4000 m^3/d;  s = 2.10, 4.60, 7.35, 10.60 m
    #   s/Q = 2.10, 2.30, 2.45, 2.65 e-3 d/m^2;  xbar = 2500, ybar = 2.375e-3
    #   Sxx = 1500^2 + 500^2 + 500^2 + 1500^2 = 5.0e6
    #   Sxy = (1500 x 0.275 x 2 + 500 x 0.075 x 2) e-3 = 0.9
    #   C = 0.9 / 5e6 = 1.8e-7 d^2/m^5;  B = 2.375e-3 - 1.8e-7 x 2500 = 1.925e-3 d/m^2
    #   residuals of s/Q: -0.005, +0.015, -0.015, +0.005 e-3; RSS = 5e-10; s^2 = RSS/2
    #   sd(C) = sqrt(s^2 / Sxx) = 7.0711e-9;  sd(B) = sqrt(s^2 (1/4 + xbar^2/Sxx)) = 1.9365e-5
    q = np.array([1000.0, 2000.0, 3000.0, 4000.0])
    s = np.array([2.10, 4.60, 7.35, 10.60])
    fit = sd.fit_jacob(q, s)
    assert fit.linear_loss == pytest.approx(1.925e-3, rel=1e-9)
    assert fit.well_loss == pytest.approx(1.8e-7, rel=1e-9)
    np.testing.assert_allclose(fit.stderr, [math.sqrt(2.5e-10 * 1.5), math.sqrt(5e-17)],
                               rtol=1e-6)
    assert fit.residual_std == pytest.approx(math.sqrt(2.5e-10), rel=1e-6)
    # an unweighted fit of s itself would give another line (this is what the method is not)
    b_s, c_s = np.linalg.lstsq(np.column_stack([q, q * q]), s, rcond=None)[0]
    assert abs(c_s - 1.8e-7) > 1e-9


def _chained_record(rates, b=2.4e-3, c=3e-7, tr=600.0, sto=2e-4, rw=0.1):
    starts = 0.125 * np.arange(len(rates))
    t = step_times(starts, np.full(len(rates), 0.125), per_step=25)
    s = sd.cooper_jacob_step_drawdown(t, starts, rates, tr, sto, rw, 1.0, c)
    steps = make_steps(rates, starts, starts + 0.125)
    return steps, make_levels(t, 10.0 + s)


def test_measured_and_equal_time_drawdowns_are_both_labelled_and_printed():
    rates = np.array([500.0, 1000.0, 1500.0, 2000.0])
    steps, levels = _chained_record(rates)
    res = steptest.analyse_step_test(steps, 10.0, levels)
    ps = res.per_step
    assert res.method == "equal time"
    # chained steps: the measured end-of-step drawdown holds the growing response to earlier
    # steps, so from step 2 on it exceeds the equal-time sum the fit uses
    assert np.all(ps["drawdown_measured"].iloc[1:] > ps["drawdown_equal_time"].iloc[1:] + 0.01)
    np.testing.assert_allclose(ps["specific_capacity_measured"], rates / ps["drawdown_measured"])
    np.testing.assert_allclose(ps["specific_capacity_equal_time"],
                               rates / ps["drawdown_equal_time"])
    assert np.all(ps["efficiency_measured"].iloc[1:] < ps["efficiency_equal_time"].iloc[1:])
    text = "\n".join(res.summary_lines("SI"))
    last = [ln for ln in text.splitlines() if ln.strip().startswith("step 4")][0]
    assert "measured drawdown" in last and "equal-time drawdown" in last
    meas = f"{ps['drawdown_measured'].iloc[-1]:.3g}"
    eq = f"{ps['drawdown_equal_time'].iloc[-1]:.3g}"
    assert meas != eq and f"measured drawdown {meas} m" in last
    assert f"equal-time drawdown {eq} m" in last


def test_degenerate_rorabaugh_fits_are_withheld():
    q = np.array([400.0, 800.0, 1200.0, 1600.0, 2000.0])
    # all the drawdown in C Q^n (B = 0 at its bound)
    steps = make_steps(q, 0.5 * np.arange(5), 0.5 * np.arange(5) + 0.125,
                       recovered=[False] + [True] * 4, pumping_level=10.0 + 2e-4 * q**1.5)
    res = steptest.analyse_step_test(steps, 10.0)
    assert res.rorabaugh.linear_loss < 1e-12
    assert "B went to its bound 0" in res.rorabaugh_withheld
    assert res.rorabaugh_shown is None
    assert "withheld (B went to its bound 0" in "\n".join(res.summary_lines("US"))
    # the exponent stops at its upper bound 3.5
    steps = make_steps(q, 0.5 * np.arange(5), 0.5 * np.arange(5) + 0.125,
                       recovered=[False] + [True] * 4,
                       pumping_level=10.0 + 2e-3 * q + 3e-15 * q**4.5)
    res = steptest.analyse_step_test(steps, 10.0)
    assert res.rorabaugh.exponent == pytest.approx(3.5)
    out = res.to_json_dict()
    assert out["rorabaugh"] == {"shown": False, "exponent_at_bound": True,
                                "withheld_because": "n stopped at a bound of its range (n = 3.5)"}
    assert any("n stopped at a bound" in w for w in out["warnings"])


def test_efficiency_above_100_percent_is_withheld():
    # losses that grow more slowly than the rate: Jacob's C < 0, B Q > s at the top steps
    q = np.array([500.0, 1000.0, 1500.0, 2000.0])
    s = 2.4e-3 * q - 2e-7 * q**2
    steps = make_steps(q, [0, 1, 2, 3], [0.1, 1.1, 2.1, 3.1], recovered=[False] + [True] * 3,
                       pumping_level=10.0 + s)
    res = steptest.analyse_step_test(steps, 10.0)
    assert res.jacob.well_loss < 0
    assert res.per_step["efficiency_measured"].isna().all()
    assert "linear share withheld" in "\n".join(res.summary_lines("US"))
    # a positive C with one step below the line: only that step's share is withheld
    s = 2.4e-3 * q + 2e-8 * q**2
    s[1] -= 0.3
    steps = make_steps(q, [0, 1, 2, 3], [0.1, 1.1, 2.1, 3.1], recovered=[False] + [True] * 3,
                       pumping_level=10.0 + s)
    res = steptest.analyse_step_test(steps, 10.0)
    eff = res.per_step["efficiency_measured"].to_numpy()
    share = 100 * res.per_step["linear_drawdown"].to_numpy() / s
    np.testing.assert_array_equal(np.isnan(eff), share > 100)
    assert np.isnan(eff).any() and not np.isnan(eff).all()
    assert any("above 100 % withheld" in w for w in res.warnings)


def test_transmissivity_from_b_inverts_cooper_jacob():
    # Cooper and Jacob (1946) at the well face: B = ln(2.25 T t / (r_w^2 S)) / (4 pi T)
    tr, sto, rw, t = 500.0, 1e-4, 0.1, 0.1
    b = math.log(2.25 * tr * t / (rw**2 * sto)) / (4 * math.pi * tr)
    assert sd.transmissivity_from_linear_loss(b, t, rw, sto) == pytest.approx(tr, rel=1e-9)
    assert math.isnan(sd.transmissivity_from_linear_loss(b, t, 0.0, sto))
    q = np.array([500.0, 1000.0, 1500.0])
    steps = make_steps(q, [0, 1, 2], [0.1, 1.1, 2.1], recovered=[False, True, True],
                       pumping_level=10.0 + b * q + 2e-7 * q**2)
    res = steptest.analyse_step_test(steps, 10.0, well_radius=rw, storativity=sto)
    assert res.transmissivity_from_b == pytest.approx(tr, rel=1e-6)
    assert not res.storativity_assumed
    assert "apparent transmissivity from B" in "\n".join(res.summary_lines("SI"))
    # no reference time (chained steps read at their ends): no T from B
    chained = make_steps(q, [0, 0.1, 0.2], [0.1, 0.2, 0.3],
                         pumping_level=10.0 + b * q + 2e-7 * q**2)
    assert steptest.analyse_step_test(chained, 10.0, well_radius=rw).transmissivity_from_b \
        is None


def test_drawdown_json_states_method_elapsed_time_and_transmissivity():
    rates = np.array([500.0, 1000.0, 1500.0, 2000.0])
    steps, levels = _chained_record(rates)
    res = steptest.analyse_step_test(steps, 10.0, levels, well_radius=0.1)
    out = res.to_json_dict()
    assert out["method"]["method"] == "equal time"
    assert out["method"]["elapsed_time_min"] == pytest.approx(0.125 * 1440)
    assert "s/Q = B + C Q" in out["method"]["jacob_fit"]
    t = out["apparent_transmissivity"]
    assert t["from_log_time_slopes_m2_per_d"] == pytest.approx(600.0, rel=0.01)
    assert t["from_B_m2_per_d"] > 0 and t["storativity_for_B"] == "assumed"
    assert "apparent" in t["note"]
    assert {"drawdown_measured_m", "drawdown_equal_time_m",
            "efficiency_equal_time_percent"} <= set(out["steps"][0])


def test_drawdown_command_json_and_chart(tmp_path):
    import json

    from typer.testing import CliRunner

    from blendq.api import demo_path
    from blendq.cli import app

    png = tmp_path / "sq.png"
    r = CliRunner().invoke(app, ["drawdown", str(demo_path()), "--json", "--chart", str(png)])
    assert r.exit_code == 0, r.output
    out = json.loads(r.stdout)
    assert out["method"]["method"] == "end of step"
    assert out["method"]["elapsed_time_min"] is None  # chained steps read at their ends
    assert "apparent_transmissivity" in out and out["warnings"]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
