"""Tests of blendq.review.outliers (gross outliers) and blendq.review.decisions (the reviewer's
decisions recorded in the project).

Source of the check values: a unit slip of mg/L for ug/L multiplies a result by exactly 1000
(1 mg = 1000 ug, SI prefixes, NIST SP 811); a blend of the other steps lies between their
smallest and largest results (a weighted mean with positive weights), so a result 10 times
outside that range (the gross_outlier_factor setting, common practice) is no blend of them.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from test_findings import make_project, sample

from blendq.errors import InputError
from blendq.review import decisions
from blendq.review.findings import review

AS_UG = [5.5, 6.7, 7.1, 7.6]  # arsenic [ug/L] of steps 1-4, a smooth rise with rate


def arsenic_rows(values_mg):
    return [sample(f"S{k}", k, "arsenic", v, source_row=k)
            for k, v in enumerate(values_mg, start=1)]


def test_unit_typo_is_an_error_naming_file_and_row():
    values = [v / 1000 for v in AS_UG]
    values[1] = 8.0  # "8.0 mg/L" where the lab meant 8.0 ug/L: 1000 x
    p = make_project(arsenic_rows(values))
    p = replace(p, files={"samples": "lab.csv"})
    f = review(p).findings
    hit = f[f["rule"] == "gross_outlier"]
    assert len(hit) == 1
    assert hit.iloc[0]["severity"] == "error"
    assert hit.iloc[0]["sample_id"] == "S2"
    msg = hit.iloc[0]["message"]
    assert "lab.csv row 2" in msg
    # 8000 ug/L against a largest other result of 7.6 ug/L: 1053 times (by hand)
    assert f"{8.0 / 0.0076:.3g} times" in msg
    assert "common practice" in hit.iloc[0]["source"]


def test_smooth_series_and_small_jumps_pass():
    p = make_project(arsenic_rows([v / 1000 for v in AS_UG]))
    assert "gross_outlier" not in set(review(p).findings["rule"])
    # a step at 9 times the others stays below the factor of 10
    values = [0.001, 0.001, 0.009, 0.001]
    p = make_project(arsenic_rows(values))
    assert "gross_outlier" not in set(review(p).findings["rule"])


def test_low_outlier_and_factor_setting():
    values = [v / 1000 for v in AS_UG]
    values[3] = 7.6e-6  # ug/L written as ng/L-sized: 1/1000 of the smallest
    p = make_project(arsenic_rows(values))
    assert review(p).findings.query("rule == 'gross_outlier'")["sample_id"].tolist() == ["S4"]
    values = [0.001, 0.001, 0.009, 0.001]
    p = make_project(arsenic_rows(values))
    p = replace(p, settings=replace(p.settings, gross_outlier_factor=5.0))
    assert review(p).findings.query("rule == 'gross_outlier'")["sample_id"].tolist() == ["S3"]


def test_too_few_steps_are_not_judged():
    p = make_project(arsenic_rows([0.005, 8.0]))
    assert "gross_outlier" not in set(review(p).findings["rule"])


def _with_decision(p, **d):
    entry = {"sample": "S2", "analyte": "arsenic", "action": "exclude", "factor": 1.0,
             "reason": "lab confirmed a unit error", "entry": 1} | d
    return replace(p, settings=replace(p.settings, review_decisions=(entry,)))


def test_decision_resolves_the_finding_and_is_listed():
    values = [v / 1000 for v in AS_UG]
    values[1] = 8.0
    p = _with_decision(make_project(arsenic_rows(values)))
    r = review(p)
    f = r.findings[r.findings["rule"] == "gross_outlier"]
    assert f.iloc[0]["severity"] == "info"
    assert "resolved: excluded (review[1]: lab confirmed a unit error)" in f.iloc[0]["message"]
    assert r.worst() != "error"
    assert r.decision_lines() == ["S2 arsenic: excluded (review[1]: lab confirmed a unit error)"]
    assert r.decisions.iloc[0]["results"] == 1


def test_decision_on_an_unknown_sample_names_the_entry():
    p = _with_decision(make_project(arsenic_rows([0.005, 0.006, 0.007])), sample="S9")
    with pytest.raises(InputError) as err:
        review(p)
    assert err.value.file == "project.toml" and err.value.field == "review[1].sample"
    p = _with_decision(make_project(arsenic_rows([0.005, 0.006, 0.007])), analyte="nitrate")
    with pytest.raises(InputError) as err:
        review(p)
    assert err.value.field == "review[1].analyte"


def test_result_use_applies_decisions_per_result():
    import pandas as pd

    use = pd.DataFrame({"sample_id": ["A", "B"], "used": [True, True],
                        "sigma_factor": [1.0, 1.0], "reason": ["", ""]})
    results = pd.DataFrame({"sample_id": ["A", "A", "B"],
                            "analyte": ["arsenic", "nitrate", "arsenic"]})
    table = pd.DataFrame([
        {"entry": 1, "sample_id": "A", "analyte": "arsenic", "action": "exclude",
         "factor": 1.0, "reason": "unit error", "results": 1},
        {"entry": 2, "sample_id": "B", "analyte": "", "action": "downweight",
         "factor": 4.0, "reason": "turbid", "results": 1}])
    out = decisions.result_use(use, results, table).set_index(["sample_id", "analyte"])
    assert not out.loc[("A", "arsenic"), "used"]
    assert out.loc[("A", "nitrate"), "used"]  # the other result of the sample stays
    np.testing.assert_allclose(out.loc[("B", "arsenic"), "sigma_factor"], 4.0, rtol=0)
    assert out.loc[("B", "arsenic"), "reason"] == "uncertainty x 4 (review[2]: turbid)"
