"""Drinking-water limits catalogue, each value with its basis, citation and compliance basis.

The catalogue is data, ``blendq/data/limits.toml`` (read by :func:`load_catalogue`): each
entry has its value as published, unit, reporting basis, compliance basis, source (document
and section), date, status and how it was checked; an entry without a value records a set and
analyte for which no value was checked (:class:`CatalogueGap`), so that nothing unchecked is
tested as a regulatory value. A project adds or overrides entries with ``[[limits]]``
(:mod:`blendq.inputs.project_file`); :func:`limit_notes` lists what it changed.
:func:`species_sum_rules` applies a nitrate+nitrite limit to separate nitrate and nitrite
results.

Values are stored as published (value, unit, basis) and converted to the core's canonical
mg/L on the analyte's canonical basis by :func:`Limit.canonical`. Each limit also says which
statistic of the water it is judged on (:class:`ComplianceBasis`): a single sample (with or
without a confirmation sample averaged with it) or the annual mean of quarterly samples, and
:func:`statistic_log_sd` with :func:`exceedance_given_mean` give the probability that this
statistic exceeds a threshold given the mean concentration at a fixed pumping rate.

References
----------
- US EPA National Primary Drinking Water Regulations, 40 CFR 141.62(b) (inorganic MCLs) and
  40 CFR 141.66(e) (uranium).
- US EPA (2003) arsenic rule clarification, 68 FR 14502.
- WHO (2017/2022) Guidelines for Drinking-water Quality, 4th ed. incorporating the addenda
  (manganese and arsenic provisional values of 2022; uranium and selenium of the 2011 edition).
- Directive (EU) 2020/2184 of the European Parliament and of the Council on the quality of
  water intended for human consumption, Annex I, Part B.
- US EPA 40 CFR 141.23 (nitrate confirmation sample within 24 h, compliance on the average of
  the two) and 40 CFR 141.23(i) (inorganics: running annual average of quarterly samples), as
  restated by state program guidance (secondary sources).
- Fenton, L.F. (1960) The sum of log-normal probability distributions in scatter transmission
  systems. IRE Trans. Communication Systems 8(1), 57-67 (moment-matched lognormal of a sum).
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
from scipy.special import erfc

from blendq.chemistry.analytes import get_analyte, to_canonical
from blendq.errors import InputError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

SINGLE_SAMPLE = "single sample"
ANNUAL_MEAN = "annual mean"
STATISTICS = (SINGLE_SAMPLE, ANNUAL_MEAN)

#: Coefficient of variation of a well's concentration from sample to sample at a fixed rate,
#: beyond lab error, used where the project gives none (common practice: a modest spread for a
#: steadily pumped supply well; estimate it from the well's monitoring history when available).
DEFAULT_TEMPORAL_CV = 0.10


@dataclass(frozen=True)
class ComplianceBasis:
    """The statistic of the water a limit is judged on.

    Attributes
    ----------
    statistic : str
        "single sample" or "annual mean".
    samples : int
        Results averaged into the statistic: 1 (a single sample), 2 (a single sample with its
        confirmation sample taken close in time, compliance on the average of the two) or the
        number of quarterly samples of the running annual average (4).
    citation : str
        Where the rule comes from.
    status : str
        How the rule was checked: "secondary" (read in a source restating the regulation),
        "common practice (setting)" where no source was read, or "user setting".
    """

    statistic: str
    samples: int
    citation: str
    status: str

    def __post_init__(self) -> None:
        if self.statistic not in STATISTICS:
            raise InputError(f'compliance basis "{self.statistic}" is not one of '
                             f'{", ".join(STATISTICS)}')
        if self.samples < 1 or (self.statistic == SINGLE_SAMPLE and self.samples > 2):
            raise InputError(f"a {self.statistic} basis cannot average {self.samples} samples")

    def describe(self) -> str:
        """Short text such as ``"single sample with confirmation"``."""
        if self.statistic == SINGLE_SAMPLE:
            return "single sample with confirmation" if self.samples == 2 else "single sample"
        return f"annual mean of {self.samples} quarterly samples"

    def rule(self) -> str:
        """What is averaged, in words."""
        if self.statistic == SINGLE_SAMPLE:
            if self.samples == 2:
                return ("a result above the limit is confirmed by a second sample taken close in "
                        "time (within 24 h); compliance is judged on the average of the two")
            return "each sample is compared with the limit"
        return (f"compliance is judged on the running annual average of {self.samples} "
                "quarterly samples")

    def log_sd(self, temporal_cv: float, lab_cv: float) -> float:
        """Standard deviation of log(statistic / mean concentration), see
        :func:`statistic_log_sd`."""
        return statistic_log_sd(self, temporal_cv, lab_cv)


def statistic_log_sd(basis: ComplianceBasis, temporal_cv: float, lab_cv: float) -> float:
    """Spread of the judged statistic around the mean concentration at a fixed rate.

    A compliance result is X = m T L: the mean concentration m [mg/L] at the rate, a temporal
    factor T and a lab factor L, both lognormal with mean 1 and coefficients of variation
    ``temporal_cv`` and ``lab_cv``. The statistic S = m F has a factor F taken as lognormal with
    mean 1; this returns sigma = sd(ln F) [-].

    * Single sample with k = 1 or 2 results (a first and a confirmation sample close in time):
      the two share one draw of T (strongly correlated in time) and have independent lab
      errors, F = T (L_1 + ... + L_k) / k, sigma^2 = ln(1 + cv_T^2) + ln(1 + cv_L^2 / k).
    * Annual mean of n quarterly samples: independent draws of T and L per sample,
      F = sum(T_i L_i) / n, with CV^2 of each term c^2 = (1 + cv_T^2)(1 + cv_L^2) - 1, so
      sigma^2 = ln(1 + c^2 / n).

    The average of lognormal factors is replaced by the lognormal of equal mean and variance
    (Fenton 1960); the product of independent lognormals is exact.

    Parameters
    ----------
    basis : ComplianceBasis
    temporal_cv : float
        Coefficient of variation of the water's concentration from sample to sample [-].
    lab_cv : float
        Relative one-sd lab error of a result [-].

    Returns
    -------
    float
        sigma [-]; 0 when both CVs are 0 (the statistic is the mean).

    References
    ----------
    Fenton, L.F. (1960) IRE Trans. Communication Systems 8(1), 57-67.
    """
    if temporal_cv < 0 or lab_cv < 0:
        raise InputError(f"coefficients of variation must be zero or more, got {temporal_cv!r} "
                         f"and {lab_cv!r}")
    k = basis.samples
    if basis.statistic == SINGLE_SAMPLE:
        var = np.log1p(temporal_cv**2) + np.log1p(lab_cv**2 / k)
    else:
        c2 = (1 + temporal_cv**2) * (1 + lab_cv**2) - 1
        var = np.log1p(c2 / k)
    return float(np.sqrt(var))


def exceedance_given_mean(mean, threshold, log_sd: float) -> np.ndarray:
    """Probability that the statistic S = m F exceeds ``threshold`` for each mean m.

    With ln F ~ N(-sigma^2 / 2, sigma^2) (mean of F is 1),

        P(S > t) = Phi((ln(m / t) - sigma^2 / 2) / sigma),

    the upper tail of a lognormal (scipy.stats.lognorm with s = sigma and scale
    m exp(-sigma^2 / 2) gives the same). With sigma = 0 it is the indicator m > t, so the
    judged statistic is the mean itself. A mean that is NaN (nothing pumped) or <= 0 gives 0.

    Parameters
    ----------
    mean : array_like
        Mean concentration m of each draw [mg/L].
    threshold : float or array_like (broadcast with ``mean``)
        t [mg/L] > 0.
    log_sd : float
        sigma from :func:`statistic_log_sd` [-].

    Returns
    -------
    ndarray
        Probabilities, the shape of ``mean`` broadcast with ``threshold``.
    """
    m = np.asarray(mean, float)
    t = np.asarray(threshold, float)
    if log_sd <= 0:
        return (m > t).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        # u = -z / sqrt(2) and Phi(z) = erfc(u) / 2 (erfc is accurate in the far lower tail);
        # log(0) = -inf gives 0, NaN (nothing pumped, or a negative mean) is set to 0 below
        u = (np.log(t) + 0.5 * log_sd**2) - np.log(m)
        u *= 1.0 / (log_sd * np.sqrt(2.0))
    p = erfc(u)
    p *= 0.5
    return np.nan_to_num(p, nan=0.0, copy=False)


def mean_threshold(threshold, log_sd: float, sample_probability: float):
    """The mean concentration at which the judged statistic exceeds ``threshold`` with
    probability ``sample_probability``.

    With S lognormal of mean m and log-sd sigma (:func:`exceedance_given_mean`),
    P(S > t | m) = beta at m* = t exp(sigma^2 / 2 - sigma z_(1-beta)), z the standard normal
    quantile; P(S > t | m) > beta exactly when m > m*. With sigma = 0, m* = t.

    Parameters
    ----------
    threshold : float or array_like
        t [mg/L] (or a dimensionless ratio-rule sum).
    log_sd : float
        sigma [-].
    sample_probability : float
        beta, in (0, 1) [-].

    Returns
    -------
    float or ndarray
        m* [same unit as ``threshold``].
    """
    from scipy.stats import norm

    if log_sd <= 0:
        return np.asarray(threshold, float) * 1.0
    z = float(norm.ppf(1.0 - sample_probability))
    return np.asarray(threshold, float) * np.exp(0.5 * log_sd**2 - log_sd * z)


#: basis of a limit that states none (a user's limit without ``compliance``)
DEFAULT_BASIS = ComplianceBasis(
    SINGLE_SAMPLE, 1, "no basis stated: each sample is compared with the limit",
    "common practice (setting)")

#: the catalogue's data file (package data; docs/methods.md, section 9)
CATALOGUE_FILE = Path(__file__).resolve().parents[1] / "data" / "limits.toml"

#: values of a ``compliance`` key -> (statistic, samples averaged)
COMPLIANCE_BASES = {"single sample": (SINGLE_SAMPLE, 1),
                    "single sample with confirmation": (SINGLE_SAMPLE, 2),
                    "annual mean": (ANNUAL_MEAN, 4)}

#: where a limit comes from when it is the catalogue's own
CATALOGUE_ORIGIN = "catalogue"


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
        The source: document and section.
    compliance : ComplianceBasis
        The statistic the limit is judged on.
    date : str
        Date of the source as cited ("" when not stated).
    status : str
        "in force", "current guideline", "proposed", "proposed for rescission", "user setting".
    checked : str
        How the value was checked ("verified: ...", "secondary: ...", or the user's word).
    origin : str
        "catalogue", or the project file entry that added or changed the limit.
    replaces : str
        Label of the catalogue limit this one overrides ("" for none).
    """

    analyte: str
    value: float
    unit: str
    basis: str
    authority: str
    kind: str
    citation: str
    compliance: ComplianceBasis = field(default=DEFAULT_BASIS)
    date: str = ""
    status: str = ""
    checked: str = ""
    origin: str = CATALOGUE_ORIGIN
    replaces: str = ""

    def canonical(self) -> float:
        """Limit [mg/L] on the analyte's canonical basis."""
        return to_canonical(self.value, self.unit, get_analyte(self.analyte), self.basis or None)

    def label(self) -> str:
        """Short label such as ``"US-EPA MCL 10 mg/L as N"``."""
        basis = f" as {self.basis}" if self.basis and get_analyte(self.analyte).needs_basis else ""
        return f"{self.authority} {self.kind} {self.value:g} {self.unit}{basis}"

    @property
    def is_override(self) -> bool:
        """True when a project file entry changed a catalogue limit."""
        return bool(self.replaces)

    def as_dict(self) -> dict:
        """The entry as plain data (for JSON)."""
        return {"analyte": self.analyte, "authority": self.authority, "kind": self.kind,
                "value": self.value, "unit": self.unit, "basis": self.basis,
                "limit_mg_per_l": self.canonical(), "source": self.citation, "date": self.date,
                "status": self.status, "checked": self.checked,
                "compliance": self.compliance.describe(),
                "compliance_source": self.compliance.citation,
                "compliance_checked": self.compliance.status, "origin": self.origin,
                "override": self.is_override, "replaces": self.replaces}

    def describe_override(self) -> str:
        """One line naming what a project entry changed, e.g. ``"US-EPA MCL 10 mg/L as N
        (nitrate) replaced by US-EPA MCL 8 mg/L as N (project.toml limits[1])"``."""
        return f"{self.replaces} ({self.analyte}) replaced by {self.label()} ({self.origin})"


@dataclass(frozen=True)
class RatioRule:
    """A combined rule: sum over analytes of concentration / value must not exceed one."""

    name: str
    terms: tuple[Limit, ...]
    authority: str
    citation: str


@dataclass(frozen=True)
class CatalogueGap:
    """A set and analyte for which the catalogue holds no value, and why.

    Attributes
    ----------
    authority, analyte : str
    citation : str
        The document where the value would be found.
    checked : str
        Why there is no value.
    note : str
        What the user can do.
    """

    authority: str
    analyte: str
    citation: str
    checked: str
    note: str

    def as_dict(self) -> dict:
        return {"authority": self.authority, "analyte": self.analyte, "source": self.citation,
                "checked": self.checked, "note": self.note}


_LIMIT_KEYS = {"set", "analyte", "value", "unit", "basis", "kind", "source", "section", "date",
               "status", "checked", "compliance", "compliance_source", "compliance_checked",
               "note"}
_RULE_KEYS = {"set", "name", "source", "section", "date", "status", "checked", "terms"}


def _required(entry: dict, key: str, file: str, where: str) -> str:
    value = entry.get(key)
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"needs a text {key}", file=file, field=f"{where}.{key}")
    return value


def _citation(entry: dict, file: str, where: str) -> str:
    source = _required(entry, "source", file, where)
    section = entry.get("section", "")
    return f"{source}, {section}" if section else source


def _catalogue_limit(entry: dict, file: str, where: str) -> Limit:
    unknown = set(entry) - _LIMIT_KEYS
    if unknown:
        raise InputError(f'"{sorted(unknown)[0]}" is not a key of a catalogue entry', file=file,
                         field=f"{where}.{sorted(unknown)[0]}")
    value = entry["value"]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
        raise InputError(f"expected a positive number, got {value!r}", file=file,
                         field=f"{where}.value")
    text = _required(entry, "compliance", file, where)
    if text not in COMPLIANCE_BASES:
        raise InputError(f'"{text}" is not one of ' + ", ".join(COMPLIANCE_BASES), file=file,
                         field=f"{where}.compliance")
    statistic, samples = COMPLIANCE_BASES[text]
    basis = ComplianceBasis(statistic, samples, _required(entry, "compliance_source", file, where),
                            _required(entry, "compliance_checked", file, where))
    analyte = get_analyte(_required(entry, "analyte", file, where)).key
    limit = Limit(analyte, float(value), _required(entry, "unit", file, where),
                  entry.get("basis", ""), _required(entry, "set", file, where),
                  _required(entry, "kind", file, where), _citation(entry, file, where), basis,
                  _required(entry, "date", file, where), _required(entry, "status", file, where),
                  _required(entry, "checked", file, where))
    try:
        limit.canonical()
    except InputError as err:
        raise InputError(err.message, file=file, field=f"{where}.unit") from None
    return limit


def load_catalogue(path: str | Path = CATALOGUE_FILE) -> tuple[
        dict[str, list[Limit]], dict[str, list[RatioRule]], list[CatalogueGap]]:
    """Read a limit catalogue file.

    Parameters
    ----------
    path : str or Path
        A TOML file of ``[[limit]]`` and ``[[ratio_rule]]`` entries (default: the package's
        ``data/limits.toml``, whose header describes the keys).

    Returns
    -------
    (dict, dict, list)
        The limits of each set, the ratio rules of each set, and the entries without a value
        (:class:`CatalogueGap`).

    Raises
    ------
    InputError
        Naming the file and the entry of a malformed entry.
    """
    path = Path(path)
    with open(path, "rb") as fh:
        doc = tomllib.load(fh)
    limits: dict[str, list[Limit]] = {}
    gaps: list[CatalogueGap] = []
    for i, entry in enumerate(doc.get("limit", []), start=1):
        where = f"limit[{i}]"
        name = _required(entry, "set", path.name, where)
        limits.setdefault(name, [])
        if "value" not in entry:
            gaps.append(CatalogueGap(name, get_analyte(_required(entry, "analyte", path.name,
                                                                 where)).key,
                                     _citation(entry, path.name, where),
                                     _required(entry, "checked", path.name, where),
                                     _required(entry, "note", path.name, where)))
            continue
        limits[name].append(_catalogue_limit(entry, path.name, where))
    rules: dict[str, list[RatioRule]] = {name: [] for name in limits}
    for i, entry in enumerate(doc.get("ratio_rule", []), start=1):
        where = f"ratio_rule[{i}]"
        unknown = set(entry) - _RULE_KEYS
        if unknown:
            raise InputError(f'"{sorted(unknown)[0]}" is not a key of a ratio rule',
                             file=path.name, field=f"{where}.{sorted(unknown)[0]}")
        name = _required(entry, "set", path.name, where)
        citation = _citation(entry, path.name, where)
        terms = tuple(
            Limit(get_analyte(t["analyte"]).key, float(t["value"]), t["unit"], t.get("basis", ""),
                  name, "ratio term", citation, DEFAULT_BASIS, entry.get("date", ""),
                  entry.get("status", ""), entry.get("checked", ""))
            for t in entry.get("terms", []))
        if len(terms) < 2:
            raise InputError("a ratio rule needs at least two terms", file=path.name,
                             field=f"{where}.terms")
        rules.setdefault(name, []).append(
            RatioRule(_required(entry, "name", path.name, where), terms, name, citation))
    return limits, rules, gaps


CATALOGUE, RATIO_RULES, GAPS = load_catalogue()


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


def catalogue_gaps(sets, analytes) -> list[CatalogueGap]:
    """The entries of the named sets without a value for the given analytes (nothing of those
    sets is tested for them)."""
    keys = {get_analyte(a).key for a in analytes}
    return [g for g in GAPS if g.authority in sets and g.analyte in keys]


def limit_notes(limits, sets, analytes) -> list[str]:
    """Sentences for the report and the command line: each limit a project file entry added or
    overrode, and each analyte with results for which a named set has no value in the
    catalogue (and the project gives none of that authority)."""
    out = []
    for lim in limits:
        if lim.is_override:
            out.append(f"Limit override: {lim.describe_override()}.")
        elif lim.origin != CATALOGUE_ORIGIN:
            out.append(f"Limit added: {lim.label()} ({lim.analyte}; {lim.origin}).")
    for gap in catalogue_gaps(sets, analytes):
        if not any(lim.authority == gap.authority and lim.analyte == gap.analyte
                   for lim in limits):
            out.append(f"No {gap.authority} limit of {gap.analyte} is tested: {gap.note}.")
    return out


def ratio_value(rule: RatioRule, concentrations: dict[str, float]) -> float:
    """Sum of concentration/limit over the rule's terms; concentrations in canonical mg/L."""
    return sum(concentrations.get(t.analyte, 0.0) / t.canonical() for t in rule.terms)


def species_sum_rules(limits, analytes) -> list[RatioRule]:
    """Nitrate+nitrite limits applied to separate nitrate and nitrite results.

    A limit on nitrate+nitrite (stated as N) is a limit on the sum of the two species'
    nitrogen: C_NO3-N + C_NO2-N <= L. With both species stored on their canonical basis as N
    (mg/L N; a result reported as NO3 or NO2 was converted with the molar-mass ratio when it
    was read), this is the ratio rule C_NO3-N / L + C_NO2-N / L <= 1. It is formed for each
    nitrate+nitrite limit when nitrate and nitrite are both predicted and nitrate+nitrite is
    not itself measured (then its own limit applies).

    Parameters
    ----------
    limits : sequence of Limit
        The project's limits.
    analytes : sequence of str
        The predicted analytes.

    Returns
    -------
    list of RatioRule
    """
    analytes = set(analytes)
    if "nitrate_nitrite" in analytes or not {"nitrate", "nitrite"} <= analytes:
        return []
    out = []
    for lim in limits:
        if lim.analyte != "nitrate_nitrite":
            continue
        if get_analyte("nitrate").canonical_basis != "N" or \
                get_analyte("nitrite").canonical_basis != "N":
            raise InputError("nitrate and nitrite must both be stored as N to add them")
        value = to_canonical(lim.value, lim.unit, get_analyte("nitrate_nitrite"),
                             lim.basis or None)  # mg/L as N, the unit and basis checked
        terms = tuple(replace(lim, analyte=a, value=value, unit="mg/L", basis="N")
                      for a in ("nitrate", "nitrite"))
        out.append(RatioRule(f"nitrate + nitrite (as N) <= {lim.value:g} {lim.unit} as N",
                             terms, lim.authority, lim.citation))
    return out
