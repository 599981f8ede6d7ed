"""Drinking-water limits catalogue, each value with its basis, citation and compliance basis.

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
- WHO (2017/2022) Guidelines for Drinking-water Quality, 4th ed. incorporating the addenda.
- Directive (EU) 2020/2184 of the European Parliament and of the Council on the quality of
  water intended for human consumption, Annex I, Part B.
- US EPA 40 CFR 141.23 (nitrate confirmation sample within 24 h, compliance on the average of
  the two) and 40 CFR 141.23(i) (inorganics: running annual average of quarterly samples), as
  restated by state program guidance (secondary sources).
- Fenton, L.F. (1960) The sum of log-normal probability distributions in scatter transmission
  systems. IRE Trans. Communication Systems 8(1), 57-67 (moment-matched lognormal of a sum).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.special import erfc

from blendq.chemistry.analytes import get_analyte, to_canonical
from blendq.errors import InputError

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


_CONFIRMATION = ComplianceBasis(SINGLE_SAMPLE, 2, "40 CFR 141.23", "secondary")
_CONFIRMATION_LIKE_NITRATE = ComplianceBasis(
    SINGLE_SAMPLE, 2, "the nitrate rule of 40 CFR 141.23, taken for this analyte",
    "common practice (setting)")
_ANNUAL_MEAN = ComplianceBasis(ANNUAL_MEAN, 4, "40 CFR 141.23(i)", "secondary")
_ANNUAL_MEAN_LIKE_INORGANICS = ComplianceBasis(
    ANNUAL_MEAN, 4, "the inorganics rule of 40 CFR 141.23(i), taken for this analyte",
    "common practice (setting)")
_SINGLE_WHO = ComplianceBasis(
    SINGLE_SAMPLE, 1, "WHO GDWQ: the text checked gives the value, not a sampling rule",
    "common practice (setting)")
_SINGLE_EU = ComplianceBasis(
    SINGLE_SAMPLE, 1, "Directive (EU) 2020/2184 Annex I: the text checked gives the value, not "
    "a sampling rule", "common practice (setting)")
#: basis of a limit that states none (a user's limit without ``compliance``)
DEFAULT_BASIS = ComplianceBasis(
    SINGLE_SAMPLE, 1, "no basis stated: each sample is compared with the limit",
    "common practice (setting)")


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
    compliance : ComplianceBasis
        The statistic the limit is judged on.
    """

    analyte: str
    value: float
    unit: str
    basis: str
    authority: str
    kind: str
    citation: str
    compliance: ComplianceBasis = field(default=DEFAULT_BASIS)

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
        Limit("nitrate", 10.0, "mg/L", "N", "US-EPA", "MCL", _CFR_62, _CONFIRMATION),
        Limit("nitrite", 1.0, "mg/L", "N", "US-EPA", "MCL", _CFR_62, _CONFIRMATION_LIKE_NITRATE),
        Limit("nitrate_nitrite", 10.0, "mg/L", "N", "US-EPA", "MCL", _CFR_62,
              _CONFIRMATION_LIKE_NITRATE),
        Limit("arsenic", 0.010, "mg/L", "As", "US-EPA", "MCL", _CFR_62, _ANNUAL_MEAN),
        Limit("fluoride", 4.0, "mg/L", "F", "US-EPA", "MCL", _CFR_62, _ANNUAL_MEAN),
        Limit("selenium", 0.05, "mg/L", "Se", "US-EPA", "MCL", _CFR_62, _ANNUAL_MEAN),
        Limit("uranium", 30.0, "ug/L", "U", "US-EPA", "MCL", "40 CFR 141.66(e)",
              _ANNUAL_MEAN_LIKE_INORGANICS),
    ],
    "WHO": [
        Limit("nitrate", 50.0, "mg/L", "NO3", "WHO", "guideline value", _WHO, _SINGLE_WHO),
        Limit("nitrite", 3.0, "mg/L", "NO2", "WHO", "guideline value", _WHO, _SINGLE_WHO),
        Limit("arsenic", 10.0, "ug/L", "As", "WHO", "guideline value (provisional)", _WHO,
              _SINGLE_WHO),
    ],
    "EU": [
        Limit("nitrate", 50.0, "mg/L", "NO3", "EU", "parametric value", _EU, _SINGLE_EU),
        Limit("nitrite", 0.50, "mg/L", "NO2", "EU", "parametric value", _EU, _SINGLE_EU),
        Limit("arsenic", 10.0, "ug/L", "As", "EU", "parametric value", _EU, _SINGLE_EU),
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
                Limit("nitrite", 3.0, "mg/L", "NO2", "EU", "ratio term", _EU, _SINGLE_EU),
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
