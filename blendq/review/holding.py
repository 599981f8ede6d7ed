"""Holding times from sampling to analysis, and the preservation the longer ones require.

References
----------
40 CFR 136.3 Table II (required containers, preservation techniques and holding times), as
restated in laboratory and state tables (a secondary source) for nitrate (48 h, cooled to
<= 6 C), nitrite (48 h), nitrate+nitrite (28 d with H2SO4 to pH < 2) and arsenic (6 months with
HNO3 to pH < 2). The other entries, and 14 d for a chlorinated nitrate sample, were not checked
in a source: they are common practice, and ``qa.holding_times`` overrides any of them.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.review.rules import Outcome, rows_of

SRC_HOLD = ("40 CFR 136.3 Table II as restated in laboratory and state tables (secondary) for "
            "nitrate, nitrite, nitrate+nitrite and arsenic; other entries common practice "
            "(setting qa.holding_times)")

#: holding time [d], what the 28-day or 6-month value requires, and a description.
#: 40 CFR 136.3 Table II restated by laboratory and state tables (secondary) for nitrate,
#: nitrite, nitrate+nitrite and arsenic; the rest common practice. "6 months" is read as 180 d.
HOLDING_TIMES: dict[str, tuple[float, str, str]] = {
    "nitrate": (2.0, "", "48 h, cooled to <= 6 C (14 d if chlorinated)"),
    "nitrite": (2.0, "", "48 h, cooled to <= 6 C"),
    "nitrate_nitrite": (28.0, "H2SO4", "28 d with H2SO4 to pH < 2, cooled to <= 6 C"),
    "fluoride": (28.0, "", "28 d"),
    "chloride": (28.0, "", "28 d"),
    "sulfate": (28.0, "", "28 d, cooled to <= 6 C"),
    "alkalinity": (14.0, "", "14 d, cooled to <= 6 C"),
    "bicarbonate": (14.0, "", "14 d as alkalinity, cooled to <= 6 C"),
    "carbonate": (14.0, "", "14 d as alkalinity, cooled to <= 6 C"),
    **{m: (180.0, "HNO3", "6 months with HNO3 to pH < 2")
       for m in ("arsenic", "uranium", "selenium", "iron", "manganese", "calcium", "magnesium",
                 "sodium", "potassium")},
}
NITRATE_CHLORINATED_DAYS = 14.0  #: common practice (not checked in a source); a setting
_ACID_WORDS = {"H2SO4": r"h2so4|sulfuric|sulphuric", "HNO3": r"hno3|nitric"}
_NOT_CHLORINATED = re.compile(r"\b(?:un|non[- ]?|not\s+)chlorinated", re.IGNORECASE)


def holding_time(analyte: str, preservation: str, opts: dict) -> tuple[float, str] | None:
    """Holding time [d] of ``analyte`` given the preservation text, and its description;
    None when the analyte has no entry. ``opts["holding_times"]`` overrides days by analyte."""
    if analyte in opts["holding_times"]:
        days = float(opts["holding_times"][analyte])
        return days, f"{days:g} d (qa.holding_times)"
    if analyte not in HOLDING_TIMES:
        return None
    days, _, what = HOLDING_TIMES[analyte]
    if analyte == "nitrate" and is_chlorinated(preservation):
        return NITRATE_CHLORINATED_DAYS, "14 d for a chlorinated sample, cooled to <= 6 C"
    return days, what


def is_chlorinated(preservation: str) -> bool:
    """True when the preservation text says the sample was chlorinated (not "unchlorinated")."""
    said = re.search(r"chlorinated", preservation, re.IGNORECASE) is not None
    return said and _NOT_CHLORINATED.search(preservation) is None


def check_holding_times(samples: pd.DataFrame, steps: pd.DataFrame, opts: dict) -> Outcome:
    """Time from sampling to analysis against the holding time of each analyte, and the acid
    the longer holding times require.

    Option: ``holding_times`` (dict analyte -> days) overrides :data:`HOLDING_TIMES`.
    """
    out = Outcome()
    checkable = samples[[a in HOLDING_TIMES or a in opts["holding_times"]
                         for a in samples["analyte"]]]
    if checkable.empty:
        return out
    timed = checkable["sampled_at"].notna() & checkable["analyzed_at"].notna()
    if not timed.any():
        out.skip("holding_time", "no sampled_at/analyzed_at times")
        return out
    for _, group in checkable[~timed].groupby("sample_id", sort=False):
        out.add("info", "holding_time_unknown",
                "holding time not checked (sampled_at or analyzed_at missing) for "
                + ", ".join(dict.fromkeys(group["analyte"])), SRC_HOLD, group.iloc[0],
                analyte="")
    no_acid: dict[tuple[str, str], list] = {}
    rows = checkable[timed]
    elapsed_days = ((rows["analyzed_at"] - rows["sampled_at"]) / pd.Timedelta(days=1)).to_numpy(
        float)
    rules: dict[tuple[str, str], tuple[float, str, bool]] = {}  # per analyte and preservation
    for pair in zip(rows["analyte"], rows["preservation"], strict=True):
        if pair not in rules:
            analyte, preservation = pair
            days_allowed, what = holding_time(analyte, preservation, opts)
            acid = HOLDING_TIMES.get(analyte, (0, "", ""))[1]
            lacks_acid = bool(acid and analyte not in opts["holding_times"]
                              and not re.search(_ACID_WORDS[acid], preservation, re.IGNORECASE))
            rules[pair] = (days_allowed, what, lacks_acid)
    rule_of = [rules[pair] for pair in zip(rows["analyte"], rows["preservation"], strict=True)]
    allowed = np.array([r[0] for r in rule_of], float)
    lacking = np.array([r[2] for r in rule_of], bool)
    noted = (elapsed_days < 0) | (elapsed_days > allowed) | lacking  # only these are read
    for (_, row), elapsed, (days_allowed, what, lacks_acid) in zip(
            rows_of(rows[noted]), elapsed_days[noted],
            [r for r, n in zip(rule_of, noted, strict=True) if n], strict=True):
        name = get_analyte(row["analyte"]).name
        if elapsed < 0:
            out.add("error", "holding_time_order",
                    f"{name} analysed {-elapsed * 24:.1f} h before it was sampled "
                    f"({row['analyzed_at']} < {row['sampled_at']})", SRC_HOLD, row)
            continue
        if elapsed > days_allowed:
            out.add("warning", "holding_time",
                    f"{name} analysed {_span(elapsed)} after sampling; holding time {what}",
                    SRC_HOLD, row)
        if lacks_acid:
            acid = HOLDING_TIMES[row["analyte"]][1]
            no_acid.setdefault((row["sample_id"], acid), []).append(row)
    for (_, acid), rows in no_acid.items():
        said = f'"{rows[0]["preservation"]}"' if rows[0]["preservation"] else "not recorded"
        names = ", ".join(get_analyte(r["analyte"]).name for r in rows)
        days = HOLDING_TIMES[rows[0]["analyte"]][0]
        out.add("info", "preservation",
                f"{names}: preservation {said}; the {_span(days)} holding time assumes {acid} "
                "to pH < 2", SRC_HOLD, rows[0],
                analyte=rows[0]["analyte"] if len(rows) == 1 else "")
    return out


def _span(days: float) -> str:
    return f"{days * 24:.1f} h" if days <= 3 else f"{days:.1f} d"
