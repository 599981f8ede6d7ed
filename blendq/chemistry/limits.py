"""Drinking-water limits catalogue, each value with its basis and citation.

Values are stored as published (value, unit, basis) and converted to the core's canonical
mg/L on the analyte's canonical basis by :func:`Limit.canonical`.

References
----------
- US EPA National Primary Drinking Water Regulations, 40 CFR 141.62(b) (inorganic MCLs) and
  40 CFR 141.66(e) (uranium).
- WHO (2017/2022) Guidelines for Drinking-water Quality, 4th ed. incorporating the addenda.
- Directive (EU) 2020/2184 of the European Parliament and of the Council on the quality of
  water intended for human consumption, Annex I, Part B.
"""

from __future__ import annotations

from dataclasses import dataclass

from blendq.chemistry.analytes import get_analyte, to_canonical
from blendq.errors import InputError


@dataclass(frozen=True)
class Limit:
    """A concentration limit for one analyte.

    Attributes
    ----------
    analyte : str
        Analyte key.
    value : float
        Published value, in ``unit`` on ``basis``.
    unit : str
    basis : str
        Basis the value is stated on ("N", "NO3", ...), "" where none applies.
    authority : str
        Short tag of the set ("US-EPA", "WHO", "EU", or a user's own).
    kind : str
        "MCL", "guideline value", "parametric value", "trigger", or a user's word.
    citation : str
    """

    analyte: str
    value: float
    unit: str
    basis: str
    authority: str
    kind: str
    citation: str

    def canonical(self) -> float:
        """Limit [mg/L] on the analyte's canonical basis."""
        return to_canonical(self.value, self.unit, get_analyte(self.analyte), self.basis or None)

    def label(self) -> str:
        """Short label such as ``"US-EPA MCL 10 mg/L as N"``."""
        basis = f" as {self.basis}" if self.basis and get_analyte(self.analyte).needs_basis else ""
        return f"{self.authority} {self.kind} {self.value:g} {self.unit}{basis}"


@dataclass(frozen=True)
class RatioRule:
    """A combined rule: sum over analytes of concentration / value must not exceed one."""

    name: str
    terms: tuple[Limit, ...]
    authority: str
    citation: str


_CFR_62 = "40 CFR 141.62(b), US EPA National Primary Drinking Water Regulations"
_WHO = "WHO Guidelines for Drinking-water Quality, 4th ed. (2017, addenda 2022)"
_EU = "Directive (EU) 2020/2184, Annex I, Part B"

CATALOGUE: dict[str, list[Limit]] = {
    "US-EPA": [
        Limit("nitrate", 10.0, "mg/L", "N", "US-EPA", "MCL", _CFR_62),
        Limit("nitrite", 1.0, "mg/L", "N", "US-EPA", "MCL", _CFR_62),
        Limit("nitrate_nitrite", 10.0, "mg/L", "N", "US-EPA", "MCL", _CFR_62),
        Limit("arsenic", 0.010, "mg/L", "As", "US-EPA", "MCL", _CFR_62),
        Limit("fluoride", 4.0, "mg/L", "F", "US-EPA", "MCL", _CFR_62),
        Limit("selenium", 0.05, "mg/L", "Se", "US-EPA", "MCL", _CFR_62),
        Limit("uranium", 30.0, "ug/L", "U", "US-EPA", "MCL", "40 CFR 141.66(e)"),
    ],
    "WHO": [
        Limit("nitrate", 50.0, "mg/L", "NO3", "WHO", "guideline value", _WHO),
        Limit("nitrite", 3.0, "mg/L", "NO2", "WHO", "guideline value", _WHO),
        Limit("arsenic", 10.0, "ug/L", "As", "WHO", "guideline value (provisional)", _WHO),
    ],
    "EU": [
        Limit("nitrate", 50.0, "mg/L", "NO3", "EU", "parametric value", _EU),
        Limit("nitrite", 0.50, "mg/L", "NO2", "EU", "parametric value", _EU),
        Limit("arsenic", 10.0, "ug/L", "As", "EU", "parametric value", _EU),
    ],
}

RATIO_RULES: dict[str, list[RatioRule]] = {
    "WHO": [
        RatioRule(
            "nitrate/50 + nitrite/3 <= 1",
            (CATALOGUE["WHO"][0], CATALOGUE["WHO"][1]),
            "WHO",
            _WHO,
        )
    ],
    "EU": [
        RatioRule(
            "[nitrate]/50 + [nitrite]/3 <= 1",
            (
                CATALOGUE["EU"][0],
                Limit("nitrite", 3.0, "mg/L", "NO2", "EU", "ratio term", _EU),
            ),
            "EU",
            _EU,
        )
    ],
    "US-EPA": [],
}


def limit_set(name: str) -> list[Limit]:
    """Return the limits of a named set ("US-EPA", "WHO" or "EU").

    Raises
    ------
    InputError
        If no set has that name (the name comes from the user's project file).
    """
    try:
        return list(CATALOGUE[name])
    except KeyError:
        raise InputError(
            f'no limit set "{name}" (expected one of: {", ".join(CATALOGUE)})'
        ) from None


def ratio_value(rule: RatioRule, concentrations: dict[str, float]) -> float:
    """Sum of concentration/limit over the rule's terms; concentrations in canonical mg/L."""
    return sum(concentrations.get(t.analyte, 0.0) / t.canonical() for t in rule.terms)
