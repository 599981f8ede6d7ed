"""Tests of blendq.fit.observations: the fitting rows of each analyte.

Sources:
- Censored data (Helsel, D.R. 2012, Statistics for Censored Environmental Data, 2nd ed.): a non-detect is an inequality at its detection limit, not a value such as DL/2,
  so it becomes a censored row and never a detected value.
- The uncertainty floors in lab_sigma (half the detection limit; 0.1 % of the largest result)
  are common practice, stated in its docstring; tested here as documented behaviour.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import synthetic_wells as sw

from blendq.fit.observations import lab_sigma, quality_data


def test_lab_sigma_rules():
    values = np.array([10.0, 2.0, 0.0, 5.0])
    stated = np.array([0.5, np.nan, np.nan, 0.0])
    dl = np.array([np.nan, np.nan, np.nan, np.nan])
    # stated sd where given (> 0); 5 % of the value otherwise; floor 0.1 % of 10 = 0.01
    np.testing.assert_allclose(lab_sigma(values, stated, dl, 0.05), [0.5, 0.1, 0.01, 0.25],
                               rtol=1e-12)
    # a detection limit of 0.4 (median of the finite ones) sets a floor of 0.2
    dl = np.array([0.4, np.nan, 0.4, 1.0])
    np.testing.assert_allclose(lab_sigma(values, stated, dl, 0.05), [0.5, 0.2, 0.2, 0.25],
                               rtol=1e-12)


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


def test_unknown_step_dropped_and_duplicates_kept():
    p = sw.project()
    extra = p.samples.iloc[[0, 0]].copy()
    extra["sample_id"] = ["DUP-1", "ORPHAN-1"]
    extra["duplicate_of"] = [p.samples["sample_id"].iloc[0], ""]
    extra["step"] = ["S1", "S9"]  # S9 is not a step of the test
    p.samples = pd.concat([p.samples, extra], ignore_index=True)
    data = quality_data(p)
    ids = set(data["nitrate"].sample_id)
    assert "DUP-1" in ids and "ORPHAN-1" not in ids
    assert len(data["nitrate"].value) == 9


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
