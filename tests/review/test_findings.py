"""Tests of the lab and field review (blendq.review.findings and its rule modules).

Every project here is invented and built directly from small DataFrames: one well ("Test
well 1", radius 0.1 m, zones 20-40 m and 50-60 m below the casing top), a four-step test
starting 2026-03-02 08:00 with four-hour steps.
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from molmass import Formula

from blendq.chemistry.analytes import CATALOGUE
from blendq.errors import InputError
from blendq.inputs.project import TABLE_COLUMNS, Project, Settings, Well, Zone
from blendq.review.field import casing_volume, field_tolerance, pumped_volume, step_schedule
from blendq.review.findings import (
    QA_DEFAULTS,
    QAResult,
    at_or_above,
    qa_options,
    review,
    severity_rank,
    worst_severity,
)
from blendq.review.holding import is_chlorinated
from blendq.review.ionbalance import ion_balance_acceptable, ion_balance_table
from blendq.review.rules import prepare_samples, relative_percent_difference

T0 = pd.Timestamp("2026-03-02 08:00")
HOUR = pd.Timedelta(hours=1)
OPTS = qa_options(None)


def at(hours: float) -> pd.Timestamp:
    """Time ``hours`` after the start of the test."""
    return T0 + hours * HOUR


def sample(sample_id, step, analyte, value, **kw) -> dict:
    row = dict(sample_id=sample_id, step=step, analyte=analyte, value=value, nondetect=False,
               detection_limit=np.nan, uncertainty=np.nan, qualifier="", sampled_at=pd.NaT,
               analyzed_at=pd.NaT, duplicate_of="", depth=np.nan, preservation="",
               reported_value=value, reported_unit="mg/L", reported_basis="", source_row=1)
    if CATALOGUE.get(analyte) is not None and CATALOGUE[analyte].needs_basis:
        row["reported_basis"] = "N"
    row.update(kw)
    return row


def steps_table(rates=(100.0, 150.0, 200.0, 220.0), hours=4.0, recovered=None) -> pd.DataFrame:
    n = len(rates)
    return pd.DataFrame({
        "step": list(range(1, n + 1)),
        "rate": list(rates),
        "start": [at(i * hours) for i in range(n)],
        "end": [at((i + 1) * hours) for i in range(n)],
        "duration": [hours / 24.0] * n,
        "pumping_level": [np.nan] * n,
        "recovered_before": recovered or [False] * n,
        "source_row": list(range(1, n + 1)),
    })


def field_table(step, start_hours, **columns) -> pd.DataFrame:
    n = len(next(iter(columns.values())))
    data = {"step": [step] * n, "time": [at(start_hours + k / 12.0) for k in range(n)]}
    for col in ("temperature", "ph", "specific_conductance", "dissolved_oxygen", "turbidity"):
        data[col] = columns.get(col, [np.nan] * n)
    data["source_row"] = list(range(1, n + 1))
    return pd.DataFrame(data)[TABLE_COLUMNS["field"]]


STABLE = dict(temperature=[14.1, 14.2, 14.1, 14.15, 14.2], ph=[7.30, 7.32, 7.31, 7.29, 7.30],
              specific_conductance=[512, 515, 510, 514, 513],
              dissolved_oxygen=[2.1, 2.05, 2.0, 2.1, 2.05], turbidity=[1.2, 1.0, 0.9, 1.1, 0.8])


def make_project(rows, steps=None, field=None, qa=None, levels=None, zones=None) -> Project:
    samples = pd.DataFrame(rows)[TABLE_COLUMNS["samples"]]
    samples["source_row"] = range(1, len(samples) + 1)
    kw = {}
    if field is not None:
        kw["field_readings"] = field
    if levels is not None:
        kw["levels"] = levels
    return Project(
        name="Test well 1 step test",
        well=Well("Test well 1", well_radius=0.1, pump_intake_depth=30.0),
        zones=zones or [Zone("upper", 20.0, 40.0, static_level=10.0),
                        Zone("lower", 50.0, 60.0, static_level=10.0)],
        settings=Settings(qa=qa or {}),
        samples=samples,
        steps=steps if steps is not None else steps_table(),
        **kw,
    )


def rules_of(result: QAResult, sample_id=None) -> dict[str, str]:
    f = result.findings
    if sample_id is not None:
        f = f[f["sample_id"] == sample_id]
    return dict(zip(f["rule"], f["severity"], strict=False))


def skipped_rules(result: QAResult) -> dict[str, str]:
    return dict(result.skipped)


# ------------------------------------------------------------------ units and basis

def test_basis_missing_is_error_and_given_basis_passes():
    # the reporting basis of nitrate must be stated (National Research Council 1995: as N and
    # as NO3 differ by 4.43x)
    result = review(make_project([sample("S1", 1, "nitrate", 8.0, reported_basis=""),
                                  sample("S2", 2, "nitrate", 8.1, reported_basis="as N")]))
    assert rules_of(result, "S1") == {"basis_missing": "error"}
    assert rules_of(result, "S2") == {}


def test_basis_that_does_not_apply_is_error():
    result = review(make_project([sample("S1", 1, "nitrate", 8.0, reported_basis="as P")]))
    assert rules_of(result, "S1")["basis_invalid"] == "error"


def nitrate_series(last_value, last_basis="N"):
    return [sample("S1", 1, "nitrate", 8.0), sample("S2", 2, "nitrate", 8.4),
            sample("S3", 3, "nitrate", 8.2),
            sample("S4", 4, "nitrate", last_value, reported_basis=last_basis)]


def test_value_reported_as_ion_but_declared_as_n_is_flagged():
    # steps at 150 and 200 m^3/d are within 50 % of 220 m^3/d (100 is not):
    # 36.5 / median(8.4, 8.2) = 36.5 / 8.3 = 4.40, within 15 % of M(NO3)/M(N) = 4.427
    # (National Research Council 1995: 1 mg/L NO3-N = 4.429 mg/L NO3)
    result = review(make_project(nitrate_series(36.5)))
    assert rules_of(result, "S4") == {"basis_suspect": "warning"}
    assert "4.40 x the median of the other samples at similar rates" in (
        result.findings.loc[0, "message"])
    assert rules_of(result, "S1") == {}


def test_plausible_nitrate_rise_is_not_flagged_as_basis_error():
    # 9.0 / 8.2 = 1.10: far from 4.43
    result = review(make_project(nitrate_series(9.0)))
    assert "basis_suspect" not in rules_of(result)


def test_value_reported_as_n_but_declared_as_ion_is_flagged():
    # the lab sent 8.2 (as N) declared as NO3, so the loader stored 8.2 / 4.427 = 1.852 as N;
    # 1.852 / median(8.4, 8.2) = 0.223 = 1 / 4.48
    result = review(make_project(nitrate_series(8.2 / 4.427, last_basis="as NO3")))
    assert rules_of(result, "S4") == {"basis_suspect": "warning"}
    assert "declared as NO3" in result.findings.loc[0, "message"]


def test_basis_tolerance_is_configurable():
    # 33.0 / 8.3 = 3.98: 10 % below 4.427, flagged at the default 15 %, not at 5 %
    assert "basis_suspect" in rules_of(review(make_project(nitrate_series(33.0))))
    quiet = review(make_project(nitrate_series(33.0), qa={"basis_ratio_tolerance": 0.05}))
    assert "basis_suspect" not in rules_of(quiet)


def test_mixed_units_and_bases_are_info():
    # converted by the loader; noted so that a reviewer sees it (common practice)
    rows = [sample("S1", 1, "arsenic", 0.004, reported_unit="ug/L", reported_value=4.0),
            sample("S2", 2, "arsenic", 0.005, reported_unit="mg/L"),
            sample("S1", 1, "nitrate", 8.0, reported_basis="as N"),
            sample("S2", 2, "nitrate", 8.1, reported_basis="as NO3", reported_value=35.9)]
    result = review(make_project(rows))
    mixed = result.findings[result.findings["rule"].isin(["units_mixed", "bases_mixed"])]
    assert set(mixed["rule"]) == {"units_mixed", "bases_mixed"}
    assert set(mixed["severity"]) == {"info"}
    assert set(mixed["sample_id"]) == {""}
    assert "step 1" in mixed.iloc[0]["message"] and "step 2" in mixed.iloc[0]["message"]


def test_same_units_are_not_noted():
    rows = [sample("S1", 1, "arsenic", 0.004), sample("S2", 2, "arsenic", 0.005)]
    assert "units_mixed" not in rules_of(review(make_project(rows)))


# ------------------------------------------------------------------ lab qualifiers

def test_nondetect_without_limit_is_error_with_limit_is_info():
    # common practice: a "<" result needs its detection limit to bound the fit
    rows = [sample("S1", 1, "arsenic", np.nan, nondetect=True),
            sample("S2", 2, "arsenic", np.nan, nondetect=True, detection_limit=0.001)]
    result = review(make_project(rows))
    assert rules_of(result, "S1") == {"nondetect_no_limit": "error"}
    assert rules_of(result, "S2") == {"nondetect": "info"}


def test_estimated_and_u_flags():
    rows = [sample("S1", 1, "arsenic", 0.004, qualifier="J"),
            sample("S2", 2, "arsenic", 0.004, qualifier="U"),
            sample("S3", 3, "arsenic", 0.004, qualifier=""),
            sample("S4", 4, "arsenic", 0.004, qualifier="R")]
    result = review(make_project(rows))
    assert rules_of(result, "S1") == {"estimated_value": "warning"}
    assert rules_of(result, "S2") == {"nondetect_flag_on_detect": "warning"}
    assert rules_of(result, "S3") == {}
    assert rules_of(result, "S4") == {"rejected_value": "error"}


def test_flag_lists_are_configurable():
    rows = [sample("S1", 1, "arsenic", 0.004, qualifier="Q")]
    assert rules_of(review(make_project(rows))) == {"qualifier_unknown": "info"}
    result = review(make_project(rows, qa={"estimated_flags": ["q"]}))
    assert rules_of(result) == {"estimated_value": "warning"}


def test_detected_value_below_limit_without_flag():
    rows = [sample("S1", 1, "arsenic", 0.0008, detection_limit=0.001),
            sample("S2", 2, "arsenic", 0.0008, detection_limit=0.001, qualifier="J"),
            sample("S3", 3, "arsenic", 0.0015, detection_limit=0.001)]
    result = review(make_project(rows))
    assert rules_of(result, "S1") == {"below_limit_unflagged": "warning"}
    assert "below_limit_unflagged" not in rules_of(result, "S2")
    assert rules_of(result, "S3") == {}


# ------------------------------------------------------------------ duplicates

def test_relative_percent_difference_hand_values():
    # RPD = 100 |a - b| / ((a + b) / 2): 10 and 12 -> 100 * 2 / 11 = 18.18 %;
    # 10 and 13 -> 100 * 3 / 11.5 = 26.09 %
    assert relative_percent_difference(10.0, 12.0) == pytest.approx(18.1818, rel=1e-5)
    assert relative_percent_difference(10.0, 13.0) == pytest.approx(26.0870, rel=1e-5)
    assert relative_percent_difference(0.0, 0.0) == 0.0
    np.testing.assert_allclose(relative_percent_difference([1.0, 2.0], [3.0, 2.0]),
                               [100.0, 0.0], rtol=1e-12, atol=0)


@settings(max_examples=60, deadline=None)
@given(st.floats(0.001, 1e3), st.floats(0.001, 1e3))
def test_rpd_is_symmetric_and_bounded(a, b):
    rpd = relative_percent_difference(a, b)
    assert rpd == pytest.approx(relative_percent_difference(b, a), rel=1e-12)
    assert 0.0 <= rpd <= 200.0


def dup_rows(a, b, **kw):
    return [sample("S2", 2, "nitrate", a, **kw),
            sample("S2D", 2, "nitrate", b, duplicate_of="S2", **kw)]


def test_duplicate_rpd_against_limit():
    # limit 20 % by default (10-20 % typical of sampling plans: common practice)
    assert "duplicate_rpd" not in rules_of(review(make_project(dup_rows(10.0, 12.0))))
    failing = review(make_project(dup_rows(10.0, 13.0)))
    assert rules_of(failing, "S2") == {"duplicate_rpd": "warning"}
    assert "26.1 %" in failing.findings.loc[0, "message"]
    strict = review(make_project(dup_rows(10.0, 12.0), qa={"duplicate_rpd_limit": 10}))
    assert rules_of(strict, "S2") == {"duplicate_rpd": "warning"}


def test_duplicate_near_detection_limit_uses_absolute_difference():
    # both below 5 x DL (common practice): |a - b| is compared with the DL, not the RPD
    ok = dup_rows(0.0020, 0.0028, detection_limit=0.001)  # RPD 33 %, difference 0.0008 < DL
    assert "duplicate_rpd" not in rules_of(review(make_project(ok)))
    bad = dup_rows(0.0020, 0.0035, detection_limit=0.001)  # difference 0.0015 > DL
    assert rules_of(review(make_project(bad)), "S2") == {"duplicate_rpd": "warning"}


def test_duplicate_with_one_nondetect_and_unmatched_duplicate():
    rows = [sample("S1", 1, "arsenic", np.nan, nondetect=True, detection_limit=0.001),
            sample("S1D", 1, "arsenic", 0.009, duplicate_of="S1"),
            sample("S3D", 3, "arsenic", 0.004, duplicate_of="S3")]
    result = review(make_project(rows))
    assert rules_of(result, "S1")["duplicate_rpd"] == "warning"  # 0.009 > 5 x 0.001
    assert rules_of(result, "S3D") == {"duplicate_unmatched": "warning"}


def test_duplicate_of_another_step_is_flagged_not_paired():
    # a "duplicate" of a sample taken at another step (or depth) is no duplicate of its step
    rows = [sample("S1", 1, "nitrate", 10.0), sample("S2D", 2, "nitrate", 20.0, duplicate_of="S1"),
            sample("S3", 3, "nitrate", 9.0), sample("S3Z", 3, "nitrate", 15.0, depth=40.0,
                                                     duplicate_of="S3")]
    result = review(make_project(rows))
    assert rules_of(result, "S2D") == {"duplicate_step": "warning"}
    assert rules_of(result, "S3Z") == {"duplicate_step": "warning"}
    assert "duplicate_rpd" not in rules_of(result)  # 10 / 20 is not compared as a pair


def test_no_duplicates_is_skipped():
    result = review(make_project([sample("S1", 1, "arsenic", 0.004)]))
    assert skipped_rules(result)["duplicate_rpd"] == "no duplicate samples"


# ------------------------------------------------------------------ ion balance

def test_equivalent_weights_against_molmass():
    # equivalent weight = molar mass of the counted formula / |charge| (molmass, PyPI);
    # IUPAC abridged weights differ from molmass's by < 2e-4 relative
    charged = [a for a in CATALOGUE.values() if a.charge != 0]
    assert {a.key for a in charged} >= {"calcium", "magnesium", "sodium", "potassium",
                                        "chloride", "sulfate", "bicarbonate", "carbonate",
                                        "alkalinity", "nitrate", "fluoride"}
    for a in charged:
        formula = a.bases.get(a.canonical_basis, a.ion_formula)
        expected = Formula(formula).mass / abs(a.charge)
        assert a.equivalent_weight() == pytest.approx(expected, rel=2e-4), a.key
    # textbook values: Ca 20.04, HCO3 61.02, SO4 48.03, CaCO3 50.04 mg/meq
    assert CATALOGUE["calcium"].equivalent_weight() == pytest.approx(20.04, abs=0.005)
    assert CATALOGUE["bicarbonate"].equivalent_weight() == pytest.approx(61.02, abs=0.005)
    assert CATALOGUE["sulfate"].equivalent_weight() == pytest.approx(48.03, abs=0.005)
    assert CATALOGUE["alkalinity"].equivalent_weight() == pytest.approx(50.04, abs=0.005)


def majors(sid, step, **mg):
    return [sample(sid, step, k, v) for k, v in mg.items()]


# A typical Ca-HCO3 groundwater, by hand with the meq-per-mg factors tabulated by Hem (1985,
# USGS Water-Supply Paper 2254; each is |z| / M, checked by arithmetic from molar masses):
# Ca 0.04990, Mg 0.08229,
# Na 0.04350, K 0.02558, HCO3 0.01639, SO4 0.02082, Cl 0.02821, NO3-N 1/14.007 = 0.07139.
#   cations: 80 x 0.04990 + 12 x 0.08229 + 25 x 0.04350 + 2 x 0.02558
#            = 3.9920 + 0.98748 + 1.0875 + 0.05116 = 6.1181 meq/L
#   anions:  280 x 0.01639 + 30 x 0.02082 + 25 x 0.02821 + 2 x 0.07139
#            = 4.5892 + 0.6246 + 0.70525 + 0.14278 = 6.0618 meq/L
#   percent difference = 100 (6.1181 - 6.0618) / (6.1181 + 6.0618) = +0.46 %
#   anion sum 3-10 meq/L -> +-2 % (the default tier setting, common practice): acceptable.
# With Ca 100 mg/L instead: cations 7.1161, difference +8.00 %: not acceptable.
CA_HCO3 = dict(calcium=80.0, magnesium=12.0, sodium=25.0, potassium=2.0, bicarbonate=280.0,
               sulfate=30.0, chloride=25.0, nitrate=2.0)


def test_ion_balance_hand_computed_ca_hco3_water():
    rows = majors("S1", 1, **CA_HCO3) + majors("S2", 2, **{**CA_HCO3, "calcium": 100.0})
    result = review(make_project(rows))
    table = result.ion_balance
    assert table.loc["S1", "cations"] == pytest.approx(6.1181, rel=1e-3)
    assert table.loc["S1", "anions"] == pytest.approx(6.0618, rel=1e-3)
    assert table.loc["S1", "percent_difference"] == pytest.approx(0.46, abs=0.02)
    assert table.loc["S2", "cations"] == pytest.approx(7.1161, rel=1e-3)
    assert table.loc["S2", "percent_difference"] == pytest.approx(8.00, abs=0.02)
    assert rules_of(result, "S1") == {}
    assert rules_of(result, "S2") == {"ion_balance": "warning"}
    assert result.findings.loc[0, "analyte"] == ""


def test_ion_balance_dilute_water_uses_absolute_criterion():
    # hand: Ca 12 x 0.04990 + Mg 2 x 0.08229 + Na 5 x 0.04350 + K 1 x 0.02558 = 1.0065 meq/L;
    # HCO3 40 x 0.01639 + SO4 5 x 0.02082 + Cl 5 x 0.02821 = 0.9008 meq/L; difference 0.106
    # meq/L (5.5 %) but the anion sum is under 3 meq/L, where +-0.2 meq/L applies: acceptable.
    # With Na 12: cations 1.3110, difference 0.410 meq/L > 0.2: not acceptable.
    dilute = dict(calcium=12.0, magnesium=2.0, sodium=5.0, potassium=1.0, bicarbonate=40.0,
                  sulfate=5.0, chloride=5.0)
    rows = majors("S1", 1, **dilute) + majors("S2", 2, **{**dilute, "sodium": 12.0})
    result = review(make_project(rows))
    assert result.ion_balance.loc["S1", "difference"] == pytest.approx(0.1057, abs=1e-3)
    assert result.ion_balance.loc["S1", "percent_difference"] == pytest.approx(5.5, abs=0.1)
    assert rules_of(result, "S1") == {}
    assert result.ion_balance.loc["S2", "difference"] == pytest.approx(0.4102, abs=1e-3)
    assert rules_of(result, "S2") == {"ion_balance": "warning"}


def test_ion_balance_acceptance_bands():
    # the default tier settings (common practice): 0-3 meq/L +-0.2 meq/L; 3-10 +-2 %; 10-800 +-5 %
    assert ion_balance_acceptable(2.9, 2.75, OPTS)[0]
    assert not ion_balance_acceptable(3.0, 2.75, OPTS)[0]
    assert ion_balance_acceptable(5.2, 5.0, OPTS)[0]  # 1.96 %
    assert not ion_balance_acceptable(5.25, 5.0, OPTS)[0]  # 2.44 %
    assert ion_balance_acceptable(21.5, 20.0, OPTS)[0]  # 3.61 %
    assert not ion_balance_acceptable(23.0, 20.0, OPTS)[0]  # 6.98 %


def test_alkalinity_stands_in_for_bicarbonate():
    # 229.6 mg/L as CaCO3 / 50.04 = 4.589 meq/L, the same as 280 mg/L HCO3 / 61.02
    water = {k: v for k, v in CA_HCO3.items() if k != "bicarbonate"} | {"alkalinity": 229.6}
    table = ion_balance_table(prepare_samples(pd.DataFrame(majors("S1", 1, **water))))
    assert table.loc["S1", "anions"] == pytest.approx(6.0618, rel=1e-3)


@settings(max_examples=40, deadline=None)
@given(st.floats(0.1, 50.0), st.lists(st.floats(0.5, 300.0), min_size=7, max_size=7))
def test_ion_balance_percent_difference_is_scale_free_and_bounded(scale, values):
    keys = ["calcium", "magnesium", "sodium", "chloride", "sulfate", "bicarbonate", "potassium"]
    base = prepare_samples(pd.DataFrame(majors("S1", 1, **dict(zip(keys, values, strict=True)))))
    scaled = base.assign(value=base["value"] * scale)
    pd_base = ion_balance_table(base).loc["S1", "percent_difference"]
    assert -100.0 <= pd_base <= 100.0
    assert ion_balance_table(scaled).loc["S1", "percent_difference"] == pytest.approx(
        pd_base, rel=1e-9, abs=1e-9)


def test_no_major_ions_is_skipped_and_incomplete_is_noted():
    result = review(make_project([sample("S1", 1, "nitrate", 8.0)]))
    assert skipped_rules(result)["ion_balance"] == "major ions not analysed"
    partial = review(make_project(majors("S1", 1, calcium=50.0, chloride=20.0)))
    assert rules_of(partial, "S1") == {"ion_balance_incomplete": "info"}
    assert "magnesium" in partial.findings.loc[0, "message"]


# ------------------------------------------------------------------ holding times

def timed(analyte, sid, analysed_after_hours, preservation="cooled 4 C", value=1.0):
    return sample(sid, 1, analyte, value, sampled_at=at(3.5),
                  analyzed_at=at(3.5 + analysed_after_hours), preservation=preservation)


def test_nitrate_holding_time_48_hours():
    # 40 CFR 136.3 Table II and 40 CFR 141.23(k)(2): nitrate 48 h cooled to <= 6 C
    result = review(make_project([timed("nitrate", "S1", 46.0), timed("nitrate", "S2", 72.0)]))
    assert "holding_time" not in rules_of(result, "S1")
    assert rules_of(result, "S2") == {"holding_time": "warning"}
    assert "72.0 h" in result.findings.loc[0, "message"]


def test_chlorinated_nitrate_holds_14_days():
    # the default setting (common practice): 14 d for a chlorinated sample
    assert is_chlorinated("chlorinated, cooled to 4 C")
    assert not is_chlorinated("unchlorinated, cooled") and not is_chlorinated("non-chlorinated")
    rows = [timed("nitrate", "S1", 240.0, "chlorinated, cooled to 4 C"),
            timed("nitrate", "S2", 240.0, "unchlorinated, cooled to 4 C")]
    result = review(make_project(rows))
    assert "holding_time" not in rules_of(result, "S1")
    assert rules_of(result, "S2") == {"holding_time": "warning"}


def test_nitrate_nitrite_28_days_with_acid_and_metals_6_months():
    # 40 CFR 136.3 Table II: nitrate+nitrite 28 d with H2SO4 to pH < 2; metals 6 months HNO3
    rows = [timed("nitrate_nitrite", "S1", 20 * 24.0, "H2SO4 pH<2, cooled"),
            timed("nitrate_nitrite", "S2", 30 * 24.0, "H2SO4 pH<2, cooled"),
            timed("nitrate_nitrite", "S3", 20 * 24.0, "cooled"),
            timed("arsenic", "S4", 150 * 24.0, "HNO3 to pH<2"),
            timed("uranium", "S5", 200 * 24.0, "HNO3 to pH<2")]
    result = review(make_project(rows))
    assert rules_of(result, "S1") == {}
    assert rules_of(result, "S2") == {"holding_time": "warning"}
    assert rules_of(result, "S3") == {"preservation": "info"}
    assert rules_of(result, "S4") == {}
    assert rules_of(result, "S5") == {"holding_time": "warning"}


def test_analysed_before_sampled_is_error_and_override_applies():
    result = review(make_project([timed("nitrate", "S1", -2.0)]))
    assert rules_of(result, "S1") == {"holding_time_order": "error"}
    relaxed = review(make_project([timed("nitrate", "S1", 72.0)],
                                  qa={"holding_times": {"NO3": 3}}))
    assert "holding_time" not in rules_of(relaxed)


def test_missing_times_skip_holding_times():
    result = review(make_project([sample("S1", 1, "nitrate", 8.0)]))
    assert skipped_rules(result)["holding_time"] == "no sampled_at/analyzed_at times"


# ------------------------------------------------------------------ field stabilisation

def test_field_tolerances():
    # the default tolerance settings (common practice, after USGS NFM A6): SC +-5 % up to 100 uS/cm,
    # +-3 % above; turbidity +-0.5 FNU or +-10 %, whichever is greater
    assert field_tolerance("specific_conductance", 80.0, OPTS) == pytest.approx(4.0, rel=1e-12)
    assert field_tolerance("specific_conductance", 100.0, OPTS) == pytest.approx(5.0, rel=1e-12)
    assert field_tolerance("specific_conductance", 200.0, OPTS) == pytest.approx(6.0, rel=1e-12)
    assert field_tolerance("turbidity", 2.0, OPTS) == pytest.approx(0.5, rel=1e-12)
    assert field_tolerance("turbidity", 20.0, OPTS) == pytest.approx(2.0, rel=1e-12)
    assert field_tolerance("temperature", 14.0, OPTS) == 0.2
    assert field_tolerance("ph", 7.0, OPTS) == 0.1
    assert field_tolerance("dissolved_oxygen", 2.0, OPTS) == 0.2


def stab_project(field, sampled_hours=3.5):
    rows = [sample("S1", 1, "nitrate", 8.0, sampled_at=at(sampled_hours))]
    return make_project(rows, field=field)


def test_stable_readings_pass():
    # last five readings at 2:35-2:55 h, sample at 3:30 h; a later reading (after the sample)
    # that would break the temperature criterion is ignored
    field = field_table(1, 2.0 + 7 / 12.0, **STABLE)
    late = field_table(1, 3.75, temperature=[18.0], ph=[7.3], specific_conductance=[513],
                       dissolved_oxygen=[2.05], turbidity=[1.0])
    result = review(stab_project(pd.concat([field, late], ignore_index=True)))
    assert not {"field_stability", "field_readings_few"} & set(rules_of(result))


def test_drifting_temperature_fails():
    # 13.6 ... 14.4: 0.4 C from the median 14.0, outside +-0.2 C
    field = field_table(1, 2.5, **{**STABLE, "temperature": [13.6, 13.8, 14.0, 14.2, 14.4]})
    result = review(stab_project(field))
    assert rules_of(result, "S1")["field_stability"] == "warning"
    message = result.findings.set_index("rule").loc["field_stability", "message"]
    assert "temperature" in message and "pH" not in message


def test_reading_exactly_at_the_criterion_passes():
    # 15.47 - 15.27 = 0.2 C exactly (in decimal): within +-0.2 C despite binary rounding
    field = field_table(1, 2.5, **{**STABLE, "temperature": [15.47, 15.39, 15.27, 15.20, 15.11]})
    assert "field_stability" not in rules_of(review(stab_project(field)))


def test_specific_conductance_criterion_by_range():
    # 150 uS/cm: +-3 % = 4.5; readings 150, 152, 149, 156, 151 -> median 151, deviation 5
    sc = {**STABLE, "specific_conductance": [150, 152, 149, 156, 151]}
    assert rules_of(review(stab_project(field_table(1, 2.5, **sc))))["field_stability"]
    # 90 uS/cm: +-5 % = 4.5; readings 90, 92, 89, 93, 91 -> median 91, deviation 2
    sc = {**STABLE, "specific_conductance": [90, 92, 89, 93, 91]}
    assert "field_stability" not in rules_of(review(stab_project(field_table(1, 2.5, **sc))))


def test_fewer_than_five_readings():
    field = field_table(1, 2.5, **{k: v[:4] for k, v in STABLE.items()})
    result = review(stab_project(field))
    assert rules_of(result, "S1")["field_readings_few"] == "warning"
    assert "4 field readings" in result.findings.set_index("rule").loc["field_readings_few",
                                                                           "message"]


def test_readings_without_step_are_placed_by_time():
    # no step column: readings at 2:30-2:50 h fall in step 1 (0-4 h) by their time
    result = review(stab_project(field_table(np.nan, 2.5, **STABLE)))
    assert not {"field_stability", "field_readings_few"} & set(rules_of(result))
    drifting = field_table(np.nan, 2.5, **{**STABLE, "ph": [7.0, 7.1, 7.2, 7.3, 7.4]})
    assert rules_of(review(stab_project(drifting)))["field_stability"] == "warning"


def test_no_field_readings_is_skipped():
    result = review(make_project([sample("S1", 1, "nitrate", 8.0)]))
    assert skipped_rules(result)["field_stability"] == "no field readings"


# ------------------------------------------------------------------ purge volume

def test_casing_volume_and_pumped_volume():
    # V = pi r^2 L: r 0.1 m, L 50 m -> 1.5708 m^3
    assert casing_volume(0.1, 50.0) == pytest.approx(np.pi * 0.5, rel=1e-12)
    schedule = step_schedule(steps_table(rates=(100.0, 200.0), hours=24.0))
    # 100 m^3/d x 1 d + 200 m^3/d x 0.5 d = 200 m^3
    assert pumped_volume(schedule, "2", at(36.0)) == pytest.approx((200.0, True), rel=1e-12)
    # without a sample time: as if taken at the end of step 2 -> 300 m^3
    assert pumped_volume(schedule, "2", pd.NaT) == pytest.approx((300.0, False), rel=1e-12)
    # after a recovery before step 2, only step 2 counts: 200 x 0.5 = 100 m^3
    recovered = step_schedule(steps_table((100.0, 200.0), 24.0, recovered=[False, True]))
    assert pumped_volume(recovered, "2", at(36.0))[0] == pytest.approx(100.0, rel=1e-12)


def purge_rows(hours):
    return [sample("S1", 1, "nitrate", 8.0, sampled_at=at(hours))]


def test_purge_volume_below_three_casing_volumes():
    # casing: pi 0.1^2 (60 - 10) = 1.5708 m^3; 30 min at 100 m^3/d = 2.083 m^3 = 1.33 volumes
    # (three to five casing volumes: common practice)
    result = review(make_project(purge_rows(0.5)))
    assert rules_of(result, "S1")["purge_volume"] == "warning"
    assert "1.33 casing volumes" in result.findings.set_index("rule").loc["purge_volume",
                                                                          "message"]
    # 3.5 h: 14.58 m^3 = 9.3 volumes
    assert "purge_volume" not in rules_of(review(make_project(purge_rows(3.5))))


def test_low_purge_volume_with_stable_parameters_is_info():
    field = field_table(1, 0.05, **STABLE)  # readings from 3 to 23 min, sample at 30 min
    result = review(make_project(purge_rows(0.5), field=field))
    assert rules_of(result, "S1")["purge_volume"] == "info"


def test_static_level_from_levels_and_settings():
    # a level of 40 m before pumping -> column 20 m, casing 0.628 m^3; 2.083 m^3 = 3.3 volumes
    levels = pd.DataFrame({"time": [at(-0.2)], "level": [40.0], "source_row": [1]})
    assert "purge_volume" not in rules_of(review(make_project(purge_rows(0.5), levels=levels)))
    # qa.static_level (a length with a unit) overrides the record: 10 ft = 3.048 m
    result = review(make_project(purge_rows(0.5), levels=levels, qa={"static_level": "10 ft"}))
    assert rules_of(result, "S1")["purge_volume"] == "warning"


def test_purge_column_from_the_shallowest_zone_level_without_a_well_level():
    # zones at 4 m and 16 m (arithmetic mean 10 m): the well's composite level, a
    # conductance-weighted mean of the two (Konikow and others 2009, USGS TM 6-A30), is not
    # known to the review; the shallowest level 4 m bounds it, so the column is the longest
    # possible, 60 - 4 = 56 m: casing pi 0.1^2 x 56 = 1.759 m^3, 2.083 m^3 = 1.18 volumes
    zones = [Zone("upper", 20.0, 40.0, static_level=4.0),
             Zone("lower", 50.0, 60.0, static_level=16.0)]
    result = review(make_project(purge_rows(0.5), zones=zones))
    message = result.findings.set_index("rule").loc["purge_volume", "message"]
    assert "1.18 casing volumes" in message and "shallowest zone static level" in message
    # the well's own static level comes first: 10 m, 1.33 volumes as above
    project = make_project(purge_rows(0.5), zones=zones)
    project.well = replace(project.well, static_level=10.0)
    message = review(project).findings.set_index("rule").loc["purge_volume", "message"]
    assert "1.33 casing volumes" in message


def test_purge_skipped_without_static_level():
    zones = [Zone("upper", 20.0, 40.0), Zone("lower", 50.0, 60.0)]
    result = review(make_project(purge_rows(0.5), zones=zones))
    assert skipped_rules(result)["purge_volume"].startswith("no static water level")


# ------------------------------------------------------------------ timing

def test_early_and_late_samples():
    # step 1 runs 0-4 h: a sample at 1 h is 25 % in (< 50 %, common practice)
    rows = [sample("S1", 1, "nitrate", 8.0, sampled_at=at(1.0)),
            sample("S2", 2, "nitrate", 8.0, sampled_at=at(7.5)),
            sample("S3", 3, "nitrate", 8.0, sampled_at=at(13.0)),
            sample("S9", 9, "nitrate", 8.0)]
    result = review(make_project(rows))
    assert rules_of(result, "S1")["early_sample"] == "warning"
    assert "early_sample" not in rules_of(result, "S2")
    assert rules_of(result, "S3")["late_sample"] == "warning"
    assert rules_of(result, "S9")["step_unknown"] == "error"
    relaxed = review(make_project(rows[:1], qa={"early_sample_share": 0.2}))
    assert "early_sample" not in rules_of(relaxed)


def test_no_steps_table_skips_purge_and_timing():
    project = make_project(purge_rows(0.5), steps=steps_table().iloc[:0])
    skipped = skipped_rules(review(project))
    assert skipped["purge_volume"] == "no steps table" == skipped["early_sample"]


def test_missing_sample_times_skip_timing():
    result = review(make_project([sample("S1", 1, "nitrate", 8.0)]))
    assert "no sample or step times" in skipped_rules(result)["early_sample"]


# ------------------------------------------------------------------ result and weights

def weights_project(qa=None):
    rows = [sample("S1", 1, "nitrate", 8.0), sample("S1", 1, "arsenic", 0.004),
            sample("S2", 2, "nitrate", 8.1, qualifier="J"), sample("S2", 2, "arsenic", 0.004),
            sample("S3", 3, "arsenic", np.nan, nondetect=True, detection_limit=0.001)]
    return make_project(rows, qa=qa)


def test_sample_weights_modes():
    result = review(weights_project({"downweight_factor": 4}))
    keep = result.sample_weights()
    assert list(keep.index) == ["S1", "S2", "S3"]
    assert keep["used"].all() and (keep["sigma_factor"] == 1.0).all()
    assert "estimated_value" in keep.loc["S2", "reason"] and keep.loc["S3", "reason"] == ""
    exclude = result.sample_weights("exclude")
    assert exclude["used"].to_dict() == {"S1": True, "S2": False, "S3": True}
    down = result.sample_weights("downweight")
    assert down["used"].all()
    assert down["sigma_factor"].to_dict() == {"S1": 1.0, "S2": 4.0, "S3": 1.0}
    per = result.sample_weights("exclude", per_analyte=True)
    assert not per.loc[("S2", "nitrate"), "used"] and per.loc[("S2", "arsenic"), "used"]
    with pytest.raises(InputError, match="weighting mode"):
        result.sample_weights("drop")


def test_severity_order_override_and_exit_threshold():
    result = review(weights_project())
    assert severity_rank("info") < severity_rank("warning") < severity_rank("error")
    assert worst_severity(result.findings) == "warning" == result.worst()
    assert at_or_above(result.findings, "warning") and not at_or_above(result.findings, "error")
    assert list(result.findings["severity"]) == sorted(result.findings["severity"],
                                                       key=severity_rank, reverse=True)
    softened = review(weights_project({"severity": {"estimated_value": "info"}}))
    assert softened.worst() == "info"
    assert softened.sample_weights("exclude")["used"].all()
    assert worst_severity(softened.findings.iloc[:0]) is None


def test_summary_json_and_csv(tmp_path: Path):
    result = review(weights_project())
    lines = result.summary_lines()
    assert lines == ["error: 0", "warning: 1 (estimated_value 1)", "info: 1 (nondetect 1)"]
    payload = json.loads(result.to_json())
    assert payload["counts"] == {"error": 0, "warning": 1, "info": 1}
    assert {f["rule"] for f in payload["findings"]} == {"estimated_value", "nondetect"}
    assert {"rule": "field_stability", "reason": "no field readings"} in payload["skipped"]
    path = result.to_csv(tmp_path / "qa.csv")
    text = path.read_text(encoding="utf-8")
    assert text.startswith("# Lab and field review") and "planning aid" in text
    back = pd.read_csv(path, comment="#")
    assert list(back.columns) == list(result.findings.columns)
    assert len(back) == 2


def test_bad_options_are_input_errors():
    with pytest.raises(InputError, match="unknown QA option") as err:
        qa_options({"rpd": 20})
    assert err.value.field == "qa.rpd"
    with pytest.raises(InputError, match="positive"):
        qa_options({"duplicate_rpd_limit": -5})
    with pytest.raises(InputError, match="severity"):
        qa_options({"severity": {"estimated_value": "fatal"}})
    # 4 in = 0.1016 m (1 in = 0.0254 m exactly, by definition)
    assert qa_options({"casing_radius": "4 in"})["casing_radius"] == pytest.approx(0.1016,
                                                                                   rel=1e-12)
    assert set(qa_options(None)) == set(QA_DEFAULTS)


def test_project_without_samples():
    project = make_project([sample("S1", 1, "nitrate", 8.0)])
    project.samples = project.samples.iloc[:0]
    result = review(project)
    assert result.findings.empty and result.skipped == [("all", "no samples")]
    assert result.sample_weights().empty


def test_no_unchecked_source_reaches_a_user():
    # every fact a user receives is cited (the project's record of checked facts names a
    # primary or a secondary source) or is a setting described as common practice
    import blendq

    root = Path(blendq.__file__).parent
    for path in [*root.rglob("*.py"), *(root.parent / "docs").glob("*.md")]:
        assert "from memory" not in path.read_text(encoding="utf-8").lower(), path
    rows = [sample(f"S{k}", k, "nitrate", 5.0 + k, sampled_at=at(k), analyzed_at=at(k + 60))
            for k in (1, 2, 3)]
    text = review(make_project(rows)).to_json()
    assert "memory" not in text
    assert "secondary" in text  # the holding-time rule cites its restating source
