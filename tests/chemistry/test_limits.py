"""Tests of the drinking-water limits catalogue against the published rules.

Each expected value carries its source beside it:
- 40 CFR 141.62(b): US EPA maximum contaminant levels for inorganic contaminants;
- 40 CFR 141.66(e): US EPA MCL for uranium;
- WHO Guidelines for Drinking-water Quality, 4th ed. (2017, addenda 2022): nitrate and nitrite
  (read in an earlier edition's table), arsenic and manganese (provisional, 2022; read in a
  summary of the 2022 guidelines), uranium (2011 revision; read in a peer-reviewed paper on
  it), selenium (2011 4th edition; secondary);
- Directive (EU) 2020/2184, Annex I, Part B (chemical parameters) and its notes.
The nitrate/nitrite conversions use molar masses from the ``molmass`` library and the National
Research Council (1995) factor 1 mg/L NO3-N = 4.429 mg/L NO3.
Compliance bases: state program guidance restating 40 CFR 141.23 (nitrate confirmation sample)
and 40 CFR 141.23(i) (running annual average), both secondary sources; the lognormal tail is
checked against scipy.stats.lognorm.
"""

from __future__ import annotations

import math

import molmass
import numpy as np
import pytest
from scipy import stats

from blendq.chemistry.analytes import get_analyte
from blendq.chemistry.limits import (
    ANNUAL_MEAN,
    CATALOGUE,
    DEFAULT_TEMPORAL_CV,
    RATIO_RULES,
    SINGLE_SAMPLE,
    ComplianceBasis,
    exceedance_given_mean,
    limit_set,
    ratio_value,
    statistic_log_sd,
)
from blendq.errors import InputError

N_PER_NO3 = molmass.Formula("N").mass / molmass.Formula("NO3").mass  # molmass library
N_PER_NO2 = molmass.Formula("N").mass / molmass.Formula("NO2").mass  # molmass library

# (authority, analyte) -> (value, unit, basis, expected canonical mg/L); source beside each
PUBLISHED = {
    # 40 CFR 141.62(b): nitrate 10 mg/L (as nitrogen)
    ("US-EPA", "nitrate"): (10.0, "mg/L", "N", 10.0),
    # 40 CFR 141.62(b): nitrite 1 mg/L (as nitrogen)
    ("US-EPA", "nitrite"): (1.0, "mg/L", "N", 1.0),
    # 40 CFR 141.62(b): total nitrate and nitrite 10 mg/L (as nitrogen)
    ("US-EPA", "nitrate_nitrite"): (10.0, "mg/L", "N", 10.0),
    # 40 CFR 141.62(b): arsenic 0.010 mg/L
    ("US-EPA", "arsenic"): (0.010, "mg/L", "As", 0.010),
    # 40 CFR 141.62(b): fluoride 4.0 mg/L
    ("US-EPA", "fluoride"): (4.0, "mg/L", "F", 4.0),
    # 40 CFR 141.62(b): selenium 0.05 mg/L
    ("US-EPA", "selenium"): (0.05, "mg/L", "Se", 0.05),
    # 40 CFR 141.66(e): uranium 30 ug/L
    ("US-EPA", "uranium"): (30.0, "ug/L", "U", 0.030),
    # 89 FR 32532 (April 2024), PFAS rule: PFOA and PFOS 4.0 ng/L; PFHxS, PFNA, HFPO-DA 10 ng/L
    ("US-EPA", "pfoa"): (4.0, "ng/L", "", 4.0e-6),
    ("US-EPA", "pfos"): (4.0, "ng/L", "", 4.0e-6),
    ("US-EPA", "pfhxs"): (10.0, "ng/L", "", 10.0e-6),
    ("US-EPA", "pfna"): (10.0, "ng/L", "", 10.0e-6),
    ("US-EPA", "hfpo_da"): (10.0, "ng/L", "", 10.0e-6),
    # WHO GDWQ 4th ed.: nitrate 50 mg/L as NO3- (= 11.29 mg/L as N by molar masses)
    ("WHO", "nitrate"): (50.0, "mg/L", "NO3", 50.0 * N_PER_NO3),
    # WHO GDWQ 4th ed.: nitrite 3 mg/L as NO2- (= 0.913 mg/L as N)
    ("WHO", "nitrite"): (3.0, "mg/L", "NO2", 3.0 * N_PER_NO2),
    # WHO GDWQ 4th ed.: arsenic 10 ug/L (provisional guideline value; summary of the 2022
    # guidelines, secondary)
    ("WHO", "arsenic"): (10.0, "ug/L", "As", 0.010),
    # WHO GDWQ 2022: manganese 80 ug/L (provisional; summary of the 2022 guidelines, secondary)
    ("WHO", "manganese"): (80.0, "ug/L", "Mn", 0.080),
    # WHO GDWQ 4th ed. (2011): uranium 30 ug/L (peer-reviewed paper on the 2011 revision,
    # secondary)
    ("WHO", "uranium"): (30.0, "ug/L", "U", 0.030),
    # WHO GDWQ 4th ed. (2011): selenium 40 ug/L (secondary)
    ("WHO", "selenium"): (40.0, "ug/L", "Se", 0.040),
    # Directive (EU) 2020/2184 Annex I Part B: nitrate 50 mg/l (as the ion)
    ("EU", "nitrate"): (50.0, "mg/L", "NO3", 50.0 * N_PER_NO3),
    # Directive (EU) 2020/2184 Annex I Part B: nitrite 0,50 mg/l (as the ion)
    ("EU", "nitrite"): (0.50, "mg/L", "NO2", 0.50 * N_PER_NO2),
    # Directive (EU) 2020/2184 Annex I Part B: arsenic 10 ug/l
    ("EU", "arsenic"): (10.0, "ug/L", "As", 0.010),
}


@pytest.mark.parametrize(("authority", "analyte"), sorted(PUBLISHED))
def test_catalogue_value_matches_published_rule(authority, analyte):
    value, unit, basis, canonical = PUBLISHED[(authority, analyte)]
    matches = [lim for lim in CATALOGUE[authority] if lim.analyte == analyte]
    assert len(matches) == 1
    lim = matches[0]
    assert lim.value == pytest.approx(value, rel=1e-12)
    assert lim.unit == unit
    assert lim.basis == basis
    assert lim.authority == authority
    assert lim.citation
    # molar masses: blendq's IUPAC abridged table against molmass, rtol 1e-4
    assert lim.canonical() == pytest.approx(canonical, rel=1e-4)


def test_catalogue_has_no_unchecked_entries():
    # every limit in the catalogue is one of the published values checked above
    listed = {(a, lim.analyte) for a, limits in CATALOGUE.items() for lim in limits}
    assert listed == set(PUBLISHED)


def test_us_citations_name_the_cfr_sections():
    pfas = {"pfoa", "pfos", "pfhxs", "pfna", "hfpo_da"}
    for lim in CATALOGUE["US-EPA"]:
        expected = ("141.66(e)" if lim.analyte == "uranium" else
                    "89 FR 32532" if lim.analyte in pfas else "141.62(b)")
        assert expected in lim.citation
    assert all("2020/2184" in lim.citation for lim in CATALOGUE["EU"])
    assert all("4th ed" in lim.citation for lim in CATALOGUE["WHO"])


def test_ten_mg_per_litre_as_n_is_about_44_mg_per_litre_as_no3():
    # 10 mg/L NO3-N x 4.429 = 44.29 mg/L NO3 (National Research Council 1995)
    us = next(lim for lim in CATALOGUE["US-EPA"] if lim.analyte == "nitrate")
    as_no3 = us.canonical() / N_PER_NO3
    assert as_no3 == pytest.approx(44.29, rel=1e-3)
    assert as_no3 == pytest.approx(44.3, abs=0.05)


def test_fifty_mg_per_litre_no3_is_about_11_3_mg_per_litre_as_n():
    # 50 mg/L NO3 / 4.429 = 11.29 mg/L NO3-N (National Research Council 1995)
    who = next(lim for lim in CATALOGUE["WHO"] if lim.analyte == "nitrate")
    assert who.canonical() == pytest.approx(50.0 / 4.429, rel=1e-3)
    assert who.canonical() == pytest.approx(11.3, abs=0.05)
    # the WHO/EU nitrate value is looser than the US MCL once both are on the same basis
    us = next(lim for lim in CATALOGUE["US-EPA"] if lim.analyte == "nitrate")
    assert who.canonical() > us.canonical()


def test_who_ratio_rule():
    # WHO GDWQ 4th ed.: C_nitrate/GV_nitrate + C_nitrite/GV_nitrite <= 1
    (rule,) = RATIO_RULES["WHO"]
    # 25 mg/L NO3 and 1.5 mg/L NO2 (half of each guideline value) -> ratio 1
    conc = {"nitrate": 25.0 * N_PER_NO3, "nitrite": 1.5 * N_PER_NO2}
    assert ratio_value(rule, conc) == pytest.approx(1.0, rel=1e-4)
    # nitrate alone at 40 mg/L NO3 -> 0.8
    assert ratio_value(rule, {"nitrate": 40.0 * N_PER_NO3}) == pytest.approx(0.8, rel=1e-4)
    assert ratio_value(rule, {}) == 0.0


def test_eu_ratio_rule():
    # Directive (EU) 2020/2184 Annex I Part B, note to nitrate/nitrite:
    # [nitrate]/50 + [nitrite]/3 <= 1, concentrations in mg/l as the ions
    (rule,) = RATIO_RULES["EU"]
    conc = {"nitrate": 30.0 * N_PER_NO3, "nitrite": 0.45 * N_PER_NO2}
    # 30/50 + 0.45/3 = 0.6 + 0.15 = 0.75
    assert ratio_value(rule, conc) == pytest.approx(0.75, rel=1e-4)


def test_no_us_ratio_rule():
    # 40 CFR 141.62(b) sets a separate MCL for the sum of nitrate and nitrite instead
    assert RATIO_RULES["US-EPA"] == []


def test_labels():
    us = {lim.analyte: lim for lim in CATALOGUE["US-EPA"]}
    assert us["nitrate"].label() == "US-EPA MCL 10 mg/L as N"
    assert us["arsenic"].label() == "US-EPA MCL 0.01 mg/L"
    who = {lim.analyte: lim for lim in CATALOGUE["WHO"]}
    assert who["nitrate"].label() == "WHO guideline value 50 mg/L as NO3"


def test_limit_set_lookup():
    assert [lim.analyte for lim in limit_set("WHO")] == ["nitrate", "nitrite", "arsenic",
                                                          "manganese", "uranium", "selenium"]
    # a copy: changing it leaves the catalogue alone
    copy = limit_set("EU")
    copy.clear()
    assert len(CATALOGUE["EU"]) == 3
    with pytest.raises(InputError, match='no limit set "Atlantis"'):
        limit_set("Atlantis")


def test_limit_analytes_are_catalogued():
    for limits in CATALOGUE.values():
        for lim in limits:
            assert get_analyte(lim.analyte).key == lim.analyte


# ------------------------------------------------------------------- compliance basis
def test_us_compliance_bases_follow_40_cfr_141_23():
    # state program guidance restating 40 CFR 141.23 (secondary): nitrate, a confirmation
    # sample within 24 h and compliance on the average of the two; 40 CFR 141.23(i):
    # arsenic and other inorganics on a running annual average of quarterly samples
    us = {lim.analyte: lim.compliance for lim in CATALOGUE["US-EPA"]}
    assert (us["nitrate"].statistic, us["nitrate"].samples) == (SINGLE_SAMPLE, 2)
    assert (us["nitrate"].citation, us["nitrate"].status) == ("40 CFR 141.23", "secondary")
    for analyte in ("arsenic", "fluoride", "selenium"):
        b = us[analyte]
        assert (b.statistic, b.samples, b.citation, b.status) == (
            ANNUAL_MEAN, 4, "40 CFR 141.23(i)", "secondary")
    # not in the checked sources: the same rules, called common practice
    for analyte in ("nitrite", "nitrate_nitrite", "uranium"):
        assert us[analyte].status == "common practice (setting)"
    assert us["uranium"].statistic == ANNUAL_MEAN


def test_who_and_eu_bases_are_common_practice_settings():
    # the WHO and EU texts checked give the values only: each sample is compared with them
    for authority in ("WHO", "EU"):
        for lim in CATALOGUE[authority]:
            b = lim.compliance
            assert (b.statistic, b.samples) == (SINGLE_SAMPLE, 1)
            assert b.status == "common practice (setting)"
            assert "not a sampling rule" in b.citation
    every = [lim.compliance for s in CATALOGUE.values() for lim in s]
    assert all("memory" not in b.citation + b.status for b in every)
    assert 0 < DEFAULT_TEMPORAL_CV <= 0.2  # a modest default


def test_basis_descriptions():
    assert CATALOGUE["US-EPA"][0].compliance.describe() == "single sample with confirmation"
    assert CATALOGUE["US-EPA"][3].compliance.describe() == "annual mean of 4 quarterly samples"
    assert "within 24 h" in CATALOGUE["US-EPA"][0].compliance.rule()
    with pytest.raises(InputError, match="is not one of"):
        ComplianceBasis("monthly mean", 3, "", "")
    with pytest.raises(InputError, match="cannot average"):
        ComplianceBasis(SINGLE_SAMPLE, 3, "", "")


def test_statistic_log_sd_by_hand():
    # single sample with confirmation: one temporal draw, two lab errors averaged
    # sigma^2 = ln(1 + 0.1^2) + ln(1 + 0.05^2 / 2)
    conf = ComplianceBasis(SINGLE_SAMPLE, 2, "", "")
    assert statistic_log_sd(conf, 0.1, 0.05) == pytest.approx(
        math.sqrt(math.log(1.01) + math.log(1.00125)), rel=1e-12)
    # annual mean of 4: c^2 = 1.01 x 1.0025 - 1; sigma^2 = ln(1 + c^2 / 4)
    annual = ComplianceBasis(ANNUAL_MEAN, 4, "", "")
    assert statistic_log_sd(annual, 0.1, 0.05) == pytest.approx(
        math.sqrt(math.log(1 + (1.01 * 1.0025 - 1) / 4)), rel=1e-12)
    assert statistic_log_sd(annual, 0.0, 0.0) == 0.0
    with pytest.raises(InputError):
        statistic_log_sd(annual, -0.1, 0.0)


@pytest.mark.parametrize(("mean", "threshold", "sigma"), [
    (7.0, 8.0, 0.1), (9.0, 8.0, 0.05), (0.004, 0.008, 0.6), (8.0, 8.0, 0.2)])
def test_lognormal_tail_against_scipy(mean, threshold, sigma):
    # reference: scipy.stats.lognorm with s = sigma and scale = m exp(-sigma^2 / 2), whose
    # mean is m
    ref = stats.lognorm(s=sigma, scale=mean * math.exp(-sigma**2 / 2))
    assert ref.mean() == pytest.approx(mean, rel=1e-12)
    got = exceedance_given_mean(np.array([mean]), threshold, sigma)[0]
    assert got == pytest.approx(ref.sf(threshold), rel=1e-10, abs=1e-15)


def test_tail_edges():
    m = np.array([np.nan, 0.0, 5.0, 9.0])
    np.testing.assert_array_equal(exceedance_given_mean(m, 8.0, 0.0), [0.0, 0.0, 0.0, 1.0])
    np.testing.assert_array_equal(exceedance_given_mean(m, 8.0, 0.1)[:2], [0.0, 0.0])


# ------------------------------------------------------------------- the catalogue as data
def test_every_entry_carries_value_basis_compliance_source_date_status():
    from blendq.chemistry.limits import CATALOGUE_FILE, COMPLIANCE_BASES

    assert CATALOGUE_FILE.name == "limits.toml" and CATALOGUE_FILE.parent.name == "data"
    statuses = {"in force", "current guideline", "proposed", "proposed for rescission",
                "in force, proposed for rescission"}
    for authority, limits in CATALOGUE.items():
        for lim in limits:
            assert lim.value > 0 and lim.unit in ("mg/L", "ug/L", "ng/L")
            assert lim.basis == get_analyte(lim.analyte).canonical_basis or \
                lim.basis in get_analyte(lim.analyte).bases
            assert lim.kind and lim.citation and lim.date and lim.checked
            assert lim.status in statuses
            assert lim.checked.startswith(("verified", "secondary")), lim
            assert (lim.compliance.statistic, lim.compliance.samples) in COMPLIANCE_BASES.values()
            assert lim.compliance.citation and lim.compliance.status
            assert (lim.origin, lim.replaces, lim.is_override) == ("catalogue", "", False)
            assert lim.authority == authority
            text = " ".join(str(v) for v in lim.as_dict().values())
            assert "memory" not in text


def test_new_who_values_carry_their_dates():
    who = {lim.analyte: lim for lim in CATALOGUE["WHO"]}
    # summary of the 2022 WHO guidelines (secondary): manganese and arsenic provisional, 2022
    for analyte in ("manganese", "arsenic"):
        assert who[analyte].date == "2022" and "provisional" in who[analyte].kind
        assert who[analyte].checked.startswith("secondary")
    # uranium: the 2011 revision of the 4th ed.; selenium: the 2011 4th edition (secondary)
    assert who["uranium"].date == "2011" and who["selenium"].date == "2011"
    # arsenic: 68 FR 14502 (2003), the arsenic rule clarification (verified)
    us_as = next(lim for lim in CATALOGUE["US-EPA"] if lim.analyte == "arsenic")
    assert us_as.date == "2003" and "68 FR 14502" in us_as.citation


def test_pfas_limits_carry_the_proposed_rescission():
    # 89 FR 32532 (April 2024, verified): in 2025-26 the agency proposed to rescind the limits
    # other than PFOA and PFOS, which a court kept in force in January 2026
    us = {lim.analyte: lim for lim in CATALOGUE["US-EPA"]}
    for analyte in ("pfoa", "pfos"):
        assert (us[analyte].status, us[analyte].date) == ("in force", "2024-04")
    for analyte in ("pfhxs", "pfna", "hfpo_da"):
        assert us[analyte].status == "in force, proposed for rescission"
        assert "January 2026" in us[analyte].checked
    # judged on a running annual average
    assert all(us[a].compliance.statistic == ANNUAL_MEAN for a in ("pfoa", "pfhxs"))
    # the hazard index is not shipped (its PFBS term was not checked)
    assert RATIO_RULES["US-EPA"] == []
    assert get_analyte("GenX").key == "hfpo_da" and get_analyte("PFOA").display_unit == "ng/L"


def test_values_not_checked_are_gaps_not_limits():
    # EU 2020/2184 fluoride, selenium, uranium and manganese and the WHO fluoride value were
    # not found in a source read: the catalogue says so and holds no number for them
    from blendq.chemistry.limits import GAPS, catalogue_gaps

    gaps = {(g.authority, g.analyte) for g in GAPS}
    assert gaps == {("WHO", "fluoride"), ("EU", "fluoride"), ("EU", "selenium"),
                    ("EU", "uranium"), ("EU", "manganese")}
    listed = {(a, lim.analyte) for a, limits in CATALOGUE.items() for lim in limits}
    assert not gaps & listed
    for g in GAPS:
        assert g.checked.startswith("not checked") and "[[limits]]" in g.note
    assert [g.analyte for g in catalogue_gaps(("EU",), ["F", "nitrate"])] == ["fluoride"]
    assert catalogue_gaps(("US-EPA",), ["fluoride"]) == []


def test_a_malformed_catalogue_names_its_file_and_entry(tmp_path):
    from blendq.chemistry.limits import load_catalogue

    good = ('[[limit]]\nset = "X"\nanalyte = "arsenic"\nvalue = 5.0\nunit = "ug/L"\n'
            'kind = "target"\nsource = "district policy"\ndate = "2026"\nstatus = "in force"\n'
            'checked = "verified"\ncompliance = "annual mean"\ncompliance_source = "policy"\n'
            'compliance_checked = "secondary"\n')
    path = tmp_path / "limits.toml"
    path.write_text(good, encoding="utf-8")
    limits, rules, gaps = load_catalogue(path)
    assert limits["X"][0].canonical() == pytest.approx(0.005, rel=1e-12)
    assert (rules, gaps) == ({"X": []}, [])
    path.write_text(good.replace('date = "2026"\n', ""), encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_catalogue(path)
    assert (err.value.file, err.value.field) == ("limits.toml", "limit[1].date")
    path.write_text(good.replace('"annual mean"', '"weekly"'), encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_catalogue(path)
    assert err.value.field == "limit[1].compliance"


def test_nitrate_plus_nitrite_limit_from_separate_results():
    # 40 CFR 141.62(b): nitrate 10, nitrite 1 and nitrate+nitrite 10 mg/L, all as N. Nitrate
    # 40.0 mg/L as NO3 (9.03 mg/L as N, by molar masses from molmass) and nitrite 3.0 mg/L as
    # NO2 (0.913 mg/L as N) each pass their own MCL; the nitrogen sum 9.95 passes 10, and with
    # nitrite 4.0 as NO2 (1.218 as N, above its own MCL too) the sum 10.25 fails
    from blendq.chemistry.analytes import to_canonical
    from blendq.chemistry.limits import species_sum_rules

    us = limit_set("US-EPA")
    (rule,) = species_sum_rules(us, ["nitrate", "nitrite", "arsenic"])
    assert rule.authority == "US-EPA" and "141.62(b)" in rule.citation
    assert [t.analyte for t in rule.terms] == ["nitrate", "nitrite"]
    no3 = to_canonical(40.0, "mg/L", get_analyte("nitrate"), "NO3")
    assert no3 == pytest.approx(40.0 * N_PER_NO3, rel=1e-4)
    no2 = to_canonical(3.0, "mg/L", get_analyte("nitrite"), "NO2")
    total = ratio_value(rule, {"nitrate": no3, "nitrite": no2})
    assert total == pytest.approx((40.0 * N_PER_NO3 + 3.0 * N_PER_NO2) / 10.0, rel=1e-4)
    assert total < 1.0
    no2 = to_canonical(4.0, "mg/L", get_analyte("nitrite"), "NO2")
    assert ratio_value(rule, {"nitrate": no3, "nitrite": no2}) > 1.0
    # a limit stated in ug/L as N is checked and converted: 10000 ug/L as N is 10 mg/L
    from dataclasses import replace

    ug = [replace(lim, value=10000.0, unit="ug/L") if lim.analyte == "nitrate_nitrite" else lim
          for lim in us]
    (rule_ug,) = species_sum_rules(ug, ["nitrate", "nitrite"])
    assert ratio_value(rule_ug, {"nitrate": 9.0, "nitrite": 0.5}) == pytest.approx(0.95)
    # measured as a sum, its own limit applies; without nitrite there is nothing to add
    assert species_sum_rules(us, ["nitrate", "nitrite", "nitrate_nitrite"]) == []
    assert species_sum_rules(us, ["nitrate"]) == []
    assert species_sum_rules(limit_set("WHO"), ["nitrate", "nitrite"]) == []


def test_catalogue_file_is_package_data():
    # pyproject.toml ships blendq's "data/**/*" in the wheel; the catalogue must match it
    import re
    from pathlib import Path

    from blendq.chemistry.limits import CATALOGUE_FILE

    root = Path(__file__).parents[2]
    patterns = re.findall(r'blendq = \[([^\]]*)\]', (root / "pyproject.toml").read_text())
    assert patterns and '"data/**/*"' in patterns[0]
    assert CATALOGUE_FILE in set((root / "blendq").glob("data/**/*"))
