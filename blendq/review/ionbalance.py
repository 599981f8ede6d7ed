"""Cation-anion balance of samples with a major-ion analysis (Standard Methods 1030E).

References
----------
Standard Methods for the Examination of Water and Wastewater, 1030E (checking analyses'
correctness). The percent difference 100 (sum cations - sum anions) / (sum cations + sum
anions) is as restated in the USGS water-quality review code and other open code (a secondary
source). The acceptance tiers (0.2 meq/L; 2 %; 5 %) were not checked in a source: they are
settings (``qa.ion_balance_abs_meq``, ``qa.ion_balance_pct_mid``, ``qa.ion_balance_pct_high``)
described as common practice.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.review.rules import Outcome, exceeds, plain_value, row_number, rows_of

SRC_SM1030E = ("formula: Standard Methods 1030E as restated in USGS water-quality review code "
               "(secondary); acceptance tiers: common practice (settings qa.ion_balance_*)")

# analytes of a complete major-ion analysis (nitrate, fluoride and nitrite join the sums when
# present, but their presence alone does not make an ion balance)
MAJOR_CATIONS = ("calcium", "magnesium", "sodium", "potassium")
MAJOR_ANIONS = ("chloride", "sulfate", "bicarbonate", "carbonate", "alkalinity")
_REQUIRED_MAJORS = (("calcium",), ("magnesium",), ("sodium",), ("chloride",), ("sulfate",),
                    ("bicarbonate", "alkalinity"))


def ion_balance_table(samples: pd.DataFrame) -> pd.DataFrame:
    """Cation and anion sums of each sample with major ions.

    Every charged analyte of the catalogue counts (non-detects as zero, common practice);
    alkalinity (as CaCO3) stands for bicarbonate and carbonate only when neither is reported.

    Parameters
    ----------
    samples : DataFrame
        Samples table (values [mg/L] on the canonical basis), as from :func:`prepare_samples`.

    Returns
    -------
    DataFrame
        Indexed by sample_id: ``cations``, ``anions`` [meq/L], ``difference`` [meq/L]
        (cations - anions), ``percent_difference`` [%], ``missing`` (text naming missing
        majors, "" when complete), ``step``, ``source_row``. Only samples with at least one of
        :data:`MAJOR_CATIONS` or :data:`MAJOR_ANIONS`.

    Notes
    -----
    meq/L = (mg/L) / (M / |z|), the equivalent weight from the molar mass M [g/mol] and the
    charge z; percent difference = 100 (sum cations - sum anions) / (sum cations + sum anions).

    References
    ----------
    Standard Methods for the Examination of Water and Wastewater, 1030E.
    """
    majors = set(MAJOR_CATIONS) | set(MAJOR_ANIONS)
    groups: dict = {}  # sample_id -> its results, in order of first appearance
    for _, r in rows_of(samples[["sample_id", "analyte", "nondetect", "value", "step",
                                 "source_row"]]):
        groups.setdefault(r["sample_id"], []).append(r)
    rows = []
    for sid, group in groups.items():
        present = {r["analyte"] for r in group}
        if not present & majors:
            continue
        skip_alk = bool(present & {"bicarbonate", "carbonate"})
        cat = an = 0.0
        for r in group:
            analyte = get_analyte(r["analyte"])
            if analyte.charge == 0 or (skip_alk and analyte.key == "alkalinity"):
                continue
            mg = 0.0 if r["nondetect"] or not np.isfinite(r["value"]) else r["value"]
            meq = mg / analyte.equivalent_weight()
            if analyte.charge > 0:
                cat += meq
            else:
                an += meq
        missing = [" or ".join(need) for need in _REQUIRED_MAJORS if not present & set(need)]
        total = cat + an
        first_rows = [row_number(r["source_row"]) for r in group]
        rows.append({"sample_id": sid, "step": plain_value(group[0]["step"]),
                     "cations": cat, "anions": an, "difference": cat - an,
                     "percent_difference": 100.0 * (cat - an) / total if total > 0 else np.nan,
                     "missing": ", ".join(missing),
                     "source_row": min((x for x in first_rows if x is not None), default=None)})
    cols = ["sample_id", "step", "cations", "anions", "difference", "percent_difference",
            "missing", "source_row"]
    return pd.DataFrame(rows, columns=cols).set_index("sample_id")


def ion_balance_acceptable(cations: float, anions: float, opts: dict) -> tuple[bool, str]:
    """Acceptance of a cation-anion balance (tiers are settings, common practice).

    Parameters
    ----------
    cations, anions : float
        Sums [meq/L].
    opts : dict
        ``ion_balance_abs_meq`` (0.2 meq/L for an anion sum up to 3 meq/L),
        ``ion_balance_pct_mid`` (2 % for 3-10 meq/L), ``ion_balance_pct_high`` (5 % above).

    Returns
    -------
    (bool, str)
        Whether it passes, and the criterion applied.
    """
    diff = cations - anions
    if anions <= 3.0:
        tol = opts["ion_balance_abs_meq"]
        return not exceeds(abs(diff), tol), f"+-{tol:g} meq/L for an anion sum of 0-3 meq/L"
    pct = 100.0 * diff / (cations + anions)
    tol = opts["ion_balance_pct_mid"] if anions <= 10.0 else opts["ion_balance_pct_high"]
    band = "3-10" if anions <= 10.0 else "10-800"
    return not exceeds(abs(pct), tol), f"+-{tol:g} % for an anion sum of {band} meq/L"


def check_ion_balance(samples: pd.DataFrame, steps: pd.DataFrame, opts: dict,
                      table: pd.DataFrame | None = None) -> Outcome:
    """Cation-anion balance of each sample with a complete major-ion analysis (``table``: the
    :func:`ion_balance_table` of ``samples`` when already computed)."""
    out = Outcome()
    table = ion_balance_table(samples) if table is None else table
    if table.empty:
        out.skip("ion_balance", "major ions not analysed")
        return out
    for sid, r in rows_of(table):
        row = {"sample_id": sid, "step": r["step"], "source_row": r["source_row"]}
        if r["missing"]:
            out.add("info", "ion_balance_incomplete",
                    f"no ion balance: major ions missing ({r['missing']})", SRC_SM1030E, row,
                    analyte="")
            continue
        ok, criterion = ion_balance_acceptable(r["cations"], r["anions"], opts)
        if not ok:
            out.add("warning", "ion_balance",
                    f"cations {r['cations']:.3f} meq/L, anions {r['anions']:.3f} meq/L, "
                    f"difference {r['difference']:+.3f} meq/L ({r['percent_difference']:+.1f} %),"
                    f" outside {criterion}", SRC_SM1030E, row, analyte="")
    return out
