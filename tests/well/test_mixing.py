"""Tests of blendq.well.mixing: wellbore mass balance, hand-built wells and property tests.

Sources:
- Konikow, Hornberger, Halford and Hanson (2009) USGS TM 6-A30: intraborehole flow in a
  multi-node well follows from the node flows by mass balance.
- Izbicki, J.A., Christensen, A.H. and Hanson, R.T. (1999) USGS Fact Sheet 196-99, and Izbicki
  and co-workers' depth-dependent sampling: with upward flows F_below, F_above and
  concentrations C_below, C_above measured just below and just above an inflowing zone,
  c_zone = (F_above C_above - F_below C_below) / (F_above - F_below).
- Complete mixing at junctions, steady flow, no reaction (Konikow et al. 2009, USGS TM 6-A30):
  the discharge is a
  flow-weighted mix, so its weights are >= 0 and sum to one, and a blend lies between the
  smallest and the largest zone value.
- Definition of the derivative: the exact derivatives of the discharge weights by the zone
  flows equal central differences (error O(h^2)) away from a kink.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from blendq.well.hydraulics import solve_wellbore_head
from blendq.well.mixing import (
    INTAKE,
    WellGeometry,
    discharge_composition,
    discharge_weights,
    intake_weights,
    intake_weights_jacobian,
    wellbore_composition,
    wellbore_flow,
)

# three zones: tops 20, 40, 60 m; bottoms 30, 50, 70 m; mid-depths 25, 45, 65 m
TOPS = [20.0, 40.0, 60.0]
BOTTOMS = [30.0, 50.0, 70.0]


def _geometry(intake_depth: float) -> WellGeometry:
    return WellGeometry(TOPS, BOTTOMS, intake_depth)


# ---------------------------------------------------------------------------------------------
# hand-built wells
# ---------------------------------------------------------------------------------------------


def test_node_order():
    assert _geometry(10.0).nodes == [INTAKE, 0, 1, 2]
    assert _geometry(35.0).nodes == [0, INTAKE, 1, 2]
    assert _geometry(80.0).nodes == [0, 1, 2, INTAKE]
    np.testing.assert_allclose(_geometry(35.0).node_depth, [25.0, 35.0, 45.0, 65.0])


def test_intake_above_all_zones_everything_flows_up():
    geom = _geometry(10.0)
    q = np.array([100.0, 200.0, 300.0])  # Q = 600 m^3/d
    # every drop reaches the pump: a_i = q_i / Q = [1/6, 1/3, 1/2]
    np.testing.assert_allclose(discharge_weights(q, geom), [1 / 6, 1 / 3, 1 / 2], rtol=1e-12)
    # upward flow: above the intake 0; intake-zone0 600; zone0-zone1 500; zone1-zone2 300;
    # below zone 2 nothing
    depths = [5.0, 15.0, 35.0, 55.0, 75.0]
    np.testing.assert_allclose(wellbore_flow(q, geom, depths), [0, 600, 500, 300, 0], atol=1e-12)
    comp = wellbore_composition(q, geom, depths)
    assert np.all(np.isnan(comp[[0, 4]]))
    np.testing.assert_allclose(comp[1], [1 / 6, 1 / 3, 1 / 2], rtol=1e-12)
    np.testing.assert_allclose(comp[2], [0.0, 0.4, 0.6], rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(comp[3], [0.0, 0.0, 1.0], rtol=1e-12, atol=1e-15)


def test_intake_below_all_zones_everything_flows_down():
    geom = _geometry(80.0)
    q = np.array([100.0, 200.0, 300.0])
    np.testing.assert_allclose(discharge_weights(q, geom), [1 / 6, 1 / 3, 1 / 2], rtol=1e-12)
    depths = [15.0, 35.0, 55.0, 75.0, 85.0]
    np.testing.assert_allclose(wellbore_flow(q, geom, depths), [0, -100, -300, -600, 0],
                               atol=1e-12)
    comp = wellbore_composition(q, geom, depths)
    np.testing.assert_allclose(comp[1], [1.0, 0.0, 0.0], atol=1e-15)
    np.testing.assert_allclose(comp[2], [1 / 3, 2 / 3, 0.0], rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(comp[3], [1 / 6, 1 / 3, 1 / 2], rtol=1e-12)


def test_intake_between_zones_flows_converge():
    geom = _geometry(35.0)
    q = np.array([100.0, 200.0, 300.0])
    np.testing.assert_allclose(discharge_weights(q, geom), [1 / 6, 1 / 3, 1 / 2], rtol=1e-12)
    # down from zone 0 (100), up from zones 1 and 2 (500 just below the intake, 300 below zone 1)
    np.testing.assert_allclose(wellbore_flow(q, geom, [30.0, 40.0, 55.0]), [-100, 500, 300],
                               atol=1e-12)
    comp = wellbore_composition(q, geom, [30.0, 40.0])
    np.testing.assert_allclose(comp[0], [1.0, 0.0, 0.0], atol=1e-15)
    np.testing.assert_allclose(comp[1], [0.0, 0.4, 0.6], rtol=1e-12, atol=1e-15)


def test_thief_between_two_inflowing_zones():
    geom = _geometry(10.0)
    # zone 2 gives 200 m^3/d; the thief zone 1 takes 50 of it; 150 carries on up and meets
    # 100 from zone 0: a = [100, 0, 150] / 250 = [0.4, 0, 0.6]
    q = np.array([100.0, -50.0, 200.0])
    np.testing.assert_allclose(discharge_weights(q, geom), [0.4, 0.0, 0.6], rtol=1e-12)
    np.testing.assert_allclose(wellbore_flow(q, geom, [15.0, 35.0, 55.0]), [250, 150, 200],
                               atol=1e-12)
    values = np.array([[5.0], [40.0], [10.0]])  # one analyte [mg/L]
    # blend = 0.4 x 5 + 0.6 x 10 = 8 mg/L: the thief's own value does not enter
    np.testing.assert_allclose(discharge_composition(q, geom, values), [8.0], rtol=1e-12)


def test_thief_fed_from_both_sides():
    geom = _geometry(10.0)
    # q = [300, -250, 100], Q = 150: 150 of zone 0's water goes down to the thief, zone 2's
    # 100 goes up to it, and the pump gets zone 0 water only
    q = np.array([300.0, -250.0, 100.0])
    np.testing.assert_allclose(discharge_weights(q, geom), [1.0, 0.0, 0.0], atol=1e-15)
    np.testing.assert_allclose(wellbore_flow(q, geom, [15.0, 35.0, 55.0]), [150, -150, 100],
                               atol=1e-12)
    comp = wellbore_composition(q, geom, [35.0, 55.0])
    np.testing.assert_allclose(comp, [[1.0, 0.0, 0.0], [0.0, 0.0, 1.0]], atol=1e-15)


def test_ambient_crossflow_has_no_discharge():
    geom = _geometry(10.0)
    q = np.array([0.0, 100.0, -100.0])  # Q = 0: zone 1 feeds zone 2 down the well
    assert np.all(np.isnan(discharge_weights(q, geom)))
    np.testing.assert_allclose(wellbore_flow(q, geom, [15.0, 35.0, 55.0]), [0, 0, -100],
                               atol=1e-12)
    comp = wellbore_composition(q, geom, [15.0, 35.0, 55.0])
    assert np.all(np.isnan(comp[:2]))
    np.testing.assert_allclose(comp[2], [0.0, 1.0, 0.0], atol=1e-15)


def test_ambient_rounding_at_the_intake_does_not_spoil_the_well():
    # at Q = 0 the zone flows sum to rounding noise: 0.3 - 0.1 - 0.2 = -2.8e-17 in floating
    # point. Zone 0 feeds the two thief zones below it; the idle intake above must not pass
    # its undefined composition down the well.
    geom = _geometry(10.0)
    q = np.array([0.3, -0.1, -0.2])
    assert q.sum() != 0.0
    comp = wellbore_composition(q, geom, [35.0, 55.0])
    np.testing.assert_allclose(comp, [[1.0, 0.0, 0.0], [1.0, 0.0, 0.0]], atol=1e-15)
    np.testing.assert_allclose(wellbore_flow(q, geom, [35.0, 55.0]), [-0.3, -0.2], rtol=1e-12)


def test_batched_flows_and_values():
    geom = _geometry(35.0)
    q = np.array([[[100.0, 200.0, 300.0], [100.0, -50.0, 200.0]]])  # (1, 2, 3)
    w = discharge_weights(q, geom)
    assert w.shape == (1, 2, 3)
    values = np.array([[5.0, 1.0], [40.0, 2.0], [10.0, 3.0]])  # (zones, analytes)
    c = discharge_composition(q, geom, values)
    assert c.shape == (1, 2, 2)
    np.testing.assert_allclose(c, w @ values, rtol=1e-12)
    comp = wellbore_composition(q, geom, [30.0, 40.0, 55.0], values)
    assert comp.shape == (1, 2, 3, 2)
    assert wellbore_flow(q, geom, [30.0, 40.0, 55.0]).shape == (1, 2, 3)


@pytest.mark.parametrize("zone", [0, 1, 2])
def test_izbicki_mass_balance_recovers_zone_value(zone):
    # Izbicki and co-workers (USGS): intake above all zones, upward flow; F and C measured just
    # above and just below zone j give c_j = (F_above C_above - F_below C_below)
    # / (F_above - F_below). By hand for zone 1: F_above = 500, C_above = (200 x 20 + 300 x 2)
    # / 500 = 9.2; F_below = 300, C_below = 2  ->  (4600 - 600) / 200 = 20 mg/L.
    geom = _geometry(10.0)
    q = np.array([100.0, 200.0, 300.0])
    values = np.array([5.0, 20.0, 2.0])
    above, below = TOPS[zone] - 0.1, BOTTOMS[zone] + 0.1
    f_above, f_below = wellbore_flow(q, geom, [above, below])
    c_above, c_below = wellbore_composition(q, geom, [above, below], values)[:, 0]
    # below the bottom zone the well is stagnant: no flow and no composition
    c_below = 0.0 if f_below == 0 else c_below
    c_zone = (f_above * c_above - f_below * c_below) / (f_above - f_below)
    assert c_zone == pytest.approx(values[zone], rel=1e-12)
    # two stations inside the screen: only the zone's water enters between them, so the
    # balance gives the zone's value there too
    inner = [TOPS[zone] + 2.0, TOPS[zone] + 7.0]
    f_in = wellbore_flow(q, geom, inner)
    c_in = wellbore_composition(q, geom, inner, values)[:, 0]
    assert f_in[0] - f_in[1] == pytest.approx(0.5 * q[zone], rel=1e-12)
    assert (f_in[0] * c_in[0] - f_in[1] * c_in[1]) / (f_in[0] - f_in[1]) == pytest.approx(
        values[zone], rel=1e-12)
    if zone == 1:
        assert (f_above, c_above, f_below, c_below) == pytest.approx((500.0, 9.2, 300.0, 2.0),
                                                                     rel=1e-12)


# ---------------------------------------------------------------------------------------------
# property tests on flows from the zone inflow model
# ---------------------------------------------------------------------------------------------


@st.composite
def wells(draw, allow_zero_rate=True, nonlinear=True):
    """A random well: zone layout, hydraulics, rate, intake position and zone values."""
    n = draw(st.integers(1, 5))
    thick = draw(st.lists(st.floats(1.0, 30.0), min_size=n, max_size=n))
    gaps = draw(st.lists(st.floats(0.0, 20.0), min_size=n, max_size=n))
    top, tops, bottoms = 5.0, [], []
    for t, gap in zip(thick, gaps, strict=True):
        top += gap
        tops.append(top)
        bottoms.append(top + t)
        top += t
    mid = 0.5 * (np.array(tops) + np.array(bottoms))
    # intake position p: above all zones (0), between zone p-1 and p, or below all (n)
    p = draw(st.integers(0, n))
    frac = draw(st.floats(0.05, 0.95))
    if p == 0:
        intake = mid[0] - 1.0 - 10.0 * frac
    elif p == n:
        intake = mid[-1] + 1.0 + 10.0 * frac
    else:
        intake = mid[p - 1] + frac * (mid[p] - mid[p - 1])
    assume_distinct = np.min(np.abs(mid - intake)) > 1e-6
    if not assume_distinct:
        intake = mid[0] - 1.0
    g = np.array(draw(st.lists(st.floats(0.1, 1000.0), min_size=n, max_size=n)))
    h0 = np.array(draw(st.lists(st.floats(-20.0, 20.0), min_size=n, max_size=n)))
    d = None
    if nonlinear and draw(st.booleans()):
        d = np.array(draw(st.lists(st.floats(0.0, 1e-4), min_size=n, max_size=n)))
    if allow_zero_rate and draw(st.booleans()):
        rate = 0.0
    else:
        rate = draw(st.floats(1.0, 5000.0))
    values = np.array(draw(st.lists(st.floats(0.0, 100.0), min_size=n, max_size=n)))
    geom = WellGeometry(tops, bottoms, intake)
    flows = solve_wellbore_head([rate], g, h0, nonlinear_loss=d).zone_flow[0]
    return geom, flows, rate, values


def _segment_depths(geom: WellGeometry) -> np.ndarray:
    """A depth inside every wellbore segment: above the top node, between nodes, below."""
    nd = geom.node_depth
    inner = 0.5 * (nd[1:] + nd[:-1])
    return np.concatenate([[nd[0] - 1.0], inner, [nd[-1] + 1.0]])


def _scale(flows, rate):
    return 1.0 + rate + np.abs(flows).sum()


@settings(max_examples=150)
@given(wells())
def test_zone_flows_sum_to_the_rate(well):
    geom, flows, rate, _ = well
    # sum_i q_i = Q (continuity at the well); at Q = 0 the ambient crossflow sums to zero
    assert abs(flows.sum() - rate) <= 1e-10 * _scale(flows, rate)


@settings(max_examples=150)
@given(wells(allow_zero_rate=False))
def test_weights_are_a_valid_mix(well):
    geom, flows, rate, values = well
    w = discharge_weights(flows, geom)
    assert np.all(w >= 0.0)
    assert w.sum() == pytest.approx(1.0, abs=1e-9)
    # a thief zone gives nothing to the pump
    assert np.all(w[flows < 0] == 0.0)
    # the blend lies between the smallest and the largest zone value, and is linear
    c = discharge_composition(flows, geom, values)[0]
    assert values.min() - 1e-9 <= c <= values.max() + 1e-9
    assert c == pytest.approx(w @ values, rel=1e-9, abs=1e-9)


@settings(max_examples=100)
@given(wells(allow_zero_rate=True))
def test_no_discharge_weights_at_zero_rate(well):
    geom, flows, rate, _ = well
    if rate == 0.0:
        # ambient: the zone flows sum to rounding noise, which is no discharge
        assert np.all(np.isnan(discharge_weights(flows, geom)))
    else:
        assert np.all(np.isfinite(discharge_weights(flows, geom)))


@settings(max_examples=150)
@given(wells())
def test_wellbore_flow_matches_cumulative_zone_flows(well):
    # analytic: a zone's inflow enters uniformly over its open interval, so the flow through
    # a screen rises linearly with height (mass balance of a uniform line source)
    geom, flows, rate, _ = well
    top, bot = geom.zone_top, geom.zone_bottom
    ends = [min(top[0], geom.intake_depth) - 1.0, max(bot[-1], geom.intake_depth) + 1.0]
    depths = np.concatenate([_segment_depths(geom), top + 0.3 * (bot - top),
                             top + 0.8 * (bot - top), ends])
    # upward flow past depth z = inflow entering below z (the part of each zone's interval
    # below z), minus the pump if the intake is below
    below = np.clip((bot[None, :] - depths[:, None]) / (bot - top)[None, :], 0.0, 1.0)
    expected = below @ flows - rate * (geom.intake_depth > depths)
    np.testing.assert_allclose(wellbore_flow(flows, geom, depths), expected, rtol=0.0,
                               atol=1e-9 * _scale(flows, rate))
    # the well is stagnant above the top zone or intake and below the bottom one
    assert abs(expected[-2]) <= 1e-9 * _scale(flows, rate)
    assert abs(expected[-1]) <= 1e-9 * _scale(flows, rate)


@settings(max_examples=150)
@given(wells())
def test_wellbore_composition_is_a_valid_mix(well):
    geom, flows, rate, values = well
    depths = _segment_depths(geom)
    comp = wellbore_composition(flows, geom, depths)
    up = wellbore_flow(flows, geom, depths)
    for k in range(len(depths)):
        if up[k] == 0.0:
            # stagnant water says nothing about the zones
            assert np.all(np.isnan(comp[k]))
            continue
        if np.all(np.isnan(comp[k])):
            # a segment carrying only rounding noise
            assert abs(up[k]) <= 1e-9 * _scale(flows, rate)
            continue
        assert np.all(comp[k] >= 0.0)
        assert comp[k].sum() == pytest.approx(1.0, abs=1e-9)
        # no thief zone's water travels in the well
        assert np.all(comp[k][flows < 0] == 0.0)


@settings(max_examples=150)
@given(wells())
def test_global_mass_balance_of_each_zone_water(well):
    # each zone's inflow leaves either through the pump or into a thief zone:
    #   q_i (for q_i > 0) = Q a_i + sum_thief |q_t| C_t,i,
    # where C_t is the water arriving at thief node t, mixed from both sides of it
    geom, flows, rate, _ = well
    n = geom.n_zones
    source = np.maximum(flows, 0.0)
    sink = np.zeros(n)
    if rate > 0:
        sink += rate * discharge_weights(flows, geom)
    for t in np.flatnonzero(flows < 0):
        # what arrives at the thief's open interval from above and from below (the intake
        # inside a thief's interval would take a part of it on the way: not this check)
        above, below = geom.zone_top[t], geom.zone_bottom[t]
        assume(not (above < geom.intake_depth < below))
        f_above, f_below = wellbore_flow(flows, geom, [above, below])
        c_above, c_below = wellbore_composition(flows, geom, [above, below])
        arriving = 0.0
        mix = np.zeros(n)
        # (a NaN composition marks a segment whose flow is rounding noise next to a node that
        # receives no water; it carries nothing)
        if f_above < 0 and np.all(np.isfinite(c_above)):  # downward flow into the node
            arriving += -f_above
            mix += -f_above * c_above
        if f_below > 0 and np.all(np.isfinite(c_below)):  # upward flow into the node
            arriving += f_below
            mix += f_below * c_below
        if arriving > 0:
            sink += -flows[t] * mix / arriving
    np.testing.assert_allclose(sink, source, rtol=0.0, atol=1e-8 * _scale(flows, rate))


@settings(max_examples=100)
@given(
    st.lists(st.floats(1.0, 1000.0), min_size=1, max_size=5),
    st.lists(st.floats(0.0, 100.0), min_size=5, max_size=5),
)
def test_izbicki_mass_balance_property(inflows, concentrations):
    # Izbicki and co-workers (USGS): every inflowing zone's value is recovered from flows and
    # concentrations just above and below it, with the intake above all zones
    n = len(inflows)
    tops = 10.0 + 20.0 * np.arange(n)
    geom = WellGeometry(tops, tops + 10.0, 1.0)
    q = np.array(inflows)
    values = np.array(concentrations[:n])
    mid = tops + 5.0
    depths = np.ravel(np.column_stack([mid - 0.5, mid + 0.5]))
    f = wellbore_flow(q, geom, depths).reshape(n, 2)
    c = wellbore_composition(q, geom, depths, values)[:, 0].reshape(n, 2)
    c = np.where(f == 0.0, 0.0, c)  # stagnant below the bottom zone
    c_zone = (f[:, 0] * c[:, 0] - f[:, 1] * c[:, 1]) / (f[:, 0] - f[:, 1])
    # absolute tolerance: a billionth of the largest value, and never below 1e-12 mg/L (a
    # subnormal concentration such as 5e-324 is rounding, not water quality)
    np.testing.assert_allclose(c_zone, values, rtol=1e-9, atol=1e-12 + 1e-9 * values.max())


# ---------------------------------------------------------------------------------------------
# flow inside a screen
# ---------------------------------------------------------------------------------------------


def test_flow_through_a_uniform_screen_rises_linearly():
    # analytic: a uniform line source (inflow per unit length q / b) with the intake above
    # and the well closed below gives an upward flow q (bottom - z) / b at depth z in the screen
    geom = WellGeometry([40.0], [60.0], 30.0)
    q = np.array([[500.0]])
    z = np.linspace(40.0, 60.0, 11)
    np.testing.assert_allclose(wellbore_flow(q, geom, z)[0], 500.0 * (60.0 - z) / 20.0,
                               rtol=1e-12, atol=1e-9)
    # intake below: the flow is downward and grows with depth, -q (z - top) / b
    geom = WellGeometry([40.0], [60.0], 70.0)
    np.testing.assert_allclose(wellbore_flow(q, geom, z)[0], -500.0 * (z - 40.0) / 20.0,
                               rtol=1e-12, atol=1e-9)


def _timml_layers(conductivity, thickness, gap):
    pytest.importorskip("timml")
    from reference.timml_well import timml_zone_flows

    q, _ = timml_zone_flows(2000.0, conductivity, thickness, np.zeros(len(thickness)), 300.0,
                            0.15, aquitard_thickness=gap)
    tops = 50.0 + np.concatenate([[0.0], np.cumsum(np.asarray(thickness) + gap)[:-1]])
    return q, tops, tops + np.asarray(thickness)


@pytest.mark.parametrize("conductivity", [[20.0] * 5, [5.0, 40.0, 12.0, 60.0, 20.0]])
def test_flow_in_a_screen_matches_timml_split_into_layers(conductivity):
    # timml (PyPI; Bakker's analytic-element multi-aquifer model, tests/reference/timml_well.py):
    # one screened zone built as five timml layers (1e-4 m partings, nearly impervious) with a
    # common head in the well. The upward flow at each layer boundary (intake above the zone)
    # is the timml inflow of the layers below; blendq must give it at that depth with the
    # zone's inflow spread in proportion to K x thickness: for a uniform K, blendq's plain
    # zone (no sub-layers: the linear rise), otherwise the zone with the layers as sub-layers
    thick = np.array([2.0, 3.0, 1.5, 2.5, 2.0])
    q, tops, bots = _timml_layers(conductivity, thick, gap=1e-4)
    assert q.sum() == pytest.approx(2000.0, rel=1e-6)
    stations = np.concatenate([tops, [bots[-1]]])
    logged = np.concatenate([np.cumsum(q[::-1])[::-1], [0.0]])
    uniform = len(set(conductivity)) == 1
    sub = None if uniform else (np.column_stack([tops, bots, conductivity]),)
    geom = WellGeometry([tops[0]], [bots[-1]], 40.0, sub)
    predicted = wellbore_flow(np.array([q.sum()]), geom, stations)
    # tolerance: timml's ring boundary and, for the plain zone, the 4e-4 m of partings
    np.testing.assert_allclose(predicted, logged, rtol=1e-4, atol=0.1)
    if not uniform:
        # the spread is not the plain linear rise here
        linear = 2000.0 * (bots[-1] - stations) / (bots[-1] - tops[0])
        assert np.abs(linear - logged).max() > 50.0


@settings(max_examples=150, deadline=None)
@given(wells(allow_zero_rate=False))
def test_weight_derivatives_equal_central_differences(well):
    geom, flows, rate, _ = well
    w, jac = intake_weights_jacobian(flows, geom)
    # the same weights as the pass-through sweep, to the last bit
    np.testing.assert_array_equal(w, intake_weights(flows, geom))
    nodes = np.concatenate([[0.0], np.cumsum([-rate if c == INTAKE else flows[c]
                                              for c in geom.nodes])])
    # a step that crosses a kink (a zone or segment flow at zero) has no derivative to match:
    # the step is a small part of the smallest zone or segment flow
    small = np.min(np.abs(np.concatenate([flows, nodes[1:-1]])))
    assume(small > 1e-6 * _scale(flows, rate))
    h = 1e-5 * small
    eye = np.eye(len(flows))
    diff = np.stack([(intake_weights(flows + h * e, geom) - intake_weights(flows - h * e, geom))
                     / (2 * h) for e in eye], -1)
    # rounding of the differences: about 1e-16 / h
    np.testing.assert_allclose(jac, diff, rtol=1e-5, atol=1e-5 * np.abs(diff).max() + 1e-9 / small)


def test_weight_derivatives_batched_equal_one_at_a_time():
    rng = np.random.default_rng(8)
    geom = _geometry(45.0)
    flows = rng.normal(300.0, 400.0, (4, 5, 3))
    w, jac = intake_weights_jacobian(flows, geom)
    for b in range(4):
        for r in range(5):
            wb, jb = intake_weights_jacobian(flows[b, r], geom)
            np.testing.assert_allclose(w[b, r], wb, rtol=1e-12, atol=0, equal_nan=True)
            np.testing.assert_allclose(jac[b, r], jb, rtol=1e-12, atol=0, equal_nan=True)
