"""Tests of blendq.inputs.project_file: project.toml keys, units, defaults and checks."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from blendq.chemistry.limits import CATALOGUE, DEFAULT_BASIS, DEFAULT_TEMPORAL_CV
from blendq.errors import InputError
from blendq.inputs.project import Settings
from blendq.inputs.project_file import read_project_file

FT = 0.3048  # m, exact (NIST SP 811 appendix B)
US = Path(__file__).parents[1] / "data" / "projects" / "quillmarsh_us"

HEAD = """\
[project]
name = "p"
[well]
name = "w"
well_radius = "0.1 m"
pump_intake_depth = "30 m"
{well}
[[zones]]
name = "deep"
top = "60 m"
bottom = "70 m"
[[zones]]
name = "shallow"
top = "40 m"
bottom = "50 m"
{zones}
[tables]
steps = "s.csv"
{rest}
"""


def _project(tmp_path: Path, well: str = "", zones: str = "", rest: str = "") -> Path:
    (tmp_path / "s.csv").write_text("step,rate [gpm]\n1,100\n", encoding="utf-8")
    path = tmp_path / "project.toml"
    path.write_text(HEAD.format(well=well, zones=zones, rest=rest), encoding="utf-8")
    return path


def test_reads_the_test_project():
    head = read_project_file(US)
    assert head.name.startswith("Quillmarsh 3")
    assert set(head.tables) == {"steps", "samples", "flowlogs", "levels", "field"}
    path, label = head.tables["samples"]
    assert label == "lab/samples.csv" and path == US / "lab" / "samples.csv"
    assert head.path == US / "project.toml"


def test_zones_sorted_top_down_and_defaults(tmp_path):
    head = read_project_file(_project(tmp_path))
    assert [z.name for z in head.zones] == ["shallow", "deep"]
    z = head.zones[0]
    assert (z.skin, z.nonlinear_loss, z.storativity, z.static_level) == (0.0, 0.0, None, None)
    assert head.settings == Settings()
    assert len(head.limits) == len(CATALOGUE["US-EPA"])
    assert head.well.rate_max == math.inf and head.well.submergence == 0.0


def test_limit_forms(tmp_path):
    rest = """
[settings]
limit_sets = "WHO"
[[limits]]
analyte = "nitrate"
value = "10 mg/L as N"
name = "district target"
[[limits]]
analyte = "Arsenic"
value = "5 ug/L"
"""
    head = read_project_file(_project(tmp_path, rest=rest))
    assert head.settings.limit_sets == ("WHO",)
    nitrate, arsenic = head.limits[-2:]
    assert (nitrate.basis, nitrate.authority, nitrate.kind) == ("N", "district target",
                                                                "user limit")
    assert nitrate.canonical() == pytest.approx(10.0, rel=1e-12)
    assert (arsenic.analyte, arsenic.basis) == ("arsenic", "As")
    assert arsenic.canonical() == pytest.approx(0.005, rel=1e-12)  # 5 ug/L = 0.005 mg/L


def test_new_well_and_settings_fields(tmp_path):
    rest = """
[settings]
flowlog_absolute_error = "1 gpm"
level_error = "0.1 ft"
default_relative_uncertainty = 0.1
"""
    head = read_project_file(_project(tmp_path, well='static_level = "-2 ft"', rest=rest))
    assert head.well.static_level == pytest.approx(-2 * FT, rel=1e-12)  # flowing well
    # 1 gpm = 231 in^3/min = 5.45099296896 m^3/d (US gallon = 231 in^3 exactly, NIST SP 811)
    assert head.settings.flowlog_absolute_error == pytest.approx(5.45099296896, rel=1e-12)
    assert head.settings.level_error == pytest.approx(0.1 * FT, rel=1e-12)
    assert head.settings.default_relative_uncertainty == 0.1


@pytest.mark.parametrize(("well", "zones", "rest", "field", "fragment"), [
    ('rate_min = "300 gpm"\nrate_max = "200 gpm"', "", "", "well.rate_max", "is not above"),
    ('radius_of_influence = "1 in"', "", "", "well.radius_of_influence", "is not larger"),
    ("", "storativity = 1.5", "", "zones[2].storativity", "out of range"),
    ("", 'skin = "2"', "", "zones[2].skin", "expected a plain number"),
    ("", "", "[settings]\ndraws = 10.5", "settings.draws", "whole number"),
    ("", "", "[settings]\nseed = -1", "settings.seed", "out of range"),
    ("", "", '[settings]\nconductance_model = "magic"', "settings.conductance_model",
     "is not one of"),
    ("", "", "[settings]\nhorizon = 365", "settings.horizon", "has no unit"),
    ("", "", "[settings]\nqa = 3", "settings.qa", "expected a [settings.qa] table"),
    ("", "", "[extras]\nx = 1", "extras", "is not a table blendq knows"),
    ("", "", '[[limits]]\nanalyte = "arsenic"\nvalue = "-1 ug/L"', "limits[1].value",
     "is not a positive number"),
    ("", "", '[[limits]]\nanalyte = "arsenic"\nvalue = "10 ft"', "limits[1].value",
     "is not a concentration unit"),
    ("", "", '[[scenarios]]\naction = "seal"', "scenarios[1].name", "needs a name"),
    ("keep_above_screen = 1", "", "", "well.keep_above_screen", "true or false"),
    ('name = 3', "", "", "well.name", "expected text"),
])
def test_bad_values_name_their_key(tmp_path, well, zones, rest, field, fragment):
    text = HEAD.format(well=well, zones=zones, rest=rest)
    if well.startswith("name"):
        text = text.replace('name = "w"\n', "")
    (tmp_path / "s.csv").write_text("step,rate [gpm]\n1,100\n", encoding="utf-8")
    (tmp_path / "project.toml").write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=fragment.replace("[", r"\[")) as info:
        read_project_file(tmp_path)
    assert info.value.file == "project.toml" and info.value.field == field
    assert info.value.row is None


def test_toml_with_byte_order_mark(tmp_path):
    path = _project(tmp_path)
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    assert read_project_file(path).name == "p"


def test_temporal_cv_one_number_or_per_analyte(tmp_path):
    # the default is a named setting (common practice), used where the project gives none
    assert Settings().temporal_cv_for("nitrate") == (DEFAULT_TEMPORAL_CV,
                                                     "default setting, common practice")
    head = read_project_file(_project(tmp_path, rest="[settings]\ntemporal_cv = 0.2\n"))
    assert head.settings.temporal_cv_for("arsenic") == (0.2, "setting")
    rest = "[settings.temporal_cv]\nNO3 = 0.25\n"  # analyte names are normalised
    s = read_project_file(_project(tmp_path, rest=rest)).settings
    assert s.temporal_cv_for("nitrate") == (0.25, "setting")
    assert s.temporal_cv_for("arsenic")[0] == DEFAULT_TEMPORAL_CV
    rest = "[settings.temporal_cv]\ndefault = 0.05\narsenic = 0.0\n"
    s = read_project_file(_project(tmp_path, rest=rest)).settings
    assert s.temporal_cv_for("arsenic") == (0.0, "setting")
    assert s.temporal_cv_for("nitrate") == (0.05, "setting")


def test_compliance_basis_override_and_user_limit(tmp_path):
    rest = """
[settings]
limit_sets = ["US-EPA", "WHO"]
[[limits]]
analyte = "arsenic"
authority = "US-EPA"
compliance = "single sample"
[[limits]]
analyte = "nitrate"
compliance = "annual mean"
compliance_citation = "district policy 4.2"
[[limits]]
analyte = "nitrate"
value = "8 mg/L as N"
compliance = "single sample with confirmation"
"""
    head = read_project_file(_project(tmp_path, rest=rest))
    by = {(lim.authority, lim.analyte): lim for lim in head.limits}
    # the US-EPA arsenic MCL is now judged on single samples; the WHO value keeps its basis
    us_as = by[("US-EPA", "arsenic")].compliance
    assert (us_as.statistic, us_as.samples, us_as.status) == ("single sample", 1, "user setting")
    assert by[("WHO", "arsenic")].compliance == CATALOGUE["WHO"][2].compliance
    # no authority: every nitrate limit of the sets takes the basis
    for authority in ("US-EPA", "WHO"):
        b = by[(authority, "nitrate")].compliance
        assert (b.statistic, b.samples, b.citation) == ("annual mean", 4, "district policy 4.2")
    # value and basis: a new limit judged on the average of a sample and its confirmation
    user = head.limits[-1]
    assert (user.authority, user.canonical()) == ("user", pytest.approx(8.0, rel=1e-12))
    assert (user.compliance.statistic, user.compliance.samples) == ("single sample", 2)
    assert len(head.limits) == len(CATALOGUE["US-EPA"]) + len(CATALOGUE["WHO"]) + 1
    # a limit without a basis is judged on single samples (common practice)
    assert read_project_file(_project(tmp_path, rest='[[limits]]\nanalyte = "arsenic"\n'
                                                     'value = "5 ug/L"\n')).limits[-1] \
        .compliance == DEFAULT_BASIS


@pytest.mark.parametrize(("rest", "field", "fragment"), [
    ("[settings]\ntemporal_cv = -0.1", "settings.temporal_cv", "out of range"),
    ('[settings]\ntemporal_cv = "10 %"', "settings.temporal_cv", "expected a plain number"),
    ('[settings.temporal_cv]\n"no3?" = 0.1', "settings.temporal_cv.no3?",
     "is not an analyte name"),
    ("[settings.temporal_cv]\nnitrate = 9", "settings.temporal_cv.nitrate", "out of range"),
    ('[[limits]]\nanalyte = "arsenic"\ncompliance = "monthly"', "limits[1].compliance",
     "is not one of"),
    ('[[limits]]\nanalyte = "uranium"\nauthority = "WHO"\ncompliance = "annual mean"',
     "limits[1].analyte", "no WHO limit of uranium"),
    ('[[limits]]\nanalyte = "arsenic"\ncompliance = "annual mean"\nkind = "x"',
     "limits[1].kind", "is not a key blendq knows"),
])
def test_bad_basis_settings_name_their_key(tmp_path, rest, field, fragment):
    with pytest.raises(InputError, match=fragment) as info:
        read_project_file(_project(tmp_path, rest=rest))
    assert info.value.file == "project.toml" and info.value.field == field


def test_review_decisions_and_new_settings(tmp_path):
    rest = """
[settings]
recommended_headroom = 0.1
gross_outlier_factor = 20
[[review]]
sample = "S2"
analyte = "As"
action = "exclude"
reason = "unit error confirmed by the lab"
[[review]]
sample = "S3"
action = "downweight"
reason = "turbid"
"""
    pf = read_project_file(_project(tmp_path, rest=rest))
    s = pf.settings
    assert s.recommended_headroom == pytest.approx(0.1, rel=0, abs=0)
    assert s.gross_outlier_factor == pytest.approx(20.0, rel=0, abs=0)
    first, second = s.review_decisions
    assert first == {"sample": "S2", "analyte": "arsenic", "action": "exclude", "factor": 1.0,
                     "reason": "unit error confirmed by the lab", "entry": 1}
    assert second["action"] == "downweight" and second["factor"] == pytest.approx(3.0, abs=0)
    assert second["analyte"] == "" and second["entry"] == 2
    assert Settings().recommended_headroom == pytest.approx(0.05, abs=0)  # common practice


@pytest.mark.parametrize("entry, field, fragment", [
    ('sample = "S2"\naction = "drop"\nreason = "x"', "review[1].action", '"drop"'),
    ('sample = "S2"\naction = "exclude"\nreason = ""', "review[1].reason", "say why"),
    ('sample = "S2"\naction = "exclude"', "review[1].reason", "missing"),
    ('sample = "S2"\naction = "exclude"\nreason = "x"\nwhy = "y"', "review[1].why", "not a key"),
])
def test_bad_review_decisions_name_their_key(tmp_path, entry, field, fragment):
    with pytest.raises(InputError) as err:
        read_project_file(_project(tmp_path, rest=f"[[review]]\n{entry}\n"))
    assert err.value.field == field and err.value.file == "project.toml"
    assert fragment in err.value.message


def test_zone_entrance_losses_and_keep_level_above(tmp_path):
    zones = ('loss_exponent = 2.5\nnonlinear_loss = "1e-6 d**2.5/m**6.5"\n'
             'linear_loss = "0.5 s/ft**2"\nkeep_level_above = true')
    head = read_project_file(_project(tmp_path, zones=zones))
    z = {z.name: z for z in head.zones}
    assert z["deep"].loss_exponent == 2.0 and z["deep"].linear_loss == 0.0
    assert not z["deep"].keep_level_above
    assert z["shallow"].loss_exponent == 2.5 and z["shallow"].keep_level_above
    assert z["shallow"].nonlinear_loss == pytest.approx(1e-6, rel=1e-12)
    # 0.5 s/ft^2 = 0.5 / 86400 d / 0.09290304 m^2 = 6.2291148e-5 d/m^2
    assert z["shallow"].linear_loss == pytest.approx(6.2291148e-5, rel=1e-7)


@pytest.mark.parametrize(("zones", "field", "fragment"), [
    ("loss_exponent = 4", "zones[2].loss_exponent", "out of range"),
    ('loss_exponent = 2.5\nnonlinear_loss = "1 s2/ft5"', "zones[2].nonlinear_loss",
     "exponent 2.5"),
    ('linear_loss = "-1 s/ft**2"', "zones[2].linear_loss", "zero or more"),
    ("keep_level_above = 1", "zones[2].keep_level_above", "true or false"),
])
def test_bad_entrance_losses_name_their_key(tmp_path, zones, field, fragment):
    with pytest.raises(InputError, match=fragment) as info:
        read_project_file(_project(tmp_path, zones=zones))
    assert info.value.field == field


def test_test_table_idle_times(tmp_path):
    # crossflow memory: [test] idle times with units, the first-flush tolerance a plain share
    rest = ('[test]\nidle_time_before = "2 h"\nidle_time_before_sample = "30 min"\n'
            "first_flush_tolerance = 0.1\n")
    s = read_project_file(_project(tmp_path, rest=rest)).settings
    assert s.idle_time_before_test == pytest.approx(2 / 24, rel=1e-12)
    assert s.idle_time_before_sample == pytest.approx(30 / 1440, rel=1e-12)
    assert s.first_flush_tolerance == 0.1
    plain = read_project_file(_project(tmp_path)).settings
    assert plain.idle_time_before_test is None and plain.idle_time_before_sample is None


@pytest.mark.parametrize(("rest", "field", "fragment"), [
    ("[test]\nidle_time_before = 2", "test.idle_time_before", "has no unit"),
    ('[test]\nidle_time_before = "-1 h"', "test.idle_time_before", "zero or more"),
    ("[test]\nfirst_flush_tolerance = 0", "test.first_flush_tolerance", "out of range"),
    ('[test]\nidle = "2 h"', "test.idle", "not a key blendq knows"),
])
def test_bad_test_table_names_its_key(tmp_path, rest, field, fragment):
    with pytest.raises(InputError, match=fragment) as info:
        read_project_file(_project(tmp_path, rest=rest))
    assert info.value.field == field
def test_limit_override_and_addition_through_the_project_file(tmp_path):
    from blendq.chemistry.limits import limit_notes

    rest = """
[settings]
limit_sets = ["US-EPA", "WHO"]
[[limits]]
analyte = "nitrate"
authority = "US-EPA"
value = "8 mg/L as N"
citation = "state primacy rule 12.3 (invented)"
date = "2026-01"
status = "in force"
checked = "read in the state rule"
[[limits]]
analyte = "fluoride"
authority = "WHO"
value = "1.2 mg/L"
kind = "guideline value"
citation = "value read by the project's reviewer"
"""
    head = read_project_file(_project(tmp_path, rest=rest))
    us = [lim for lim in head.limits if lim.authority == "US-EPA" and lim.analyte == "nitrate"]
    assert len(us) == 1  # replaced, not added beside the catalogue's
    (nitrate,) = us
    assert nitrate.canonical() == pytest.approx(8.0, rel=1e-12)
    assert nitrate.is_override and nitrate.replaces == "US-EPA MCL 10 mg/L as N"
    assert (nitrate.kind, nitrate.date, nitrate.status) == ("MCL", "2026-01", "in force")
    assert nitrate.origin == "project.toml limits[1]"
    # the catalogue's compliance basis stays with the overridden value (40 CFR 141.23)
    assert nitrate.compliance == CATALOGUE["US-EPA"][0].compliance
    assert nitrate.as_dict()["override"] is True
    # WHO has no fluoride value in the catalogue: the entry adds one, not an override
    fluoride = next(lim for lim in head.limits if lim.analyte == "fluoride"
                    and lim.authority == "WHO")
    assert not fluoride.is_override and fluoride.status == "user setting"
    assert len(head.limits) == len(CATALOGUE["US-EPA"]) + len(CATALOGUE["WHO"]) + 1
    notes = limit_notes(head.limits, head.settings.limit_sets, ["nitrate", "fluoride"])
    assert notes[0] == ("Limit override: US-EPA MCL 10 mg/L as N (nitrate) replaced by US-EPA "
                        "MCL 8 mg/L as N (project.toml limits[1]).")
    assert notes[1].startswith("Limit added: WHO guideline value 1.2 mg/L (fluoride;")
    assert len(notes) == 2  # the WHO fluoride gap is filled by the project's entry
    # without the entry the gap is named
    head = read_project_file(_project(tmp_path, rest='[settings]\nlimit_sets = ["WHO"]\n'))
    (gap,) = limit_notes(head.limits, ("WHO",), ["fluoride", "arsenic"])
    assert gap.startswith("No WHO limit of fluoride is tested: blendq ships no WHO fluoride")


def test_compliance_only_entry_is_listed_as_an_override(tmp_path):
    rest = '[[limits]]\nanalyte = "arsenic"\ncompliance = "single sample"\n'
    (arsenic,) = [lim for lim in read_project_file(_project(tmp_path, rest=rest)).limits
                  if lim.analyte == "arsenic"]
    assert arsenic.is_override
    assert arsenic.replaces == ("US-EPA MCL 0.01 mg/L judged on annual mean of 4 quarterly "
                                "samples")
