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
    # column by column: each sample is a group code (in order of first appearance), and the
    # milliequivalents are summed in row order by np.add.at (the same additions, in the same
    # order, as a loop over the rows)
    codes, ids = pd.factorize(samples["sample_id"], sort=False, use_na_sentinel=False)
    names = samples["analyte"].tolist()
    present: list[set[str]] = [set() for _ in ids]
    for code, name in zip(codes, names, strict=True):
        present[code].add(name)
    analytes = {name: get_analyte(name) for name in set(names)}
    charge = np.array([analytes[name].charge for name in names], dtype=float)
    weight = {name: a.equivalent_weight() for name, a in analytes.items() if a.charge != 0}
    alkalinity = np.array([analytes[name].key == "alkalinity" for name in names], dtype=bool)
    skip_alk = np.array([bool(p & {"bicarbonate", "carbonate"}) for p in present], dtype=bool)
    value = samples["value"].to_numpy(float)
    mg = np.where(samples["nondetect"].to_numpy(bool) | ~np.isfinite(value), 0.0, value)
    counted = (charge != 0) & ~(skip_alk[codes] & alkalinity) if len(codes) else charge != 0
    meq = np.zeros(len(names))
    meq[counted] = mg[counted] / np.array([weight[n] for n, c in zip(names, counted, strict=True)
                                           if c], dtype=float)
    cations, anions = np.zeros(len(ids)), np.zeros(len(ids))
    np.add.at(cations, codes[counted & (charge > 0)], meq[counted & (charge > 0)])
    np.add.at(anions, codes[counted & (charge < 0)], meq[counted & (charge < 0)])
    source = pd.Series(samples["source_row"].to_numpy(float)).groupby(codes, sort=True).min(
        ).tolist() if len(codes) else []
    firsts = dict.fromkeys(range(len(ids)))
    for k, code in enumerate(codes):  # the step of each sample's first row
        if firsts[code] is None:
            firsts[code] = k
    steps = samples["step"].tolist()
    rows = []
    for code, sid in enumerate(ids):
        if not present[code] & majors:
            continue
        cat, an = float(cations[code]), float(anions[code])
        missing = [" or ".join(need) for need in _REQUIRED_MAJORS if not present[code] & set(need)]
        total = cat + an
        low = row_number(source[code])
        rows.append({"sample_id": sid, "step": plain_value(steps[firsts[code]]),
                     "cations": cat, "anions": an, "difference": cat - an,
                     "percent_difference": 100.0 * (cat - an) / total if total > 0 else np.nan,
                     "missing": ", ".join(missing), "source_row": low})
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
