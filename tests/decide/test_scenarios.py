"""Tests of the what-if scenarios (blendq.decide.scenarios) on the invented demo well TH-2."""

from __future__ import annotations

import copy
import dataclasses
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
import synthetic_wells as sw
from hypothesis import given
from hypothesis import strategies as st
from scipy.optimize import brentq

import blendq
from blendq.chemistry.limits import limit_set
from blendq.decide import scenarios as sc
from blendq.decide.analysis import analyse, richest_source, window_options
from blendq.errors import InputError, ModelError
from blendq.inputs.loader import load_project
from blendq.units import parse_quantity

DEMO = Path(blendq.__file__).parent / "data" / "demo"


@pytest.fixture(scope="module")
def analysis():
    # no temporal variability of the water (the compliance statistics still carry the lab's
    # error): the demo's base window is open, so scenarios can narrow or widen it; at the
    # default temporal CV it is empty (tests/decide/test_analysis.py)
    demo = load_project(DEMO)
    return analyse(replace(demo, settings=replace(demo.settings, temporal_cv={"default": 0.0})),
                   draws=200)


@pytest.fixture(scope="module")
def comparison(analysis):
    return sc.compare(analysis)


def _scenario(analysis, raw):
    return sc.parse_scenario({"name": "test", **raw}, 1, analysis.project)


def _with_settings(analysis, **kw):
    """The same analysis with other settings (the draws and the fit unchanged)."""
    project = dataclasses.replace(analysis.project,
                                  settings=dataclasses.replace(analysis.project.settings, **kw))
    return dataclasses.replace(analysis, project=project)


def _zone(analysis, name):
    return analysis.project.zone_names.index(name)


# ------------------------------------------------------------------- common random numbers
def test_base_case_as_scenario_reproduces_base_window_exactly(analysis, comparison):
    base = comparison.results[0]
    assert base.scenario.name == sc.BASE_NAME
    np.testing.assert_array_equal(base.prediction.concentration, analysis.prediction.concentration)
    np.testing.assert_array_equal(base.window.ok, analysis.window.ok)
    assert base.window.intervals == analysis.window.intervals
    assert base.window.recommended == analysis.window.recommended


def test_no_change_scenario_equals_base(analysis):
    res = sc.evaluate(analysis, _scenario(analysis, {}))
    assert res.window.intervals == analysis.window.intervals
    np.testing.assert_array_equal(res.prediction.pumping_level, analysis.prediction.pumping_level)


# ------------------------------------------------------------------------------- sealing
def test_sealing_richest_zone_lowers_that_analyte_and_the_yield(analysis):
    analysis = _with_settings(analysis, seal_leakage=0.0)  # a perfect seal
    j = analysis.prediction.analytes.index("nitrate")
    richest = analysis.project.zone_names[int(np.argmax(analysis.fit.zone_values()[:, j]))]
    assert richest == "Upper sand"
    base = sc.evaluate(analysis, _scenario(analysis, {}))
    sealed = sc.evaluate(analysis, _scenario(analysis, {"seal": [richest]}))
    pos = analysis.prediction.rates > 0
    med_base = np.median(base.prediction.concentration[:, pos, j], axis=0)
    med_seal = np.median(sealed.prediction.concentration[:, pos, j], axis=0)
    assert np.all(med_seal < med_base)
    # the sealed zone gives nothing, so at a fixed pumping level the well yields less
    assert sealed.yield_rate < base.yield_rate
    assert np.all(sealed.prediction.pumping_level[:, pos] > base.prediction.pumping_level[:, pos])
    np.testing.assert_allclose(sealed.prediction.shares[:, pos, _zone(analysis, richest)], 0.0,
                               atol=1e-12)


def test_seal_leakage_limits(analysis):
    # leakage 0: the zone's conductance is 0 (a perfect seal); leakage 1: no seal at all
    i = _zone(analysis, "Upper sand")
    base = sc.evaluate(analysis, _scenario(analysis, {}))
    none = _with_settings(analysis, seal_leakage=1.0)
    open_seal = sc.evaluate(none, _scenario(none, {"seal": ["Upper sand"]}))
    np.testing.assert_array_equal(open_seal.prediction.concentration, base.prediction.concentration)
    np.testing.assert_array_equal(open_seal.prediction.pumping_level, base.prediction.pumping_level)
    perfect = _with_settings(analysis, seal_leakage=0.0)
    sealed = sc.evaluate(perfect, _scenario(perfect, {"seal": ["Upper sand"]}))
    factor = np.ones(len(analysis.project.zones))
    factor[i] = 0.0
    by_hand = sc.sweep(analysis.fit, analysis.draws, analysis.prediction.rates,
                       changes=lambda m: m.with_changes(conductance=m.conductance * factor))
    np.testing.assert_allclose(sealed.prediction.concentration, by_hand.concentration, rtol=1e-12,
                               equal_nan=True)
    # the default leakage lies between: the sealed zone still gives some water, less than before
    leaky = sc.evaluate(analysis, _scenario(analysis, {"seal": ["Upper sand"]}))
    assert analysis.project.settings.seal_leakage == 0.05
    pos = analysis.prediction.rates > 0
    share = leaky.prediction.shares[:, pos, i]
    gives = base.prediction.shares[:, pos, i] > 1e-6
    assert np.all(share[gives] > 0)
    assert np.all(share[gives] < base.prediction.shares[:, pos, i][gives])
    assert "5% leakage past the seal" in leaky.scenario.changes[0]


def test_sealing_every_zone_is_a_model_error(analysis):
    with pytest.raises(ModelError, match="every zone"):
        _scenario(analysis, {"seal": analysis.project.zone_names})


# --------------------------------------------------------------------------- redevelopment
def test_redevelopment_raises_the_zone_share_at_every_rate(analysis):
    i = _zone(analysis, "Gravel (clogged)")
    base = sc.evaluate(analysis, _scenario(analysis, {}))
    redev = sc.evaluate(analysis, _scenario(
        analysis, {"redevelop": {"zone": "Gravel (clogged)", "skin": 0}}))
    pos = analysis.prediction.rates > 0
    share_base = base.prediction.shares[:, pos, i]
    share_new = redev.prediction.shares[:, pos, i]
    assert np.all(share_new >= share_base - 1e-12)
    # at low rates the zone takes water from the well (share 0 before and after); wherever it
    # gives water its share rises
    gives = np.median(share_base, 0) > 0
    assert gives.sum() > 100
    assert np.all(np.median(share_new, 0)[gives] > np.median(share_base, 0)[gives])


def test_redeveloped_conductance_cooper_jacob_by_hand(analysis):
    # Cooper and Jacob (1946) with skin: G = 4 pi T / (ln(2.25 T t / (r_w^2 S)) + 2 s),
    # written out by hand: a zone fitted at its planning skin 8, redeveloped to skin 0
    project = analysis.project
    i = _zone(analysis, "Gravel (clogged)")
    z = project.zones[i]
    big_l = np.log(2.25 * z.zone_transmissivity * project.settings.horizon
                   / (project.well.well_radius ** 2 * z.storativity))
    four_pi_t = 4 * np.pi * z.zone_transmissivity
    g_fit = four_pi_t / (big_l + 2 * 8.0)
    # target reached (achieved = 0): skin 0
    np.testing.assert_allclose(sc.redeveloped_conductance(project, i, g_fit, 0.0, 0.0),
                               four_pi_t / big_l, rtol=1e-12)
    # the worst outcome with a shortfall of 0.5: half the skin stays (skin 4)
    np.testing.assert_allclose(sc.redeveloped_conductance(project, i, g_fit, 0.0, 1.0, 0.5),
                               four_pi_t / (big_l + 2 * 4.0), rtol=1e-12)
    # a zone already better than the target is left as it is
    g_good = four_pi_t / (big_l - 1.0)
    np.testing.assert_allclose(sc.redeveloped_conductance(project, i, g_good, 0.0, 0.3), g_good,
                               rtol=1e-12)


def test_redeveloped_conductance_thiem_by_hand(analysis):
    # Thiem (1906) with skin: G = 2 pi T / (ln(R / r_w) + s), by hand
    project = copy.deepcopy(analysis.project)
    zones = [dataclasses.replace(z, storativity=None) for z in project.zones]
    well = dataclasses.replace(project.well, radius_of_influence=500.0)
    project = dataclasses.replace(project, zones=zones, well=well)
    t = project.zones[2].zone_transmissivity
    lr = np.log(500.0 / project.well.well_radius)
    g_fit = 2 * np.pi * t / (lr + 8.0)
    np.testing.assert_allclose(sc.redeveloped_conductance(project, 2, g_fit, 1.0, 0.0),
                               2 * np.pi * t / (lr + 1.0), rtol=1e-12)


def test_redevelopment_starts_from_each_draws_fitted_conductance(analysis):
    i = _zone(analysis, "Gravel (clogged)")
    s = _scenario(analysis, {"redevelop": {"zone": "Gravel (clogged)", "skin": 0}})
    assert s.redevelop == ((i, "skin", 0.0),)
    model = analysis.fit.problem.model(analysis.draws.theta)
    after = sc.well_changes(s, analysis.project, seed=3)(model)
    g0, g1 = model.conductance[:, i], after.conductance[:, i]
    # bounds from the published equation: target reached (achieved 0) and the largest
    # shortfall (achieved 1), each from the draw's own fitted conductance
    best = sc.redeveloped_conductance(analysis.project, i, g0, 0.0, 0.0)
    worst = sc.redeveloped_conductance(analysis.project, i, g0, 0.0, 1.0)
    assert np.all(g1 <= best * (1 + 1e-12)) and np.all(g1 >= worst * (1 - 1e-12))
    assert np.all(g1 >= g0 * (1 - 1e-12))
    # the outcome is uncertain: it varies between draws, more than the fitted values do
    assert np.std(g1 / g0) > 0.05
    # seeded: the same seed repeats it exactly, another seed does not
    again = sc.well_changes(s, analysis.project, seed=3)(model).conductance[:, i]
    np.testing.assert_array_equal(again, g1)
    assert not np.array_equal(sc.well_changes(s, analysis.project, seed=4)(model).conductance[:, i],
                              g1)
    # other zones untouched
    others = [k for k in range(len(analysis.project.zones)) if k != i]
    np.testing.assert_array_equal(after.conductance[:, others], model.conductance[:, others])


def test_redevelopment_factor_outcome_range(analysis):
    s = _scenario(analysis, {"redevelop": [{"zone": "Gravel (clogged)", "factor": 2.5}]})
    np.testing.assert_allclose(s.zone_factor, [1, 1, 1, 1], rtol=0)
    model = analysis.fit.problem.model(analysis.draws.theta)
    ratio = sc.well_changes(s, analysis.project, seed=1)(model).conductance[:, 2] \
        / model.conductance[:, 2]
    # shortfall 0.5: the achieved factor is uniform between 1 + 0.5 x 1.5 = 1.75 and 2.5
    assert ratio.min() >= 1.75 - 1e-12 and ratio.max() <= 2.5 + 1e-12
    assert ratio.max() - ratio.min() > 0.6


# ------------------------------------------------------------------------------- blending
def test_blend_concentration_hand_values():
    # (Q C_w + Q_b C_b) / (Q + Q_b), a flow-weighted mean: (100 x 10 + 50 x 1) / 150 = 7
    np.testing.assert_allclose(sc.blend_concentration(10.0, 100.0, 50.0, 1.0), 7.0, rtol=1e-15)
    # no well water: the second source alone
    np.testing.assert_allclose(sc.blend_concentration(np.nan, 0.0, 50.0, 1.0), 1.0, rtol=1e-15)


def test_blend_scenario_matches_mass_balance_by_hand(analysis):
    s = _scenario(analysis, {"blend": {"rate": "200 gpm", "nitrate": "2 mg/L as N",
                                       "arsenic": "1 ug/L"}})
    res = sc.evaluate(analysis, s)
    qb = parse_quantity("200 gpm", "rate")
    k = 60
    q = analysis.prediction.rates[k]
    j_n = analysis.prediction.analytes.index("nitrate")
    j_as = analysis.prediction.analytes.index("arsenic")
    for d in (0, 17, 199):
        cw_n = analysis.prediction.concentration[d, k, j_n]
        cw_as = analysis.prediction.concentration[d, k, j_as]
        np.testing.assert_allclose(res.prediction.concentration[d, k, j_n],
                                   (q * cw_n + qb * 2.0) / (q + qb), rtol=1e-12)
        np.testing.assert_allclose(res.prediction.concentration[d, k, j_as],
                                   (q * cw_as + qb * 0.001) / (q + qb), rtol=1e-12)


def test_blend_concentration_on_no3_basis_is_converted():
    # nitrate as NO3 -> as N by M(N)/M(NO3) (NRC 1995: 1 mg/L NO3-N = 4.43 mg/L NO3)
    v = sc.parse_concentration("44.27 mg/L as NO3", "nitrate", "project.toml", "x")
    np.testing.assert_allclose(v, 10.0, rtol=2e-3)


def test_blend_rate_solver_meets_the_limit_exactly(analysis):
    pred = analysis.prediction
    j = pred.analytes.index("nitrate")
    k = int(np.argmin(np.abs(pred.rates - parse_quantity("150 gpm", "rate"))))
    thr = analysis.project.settings.margin * analysis.limits["nitrate"].canonical()
    alpha = analysis.project.settings.exceedance_probability
    cw = pred.concentration[:, k, j]
    assert (cw > thr).mean() > alpha  # the well alone does not comply here
    out = sc.blend_needed(analysis, pred.rates[k], {"nitrate": 0.5, "arsenic": 0.001})
    qb = float(out.loc[out["analyte"] == "nitrate", "blend_rate"].iloc[0])
    blended = sc.blend_concentration(cw, pred.rates[k], qb, 0.5)
    assert (blended > thr).mean() <= alpha
    # the binding draw sits exactly on the threshold
    np.testing.assert_allclose(np.min(np.abs(blended - thr)), 0.0, atol=1e-12 * thr)
    less = sc.blend_concentration(cw, pred.rates[k], qb * (1 - 1e-9), 0.5)
    assert (less > thr).mean() > alpha
    row = out[out["analyte"] == "all"].iloc[0]
    assert row["blend_rate"] == out["blend_rate"].max()
    np.testing.assert_allclose(row["ratio"], row["blend_rate"] / pred.rates[k], rtol=1e-15)


def test_blend_rate_solver_agrees_with_brentq():
    # one draw, alpha = 0: the root of C(Q_b) = T found by scipy's brentq is the reference
    cw, q, cb, thr = 14.0, 800.0, 1.5, 8.0
    ref = brentq(lambda qb: sc.blend_concentration(cw, q, qb, cb) - thr, 0.0, 1e6, xtol=1e-12)
    np.testing.assert_allclose(sc.required_blend_rate([cw], q, cb, thr, 0.0), ref, rtol=1e-10)


def test_blend_rate_solver_impossible_and_not_needed():
    with pytest.raises(ModelError, match="second source"):
        sc.required_blend_rate([12.0, 13.0], 100.0, 9.0, 8.0, 0.0)
    assert sc.required_blend_rate([5.0, 6.0], 100.0, 9.0, 8.0, 0.0) == 0.0


@given(cw=st.lists(st.floats(0.0, 50.0), min_size=1, max_size=40),
       q=st.floats(1.0, 1e4), cb=st.floats(0.0, 7.9), alpha=st.floats(0.0, 0.5))
def test_blend_rate_solver_property(cw, q, cb, alpha):
    thr = 8.0
    qb = sc.required_blend_rate(cw, q, cb, thr, alpha)
    blended = sc.blend_concentration(np.array(cw), q, qb, cb)
    # invariant: at the solved rate at most alpha of the draws exceed the threshold
    assert (blended > thr * (1 + 1e-12)).mean() <= alpha + 1e-12


@given(cw=st.floats(0.0, 100.0), cb=st.floats(0.0, 100.0), q=st.floats(1e-3, 1e5),
       qb=st.floats(1e-3, 1e5))
def test_blend_lies_between_the_two_sources(cw, cb, q, qb):
    c = float(sc.blend_concentration(cw, q, qb, cb))
    assert min(cw, cb) * (1 - 1e-12) - 1e-12 <= c <= max(cw, cb) * (1 + 1e-12) + 1e-12


def test_blend_needs_every_predicted_analyte(analysis):
    s = _scenario(analysis, {"blend": {"rate": "100 gpm", "nitrate": "1 mg/L as N"}})
    with pytest.raises(InputError, match="arsenic"):
        sc.evaluate(analysis, s)


# ------------------------------------------------------------------------ intake and heads
def test_uniform_head_drop_shifts_the_pumping_level_by_the_drop(analysis):
    # confined linear zones: h_w = (sum G h0 - Q) / sum G (from sum G (h0 - h_w) = Q), so
    # lowering every h0 by dh lowers h_w by dh and leaves the zone flows and shares unchanged,
    # as long as the level stays above every zone's top (the pumping level lies C Q^2 below
    # h_w, so a level above the top keeps h_w above it too)
    base = sc.evaluate(analysis, _scenario(analysis, {}))
    low = sc.evaluate(analysis, _scenario(analysis, {"lower_heads": "10 ft"}))
    dh = parse_quantity("10 ft", "length")
    shift = low.prediction.pumping_level - base.prediction.pumping_level
    confined = low.prediction.pumping_level <= analysis.project.zone_top.min()
    assert confined.mean() > 0.5
    np.testing.assert_allclose(shift[confined], dh, rtol=0, atol=1e-9)
    # below a zone's top the zone gives less than at full transmissivity (Dupuit): the level
    # falls by at least the drop
    assert np.all(shift[~confined] >= dh - 1e-9)
    pos = (analysis.prediction.rates > 0)[None, :] & confined
    np.testing.assert_allclose(low.prediction.shares[pos], base.prediction.shares[pos],
                               atol=1e-9)
    assert low.yield_rate < base.yield_rate


def test_deeper_intake_raises_the_yield(analysis):
    base = sc.evaluate(analysis, _scenario(analysis, {}))
    deep = sc.evaluate(analysis, _scenario(analysis, {"intake": "175 ft"}))
    assert deep.yield_rate > base.yield_rate


def test_pumping_level_yield_interpolates():
    # straight line level = 10 + 0.1 Q: reaches 50 at Q = 400 exactly
    rates = np.linspace(0, 1000, 11)
    y, beyond = sc.pumping_level_yield(rates, 10 + 0.1 * rates, 50.0)
    np.testing.assert_allclose(y, 400.0, rtol=1e-12)
    assert not beyond
    assert sc.pumping_level_yield(rates, 10 + 0.01 * rates, 50.0) == (1000.0, True)


# ------------------------------------------------------------------------------ the demo
def test_demo_comparison(comparison):
    t = comparison.table
    assert list(t["scenario"])[0] == sc.BASE_NAME
    assert len(t) >= 4  # base case and at least three scenarios
    base_width = t["window_width"].iloc[0]
    assert (t["window_width"].iloc[1:] > base_width).any()
    assert {"nitrate_median", "arsenic_upper", "yield", "recommended"} <= set(t.columns)


def test_scenario_margin_override_narrows_the_window(analysis):
    strict = sc.evaluate(analysis, _scenario(analysis, {"margin": 0.6}))
    width = sum(hi - lo for lo, hi, _, _ in strict.window.intervals)
    base = sum(hi - lo for lo, hi, _, _ in analysis.window.intervals)
    assert strict.margin == 0.6
    assert width < base


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("raw, field", [
    ({"seel": ["Upper sand"]}, "scenarios[1].seel"),
    ({"seal": ["Nowhere"]}, "scenarios[1].seal"),
    ({"seal": "Upper sand, Deep sand"}, "scenarios[1].seal"),
    ({"redevelop": {"zone": "Gravel (clogged)"}}, "scenarios[1].redevelop"),
    ({"redevelop": {"zone": "Gravel (clogged)", "skin": "0"}}, "scenarios[1].redevelop.skin"),
    ({"redevelop": {"zone": "Gravel (clogged)", "factor": -1}}, "scenarios[1].redevelop.factor"),
    ({"redevelop": {"zone": "Gravel", "skin": 0}}, "scenarios[1].redevelop.zone"),
    ({"intake": "120"}, "scenarios[1].intake"),
    ({"intake": "3 gpm"}, "scenarios[1].intake"),
    ({"lower_heads": 3}, "scenarios[1].lower_heads"),
    ({"blend": {"nitrate": "2 mg/L as N"}}, "scenarios[1].blend.rate"),
    ({"blend": {"rate": "200 gpm", "nitrate": "2 mg/L"}}, "scenarios[1].blend.nitrate"),
    ({"blend": {"rate": "200 gpm", "nitrate": "2"}}, "scenarios[1].blend.nitrate"),
    ({"blend": {"rate": "200 gpm"}}, "scenarios[1].blend"),
    ({"blend": "200 gpm"}, "scenarios[1].blend"),
    ({"margin": 1.5}, "scenarios[1].margin"),
    ({"exceedance_probability": 0.9}, "scenarios[1].exceedance_probability"),
])
def test_bad_entries_name_the_field(analysis, raw, field):
    with pytest.raises(InputError) as err:
        _scenario(analysis, raw)
    assert err.value.field == field
    assert err.value.file == "project.toml"
    assert field in str(err.value)


def test_project_scenarios_are_resolved(analysis):
    scs = sc.project_scenarios(analysis.project)
    assert [s.name for s in scs] == [raw["name"] for raw in analysis.project.scenarios]
    assert scs[0].zone_factor[0] == analysis.project.settings.seal_leakage


# ----------------------------------------------------------- what the data cannot tell
def _synthetic_analysis(depth: bool, **settings):
    p = sw.project(relative_error=0.03, depth=depth, seed=3)
    p.limits = limit_set("US-EPA")
    p.settings = dataclasses.replace(p.settings, **settings)
    return analyse(p, draws=300, seed=7)


@pytest.fixture(scope="module")
def deficient():
    """The synthetic well without depth samples: some zone values are not resolved."""
    return _synthetic_analysis(depth=False)


@pytest.fixture(scope="module")
def resolved():
    """The same well with depth samples: every zone value is resolved or weakly resolved."""
    return _synthetic_analysis(depth=True)


def _seal_each(a):
    return sc.compare(a, [sc.parse_scenario({"name": f"Seal {z}", "seal": [z]}, 1, a.project)
                          for z in a.project.zone_names])


def test_sealing_the_deepest_zone_cannot_be_told_without_depth_samples(deficient, resolved):
    comp = _seal_each(deficient)
    t = comp.table.set_index("scenario")
    assert not t.loc[sc.BASE_NAME, "cannot_tell"]
    # sealing Z4 changes the blend into combinations of zone values no sample saw
    assert t.loc["Seal Z4", "cannot_tell"]
    assert "arsenic" in t.loc["Seal Z4", "undecided"]
    assert "a depth sample between" in t.loc["Seal Z4", "would_tell"]
    # with depth samples the same options are decided
    told = _seal_each(resolved).table.set_index("scenario")
    assert not told["cannot_tell"].any()


def test_cannot_tell_option_has_no_window_rate_or_band(deficient):
    from blendq.report.scenario_section import comparison_display_table, widest_sentence

    comp = _seal_each(deficient)
    untold = [k for k, r in enumerate(comp.results) if r.cannot_tell]
    assert untold
    us = comparison_display_table(comp, "US")
    for k in untold:
        row = us.iloc[k]
        assert row["Operating window"] == "cannot tell"
        assert row["Recommended"] == "-" and row["Width"] == "-"
        assert all(row[c] == "-" for c in us.columns if c.endswith(" band"))
        assert row["Window limited by"].startswith("cannot tell: compliance with the")
        assert "depth sample" in row["What would tell"]
    sentence = widest_sentence(comp)
    for k in untold:
        assert f'"{comp.table["scenario"].iloc[k]}" opens' not in sentence
    assert "cannot tell whether" in sentence


def test_undecided_rates_follow_the_corner_range(deficient):
    # an option is undecided at a rate exactly when the range of its concentration over the
    # corners of the data-allowed set straddles margin x limit (wider than the tolerance)
    from blendq.fit.uncertainty import Draws
    from blendq.fit.unresolved import unresolved_sets

    a = deficient
    s = sc.parse_scenario({"name": "Seal Z4", "seal": ["Z4"]}, 1, a.project)
    res = sc.evaluate(a, s)
    fit = a.fit
    ref = Draws(fit.theta[None], fit.zone_values()[None], list(fit.analytes), 0)
    w = sc.sweep(fit, ref, a.prediction.rates, changes=sc.well_changes(s, a.project,
                                                                       central=True)).shares[0]
    uset = unresolved_sets(fit, a.zones)["arsenic"]
    values = np.nan_to_num(w) @ uset.vertices.T
    thr = res.margin * a.limits["arsenic"].canonical()
    lo, hi = values.min(1), values.max(1)
    expect = (a.prediction.rates > 0) & (lo <= thr) & (hi > thr) \
        & (hi - lo > a.project.settings.unresolved_tolerance * thr)
    for crit in res.window.criteria:
        if crit.kind != "quality":
            expect &= crit.ok
    np.testing.assert_array_equal(res.undecided["arsenic"], expect)


def test_advice_names_a_source_only_where_the_data_resolve_it(analysis, resolved):
    # the demo's nitrate zones are all unresolved (discharge samples only): no zone is named
    strict = analyse(dataclasses.replace(
        analysis.project, settings=dataclasses.replace(analysis.project.settings, margin=0.3)),
        draws=100)
    assert strict.window.empty
    assert (strict.zones.loc[strict.zones["analyte"] == "nitrate", "verdict"]
            == "not resolved").all()
    assert richest_source(strict.zones, "nitrate") is None
    opts = window_options(strict)
    assert not any("richest source of nitrate" in o for o in opts)
    assert any(o.startswith("find the source of nitrate") and "depth sample" in o for o in opts)
    # with depth samples Z1 (12 mg/L as N, far above the others) is resolved and named
    assert richest_source(resolved.zones, "nitrate") == "Z1"
    low = _synthetic_analysis(depth=True, margin=0.3)
    assert any("the Z1 (the richest source of nitrate)" in o for o in window_options(low))


# ------------------------------------------------------------------- a new pump
PUMP_DATA = Path(__file__).parents[1] / "data" / "pump"
FT = 0.3048


@pytest.fixture(scope="module")
def pumped(tmp_path_factory):
    """The demo with the test pump ([pump], curve.csv) and a second curve (curve-b.csv)."""
    from inputs.test_pump_file import pump_project

    folder = pump_project(tmp_path_factory.mktemp("newpump"))
    (folder / "curve-b.csv").write_text((PUMP_DATA / "curve-b.csv").read_text())
    # a small pump: 150 ft of shutoff head against a lift of about 100 ft plus 115 ft of
    # discharge head (50 psi)
    (folder / "weak.csv").write_text("rate [gpm],head [ft],efficiency\n50,150,30\n"
                                     "300,120,60\n600,40,50\n")
    return folder, analyse(load_project(folder), draws=200, seed=7)


def _pump_option(a, raw, k=1):
    return sc.parse_scenario({"name": f"pump {k}", **raw}, k, a.project)


def test_new_pump_keys_replace_the_pump_table(pumped):
    _, a = pumped
    opt = _pump_option(a, {"pump": {"curve": "curve-b.csv", "rated_speed": "3550 rpm",
                                    "motor_efficiency": 0.95}})
    spec = opt.pump
    gpm = parse_quantity("1 gpm", "rate")
    np.testing.assert_allclose(spec.curve_rate[[0, -1]], [100 * gpm, 1000 * gpm], rtol=1e-12)
    assert spec.rated_speed == 3550 and spec.motor_efficiency == 0.95
    # the rest is the project's [pump]: 120 ft column of 6 in, 50 psi, three seasons
    assert spec.column_length == pytest.approx(120 * FT, rel=1e-12)
    assert spec.column_diameter == pytest.approx(0.1524, rel=1e-12)
    assert list(spec.static_levels) == ["spring", "summer", "autumn"]
    assert not opt.changes_well and "new pump (curve-b.csv, 3550 rpm" in opt.changes[0]
    # a new intake 35 ft deeper than the operating intake (115 ft) hangs the pump 35 ft deeper
    moved = _pump_option(a, {"pump": {"curve": "curve-b.csv"}, "intake": "150 ft"}).pump
    assert moved.column_length == pytest.approx(155 * FT, rel=1e-12)
    given = _pump_option(a, {"pump": {"curve": "curve-b.csv", "column_length": "140 ft"},
                             "intake": "150 ft"}).pump
    assert given.column_length == pytest.approx(140 * FT, rel=1e-12)
    # a Hazen-Williams C of the option replaces the [pump] roughness (one or the other)
    hw = _pump_option(a, {"pump": {"curve": "curve-b.csv", "hazen_williams_c": 130}}).pump
    assert hw.roughness is None and hw.hazen_williams_c == 130


@pytest.mark.parametrize("pump, field", [
    ({"rated_speed": "3550 rpm"}, "scenarios[1].pump.curve"),
    ({"curve": "missing.csv"}, "scenarios[1].pump.curve"),
    ({"curve": "curve-b.csv", "flow": 3}, "scenarios[1].pump.flow"),
    ({"curve": "curve-b.csv", "minor_loss_k": -2}, "scenarios[1].pump.minor_loss_k"),
    ("curve-b.csv", "scenarios[1].pump"),
])
def test_new_pump_errors_name_the_key(pumped, pump, field):
    _, a = pumped
    with pytest.raises(InputError) as err:
        _pump_option(a, {"pump": pump})
    assert err.value.field == field


def test_new_pump_without_pump_table_needs_every_key(analysis):
    # the demo has no [pump]: a new pump there must give its column and seasons itself
    curve = str(PUMP_DATA / "curve-b.csv")  # an absolute path is read where it is
    with pytest.raises(InputError) as err:
        sc.parse_scenario({"name": "p", "pump": {"curve": curve}}, 1, analysis.project)
    assert err.value.field == "scenarios[1].pump.column_length"
    full = {"curve": curve, "column_length": "120 ft", "column_diameter": "6 in",
            "hazen_williams_c": 120, "static_levels": {"all year": "62 ft"}}
    spec = sc.parse_scenario({"name": "p", "pump": full}, 1, analysis.project).pump
    assert spec.discharge_head == 0.0
    assert spec.static_levels["all year"] == pytest.approx(62 * FT, rel=1e-12)


def test_new_pump_compared_with_the_current_pump(pumped):
    from blendq.decide.pumpset import _system, curve_of, delivered, pump_settings
    from blendq.inputs.pump_file import read_pump
    from blendq.well import pump as pumpmod

    folder, a = pumped
    opt = _pump_option(a, {"pump": {"curve": "curve-b.csv"}})
    comp = sc.compare(a, [opt])
    base, new = comp.results
    t = comp.table.set_index("scenario")
    # the base case carries the current pump, and its figures are those of `blendq pump`
    current = read_pump(folder)
    assert base.scenario.pump.curve_file == current.curve_file == "curve.csv"
    np.testing.assert_array_equal(base.scenario.pump.curve_head, current.curve_head)
    ref = pump_settings(a, current)
    assert base.pump.frequency_range == ref.frequency_range
    assert base.pump.recommended == ref.recommended
    assert t.loc[sc.BASE_NAME, "pump_kwh_per_m3"] == ref.recommended_energy
    assert t.loc[sc.BASE_NAME, "pump_curve"] == "curve.csv"
    # a pump alone changes neither the well nor the water: the same window
    assert new.window.intervals == base.window.intervals
    # its all-year range keeps the delivered rate in the window at every season and band end
    lo, hi = new.pump.frequency_range
    rates = new.prediction.rates
    band = np.quantile(new.prediction.pumping_level, [new.alpha, 0.5, 1 - new.alpha], axis=0)
    deep = getattr(a.step_drawdown, "level_deep", None)
    if deep is not None:  # the step test's deep side, where the window uses it
        band[2] = np.fmax(band[2], deep)
    s0 = 61.7 * FT  # the demo's static level (well.static_level)
    spec = opt.pump
    curve = curve_of(spec)
    w0, w1 = new.pump.window
    for s in spec.static_levels.values():
        for lv in band:
            system = _system(spec, rates, lv, s - s0)
            for f in (lo, hi):
                q = delivered(curve, system, spec, f, rates[-1])
                assert w0 * (1 - 1e-5) <= q <= w1 * (1 + 1e-5)
    # energy per volume at the setting, in closed form: at the operating point the pump's head
    # is the system head, and E = rho g H / (eta_pump eta_motor eta_drive) / 3.6e6 [kWh/m3]
    # (Karassik et al. 2008, Pump Handbook: wire-to-water efficiency)
    middle = float(np.mean(list(spec.static_levels.values())))
    system = _system(spec, rates, band[1], middle - s0)
    f = t.loc["pump 1", "pump_setting"]
    q = delivered(curve, system, spec, f, rates[-1])
    head = float(system.head(q))
    eta = float(curve.efficiency_at(q, f / 60.0)) * spec.motor_efficiency * spec.drive_efficiency
    e = pumpmod.WATER_DENSITY * pumpmod.GRAVITY * head / eta / 3.6e6
    assert t.loc["pump 1", "pump_kwh_per_m3"] == pytest.approx(e, rel=1e-6)
    # at the setting the delivered rate is the window's recommended rate (mid season)
    assert q == pytest.approx(new.window.recommended, rel=1e-4)
    assert t.loc["pump 1", "pump_setting_rate_low"] <= q <= t.loc["pump 1",
                                                                  "pump_setting_rate_high"]
    # the curve-b pump is the more efficient at the window's rates (82 % against 78 % at
    # 600 gpm on the makers' tables)
    assert t.loc["pump 1", "pump_kwh_per_m3"] < t.loc[sc.BASE_NAME, "pump_kwh_per_m3"]


def test_new_pump_at_a_new_intake_uses_the_intake_window(pumped):
    _, a = pumped
    both = _pump_option(a, {"pump": {"curve": "curve-b.csv"}, "intake": "150 ft"})
    intake = _pump_option(a, {"intake": "150 ft"}, 2)
    comp = sc.compare(a, [both, intake])
    _, with_pump, alone = comp.results
    assert with_pump.window.intervals == alone.window.intervals
    assert alone.pump is None and with_pump.pump is not None
    assert with_pump.pump.window[1] <= alone.window.intervals[-1][1]


def test_new_pump_that_cannot_lift_says_so_in_display_units(pumped):
    from blendq.well.pump import PumpError

    _, a = pumped
    comp = sc.compare(a, [_pump_option(a, {"pump": {"curve": "weak.csv"}})])
    res = comp.results[1]
    assert res.pump is None and isinstance(res.pump_error, PumpError)
    note = comp.table["pump_note"].iloc[1]
    assert "cannot lift the water" in note and " ft of head" in note
    assert "at 50 gpm, the lowest rate of its curve" in note
    assert "m³/d" not in note and "m3/d" not in note
    assert "L/s" in res.pump_error.in_units("SI-L/s")
    assert comp.results[0].pump is not None  # the current pump still has its setting
