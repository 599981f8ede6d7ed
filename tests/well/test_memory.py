"""Tests of blendq.well.memory: water stored by thief zones during idle time, and its return.

Sources:
- Hand calculation (mass balance, written out beside each check): with linear zones the
  wellbore head at rest is h_w0 = sum G_i h0_i / sum G_i (domain brief, section 2) and the
  ambient zone flows q0_i = G_i (h0_i - h_w0) sum to zero, so what the thief zones store over
  an idle time equals what the donors give, in water and in solute.
- Washout of an ideal mixed vessel (Levenspiel 1999, Chemical Reaction Engineering, 3rd ed.):
  C(t) = c_in + (C0 - c_in) exp(-q t / V); checked against scipy's numerical integration of
  the mass balance V dC/dt = q (c_in - C), an outside reference library.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from blendq.errors import ModelError
from blendq.well.memory import (
    first_flush,
    remaining_share,
    returned_bias,
    returned_shares,
    stored_water,
)
from blendq.well.mixing import WellGeometry
from blendq.well.model import WellModel


def _model(conductance, static_head, intake=5.0) -> WellModel:
    n = len(conductance)
    tops = 10.0 + 20.0 * np.arange(n)
    return WellModel(WellGeometry(tops, tops + 10.0, intake), np.asarray(conductance, float),
                     np.asarray(static_head, float), np.zeros(n), 0.0)


def test_two_zone_mass_balance_hand_calculation():
    # hand calculation: G = 100, 100 m2/d; h0 = 0, -2 m
    # h_w0 = (100 * 0 + 100 * -2) / 200 = -1 m
    # q0 = 100 (0 + 1) = +100 m3/d (donor), 100 (-2 + 1) = -100 m3/d (thief)
    # idle 0.5 d: the thief stores 100 x 0.5 = 50 m3; the donor gave the same 50 m3
    # donor water at 10 mg/L: 50 m3 x 10 g/m3 = 500 g of solute stored at 10 mg/L
    stored = stored_water(_model([100.0, 100.0], [0.0, -2.0]), 0.5, ["top", "bottom"])
    np.testing.assert_allclose(stored.ambient_flow, [100.0, -100.0], rtol=1e-9)
    np.testing.assert_allclose(stored.volume, [0.0, 50.0], rtol=1e-9)
    assert stored.thieves == ["bottom"]
    c = np.array([10.0, 0.5])
    np.testing.assert_allclose(stored.concentration(c), 10.0, rtol=1e-12)
    np.testing.assert_allclose(stored.total * stored.concentration(c), 500.0, rtol=1e-9)


def test_three_zone_donor_blend_hand_calculation():
    # hand calculation: G = 100, 50, 100 m2/d; h0 = 0, 0, -3 m
    # h_w0 = (0 + 0 - 300) / 250 = -1.2 m; q0 = 120, 60, -180 m3/d
    # idle 1 d: 180 m3 stored; donor shares 120/180 = 2/3 and 60/180 = 1/3
    # c = 9, 3, 0 mg/L: stored water at 2/3 x 9 + 1/3 x 3 = 7 mg/L
    # solute: donors give 120 x 9 + 60 x 3 = 1260 g/d; the thief holds 180 x 7 = 1260 g
    stored = stored_water(_model([100.0, 50.0, 100.0], [0.0, 0.0, -3.0]), 1.0,
                          ["a", "b", "c"])
    np.testing.assert_allclose(stored.ambient_flow, [120.0, 60.0, -180.0], rtol=1e-9)
    np.testing.assert_allclose(stored.volume, [0.0, 0.0, 180.0], rtol=1e-9)
    np.testing.assert_allclose(stored.donor_share, [2 / 3, 1 / 3, 0.0], rtol=1e-9)
    c = np.array([[9.0], [3.0], [0.0]])
    np.testing.assert_allclose(stored.concentration(c), [7.0], rtol=1e-9)
    donors_mass = np.sum(np.clip(stored.ambient_flow, 0, None) * c[:, 0]) * 1.0
    np.testing.assert_allclose(stored.total * stored.concentration(c)[0], donors_mass,
                               rtol=1e-9)


def test_no_crossflow_stores_nothing():
    stored = stored_water(_model([100.0, 80.0], [-1.0, -1.0]), 3.0, ["a", "b"])
    np.testing.assert_allclose(stored.volume, 0.0, atol=1e-9)
    assert stored.thieves == [] or stored.total < 1e-9


def test_negative_idle_time_is_a_model_error():
    with pytest.raises(ModelError):
        stored_water(_model([100.0, 100.0], [0.0, -2.0]), -1.0, ["a", "b"])


def test_returned_shares_hand_calculation():
    # the well above: at Q = 300 m3/d, h_w = (0 - 200 - 300) / 200 = -2.5 m,
    # q = 250, 50 m3/d; intake above both zones: a = 250/300, 50/300
    # at Q = 100: h_w = -1.5, q = 150, -50 (the bottom zone still takes water: no outflow)
    # schedule 100 m3/d for 0.2 d then 300 m3/d for 0.1 d: W_bottom = 0 + 50 x 0.1 = 5 m3
    # stored 50 m3: remaining exp(-5/50); share in the discharge (50/300) exp(-0.1)
    model = _model([100.0, 100.0], [0.0, -2.0])
    stored = stored_water(model, 0.5, ["top", "bottom"])
    shares = returned_shares(model, stored, [100.0, 300.0], [0.2, 0.1])
    np.testing.assert_allclose(shares, [0.0, 50.0 / 300.0 * np.exp(-0.1)], rtol=1e-9)
    # its error: share x (c_s - c_bottom) = (50/300) e^-0.1 (10 - 0.5)
    bias = returned_bias(stored, shares, np.array([[10.0], [0.5]]))
    np.testing.assert_allclose(bias, [50.0 / 300.0 * np.exp(-0.1) * 9.5], rtol=1e-9)


def test_first_flush_matches_integrated_washout():
    # one thief zone (bottom), Q = 300 m3/d: q_bottom = 50 m3/d, a_bottom = 1/6, V = 50 m3
    model = _model([100.0, 100.0], [0.0, -2.0])
    stored = stored_water(model, 0.5, ["top", "bottom"])
    c = np.array([[10.0], [0.5]])
    times = np.linspace(0.0, 4.0, 41)
    flush = first_flush(model, stored, 300.0, c, tolerance=0.02, times=times)
    # reference: V dC/dt = q (c_native - C), C(0) = c_s = 10, integrated by scipy
    sol = solve_ivp(lambda t, y: 50.0 * (0.5 - y) / 50.0, (0.0, 4.0), [10.0], t_eval=times,
                    rtol=1e-10, atol=1e-12)
    discharge = 250.0 / 300.0 * 10.0 + 50.0 / 300.0 * sol.y[0]
    np.testing.assert_allclose(flush.concentration[:, 0], discharge, rtol=1e-7)
    np.testing.assert_allclose(flush.steady, [250.0 / 300.0 * 10.0 + 50.0 / 300.0 * 0.5],
                               rtol=1e-12)
    # closed form of the time to tolerance: (V/q) ln(a |c_s - c_j| / (tol c_ss))
    css = flush.steady[0]
    expect = 50.0 / 50.0 * np.log((50.0 / 300.0) * 9.5 / (0.02 * css))
    np.testing.assert_allclose(flush.time_to_tolerance, [expect], rtol=1e-6)
    np.testing.assert_allclose(flush.volume_to_tolerance, [300.0 * expect], rtol=1e-6)
    # returned share: a_j exp(-q t / V)
    np.testing.assert_allclose(flush.returned, 50.0 / 300.0 * np.exp(-times), rtol=1e-9)


def test_first_flush_within_tolerance_needs_no_wait():
    model = _model([100.0, 100.0], [0.0, -2.0])
    stored = stored_water(model, 0.5, ["top", "bottom"])
    # stored water as the thief's own: nothing to flush
    flush = first_flush(model, stored, 300.0, np.array([[1.0], [1.0]]), tolerance=0.05)
    np.testing.assert_allclose(flush.time_to_tolerance, [0.0], atol=0)


def test_first_flush_two_thieves_is_past_the_bound():
    # two thief zones with different washout rates: after the time to tolerance, every later
    # discharge is within the tolerance (checked on a fine grid)
    model = _model([100.0, 60.0, 120.0], [0.0, -2.0, -3.0])
    stored = stored_water(model, 1.0, ["a", "b", "c"])
    c = np.array([[12.0], [1.0], [0.2]])
    flush = first_flush(model, stored, 400.0, c, tolerance=0.03)
    t0 = float(flush.time_to_tolerance[0])
    later = first_flush(model, stored, 400.0, c, tolerance=0.03,
                        times=np.linspace(t0, 5 * t0, 200))
    assert np.all(np.abs(later.concentration[:, 0] - later.steady[0])
                  <= 0.03 * later.steady[0] * (1 + 1e-9))
    before = first_flush(model, stored, 400.0, c, tolerance=0.03, times=[0.5 * t0])
    assert abs(before.concentration[0, 0] - before.steady[0]) > 0.03 * before.steady[0] * 0.5


@settings(max_examples=60, deadline=None)
@given(g=st.lists(st.floats(1.0, 1e4), min_size=2, max_size=5),
       h=st.lists(st.floats(-20.0, 0.0), min_size=5, max_size=5),
       t1=st.floats(0.0, 30.0), extra=st.floats(0.0, 30.0))
def test_more_idle_time_never_stores_less(g, h, t1, extra):
    model = _model(g, h[:len(g)])
    names = [f"z{i}" for i in range(len(g))]
    short = stored_water(model, t1, names)
    long = stored_water(model, t1 + extra, names)
    assert np.all(long.volume >= short.volume - 1e-9 * (1 + short.volume))
    assert long.total >= short.total - 1e-9 * (1 + short.total)


@settings(max_examples=60, deadline=None)
@given(v=st.floats(1e-3, 1e4), w1=st.floats(0.0, 1e4), w2=st.floats(0.0, 1e4))
def test_remaining_share_falls_with_outflow(v, w1, w2):
    lo, hi = sorted((w1, w2))
    r = remaining_share([v], [[lo], [hi]])
    assert 0.0 <= r[1, 0] <= r[0, 0] <= 1.0
