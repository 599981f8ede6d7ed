"""Shared parts of the step-test review, and its reporting rules: units and basis, lab
qualifiers, duplicates.

Each rule is a small function ``check_<topic>(samples, steps, opts) -> Outcome`` on the tables of a
:class:`~blendq.inputs.project.Project` (values in mg/L on each analyte's canonical basis). A rule that
lacks the data it needs records why in :attr:`Outcome.skipped` instead of guessing. The other
rules live in :mod:`blendq.review.ionbalance`, :mod:`blendq.review.holding` and :mod:`blendq.review.field`;
the review that runs them all, with the options and their defaults, is :mod:`blendq.review.findings`.

References
----------
National Research Council (1995) Nitrate and Nitrite in Drinking Water: 1 mg/L NO3-N =
4.429 mg/L NO3.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte, molar_mass, normalise_basis
from blendq.errors import InputError
from blendq.units import parse_unit

SEVERITIES: tuple[str, ...] = ("info", "warning", "error")  #: in increasing order
FINDING_COLUMNS = ["severity", "rule", "sample_id", "step", "analyte", "message", "source",
                   "source_row"]

SRC_COMMON = "common practice"
SRC_NRC = ("National Research Council (1995): 1 mg/L NO3-N = 4.429 mg/L NO3; "
           "molar masses (IUPAC 2022)")


@dataclass(frozen=True)
class Finding:
    """One finding of the review (see :data:`FINDING_COLUMNS`)."""

    severity: str
    rule: str
    message: str
    source: str
    sample_id: str = ""
    step: object = None
    analyte: str = ""
    source_row: int | None = None


@dataclass
class Outcome:
    """Findings of one rule and the reasons it (or part of it) could not run."""

    findings: list[Finding] = field(default_factory=list)
    skipped: list[tuple[str, str]] = field(default_factory=list)

    def add(self, severity: str, rule: str, message: str, source: str, row=None,
            analyte: str | None = None) -> None:
        """Add a finding.

        ``row`` is a samples-table row (a Series) or None for a finding on no one sample;
        ``analyte`` defaults to the row's analyte; "" marks a finding on the whole sample.
        """
        if row is None:
            self.findings.append(Finding(severity, rule, message, source, analyte=analyte or ""))
            return
        self.findings.append(Finding(
            severity, rule, message, source, sample_id=text(row.get("sample_id")),
            step=plain_value(row.get("step")),
            analyte=text(row.get("analyte")) if analyte is None else analyte,
            source_row=row_number(row.get("source_row"))))

    def skip(self, rule: str, reason: str) -> None:
        self.skipped.append((rule, reason))

    def extend(self, other: Outcome) -> Outcome:
        self.findings.extend(other.findings)
        self.skipped.extend(other.skipped)
        return self


# ------------------------------------------------------------------ small helpers

def text(value) -> str:
    """``value`` as stripped text; "" for None and NaN."""
    if type(value) is str:  # the common case first (a long table calls this often)
        return value.strip()
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NaT:
        return ""
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):
        pass
    return str(value).strip()


def step_key(value) -> str:
    """Comparable key of a step identifier (``1``, ``1.0`` and ``"1"`` are the same step)."""
    if isinstance(value, (float, np.floating)) and np.isfinite(value) and float(value).is_integer():
        return str(int(value))
    return text(value)


def plain_value(value):
    """A numpy scalar as a plain Python value; NaN as None."""
    if value is None or text(value) == "":
        return None
    return value.item() if isinstance(value, np.generic) else value


def rows_of(frame: pd.DataFrame):
    """(index, row as a dict) of each row of ``frame``: what ``iterrows`` gives for reading
    cells by name, without building a Series per row (a long lab table has many)."""
    columns = list(frame.columns)
    cells = [frame[c].to_numpy(object).tolist() for c in columns]  # plain values, by column
    rows = (dict(zip(columns, row, strict=True)) for row in zip(*cells, strict=True))
    return zip(frame.index, rows, strict=True)


def row_number(value) -> int | None:
    if type(value) is float and value.is_integer():  # the common case first
        return int(value)
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return int(number) if np.isfinite(number) else None


def parse_flags(qualifier) -> set[str]:
    """Qualifier text such as ``"J, H"`` as a set of upper-case flags."""
    return {f for f in re.split(r"[,;/\s]+", text(qualifier).upper()) if f}


def exceeds(value: float, limit: float) -> bool:
    """``value > limit`` beyond rounding of the inputs (1e-9 relative), so that a reading
    exactly at a criterion (15.47 - 15.27 = 0.2) passes."""
    return value > limit + 1e-9 * max(abs(limit), abs(value), 1e-12)


def fmt(value: float) -> str:
    """A concentration or ratio printed to four significant figures."""
    return f"{value:.4g}"


def prepare_samples(samples: pd.DataFrame) -> pd.DataFrame:
    """A copy of the samples table with clean types for the rules.

    Numbers become floats (NaN where missing), flags and text become ``str``, times become
    Timestamps (NaT where missing), ``nondetect`` a bool.
    """
    s = samples.copy()
    for col in ("value", "detection_limit", "uncertainty", "depth", "source_row"):
        s[col] = pd.to_numeric(s[col], errors="coerce").astype(float)
    for col in ("sample_id", "analyte", "qualifier", "duplicate_of", "preservation",
                "reported_unit", "reported_basis"):
        # plain objects: a long table's rules read these cells one by one
        s[col] = pd.Series([v.strip() if type(v) is str else text(v) for v in s[col].tolist()],
                           index=s.index, dtype=object)
    for col in ("sampled_at", "analyzed_at"):
        s[col] = pd.to_datetime(s[col], errors="coerce")
    s["nondetect"] = [bool(v) if text(v) != "" else False for v in s["nondetect"]]
    s["step_key"] = [step_key(v) for v in s["step"]]
    return s.reset_index(drop=True)


def step_rates(steps: pd.DataFrame) -> dict[str, float]:
    """Pumping rate [m^3/d] of each step, by :func:`step_key`."""
    rates = pd.to_numeric(steps["rate"], errors="coerce")
    return {step_key(k): float(r) for k, r in zip(steps["step"], rates, strict=True)}


# ------------------------------------------------------------------ units and basis

def check_basis(samples: pd.DataFrame, steps: pd.DataFrame, opts: dict) -> Outcome:
    """Nitrogen species: missing or wrong reporting basis, and values that look mis-declared.

    A nitrate value declared "as N" that is about M(NO3)/M(N) = 4.427 times the median of the
    other discharge samples of nitrate at similar rates was probably reported as NO3 (and the
    reverse for a value declared as the ion); nitrite likewise with M(NO2)/M(N) = 3.284.

    Options: ``basis_ratio_tolerance`` (relative, default 0.15), ``basis_rate_tolerance``
    (relative rate difference still counted as similar, default 0.5).
    """
    out = Outcome()
    needs = samples[[get_analyte(a).needs_basis for a in samples["analyte"]]]
    if needs.empty:
        out.skip("basis_suspect", "no nitrate or nitrite results")
        return out
    declared = {}
    for i, row in rows_of(needs):
        analyte = get_analyte(row["analyte"])
        if row["reported_basis"] == "":
            out.add("error", "basis_missing",
                    f"{analyte.name} has no reporting basis (expected "
                    + " or ".join(f'"as {b}"' for b in analyte.bases) + ")", SRC_NRC, row)
            continue
        try:
            declared[i] = normalise_basis(analyte, row["reported_basis"])
        except InputError as exc:
            out.add("error", "basis_invalid", exc.message, SRC_NRC, row)
    rates = step_rates(steps)
    tol = opts["basis_ratio_tolerance"]
    rate_tol = opts["basis_rate_tolerance"]
    for key, group in needs.groupby("analyte", sort=False):
        analyte = get_analyte(key)
        ion = analyte.ion_formula
        if ion not in analyte.bases or analyte.canonical_basis != "N":
            continue
        factor = molar_mass(ion) / molar_mass("N")
        usable = group[(~group["nondetect"]) & (group["value"] > 0) & group["depth"].isna()
                       & group.index.isin(list(declared))]
        rate = np.array([rates.get(k, np.nan) for k in usable["step_key"]])
        values = usable["value"].to_numpy(float)
        where_named: dict[str, list[int]] = {}  # a sample_id -> rows naming it (id or primary)
        for pos, (sid, dup) in enumerate(zip(usable["sample_id"], usable["duplicate_of"],
                                             strict=True)):
            for name in {sid, dup} - {""}:
                where_named.setdefault(name, []).append(pos)
        # the median of the other samples (all, or those at similar rates) without building a
        # mask per row: the rows at each distinct rate share one sorted set of values, from
        # which a row's own sample (and its duplicates) are left out by rank
        everyone = np.sort(values)
        similar: dict[float, tuple[np.ndarray, np.ndarray]] = {}
        for r in np.unique(rate[np.isfinite(rate)]):
            mask = np.abs(rate - r) <= rate_tol * np.fmax(rate, r)
            similar[float(r)] = (mask, np.sort(values[mask]))
        for pos, (i, sid, dup) in enumerate(zip(usable.index, usable["sample_id"],
                                                usable["duplicate_of"], strict=True)):
            left_out = sorted({p for name in {sid, dup} - {""}
                               for p in where_named.get(name, [])})
            mask, near_values = similar.get(float(rate[pos]), (None, None))
            near_out = [p for p in left_out if mask is not None and mask[p]]
            if near_values is not None and len(near_values) - len(near_out) >= 2:
                median, where = _median_without(near_values, values[near_out]), \
                    "at similar rates"
            elif len(everyone) - len(left_out) >= 2:
                median, where = _median_without(everyone, values[left_out]), "of this analyte"
            else:
                continue
            ratio = values[pos] / median
            as_n = declared[i] == "N" and abs(ratio / factor - 1.0) <= tol
            as_ion = declared[i] == ion and abs(ratio * factor - 1.0) <= tol
            if not (as_n or as_ion):
                continue
            row = usable.loc[i].to_dict()  # read only for a row that is reported
            if as_n:
                out.add("warning", "basis_suspect",
                        f"{analyte.name} {fmt(row['value'])} mg/L as N is {ratio:.2f} x the "
                        f"median of the other samples {where}; M({ion})/M(N) = {factor:.3f}: "
                        f"probably reported as {ion} but declared as N", SRC_NRC, row)
            else:
                out.add("warning", "basis_suspect",
                        f"{analyte.name} declared as {ion} is 1/{1.0 / ratio:.2f} of the median "
                        f"of the other samples {where}; M({ion})/M(N) = {factor:.3f}: probably "
                        f"reported as N but declared as {ion}", SRC_NRC, row)
    return out


def _median_without(ordered: np.ndarray, removed: np.ndarray) -> float:
    """Median of the sorted array ``ordered`` with the values ``removed`` (each present in it)
    taken out once each; O(k log n) for k removed values."""
    at = np.searchsorted(ordered, np.sort(removed), side="left")
    at = at + (np.arange(len(at)) - np.searchsorted(at, at, side="left"))  # equal values
    size = len(ordered) - len(at)

    def kth(k: int) -> float:  # the k-th smallest remaining value
        for p in at:
            if p <= k:
                k += 1
        return float(ordered[k])

    return 0.5 * (kth((size - 1) // 2) + kth(size // 2))


def _unit_name(unit: str) -> str:
    try:
        return str(parse_unit(unit))
    except InputError:
        return unit


def check_units(samples: pd.DataFrame, steps: pd.DataFrame, opts: dict) -> Outcome:
    """Reporting units (and bases) that differ between samples of one analyte: converted to
    mg/L on the canonical basis; noted as info so a reviewer sees it happened."""
    out = Outcome()
    for key, group in samples.groupby("analyte", sort=False):
        analyte = get_analyte(key)
        for column, what in (("reported_unit", "units"), ("reported_basis", "bases")):
            labels = group[column]
            names = {u: _unit_name(u) if u else "" for u in labels.unique()} \
                if column == "reported_unit" else \
                {b: _basis_or_blank(analyte, b) for b in labels.unique()}
            labels = labels.map(names)
            labels = labels[labels != ""]
            if labels.nunique() < 2:
                continue
            basis = f" as {analyte.canonical_basis}" if analyte.bases else ""
            parts = []
            for idx in labels.groupby(labels, sort=False).groups.values():
                raw = samples.loc[idx, column].iloc[0]
                steps_of = sorted(set(samples.loc[idx, "step_key"]), key=_natural)
                parts.append(f'"{raw}" in step{"s" if len(steps_of) > 1 else ""} '
                             + ", ".join(steps_of))
            out.add("info", f"{what}_mixed",
                    f"{analyte.name} reported in mixed {what}: " + "; ".join(parts)
                    + f"; all converted to mg/L{basis}",
                    SRC_COMMON, analyte=key)
    return out


def _basis_or_blank(analyte, basis: str) -> str:
    if not basis:
        return ""
    try:
        return normalise_basis(analyte, basis)
    except InputError:
        return ""


def _natural(key: str):
    return (0, float(key), "") if re.fullmatch(r"-?\d+(\.\d+)?", key) else (1, 0.0, key)


# ------------------------------------------------------------------ lab qualifiers

def check_qualifiers(samples: pd.DataFrame, steps: pd.DataFrame, opts: dict) -> Outcome:
    """Non-detects, J-style (estimated) and U-style (not detected) flags, rejected values, and a
    detected value below its detection limit without a flag.

    Options: ``estimated_flags``, ``nondetect_flags``, ``rejected_flags`` (lists of flags).
    """
    out = Outcome()
    estimated = set(opts["estimated_flags"])
    nondetect = set(opts["nondetect_flags"])
    rejected = set(opts["rejected_flags"])
    dls = samples["detection_limit"]
    noted = samples["nondetect"] | (samples["qualifier"] != "") | ((dls > 0)
                                                                    & (samples["value"] < dls))
    for _, row in rows_of(samples[noted]):  # the other rows give no finding
        flags = parse_flags(row["qualifier"])
        dl = row["detection_limit"]
        name = get_analyte(row["analyte"]).name
        if row["nondetect"]:
            if not (dl > 0):
                out.add("error", "nondetect_no_limit",
                        f"{name} is a non-detect without a detection limit; it cannot bound "
                        "the fit (expected a value such as <0.5)", SRC_COMMON, row)
            else:
                out.add("info", "nondetect",
                        f"{name} < {fmt(dl)} mg/L: used as a censored value (fit at or below "
                        "the detection limit)", SRC_COMMON, row)
        elif flags & nondetect:
            out.add("warning", "nondetect_flag_on_detect",
                    f"{name} {fmt(row['value'])} mg/L carries not-detected flag "
                    f"{'/'.join(sorted(flags & nondetect))} but is recorded as detected",
                    SRC_COMMON, row)
        if flags & rejected:
            out.add("error", "rejected_value",
                    f"{name} flagged {'/'.join(sorted(flags & rejected))} (rejected)",
                    SRC_COMMON, row)
        if flags & estimated:
            out.add("warning", "estimated_value",
                    f"{name} flagged {'/'.join(sorted(flags & estimated))} (estimated value)",
                    SRC_COMMON, row)
        if (not row["nondetect"] and dl > 0 and row["value"] < dl
                and not flags & (estimated | nondetect)):
            out.add("warning", "below_limit_unflagged",
                    f"{name} {fmt(row['value'])} mg/L is below its detection limit "
                    f"{fmt(dl)} mg/L but carries no flag", SRC_COMMON, row)
        unknown = flags - estimated - nondetect - rejected
        if unknown:
            out.add("info", "qualifier_unknown",
                    f"{name} carries flag {'/'.join(sorted(unknown))}, not in the QA flag "
                    "lists (qa.estimated_flags, qa.nondetect_flags, qa.rejected_flags)",
                    SRC_COMMON, row)
    return out


# ------------------------------------------------------------------ duplicates

def relative_percent_difference(a, b):
    """Relative percent difference of a duplicate pair [%].

    Notes
    -----
    RPD = 100 |a - b| / ((a + b) / 2); zero when both are zero.
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    mean = 0.5 * (a + b)
    with np.errstate(invalid="ignore", divide="ignore"):
        rpd = np.where(mean != 0, 100.0 * np.abs(a - b) / np.where(mean != 0, mean, 1.0), 0.0)
    return rpd if rpd.ndim else float(rpd)


def check_duplicates(samples: pd.DataFrame, steps: pd.DataFrame, opts: dict) -> Outcome:
    """Field duplicates against their primary sample.

    Both detected: RPD against ``duplicate_rpd_limit`` [%] (default 20; 10-20 % is typical of
    sampling plans, common practice). When both values are below
    ``duplicate_near_limit_factor`` (default 5) times the detection limit, the absolute
    difference is compared with the detection limit instead (common practice). One non-detect:
    a warning when the detected value exceeds that factor times the limit. A duplicate whose
    primary was taken at another step or depth is not a duplicate of that step: a warning,
    and the fit keeps both as separate samples (a true duplicate pair is fitted as one
    observation, :func:`blendq.fit.observations.combine_duplicates`).
    """
    out = Outcome()
    dups = samples[samples["duplicate_of"] != ""]
    if dups.empty:
        out.skip("duplicate_rpd", "no duplicate samples")
        return out
    limit = opts["duplicate_rpd_limit"]
    near = opts["duplicate_near_limit_factor"]
    known = set(samples["sample_id"])
    unmatched = set()
    for _, dup in dups.iterrows():
        primary_id = dup["duplicate_of"]
        if primary_id not in known:
            if primary_id not in unmatched:
                unmatched.add(primary_id)
                out.add("warning", "duplicate_unmatched",
                        f'duplicate {dup["sample_id"]} names primary "{primary_id}", which is not '
                        "among the samples", SRC_COMMON, dup, analyte="")
            continue
        match = samples[(samples["sample_id"] == primary_id)
                        & (samples["analyte"] == dup["analyte"])]
        if match.empty:
            continue
        prim = match.iloc[0]
        name = get_analyte(dup["analyte"]).name
        pair = f"{primary_id} / {dup['sample_id']} (row {row_number(dup['source_row'])})"
        depths = (prim["depth"], dup["depth"])
        same_depth = (all(np.isnan(depths)) or
                      bool(np.isclose(depths[0], depths[1], rtol=0.0, atol=1e-6)))
        if prim["step_key"] != dup["step_key"] or not same_depth:
            out.add("warning", "duplicate_step",
                    f"{name} duplicate pair {pair}: taken at another step or depth than its "
                    "primary; fitted as two separate samples, not as one observation",
                    SRC_COMMON, dup)
            continue
        dl = np.nanmax([prim["detection_limit"], dup["detection_limit"], -np.inf])
        if prim["nondetect"] and dup["nondetect"]:
            continue
        if prim["nondetect"] or dup["nondetect"]:
            detected = dup if prim["nondetect"] else prim
            lim = (dup if dup["nondetect"] else prim)["detection_limit"]
            if lim > 0 and detected["value"] > near * lim:
                out.add("warning", "duplicate_rpd",
                        f"{name} duplicate pair {pair}: one non-detect (< {fmt(lim)} mg/L), the "
                        f"other {fmt(detected['value'])} mg/L, above {near:g} x the limit",
                        SRC_COMMON, prim)
            continue
        a, b = prim["value"], dup["value"]
        if dl > 0 and max(a, b) < near * dl:
            if exceeds(abs(a - b), dl):
                out.add("warning", "duplicate_rpd",
                        f"{name} duplicate pair {pair}: {fmt(a)} and {fmt(b)} mg/L, both below "
                        f"{near:g} x the detection limit; difference {fmt(abs(a - b))} exceeds "
                        f"the limit {fmt(dl)} mg/L", SRC_COMMON, prim)
            continue
        rpd = relative_percent_difference(a, b)
        if exceeds(rpd, limit):
            out.add("warning", "duplicate_rpd",
                    f"{name} duplicate pair {pair}: {fmt(a)} and {fmt(b)} mg/L, RPD "
                    f"{rpd:.1f} % > {limit:g} %", SRC_COMMON, prim)
    return out
