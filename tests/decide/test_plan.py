"""Tests of the test planner: information, window-end spread, resolution, search, field sheet."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import synthetic_wells as sw
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from blendq.chemistry.limits import Limit
from blendq.decide import plan
from blendq.fit.diagnostics import null_space_zones, zone_table
from blendq.fit.estimation import fit
from blendq.fit.uncertainty import monte_carlo
from blendq.inputs.project import Settings
from blendq.well.model import prior_hydraulics

#: invented limits that give the synthetic four-zone well a window bounded by both analytes
LIMITS = [Limit("nitrate", 9.0, "mg/L", "N", "test", "user limit", "invented"),
          Limit("arsenic", 0.012, "mg/L", "", "test", "user limit", "invented")]
GAPS = (45.0, 65.0, 85.0)


def basis(intake: float = 25.0, value_sd: float | None = 20.0) -> plan.Basis:
    """The synthetic four-zone well (tests/synthetic_wells.py) at its truth, as a plan basis."""
    p = sw.project(intake=intake, settings=Settings(conductance_model="given", margin=1.0,
                                                    temporal_cv={"default": 0.0}))
    p.limits = list(LIMITS)
    prior = prior_hydraulics(p)
    theta = np.concatenate([np.log(sw.G), sw.H0, [sw.WELL_LOSS]])
    values = np.column_stack([sw.CONC["nitrate"], sw.CONC["arsenic"]])
    sd = np.full(values.shape, np.inf) if value_sd is None \
        else np.column_stack([np.full(4, value_sd), np.full(4, value_sd * 1e-3)])
    return plan.Basis(p, ["nitrate", "arsenic"], theta, values,
                      np.concatenate([prior.log_conductance_sd, prior.static_head_sd, [np.inf]]),
                      sd, 0.05, log_depths=np.array(sw.LOG_DEPTHS))


BASIS = basis()
ENDS = plan.window_ends(BASIS, 2400.0)
COSTS = plan.Costs()


def design(rates=(200.0, 500.0, 900.0, 1400.0, 2000.0), logs=(), depth=()):
    return plan.Design(tuple(rates), (4.0,) * len(rates), tuple(logs), tuple(depth))


# -- information and spread ---------------------------------------------------------------------

def test_linear_sd_is_the_weighted_least_squares_covariance():
    """For a linear model y = X b + e with Var(e) = diag(s^2), Cov(b) = (X^T W X)^-1 with
    W = diag(1/s^2) (Gauss-Markov; Bard 1974, eq. 7-5-3), checked against numpy's lstsq on
    exactly whitened data."""
    rng = np.random.default_rng(3)
    x = rng.normal(size=(12, 4))
    s = rng.uniform(0.5, 2.0, 12)
    xw = x / s[:, None]
    g = rng.normal(size=(3, 4))
    cov = np.linalg.inv(xw.T @ xw)
    want = np.sqrt(np.einsum("ki,ij,kj->k", g, cov, g))
    np.testing.assert_allclose(plan.linear_sd(xw.T @ xw, g), want, rtol=1e-10)
    # the same from the residual scatter of least squares on 4000 noisy replicates
    b_true = np.array([1.0, -2.0, 0.5, 3.0])
    y = (x @ b_true)[None, :] + s[None, :] * rng.standard_normal((4000, 12))
    est = np.linalg.lstsq(xw, (y / s[None, :]).T, rcond=None)[0].T
    np.testing.assert_allclose((est @ g.T).std(0), want, rtol=0.05)


def test_linear_sd_is_infinite_along_a_direction_nothing_informs():
    info = np.diag([4.0, 1.0, 0.0])
    np.testing.assert_allclose(plan.linear_sd(info, [[1.0, 0.0, 0.0]]), [0.5], rtol=1e-12)
    assert np.isinf(plan.linear_sd(info, [[0.0, 0.0, 1.0]])[0])
    # a fixed parameter carries no variance
    np.testing.assert_allclose(plan.linear_sd(info, [[1.0, 0.0, 1.0]],
                                              np.array([True, True, False])), [0.5], rtol=1e-12)


def test_level_end_is_the_root_of_the_step_drawdown_equation():
    """With linear zones the pumping level is s(Q) = -h_mean + Q / sum G + C Q^2 (common
    wellbore head plus Jacob's well loss; Jacob 1947), so the rate where it reaches the intake
    less the submergence is the positive root of C Q^2 + Q / sum G - (d + h_mean) = 0, and
    dQ/dC = -Q^2 / (2 C Q + 1 / sum G) (implicit differentiation)."""
    b = basis()
    b.project.well = dataclasses.replace(b.project.well, pump_intake_depth=20.0)
    b.project.limits = []
    ends = plan.window_ends(b, 4000.0, points=401)
    high = [e for e in ends if e.side == "high"][0]
    g_sum = sw.G.sum()
    h_mean = (sw.G * sw.H0).sum() / g_sum
    a, bb, c = sw.WELL_LOSS, 1.0 / g_sum, -(20.0 + h_mean)
    root = (-bb + np.sqrt(bb * bb - 4 * a * c)) / (2 * a)
    assert high.reason.startswith("pumping level")
    np.testing.assert_allclose(high.rate, root, rtol=1e-8)
    np.testing.assert_allclose(high.gradient[8], -root**2 / (2 * a * root + bb), rtol=1e-4)


def test_end_gradient_predicts_the_moved_end():
    """The implicit-function gradient against recomputing the end at perturbed parameters."""
    rng = np.random.default_rng(5)
    step = rng.normal(size=BASIS.n_params) * 1e-3
    step[8] = 0.0
    moved = dataclasses.replace(BASIS, theta=BASIS.theta + step[:9],
                                zone_values=BASIS.zone_values
                                + step[9:].reshape(2, 4).T * np.array([1.0, 1e-3]))
    new = plan.window_ends(moved, 2400.0)
    for e0, e1 in zip(ENDS, new, strict=True):
        dphi = np.concatenate([step[:9], (step[9:].reshape(2, 4).T * np.array([1.0, 1e-3])).T
                               .ravel()])
        np.testing.assert_allclose(e1.rate - e0.rate, e0.gradient @ dphi, rtol=0.02, atol=1e-3)


@pytest.mark.slow
def test_end_spread_agrees_with_fitted_replicates_of_the_package_generator():
    """Replicates of the planned test from blendq.well.synthetic, priors drawn off the truth by
    their stated spread as the plan assumes, fitted by blendq: the sample sd of the fitted
    window's ends within 25 % of the prediction (20 replicates; full figures with the
    independent calibration wells in benchmarks/bench_plan.py)."""
    from blendq.well.flowlog import log_error
    from blendq.well.model import PRIOR_HEAD_SD_MEASURED
    from blendq.well.synthetic import synthetic_project

    b = basis(value_sd=None)
    d = design(logs=(0.0, 1000.0), depth=((4, 45.0), (4, 85.0)))
    predicted = plan.evaluate(b, d, ENDS, COSTS).end_sd
    s = b.project.settings
    prior = prior_hydraulics(b.project)
    ends = []
    for seed in range(20):
        rng = np.random.default_rng(1000 + seed)
        p = synthetic_project(sw.G, sw.H0, sw.TOP, sw.BOT, sw.CONC, d.rates, 25.0,
                              relative_error=0.05, well_loss=sw.WELL_LOSS,
                              flowlog_rates=d.log_rates, flowlog_depths=sw.LOG_DEPTHS,
                              level_noise=s.level_error, seed=seed, settings=s,
                              depth_samples=[(f"S{k + 1}", x) for k, x in d.depth_samples])
        f = p.flowlogs["upward_flow"].to_numpy(float)
        p.flowlogs["upward_flow"] = f + log_error(f, s.flowlog_relative_error,
                                                  s.flowlog_absolute_error) \
            * rng.standard_normal(len(f))
        p.well = dataclasses.replace(p.well, static_level=float(
            b.model(b.theta).pumping_level_depth(np.array([0.0]))[0]
            + s.level_error * rng.standard_normal()))
        p.zones = [dataclasses.replace(
            z, conductance=z.conductance * np.exp(prior.log_conductance_sd[i]
                                                  * rng.standard_normal()),
            static_level=z.static_level + PRIOR_HEAD_SD_MEASURED * rng.standard_normal())
            for i, z in enumerate(p.zones)]
        p.limits = list(LIMITS)
        ends.append([e.rate for e in plan.window_ends(plan.basis_from_fit(fit(p)), 2400.0)])
    spread = np.std(ends, axis=0, ddof=1)
    np.testing.assert_allclose(spread, [predicted["low"], predicted["high"]], rtol=0.25)


# -- resolution ---------------------------------------------------------------------------------

def test_discharge_samples_alone_leave_every_zone_unresolved():
    """Intake above all zones, every zone flowing in (above 700 m3/d, where Z4 stops taking
    water: sum G_k (h0_k - h0_4)): the discharge weights are affine in 1/Q, rank 2 for four
    zones (docs/methods.md): no zone is resolved. A step below 700 m3/d adds a third pattern."""
    ev = plan.evaluate(BASIS, design(rates=(900.0, 1400.0, 2000.0)), ENDS, COSTS)
    assert ev.unresolved == {"nitrate": ["Z1", "Z2", "Z3", "Z4"],
                             "arsenic": ["Z1", "Z2", "Z3", "Z4"]}
    ev = plan.evaluate(BASIS, design(rates=(500.0, 900.0, 1400.0, 2000.0)), ENDS, COSTS)
    assert len(ev.unresolved["nitrate"]) < 4
    ev = plan.evaluate(BASIS, design(depth=[(4, x) for x in GAPS]), ENDS, COSTS)
    assert ev.unresolved == {"nitrate": [], "arsenic": []}


def test_null_space_zones_is_the_diagnostics_verdict():
    """The planner's resolution rule gives the verdicts zone_table gives after a fit."""
    p = sw.project(seed=2, depth=False, logs=True)
    f = fit(p)
    table = zone_table(f, monte_carlo(f, n_draws=50, seed=1))
    for a in f.analytes:
        d = f.problem.data[a]
        from blendq.fit.estimation import solve_concentrations

        _, wa, _ = solve_concentrations(f.problem, f.model, a)
        got = [f.zone_names[i] for i in null_space_zones(wa / d.sigma[:, None])]
        want = list(table[(table.analyte == a) & (table.verdict == "not resolved")].zone)
        assert got == want


# -- invariants ---------------------------------------------------------------------------------

_RATES = (300.0, 500.0, 700.0, 900.0, 1200.0, 1400.0, 1700.0, 2000.0)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rates=st.lists(st.sampled_from(_RATES), min_size=2, max_size=5, unique=True),
       logs=st.sets(st.sampled_from((0.0, 1000.0, 2000.0)), max_size=2),
       depth=st.lists(st.tuples(st.integers(0, 4), st.sampled_from(GAPS)), max_size=2,
                      unique=True),
       extra=st.one_of(st.tuples(st.just("depth"), st.integers(0, 4), st.sampled_from(GAPS)),
                       st.tuples(st.just("low"), st.floats(50.0, 290.0), st.just(0.0))),
       value_sd=st.sampled_from([None, 20.0]))
def test_more_data_never_predicts_more_uncertainty(rates, logs, depth, extra, value_sd):
    """Adding a depth sample, or a step below every other, adds information (J^T J is
    positive semi-definite), so no end of the window may get a larger expected spread."""
    b = BASIS if value_sd is not None else basis(value_sd=None)
    rates = sorted(rates)
    depth = [(min(k, len(rates) - 1), x) for k, x in depth]
    d0 = design(rates=rates, logs=sorted(logs), depth=dict.fromkeys(depth))
    if extra[0] == "depth":
        k = min(extra[1], len(rates) - 1)
        d1 = dataclasses.replace(d0, depth_samples=(*d0.depth_samples, (k, extra[2])))
    else:
        d1 = d0.with_step(extra[1], 4.0)
    e0 = plan.evaluate(b, d0, ENDS, COSTS)
    e1 = plan.evaluate(b, d1, ENDS, COSTS)
    for side in ("low", "high"):
        before, after = e0.end_sd[side], e1.end_sd[side]
        assert after <= before * (1 + 1e-6) + 1e-9 or np.isinf(before)
    assert e1.cost > e0.cost


def test_with_step_keeps_depth_samples_on_their_step():
    d = design(rates=(500.0, 900.0), depth=[(1, 45.0)]).with_step(200.0, 3.0)
    assert d.rates == (200.0, 500.0, 900.0)
    assert d.step_hours == (3.0, 4.0, 4.0)
    assert d.depth_samples == ((2, 45.0),)


def test_design_of_a_finished_test():
    p = sw.project(seed=0)
    d = plan.design_of(p)
    assert d.rates == tuple(sw.RATES)
    assert d.log_rates == (0.0, 1000.0)
    assert d.depth_samples == ((4, 45.0), (4, 65.0), (4, 85.0))


@pytest.mark.parametrize("field", ["lab_sample", "flowlog_run", "rig_hour"])
def test_cost_counts_each_item(field):
    d = design(logs=(0.0,), depth=[(4, 45.0)])
    base = COSTS.of(d)
    more = dataclasses.replace(COSTS, **{field: getattr(COSTS, field) + 1.0}).of(d)
    count = {"lab_sample": 6, "flowlog_run": 1, "rig_hour": 20 + 2.0 + 0.5}[field]
    np.testing.assert_allclose(more - base, count, rtol=1e-12)


# -- candidates and the search ------------------------------------------------------------------

def test_candidates_number_over_two_hundred_and_stay_in_the_pump_range():
    cands = plan.candidate_designs(BASIS, 2400.0)
    assert len(cands) >= 200
    top = plan.top_step_rate(BASIS, 2400.0)
    for d in cands:
        assert max(d.rates) <= top * (1 + 1e-12)
        assert all(h >= plan.MIN_STEP_HOURS for h in d.step_hours)
    # a low step below the thief zone's reversal (700 m3/d for Z4) is among them
    np.testing.assert_allclose(plan.reversal_rates(BASIS)[3], 700.0, rtol=1e-9)
    assert any(min(d.rates) < 700.0 and len(d.rates) >= 3 for d in cands)


@pytest.mark.parametrize("budget", [6000.0, 9000.0])
def test_greedy_search_keeps_the_budget_and_never_loses_ground(budget):
    p = plan.choose_design(BASIS, COSTS, budget, rate_max=2400.0, candidates=[])
    assert p.evaluation.cost <= budget
    spread = [_rss(v.without) for v in p.steps_taken] + [p.evaluation.objective]
    assert all(b <= a * (1 + 1e-9) for a, b in zip(spread, spread[1:], strict=False))
    for v in p.values:  # an item of the chosen design never widens the window's ends
        assert v.with_["low"] <= v.without["low"] * (1 + 1e-6)
        assert v.with_["high"] <= v.without["high"] * (1 + 1e-6)


def test_a_bigger_budget_buys_no_wider_spread():
    small = plan.choose_design(BASIS, COSTS, 6000.0, rate_max=2400.0)
    large = plan.choose_design(BASIS, COSTS, 12000.0, rate_max=2400.0)
    assert large.evaluation.objective <= small.evaluation.objective


def test_budget_below_three_steps_is_refused():
    from blendq.errors import ModelError

    with pytest.raises(ModelError, match="budget"):
        plan.choose_design(BASIS, COSTS, 500.0, rate_max=2400.0)


def _rss(sd):
    return float(np.sqrt(sum(v * v for v in sd.values())))


def test_item_sentence():
    v = plan.ItemValue(plan.Item("depth sample", 600 * 5.45099296896, 164 * 0.3048), 350.0,
                       {"low": 0.0, "high": 60 * 5.45099296896}, {"low": 0.0, "high": 15 * 5.45099296896})
    assert v.sentence("US") == ("a depth sample at 164 ft while pumping 600 gpm narrows the "
                                "window's high end from +-60 gpm to +-15 gpm")


def test_what_next_after_a_finished_test_ranks_by_gain():
    p = sw.project(seed=3, depth=False, logs=False,
                   settings=Settings(conductance_model="given", margin=1.0,
                                     temporal_cv={"default": 0.0}))
    p.limits = list(LIMITS)
    b = plan.basis_from_fit(fit(p))
    items = plan.what_next(b, COSTS, rate_max=2400.0)
    gains = [v.gain for v in items]
    assert gains == sorted(gains, reverse=True)
    assert {v.item.kind for v in items} == {"step", "flow log", "depth sample"}
    assert gains[0] > 0
    # the finished test's own spreads are the "without" of every item
    now = plan.evaluate(b, plan.Design((), ()), plan.window_ends(b, 2400.0), COSTS)
    assert items[0].without == now.end_sd


def test_basis_from_priors_of_the_example():
    from pathlib import Path

    from blendq.inputs.plan_file import load_for_planning

    project, inputs, finished = load_for_planning(
        Path(plan.__file__).resolve().parents[1] / "data" / "plan")
    b = plan.basis_from_priors(project, inputs)
    # the middle of each range, a quarter of its width as sd
    np.testing.assert_allclose(b.zone_values[0, 0], 11.0, rtol=1e-12)
    np.testing.assert_allclose(b.value_sd[0, 0], 1.5, rtol=1e-12)
    np.testing.assert_allclose(b.theta_sd[0], np.log(4000 / 1500) / 4, rtol=1e-12)
    assert b.min_step_hours == pytest.approx(2.0)
    r = plan.plan_test(project, inputs, finished)
    assert r.plan.evaluation.cost <= inputs.budget


def test_casing_purge_volume_is_three_casing_volumes():
    """V = 3 pi r^2 L (cylinder volume) for the water column from the static level down."""
    p = sw.project()
    p.well = dataclasses.replace(p.well, static_level=12.0)
    np.testing.assert_allclose(plan.casing_purge_volume(p), 3 * np.pi * 0.15**2 * (100.0 - 12.0),
                               rtol=1e-12)


def test_purge_adds_the_water_thief_zones_store_while_idle():
    """Casing volumes plus the thief zones' stored volume, as the review's purge check.

    At rest the zone flows sum to zero, so the well head is the conductance-weighted mean
    head h_w = sum G h0 / sum G and each zone flows q0 = G (h0 - h_w) into the well (Darcy
    flow through a linear conductance; the four-zone well of tests/synthetic_wells.py): a thief
    zone (q0 < 0) stores -q0 t_idle.
    """
    b = basis()
    hw = np.sum(sw.G * sw.H0) / np.sum(sw.G)
    q0 = sw.G * (sw.H0 - hw)
    casing = plan.casing_purge_volume(b.project)
    # no [test] idle_time_before: the named default (an overnight rest)
    assert b.project.settings.idle_time_before_test is None
    stored = np.sum(np.clip(-q0, 0, None)) * plan.DEFAULT_IDLE_HOURS / 24.0
    assert stored > 0
    np.testing.assert_allclose(plan.purge_volume(b), casing + stored, rtol=1e-9)
    p = plan.planned_purge(b)
    assert not p.idle_given and p.stored.thieves == ["Z2", "Z4"]  # h0 below h_w = -11.7 m
    # the project's idle time
    b6 = dataclasses.replace(b, project=dataclasses.replace(
        b.project, settings=dataclasses.replace(b.project.settings, idle_time_before_test=0.25)))
    np.testing.assert_allclose(plan.purge_volume(b6),
                               casing + np.sum(np.clip(-q0, 0, None)) * 0.25, rtol=1e-9)
    assert plan.planned_purge(b6).idle_given
    assert "6 h idle" in plan.planned_purge(b6).sentence("SI")
    # a step lasts at least as long as pumping the purge at its rate
    q = 300.0
    assert plan.step_hours(b6, q) == pytest.approx(
        max(b6.min_step_hours, plan.purge_volume(b6) / q * 24.0), rel=1e-12)
