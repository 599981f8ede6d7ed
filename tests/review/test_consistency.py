"""Links between tables that `blendq check` reports (blendq.review.consistency), the names of
the review's rules for severity overrides, and where a bad review option is reported."""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from test_findings import make_project, rules_of, sample, steps_table

from blendq.errors import InputError
from blendq.review.findings import RULES, review

REVIEW = Path(__file__).parents[2] / "blendq" / "review"


def test_every_rule_the_review_emits_is_named_in_rules():
    """A severity override is checked against RULES, so RULES must hold every rule name the
    review's modules write (read from their source: `add("<severity>", "<rule>"`)."""
    written = set()
    for path in REVIEW.glob("*.py"):
        source = path.read_text(encoding="utf-8")
        written |= set(re.findall(r'add\(\s*"(?:info|warning|error)",\s*"([a-z_]+)"', source))
        written |= set(re.findall(r'Finding\(\s*\n?\s*severity,\s*"([a-z_]+)"', source))
        if re.search(r'f"\{what\}_mixed"', source):
            written |= {"units_mixed", "bases_mixed"}
    assert written, "the pattern found no rule"
    assert written <= set(RULES), written - set(RULES)


def test_severity_override_of_an_unknown_rule_is_refused():
    project = make_project([sample("a", 1, "chloride", 10.0)],
                           qa={"severity": {"estimated_valu": "info"}})
    project.files = {"project": "well.toml"}
    with pytest.raises(InputError, match='"estimated_valu" is not a rule of the review') as info:
        review(project)
    assert (info.value.file, info.value.field) == ("well.toml", "settings.qa.severity.estimated_valu")


def test_unknown_review_option_names_the_project_file():
    project = make_project([sample("a", 1, "chloride", 10.0)], qa={"duplicate_rpd": 20})
    project.files = {"project": "project.toml"}
    with pytest.raises(InputError) as info:
        review(project)
    assert str(info.value).startswith("project.toml field settings.qa.duplicate_rpd:")


def test_override_of_a_known_rule_applies():
    project = make_project([sample("a", 1, "chloride", 10.0, depth=70.0)],
                           qa={"severity": {"sample_below_zones": "info"}})
    assert rules_of(review(project), "a")["sample_below_zones"] == "info"


def test_samples_at_a_zero_rate_step_are_an_error_once_per_sample():
    rows = [sample("a", 2, "chloride", 10.0), sample("a", 2, "sulfate", 5.0),
            sample("b", 3, "chloride", 11.0)]
    result = review(make_project(rows, steps=steps_table(rates=(100.0, 0.0, 200.0, 220.0))))
    hits = result.findings[result.findings["rule"] == "zero_rate_samples"]
    assert list(hits["sample_id"]) == ["a"] and list(hits["severity"]) == ["error"]


@pytest.mark.parametrize(("well_static", "severity"), [(12.0, "error"), (None, "warning")])
def test_pumping_level_at_or_above_static(well_static, severity):
    steps = steps_table()
    steps["pumping_level"] = [15.0, 11.0, 9.0, 20.0]  # zones' static level 10 m; well's 12 m
    project = make_project([sample("a", 1, "chloride", 10.0)], steps=steps)
    project.well = replace(project.well, static_level=well_static)
    hits = review(project).findings
    hits = hits[hits["rule"] == "pumping_level_above_static"]
    static = 12.0 if well_static is not None else 10.0
    expected = [s for s, level in zip(steps["step"], steps["pumping_level"], strict=True)
                if level <= static]
    assert list(hits["step"]) == expected
    assert set(hits["severity"]) == {severity}
    assert list(hits["source_row"]) == expected  # steps_table numbers rows like steps


def test_sample_below_the_deepest_zone_is_a_warning():
    rows = [sample("a", 1, "chloride", 10.0, depth=59.0), sample("b", 1, "chloride", 10.0,
                                                                 depth=61.0),
            sample("b", 1, "sulfate", 1.0, depth=61.0), sample("c", 1, "chloride", 1.0)]
    result = review(make_project(rows))
    hits = result.findings[result.findings["rule"] == "sample_below_zones"]
    assert list(hits["sample_id"]) == ["b"] and list(hits["severity"]) == ["warning"]
    assert not np.isnan(hits["source_row"].iloc[0])


def test_pumping_level_against_zone_levels_uses_the_shallowest_as_a_bound():
    # zones at 8 m and 14 m depth: the well's composite level, the conductance-weighted mean
    # of the two (Konikow and others 2009, USGS TM 6-A30), can be anywhere from 8 to 14 m, so
    # a pumping level of 10 m is possible (no finding, where the arithmetic mean 11 m would
    # flag it) and only a level at or above 8 m is certainly above the composite level
    from blendq.inputs.project import Zone

    steps = steps_table()
    steps["pumping_level"] = [15.0, 10.0, 7.9, 20.0]
    zones = [Zone("upper", 20.0, 40.0, static_level=8.0),
             Zone("lower", 50.0, 60.0, static_level=14.0)]
    project = make_project([sample("a", 1, "chloride", 10.0)], steps=steps, zones=zones)
    hits = review(project).findings
    hits = hits[hits["rule"] == "pumping_level_above_static"]
    assert list(hits["step"]) == [3] and set(hits["severity"]) == {"warning"}
    assert "shallowest zone static level" in hits["message"].iloc[0]
