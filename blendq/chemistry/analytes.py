"""Analyte catalogue: reporting bases, molar masses, charges and conversions.

Each analyte has a canonical basis; the core stores every concentration in mg/L on that basis.
Nitrate and nitrite are reported either "as N" (nitrogen mass) or as the ion ("as NO3",
"as NO2"); mixing the two is a classic error, so a nitrogen species with no stated basis is an
:class:`~blendq.errors.InputError`, never a guess.

Atomic weights are the IUPAC abridged standard atomic weights (Prohaska et al. 2022, Pure Appl.
Chem. 94(5)); the tests check them against the ``molmass`` and ``periodictable`` libraries.

References
----------
National Research Council (1995) Nitrate and Nitrite in Drinking Water. National Academy Press:
1 mg/L NO3-N = 4.429 mg/L NO3.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from blendq.errors import InputError

#: IUPAC abridged standard atomic weights [g/mol] (Prohaska et al. 2022)
ATOMIC_WEIGHT: dict[str, float] = {
    "H": 1.0080,
    "C": 12.011,
    "N": 14.007,
    "O": 15.999,
    "F": 18.998,
    "Na": 22.990,
    "Mg": 24.305,
    "S": 32.06,
    "Cl": 35.45,
    "K": 39.098,
    "Ca": 40.078,
    "Fe": 55.845,
    "Mn": 54.938,
    "As": 74.922,
    "Se": 78.971,
    "U": 238.03,
}

_TOKEN = re.compile(r"([A-Z][a-z]?)(\d*)")


def molar_mass(formula: str) -> float:
    """Molar mass [g/mol] of a simple formula such as ``"NO3"`` or ``"CaCO3"``.

    Parameters
    ----------
    formula : str
        Element symbols with optional counts; no brackets or charges.
    """
    pos = 0
    total = 0.0
    for m in _TOKEN.finditer(formula):
        if m.start() != pos:
            raise ValueError(f"cannot read formula {formula!r}")
        element, count = m.group(1), m.group(2)
        if element not in ATOMIC_WEIGHT:
            raise ValueError(f"no atomic weight for {element!r} in {formula!r}")
        total += ATOMIC_WEIGHT[element] * (int(count) if count else 1)
        pos = m.end()
    if pos != len(formula) or total == 0.0:
        raise ValueError(f"cannot read formula {formula!r}")
    return total


@dataclass(frozen=True)
class Analyte:
    """One analyte of the catalogue.

    Attributes
    ----------
    key : str
        Identifier used in files and tables (``"nitrate"``).
    name : str
        Printable name.
    canonical_basis : str
        Basis on which the core stores values (``"N"`` for nitrate); ``""`` when no basis applies.
    bases : dict
        Allowed bases mapped to the formula whose mass the value counts (``{"N": "N", "NO3": "NO3"}``).
    charge : int
        Ionic charge of the species, for ion balances (0 when not an ion of a balance).
    ion_formula : str
        Formula of the ion whose charge is ``charge`` (to compute equivalents).
    display_unit : str
        Preferred unit for tables and charts (``"mg/L"`` or ``"ug/L"``).
    needs_basis : bool
        True when a value without a stated basis must be rejected.
    """

    key: str
    name: str
    canonical_basis: str = ""
    bases: dict[str, str] = field(default_factory=dict)
    charge: int = 0
    ion_formula: str = ""
    display_unit: str = "mg/L"
    needs_basis: bool = False
    major_ion: bool = False

    def basis_factor(self, basis: str) -> float:
        """Factor that converts a value on ``basis`` to the canonical basis (mass ratio)."""
        basis = normalise_basis(self, basis)
        if not self.bases or basis == self.canonical_basis:
            return 1.0
        return molar_mass(self.bases[self.canonical_basis]) / molar_mass(self.bases[basis])

    def equivalent_weight(self) -> float:
        """Mass [mg] of the canonical basis per milliequivalent of the ion [mg/meq]."""
        if self.charge == 0:
            raise ValueError(f"{self.key} has no charge for an ion balance")
        mass_formula = self.bases.get(self.canonical_basis, self.ion_formula) or self.ion_formula
        return molar_mass(mass_formula) / abs(self.charge)

    def in_display_unit(self, values):
        """Concentrations [mg/L, canonical basis] in :attr:`display_unit` (array)."""
        from blendq.units import from_base

        return np.asarray(from_base(np.asarray(values, float), "concentration",
                                    self.display_unit))

    def label(self) -> str:
        """Name with basis, e.g. ``"Nitrate (as N)"``."""
        if self.canonical_basis and len(self.bases) > 1:
            return f"{self.name} (as {self.canonical_basis})"
        return self.name


def _ion(key, name, formula, charge, **kw) -> Analyte:
    return Analyte(key=key, name=name, canonical_basis=formula, bases={formula: formula},
                   charge=charge, ion_formula=formula, major_ion=True, **kw)


CATALOGUE: dict[str, Analyte] = {
    a.key: a
    for a in [
        Analyte("nitrate", "Nitrate", "N", {"N": "N", "NO3": "NO3"}, -1, "NO3",
                needs_basis=True, major_ion=True),
        Analyte("nitrite", "Nitrite", "N", {"N": "N", "NO2": "NO2"}, -1, "NO2", needs_basis=True),
        Analyte("nitrate_nitrite", "Nitrate+nitrite", "N", {"N": "N"}, 0, "", needs_basis=True),
        Analyte("arsenic", "Arsenic", "As", {"As": "As"}, display_unit="ug/L"),
        Analyte("uranium", "Uranium", "U", {"U": "U"}, display_unit="ug/L"),
        Analyte("selenium", "Selenium", "Se", {"Se": "Se"}, display_unit="ug/L"),
        Analyte("fluoride", "Fluoride", "F", {"F": "F"}, -1, "F"),
        Analyte("iron", "Iron", "Fe", {"Fe": "Fe"}),
        Analyte("manganese", "Manganese", "Mn", {"Mn": "Mn"}, display_unit="ug/L"),
        # PFAS (per- and polyfluoroalkyl substances), reported as the compound in ng/L
        Analyte("pfoa", "PFOA", display_unit="ng/L"),
        Analyte("pfos", "PFOS", display_unit="ng/L"),
        Analyte("pfhxs", "PFHxS", display_unit="ng/L"),
        Analyte("pfna", "PFNA", display_unit="ng/L"),
        Analyte("hfpo_da", "HFPO-DA", display_unit="ng/L"),
        _ion("calcium", "Calcium", "Ca", 2),
        _ion("magnesium", "Magnesium", "Mg", 2),
        _ion("sodium", "Sodium", "Na", 1),
        _ion("potassium", "Potassium", "K", 1),
        _ion("chloride", "Chloride", "Cl", -1),
        _ion("sulfate", "Sulfate", "SO4", -2),
        _ion("bicarbonate", "Bicarbonate", "HCO3", -1),
        _ion("carbonate", "Carbonate", "CO3", -2),
        # total alkalinity reported as CaCO3: one CaCO3 neutralises two equivalents
        Analyte("alkalinity", "Alkalinity", "CaCO3", {"CaCO3": "CaCO3"}, -2, "CaCO3",
                major_ion=True),
    ]
}

_ALIASES = {
    "no3": "nitrate",
    "nitrate-n": "nitrate",
    "nitrate as n": "nitrate",
    # "NO3-N" / "NO2-N" name the species (as N); without these aliases they became unknown
    # analytes and escaped the nitrate and nitrite limits
    "no3-n": "nitrate",
    "no2": "nitrite",
    "nitrite-n": "nitrite",
    "nitrite as n": "nitrite",
    "no2-n": "nitrite",
    "nitrate+nitrite": "nitrate_nitrite",
    "nitrate + nitrite": "nitrate_nitrite",
    "nitrate-nitrite": "nitrate_nitrite",
    "no3+no2": "nitrate_nitrite",
    "as": "arsenic",
    "u": "uranium",
    "se": "selenium",
    "f": "fluoride",
    "fe": "iron",
    "mn": "manganese",
    "hfpo-da": "hfpo_da",
    "genx": "hfpo_da",
    "ca": "calcium",
    "mg": "magnesium",
    "na": "sodium",
    "k": "potassium",
    "cl": "chloride",
    "so4": "sulfate",
    "sulphate": "sulfate",
    "hco3": "bicarbonate",
    "co3": "carbonate",
    "total alkalinity": "alkalinity",
}

# basis spellings: "as N", "N", "NO3-N" (nitrate-nitrogen, i.e. as N), "NO3-" (the ion)
_BASIS_ALIASES = {
    "no3-n": "N",
    "no2-n": "N",
    "nitrogen": "N",
    "no3-": "NO3",
    "no2-": "NO2",
    "ion": None,  # resolved per analyte
}

_KEY_OK = re.compile(r"^[a-z][a-z0-9_+\-]*$")


_NAME_BASIS = re.compile(r"^\s*(nitrate|nitrite|no3|no2)\s*(?:-\s*n|\(?\s*as\s+(n|no3|no2)\s*\)?)\s*$",
                         re.IGNORECASE)


def implied_basis(name: str) -> str | None:
    """The reporting basis a name states, if any: "Nitrate-N", "NO3-N" and "nitrate as N" say
    "N"; "nitrate as NO3" says "NO3"; a plain "nitrate" says nothing (None)."""
    m = _NAME_BASIS.match(str(name))
    if not m:
        return None
    if m.group(2) is None:  # the "-N" form: nitrate-nitrogen
        return "N"
    return m.group(2).upper()


def get_analyte(name: str) -> Analyte:
    """Look up an analyte by key or common spelling; an unknown name gives a plain analyte.

    Unknown names are allowed (a user may track any constituent) but must be simple words.
    Looked-up names are remembered (a long lab table names a few analytes many times).
    """
    try:
        return _LOOKED_UP[name]
    except (KeyError, TypeError):
        pass
    found = _get_analyte(name)
    if len(_LOOKED_UP) < 10_000 and isinstance(name, str):
        _LOOKED_UP[name] = found
    return found


_LOOKED_UP: dict[str, Analyte] = {}


def _get_analyte(name: str) -> Analyte:
    raw = str(name).strip()
    stated = _NAME_BASIS.match(raw)
    if stated:  # "Nitrate-N", "nitrate (as N)": the species, whatever the basis
        raw = stated.group(1)
    key = raw.lower().replace(" ", "_") if raw.lower() not in _ALIASES else _ALIASES[raw.lower()]
    key = _ALIASES.get(key, key)
    if key in CATALOGUE:
        return CATALOGUE[key]
    if not raw or not _KEY_OK.match(key):
        raise InputError(f'"{raw}" is not an analyte name (use letters, digits and _)')
    return Analyte(key=key, name=raw)


def normalise_basis(analyte: Analyte, basis: str | None) -> str:
    """Return the canonical spelling of ``basis`` for ``analyte``.

    Raises
    ------
    InputError
        If the analyte needs a basis and none is given, or the basis does not apply.
    """
    text = "" if basis is None else str(basis).strip()
    if text.lower().startswith("as "):
        text = text[3:].strip()
    if not text:
        if analyte.needs_basis:
            raise InputError(
                f"{analyte.name} needs a reporting basis: "
                + " or ".join(f'"as {b}"' for b in analyte.bases)
            )
        return analyte.canonical_basis
    low = text.lower()
    if low in _BASIS_ALIASES:
        mapped = _BASIS_ALIASES[low]
        text = mapped if mapped is not None else analyte.ion_formula
    for b in analyte.bases:
        if b.lower() == text.lower():
            return b
    if not analyte.bases:
        raise InputError(f'basis "{basis}" does not apply to {analyte.name} (leave it empty)')
    raise InputError(
        f'basis "{basis}" does not apply to {analyte.name} (expected '
        + " or ".join(f'"as {b}"' for b in analyte.bases) + ")"
    )


def to_canonical(value: float, unit: str, analyte: Analyte, basis: str | None) -> float:
    """Convert a concentration in ``unit`` on ``basis`` to mg/L on the canonical basis.

    Parameters
    ----------
    value : float
        Reported value.
    unit : str
        Mass concentration unit (``"mg/L"``, ``"ug/L"``, ``"ng/L"``) or ``"meq/L"`` for an ion.
    analyte : Analyte
    basis : str or None

    Returns
    -------
    float
        Concentration [mg/L] on ``analyte.canonical_basis``.
    """
    from blendq.units import parse_unit, to_base, ureg

    u = parse_unit(unit)
    if u.dimensionality == ureg.Unit("meq/L").dimensionality:
        if analyte.charge == 0:
            raise InputError(f'"{unit}" needs a charged ion; {analyte.name} has none')
        meq = float(value) * _meq_factor(u)
        return meq * analyte.equivalent_weight()
    factor = analyte.basis_factor(normalise_basis(analyte, basis))
    return to_base(value, unit, "concentration") * factor


def _meq_factor(u) -> float:
    from blendq.units import Q_

    return float(Q_(1.0, u).to("meq/L").magnitude)


def nitrate_n_to_no3() -> float:
    """Mass factor from nitrate as N to nitrate as NO3, M(NO3)/M(N) [-] (about 4.427)."""
    return molar_mass("NO3") / molar_mass("N")


def nitrite_n_to_no2() -> float:
    """Mass factor from nitrite as N to nitrite as NO2, M(NO2)/M(N) [-] (about 3.284)."""
    return molar_mass("NO2") / molar_mass("N")
