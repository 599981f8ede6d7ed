"""One pint unit registry for blendq, and conversion to the core's base units.

The numerical core works on plain floats in these base units (see ``docs/glossary.md``):

==================  ===============  ==========================================
quantity            base unit        notes
==================  ===============  ==========================================
length, depth, head m                depths positive downward from the datum
pumping rate        m^3/d
time                d
conductance         m^2/d            zone conductance G, Q = G * dh
transmissivity      m^2/d
conductivity        m/d
nonlinear loss      d^2/m^5          dh = D * Q * |Q|
well loss           d^2/m^5          s = C * Q^2 (Jacob 1947)
concentration       mg/L             on the analyte's canonical basis
==================  ===============  ==========================================

pint is used at the edges only: to read user input and to format output.
"""

from __future__ import annotations

import functools
import math
import re

import pint

from blendq.errors import InputError


def _registry() -> pint.UnitRegistry:
    """pint's registry, with its parsed definitions cached in the user's cache folder when that
    is writable (a tenth of the start-up time); a plain registry otherwise."""
    try:
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=":auto:")
    except Exception:  # noqa: BLE001 - no cache folder: build the registry from scratch
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


ureg = _registry()
ureg.define("equivalent = [ionic_charge] = eq")
ureg.define("gpm = gallon / minute")
ureg.define("gph = gallon / hour")
ureg.define("gpd = gallon / day")
ureg.define("MGD = 1e6 * gallon / day")
ureg.define("cfs = foot ** 3 / second")
ureg.define("lpm = liter / minute")
ureg.define("lps = liter / second")
ureg.define("ppm_w = milligram / liter")  # spelled out so 'ppm' (dimensionless) is not taken
ureg.define("gpd_per_ft = gallon / day / foot")
Q_ = ureg.Quantity

#: base unit of each kind of quantity the core uses
BASE_UNITS: dict[str, str] = {
    "length": "m",
    "rate": "m**3/d",
    "time": "d",
    "conductance": "m**2/d",
    "transmissivity": "m**2/d",
    "conductivity": "m/d",
    "nonlinear_loss": "d**2/m**5",
    "well_loss": "d**2/m**5",
    "concentration": "mg/L",
    "dimensionless": "dimensionless",
    "temperature": "degC",
    "specific_conductance": "uS/cm",
    "volume": "m**3",
}

#: display units of the two unit systems
DISPLAY_UNITS: dict[str, dict[str, str]] = {
    "US": {
        "length": "ft",
        "rate": "gpm",
        "time": "d",
        "conductance": "ft**2/d",
        "transmissivity": "ft**2/d",
        "conductivity": "ft/d",
        "well_loss": "s**2/ft**5",
        "volume": "gallon",
    },
    "SI": {
        "length": "m",
        "rate": "m**3/d",
        "time": "d",
        "conductance": "m**2/d",
        "transmissivity": "m**2/d",
        "conductivity": "m/d",
        "well_loss": "min**2/m**5",
        "volume": "m**3",
    },
}
#: SI with rates in litres per second, the rate unit many well operators read from a meter
DISPLAY_UNITS["SI-L/s"] = {**DISPLAY_UNITS["SI"], "rate": "L/s"}

#: the display unit systems, as a project's ``display_units`` and ``--units`` name them
UNIT_SYSTEMS: tuple[str, ...] = tuple(DISPLAY_UNITS)


def unit_system(text: str) -> str:
    """The unit system named by ``text`` in any capitalisation: "US", "SI" or "SI-L/s".

    Raises
    ------
    InputError
        If the text names none of :data:`UNIT_SYSTEMS` (the message lists them).
    """
    key = str(text).strip().upper()
    for name in UNIT_SYSTEMS:
        if name.upper() == key:
            return name
    raise InputError(f'"{text}" is not a unit system (expected ' +
                     ", ".join(f'"{n}"' for n in UNIT_SYSTEMS) + ")", field="units")


def is_metric(system: str) -> bool:
    """True for the SI systems (metric paper, thousands grouped by a narrow space)."""
    return system != "US"

# spellings seen in spreadsheets and lab files, mapped to pint expressions
_ALIASES = {
    "m3/d": "m**3/d",
    "m3/day": "m**3/day",
    "m3/h": "m**3/h",
    "m3/hr": "m**3/h",
    "m3/s": "m**3/s",
    "ft3/s": "ft**3/s",
    "ft2/d": "ft**2/d",
    "ft2/day": "ft**2/day",
    "m2/d": "m**2/d",
    "m2/day": "m**2/day",
    "m2/s": "m**2/s",
    "l/s": "L/s",
    "l/min": "L/min",
    "mg/l": "mg/L",
    "ug/l": "ug/L",
    "µg/l": "ug/L",
    "µg/L": "ug/L",
    "μg/L": "ug/L",
    "μg/l": "ug/L",
    "ng/l": "ng/L",
    "meq/l": "meq/L",
    "us/cm": "uS/cm",
    "µs/cm": "uS/cm",
    "µS/cm": "uS/cm",
    "ppm": "ppm_w",
    "ppb": "ug/L",
    "deg c": "degC",
    "°c": "degC",
    "°C": "degC",
    "c": "degC",
    "s2/ft5": "s**2/ft**5",
    "min2/m5": "min**2/m**5",
    "d2/m5": "d**2/m**5",
}

_THOUSANDS = re.compile(r"^[,.]\d")  # the unit part of "1,260 ft" or "1.260,5 ft"
_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


@functools.lru_cache(maxsize=512)
def parse_unit(text: str) -> pint.Unit:
    """Parse a unit string, accepting common spreadsheet spellings.

    Raises
    ------
    InputError
        If the text is not a unit pint knows.
    """
    raw = str(text).strip()
    key = _ALIASES.get(raw, _ALIASES.get(raw.lower(), raw))
    try:
        return ureg.Unit(key)
    except Exception as exc:  # pint raises several types for bad units
        raise InputError(f'"{raw}" is not a unit blendq knows') from exc


def _dimension_ok(unit: pint.Unit, kind: str) -> bool:
    base = ureg.Unit(BASE_UNITS[kind])
    return unit.dimensionality == base.dimensionality


def to_base(value: float, unit: str, kind: str) -> float:
    """Convert ``value`` in ``unit`` to the base unit of ``kind``.

    Parameters
    ----------
    value : float
        Magnitude.
    unit : str
        Unit text, for example ``"gpm"`` or ``"ft"``.
    kind : str
        One of the keys of :data:`BASE_UNITS`.

    Returns
    -------
    float
        Magnitude in the base unit of ``kind``.

    Raises
    ------
    InputError
        If the unit is unknown or of the wrong dimension (the message says what was expected).
    """
    u = parse_unit(unit)
    if not _dimension_ok(u, kind):
        raise InputError(f'"{unit}" is not a {kind.replace("_", " ")} unit (expected e.g. '
                         f'{EXAMPLE_UNITS.get(kind, BASE_UNITS[kind])})')
    try:
        return float(Q_(value, u).to(BASE_UNITS[kind]).magnitude)
    except pint.errors.PintError as exc:  # e.g. a temperature difference where a reading is due
        raise InputError(f'"{unit}" cannot be read as a {kind.replace("_", " ")} '
                         f"({BASE_UNITS[kind]}): {exc}") from exc


def from_base(value, kind: str, unit: str):
    """Convert a magnitude (float or array) in the base unit of ``kind`` to ``unit``."""
    return Q_(value, BASE_UNITS[kind]).to(parse_unit(unit)).magnitude


EXAMPLE_UNITS = {
    "length": '"ft" or "m"',
    "rate": '"gpm", "L/s", "m3/d", "m3/h" or "ft3/s"',
    "time": '"min", "h" or "d"',
    "conductance": '"ft2/d" or "m2/d"',
    "transmissivity": '"ft2/d" or "m2/d"',
    "conductivity": '"ft/d" or "m/d"',
    "concentration": '"mg/L", "ug/L" or "ng/L"',
    "nonlinear_loss": '"s2/ft5" or "d2/m5"',
    "well_loss": '"s2/ft5" or "min2/m5"',
}


def parse_quantity(text: str | float | int, kind: str, default_unit: str | None = None) -> float:
    """Parse ``"12.5 ft"`` (or a bare number with ``default_unit``) into base units of ``kind``.

    Raises
    ------
    InputError
        If the text has no number, no unit (and no default), or a unit of the wrong kind.
    """
    if isinstance(text, bool):
        raise InputError(f"{text!r} is not a quantity")
    if isinstance(text, (int, float)):
        if default_unit is None:
            raise InputError(f"{text!r} has no unit (write it as a string such as "
                             f'"{text} {BASE_UNITS[kind]}")')
        return check_finite(to_base(float(text), default_unit, kind))
    m = _NUMBER.match(str(text))
    if not m:
        raise InputError(f'"{text}" is not a number with a unit')
    if _THOUSANDS.match(m.group(2)):
        raise InputError(f'"{text}" has a thousands separator; write the number without it '
                         'and with a decimal point (e.g. "1260 ft" or "12.5 ft")')
    number, unit = m.group(1), m.group(2)
    if not unit:
        if default_unit is None:
            raise InputError(f'"{text}" has no unit (expected e.g. {EXAMPLE_UNITS.get(kind, BASE_UNITS[kind])})')
        unit = default_unit
    return check_finite(to_base(float(number), unit, kind))


def check_finite(value: float) -> float:
    """Return ``value`` or raise :class:`InputError` if it is NaN or infinite."""
    if value != value or value in (float("inf"), float("-inf")):
        raise InputError(f"{value!r} is not a finite number")
    return value


#: Thousands separator of SI display output: a narrow no-break space, so that "1 000" cannot
#: be misread by a reader who writes decimals with a comma (BIPM, The International System of
#: Units, 9th ed. 2019, section 5.4.4: digits may be grouped in threes by a small space, never
#: by a comma or a point). US output keeps the comma.
SI_THOUSANDS_SEPARATOR = "\u202f"


def format_percent(fraction: float) -> str:
    """A fraction as a percentage to one decimal, a whole number without the ".0" ("6.4%", "10%")."""
    return f"{fraction:.1%}".replace(".0%", "%")


def format_quantity(value: float, kind: str, system: str = "US", digits: int = 3) -> str:
    """Format a base-unit magnitude in the display unit of ``system`` (:data:`UNIT_SYSTEMS`)."""
    unit = DISPLAY_UNITS[system].get(kind, BASE_UNITS[kind])
    mag = from_base(value, kind, unit)
    return f"{significant(mag, digits, system)} {display_unit_label(unit)}"


def significant(value: float, digits: int = 3, system: str = "US") -> str:
    """A number rounded to ``digits`` significant digits, as a reader expects it: thousands
    with separators and no exponent (2,180 rather than 2.18e+03; in SI 2 180 with a narrow
    space, :data:`SI_THOUSANDS_SEPARATOR`), very small or very large numbers in exponent
    form."""
    rounded = float(f"{value:.{digits}g}") if math.isfinite(value) else value
    if math.isfinite(value) and 1e3 <= abs(rounded) < 1e9:  # 999.6 rounds to 1,000
        text = f"{rounded:,.0f}"
        return text.replace(",", SI_THOUSANDS_SEPARATOR) if is_metric(system) else text
    return f"{value:.{digits}g}"


def display_unit_label(unit: str) -> str:
    """A short printable label for a unit expression (``m**3/d`` -> ``m³/d``)."""
    return unit.replace("**2", "²").replace("**3", "³").replace("**5", "⁵").replace("gallon", "gal")
