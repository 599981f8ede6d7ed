"""The reviewer's decisions on samples, recorded in the project (``[[review]]`` entries).

A decision says what the analysis does with one sample (or one result of it) and why:
``exclude`` leaves it out of the fit, ``downweight`` multiplies its uncertainty by ``factor``,
``keep`` keeps it as it is. Because the decisions live in project.toml, every command that
fits (fit, window, compare, report) uses the same data, and the report lists them.

Example::

    [[review]]
    sample = "TH2-3"
    analyte = "arsenic"          # optional; every result of the sample when left out
    action = "exclude"
    reason = "lab confirmed a unit error: 8.0 ug/L reported as mg/L"
"""

from __future__ import annotations

import pandas as pd

from blendq.errors import InputError

#: what a decision may do with a sample
ACTIONS = ("exclude", "downweight", "keep")

#: columns of :func:`decision_table`
DECISION_COLUMNS = ["entry", "sample_id", "analyte", "action", "factor", "reason", "results"]


def decision_table(decisions, samples: pd.DataFrame,
                   file: str = "project.toml") -> pd.DataFrame:
    """The project's review decisions, checked against the samples.

    Parameters
    ----------
    decisions : sequence of dict
        ``settings.review_decisions`` (keys sample, analyte, action, factor, reason, entry).
    samples : DataFrame
        The samples table (sample_id, analyte).
    file : str
        Project file name, for messages.

    Returns
    -------
    DataFrame
        :data:`DECISION_COLUMNS`; ``results`` is the number of lab results the decision
        covers.

    Raises
    ------
    InputError
        For a sample (or a result of it) not in the samples table, naming ``review[i]``.
    """
    rows = []
    ids = samples["sample_id"].astype(str) if len(samples) else pd.Series(dtype=str)
    for d in decisions:
        i = d.get("entry", len(rows) + 1)
        hit = ids == d["sample"]
        if not hit.any():
            raise InputError(f'sample "{d["sample"]}" is not in the samples table',
                             file=file, field=f"review[{i}].sample")
        if d.get("analyte"):
            hit &= samples["analyte"].astype(str) == d["analyte"]
            if not hit.any():
                raise InputError(f'sample "{d["sample"]}" has no {d["analyte"]} result',
                                 file=file, field=f"review[{i}].analyte")
        rows.append({"entry": int(i), "sample_id": d["sample"], "analyte": d.get("analyte", ""),
                     "action": d["action"], "factor": float(d.get("factor", 1.0)),
                     "reason": d["reason"], "results": int(hit.sum())})
    return pd.DataFrame(rows, columns=DECISION_COLUMNS)


def decided(table: pd.DataFrame, sample_id: str, analyte: str) -> pd.Series | None:
    """The last decision covering ``(sample_id, analyte)`` (``analyte`` "" for a finding on the
    whole sample), or None."""
    if table.empty:
        return None
    hit = (table["sample_id"] == sample_id) & ((table["analyte"] == "")
                                               | (table["analyte"] == analyte)
                                               | (analyte == ""))
    return None if not hit.any() else table[hit].iloc[-1]


def describe(d) -> str:
    """A decision in words: "excluded (review[1]: lab confirmed a unit error)"."""
    what = {"exclude": "excluded", "keep": "kept",
            "downweight": f"uncertainty x {float(d['factor']):g}"}[d["action"]]
    return f"{what} (review[{int(d['entry'])}]: {d['reason']})"


def result_use(sample_use: pd.DataFrame, results: pd.DataFrame,
               table: pd.DataFrame) -> pd.DataFrame:
    """Use of each lab result in the fit: the review's use of its sample, then the decisions.

    Parameters
    ----------
    sample_use : DataFrame
        Per sample: sample_id, used, sigma_factor, reason
        (:meth:`blendq.review.findings.QAResult.sample_weights`, reset index).
    results : DataFrame
        The (sample_id, analyte) pairs reviewed.
    table : DataFrame
        :func:`decision_table`.

    Returns
    -------
    DataFrame
        Per (sample_id, analyte): used (bool), sigma_factor [-], reason.
    """
    out = results[["sample_id", "analyte"]].drop_duplicates().merge(
        sample_use[["sample_id", "used", "sigma_factor", "reason"]], on="sample_id", how="left")
    out["used"] = out["used"].fillna(True).astype(bool)
    out["sigma_factor"] = out["sigma_factor"].fillna(1.0).astype(float)
    out["reason"] = out["reason"].fillna("").astype(str)
    for d in table.itertuples(index=False):
        hit = (out["sample_id"] == d.sample_id) & ((d.analyte == "")
                                                   | (out["analyte"] == d.analyte))
        out.loc[hit, "used"] = d.action != "exclude"
        out.loc[hit, "sigma_factor"] = d.factor if d.action == "downweight" else 1.0
        out.loc[hit, "reason"] = describe(d._asdict())
    return out.reset_index(drop=True)
