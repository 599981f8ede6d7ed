"""Tests of blendq.fit.estimation: the joint (variable projection) fit of zone hydraulics and zone
concentrations, on synthetic wells with known truth.

Sources:
- Golub, G.H. and Pereyra, V. (1973) SIAM J. Numer. Anal. 10(2): with the linear parameters
  projected out, the nonlinear least-squares problem has the same minimiser; noise-free data
  are then fitted exactly (zero residual at the true parameters).
- Izbicki, J.A. and co-workers (USGS; Izbicki, Christensen and Hanson 1999, USGS Fact Sheet
  196-99) depth-dependent sampling mass balance: with upward flows F_above, F_below and
  concentrations C_above, C_below just above and below an inflowing zone,
  c_zone = (F_above C_above - F_below C_below) / (F_above - F_below).
- Jacob (1947) step drawdown: with linear zone losses the pumping level is
  depth(Q) = d0 + Q / sum G + C Q^2 exactly (wellbore head h_w = (sum G h0 - Q) / sum G), so the
  specific-capacity start recovers sum G and C from noise-free levels.
- Censored (non-detect) results as inequalities (Helsel 2012, Statistics for Censored
  Environmental Data, 2nd ed.): the fitted blend at a
  non-detect step may not exceed the detection limit.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import synthetic_wells as sw

from blendq.errors import InputError, ModelError
from blendq.fit import estimation
from blendq.fit.estimation import (
    FitOptions,
    build_problem,
    fit,
    residuals,
    row_weights,
    starting_points,
)
from blendq.inputs.project import Settings
from blendq.well import mixing


def _check_recovery(result, c_rtol, h_rtol, c_atol=0.0):
    truth = sw.true_values(result.analytes)
    np.testing.assert_allclose(result.zone_values(), truth, rtol=c_rtol, atol=c_atol)
    np.testing.assert_allclose(result.model.conductance, sw.G, rtol=h_rtol)
    np.testing.assert_allclose(result.model.static_head, sw.H0, rtol=h_rtol)


@pytest.mark.parametrize("intake", [25.0, 65.0])
def test_noise_free_recovery_priors_at_truth(intake):
    # exact data and priors at the truth: every residual is zero at the truth (Golub and
    # Pereyra 1973: the projected problem keeps the minimiser), so the fit must return it
    result = fit(sw.project(intake))
    assert result.success
    _check_recovery(result, c_rtol=1e-6, h_rtol=1e-4)
    np.testing.assert_allclose(result.theta[-1], sw.WELL_LOSS, rtol=1e-4)  # Jacob's C
    assert result.cost < 1e-12


@pytest.mark.parametrize("intake", [25.0, 65.0])
def test_noise_free_recovery_without_priors(intake):
    # no zone properties at all (flat priors, start at G = 100 m^2/d and h0 = 0): the flow
    # logs, levels and samples alone fix every parameter
    result = fit(sw.without_priors(sw.project(intake)))
    assert result.success
    _check_recovery(result, c_rtol=1e-6, h_rtol=1e-4)
    np.testing.assert_allclose(result.theta[-1], sw.WELL_LOSS, rtol=1e-4)


def test_prior_pull_on_noise_free_data_shrinks_with_data_error():
    # Priors 1.5 sd away from the truth (G x 1.5, heads 0.5 m high). The fit is a maximum a
    # posteriori estimate, so exact data with a stated error still leave a pull towards the
    # prior of about (data sd / prior sd)^2: with the default errors (5 % logs and lab, 0.05 m
    # levels) it moves G by up to ~20 %; with errors 100 x smaller it must vanish (< 0.1 %).
    def run(scale):
        s = Settings(conductance_model="given", flowlog_relative_error=0.05 * scale,
                     flowlog_absolute_error=2.7 * scale, level_error=0.05 * scale,
                     default_relative_uncertainty=0.05 * scale)
        p = sw.project(settings=s)
        p.zones = [dataclasses.replace(z, conductance=z.conductance * 1.5,
                                       static_level=z.static_level + 0.5) for z in p.zones]
        r = fit(p)
        return (np.abs(r.model.conductance / sw.G - 1).max(),
                np.abs(r.zone_values() / sw.true_values(r.analytes) - 1).max())
    g_coarse, c_coarse = run(1.0)
    g_fine, c_fine = run(0.01)
    assert g_fine < 1e-3 and c_fine < 1e-3
    assert g_fine < g_coarse / 20 and c_fine < c_coarse / 20


def test_fixed_hydraulics_keeps_priors_and_recovers_concentrations():
    result = fit(sw.project(), FitOptions(fit_hydraulics=False))
    assert result.message == "hydraulics fixed at prior values"
    np.testing.assert_allclose(result.model.conductance, sw.G, rtol=1e-14)
    np.testing.assert_allclose(result.zone_values(), sw.true_values(result.analytes), rtol=1e-9)


def test_izbicki_mass_balance_from_depth_samples():
    # Izbicki and co-workers (USGS): zone value from depth samples and a flow log during the
    # same pumping; the log is run at the rate of step S5, samples just above and below Z2, Z3
    p = sw.project(flowlog_rates=[0.0, sw.RATES[-1]])
    logs = p.flowlogs[p.flowlogs["rate"] == sw.RATES[-1]].set_index("depth")["upward_flow"]
    s = p.samples[(p.samples["step"] == "S5") & p.samples["depth"].notna()]
    result = fit(p)
    for analyte in sw.CONC:
        conc_at = s[s["analyte"] == analyte].set_index("depth")["value"]
        for zone, (d_above, d_below) in {1: (45.0, 65.0), 2: (65.0, 85.0)}.items():
            f_a, f_b = logs[d_above], logs[d_below]
            c_a, c_b = conc_at[d_above], conc_at[d_below]
            c_zone = (f_a * c_a - f_b * c_b) / (f_a - f_b)
            np.testing.assert_allclose(c_zone, sw.CONC[analyte][zone], rtol=1e-10)
            j = result.analytes.index(analyte)
            np.testing.assert_allclose(result.zone_values()[zone, j], c_zone, rtol=1e-6)
        # bottom zone: nothing flows up from below it (F_below = 0), so c_zone = C_above
        np.testing.assert_allclose(conc_at[85.0], sw.CONC[analyte][3], rtol=1e-10)


def test_nondetect_fitted_blend_at_most_detection_limit():
    # noise-free data, then step S2's arsenic becomes a non-detect with a limit 30 % below the
    # true blend there: the censoring must bind, the blend sits on the limit, not above it
    p = sw.project()
    truth = fit(p, FitOptions(fit_hydraulics=False))
    blend_s2 = truth.predict([sw.RATES[1]])[0, truth.analytes.index("arsenic")]
    dl = 0.7 * blend_s2
    row = (p.samples["analyte"] == "arsenic") & (p.samples["step"] == "S2") & p.samples["depth"].isna()
    assert row.sum() == 1
    p.samples.loc[row, ["value", "nondetect", "detection_limit", "qualifier"]] = [np.nan, True, dl, "U"]
    for options in (FitOptions(fit_hydraulics=False), FitOptions()):
        result = fit(p, options)
        fitted = result.predict([sw.RATES[1]])[0, result.analytes.index("arsenic")]
        assert fitted <= dl * (1 + 1e-9)
        np.testing.assert_allclose(fitted, dl, rtol=1e-4)  # the constraint binds
        assert np.all(np.isfinite(result.zone_values()))


def test_nondetects_with_noise_never_exceed_their_limit():
    # a detection limit that the nitrate blend crosses: the low-rate steps become non-detects
    dl = 4.0
    for seed in range(3):
        p = sw.project(seed=seed, relative_error=0.05, absolute_error={"nitrate": 0.05},
                       nondetect_limits={"nitrate": dl})
        assert p.samples["nondetect"].any()
        result = fit(p, FitOptions(fit_hydraulics=False))
        d = result.problem.data["nitrate"]
        ac = row_weights(result.model, d.cens_rate, d.cens_depth)
        j = result.analytes.index("nitrate")
        assert np.all(ac @ result.zone_values()[:, j] <= d.cens_limit * (1 + 1e-9))


def test_thief_zone_at_lowest_step_weight_zero_and_others_recovered():
    # Z4 (lowest head) takes water from the well at the lowest step: weight zero there
    p = sw.project()
    result = fit(p)
    flows = result.model.state(sw.RATES).zone_flow
    assert flows[0, 3] < 0  # a thief at step S1
    a = row_weights(result.model, sw.RATES, np.full(len(sw.RATES), np.nan))
    assert a[0, 3] == 0.0
    np.testing.assert_allclose(a.sum(1), 1.0, rtol=1e-12)
    np.testing.assert_allclose(result.zone_values()[:3], sw.true_values(result.analytes)[:3],
                               rtol=1e-6)


def test_row_weights_shapes_and_depth_rows():
    p = sw.project()
    result = fit(p, FitOptions(fit_hydraulics=False))
    rates = np.array([500.0, 2000.0, 2000.0])
    depth = np.array([np.nan, 65.0, 15.0])  # discharge, between Z2 and Z3, above the intake
    a = row_weights(result.model, rates, depth)
    assert a.shape == (3, 4)
    np.testing.assert_allclose(a[0], result.model.weights(np.array([500.0]))[0], rtol=1e-12)
    # 65 m at 2000 m^3/d: the upward stream carries Z3 and Z4 in proportion to their inflow
    q = result.model.state(np.array([2000.0])).zone_flow[0]
    np.testing.assert_allclose(a[1], [0, 0, q[2], q[3]] / (q[2] + q[3]), rtol=1e-12)
    np.testing.assert_array_equal(a[2], 0.0)  # stagnant water above the intake says nothing
    # batched parameters give a leading batch dimension
    batch = result.model.with_changes(conductance=np.stack([sw.G, 2 * sw.G]),
                                      static_head=np.stack([sw.H0, sw.H0]))
    ab = row_weights(batch, rates, depth)
    assert ab.shape == (2, 3, 4)
    np.testing.assert_allclose(ab[0], a, rtol=1e-12)
    # doubling every conductance leaves the shares at a rate unchanged only if heads are equal;
    # here they are not, so the batch members differ
    assert not np.allclose(ab[1, 0], a[0])


def test_row_weights_of_several_sets_equal_one_call_per_set():
    # analytes sampled at the same steps share the model's state: the arrays must be the ones
    # a separate row_weights call gives, element for element
    p = sw.project()
    result = fit(p, FitOptions(fit_hydraulics=False))
    model = result.model.with_changes(conductance=np.stack([sw.G, 2 * sw.G, 0.5 * sw.G]),
                                      static_head=np.stack([sw.H0, sw.H0 - 1.0, sw.H0]))
    steps = np.array([500.0, 1000.0, 2000.0])
    sets = [(steps, np.full(3, np.nan)),
            (np.array([2000.0, 500.0, 1000.0, 2000.0]), np.array([np.nan, np.nan, 65.0, 15.0])),
            (np.zeros(0), np.zeros(0)),
            (np.array([1000.0]), np.array([np.nan])),
            (steps, np.full(3, np.nan))]
    got = estimation.row_weights_sets(model, sets)
    assert len(got) == len(sets)
    for (rate, depth), a in zip(sets, got, strict=True):
        np.testing.assert_array_equal(a, row_weights(model, rate, depth))
    assert got[2].shape == (3, 0, 4)


def test_residuals_zero_at_truth_and_layout():
    p = sw.project()
    problem = build_problem(p)
    theta = np.concatenate([np.log(sw.G), sw.H0, [sw.WELL_LOSS]])
    r = residuals(problem, theta)
    # priors (4 + 4) + log readings (2 x 5) + levels (5) + samples (2 analytes x 8)
    assert r.shape == (8 + 10 + 5 + 16,)
    np.testing.assert_allclose(r, 0.0, atol=1e-9)


def test_predict_is_weights_times_zone_values():
    result = fit(sw.project(), FitOptions(fit_hydraulics=False))
    rates = np.linspace(100.0, 3000.0, 7)
    pred = result.predict(rates)
    assert pred.shape == (7, 2)
    np.testing.assert_allclose(pred, result.model.weights(rates) @ result.zone_values(),
                               rtol=1e-12)
    # a blend lies between the smallest and the largest zone value (a flow-weighted mean)
    zv = result.zone_values()
    assert np.all(pred >= zv.min(0) - 1e-12) and np.all(pred <= zv.max(0) + 1e-12)


def test_no_quality_data_is_a_model_error():
    p = sw.project()
    p.samples = p.samples.iloc[0:0]
    with pytest.raises(ModelError, match="nothing to fit"):
        fit(p)


def test_sample_use_drops_and_reweights():
    p = sw.project(relative_error=0.05, seed=3)
    ids = p.samples["sample_id"].tolist()
    use = pd.DataFrame(dict(sample_id=ids[:2], used=[False, True], sigma_factor=[1.0, 4.0]))
    base = build_problem(p).data["nitrate"]
    problem = build_problem(p, sample_use=use).data["nitrate"]
    assert len(problem.value) == len(base.value) - 1
    assert ids[0] not in set(problem.sample_id)
    k = list(problem.sample_id).index(ids[1])
    np.testing.assert_allclose(problem.sigma[k], 4 * base.sigma[list(base.sample_id).index(ids[1])],
                               rtol=1e-12)


def test_mixing_weights_of_depth_samples_match_synthetic_values():
    # the rows the fit builds for depth samples reproduce the sampled values exactly
    p = sw.project()
    result = fit(p, FitOptions(fit_hydraulics=False))
    d = result.problem.data["arsenic"]
    a = row_weights(result.model, d.rate, d.depth)
    np.testing.assert_allclose(a @ sw.CONC["arsenic"], d.value, rtol=1e-12)
    flows = result.model.state(np.array([sw.RATES[-1]])).zone_flow[0]
    comp = mixing.wellbore_composition(flows, result.model.geometry, [45.0], sw.CONC["arsenic"])
    k = np.flatnonzero(d.depth == 45.0)[0]
    np.testing.assert_allclose(d.value[k], comp[0, 0], rtol=1e-12)


def test_synthetic_depth_sample_in_stagnant_water_is_refused():
    # above the intake nothing flows: a sample there would be a NaN "result"
    with pytest.raises(ModelError, match="15 m during step S5"):
        sw.project(depth_samples=[("S5", 15.0)])


def test_first_start_has_the_total_conductance_of_the_levels():
    # flat priors (no zone properties): the first start takes sum G and C from the levels
    # (Jacob 1947), exact for noise-free levels of linear zones
    problem = build_problem(sw.without_priors(sw.project()))
    starts = starting_points(problem)
    n = len(sw.G)
    np.testing.assert_allclose(np.exp(starts[0][:n]).sum(), sw.G.sum(), rtol=1e-6)
    np.testing.assert_allclose(starts[0][2 * n], sw.WELL_LOSS, rtol=1e-6)
    # with two flow logs the next start is the two-condition estimate (Paillet 1998), close to
    # the truth for exact logs (the wellbore heads come from the first start, which has the
    # true total conductance)
    np.testing.assert_allclose(np.exp(starts[1][:n]), sw.G, rtol=0.02)
    # the priors (G = 100 m^2/d each, h0 = 0) come last
    np.testing.assert_allclose(np.exp(starts[-1][:n]), 100.0, rtol=1e-12)


def test_fit_out_of_time_is_a_one_line_model_error():
    p = sw.project(settings=Settings(conductance_model="given", fit_time_budget=1e-9))
    with pytest.raises(ModelError, match="fit_time_budget = 1e-09 s") as err:
        fit(p)
    assert "\n" not in str(err.value)


def test_fit_that_does_not_converge_raises(monkeypatch):
    # every start stopped after two evaluations of the residuals: no result, a ModelError
    real = estimation.optimize.least_squares

    def stopped(*args, **kw):
        kw["max_nfev"] = 2
        return real(*args, **kw)

    monkeypatch.setattr(estimation.optimize, "least_squares", stopped)
    with pytest.raises(ModelError, match="did not converge from any starting point"):
        fit(sw.without_priors(sw.project(seed=1, relative_error=0.05)))


def test_operating_intake_changes_operation_not_the_fit():
    # the test intake (what the logs and samples were taken against) sets the fit; the
    # operating intake only the predictions for operation (docs/input-files.md, "Two intakes")
    from blendq.decide.sweep import sweep
    from blendq.fit.uncertainty import monte_carlo

    base = sw.project(25.0)
    moved = dataclasses.replace(
        base, well=dataclasses.replace(base.well, operating_intake_depth=105.0))
    same = dataclasses.replace(
        base, well=dataclasses.replace(base.well, operating_intake_depth=25.0))
    fits = [fit(p) for p in (base, moved, same)]
    for other in fits[1:]:
        np.testing.assert_array_equal(other.theta, fits[0].theta)
        np.testing.assert_array_equal(other.zone_values(), fits[0].zone_values())
        assert other.model.geometry.intake_depth == 25.0
    draws = monte_carlo(fits[0], 20, seed=3)
    rates = np.array([500.0, 1500.0, 3000.0])
    p0, p1, p2 = (sweep(f, draws, rates) for f in fits)
    # the operating intake equal to the test intake changes nothing
    np.testing.assert_array_equal(p2.concentration, p0.concentration)
    # a deeper operating intake: the shares of the model with that intake, same zone flows
    np.testing.assert_array_equal(p1.zone_flow, p0.zone_flow)
    deep = sweep(fits[0], draws, rates,
                 changes=lambda m: m.with_changes(geometry=dataclasses.replace(
                     m.geometry, intake_depth=105.0)))
    np.testing.assert_array_equal(p1.shares, deep.shares)
    assert np.abs(p1.shares - p0.shares).max() > 0.01


def test_flow_log_stations_inside_screens_fit_the_truth():
    # stations inside the open intervals, their flows written out by hand from the true zone
    # flows with the analytic rise through a uniform screen (intake above every zone, flow up):
    # F(z) = (inflow of the zones below) + q_i (bottom_i - z) / b_i. With noise-free data the
    # joint fit must still return the truth (Golub and Pereyra 1973), with no pull from them.
    from blendq.well.hydraulics import solve_wellbore_head

    p = sw.without_priors(sw.project(25.0))
    logs = p.flowlogs
    extra = []
    for (_log, rate), rows in logs.groupby(["log", "rate"]):
        q = solve_wellbore_head([float(rate)], sw.G, sw.H0).zone_flow[0]
        for i, z in [(0, 32.0), (0, 38.5), (1, 55.0), (3, 91.0)]:
            below = q[i + 1:].sum() + q[i] * (sw.BOT[i] - z) / (sw.BOT[i] - sw.TOP[i])
            row = rows.iloc[0].copy()
            row["depth"], row["upward_flow"] = z, below
            extra.append(row)
    p.flowlogs = pd.concat([logs, pd.DataFrame(extra)], ignore_index=True)
    result = fit(p)
    _check_recovery(result, c_rtol=1e-6, h_rtol=1e-4)
    assert result.cost < 1e-10


def _transient_project(durations=True):
    # the synthetic well made transient: each zone gets a T and S and the skin that makes its
    # Cooper-Jacob conductance at the test time equal to the true G (so the priors sit at the
    # truth); its step levels are replaced by the superposed ones of blendq.well.transient
    # (checked against ttim in tests/well/test_transient.py)
    from blendq.well.model import elapsed_test_time, transient_slope
    from blendq.well.transient import step_levels, step_schedule

    p = sw.project(25.0, settings=Settings(conductance_model="transient"))
    t_ref = elapsed_test_time(p)
    t_zone, s_zone = 1.4 * sw.G, 1e-4  # skins near zero
    big_l = np.log(2.25 * t_zone * t_ref / (p.well.well_radius**2 * s_zone))
    skin = 0.5 * (4 * np.pi * t_zone / sw.G - big_l)
    p.zones = [dataclasses.replace(z, conductance=None, transmissivity=float(t), storativity=s_zone,
                                   skin=float(s)) for z, t, s in zip(p.zones, t_zone, skin, strict=True)]
    hw, _ = step_levels(sw.G, sw.H0, np.zeros(4), transient_slope(p), step_schedule(p, t_ref))
    steps = p.steps.copy()
    rates = steps["rate"].to_numpy(float)
    steps["pumping_level"] = -(hw - sw.WELL_LOSS * rates**2)
    if not durations:
        steps = steps.drop(columns=[c for c in ("start", "end") if c in steps])
        steps["duration"] = np.nan
    p.steps = steps
    return p


def test_transient_levels_superposed_in_time_are_fitted_exactly():
    # noise-free levels superposed in time (Cooper and Jacob 1946) with the true well loss:
    # the joint fit returns the truth, C included (Golub and Pereyra 1973); the former steady
    # reading of the same levels (given conductances) puts the growth of the cone into C
    p = _transient_project()
    result = fit(p)
    assert result.problem.schedule is not None
    _check_recovery(result, c_rtol=1e-5, h_rtol=1e-4)
    np.testing.assert_allclose(result.theta[-1], sw.WELL_LOSS, rtol=1e-3)
    # not a trivial check: the levels differ from the steady reading at the truth by more
    # than their stated error
    steady = result.model.with_changes(conductance=sw.G, static_head=sw.H0,
                                       well_loss=sw.WELL_LOSS)
    rates = p.steps["rate"].to_numpy(float)
    gap = np.abs(steady.pumping_level_depth(rates) - p.steps["pumping_level"].to_numpy(float))
    assert gap.max() > 3 * p.settings.level_error


def test_transient_zones_need_step_durations():
    with pytest.raises(InputError) as err:
        build_problem(_transient_project(durations=False))
    assert err.value.field == "duration" and err.value.row is not None


def test_draws_see_the_levels_in_time():
    # the posterior draws' batched residuals use the fit's level model: at the fitted theta
    # they equal the fit's own (scalar) residuals
    from blendq.fit.estimation import level_depths

    p = _transient_project()
    result = fit(p)
    problem = result.problem
    batch = problem.model(np.stack([result.theta, result.theta]))
    one = level_depths(problem, result.model)
    both = level_depths(problem, batch)
    assert both.shape == (2, len(one))
    np.testing.assert_allclose(both[1], one, rtol=1e-12)
    from blendq.fit.uncertainty import _hydraulic_residuals_batch

    r = _hydraulic_residuals_batch(problem, np.stack([result.theta]), problem.model(
        np.stack([result.theta])))
    np.testing.assert_allclose(np.abs(r).max(), 0.0, atol=1e-4)


def _lossy_well(flow_logs: bool):
    """Three zones, the middle one with a nonlinear entrance loss C = 1e-5 d^2/m^5 (MNW2 form,
    P = 2) that the project does not state; flow logs at four rates when asked."""
    from blendq.inputs.project import Settings
    from blendq.well.synthetic import synthetic_project

    s = Settings(conductance_model="given", flowlog_relative_error=0.02, fit_entrance_losses=True)
    return synthetic_project(
        [150.0, 250.0, 220.0], [-8.0, -9.0, -10.5], [20.0, 40.0, 60.0], [30.0, 50.0, 70.0],
        {"nitrate": np.array([12.0, 3.0, 6.0]), "arsenic": np.array([0.002, 0.02, 0.005])},
        [400.0, 900.0, 1400.0, 1900.0, 2400.0], 15.0, relative_error=0.03, well_loss=1e-6,
        flowlog_rates=[0.0, 800.0, 1600.0, 2400.0] if flow_logs else None,
        flowlog_depths=[18.0, 32.0, 52.0, 72.0] if flow_logs else None, level_noise=0.02,
        flowlog_noise=0.01, seed=3, entrance_loss=[0.0, 1e-5, 0.0], settings=s)


def test_entrance_loss_fitted_where_flow_logs_resolve_it():
    # flow logs at several pumped rates see the middle zone's share fall behind as its
    # entrance loss C q^2 grows (Konikow and others 2009, MNW2): the loss is resolved, and
    # the zones without one are reported as not resolved, without a number
    result = fit(_lossy_well(True))
    table = result.entrance_losses.set_index("zone")
    assert list(table["verdict"]) == ["not resolved", "resolved", "not resolved"]
    assert table.loc["Z2", "coefficient"] == pytest.approx(1e-5, rel=0.3)
    assert table.loc["Z2", "loss_at_reference_sd"] < 0.5 * table.loc["Z2", "loss_at_reference"]
    assert table.loc[["Z1", "Z3"], "coefficient"].isna().all()
    # the model holds the resolved loss and the zones' given value (none) elsewhere
    np.testing.assert_allclose(result.model.nonlinear_loss, [0.0, table.loc["Z2", "coefficient"],
                                                             0.0], rtol=1e-12)


def test_entrance_loss_not_resolved_from_levels_and_discharge_samples_alone():
    # without flow logs the middle zone's loss trades off against the well loss and the
    # conductances: reported as not resolved, no number, and the model carries no loss
    result = fit(_lossy_well(False))
    assert set(result.entrance_losses["verdict"]) == {"not resolved"}
    assert result.entrance_losses["coefficient"].isna().all()
    np.testing.assert_array_equal(result.model.nonlinear_loss, 0.0)
    assert len(result.theta) == 7  # ln G, h0 of three zones and the well loss


def test_running_out_of_time_after_a_first_start_is_an_error_not_a_result(monkeypatch):
    # the budget must never change a result (same input and seed, same bytes, whatever the
    # load): a start cut off by the clock ends the fit with a ModelError even when an earlier
    # start converged (here: the first start is made to miss the data so a second one runs)
    problem = build_problem(sw.without_priors(sw.project()))
    assert len(starting_points(problem)) >= 2
    calls = {"n": 0}
    clock = {"t": 0.0}

    def fake_clock():
        return clock["t"]

    real = estimation.optimize.least_squares

    def first_then_slow(fun, x0, **kw):
        calls["n"] += 1
        sol = real(fun, x0, **kw)
        if calls["n"] == 1:
            sol.cost = 1e12  # seen as a local minimum: the next start is tried
            clock["t"] = 1e9  # and the clock has run past the budget
        return sol

    monkeypatch.setattr(estimation.time, "process_time", fake_clock)
    monkeypatch.setattr(estimation.optimize, "least_squares", first_then_slow)
    with pytest.raises(ModelError, match="fit_time_budget"):
        estimation._fit_hydraulics(problem)


def _many_zone_well(n_zones: int = 12):
    from blendq.well.synthetic import synthetic_project

    k = np.arange(n_zones)
    top = 30.0 + 5.0 * k
    bottom = top + 4.0
    conc = {"nitrate": 2.0 + 10.0 * np.sin(0.3 * k) ** 2,
            "arsenic": 0.002 + 0.02 * np.cos(0.4 * k) ** 2}
    return synthetic_project(60.0 + 40.0 * np.sin(0.7 * k) ** 2, -10.0 - 3.0 * np.cos(0.5 * k),
                             top, bottom, conc, np.linspace(300.0, 3000.0, 6), 25.0,
                             relative_error=0.05, well_loss=2e-7, flowlog_rates=[0.0, 1500.0],
                             flowlog_depths=[27.0, *(top[1:] - 0.5), float(bottom[-1]) + 2.0],
                             level_noise=0.05, seed=5)


@pytest.mark.parametrize("which", [0, 1])
def test_batched_jacobian_equals_column_by_column_differences(which):
    # the batched Jacobian of the hydraulic fit against the plain forward difference of
    # residuals(), one parameter at a time (the definition of a forward difference)
    problem = estimation.build_problem(_many_zone_well())
    theta = estimation.starting_points(problem)[which]
    steps = estimation.difference_steps(theta)
    batched = estimation.jacobian_batch(problem, theta, steps)
    r0 = estimation.residuals(problem, theta)
    one = np.empty_like(batched)
    for k in range(len(theta)):
        t = theta.copy()
        t[k] += steps[k]
        one[:, k] = (estimation.residuals(problem, t) - r0) / steps[k]
    assert batched.shape == (len(r0), len(theta))
    np.testing.assert_allclose(batched, one, rtol=1e-8, atol=1e-8 * np.abs(one).max())
