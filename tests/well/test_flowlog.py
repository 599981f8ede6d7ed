"""Tests of blendq.well.flowlog: zone net flows from a log and the flow-log calibration.

Sources:
- Paillet, F.L. (1998) Water Resources Research 34(5), 997-1010, and Day-Lewis, F.D. and
  others (2011), USGS TM 4-D2 (two-condition flow-log method): the net inflow of a zone is the
  logged flow just above it minus the flow just below it, and with an ambient (0) and a pumped
  (1) log, q_i = G_i (h0_i - h_w) gives G_i = (q_i1 - q_i0) / (h_w0 - h_w1) and
  h0_i = h_w0 + q_i0 / G_i.
- Continuity at the pump intake (mass balance): the upward flow just below the intake exceeds
  the flow just above it by the pumping rate.
The synthetic logs come from blendq.well.hydraulics and blendq.well.mixing, which have their own tests
against Thiem, MNW2 and timml; here the calibration must invert them exactly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from blendq.errors import InputError
from blendq.well import hydraulics, mixing
from blendq.well.flowlog import calibrate, log_error, zone_net_flows

# an invented four-zone well: conductances [m^2/d], static heads [m], depths [m]
G = np.array([40.0, 120.0, 60.0, 90.0])
H0 = np.array([-10.0, -12.0, -9.0, -14.0])
TOP = np.array([30.0, 50.0, 70.0, 90.0])
BOT = TOP + 10.0
NAMES = ["Z1", "Z2", "Z3", "Z4"]


def _log(rate, depths, intake):
    """Noise-free log at ``rate`` and the true zone flows and wellbore head."""
    st = hydraulics.solve_wellbore_head(np.array([rate]), G, H0)
    geo = mixing.WellGeometry(TOP, BOT, intake)
    up = mixing.wellbore_flow(st.zone_flow[0], geo, np.asarray(depths, float))
    return pd.DataFrame(dict(depth=depths, upward_flow=up)), st.zone_flow[0], float(st.wellbore_head[0])


@pytest.mark.parametrize(
    "intake, depths",
    [
        (25.0, [27.0, 45.0, 65.0, 85.0]),  # intake above all zones, readings between zones
        (25.0, [20.0, 45.0, 65.0, 85.0]),  # reading above the intake: top zone needs + Q
        (25.0, [45.0, 65.0, 85.0]),  # no reading above the top zone: closed top + intake
        (65.0, [45.0, 62.0, 68.0, 85.0]),  # intake between Z2 and Z3, readings on both sides
        (65.0, [45.0, 62.0, 85.0]),  # only a reading above the intake in the gap
        (65.0, [45.0, 68.0, 85.0]),  # only a reading below the intake in the gap
        (110.0, [45.0, 65.0, 85.0, 105.0]),  # intake below all zones
        (110.0, [45.0, 65.0, 85.0, 115.0]),  # reading below the intake: bottom zone needs - Q
        (110.0, [45.0, 65.0, 85.0]),  # no reading below the bottom zone
    ],
)
def test_zone_net_flows_match_zone_flows(intake, depths):
    # mass balance (Paillet 1998): net zone flow = flow above - flow below, with the intake
    # taking the pumping rate out of the well wherever it lies
    for rate in (0.0, 400.0, 1500.0):
        log, q_true, _ = _log(rate, depths, intake)
        q, sd = zone_net_flows(log, TOP, BOT, rate, intake)
        np.testing.assert_allclose(q, q_true, rtol=1e-12, atol=1e-9)
        assert np.all(np.isfinite(sd)) and np.all(sd >= 0)


def test_zone_net_flows_unseparated_zone_is_nan():
    # no reading between Z2 and Z3: neither can be separated from the other
    log, q_true, _ = _log(800.0, [27.0, 45.0, 85.0], 25.0)
    q, sd = zone_net_flows(log, TOP, BOT, 800.0, 25.0)
    assert np.isnan(q[1]) and np.isnan(q[2]) and np.isnan(sd[1]) and np.isnan(sd[2])
    np.testing.assert_allclose(q[[0, 3]], q_true[[0, 3]], rtol=1e-12)


def test_net_flow_sd_combines_both_readings():
    # independent readings: sd of a difference is the root sum of squares (common practice)
    log, _, _ = _log(1000.0, [27.0, 45.0, 65.0, 85.0], 25.0)
    _, sd = zone_net_flows(log, TOP, BOT, 1000.0, 25.0, relative=0.05, absolute=2.7)
    f = log["upward_flow"].to_numpy()
    e = log_error(f, 0.05, 2.7)
    np.testing.assert_allclose(sd[1], np.hypot(e[1], e[2]), rtol=1e-12)
    # the bottom zone: closed well below it, so only the reading above counts
    np.testing.assert_allclose(sd[3], e[3], rtol=1e-12)


def test_log_error():
    # 5 % of 100 m^3/d and a 2.7 m^3/d floor, added in quadrature
    np.testing.assert_allclose(log_error([100.0, 0.0], 0.05, 2.7), [np.hypot(5.0, 2.7), 2.7],
                               rtol=1e-12)


def _logs_table(rates, depths, intake):
    rows, heads, flows = [], {}, {}
    for j, rate in enumerate(rates):
        log, q, hw = _log(rate, depths, intake)
        name = f"L{j}"
        heads[name] = hw
        flows[name] = q
        for d, f in zip(log["depth"], log["upward_flow"], strict=True):
            rows.append(dict(log=name, rate=rate, depth=d, upward_flow=f, source_row=len(rows) + 1))
    return pd.DataFrame(rows), heads, flows


@pytest.mark.parametrize("intake", [25.0, 65.0, 110.0])
def test_two_condition_calibration_recovers_truth(intake):
    # Paillet (1998); Day-Lewis et al. (2011): ambient and one pumped log give G and h0 exactly
    depths = [27.0, 45.0, 62.0, 68.0, 85.0, 105.0]
    logs, heads, flows = _logs_table([0.0, 1200.0], depths, intake)
    cal = calibrate(logs, heads, NAMES, TOP, BOT, intake)
    assert cal.method == "two-condition"
    np.testing.assert_allclose(cal.conductance, G, rtol=1e-9)
    np.testing.assert_allclose(cal.static_head, H0, rtol=1e-9)
    # the published two-condition formulas, evaluated by hand on the true flows
    g_hand = (flows["L1"] - flows["L0"]) / (heads["L0"] - heads["L1"])
    h0_hand = heads["L0"] + flows["L0"] / g_hand
    np.testing.assert_allclose(cal.conductance, g_hand, rtol=1e-9)
    np.testing.assert_allclose(cal.static_head, h0_hand, rtol=1e-9)
    assert set(cal.net_flows.columns) >= {"log", "rate", "wellbore_head", "zone", "net_flow"}
    assert len(cal.net_flows) == 2 * len(NAMES)
    assert np.all(cal.conductance_sd > 0) and np.all(cal.static_head_sd > 0)


def test_three_logs_least_squares():
    logs, heads, _ = _logs_table([0.0, 600.0, 1500.0], [27.0, 45.0, 65.0, 85.0], 25.0)
    cal = calibrate(logs, heads, NAMES, TOP, BOT, 25.0)
    assert cal.method == "least squares (3 conditions)"
    np.testing.assert_allclose(cal.conductance, G, rtol=1e-9)
    np.testing.assert_allclose(cal.static_head, H0, rtol=1e-9)


def test_calibration_sd_scales_with_log_error():
    # weighted least squares: conductance sd is linear in the reading error (no absolute floor)
    logs, heads, _ = _logs_table([0.0, 1200.0], [27.0, 45.0, 65.0, 85.0], 25.0)
    a = calibrate(logs, heads, NAMES, TOP, BOT, 25.0, relative=0.02, absolute=0.0)
    b = calibrate(logs, heads, NAMES, TOP, BOT, 25.0, relative=0.04, absolute=0.0)
    np.testing.assert_allclose(b.conductance_sd, 2 * a.conductance_sd, rtol=1e-9)


def test_calibration_needs_two_logs_and_heads():
    logs, heads, _ = _logs_table([0.0, 1200.0], [27.0, 45.0, 65.0, 85.0], 25.0)
    with pytest.raises(InputError, match="at least two logs"):
        calibrate(logs[logs["log"] == "L0"], heads, NAMES, TOP, BOT, 25.0)
    with pytest.raises(InputError, match='log "L1"') as err:
        calibrate(logs, {"L0": heads["L0"]}, NAMES, TOP, BOT, 25.0)
    assert err.value.file == "flowlogs.csv" and err.value.row == 5 and err.value.field == "log"
