"""Tests of the what-if scenarios (blendq.decide.scenarios) on the invented demo well TH-2."""

from __future__ import annotations

import copy
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.optimize import brentq

import blendq
from blendq.decide import scenarios as sc
from blendq.decide.analysis import analyse
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


def test_redevelopment_factor_is_the_cooper_jacob_log_ratio(analysis):
    # Cooper and Jacob (1946) with skin: G = 4 pi T / (ln(2.25 T t / (r_w^2 S)) + 2 s), so a
    # new skin scales G by (L + 2 s_old) / (L + 2 s_new); computed here by hand
    project = analysis.project
    i = _zone(analysis, "Gravel (clogged)")
    z = project.zones[i]
    big_l = np.log(2.25 * z.zone_transmissivity * project.settings.horizon
                   / (project.well.well_radius ** 2 * z.storativity))
    expected = (big_l + 2 * 8.0) / (big_l + 2 * 0.0)
    assert z.skin == 8.0
    np.testing.assert_allclose(sc.redevelopment_factor(project, i, 0.0), expected, rtol=1e-12)
    s = _scenario(analysis, {"redevelop": [{"zone": "Gravel (clogged)", "factor": 2.5}]})
    np.testing.assert_allclose(s.zone_factor, [1, 1, 2.5, 1], rtol=0)


def test_redevelopment_factor_thiem(analysis):
    # Thiem (1906) with skin: G = 2 pi T / (ln(R / r_w) + s); hand ratio of the log terms
    project = copy.deepcopy(analysis.project)
    from dataclasses import replace

    zones = [replace(z, storativity=None) for z in project.zones]
    well = replace(project.well, radius_of_influence=500.0)
    project = replace(project, zones=zones, well=well)
    lr = np.log(500.0 / project.well.well_radius)
    np.testing.assert_allclose(sc.redevelopment_factor(project, 2, 1.0), (lr + 8) / (lr + 1),
                               rtol=1e-12)


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
    # linear zones: h_w = (sum G h0 - Q) / sum G (from sum G (h0 - h_w) = Q), so lowering every h0 by dh
    # lowers h_w by dh and leaves the zone flows and shares unchanged
    base = sc.evaluate(analysis, _scenario(analysis, {}))
    low = sc.evaluate(analysis, _scenario(analysis, {"lower_heads": "10 ft"}))
    dh = parse_quantity("10 ft", "length")
    np.testing.assert_allclose(low.prediction.pumping_level - base.prediction.pumping_level, dh,
                               rtol=0, atol=1e-9)
    pos = analysis.prediction.rates > 0
    np.testing.assert_allclose(low.prediction.shares[:, pos], base.prediction.shares[:, pos],
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
    assert scs[0].zone_factor[0] == 0.0
