"""Tests of blendq.fit.diagnostics: identifiability verdicts, data-allowed ranges and residuals.

Sources:
- Identifiability of a linear least-squares problem (any numerical linear algebra text, e.g.
  Golub and Van Loan, Matrix Computations): with fewer independent weight patterns than zones,
  the zone values along the null space of the weight matrix are not determined by the data
  (so no precise number may be printed for a zone the data cannot see).
- Standard normal quantile: z(0.95) = 1.6449 (any statistical table, e.g. Abramowitz and
  Stegun 1964, table 26.5).
"""

from __future__ import annotations

import numpy as np
import pytest
import synthetic_wells as sw

from blendq.fit import diagnostics, uncertainty
from blendq.fit.estimation import FitOptions, fit
from blendq.well.synthetic import synthetic_project

G3 = np.array([40.0, 120.0, 60.0])
TOP3 = np.array([30.0, 50.0, 70.0])
BOT3 = TOP3 + 10.0
RATES = [200.0, 500.0, 900.0, 1400.0, 2000.0]
NITRATE3 = np.array([12.0, 3.0, 7.0])


def _three_zone(static_head, options):
    # one depth sample between Z1 and Z2 during the last step (a mix of Z2 and Z3)
    p = synthetic_project(G3, static_head, TOP3, BOT3, {"nitrate": NITRATE3}, RATES, 25.0,
                          flowlog_rates=[0.0, 1000.0], flowlog_depths=[27.0, 45.0, 65.0, 85.0],
                          depth_samples=[("S5", 45.0)], seed=1)
    result = fit(p, options)
    return result, diagnostics.zone_table(result, uncertainty.monte_carlo(result, 100, seed=1))


@pytest.mark.parametrize("options", [FitOptions(fit_hydraulics=False), FitOptions()],
                         ids=["fixed", "joint"])
def test_zone_that_never_contributes_is_not_resolved(options):
    # Z3's static head is so low that it takes water from the well at every step: it never
    # reaches the pump or a sample, so the data say nothing about it
    result, table = _three_zone(np.array([-10.0, -12.0, -40.0]), options)
    assert np.all(result.model.state(np.array(RATES)).zone_flow[:, 2] < 0)
    z3 = table[table["zone"] == "Z3"].iloc[0]
    assert z3["verdict"] == "not resolved"
    assert np.isnan(z3["estimate"]) and np.isnan(z3["sd"]) and np.isnan(z3["lower"])
    assert z3["range_low"] == 0.0 and z3["range_high"] == np.inf
    # the other two are seen and recovered from the noise-free data
    seen = table[table["zone"] != "Z3"]
    assert (seen["verdict"] == "resolved").all()
    np.testing.assert_allclose(seen["estimate"], NITRATE3[:2], rtol=1e-6)
    diag = diagnostics.analyte_diagnostics(result).iloc[0]
    assert diag["rank"] == 2 and diag["zones"] == 3


@pytest.mark.parametrize("options", [FitOptions(fit_hydraulics=False), FitOptions()],
                         ids=["fixed", "joint"])
def test_zones_with_proportional_shares_are_not_resolved(options):
    # Z2 and Z3 share one static head, so q2 / q3 = G2 / G3 at every rate and in every sample
    # (two identical weight patterns): only their mix is seen
    result, table = _three_zone(np.array([-10.0, -12.0, -12.0]), options)
    q = result.model.state(np.array(RATES)).zone_flow
    np.testing.assert_allclose(q[:, 1] / q[:, 2], 2.0, rtol=1e-6)
    for zone in ("Z2", "Z3"):
        row = table[table["zone"] == zone].iloc[0]
        assert row["verdict"] == "not resolved"
        assert np.isnan(row["estimate"]) and np.isnan(row["upper"])
        # a finite range: zone values are >= 0 and the mix is measured
        assert 0.0 <= row["range_low"] < row["range_high"] < np.inf
        k = int(zone[1]) - 1
        assert row["range_low"] <= NITRATE3[k] <= row["range_high"]
    z1 = table[table["zone"] == "Z1"].iloc[0]
    assert z1["verdict"] == "resolved"
    np.testing.assert_allclose(z1["estimate"], NITRATE3[0], rtol=1e-6)
    assert diagnostics.analyte_diagnostics(result).iloc[0]["rank"] == 2


def test_no_depth_samples_leaves_zones_unresolved():
    # Discharge samples only, all zones flowing in: each share is b_i + d_i / Q (linear zone
    # law, common wellbore head), so the steps give at most two patterns per inflow regime.
    # Four zones cannot all be resolved; the table must say so rather than print numbers.
    result = fit(sw.project(depth=False), FitOptions(fit_hydraulics=False))
    table = diagnostics.zone_table(result, uncertainty.monte_carlo(result, 100, seed=0))
    diag = diagnostics.analyte_diagnostics(result)
    assert (diag["rank"] < 4).all()
    unresolved = table["verdict"] == "not resolved"
    assert unresolved.any()
    assert table.loc[unresolved, "estimate"].isna().all()
    assert (table.loc[unresolved, "range_high"] >= table.loc[unresolved, "range_low"]).all()


def test_identifiable_well_all_resolved_with_ranges_around_truth():
    p = sw.project(relative_error=0.03, absolute_error={"nitrate": 0.05, "arsenic": 0.0003},
                   seed=5)
    result = fit(p)
    draws = uncertainty.monte_carlo(result, 300, seed=2)
    table = diagnostics.zone_table(result, draws)
    assert len(table) == 4 * 2
    assert set(table["verdict"]) <= {"resolved", "weakly resolved"}
    assert (table["verdict"] == "resolved").sum() >= 6
    truth = np.concatenate([sw.CONC[a] for a in result.analytes])
    assert np.all(table["range_low"].to_numpy() <= truth + 1e-12)
    assert np.all(truth <= table["range_high"].to_numpy() + 1e-12)
    assert np.all(table["lower"] <= table["estimate"] + 1e-12)
    assert np.all(table["estimate"] <= table["upper"] + 1e-12)
    assert np.all(table["sd"] > 0)
    diag = diagnostics.analyte_diagnostics(result)
    assert (diag["rank"] == 4).all() and np.all(np.isfinite(diag["condition"]))


def test_analyte_with_only_nondetects_is_not_resolved():
    # every arsenic result below a 1 mg/L detection limit: no zone value can be given, only
    # the range the limits allow (Z4 alone is sampled at 85 m, so it is at most 1 mg/L)
    p = sw.project(nondetect_limits={"arsenic": 1.0})
    result = fit(p, FitOptions(fit_hydraulics=False))
    table = diagnostics.zone_table(result, uncertainty.monte_carlo(result, 50, seed=0))
    ars = table[table["analyte"] == "arsenic"]
    assert (ars["verdict"] == "not resolved").all() and ars["estimate"].isna().all()
    assert (ars["range_low"] == 0.0).all() and np.all(np.isfinite(ars["range_high"]))
    np.testing.assert_allclose(ars["range_high"].iloc[3], 1.0, rtol=1e-9)
    diag = diagnostics.analyte_diagnostics(result).set_index("analyte").loc["arsenic"]
    assert diag["results"] == 0 and diag["nondetects"] == 8 and diag["rank"] == 0
    res = diagnostics.residual_table(result)
    assert res[res["analyte"] == "arsenic"]["nondetect"].all()


def test_data_allowed_range_by_hand():
    # one sample of a 50/50 mix, 5 +- 1 mg/L, z = 2: 3 <= (c1 + c2)/2 <= 7 with c >= 0, so each
    # zone lies in [0, 14]; a zone with no weight is unbounded above
    a = np.array([[0.5, 0.5, 0.0]])
    lo, hi = diagnostics.data_allowed_range(a, np.array([5.0]), np.array([1.0]), np.zeros(3),
                                            np.full(3, np.inf), z=2.0)
    np.testing.assert_allclose(lo, [0.0, 0.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(hi[:2], [14.0, 14.0], rtol=1e-9)
    assert hi[2] == np.inf
    # a non-detect of zone 1 alone below 2 mg/L: zone 1 <= 2, so zone 2 >= 4
    lo, hi = diagnostics.data_allowed_range(a, np.array([5.0]), np.array([1.0]), np.zeros(3),
                                            np.full(3, np.inf), np.array([[1.0, 0.0, 0.0]]),
                                            np.array([2.0]), z=2.0)
    np.testing.assert_allclose([hi[0], lo[1], hi[1]], [2.0, 4.0, 14.0], rtol=1e-9)


def test_residual_table_flags_an_outlier_and_nondetects():
    p = sw.project()
    row = (p.samples["analyte"] == "nitrate") & (p.samples["step"] == "S3") & p.samples["depth"].isna()
    p.samples.loc[row, "value"] *= 1.6  # a copying error: 60 % high, 12 sd
    dl_row = (p.samples["analyte"] == "arsenic") & (p.samples["step"] == "S1") & p.samples["depth"].isna()
    p.samples.loc[dl_row, ["value", "nondetect", "detection_limit"]] = [np.nan, True, 0.001]
    result = fit(p, FitOptions(fit_hydraulics=False))
    res = diagnostics.residual_table(result)
    assert len(res) == len(p.samples)
    nitrate = res[res["analyte"] == "nitrate"]
    worst = nitrate.loc[nitrate["standardised"].abs().idxmax()]
    assert worst["step"] == "S3" and np.isnan(worst["depth"]) and worst["outlier"]
    nd = res[res["nondetect"]]
    assert len(nd) == 1 and nd.iloc[0]["observed"] == 0.001
    assert nd.iloc[0]["fitted"] <= 0.001 * (1 + 1e-9) and not nd.iloc[0]["outlier"]


def test_hydraulics_table_sources():
    fixed = diagnostics.hydraulics_table(fit(sw.project(), FitOptions(fit_hydraulics=False)))
    assert set(fixed["conductance_from"]) == {"fixed"}
    # flat priors: whatever is known comes from the data
    flat = diagnostics.hydraulics_table(fit(sw.without_priors(sw.project())))
    assert set(flat["conductance_from"]) == {"data"} and set(flat["static_head_from"]) == {"data"}
    joint = diagnostics.hydraulics_table(fit(sw.project()))
    np.testing.assert_allclose(joint["conductance"], sw.G, rtol=1e-6)
    np.testing.assert_allclose(joint["static_head"], sw.H0, rtol=1e-6)
    # posterior sds are positive and below the prior sd of a given conductance (0.25 ln 3)
    assert np.all(joint["conductance_rel_sd"] > 0)
    assert np.all(joint["conductance_rel_sd"] < 0.25 * np.log(3.0))
    # without logs and levels, the zone shares rest mostly on the priors
    p = sw.project(logs=False)
    p.steps["pumping_level"] = np.nan
    weak = diagnostics.hydraulics_table(fit(p))
    assert (weak["conductance_from"] == "prior").any()


def test_interval_z():
    # standard normal table: z(0.95) = 1.6449, z(0.975) = 1.9600
    assert diagnostics.interval_z(0.90) == pytest.approx(1.644854, abs=1e-6)
    assert diagnostics.interval_z(0.95) == pytest.approx(1.959964, abs=1e-6)


def test_weakly_resolved_is_judged_against_the_zone_own_value():
    from blendq.fit.diagnostics import weakly_resolved

    # a zone at 5 mg/L beside one at 20 mg/L: an interval 3 mg/L wide is weak (wider than
    # half of 5), though narrower than half the largest zone (10)
    assert weakly_resolved(3.0, 5.0, 20.0)
    assert not weakly_resolved(2.0, 5.0, 20.0)
    # a zone near zero is judged against a tenth of the largest zone value (2 mg/L)
    assert not weakly_resolved(1.5, 0.01, 20.0)
    assert weakly_resolved(2.5, 0.01, 20.0)
