"""Tests of blendq.units against exact definitions of the units.

Exact values used below (NIST Special Publication 811, 2008 ed., Guide for the Use of the
International System of Units, appendix B.8 and footnotes):
- 1 foot = 0.3048 m exactly (international foot);
- 1 inch = 0.0254 m exactly;
- 1 US liquid gallon = 231 in^3 exactly = 3.785411784e-3 m^3 exactly;
- 1 L = 1e-3 m^3 exactly; 1 d = 86400 s; 1 min = 60 s; 1 h = 3600 s.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from blendq.errors import InputError
from blendq.units import (
    BASE_UNITS,
    Q_,
    format_quantity,
    from_base,
    parse_quantity,
    parse_unit,
    significant,
    to_base,
    unit_system,
)

# NIST SP 811: 1 US gallon = 231 in^3, 1 in = 0.0254 m (exact)
US_GALLON_M3 = 231 * 0.0254**3  # = 3.785411784e-3 m^3
FOOT_M = 0.3048  # NIST SP 811, exact
DAY_S = 86400.0
DAY_MIN = 1440.0


def test_gallon_is_231_cubic_inches():
    # NIST SP 811 B.8: gallon [US liquid] = 3.785 411 784 E-03 m^3 (exact)
    assert US_GALLON_M3 == pytest.approx(3.785411784e-3, rel=1e-15)
    assert to_base(1.0, "gallon", "volume") == pytest.approx(US_GALLON_M3, rel=1e-12)


@pytest.mark.parametrize(
    ("unit", "expected_m3_per_d"),
    [
        # 1 gpm = 231 in^3 x 0.0254^3 m^3/in^3 x 1440 min/d = 5.45099296896 m^3/d (NIST SP 811)
        ("gpm", US_GALLON_M3 * DAY_MIN),
        ("gal/min", US_GALLON_M3 * DAY_MIN),
        # 1 L/s = 1e-3 m^3 x 86400 s/d = 86.4 m^3/d (exact)
        ("L/s", 86.4),
        ("l/s", 86.4),
        ("lps", 86.4),
        # 1 m^3/d is the base unit
        ("m3/d", 1.0),
        ("m3/day", 1.0),
        # 1 m^3/h = 24 m^3/d
        ("m3/h", 24.0),
        ("m3/hr", 24.0),
        # 1 ft^3/s = 0.3048^3 m^3 x 86400 s/d = 2446.5755455488 m^3/d (NIST SP 811, exact foot)
        ("ft3/s", FOOT_M**3 * DAY_S),
        ("cfs", FOOT_M**3 * DAY_S),
        # 1 MGD = 1e6 US gallons per day = 3785.411784 m^3/d
        ("MGD", 1e6 * US_GALLON_M3),
    ],
)
def test_rate_conversions_to_m3_per_day(unit, expected_m3_per_d):
    assert to_base(1.0, unit, "rate") == pytest.approx(expected_m3_per_d, rel=1e-12)


def test_rate_conversion_written_out():
    # 500 gpm = 500 x 5.45099296896 = 2725.49648448 m^3/d (NIST SP 811 gallon, exact)
    assert to_base(500.0, "gpm", "rate") == pytest.approx(2725.49648448, rel=1e-12)
    # 1 ft^3/s = 2446.5755455488 m^3/d
    assert to_base(1.0, "ft3/s", "rate") == pytest.approx(2446.5755455488, rel=1e-12)


def test_rate_round_trip_from_base():
    values = np.array([0.0, 1.0, 1234.5])
    back = from_base(values * to_base(1.0, "gpm", "rate"), "rate", "gpm")
    np.testing.assert_allclose(back, values, rtol=1e-12, atol=0.0)


@pytest.mark.parametrize(
    ("unit", "expected_m"),
    [("ft", FOOT_M), ("foot", FOOT_M), ("m", 1.0), ("in", 0.0254), ("cm", 0.01)],
)
def test_length_conversions(unit, expected_m):
    # NIST SP 811: foot = 0.3048 m, inch = 0.0254 m (exact)
    assert to_base(1.0, unit, "length") == pytest.approx(expected_m, rel=1e-12)


def test_transmissivity_ft2_per_day():
    # 1 ft^2/d = 0.3048^2 m^2/d = 0.09290304 m^2/d (NIST SP 811)
    assert to_base(1.0, "ft2/d", "transmissivity") == pytest.approx(0.09290304, rel=1e-12)
    # 1 gpd/ft = 3.785411784e-3 m^3/d / 0.3048 m = 0.01241932... m^2/d
    assert to_base(1.0, "gpd_per_ft", "transmissivity") == pytest.approx(
        US_GALLON_M3 / FOOT_M, rel=1e-12
    )


@pytest.mark.parametrize(
    ("unit", "expected_mg_per_l"),
    [
        ("mg/L", 1.0),
        ("mg/l", 1.0),
        ("ug/L", 1e-3),
        ("ug/l", 1e-3),
        ("µg/L", 1e-3),
        ("μg/L", 1e-3),
        ("ppb", 1e-3),
        ("ng/L", 1e-6),
        ("ng/l", 1e-6),
        ("ppm", 1.0),
        ("g/m**3", 1.0),
    ],
)
def test_concentration_conversions(unit, expected_mg_per_l):
    # SI prefixes: 1 ug = 1e-3 mg, 1 ng = 1e-6 mg (exact)
    assert to_base(1.0, unit, "concentration") == pytest.approx(expected_mg_per_l, rel=1e-12)


def test_ten_ug_per_litre_is_0_010_mg_per_litre():
    # 40 CFR 141.62(b) states the arsenic MCL as 0.010 mg/L; WHO and the EU write it 10 ug/L
    assert to_base(10.0, "ug/L", "concentration") == pytest.approx(0.010, rel=1e-12)


def test_milliequivalents_per_litre():
    # 1 meq/L = 1e-3 eq / 1e-3 m^3 = 1 eq/m^3 (SI prefixes, exact)
    u = parse_unit("meq/L")
    assert parse_unit("meq/l") == u
    assert Q_(1.0, u).to("eq/m**3").magnitude == pytest.approx(1.0, rel=1e-12)
    assert Q_(2.5, u).to("ueq/mL").magnitude == pytest.approx(2.5, rel=1e-12)
    # meq/L is not a mass concentration
    with pytest.raises(InputError, match="not a concentration unit"):
        to_base(1.0, "meq/L", "concentration")


def test_walton_well_loss_criteria_in_si():
    # 1 s^2/ft^5 = (1/60)^2 min^2 / 0.3048^5 m^5 = 0.105591... min^2/m^5 (NIST SP 811 foot);
    # the SI form of Walton's (1962) criteria quotes 1 s^2/ft^5 = 0.1056 min^2/m^5
    by_hand = (1.0 / 60.0) ** 2 / FOOT_M**5
    assert by_hand == pytest.approx(0.1056, rel=1e-3)
    c_base = to_base(1.0, "s2/ft5", "well_loss")
    assert from_base(c_base, "well_loss", "min2/m5") == pytest.approx(by_hand, rel=1e-12)
    assert from_base(c_base, "well_loss", "min2/m5") == pytest.approx(0.1056, rel=1e-3)
    # the criteria 5, 10 and 40 s^2/ft^5 become about 0.53, 1.06 and 4.2 min^2/m^5, the
    # rounded 0.5, 1 and 4 min^2/m^5 quoted in SI (Walton 1962, by a published
    # restatement)
    si = [from_base(to_base(c, "s2/ft5", "well_loss"), "well_loss", "min2/m5")
          for c in (5.0, 10.0, 40.0)]
    np.testing.assert_allclose(si, [0.528, 1.056, 4.224], rtol=1e-3)
    # base unit d^2/m^5: 1 s^2/ft^5 = (1/86400)^2 d^2 / 0.3048^5 m^5
    assert c_base == pytest.approx((1.0 / DAY_S) ** 2 / FOOT_M**5, rel=1e-12)


def test_conductance_and_conductivity():
    # 1 ft/d = 0.3048 m/d; 1 ft^2/d = 0.09290304 m^2/d (NIST SP 811)
    assert to_base(1.0, "ft/d", "conductivity") == pytest.approx(0.3048, rel=1e-12)
    assert to_base(1.0, "ft2/day", "conductance") == pytest.approx(0.09290304, rel=1e-12)
    # 1 m/s = 86400 m/d
    assert to_base(1e-4, "m/s", "conductivity") == pytest.approx(8.64, rel=1e-12)


@pytest.mark.parametrize(
    ("unit", "kind"),
    [
        ("gpm", "length"),
        ("ft", "rate"),
        ("mg/L", "rate"),
        ("m3/d", "concentration"),
        ("ft", "concentration"),
        ("s2/ft5", "rate"),
        ("d", "length"),
        ("m2/d", "conductivity"),
    ],
)
def test_wrong_dimension_raises_input_error(unit, kind):
    with pytest.raises(InputError) as info:
        to_base(1.0, unit, kind)
    message = str(info.value)
    assert unit in message
    assert "expected" in message


@pytest.mark.parametrize("unit", ["bogus", "gallons per fortnightly", "m3/d/", "1/0"])
def test_unknown_unit_raises_input_error(unit):
    with pytest.raises(InputError, match="not a unit blendq knows"):
        parse_unit(unit)
    with pytest.raises(InputError):
        to_base(1.0, unit, "rate")


def test_parse_quantity_with_unit_text():
    # 12.5 ft = 12.5 x 0.3048 m = 3.81 m (NIST SP 811)
    assert parse_quantity("12.5 ft", "length") == pytest.approx(3.81, rel=1e-12)
    assert parse_quantity("12.5ft", "length") == pytest.approx(3.81, rel=1e-12)
    assert parse_quantity("  -2.5e1 m ", "length") == pytest.approx(-25.0, rel=1e-12)
    assert parse_quantity(".5 L/s", "rate") == pytest.approx(43.2, rel=1e-12)
    # a unit in the text wins over the default
    assert parse_quantity("100 gpm", "rate", default_unit="m3/d") == pytest.approx(
        100 * US_GALLON_M3 * DAY_MIN, rel=1e-12
    )


def test_parse_quantity_bare_numbers_with_default_unit():
    assert parse_quantity(12.5, "length", default_unit="ft") == pytest.approx(3.81, rel=1e-12)
    assert parse_quantity(3, "rate", default_unit="L/s") == pytest.approx(259.2, rel=1e-12)
    assert parse_quantity("12.5", "length", default_unit="ft") == pytest.approx(3.81, rel=1e-12)
    assert parse_quantity("7", "concentration", default_unit="ug/L") == pytest.approx(
        0.007, rel=1e-12
    )


@pytest.mark.parametrize("value", [12.5, 3, "12.5", " 4 "])
def test_parse_quantity_bare_number_without_default_raises(value):
    with pytest.raises(InputError, match="has no unit"):
        parse_quantity(value, "length")


@pytest.mark.parametrize("text", ["", "ft", "twelve ft", "nan ft", "1.2.3 m", True])
def test_parse_quantity_not_a_number_raises(text):
    with pytest.raises(InputError):
        parse_quantity(text, "length", default_unit="m")


@pytest.mark.parametrize("value", [math.inf, -math.inf, math.nan])
def test_parse_quantity_non_finite_raises(value):
    with pytest.raises(InputError, match="not a finite number"):
        parse_quantity(value, "length", default_unit="m")


def test_parse_quantity_wrong_dimension_raises():
    with pytest.raises(InputError, match="not a length unit"):
        parse_quantity("5 gpm", "length")
    with pytest.raises(InputError, match="not a rate unit"):
        parse_quantity(5.0, "rate", default_unit="ft")


def test_base_units_are_self_consistent():
    # every base unit converts to itself with factor one
    for kind, unit in BASE_UNITS.items():
        if kind == "temperature":
            continue  # offset unit: checked below
        assert to_base(1.0, unit, kind) == pytest.approx(1.0, rel=1e-12)
    # 68 degF = 20 degC (exact: (68 - 32) x 5/9)
    assert to_base(68.0, "degF", "temperature") == pytest.approx(20.0, rel=1e-12)


def test_format_quantity_in_both_systems():
    # 1000 m^3/d / 5.45099296896 m^3/d per gpm = 183.452... gpm
    assert format_quantity(1000.0, "rate", "US") == "183 gpm"
    # SI groups thousands with a narrow no-break space (BIPM SI Brochure 2019, 5.4.4): a reader
    # who writes decimals with a comma cannot take "1 000" for one
    assert format_quantity(1000.0, "rate", "SI") == "1\u202f000 m³/d"
    # three significant digits, thousands without an exponent
    assert format_quantity(2183.4, "rate", "SI") == "2\u202f180 m³/d"
    assert format_quantity(1637.0, "rate", "SI") == "1\u202f640 m³/d"
    assert format_quantity(-2183.4, "rate", "SI") == "-2\u202f180 m³/d"
    assert format_quantity(to_base(2183.4, "gpm", "rate"), "rate", "US") == "2,180 gpm"
    assert format_quantity(12.345, "rate", "SI") == "12.3 m³/d"
    assert format_quantity(2.5e-4, "length", "SI") == "0.00025 m"
    assert format_quantity(3.048, "length", "US", digits=4) == "10 ft"


def test_temperature_difference_is_not_a_reading():
    # found by fuzzing: a "delta_degC" header made pint raise a DimensionalityError
    with pytest.raises(InputError):
        to_base(14.6, "delta_degC", "temperature")
    # a Fahrenheit reading converts: (60 - 32) x 5/9 = 15.556 C (NIST SP 811)
    assert to_base(60.0, "degF", "temperature") == pytest.approx(15.5556, rel=1e-4)


def test_litres_per_second_display():
    # 1 L/s = 1e-3 m^3 x 86400 s/d = 86.4 m^3/d (exact)
    assert format_quantity(86.4, "rate", "SI-L/s") == "1 L/s"
    assert from_base(86.4, "rate", "L/s") == pytest.approx(1.0, rel=1e-12)
    # 1 gpm = 3.785411784 L / 60 s = 0.0630901964 L/s (NIST SP 811: 1 US gal = 3.785411784 L)
    assert from_base(to_base(1.0, "gpm", "rate"), "rate", "L/s") == \
        pytest.approx(3.785411784 / 60.0, rel=1e-12)
    # 500 gpm = 31.5450982 L/s; lengths stay in metres, thousands grouped as in SI
    assert format_quantity(to_base(500.0, "gpm", "rate"), "rate", "SI-L/s") == "31.5 L/s"
    assert format_quantity(30.48, "length", "SI-L/s") == "30.5 m"
    assert format_quantity(86.4 * 1234.0, "rate", "SI-L/s") == "1\u202f230 L/s"
    assert significant(1234.0, 3, "SI-L/s") == "1\u202f230"


@pytest.mark.parametrize(("text", "name"), [("US", "US"), ("us", "US"), (" si ", "SI"),
                                            ("SI-L/s", "SI-L/s"), ("si-l/s", "SI-L/s")])
def test_unit_system_names(text, name):
    assert unit_system(text) == name


@pytest.mark.parametrize("text", ["L/s", "metric", "", "SI L/s"])
def test_unknown_unit_system_names_the_choices(text):
    with pytest.raises(InputError, match='"US", "SI", "SI-L/s"'):
        unit_system(text)


@pytest.mark.parametrize(("value", "text"), [(999.6, "1,000"), (999.4, "999"), (-999.7, "-1,000"),
                                             (999_999_999.0, "1e+09"), (0.00012345, "0.000123")])
def test_significant_decides_the_form_after_rounding(value, text):
    # 999.6 rounds to three digits as 1,000: written with a separator, never as 1e+03
    assert significant(value, 3, "US") == text
