"""Tests of blendq.chemistry.analytes against reference molar-mass libraries and published factors.

References used below:
- ``molmass`` (PyPI; C. Gohlke) and ``periodictable`` (PyPI; P. Kienzle): independent tables of
  standard atomic weights, used as reference libraries.
- IUPAC abridged standard atomic weights (Prohaska et al. 2022, Pure Appl. Chem. 94(5)).
- National Research Council (1995) Nitrate and Nitrite in Drinking Water, National Academy
  Press: 1 mg/L NO3-N = 4.429 mg/L NO3.
- Standard Methods for the Examination of Water and Wastewater, 1030E (ion balance in meq/L),
  equivalent weights Ca 20.04 mg/meq and alkalinity 50.04 mg CaCO3/meq (values not verified in
  the standard here; checked against molar masses from molmass).
"""

from __future__ import annotations

import molmass
import periodictable
import pytest

from blendq.chemistry.analytes import (
    ATOMIC_WEIGHT,
    CATALOGUE,
    get_analyte,
    molar_mass,
    nitrate_n_to_no3,
    nitrite_n_to_no2,
    normalise_basis,
    to_canonical,
)
from blendq.errors import InputError


def _molmass(formula: str) -> float:
    """Average molar mass [g/mol] from the molmass library."""
    return molmass.Formula(formula).mass


def _periodictable(formula: str) -> float:
    """Average molar mass [g/mol] from the periodictable library."""
    return periodictable.formula(formula).mass


@pytest.mark.parametrize("element", sorted(ATOMIC_WEIGHT))
def test_atomic_weights_against_reference_libraries(element):
    # molmass and periodictable standard atomic weights. rtol 2e-4: sulfur has the IUPAC
    # interval [32.059, 32.076]; the abridged value is 32.06 and molmass uses 32.0648
    # (relative difference 1.5e-4). All other elements agree to better than 1e-4.
    rtol = 2e-4 if element == "S" else 1e-4
    assert ATOMIC_WEIGHT[element] == pytest.approx(_molmass(element), rel=rtol)
    assert ATOMIC_WEIGHT[element] == pytest.approx(
        periodictable.elements.symbol(element).mass, rel=1e-4
    )


@pytest.mark.parametrize(
    ("formula", "by_hand"),
    [
        # sums of IUPAC abridged weights (Prohaska et al. 2022), written out:
        ("NO3", 14.007 + 3 * 15.999),  # 62.004
        ("NO2", 14.007 + 2 * 15.999),  # 46.005
        ("N", 14.007),
        ("As", 74.922),
        ("CaCO3", 40.078 + 12.011 + 3 * 15.999),  # 100.086
        ("SO4", 32.06 + 4 * 15.999),  # 96.056
        ("HCO3", 1.008 + 12.011 + 3 * 15.999),  # 61.016
    ],
)
def test_molar_masses(formula, by_hand):
    assert molar_mass(formula) == pytest.approx(by_hand, rel=1e-12)
    # molmass and periodictable (reference libraries); rtol 1e-4 (SO4: 1e-4 covers the
    # 6.4e-5 difference that sulfur's interval gives)
    assert molar_mass(formula) == pytest.approx(_molmass(formula), rel=1e-4)
    assert molar_mass(formula) == pytest.approx(_periodictable(formula), rel=1e-4)


@pytest.mark.parametrize("formula", ["", "no3", "Xx2", "NO3-", "Ca(OH)2", "3N"])
def test_molar_mass_rejects_unreadable_formula(formula):
    with pytest.raises(ValueError, match="formula|atomic weight"):
        molar_mass(formula)


def test_nitrate_factor_against_molmass_and_nrc():
    factor = nitrate_n_to_no3()
    # M(NO3)/M(N) from molmass: 62.0049/14.0067 = 4.4268
    assert factor == pytest.approx(_molmass("NO3") / _molmass("N"), rel=1e-4)
    # National Research Council (1995): 1 mg/L NO3-N = 4.429 mg/L NO3
    assert factor == pytest.approx(4.429, rel=1e-3)


def test_nitrite_factor_against_molmass():
    factor = nitrite_n_to_no2()
    # M(NO2)/M(N) from molmass: 46.0055/14.0067 = 3.2845
    assert factor == pytest.approx(_molmass("NO2") / _molmass("N"), rel=1e-4)
    # about 3.29 (a rounded factor attributed to NRC 1995, not verified in a source here)
    assert factor == pytest.approx(3.29, rel=2e-3)


def test_no3_n_means_as_nitrogen():
    nitrate = get_analyte("nitrate")
    # "NO3-N" is nitrate-nitrogen: the mass of N (NRC 1995 usage)
    for spelling in ("NO3-N", "no3-n", "as N", "N", "as nitrogen", "  as n "):
        assert normalise_basis(nitrate, spelling) == "N"
    # "as NO3", "NO3-" and "ion" are the nitrate ion
    for spelling in ("as NO3", "NO3", "NO3-", "ion", "as no3"):
        assert normalise_basis(nitrate, spelling) == "NO3"
    nitrite = get_analyte("nitrite")
    assert normalise_basis(nitrite, "NO2-N") == "N"
    assert normalise_basis(nitrite, "as NO2") == "NO2"
    assert normalise_basis(nitrite, "ion") == "NO2"


def test_to_canonical_nitrate():
    nitrate = get_analyte("nitrate")
    # 10 mg/L as N stays 10 mg/L as N
    assert to_canonical(10.0, "mg/L", nitrate, "NO3-N") == pytest.approx(10.0, rel=1e-12)
    # 44.27 mg/L as NO3 = 44.27 x 14.007/62.004 = 10.0007 mg/L as N (molar masses)
    assert to_canonical(44.27, "mg/L", nitrate, "as NO3") == pytest.approx(
        44.27 * _molmass("N") / _molmass("NO3"), rel=1e-4
    )
    # 4429 ug/L as NO3 = 4.429 mg/L NO3 = 1 mg/L NO3-N (NRC 1995)
    assert to_canonical(4429.0, "ug/L", nitrate, "as NO3") == pytest.approx(1.0, rel=1e-3)


@pytest.mark.parametrize("basis", [None, "", "   "])
def test_nitrate_without_basis_raises(basis):
    nitrate = get_analyte("nitrate")
    with pytest.raises(InputError, match="needs a reporting basis"):
        normalise_basis(nitrate, basis)
    with pytest.raises(InputError, match="needs a reporting basis"):
        to_canonical(5.0, "mg/L", nitrate, basis)


def test_nitrite_and_sum_without_basis_raise():
    for name in ("nitrite", "nitrate+nitrite"):
        with pytest.raises(InputError, match="needs a reporting basis"):
            to_canonical(1.0, "mg/L", get_analyte(name), None)


def test_wrong_basis_raises():
    with pytest.raises(InputError, match='"as NO2" does not apply to Nitrate'):
        normalise_basis(get_analyte("nitrate"), "as NO2")
    with pytest.raises(InputError, match="does not apply to Arsenic"):
        normalise_basis(get_analyte("arsenic"), "as N")
    # nitrate+nitrite is only reported as N
    with pytest.raises(InputError, match="does not apply"):
        normalise_basis(get_analyte("nitrate+nitrite"), "as NO3")


def test_analytes_without_basis_need_none():
    arsenic = get_analyte("As")
    assert arsenic.key == "arsenic"
    assert normalise_basis(arsenic, None) == "As"
    # 10 ug/L = 0.010 mg/L
    assert to_canonical(10.0, "ug/L", arsenic, None) == pytest.approx(0.010, rel=1e-12)


@pytest.mark.parametrize(
    ("name", "key"),
    [
        ("Nitrate", "nitrate"),
        ("NO3", "nitrate"),
        ("Nitrate-N", "nitrate"),
        ("NO3-N", "nitrate"),
        ("NO2-N", "nitrite"),
        ("nitrate + nitrite", "nitrate_nitrite"),
        ("Sulphate", "sulfate"),
        ("HCO3", "bicarbonate"),
        ("Total Alkalinity", "alkalinity"),
        ("U", "uranium"),
    ],
)
def test_analyte_spellings(name, key):
    assert get_analyte(name).key == key


def test_unknown_analyte_names():
    boron = get_analyte("Boron")
    assert boron.key == "boron"
    assert boron.canonical_basis == ""
    assert not boron.needs_basis
    with pytest.raises(InputError, match="not an analyte name"):
        get_analyte("")
    with pytest.raises(InputError, match="not an analyte name"):
        get_analyte("2,4-D?")


@pytest.mark.parametrize(
    ("key", "formula", "charge", "standard_methods"),
    [
        # Standard Methods 1030E equivalent weights [mg/meq] (not verified in the standard here), checked against
        # molmass molar mass / |charge|
        ("calcium", "Ca", 2, 20.04),
        ("magnesium", "Mg", 2, 12.15),
        ("sodium", "Na", 1, 22.99),
        ("chloride", "Cl", 1, 35.45),
        ("sulfate", "SO4", 2, 48.03),
        ("bicarbonate", "HCO3", 1, 61.02),
        # alkalinity as CaCO3: CaCO3 neutralises two equivalents -> 100.09/2 mg/meq
        ("alkalinity", "CaCO3", 2, 50.04),
    ],
)
def test_equivalent_weights(key, formula, charge, standard_methods):
    analyte = CATALOGUE[key]
    assert analyte.equivalent_weight() == pytest.approx(_molmass(formula) / charge, rel=1e-4)
    assert analyte.equivalent_weight() == pytest.approx(standard_methods, rel=5e-4)
    # 1 meq/L reported -> the equivalent weight in mg/L on the canonical basis
    assert to_canonical(1.0, "meq/L", analyte, None) == pytest.approx(
        analyte.equivalent_weight(), rel=1e-12
    )


def test_nitrate_in_meq_per_litre_is_nitrogen_mass():
    # 1 meq/L of NO3- = 1 mmol/L = 14.007 mg/L as N = 62.004 mg/L as NO3
    nitrate = get_analyte("nitrate")
    assert to_canonical(1.0, "meq/L", nitrate, "as N") == pytest.approx(_molmass("N"), rel=1e-4)
    assert to_canonical(2.0, "ueq/mL", nitrate, "as N") == pytest.approx(
        2 * _molmass("N"), rel=1e-4
    )


def test_meq_of_uncharged_analyte_raises():
    with pytest.raises(InputError, match="needs a charged ion"):
        to_canonical(1.0, "meq/L", get_analyte("arsenic"), None)


def test_labels():
    assert get_analyte("nitrate").label() == "Nitrate (as N)"
    assert get_analyte("arsenic").label() == "Arsenic"


@pytest.mark.parametrize("name, basis", [("Nitrate-N", "N"), ("NO3-N", "N"), ("nitrate as N", "N"),
                                         ("Nitrate (as N)", "N"), ("nitrate as NO3", "NO3"),
                                         ("Nitrite-N", "N"), ("nitrate", None), ("arsenic", None)])
def test_names_that_state_a_basis(name, basis):
    # "NO3-N" is nitrate-nitrogen, i.e. nitrate reported as N (NRC 1995 usage)
    from blendq.chemistry.analytes import implied_basis

    assert implied_basis(name) == basis
    if basis is not None:
        assert get_analyte(name).key in ("nitrate", "nitrite")
