"""Assemble the fitting data of a project: quality rows per analyte, flow-log and level rows.

Each quality row is one lab result at one step: a discharge sample (weights a_i(Q_step)) or a
sample taken inside the well at a depth (wellbore composition at that depth). Non-detects become
censored rows (the fitted blend may not exceed the detection limit). Duplicates stay separate
observations of the same step.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from blendq.inputs.project import Project


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


def lab_sigma(values, uncertainty, detection_limit, relative_default: float):
    """One-sd uncertainty of lab results [mg/L].

    The lab's stated uncertainty where given; otherwise ``relative_default`` x value. Never
    below half the analyte's detection limit, nor below 0.1 % of the analyte's largest result
    (so a result of zero does not get infinite weight): common practice.
    """
    v = np.asarray(values, float)
    u = np.asarray(uncertainty, float)
    s = np.where(np.isfinite(u) & (u > 0), u, relative_default * np.abs(v))
    dl = np.asarray(detection_limit, float)
    dl_floor = 0.5 * np.nanmedian(dl) if np.any(np.isfinite(dl)) else 0.0
    floor = max(dl_floor, 1e-3 * float(np.nanmax(np.abs(v))) if v.size else 0.0, 1e-12)
    return np.maximum(s, floor)


def quality_data(project: Project, sample_use: pd.DataFrame | None = None) -> dict[str, AnalyteData]:
    """Quality observations per analyte (analytes with at least one result at a known rate).

    Parameters
    ----------
    project : Project
    sample_use : DataFrame, optional
        From the lab review: columns sample_id, used (bool), sigma_factor (float). Samples not
        used are dropped; the others' sigma is multiplied by their factor.
    """
    s = project.samples
    if s.empty:
        return {}
    rate_of = dict(zip(project.steps["step"].astype(str), project.steps["rate"].astype(float), strict=False))
    s = s.copy()
    s["step"] = s["step"].astype(str)
    s = s[s["step"].isin(rate_of)]
    factor = pd.Series(1.0, index=s.index)
    if sample_use is not None and not sample_use.empty:
        use = sample_use.set_index("sample_id")
        keep = s["sample_id"].map(use["used"]).fillna(True).astype(bool)
        factor = s["sample_id"].map(use["sigma_factor"]).fillna(1.0).astype(float)
        s = s[keep]
        factor = factor[keep]
    out = {}
    for analyte in dict.fromkeys(s["analyte"]):
        sub = s[s["analyte"] == analyte]
        nd = sub["nondetect"].astype(bool).to_numpy()
        det = sub[~nd]
        cen = sub[nd]
        sig = lab_sigma(det["value"].astype(float), det["uncertainty"].astype(float),
                        sub["detection_limit"].astype(float),
                        project.settings.default_relative_uncertainty)
        sig = sig * factor.loc[det.index].to_numpy()
        out[analyte] = AnalyteData(
            analyte=analyte,
            rate=det["step"].map(rate_of).to_numpy(float),
            depth=det["depth"].astype(float).to_numpy(),
            value=det["value"].astype(float).to_numpy(),
            sigma=np.asarray(sig, float),
            sample_id=det["sample_id"].astype(str).to_numpy(),
            step=det["step"].to_numpy(str),
            cens_rate=cen["step"].map(rate_of).to_numpy(float),
            cens_depth=cen["depth"].astype(float).to_numpy(),
            cens_limit=cen["detection_limit"].astype(float).to_numpy(),
            cens_sample_id=cen["sample_id"].astype(str).to_numpy(),
            cens_step=cen["step"].to_numpy(str),
        )
    return out
