"""Review of the lab and field results of a step test.

:func:`review` runs every rule on a :class:`~blendq.inputs.project.Project` and returns a
:class:`QAResult`: a table of findings (severity, rule, sample, step, analyte, message, the
published source or "common practice", and the input row), the rules skipped for want of data,
and the use of each sample in the fit (:meth:`QAResult.sample_weights`).

Rules (modules): reporting basis, units, lab qualifiers and duplicates
(:mod:`blendq.review.rules`); cation-anion balance (:mod:`blendq.review.ionbalance`); holding times
(:mod:`blendq.review.holding`); field-parameter stabilisation, purge volume and sample timing
(:mod:`blendq.review.field`).

Options are read from ``project.settings.qa``; see :data:`QA_DEFAULTS` and :func:`qa_options`.
"""

from __future__ import annotations

import difflib
import json
from collections.abc import Iterable
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.errors import InputError
from blendq.inputs.tables import no_collection
from blendq.review import consistency
from blendq.review import decisions as _decisions
from blendq.review.field import check_field_stability, check_purge, check_timing, step_schedule
from blendq.review.holding import check_holding_times
from blendq.review.ionbalance import check_ion_balance, ion_balance_table
from blendq.review.outliers import check_gross_outliers
from blendq.review.returned import check_returned_water
from blendq.review.rules import (
    FINDING_COLUMNS,
    SEVERITIES,
    Finding,
    Outcome,
    check_basis,
    check_duplicates,
    check_qualifiers,
    check_units,
    prepare_samples,
)
from blendq.units import parse_quantity

#: default QA options; ``project.settings.qa`` overrides any of them (see :func:`qa_options`)
QA_DEFAULTS: dict[str, object] = {
    # units and basis: a value within this relative tolerance of M(NO3)/M(N) = 4.427 (or its
    # inverse) times the median of the other samples is suspect; rates within this relative
    # difference count as similar
    "basis_ratio_tolerance": 0.15,
    "basis_rate_tolerance": 0.5,
    # lab qualifiers (flags are compared in upper case)
    "estimated_flags": ["J", "J+", "J-", "UJ", "E", "EST"],
    "nondetect_flags": ["U", "UJ", "ND", "<"],
    "rejected_flags": ["R"],
    # duplicates: RPD limit [%] (10-20 % typical of sampling plans, common practice); below
    # this multiple of the detection limit compare the absolute difference with the limit
    "duplicate_rpd_limit": 20.0,
    "duplicate_near_limit_factor": 5.0,
    # ion balance acceptance tiers, common practice (not checked in a source; the formula of
    # Standard Methods 1030E is restated in USGS review code): +-0.2 meq/L for an anion sum of
    # 0-3 meq/L, +-2 % for 3-10, +-5 % for 10-800
    "ion_balance_abs_meq": 0.2,
    "ion_balance_pct_mid": 2.0,
    "ion_balance_pct_high": 5.0,
    # holding times: analyte -> days, overriding blendq.review.holding.HOLDING_TIMES
    "holding_times": {},
    # field stabilisation, common practice after the USGS National Field Manual chapter A6
    # (not checked against its 2023 revision of the specific-conductance and pH criteria)
    "field_readings": 5,
    "stable_temperature": 0.2,  # [C]
    "stable_ph": 0.1,  # [-]
    "stable_sc_percent_low": 5.0,  # [%] up to stable_sc_break
    "stable_sc_percent_high": 3.0,  # [%] above stable_sc_break
    "stable_sc_break": 100.0,  # [uS/cm]
    "stable_do": 0.2,  # [mg/L]
    "stable_turbidity": 0.5,  # [FNU], or stable_turbidity_percent, whichever is greater
    "stable_turbidity_percent": 10.0,  # [%]
    # purge: casing volumes before a sample (three to five, common practice); casing radius
    # [m] (default the well radius) and static level [m below datum] (default from the data)
    "casing_volumes_min": 3.0,
    "casing_radius": None,
    "static_level": None,
    # timing: share of the step elapsed before a sample is not early; share past the end of
    # the step before a sample is late
    "early_sample_share": 0.5,
    "late_sample_share": 0.02,
    # crossflow memory: a step sample predicted to hold more than this share of water a thief
    # zone stored during the idle time is a warning; the fit drops one above the second share
    # and widens the others by the predicted error (common practice: about lab precision, and
    # a quarter of the sample)
    "returned_water_flag": 0.02,
    "returned_water_exclude": 0.25,
    # sample_weights("downweight"): factor on the uncertainty of flagged samples
    "downweight_factor": 3.0,
    # rule -> severity overrides, e.g. {"estimated_value": "info"}
    "severity": {},
}

#: every rule the review can report (names for ``qa.severity`` overrides)
RULES: tuple[str, ...] = (
    "basis_missing", "basis_invalid", "basis_suspect", "units_mixed", "bases_mixed",
    "nondetect_no_limit", "nondetect", "nondetect_flag_on_detect", "rejected_value",
    "estimated_value", "below_limit_unflagged", "qualifier_unknown", "duplicate_unmatched",
    "duplicate_step", "duplicate_rpd", "ion_balance", "ion_balance_incomplete", "holding_time",
    "holding_time_order", "holding_time_unknown", "preservation", "field_readings_few",
    "field_stability", "purge_volume", "step_unknown", "early_sample", "late_sample",
    "returned_water",
) + consistency.RULES

_FLAG_KEYS = ("estimated_flags", "nondetect_flags", "rejected_flags")
_LENGTH_KEYS = ("casing_radius", "static_level")
_POSITIVE_KEYS = ("basis_ratio_tolerance", "duplicate_rpd_limit", "duplicate_near_limit_factor",
                  "ion_balance_abs_meq", "ion_balance_pct_mid", "ion_balance_pct_high",
                  "stable_temperature", "stable_ph", "stable_sc_percent_low",
                  "stable_sc_percent_high", "stable_sc_break", "stable_do", "stable_turbidity",
                  "stable_turbidity_percent", "downweight_factor", "returned_water_flag",
                  "returned_water_exclude")
WEIGHT_MODES = ("keep", "exclude", "downweight")


def qa_options(qa: dict | None) -> dict:
    """Merge the user's QA options over :data:`QA_DEFAULTS` and check them.

    Parameters
    ----------
    qa : dict or None
        ``project.settings.qa``. Lengths may be numbers [m] or text with a unit ("4 in").

    Returns
    -------
    dict
        Every option, with flags upper-cased, holding-time keys as analyte keys and lengths [m].

    Raises
    ------
    InputError
        For an unknown option or a value of the wrong kind (field ``qa.<option>``).
    """
    opts = {k: (v.copy() if isinstance(v, (dict, list)) else v) for k, v in QA_DEFAULTS.items()}
    for key, value in (qa or {}).items():
        where = f"qa.{key}"
        if key not in QA_DEFAULTS:
            raise InputError(f'unknown QA option "{key}" (known: {", ".join(QA_DEFAULTS)})',
                             field=where)
        if key in _FLAG_KEYS:
            items = value.split(",") if isinstance(value, str) else value
            if not isinstance(items, (list, tuple)) or not all(isinstance(f, str) for f in items):
                raise InputError(f"{value!r} is not a list of flags (expected e.g. "
                                 '["J", "J+"])', field=where)
            opts[key] = [f.strip().upper() for f in items if f.strip()]
        elif key in _LENGTH_KEYS:
            opts[key] = None if value is None else parse_quantity(value, "length", "m")
            if opts[key] is not None and key == "casing_radius" and not opts[key] > 0:
                raise InputError(f"{value!r} is not a positive radius", field=where)
        elif key == "holding_times":
            opts[key] = _holding_times(value, where)
        elif key == "severity":
            if not isinstance(value, dict) or any(v not in SEVERITIES for v in value.values()):
                raise InputError(f"{value!r} is not a map of rule to severity (one of "
                                 f"{', '.join(SEVERITIES)})", field=where)
            for rule in value:
                if rule not in RULES:
                    close = difflib.get_close_matches(str(rule), RULES, n=3, cutoff=0.6) \
                        or [r for r in RULES if r.startswith(str(rule)[:4])]
                    hint = (f"did you mean {' or '.join(close)}?" if close else
                            f"the rules: {', '.join(RULES)}")
                    raise InputError(f'"{rule}" is not a rule of the review ({hint})',
                                     field=f"{where}.{rule}")
            opts[key] = dict(value)
        elif key == "field_readings":
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 2:
                raise InputError(f"{value!r} is not a whole number of readings of at least 2",
                                 field=where)
            opts[key] = int(value)
        else:
            opts[key] = _number(value, where, positive=key in _POSITIVE_KEYS)
    return opts


def _number(value, where: str, positive: bool) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.number)):
        raise InputError(f"{value!r} is not a number", field=where)
    number = float(value)
    if not np.isfinite(number) or number < 0 or (positive and number == 0):
        raise InputError(f"{value!r} is not a {'positive' if positive else 'non-negative'} "
                         "number", field=where)
    return number


def _holding_times(value, where: str) -> dict[str, float]:
    if not isinstance(value, dict):
        raise InputError(f"{value!r} is not a map of analyte to days (e.g. "
                         '{"nitrate": 2})', field=where)
    out = {}
    for name, days in value.items():
        key = get_analyte(name).key
        out[key] = _number(days, f"{where}.{name}", positive=True)
    return out


# ------------------------------------------------------------------ severities

def severity_rank(severity: str) -> int:
    """Rank of a severity: info 0 < warning 1 < error 2.

    Raises
    ------
    InputError
        For a word that is not a severity.
    """
    if severity not in SEVERITIES:
        raise InputError(f'"{severity}" is not a severity (expected {", ".join(SEVERITIES)})',
                         field="severity")
    return SEVERITIES.index(severity)


def worst_severity(findings: pd.DataFrame) -> str | None:
    """The most severe severity among ``findings``; None when there are none."""
    if findings is None or findings.empty:
        return None
    return max(findings["severity"], key=severity_rank)


def at_or_above(findings: pd.DataFrame, threshold: str) -> bool:
    """True when any finding is at least as severe as ``threshold`` (for a CLI exit code)."""
    worst = worst_severity(findings)
    return worst is not None and severity_rank(worst) >= severity_rank(threshold)


def findings_frame(findings: Iterable[Finding], overrides: dict | None = None) -> pd.DataFrame:
    """Findings as a DataFrame with :data:`FINDING_COLUMNS`, most severe first (stable order
    within a severity); ``overrides`` maps rule -> severity."""
    findings = list(findings)
    columns = {c: [getattr(f, c) for f in findings] for c in FINDING_COLUMNS}  # column-wise
    frame = pd.DataFrame(columns, columns=FINDING_COLUMNS, dtype=object).astype(
        {"severity": object, "rule": object, "sample_id": object, "step": object,
         "analyte": object, "message": object, "source": object})
    if overrides:
        frame["severity"] = [overrides.get(r, s) for r, s in
                             zip(frame["rule"], frame["severity"], strict=True)]
    frame["source_row"] = pd.array(frame["source_row"].tolist(), dtype="Int64")
    rank = [-SEVERITIES.index(s) for s in frame["severity"]]
    order = np.argsort(np.array(rank, dtype=int), kind="stable")
    return frame.iloc[order].reset_index(drop=True)


# ------------------------------------------------------------------ result

@dataclass
class QAResult:
    """Outcome of :func:`review`.

    Attributes
    ----------
    findings : DataFrame
        Columns :data:`~blendq.review.rules.FINDING_COLUMNS`, most severe first. ``analyte`` is ""
        for a finding on a whole sample (field, timing, ion balance) and ``sample_id`` is ""
        for a finding on no one sample (mixed units).
    skipped : list of (str, str)
        Rules (or parts) not run, with the reason (e.g. "no field readings").
    options : dict
        The QA options used (:func:`qa_options`).
    results : DataFrame
        The (sample_id, analyte) pairs reviewed.
    ion_balance : DataFrame
        Per-sample cation and anion sums (:func:`~blendq.review.ionbalance.ion_balance_table`).
    decisions : DataFrame
        The project's review decisions (:func:`blendq.review.decisions.decision_table`); a
        finding on a decided sample is an info line that names the decision.
    """

    findings: pd.DataFrame
    skipped: list[tuple[str, str]] = field(default_factory=list)
    options: dict = field(default_factory=lambda: qa_options(None))
    results: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=["sample_id", "analyte"]))
    ion_balance: pd.DataFrame = field(default_factory=pd.DataFrame)
    decisions: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=_decisions.DECISION_COLUMNS))

    def decision_lines(self) -> list[str]:
        """One line per review decision: "TH2-3 arsenic: excluded (review[1]: why)"."""
        return [f"{d.sample_id}{' ' + d.analyte if d.analyte else ''}: "
                f"{_decisions.describe(d._asdict())}" for d in self.decisions.itertuples()]

    def worst(self) -> str | None:
        """Most severe finding's severity, or None."""
        return worst_severity(self.findings)

    def counts(self) -> dict[str, int]:
        """Number of findings per severity (every severity present, most severe first)."""
        return {s: int((self.findings["severity"] == s).sum()) for s in reversed(SEVERITIES)}

    def summary_lines(self) -> list[str]:
        """One line per severity, most severe first: count and the rules behind it."""
        lines = []
        for severity, n in self.counts().items():
            rules = self.findings.loc[self.findings["severity"] == severity, "rule"]
            detail = ", ".join(f"{r} {c}" for r, c in rules.value_counts(sort=False).items())
            lines.append(f"{severity}: {n}" + (f" ({detail})" if detail else ""))
        return lines

    def skipped_lines(self) -> list[str]:
        """One line per skipped rule: "rule: reason"."""
        return [f"{rule}: {reason}" for rule, reason in self.skipped]

    def to_json(self) -> str:
        """Findings, skipped rules and counts as a JSON text."""
        records = []
        for rec in self.findings.astype(object).to_dict("records"):
            records.append({k: (None if _missing(v) else _plain_json(v)) for k, v in rec.items()})
        payload = {"counts": self.counts(), "findings": records,
                   "skipped": [{"rule": r, "reason": why} for r, why in self.skipped],
                   "decisions": [{k: _plain_json(v) for k, v in d.items()}
                                 for d in self.decisions.to_dict("records")]}
        return json.dumps(payload, indent=2)

    def to_csv(self, path: str | Path) -> Path:
        """Write the findings table to ``path`` (CSV: the comment block with the cautions,
        formula-like cells made inert; :func:`blendq.csvtext.to_csv_safe`) and return the
        path."""
        from blendq.csvtext import csv_comments, to_csv_safe

        path = Path(path)
        text = to_csv_safe(self.findings, comments=csv_comments(
            "Lab and field review: one row per finding"))
        path.write_bytes(text.encode("utf-8"))
        return path

    def sample_weights(self, mode: str = "keep", per_analyte: bool = False) -> pd.DataFrame:
        """Use of each sample in the fit.

        Parameters
        ----------
        mode : {"keep", "exclude", "downweight"}
            "keep": every sample stays in; flags are noted in ``reason``. "exclude": samples with
            a warning or error are left out. "downweight": their uncertainty is multiplied by
            ``qa.downweight_factor`` (default 3).
        per_analyte : bool
            False: one row per sample_id (any warning or error on the sample counts). True: one
            row per (sample_id, analyte), where a finding on another analyte of the same sample
            does not count but a finding on the whole sample does.

        Returns
        -------
        DataFrame
            Indexed by sample_id (or sample_id and analyte): ``used`` (bool), ``sigma_factor``
            [-] (multiplies the result's standard uncertainty), ``reason`` (text, "" when not
            flagged).

        Raises
        ------
        InputError
            For an unknown mode.
        """
        if mode not in WEIGHT_MODES:
            raise InputError(f'"{mode}" is not a weighting mode (expected '
                             f'{", ".join(WEIGHT_MODES)})', field="mode")
        serious = np.array([severity_rank(s) >= 1 for s in self.findings["severity"]], bool)
        flagged = self.findings[serious & (self.findings["sample_id"] != "").to_numpy()]
        keys = (self.results[["sample_id", "analyte"]].drop_duplicates() if per_analyte
                else self.results[["sample_id"]].drop_duplicates())
        factor = float(self.options["downweight_factor"])
        rows = []
        for key in keys.itertuples(index=False):
            hits = flagged[flagged["sample_id"] == key.sample_id]
            if per_analyte:
                hits = hits[hits["analyte"].isin(["", key.analyte])]
            rules = ", ".join(dict.fromkeys(hits["severity"] + " " + hits["rule"]))
            if hits.empty:
                used, sigma, reason = True, 1.0, ""
            elif mode == "keep":
                used, sigma, reason = True, 1.0, f"kept despite {rules}"
            elif mode == "exclude":
                used, sigma, reason = False, 1.0, f"excluded: {rules}"
            else:
                used, sigma, reason = True, factor, f"uncertainty x {factor:g}: {rules}"
            rows.append({**key._asdict(), "used": used, "sigma_factor": sigma, "reason": reason})
        index = ["sample_id", "analyte"] if per_analyte else ["sample_id"]
        frame = pd.DataFrame(rows, columns=index + ["used", "sigma_factor", "reason"])
        return frame.astype({"used": bool, "sigma_factor": float}).set_index(index)


def _resolve(findings: pd.DataFrame, table: pd.DataFrame) -> pd.DataFrame:
    """Findings on a sample the reviewer decided on become info lines naming the decision."""
    if table.empty or findings.empty:
        return findings
    findings = findings.copy()
    for k, f in findings.iterrows():
        d = decided(table, str(f["sample_id"]), str(f["analyte"])) if f["sample_id"] else None
        if d is not None and f["severity"] != "info":
            findings.at[k, "message"] = (f"{f['message']} (was {f['severity']}; resolved: "
                                         f"{_decisions.describe(d)})")
            findings.at[k, "severity"] = "info"
    rank = [-SEVERITIES.index(s) for s in findings["severity"]]
    order = np.argsort(np.array(rank, dtype=int), kind="stable")
    return findings.iloc[order].reset_index(drop=True)


decided = _decisions.decided


def _missing(value) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _plain_json(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, (str, int, float, bool)):
        return value
    return str(value)


# ------------------------------------------------------------------ review

def review(project, memory: pd.DataFrame | None = None) -> QAResult:
    """Review the lab and field results of a step test.

    Parameters
    ----------
    project : Project
        Tables ``samples`` (values [mg/L] on the canonical basis), ``steps`` and
        ``field_readings``; options in ``project.settings.qa`` (defaults in
        :data:`QA_DEFAULTS`).
    memory : DataFrame, optional
        Crossflow memory of the step samples (:func:`blendq.well.memory.sample_memory`): the
        returned-water rule and the purge volume use it; None: not assessed.

    Returns
    -------
    QAResult

    Notes
    -----
    Rules, with their default thresholds and sources:

    - units and basis: a nitrate or nitrite value with no or a wrong reporting basis (error); a
      value near M(NO3)/M(N) = 4.427 (nitrite: M(NO2)/M(N) = 3.284) times, or that fraction of,
      the median of the other samples at similar rates (+-15 %; warning; National Research
      Council 1995); mixed reporting units or bases of one analyte (info).
    - lab qualifiers: non-detect without a detection limit (error) or with one (info);
      estimated (J-style) flag, not-detected (U-style) flag on a detected value, a detected
      value below its detection limit without a flag (warnings); rejected R flag (error).
    - duplicates: RPD = 100 |a - b| / ((a + b) / 2) above 20 % (warning; 10-20 % typical of
      sampling plans, common practice).
    - ion balance: percent difference 100 (sum cations - sum anions) / (sum cations + sum
      anions) in meq/L outside +-0.2 meq/L (anion sum 0-3 meq/L), +-2 % (3-10), +-5 % (10-800)
      (warning; formula of Standard Methods 1030E as restated in USGS review code, a
      secondary source; the tiers are settings, common practice).
    - holding times: nitrate and nitrite 48 h (nitrate 14 d if chlorinated), nitrate+nitrite
      28 d with H2SO4, metals 6 months with HNO3 (warning; 40 CFR 136.3 Table II as restated
      in laboratory and state tables, a secondary source, for nitrate, nitrite,
      nitrate+nitrite and arsenic; the rest, and 14 d if chlorinated, common practice).
    - field stabilisation: last 5 readings within temperature +-0.2 C, pH +-0.1, specific
      conductance +-5 % (<= 100 uS/cm) or +-3 %, DO +-0.2 mg/L, turbidity +-0.5 FNU or +-10 %
      (warning; settings, common practice after the USGS National Field Manual chapter A6,
      not checked against its 2023 revision).
    - purge volume: fewer than 3 casing volumes, plus the volume the thief zones stored during
      the idle time when it is known, pumped before the sample (warning, or info when the
      field parameters were stable; common practice).
    - returned water: a step sample predicted to hold more than 2 % of water a thief zone
      stored while the well stood idle (warning; crossflow memory, docs/methods.md).
    - timing: a sample taken before half of its step had elapsed (warning; common practice).
    - gross outliers: a discharge result more than ``settings.gross_outlier_factor`` (10)
      times every other step's result, or below 1/10 of them, which no blend of the other
      steps explains (error naming the file and row; common practice,
      :mod:`blendq.review.outliers`).

    A finding on a sample with a review decision (``[[review]]`` in project.toml,
    :mod:`blendq.review.decisions`) becomes an info line naming the decision.
    - consistency (:mod:`blendq.review.consistency`): samples at a step of rate zero (error);
      a pumping level at or above the static level (error against the well's static level,
      warning against the shallowest zone level, a bound of the composite level); a sample
      below the deepest zone (warning).

    Raises
    ------
    InputError
        For a bad QA option.
    """
    with no_collection():  # a long lab table makes many small objects and no cycles
        return _review(project, memory)


def _review(project, memory: pd.DataFrame | None) -> QAResult:
    try:
        opts = qa_options(project.settings.qa)
    except InputError as err:  # the options come from the project file's [settings.qa]
        label = project.files.get("project", "project.toml") if project.files else None
        raise InputError(err.message, file=err.file or label,
                         field=f"settings.{err.field}" if err.field else "settings.qa") from None
    samples = prepare_samples(project.samples)
    out = Outcome()
    out.skipped.extend(("rows", note) for note in getattr(project, "notes", []))
    for check in (consistency.check_zero_rate_samples, consistency.check_pumping_levels,
                  consistency.check_sample_depths):
        out.extend(check(project))
    if samples.empty:
        out.skip("all", "no samples")
        return QAResult(findings_frame(out.findings, opts["severity"]), out.skipped, opts)
    schedule = step_schedule(project.steps)
    balance = ion_balance_table(samples)
    for rule in (check_basis, check_units, check_qualifiers, check_duplicates,
                 partial(check_ion_balance, table=balance), check_holding_times):
        out.extend(rule(samples, project.steps, opts))
    field_out, stable = check_field_stability(samples, project.field_readings, schedule, opts)
    out.extend(field_out)
    stored = (None if memory is None or memory.empty
              else dict(zip(memory["sample_id"], memory["stored"], strict=True)))
    out.extend(check_purge(project, samples, schedule, stable, opts, stored))
    out.extend(check_returned_water(samples, memory, opts))
    out.extend(check_timing(samples, schedule, opts))
    out.extend(check_gross_outliers(samples, project.settings.gross_outlier_factor,
                                    project.files.get("samples", "samples.csv")))
    table = _decisions.decision_table(project.settings.review_decisions, samples)
    return QAResult(
        findings=_resolve(findings_frame(out.findings, opts["severity"]), table),
        decisions=table,
        skipped=out.skipped,
        options=opts,
        results=samples[["sample_id", "analyte"]].drop_duplicates().reset_index(drop=True),
        ion_balance=balance,
    )
