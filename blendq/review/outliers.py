"""Gross outliers: a discharge result that no blend of the other steps can explain.

Every discharge sample of a step test is a blend of the same zones' water; the shares change
with the rate, but a result an order of magnitude above every other step's result of its
analyte (or below all of them), while those agree with one another, is far more often a unit or
copying error ("8.0 mg/L" written for 8.0 ug/L, a factor of 1000) than water. Such a
result is an error of the review: it would otherwise decide the fit and the window alone.

The factor is ``settings.gross_outlier_factor`` (common practice: 10, an order of magnitude;
not a published value).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.review.rules import SRC_COMMON, Outcome, rows_of

RULE = "gross_outlier"


def check_gross_outliers(samples: pd.DataFrame, factor: float,
                         file: str = "samples.csv") -> Outcome:
    """Discharge results more than ``factor`` times every other step's result (or less than
    1 / ``factor`` times), as errors naming the file and row.

    Parameters
    ----------
    samples : DataFrame
        Prepared samples (:func:`blendq.review.rules.prepare_samples`); values [mg/L].
    factor : float
        Ratio [-] beyond which no blend of the other steps explains a result (> 1).
    file : str
        Name of the samples file, for the message.

    Returns
    -------
    Outcome
        One error per outlying result; a skip note for analytes with fewer than two other
        steps to compare with.

    Notes
    -----
    Only detected discharge results (no sample depth) are compared, each with the detected
    discharge results of the other steps (at least two steps, so that one odd result cannot
    make the others look odd). A result is high when it exceeds ``factor`` x the largest of
    them, low when it is below the smallest / ``factor``.
    """
    out = Outcome()
    if samples.empty:
        return out
    s = samples[~samples["nondetect"] & np.isfinite(samples["value"])
                & ~np.isfinite(samples["depth"]) & (samples["value"] > 0)]
    for analyte, rows in s.groupby("analyte", sort=False):
        if rows["step_key"].nunique() < 3:
            continue
        try:
            an = get_analyte(analyte)
            unit, scale = an.display_unit, float(an.in_display_unit(1.0))
        except Exception:  # noqa: BLE001 - an analyte blendq does not know: mg/L
            unit, scale = "mg/L", 1.0
        # the largest and smallest result of the other steps, from per-step extremes (the
        # rows of an analyte may be many: a lab's long table)
        per_step = rows.groupby("step_key", sort=False)["value"].agg(["max", "min"])
        hi_of = {k: float(per_step["max"].drop(k).max()) for k in per_step.index}
        lo_of = {k: float(per_step["min"].drop(k).min()) for k in per_step.index}
        his = rows["step_key"].map(hi_of).to_numpy(float)
        los = rows["step_key"].map(lo_of).to_numpy(float)
        values = rows["value"].to_numpy(float)
        odd = (values > factor * his) | (values < los / factor)
        for (_, row), hi, lo in zip(rows_of(rows[odd]), his[odd], los[odd], strict=True):
            v = float(row["value"])
            if v > factor * hi:
                how = f"{v / hi:.3g} times the largest"
            else:
                how = f"1/{lo / v:.3g} of the smallest"
            where = f"{file} row {int(row['source_row'])}" if np.isfinite(row["source_row"]) \
                else file
            reported = (f" (reported as {row['reported_value']} {row['reported_unit']})"
                        if str(row.get("reported_unit", "")) else "")
            out.add("error", RULE,
                    f"{where}: {analyte} {v * scale:.4g} {unit}{reported} in sample "
                    f"{row['sample_id']} (step {row['step']}) is {how} of the other steps' "
                    f"results ({lo * scale:.4g} to {hi * scale:.4g} {unit}); no blend of the "
                    f"other steps gives it. Check the unit and the lab report; record the "
                    f"decision in a [[review]] entry of project.toml", SRC_COMMON, row)
    return out
