"""Tests of blendq.fit.observations: the fitting rows of each analyte.

Sources:
- Censored data (Helsel, D.R. 2012, Statistics for Censored Environmental Data, 2nd ed.): a non-detect is an inequality at its detection limit, not a value such as DL/2,
  so it becomes a censored row and never a detected value.
- The uncertainty floors in lab_sigma (half the detection limit; 0.1 % of the largest result)
  are common practice, stated in its docstring; tested here as documented behaviour. A stated
  uncertainty is never floored.
- Duplicates: the sample standard deviation of a pair is |a - b| / sqrt(2) (definition of the
  sample variance with n - 1 = 1); the combination rule is the one stated in docs/methods.md,
  section 6.1, checked here with hand-computed numbers.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import synthetic_wells as sw
from hypothesis import given, settings
from hypothesis import strategies as st

from blendq.fit.observations import combine_duplicates, duplicate_groups, lab_sigma, quality_data
from blendq.inputs.loader import load_project


def test_lab_sigma_rules():
    values = np.array([10.0, 2.0, 0.0, 5.0])
    stated = np.array([0.5, np.nan, np.nan, 0.0])
    dl = np.array([np.nan, np.nan, np.nan, np.nan])
    # stated sd where given (> 0); 5 % of the value otherwise; floor 0.1 % of 10 = 0.01
    np.testing.assert_allclose(lab_sigma(values, stated, dl, 0.05), [0.5, 0.1, 0.01, 0.25],
                               rtol=1e-12)
    # each result's own detection limit sets a floor of half its value on an unstated sd
    # (the NaN limit takes the median 0.4 of those given); the stated 0.5 is kept as stated
    dl = np.array([0.4, np.nan, 0.4, 1.0])
    np.testing.assert_allclose(lab_sigma(values, stated, dl, 0.05), [0.5, 0.2, 0.2, 0.5],
                               rtol=1e-12)
    # the fraction is a setting
    np.testing.assert_allclose(lab_sigma(values, stated, dl, 0.05, 0.25), [0.5, 0.1, 0.1, 0.25],
                               rtol=1e-12)


def test_stated_uncertainty_used_as_stated():
    # 5.6 ug/L reported with 5 % (0.28 ug/L) by a lab whose detection limit is 3 ug/L: the
    # stated 0.28 ug/L stands (a floor of half the limit would have made it 1.5 ug/L)
    values = np.array([0.0056, 0.0041])
    stated = np.array([0.05 * 0.0056, np.nan])
    dl = np.array([0.003, 0.003])
    np.testing.assert_allclose(lab_sigma(values, stated, dl, 0.05), [0.00028, 0.0015],
                               rtol=1e-12)
    # even a stated sd far below any floor is used as given
    np.testing.assert_allclose(lab_sigma([10.0, 0.0], [1e-6, np.nan], [1.0, 1.0], 0.05),
                               [1e-6, 0.5], rtol=1e-12)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.floats(0.0, 1e3), st.floats(1e-9, 1e2), st.floats(1e-6, 1e2)),
                min_size=1, max_size=6), st.floats(0.0, 1.0))
def test_a_stated_uncertainty_is_never_changed(rows, fraction):
    values, stated, dl = (np.array(col) for col in zip(*rows, strict=True))
    np.testing.assert_array_equal(lab_sigma(values, stated, dl, 0.05, fraction), stated)


def test_quality_data_keeps_stated_uncertainty_near_the_detection_limit():
    p = sw.project(nondetect_limits={"arsenic": 0.006})
    ars = p.samples[(p.samples["analyte"] == "arsenic") & ~p.samples["nondetect"].astype(bool)]
    p.samples.loc[ars.index, "uncertainty"] = 0.05 * ars["value"].astype(float)
    data = quality_data(p)["arsenic"]
    expected = 0.05 * ars.set_index("sample_id").loc[data.sample_id, "value"].astype(float)
    np.testing.assert_allclose(data.sigma, expected.to_numpy(), rtol=1e-12)
    assert data.sigma.min() < 0.003  # below half the detection limit, as stated


def test_combine_detected_pair():
    # a = 7.27, b = 7.18 with sds 0.29 and 0.28: one result's sd (rms 0.285044) exceeds the
    # pair's spread |a - b| / sqrt(2) = 0.063640, so the step keeps one result's weight
    cens, v, sd = combine_duplicates([7.27, 7.18], [0.29, 0.28], [False, False], [0.05, 0.05])
    assert not cens
    np.testing.assert_allclose(v, 7.225, rtol=1e-12)
    np.testing.assert_allclose(sd, np.sqrt((0.29 ** 2 + 0.28 ** 2) / 2), rtol=1e-12)
    # a pair that disagrees beyond its stated errors: the spread sets the sd
    cens, v, sd = combine_duplicates([8.0, 10.0], [0.3, 0.3], [False, False], [0.05, 0.05])
    np.testing.assert_allclose([v, sd], [9.0, 2.0 / np.sqrt(2.0)], rtol=1e-12)
    # three results: sample sd with n - 1 = 2
    cens, v, sd = combine_duplicates([1.0, 2.0, 3.0], [0.1, 0.1, 0.1], [False] * 3, [np.nan] * 3)
    np.testing.assert_allclose([v, sd], [2.0, 1.0], rtol=1e-12)


def test_combine_pair_with_a_nondetect():
    # detected 0.8 and "< 1.0": they agree; the detected result stands with its own sd
    cens, v, sd = combine_duplicates([0.8, np.nan], [0.05, np.nan], [False, True], [0.1, 1.0])
    assert not cens
    np.testing.assert_allclose([v, sd], [0.8, 0.05], rtol=1e-12)
    # detected 3.0 and "< 1.0": they disagree by at least 2.0; sd >= 2 / sqrt(2)
    cens, v, sd = combine_duplicates([3.0, np.nan], [0.15, np.nan], [False, True], [0.1, 1.0])
    np.testing.assert_allclose([v, sd], [3.0, np.sqrt(2.0)], rtol=1e-12)
    # two non-detects: one censored row at the smaller limit
    cens, v, sd = combine_duplicates([np.nan, np.nan], [np.nan, np.nan], [True, True], [0.5, 0.2])
    assert cens and v == 0.2 and np.isnan(sd)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.floats(0.0, 100.0), st.floats(1e-3, 10.0)), min_size=1,
                max_size=4))
def test_combined_step_never_weighs_more_than_one_result(rows):
    value = np.array([r[0] for r in rows])
    sigma = np.array([r[1] for r in rows])
    cens, v, sd = combine_duplicates(value, sigma, np.zeros(len(rows), bool),
                                     np.full(len(rows), np.nan))
    assert not cens
    assert value.min() - 1e-9 <= v <= value.max() + 1e-9
    # the weight of the combined row is at most that of one result of rms uncertainty
    assert sd >= np.sqrt(np.mean(sigma ** 2)) * (1 - 1e-12)


def test_duplicate_groups():
    s = pd.DataFrame(dict(
        sample_id=["A", "A-D", "A-DD", "B", "B-D", "C-D", "E"],
        step=["S1", "S1", "S1", "S2", "S3", "S2", "S1"],
        depth=[np.nan, np.nan, np.nan, np.nan, np.nan, np.nan, 40.0],
        duplicate_of=["", "A", "A-D", "", "B", "C", "A"]))
    # A-DD is a duplicate of a duplicate; B-D names B at another step and C-D a missing
    # primary: both stay samples of their own; E was taken at a depth, not at the discharge
    np.testing.assert_array_equal(duplicate_groups(s), [0, 0, 0, 3, 4, 5, 6])


def test_quality_rows_discharge_depth_and_nondetects():
    p = sw.project(nondetect_limits={"arsenic": 0.006})
    data = quality_data(p)
    assert list(data) == ["nitrate", "arsenic"]
    no3 = data["nitrate"]
    # five discharge samples and three depth samples, none censored
    assert len(no3.value) == 8 and len(no3.cens_limit) == 0 and no3.n_obs == 8
    assert np.isnan(no3.depth[:5]).all()
    np.testing.assert_array_equal(no3.depth[5:], [45.0, 65.0, 85.0])
    np.testing.assert_array_equal(no3.rate[:5], sw.RATES)
    np.testing.assert_array_equal(no3.rate[5:], sw.RATES[-1])
    np.testing.assert_array_equal(no3.step[:5], ["S1", "S2", "S3", "S4", "S5"])
    ars = data["arsenic"]
    samples = p.samples[p.samples["analyte"] == "arsenic"]
    nd = samples["nondetect"].to_numpy(bool)
    assert nd.any() and (~nd).any()
    # every non-detect is a censored row at its limit, never a detected value
    assert len(ars.cens_limit) == nd.sum() and len(ars.value) == (~nd).sum()
    np.testing.assert_array_equal(ars.cens_limit, 0.006)
    assert set(ars.cens_sample_id) == set(samples.loc[nd, "sample_id"])
    assert not set(ars.sample_id) & set(ars.cens_sample_id)
    np.testing.assert_array_equal(ars.cens_rate, samples.loc[nd, "step"].map(
        dict(zip([f"S{k + 1}" for k in range(5)], sw.RATES, strict=True))).to_numpy(float))
    # the detection limit sets a floor of half its value on the detected results' sd
    assert np.all(ars.sigma >= 0.003 - 1e-15)


def test_unknown_step_dropped_and_duplicates_combined():
    p = sw.project()
    base = quality_data(p)["nitrate"]
    first = p.samples["sample_id"].iloc[0]
    extra = p.samples.iloc[[0, 0]].copy()
    extra["sample_id"] = ["DUP-1", "ORPHAN-1"]
    extra["duplicate_of"] = [first, ""]
    extra["step"] = ["S1", "S9"]  # S9 is not a step of the test
    p.samples = pd.concat([p.samples, extra], ignore_index=True)
    data = quality_data(p)["nitrate"]
    assert "ORPHAN-1" not in set(data.sample_id)
    # an identical duplicate adds no weight: the same rows as without it, one renamed
    assert len(data.value) == len(base.value) == 8
    assert data.sample_id[0] == f"{first}+DUP-1"
    np.testing.assert_allclose(data.value, base.value, rtol=1e-12)
    np.testing.assert_allclose(data.sigma, base.sigma, rtol=1e-12)


def test_demo_field_duplicate_is_one_observation():
    from pathlib import Path

    import blendq

    p = load_project(Path(blendq.__file__).parent / "data" / "demo")
    data = quality_data(p)
    no3 = data["nitrate"]
    # TH2-3 (7.27 mg/L as N, sd 0.2908) and TH2-3D (31.8 mg/L as NO3 = 7.183772 as N, sd 4 %)
    k = list(no3.sample_id).index("TH2-3+TH2-3D")
    assert list(no3.step).count("S3") == 1 and len(no3.value) == 5
    dup = p.samples[(p.samples["sample_id"] == "TH2-3D") & (p.samples["analyte"] == "nitrate")]
    b, sb = float(dup["value"].iloc[0]), float(dup["uncertainty"].iloc[0])
    np.testing.assert_allclose(b, 31.8 * 14.0067 / 62.0049, rtol=2e-4)
    np.testing.assert_allclose(no3.value[k], (7.27 + b) / 2, rtol=1e-12)
    np.testing.assert_allclose(no3.sigma[k], np.sqrt((0.2908 ** 2 + sb ** 2) / 2), rtol=1e-12)
    ars = data["arsenic"]
    k = list(ars.sample_id).index("TH2-3+TH2-3D")
    np.testing.assert_allclose([ars.value[k], ars.sigma[k]],
                               [0.00705, np.sqrt((0.000426 ** 2 + 0.00042 ** 2) / 2)], rtol=1e-12)


def test_sample_use_factors():
    p = sw.project(relative_error=0.05, seed=1)
    ids = p.samples["sample_id"].tolist()
    base = quality_data(p)["nitrate"]
    use = pd.DataFrame(dict(sample_id=[ids[0], ids[1]], used=[True, False], sigma_factor=[2.0, 1.0]))
    data = quality_data(p, use)["nitrate"]
    assert ids[1] not in set(data.sample_id)
    np.testing.assert_allclose(data.sigma[0], 2.0 * base.sigma[0], rtol=1e-12)
    np.testing.assert_allclose(data.sigma[1:], base.sigma[2:], rtol=1e-12)


@pytest.mark.parametrize("table", ["empty", "no_steps"])
def test_no_usable_samples(table):
    p = sw.project()
    if table == "empty":
        p.samples = p.samples.iloc[0:0]
    else:
        p.samples = p.samples.assign(step="X")
    assert quality_data(p) == {}


# ------------------------------------------------------------------ crossflow memory

def test_returned_water_sigma_adds_in_quadrature():
    from blendq.fit.observations import returned_water_sigma

    # hand calculation: sqrt(0.3^2 + 0.4^2) = 0.5
    np.testing.assert_allclose(returned_water_sigma([0.3, 0.3], [0.4, -0.4]), [0.5, 0.5],
                               rtol=1e-12)
    np.testing.assert_allclose(returned_water_sigma([0.3], [np.nan]), [0.3], rtol=1e-12)


def _use_rows():
    return pd.DataFrame({"sample_id": ["A", "A", "B", "C"],
                         "analyte": ["nitrate", "arsenic", "nitrate", "nitrate"],
                         "used": [True, True, True, True], "sigma_factor": 1.0,
                         "reason": ["", "", "kept despite warning x", ""]})


def test_returned_water_use_rule():
    from blendq.fit.observations import returned_water_use

    memory = pd.DataFrame({"sample_id": ["A", "B", "C"], "returned_fraction": [0.05, 0.3, 0.01]})
    bias = pd.DataFrame({"nitrate": [0.6, 2.0, 0.1], "arsenic": [-0.001, 0.0, 0.0]},
                        index=["A", "B", "C"])
    out = returned_water_use(_use_rows(), memory, bias, flag_above=0.02, exclude_above=0.25)
    a = out.set_index(["sample_id", "analyte"])
    # A: flagged (5 % > 2 %), widened by |bias|; B: 30 % > 25 %, left out; C: under the flag
    assert a.loc[("A", "nitrate"), "added_sigma"] == pytest.approx(0.6, rel=1e-12)
    assert a.loc[("A", "arsenic"), "added_sigma"] == pytest.approx(0.001, rel=1e-12)
    assert not a.loc[("B", "nitrate"), "used"]
    assert "kept despite warning x; excluded: 30.0 % returned water" in a.loc[("B", "nitrate"),
                                                                               "reason"]
    assert a.loc[("C", "nitrate"), "added_sigma"] == 0.0 and a.loc[("C", "nitrate"), "used"]


@settings(max_examples=80, deadline=None)
@given(sigma=st.floats(1e-6, 1e3), b1=st.floats(-1e3, 1e3), b2=st.floats(-1e3, 1e3),
       f=st.floats(0.0, 1.0))
def test_a_flagged_samples_weight_never_rises(sigma, b1, b2, f):
    from blendq.fit.observations import returned_water_sigma, returned_water_use

    lo, hi = sorted((abs(b1), abs(b2)))
    s_lo, s_hi = returned_water_sigma([sigma, sigma], [lo, hi])
    assert s_lo >= sigma and s_hi >= s_lo  # weight 1/sigma^2 never rises, falls with the error
    use = _use_rows()
    memory = pd.DataFrame({"sample_id": ["A", "B", "C"], "returned_fraction": [f, f, f]})
    bias = pd.DataFrame({"nitrate": [b1, b1, b1], "arsenic": [b2, b2, b2]},
                        index=["A", "B", "C"])
    out = returned_water_use(use, memory, bias, flag_above=0.02, exclude_above=0.25)
    assert (out["added_sigma"] >= 0).all()
    assert not (out["used"] & ~use["used"]).any()  # nothing left out comes back


def test_quality_data_widens_by_added_sigma():
    from pathlib import Path

    import blendq

    p = load_project(Path(blendq.__file__).parent / "data" / "demo")
    base = quality_data(p)["nitrate"]
    use = pd.DataFrame({"sample_id": ["TH2-1"], "analyte": ["nitrate"], "used": [True],
                        "sigma_factor": [1.0], "added_sigma": [0.5]})
    wide = quality_data(p, sample_use=use)["nitrate"]
    k = list(base.sample_id).index("TH2-1")
    np.testing.assert_allclose(wide.sigma[k], np.hypot(base.sigma[k], 0.5), rtol=1e-12)
    others = [i for i in range(len(base.sigma)) if i != k]
    np.testing.assert_allclose(wide.sigma[others], base.sigma[others], rtol=1e-12)
