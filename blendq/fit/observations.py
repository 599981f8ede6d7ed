"""Assemble the fitting data of a project: quality rows per analyte, flow-log and level rows.

Each quality row is one lab result at one step: a discharge sample (weights a_i(Q_step)) or a
sample taken inside the well at a depth (wellbore composition at that depth). Non-detects become
censored rows (the fitted blend may not exceed the detection limit). A duplicate (a result whose
``duplicate_of`` names another sample of the same step, analyte and depth) is combined with its
primary into one observation of the step (:func:`combine_duplicates`; docs/methods.md,
section 6.1), so a step sampled twice does not weigh twice. A step sample that may carry water a
thief zone stored while the well stood idle is widened by its predicted error, or left out
(:func:`returned_water_use`; crossflow memory, docs/methods.md).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from blendq.inputs.project import Project, Settings


@dataclass(frozen=True)
class AnalyteData:
    """Quality observations of one analyte.

    Attributes
    ----------
    analyte : str
    rate, depth : ndarray (m,)
        Step rate [m^3/d] and sampling depth [m] (NaN for discharge) of each detected result.
    value, sigma : ndarray (m,)
        Result and its standard deviation [mg/L canonical].
    sample_id, step : ndarray of str (m,)
    cens_rate, cens_depth, cens_limit : ndarray (p,)
        Non-detects: step rate, depth and detection limit [mg/L].
    cens_sample_id, cens_step : ndarray of str (p,)
    """

    analyte: str
    rate: np.ndarray
    depth: np.ndarray
    value: np.ndarray
    sigma: np.ndarray
    sample_id: np.ndarray
    step: np.ndarray
    cens_rate: np.ndarray
    cens_depth: np.ndarray
    cens_limit: np.ndarray
    cens_sample_id: np.ndarray
    cens_step: np.ndarray

    @property
    def n_obs(self) -> int:
        return len(self.value) + len(self.cens_limit)


#: floor of the standard uncertainty of a result without a stated uncertainty, as a fraction
#: of its detection limit (``settings.detection_limit_sigma_fraction``; common practice)
DETECTION_LIMIT_SIGMA_FRACTION = Settings.detection_limit_sigma_fraction


def lab_sigma(values, uncertainty, detection_limit, relative_default: float,
              detection_limit_fraction: float = DETECTION_LIMIT_SIGMA_FRACTION) -> np.ndarray:
    """One-sd uncertainty of lab results [mg/L].

    A stated uncertainty (finite and > 0) is used as stated. A result without one gets
    ``relative_default`` x its value, floored at ``detection_limit_fraction`` x its detection
    limit (where a row has none, the median of the limits given) and at 0.1 % of the largest
    result, so that a result of zero does not get infinite weight (common practice; the floors
    never touch a stated uncertainty).

    Parameters
    ----------
    values : array_like (m,)
        Detected results [mg/L].
    uncertainty : array_like (m,)
        Stated standard uncertainty [mg/L]; NaN or <= 0 where the lab states none.
    detection_limit : array_like (m,) or float
        Detection limit of each result [mg/L]; NaN where none is given.
    relative_default : float
        Relative standard uncertainty [-] of a result without a stated one.
    detection_limit_fraction : float
        Floor of an unstated uncertainty as a fraction of the detection limit [-].

    Returns
    -------
    ndarray (m,)
        Standard uncertainty [mg/L].
    """
    v = np.asarray(values, float)
    u = np.broadcast_to(np.asarray(uncertainty, float), v.shape)
    stated = np.isfinite(u) & (u > 0)
    dl = np.broadcast_to(np.asarray(detection_limit, float), v.shape)
    known = np.isfinite(dl) & (dl > 0)
    dl = np.where(known, dl, np.median(dl[known]) if known.any() else 0.0)
    largest = float(np.nanmax(np.abs(v))) if v.size and np.isfinite(v).any() else 0.0
    floor = np.maximum(detection_limit_fraction * dl, max(1e-3 * largest, 1e-12))
    return np.where(stated, u, np.maximum(relative_default * np.abs(v), floor))


def _same_depth(a: float, b: float) -> bool:
    return (np.isnan(a) and np.isnan(b)) or bool(np.isclose(a, b, rtol=0.0, atol=1e-6))


def duplicate_groups(samples: pd.DataFrame) -> np.ndarray:
    """Group number of each row of one analyte's results: duplicates share their primary's.

    A row is a duplicate when its ``duplicate_of`` names the ``sample_id`` of another row of the
    table taken at the same step and depth (the review checks their agreement; a duplicate whose
    primary is missing, excluded or elsewhere stays a sample of its own). Chains (a duplicate of a
    duplicate) join one group.

    Parameters
    ----------
    samples : DataFrame
        Rows of one analyte with columns sample_id, step, depth and (optionally) duplicate_of.

    Returns
    -------
    ndarray of int (m,)
        Position of the group's first row, for every row.
    """
    n = len(samples)
    ids = samples["sample_id"].astype(str).to_numpy()
    steps = samples["step"].astype(str).to_numpy()
    depth = pd.to_numeric(samples["depth"], errors="coerce").to_numpy(float)
    dup_of = (samples["duplicate_of"] if "duplicate_of" in samples
              else pd.Series([""] * n, index=samples.index))
    dup_of = ["" if pd.isna(x) else str(x).strip() for x in dup_of]
    parent = np.arange(n)
    for k in range(n):
        if not dup_of[k] or dup_of[k] == ids[k]:
            continue
        match = [i for i in range(n) if i != k and ids[i] == dup_of[k] and steps[i] == steps[k]
                 and _same_depth(depth[i], depth[k])]
        if match:
            parent[k] = match[0]

    def root(k: int) -> int:
        seen = set()
        while parent[k] != k and k not in seen:
            seen.add(k)
            k = parent[k]
        return k

    roots = np.array([root(k) for k in range(n)], int)
    first = {}
    for k, r in enumerate(roots):
        first.setdefault(r, k)
    return np.array([first[r] for r in roots], int)


def combine_duplicates(value, sigma, nondetect, detection_limit) -> tuple[bool, float, float]:
    """One observation of a step from a group of duplicate results.

    Duplicates share the sampling and temporal error of their step and differ only by lab and
    sub-sampling error, so two results do not halve the error of the step's value. The group
    counts as one result:

    * all detected: value = mean, sigma = max(sigma_1, s), where sigma_1 is the root mean square
      of the members' uncertainties (one result's) and s the sample standard deviation of the
      values (|a - b| / sqrt(2) for a pair): the spread estimates one result's error, so a pair
      that disagrees by more than its stated errors allow widens the step's error;
    * detected and non-detect: the mean of the detected values with the sigma above, widened to
      (mean - L) / sqrt(2) when the mean lies above the smallest reporting limit L of the
      non-detects (the least spread the disagreeing pair can have); the non-detect adds no row
      (keeping the detected value is the cautious choice for a contaminant);
    * all non-detect: one censored row at the smallest limit (every limit holds; the smallest
      implies the others).

    Parameters
    ----------
    value, sigma : array_like (k,)
        Results and their uncertainties [mg/L] (ignored for non-detects).
    nondetect : array_like of bool (k,)
    detection_limit : array_like (k,)
        Reporting limits [mg/L] (used for non-detects).

    Returns
    -------
    censored : bool
        True when the group becomes a censored row.
    value : float
        Combined result, or the censoring limit [mg/L].
    sigma : float
        Combined uncertainty [mg/L] (NaN for a censored row).
    """
    nd = np.asarray(nondetect, bool)
    v = np.asarray(value, float)[~nd]
    s = np.asarray(sigma, float)[~nd]
    limits = np.asarray(detection_limit, float)[nd]
    if not len(v):
        return True, float(np.nanmin(limits)), float("nan")
    mean = float(np.mean(v))
    sd = float(np.sqrt(np.mean(s ** 2)))
    if len(v) > 1:
        sd = max(sd, float(np.std(v, ddof=1)))
    finite = limits[np.isfinite(limits)]
    if len(finite) and mean > finite.min():
        sd = max(sd, (mean - float(finite.min())) / np.sqrt(2.0))
    return False, mean, sd


def returned_water_sigma(sigma, bias) -> np.ndarray:
    """Uncertainty of a result widened by the predicted error of returned water [mg/L].

    sigma' = sqrt(sigma^2 + bias^2): the predicted error (a share of stored water times its
    difference from the thief zones' own water) is treated as one more independent error of
    the result, so sigma' >= sigma and the weight 1/sigma'^2 never rises.

    Parameters
    ----------
    sigma : array_like
        Standard uncertainty of the result [mg/L].
    bias : array_like
        Predicted error from returned water [mg/L] (its sign does not matter).
    """
    return np.hypot(np.asarray(sigma, float), np.nan_to_num(np.asarray(bias, float)))


def returned_water_use(sample_use: pd.DataFrame, memory: pd.DataFrame, bias: pd.DataFrame,
                       flag_above: float, exclude_above: float) -> pd.DataFrame:
    """Use of each result in the fit with crossflow memory: widened or left out.

    The rule (docs/methods.md, crossflow memory), for a result whose sample is predicted to
    hold a share f of returned water: f above ``exclude_above`` (``qa.returned_water_exclude``)
    leaves it out; f above ``flag_above`` (``qa.returned_water_flag``, the review's flag) gets
    ``added_sigma`` = |bias|, combined with its uncertainty by :func:`returned_water_sigma` in
    :func:`quality_data`; a result at or below the flag is used as it is.

    Parameters
    ----------
    sample_use : DataFrame
        One row per result: sample_id, analyte, used, sigma_factor, reason.
    memory : DataFrame
        :func:`blendq.well.memory.sample_memory` (sample_id, returned_fraction).
    bias : DataFrame
        Predicted error [mg/L], index sample_id, one column per analyte
        (:func:`blendq.well.memory.sample_bias`).
    flag_above : float
        Share of returned water [-] above which a result is widened.
    exclude_above : float
        Share of returned water [-] above which a result is left out.

    Returns
    -------
    DataFrame
        A copy of ``sample_use`` with an ``added_sigma`` column [mg/L]; ``used`` and
        ``reason`` changed where the rule acts.
    """
    use = sample_use.copy()
    use["added_sigma"] = 0.0
    if memory is None or memory.empty:
        return use
    share = memory.set_index("sample_id")["returned_fraction"]
    for k, row in use.iterrows():
        f = float(share.get(row["sample_id"], np.nan))
        if not (np.isfinite(f) and f > flag_above and bool(row["used"])):
            continue
        if f > exclude_above:
            use.at[k, "used"] = False
            use.at[k, "reason"] = _join(row["reason"], f"excluded: {100 * f:.1f} % returned "
                                        f"water predicted (above {100 * exclude_above:g} %)")
            continue
        b = float(bias.at[row["sample_id"], row["analyte"]]) if (
            row["sample_id"] in bias.index and row["analyte"] in bias.columns) else 0.0
        if np.isfinite(b) and b != 0.0:
            use.at[k, "added_sigma"] = abs(b)
            use.at[k, "reason"] = _join(row["reason"], f"uncertainty widened by {abs(b):.3g} "
                                        f"mg/L: {100 * f:.1f} % returned water predicted")
    return use


def _join(a, b: str) -> str:
    a = "" if a is None or (isinstance(a, float) and np.isnan(a)) else str(a)
    return f"{a}; {b}" if a else b


def quality_data(project: Project, sample_use: pd.DataFrame | None = None) -> dict[str, AnalyteData]:
    """Quality observations per analyte (analytes with at least one result at a known rate).

    Duplicates of one step (see :func:`duplicate_groups`) become one observation
    (:func:`combine_duplicates`) named "primary+duplicate".

    Parameters
    ----------
    project : Project
    sample_use : DataFrame, optional
        From the lab review: columns sample_id (and optionally analyte, for one row per
        result), used (bool), sigma_factor (float). Samples not
        used are dropped; the others' sigma is multiplied by their factor (before duplicates
        are combined).
    """
    s = project.samples
    if s.empty:
        return {}
    settings = project.settings
    rate_of = dict(zip(project.steps["step"].astype(str), project.steps["rate"].astype(float), strict=False))
    s = s.copy()
    s["step"] = s["step"].astype(str)
    s = s[s["step"].isin(rate_of)]
    factor = pd.Series(1.0, index=s.index)
    added = pd.Series(0.0, index=s.index)
    if sample_use is not None and not sample_use.empty:
        if "analyte" in sample_use.columns:  # one row per result (review decisions)
            use = sample_use.set_index(["sample_id", "analyte"])
            pairs = pd.MultiIndex.from_arrays([s["sample_id"].astype(str), s["analyte"]])
            keep = pd.Series(use["used"].reindex(pairs).to_numpy(), index=s.index)
            factor = pd.Series(use["sigma_factor"].reindex(pairs).to_numpy(), index=s.index)
            keep, factor = keep.fillna(True).astype(bool), factor.fillna(1.0).astype(float)
            if "added_sigma" in use.columns:
                added = pd.Series(use["added_sigma"].reindex(pairs).to_numpy(),
                                  index=s.index).fillna(0.0).astype(float)
        else:
            use = sample_use.set_index("sample_id")
            keep = s["sample_id"].map(use["used"]).fillna(True).astype(bool)
            factor = s["sample_id"].map(use["sigma_factor"]).fillna(1.0).astype(float)
        s = s[keep]
        factor, added = factor[keep], added[keep]
    out = {}
    for analyte in dict.fromkeys(s["analyte"]):
        sub = s[s["analyte"] == analyte]
        nd = sub["nondetect"].astype(bool).to_numpy()
        value = sub["value"].astype(float).to_numpy()
        limit = sub["detection_limit"].astype(float).to_numpy()
        sig = np.full(len(sub), np.nan)
        if (~nd).any():
            sig[~nd] = lab_sigma(value[~nd], sub["uncertainty"].astype(float).to_numpy()[~nd],
                                 limit[~nd], settings.default_relative_uncertainty,
                                 settings.detection_limit_sigma_fraction)
        sig = returned_water_sigma(sig * factor.loc[sub.index].to_numpy(float),
                                   added.loc[sub.index].to_numpy(float))
        group = duplicate_groups(sub)
        ids = sub["sample_id"].astype(str).to_numpy()
        steps = sub["step"].to_numpy(str)
        depth = sub["depth"].astype(float).to_numpy()
        det, cen = [], []
        for g in dict.fromkeys(group):
            members = np.flatnonzero(group == g)
            name = "+".join(dict.fromkeys(ids[members]))
            censored, v, sd = combine_duplicates(value[members], sig[members], nd[members],
                                                 limit[members])
            row = (rate_of[steps[g]], depth[g], v, sd, name, steps[g])
            (cen if censored else det).append(row)

        def col(rows, k, dtype=float):
            return np.array([r[k] for r in rows], dtype)

        out[analyte] = AnalyteData(
            analyte=analyte,
            rate=col(det, 0), depth=col(det, 1), value=col(det, 2), sigma=col(det, 3),
            sample_id=col(det, 4, str), step=col(det, 5, str),
            cens_rate=col(cen, 0), cens_depth=col(cen, 1), cens_limit=col(cen, 2),
            cens_sample_id=col(cen, 4, str), cens_step=col(cen, 5, str),
        )
    return out
