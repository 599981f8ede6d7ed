"""Zone inflows from wellbore flow logs, and the flow-log calibration of zone hydraulics.

A spinner or heat-pulse log gives the upward flow in the well at several depths. The net flow of
a zone is the logged flow just above it minus the flow just below it. With an ambient log
(Q = 0) and one pumped log, each zone's conductance and far-field head follow from the Thiem
form q_i = G_i (h0_i - h_w) (two-condition method); with more logs, a weighted straight-line
fit of q_i against h_w per zone.

References
----------
Paillet, F.L. (1998) Flow modeling and permeability estimation using borehole flow logs in
heterogeneous fractured formations. Water Resources Research 34(5), 997-1010.
Day-Lewis, F.D., Johnson, C.D., Paillet, F.L., Halford, K.J. (2011) A computer program for
flow-log analysis of single holes (FLASH). Ground Water 49(6); USGS TM 4-D2 describes the method.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from blendq.errors import InputError


def log_error(upward_flow, relative: float, absolute: float):
    """Standard deviation of a logged flow [m^3/d]: relative part plus an absolute floor."""
    return np.hypot(relative * np.abs(np.asarray(upward_flow, float)), absolute)


def zone_net_flows(log: pd.DataFrame, zone_top, zone_bottom, rate: float,
                   intake_depth: float, relative: float = 0.05, absolute: float = 2.7):
    """Net inflow of each zone from one log [m^3/d], with its standard deviation.

    Parameters
    ----------
    log : DataFrame
        Rows of one log with columns ``depth`` [m] and ``upward_flow`` [m^3/d].
    zone_top, zone_bottom : array_like (n_zones,)
        Zone depths [m].
    rate : float
        Pumping rate during the log [m^3/d].
    intake_depth : float
        Pump intake depth [m].

    Returns
    -------
    q, sd : ndarray (n_zones,)
        Net inflow and its sd; NaN where the log has no reading between a zone and its
        neighbour (the zone cannot be separated from it).

    Notes
    -----
    Below the deepest zone the well is closed (zero flow), and so is it above the top zone.
    The pump intake removes the pumping rate from the well: the upward flow just below it
    exceeds the flow just above it by ``rate``. When the intake lies between a reading and the
    zone it is used for (the intake counts as above a zone when it is shallower than the
    zone's mid-depth, as in :mod:`blendq.well.mixing`), the reading is corrected by ``rate``; a zone
    with no reading on one side uses the closed end of the well there.
    """
    top = np.asarray(zone_top, float)
    bot = np.asarray(zone_bottom, float)
    mid = 0.5 * (top + bot)
    depth = np.asarray(log["depth"], float)
    flow = np.asarray(log["upward_flow"], float)
    n = len(top)
    q = np.full(n, np.nan)
    sd = np.full(n, np.nan)
    for i in range(n):
        upper_edge = bot[i - 1] if i > 0 else -np.inf
        lower_edge = top[i + 1] if i < n - 1 else np.inf
        above = (depth <= top[i]) & (depth >= upper_edge)
        below = (depth >= bot[i]) & (depth <= lower_edge)
        intake_above_zone = intake_depth < mid[i]
        if above.any():
            k = np.flatnonzero(above)[np.argmax(depth[above])]
            f_above, e_above = flow[k], log_error(flow[k], relative, absolute)
            reading_depth = depth[k]
        elif i == 0:
            f_above, e_above, reading_depth = 0.0, 0.0, -np.inf
        else:
            continue
        if intake_above_zone and reading_depth < intake_depth:
            f_above = f_above + rate
        if below.any():
            k = np.flatnonzero(below)[np.argmin(depth[below])]
            f_below, e_below = flow[k], log_error(flow[k], relative, absolute)
            reading_depth = depth[k]
        elif i == n - 1:
            f_below, e_below, reading_depth = 0.0, 0.0, np.inf
        else:
            continue
        if not intake_above_zone and reading_depth >= intake_depth:
            f_below = f_below - rate
        q[i] = f_above - f_below
        sd[i] = float(np.hypot(e_above, e_below))
    return q, sd


@dataclass(frozen=True)
class FlowLogCalibration:
    """Zone conductances and heads from flow logs.

    Attributes
    ----------
    conductance, conductance_sd : ndarray (n_zones,)
        G_i [m^2/d] and its sd.
    static_head, static_head_sd : ndarray (n_zones,)
        h0_i [m] and its sd.
    net_flows : DataFrame
        One row per log and zone: log, rate, wellbore_head, zone, net_flow, net_flow_sd.
    method : str
        "two-condition" or "least squares (k conditions)".
    """

    conductance: np.ndarray
    conductance_sd: np.ndarray
    static_head: np.ndarray
    static_head_sd: np.ndarray
    net_flows: pd.DataFrame
    method: str


def calibrate(flowlogs: pd.DataFrame, wellbore_heads: dict, zone_names, zone_top, zone_bottom,
              intake_depth: float, relative: float = 0.05, absolute: float = 2.7,
              file: str = "flowlogs.csv") -> FlowLogCalibration:
    """Zone conductances and far-field heads from two or more flow logs.

    Parameters
    ----------
    flowlogs : DataFrame
        Columns log, rate [m^3/d], depth [m], upward_flow [m^3/d].
    wellbore_heads : dict
        Log name -> head in the well at the zones during the log h_w [m].
    zone_names, zone_top, zone_bottom : sequences (n_zones,)
    intake_depth : float [m]

    Returns
    -------
    FlowLogCalibration

    Notes
    -----
    Two conditions: G_i = (q_i1 - q_i0) / (h_w0 - h_w1), h0_i = h_w0 + q_i0 / G_i.
    More: weighted least squares of q_i = G_i h0_i - G_i h_w per zone.
    """
    names = list(dict.fromkeys(flowlogs["log"]))
    if len(names) < 2:
        raise InputError("the flow-log calibration needs at least two logs at different rates "
                         "(an ambient and a pumped log)", file=file, field="log")
    rows = []
    for name in names:
        sub = flowlogs[flowlogs["log"] == name]
        rate = float(sub["rate"].iloc[0])
        if name not in wellbore_heads or not np.isfinite(wellbore_heads[name]):
            raise InputError(f'no water level in the well for log "{name}" (give the step\'s '
                             "pumping level, or the well's static level for an ambient log)",
                             file=file, row=int(sub["source_row"].iloc[0]), field="log")
        q, sd = zone_net_flows(sub, zone_top, zone_bottom, rate, intake_depth, relative, absolute)
        for i, zn in enumerate(zone_names):
            rows.append(dict(log=name, rate=rate, wellbore_head=float(wellbore_heads[name]),
                             zone=zn, net_flow=q[i], net_flow_sd=sd[i]))
    table = pd.DataFrame(rows)
    n = len(zone_names)
    g = np.full(n, np.nan)
    g_sd = np.full(n, np.nan)
    h0 = np.full(n, np.nan)
    h0_sd = np.full(n, np.nan)
    for i, zn in enumerate(zone_names):
        z = table[(table["zone"] == zn) & np.isfinite(table["net_flow"])]
        hw = z["wellbore_head"].to_numpy()
        if len(z) < 2 or np.ptp(hw) <= 0:
            continue
        w = 1.0 / np.maximum(z["net_flow_sd"].to_numpy(), 1e-9)
        # q = b0 + b1 h_w with b1 = -G, b0 = G h0  (weighted least squares)
        design = np.column_stack([np.ones(len(z)), hw]) * w[:, None]
        coef, *_ = np.linalg.lstsq(design, z["net_flow"].to_numpy() * w, rcond=None)
        cov = np.linalg.pinv(design.T @ design)
        g[i] = -coef[1]
        g_sd[i] = np.sqrt(cov[1, 1])
        if g[i] > 0:
            h0[i] = coef[0] / g[i]
            # delta method for h0 = b0 / G
            grad = np.array([1.0 / g[i], coef[0] / g[i] ** 2])
            h0_sd[i] = float(np.sqrt(grad @ cov @ grad))
    method = "two-condition" if len(names) == 2 else f"least squares ({len(names)} conditions)"
    return FlowLogCalibration(g, g_sd, h0, h0_sd, table, method)
