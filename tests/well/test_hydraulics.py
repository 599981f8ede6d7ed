"""Tests of blendq.well.hydraulics against published equations and the timml reference model.

Sources:
- Thiem, G. (1906) Hydrologische Methoden: Q = 2 pi T (h_R - h_w) / ln(R / r_w).
- Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU 27(4):
  s = Q / (4 pi T) ln(2.25 T t / (r^2 S)).
- Hawkins, M.F. (1956) J. Petroleum Technology 8(12): s = (K / K_s - 1) ln(r_s / r_w); the skin
  adds Q s / (2 pi T) to the drawdown.
- Konikow, Hornberger, Halford and Hanson (2009) USGS TM 6-A30 (MNW2): one wellbore head,
  zone inflow G_n (h_n - h_w), sum of zone flows = Q; 1/G_n = A_n + B_n with
  A_n = ln(R/r_w) / (2 pi T_n) and B_n = (K/K_skin - 1) ln(r_skin/r_w) / (2 pi K b).
- timml (PyPI, Bakker): multi-aquifer analytic-element model, an independent numerical
  reference for zone flows of a well screened in several layers (tests/reference/timml_well.py).
- Definition of the derivative: implicit derivatives of the zone flows and the wellbore head
  equal central differences of the solved state (error O(h^2)).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st_

from blendq.errors import ModelError
from blendq.well.hydraulics import (
    cooper_jacob_conductance,
    dewatered_zones,
    flow_sensitivity,
    hawkins_skin,
    pumping_level_head,
    solve_wellbore_head,
    thiem_conductance,
    zone_flow_from_head_difference,
)


def test_thiem_conductance_by_hand():
    # Thiem (1906): T = 100 m^2/d, R = 300 m, r_w = 0.15 m, s = 0
    #   ln(R/r_w) = ln(2000) = 7.6009024595
    #   G = 2 pi T / ln(R/r_w) = 628.31853072 / 7.6009024595 = 82.663675 m^2/d
    assert thiem_conductance(100.0, 300.0, 0.15) == pytest.approx(82.663675, rel=1e-7)
    # with skin s = 2: G = 628.31853072 / 9.6009024595 = 65.443695 m^2/d
    assert thiem_conductance(100.0, 300.0, 0.15, skin=2.0) == pytest.approx(65.443695, rel=1e-7)


def test_thiem_conductance_gives_thiem_discharge():
    # Thiem (1906): a head difference of 2 m over the same well gives Q = G x 2 = 165.33 m^3/d
    g = thiem_conductance(100.0, 300.0, 0.15)
    state = solve_wellbore_head([165.32735], [g], [10.0])
    assert state.wellbore_head[0] == pytest.approx(8.0, abs=1e-6)


def test_thiem_conductance_vectorised():
    t = np.array([[50.0, 100.0, 200.0]])
    g = thiem_conductance(t, 300.0, 0.15, skin=np.array([[0.0], [2.0]]))
    assert g.shape == (2, 3)
    # linear in T
    np.testing.assert_allclose(g[:, 1], 2 * g[:, 0], rtol=1e-12)
    np.testing.assert_allclose(g[:, 2], 4 * g[:, 0], rtol=1e-12)


def test_thiem_conductance_rejects_bad_geometry():
    # R below r_w: ln(R/r_w) < 0
    with pytest.raises(ModelError, match="ln"):
        thiem_conductance(100.0, 0.1, 0.15)
    # a negative skin larger than ln(R/r_w)
    with pytest.raises(ModelError):
        thiem_conductance(100.0, 300.0, 0.15, skin=-8.0)


def test_cooper_jacob_conductance_by_hand():
    # Cooper and Jacob (1946): T = 100 m^2/d, S = 1e-4, t = 1 d, r_w = 0.15 m
    #   2.25 T t / (r_w^2 S) = 225 / (0.0225 x 1e-4) = 1e8;  ln(1e8) = 18.420680744
    #   G = 4 pi T / ln(...) = 1256.6370614 / 18.420680744 = 68.218818 m^2/d
    assert cooper_jacob_conductance(100.0, 1e-4, 1.0, 0.15) == pytest.approx(68.218818, rel=1e-7)
    # with skin s = 1.5 the denominator gains 2 s = 3: G = 1256.6370614 / 21.420680744
    #   = 58.664665 m^2/d
    assert cooper_jacob_conductance(100.0, 1e-4, 1.0, 0.15, skin=1.5) == pytest.approx(
        58.664665, rel=1e-7
    )


def test_cooper_jacob_drawdown_matches_published_equation():
    # Cooper and Jacob (1946): s_w = Q / (4 pi T) ln(2.25 T t / (r_w^2 S)); Q = 500 m^3/d
    # s_w = 500 / 1256.6370614 x 18.420680744 = 7.329 m, so Q / G = s_w
    g = cooper_jacob_conductance(100.0, 1e-4, 1.0, 0.15)
    assert 500.0 / g == pytest.approx(500.0 / (4 * np.pi * 100.0) * np.log(1e8), rel=1e-12)
    assert 500.0 / g == pytest.approx(7.3293, rel=1e-4)


def test_cooper_jacob_conductance_falls_with_time():
    # ln t grows: conductance falls with time (Cooper and Jacob 1946)
    g = cooper_jacob_conductance(100.0, 1e-4, np.array([0.1, 1.0, 10.0, 100.0]), 0.15)
    assert np.all(np.diff(g) < 0)
    # one log cycle of time adds ln(10) to the denominator
    np.testing.assert_allclose(4 * np.pi * 100.0 / g[1:] - 4 * np.pi * 100.0 / g[:-1],
                               np.log(10.0), rtol=1e-12)


def test_cooper_jacob_rejects_too_short_time():
    # 2.25 T t / (r_w^2 S) < 1 gives a negative log
    with pytest.raises(ModelError, match="Cooper-Jacob"):
        cooper_jacob_conductance(1.0, 0.2, 1e-6, 0.15)


def test_hawkins_skin_by_hand():
    # Hawkins (1956): K = 10 m/d, K_s = 1 m/d, r_s = 0.5 m, r_w = 0.1 m
    #   s = (10/1 - 1) ln(0.5/0.1) = 9 x 1.6094379 = 14.484941
    assert hawkins_skin(10.0, 1.0, 0.5, 0.1) == pytest.approx(14.484941, rel=1e-7)
    # an improved annulus (K_s > K) gives a negative skin: (10/20 - 1) ln 5 = -0.804719
    assert hawkins_skin(10.0, 20.0, 0.5, 0.1) == pytest.approx(-0.80471896, rel=1e-7)
    # no contrast, no skin
    assert hawkins_skin(10.0, 10.0, 0.5, 0.1) == 0.0


def test_thiem_with_hawkins_skin_matches_mnw2_terms():
    # USGS TM 6-A30 (MNW2): 1/G = A + B with, for K = 10 m/d, b = 10 m (T = 100 m^2/d),
    # R = 300 m, r_w = 0.1 m, K_skin = 1 m/d, r_skin = 0.5 m:
    #   A = ln(3000) / (2 pi 100) = 8.0063676 / 628.31853 = 0.01274253 d/m^2
    #   B = (10/1 - 1) ln(5) / (2 pi 10 x 10) = 14.484941 / 628.31853 = 0.02305350 d/m^2
    #   G = 1 / (A + B) = 27.936059 m^2/d
    s = hawkins_skin(10.0, 1.0, 0.5, 0.1)
    assert thiem_conductance(100.0, 300.0, 0.1, skin=s) == pytest.approx(27.936059, rel=1e-7)


def test_linear_wellbore_head_closed_form():
    # sum q_i = Q with q_i = G_i (h0_i - h_w):  h_w = (sum G_i h0_i - Q) / sum G_i
    # G = [100, 50, 50] m^2/d, h0 = [10, 12, 8] m, Q = 200 m^3/d:
    #   sum G h0 = 1000 + 600 + 400 = 2000;  h_w = (2000 - 200) / 200 = 9 m
    #   q = [100 x 1, 50 x 3, 50 x (-1)] = [100, 150, -50] m^3/d (the third zone is a thief)
    state = solve_wellbore_head([200.0], [100.0, 50.0, 50.0], [10.0, 12.0, 8.0])
    assert state.wellbore_head.shape == (1,)
    assert state.zone_flow.shape == (1, 3)
    assert state.wellbore_head[0] == pytest.approx(9.0, rel=1e-12)
    np.testing.assert_allclose(state.zone_flow[0], [100.0, 150.0, -50.0], rtol=1e-12)
    # ambient (Q = 0): h_w = 2000 / 200 = 10 m; q = [0, 100, -100] m^3/d
    amb = solve_wellbore_head(0.0, [100.0, 50.0, 50.0], [10.0, 12.0, 8.0])
    np.testing.assert_allclose(amb.zone_flow[0], [0.0, 100.0, -100.0], atol=1e-10)


def _residual(state, g, h0, d, p):
    q = state.zone_flow
    return np.asarray(h0) - state.wellbore_head[..., None] - q / np.asarray(g) - np.asarray(
        d) * q * np.abs(q) ** (p - 1)


@pytest.mark.parametrize("exponent", [2.0, 1.5, 2.5, 3.5])
def test_nonlinear_loss_solution_satisfies_equation(exponent):
    # MNW2 (USGS TM 6-A30): h0_n - h_w = q_n / G_n + C_n q_n |q_n|^(P-1), P from 1 to 3.5
    g = np.array([80.0, 40.0, 120.0])
    h0 = np.array([20.0, 22.5, 18.0])
    d = np.array([2e-5, 0.0, 5e-6])
    rates = np.array([0.0, 10.0, 250.0, 1000.0, 5000.0])
    state = solve_wellbore_head(rates, g, h0, nonlinear_loss=d, exponent=exponent)
    np.testing.assert_allclose(state.zone_flow.sum(-1), rates, rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(_residual(state, g, h0, d, exponent), 0.0, atol=1e-10)
    # more pumping, lower wellbore head
    assert np.all(np.diff(state.wellbore_head) < 0)
    # where every zone flows in, the extra loss needs a lower wellbore head than the linear
    # law for the same Q (each q_i(h_w) is smaller, and sum q_i falls with h_w)
    lin = solve_wellbore_head(rates, g, h0)
    all_in = np.all(state.zone_flow > 0, axis=-1)
    assert all_in.sum() >= 2
    assert np.all(state.wellbore_head[all_in] < lin.wellbore_head[all_in])


def test_exponent_other_than_two_changes_the_answer():
    g = np.array([80.0, 40.0])
    h0 = np.array([20.0, 21.0])
    d = np.array([1e-4, 1e-4])
    p2 = solve_wellbore_head(800.0, g, h0, nonlinear_loss=d, exponent=2.0)
    p3 = solve_wellbore_head(800.0, g, h0, nonlinear_loss=d, exponent=3.0)
    # with q above 1 m^3/d, q^3 > q^2: a larger loss and a lower wellbore head
    assert p3.wellbore_head[()] < p2.wellbore_head[()] - 1.0
    np.testing.assert_allclose(_residual(p3, g, h0, d, 3.0), 0.0, atol=1e-10)


def test_zone_flow_from_head_difference_inverts_the_loss_law():
    # x / G + D x^2 = a with G = 50, D = 1e-3, a = 4: the quadratic root by hand
    #   x = (-1/G + sqrt(1/G^2 + 4 D a)) / (2 D) = (-0.02 + sqrt(4e-4 + 0.016)) / 2e-3
    #     = (-0.02 + 0.12806248) / 2e-3 = 54.031242 m^3/d
    q, dq = zone_flow_from_head_difference(4.0, 50.0, 1e-3)
    assert q == pytest.approx(54.031242, rel=1e-7)
    # symmetric for a reversed head difference
    q_neg, _ = zone_flow_from_head_difference(-4.0, 50.0, 1e-3)
    assert q_neg == pytest.approx(-54.031242, rel=1e-7)
    # derivative dq/d(dh) = 1 / (1/G + 2 D q) = 1 / (0.02 + 0.10806248) = 7.8087...
    assert dq == pytest.approx(1.0 / (0.02 + 2e-3 * 54.031242), rel=1e-6)


def test_batched_shapes_draws_by_rates_by_zones():
    rng = np.random.default_rng(7)
    n_draws, n_rates, n_zones = 4, 5, 3
    g = rng.uniform(10.0, 200.0, size=(n_draws, n_zones))
    h0 = rng.uniform(-5.0, 5.0, size=(n_draws, n_zones))
    d = rng.uniform(0.0, 1e-4, size=(n_draws, n_zones))
    rates = np.linspace(0.0, 2000.0, n_rates)
    for loss in (None, d):
        state = solve_wellbore_head(rates, g, h0, nonlinear_loss=loss)
        assert state.rate.shape == (n_draws, n_rates)
        assert state.wellbore_head.shape == (n_draws, n_rates)
        assert state.zone_flow.shape == (n_draws, n_rates, n_zones)
        np.testing.assert_allclose(state.zone_flow.sum(-1), state.rate, rtol=1e-10, atol=1e-9)
        # each draw as its own problem gives the same answer
        for k in range(n_draws):
            one = solve_wellbore_head(rates, g[k], h0[k],
                                      nonlinear_loss=None if loss is None else loss[k])
            np.testing.assert_allclose(state.zone_flow[k], one.zone_flow, rtol=1e-9, atol=1e-9)
    # a rate per draw and rate: shape (draws, rates)
    per_draw = rates[None, :] * np.array([[1.0], [0.5], [2.0], [0.1]])
    state = solve_wellbore_head(per_draw, g, h0)
    assert state.zone_flow.shape == (n_draws, n_rates, n_zones)
    np.testing.assert_allclose(state.zone_flow.sum(-1), per_draw, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize("loss", [None, [1e-4, 1e-4, 1e-4]])
def test_sealed_zone_gets_no_flow(loss):
    g = [100.0, 0.0, 50.0]
    h0 = [10.0, 30.0, 8.0]  # the sealed zone's high head must not matter
    state = solve_wellbore_head([0.0, 50.0, 500.0], g, h0, nonlinear_loss=loss)
    np.testing.assert_array_equal(state.zone_flow[:, 1], 0.0)
    np.testing.assert_allclose(state.zone_flow.sum(-1), [0.0, 50.0, 500.0], atol=1e-9)
    # same as the two open zones alone
    two = solve_wellbore_head([0.0, 50.0, 500.0], [100.0, 50.0], [10.0, 8.0],
                              nonlinear_loss=None if loss is None else [1e-4, 1e-4])
    np.testing.assert_allclose(state.zone_flow[:, [0, 2]], two.zone_flow, rtol=1e-10, atol=1e-9)


def test_model_errors():
    with pytest.raises(ModelError, match=">= 0"):
        solve_wellbore_head([-1.0, 10.0], [10.0, 20.0], [0.0, 1.0])
    with pytest.raises(ModelError, match="finite"):
        solve_wellbore_head([np.nan], [10.0, 20.0], [0.0, 1.0])
    with pytest.raises(ModelError, match="no open zone"):
        solve_wellbore_head([10.0], [0.0, 0.0], [0.0, 1.0])
    with pytest.raises(ModelError, match="no open zone"):
        solve_wellbore_head([10.0], np.array([[10.0, 5.0], [0.0, 0.0]]), [0.0, 1.0])
    with pytest.raises(ModelError, match="conductances"):
        solve_wellbore_head([10.0], [-5.0, 20.0], [0.0, 1.0])
    with pytest.raises(ModelError, match="nonlinear"):
        solve_wellbore_head([10.0], [5.0, 20.0], [0.0, 1.0], nonlinear_loss=[-1.0, 0.0])


def test_pumping_level_and_dewatering():
    # Jacob (1947): h_pwl = h_w - C Q^2; C = 1e-6 d^2/m^5, Q = 1000 m^3/d -> 1 m below h_w
    assert pumping_level_head(-20.0, 1000.0, 1e-6) == pytest.approx(-21.0, rel=1e-12)
    # Rorabaugh (1953) exponent n = 2.5: C Q^2.5 = 1e-7 x 1000^2.5 = 3.1623 m
    assert pumping_level_head(-20.0, 1000.0, 1e-7, 2.5) == pytest.approx(-23.16228, rel=1e-6)
    mask = dewatered_zones(np.array([15.0, 35.0]), np.array([10.0, 30.0, 50.0]))
    np.testing.assert_array_equal(mask, [[True, False, False], [True, True, False]])


# ---------------------------------------------------------------------------------------------
# timml reference: a well screened in three nearly independent aquifer layers
# ---------------------------------------------------------------------------------------------

TM_K = np.array([10.0, 25.0, 5.0])  # [m/d]
TM_H = np.array([10.0, 8.0, 20.0])  # [m]
TM_H0 = np.array([50.0, 49.0, 51.5])  # head at R per layer [m]; layer 2 lowest
TM_R = 500.0  # [m]
TM_RW = 0.15  # [m]
TM_RES = 0.02  # timml screen resistance [d]


@pytest.fixture(scope="module")
def timml_reference():
    pytest.importorskip("timml")
    from reference.timml_well import equivalent_skin, timml_zone_flows

    skin = equivalent_skin(TM_K, TM_RES, TM_RW)  # s_i = K_i res / r_w = [1.333, 3.333, 0.667]
    g = thiem_conductance(TM_K * TM_H, TM_R, TM_RW, skin=skin)
    results = {}
    for rate in (300.0, 10.0):
        results[rate] = timml_zone_flows(rate, TM_K, TM_H, TM_H0, TM_R, TM_RW,
                                         screen_resistance=TM_RES)
    return g, results


@pytest.mark.parametrize("rate", [300.0, 10.0])
def test_zone_flows_match_timml(timml_reference, rate):
    g, results = timml_reference
    tm_flow, tm_head = results[rate]
    state = solve_wellbore_head([rate], g, TM_H0)
    # timml (PyPI) multi-aquifer analytic elements: per-layer discharge within 1% of Q, and
    # each layer within 0.3% of its own flow (measured: at most 0.06%; the ring of 40 line
    # sinks is not quite a circle, and the aquitards leak a little)
    np.testing.assert_allclose(state.zone_flow[0], tm_flow, atol=0.01 * rate, rtol=0.0)
    np.testing.assert_allclose(state.zone_flow[0], tm_flow, rtol=3e-3, atol=0.0)
    assert tm_flow.sum() == pytest.approx(rate, rel=1e-9)
    assert state.wellbore_head[0] == pytest.approx(tm_head, abs=0.01)


def test_timml_low_rate_has_a_thief_layer(timml_reference):
    # at 10 m^3/d the layer with the lowest far-field head (49 m) takes water from the well,
    # in timml and in blendq alike
    g, results = timml_reference
    tm_flow, _ = results[10.0]
    flow = solve_wellbore_head([10.0], g, TM_H0).zone_flow[0]
    assert tm_flow[1] < 0
    assert flow[1] < 0
    assert np.all(np.delete(flow, 1) > 0)


# --- dewatering and entrance losses -------------------------------------------------------

def test_unconfined_zone_follows_the_dupuit_thiem_equation():
    # Kruseman and de Ridder (1990), Thiem-Dupuit equation for an unconfined aquifer at steady
    # state: Q = pi K (H^2 - h_w^2) / ln(R / r_w), heads above the aquifer base.
    # A zone from 20 to 60 m depth (b = 40 m) with K = 10 m/d and its static level at 25 m
    # depth (H = 35 m above its bottom, below its top: unconfined from the start).
    k, r, rw = 10.0, 300.0, 0.15
    g = thiem_conductance(k * 40.0, r, rw)
    for rate in (100.0, 1000.0, 3000.0, 5000.0):
        st = solve_wellbore_head([rate], [g], [-25.0], zone_top=[20.0], zone_bottom=[60.0])
        hw = st.wellbore_head[0] + 60.0
        assert np.pi * k * (35.0**2 - hw**2) / np.log(r / rw) == pytest.approx(rate, rel=1e-9)
    # at Q = 1000 m^3/d by hand: h_w^2 = 35^2 - 1000 ln(2000) / (10 pi) = 1225 - 241.9448
    #   h_w = 31.35372 m above the bottom
    st = solve_wellbore_head([1000.0], [g], [-25.0], zone_top=[20.0], zone_bottom=[60.0])
    assert st.wellbore_head[0] + 60.0 == pytest.approx(31.35372, abs=1e-5)
    # the most it can give (h_w at its bottom): pi K H^2 / ln(R/r_w) = 5063.15 m^3/d
    st = solve_wellbore_head([5100.0], [g], [-25.0], zone_top=[20.0], zone_bottom=[60.0])
    assert np.isnan(st.wellbore_head[0]) and np.all(np.isnan(st.zone_flow))


def test_confined_zone_turning_unconfined():
    # Confined-unconfined flow (discharge potential of Strack 1989; the unconfined part is the
    # Dupuit-Thiem law of Kruseman and de Ridder 1990): static head H above the top (b below
    # it), well head h_w inside the zone: Q = pi K (2 b H - b^2 - h_w^2) / ln(R/r_w).
    k, r, rw, b = 5.0, 500.0, 0.1, 20.0  # zone from 40 to 60 m depth
    g = thiem_conductance(k * b, r, rw)
    h_static = 30.0  # 30 m depth: 30 m above the zone bottom, 10 m above its top
    for rate in (300.0, 800.0, 1200.0):  # it gives at most G (H - b/2) = 1475.6 m^3/d
        st = solve_wellbore_head([rate], [g], [-h_static], zone_top=[40.0], zone_bottom=[60.0])
        hw = st.wellbore_head[0] + 60.0
        expect = np.pi * k * (2 * b * 30.0 - b**2 - min(hw, b) ** 2) / np.log(r / rw) \
            if hw < b else g * (30.0 - hw)
        assert expect == pytest.approx(rate, rel=1e-9)
    # above the top the zone is the Thiem zone of before
    lin = solve_wellbore_head([500.0], [g], [-h_static])
    st = solve_wellbore_head([500.0], [g], [-h_static], zone_top=[40.0], zone_bottom=[60.0])
    assert st.wellbore_head[0] == pytest.approx(lin.wellbore_head[0], abs=1e-10)


def test_dewatered_upper_zone_stops_gaining_at_full_transmissivity():
    # heads lowered 30 ft (9.144 m) below a well whose upper zone starts at 36.6 m depth
    g = np.array([250.0, 100.0, 350.0, 200.0])
    h0 = -np.array([17.7, 18.7, 19.2, 20.1]) - 9.144
    top = np.array([36.6, 56.4, 73.2, 88.4])
    bot = np.array([48.8, 65.5, 80.8, 100.6])
    rates = np.linspace(4000.0, 12000.0, 41)
    conf = solve_wellbore_head(rates, g, h0)
    dew = solve_wellbore_head(rates, g, h0, zone_top=top, zone_bottom=bot)
    np.testing.assert_allclose(dew.zone_flow.sum(-1), rates, rtol=1e-10)
    below = -dew.wellbore_head > top[0]
    assert below.any() and (~below).any()
    # above the top both laws agree; below it the upper zone gains less than at full T
    np.testing.assert_allclose(dew.zone_flow[~below], conf.zone_flow[~below], rtol=1e-9)
    gain_conf = np.diff(conf.zone_flow[:, 0])[below[1:]]
    gain_dew = np.diff(dew.zone_flow[:, 0])[below[1:]]
    assert np.all(gain_dew < gain_conf)
    # its slope dq/dh_w is G times the saturated fraction (h_w - bottom) / b
    k = np.flatnonzero(below)[1]
    sat = (dew.wellbore_head[k] + bot[0]) / (bot[0] - top[0])
    step = 1e-3
    q1 = solve_wellbore_head([rates[k] + step], g, h0, zone_top=top, zone_bottom=bot)
    dq = (q1.zone_flow[0, 0] - dew.zone_flow[k, 0]) / (dew.wellbore_head[k]
                                                       - q1.wellbore_head[0])
    assert dq == pytest.approx(g[0] * sat, rel=1e-4)


def test_entrance_losses_by_the_mnw2_equations():
    # Konikow, Hornberger, Halford and Hanson (2009), USGS TM 6-A30: at each node
    #   h_n - h_WELL = (A_n + B_n) Q_n + C_n Q_n^P,  A_n = ln(r0/r_w) / (2 pi T_n),
    # and the node flows sum to the well's rate. Worked by hand, h_WELL = 0:
    #   node 1: T = 100 m^2/d, r0 = 300 m, r_w = 0.15 m: A = ln(2000)/(2 pi 100) = 0.01209721
    #           B = 0.002 d/m^2, C = 1e-5 d^2/m^5, P = 2, Q_1 = 400 m^3/d:
    #           h_1 = 0.01409721 x 400 + 1e-5 x 400^2 = 5.638885 + 1.6 = 7.238885 m
    #   node 2: T = 50 m^2/d: A = 0.02419442, B = 0, C = 1e-6 d^2.5/m^6.5, P = 2.5,
    #           Q_2 = 200 m^3/d: 200^2.5 = 565685.42;
    #           h_2 = 0.02419442 x 200 + 0.56568542 = 5.404570 m
    a = np.log(2000.0) / (2 * np.pi * np.array([100.0, 50.0]))
    np.testing.assert_allclose(a, [0.01209721, 0.02419442], rtol=1e-6)
    h = np.array([(a[0] + 0.002) * 400.0 + 1e-5 * 400.0**2,
                  a[1] * 200.0 + 1e-6 * 200.0**2.5])
    np.testing.assert_allclose(h, [7.238885, 5.404570], rtol=1e-6)
    st = solve_wellbore_head([600.0], 1.0 / a, h, nonlinear_loss=[1e-5, 1e-6],
                             exponent=[2.0, 2.5], linear_loss=[0.002, 0.0])
    assert st.wellbore_head[0] == pytest.approx(0.0, abs=1e-9)
    np.testing.assert_allclose(st.zone_flow[0], [400.0, 200.0], rtol=1e-10)
    # the cell-to-well conductance form: Q_n = CWC_n (h_n - h_WELL),
    # CWC_n = 1 / (A_n + B_n + C_n Q_n^(P-1))
    cwc = 1.0 / (a + [0.002, 0.0] + np.array([1e-5, 1e-6]) * st.zone_flow[0]
                 ** (np.array([2.0, 2.5]) - 1))
    np.testing.assert_allclose(st.zone_flow[0], cwc * (h - st.wellbore_head[0]), rtol=1e-10)


@settings(max_examples=60, deadline=None)
@given(st_.integers(0, 2**32 - 1))
def test_newton_on_all_points_agrees_with_the_bracketed_solve(seed):
    # the vectorised Newton (started from the linear solution) and the bracketed
    # Newton-bisection solve the same equations: their answers agree
    import blendq.well.hydraulics as hyd

    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 5))
    g = rng.uniform(5.0, 300.0, (3, n))
    h0 = -rng.uniform(5.0, 25.0, (3, n))
    d = np.where(rng.random((3, n)) < 0.7, rng.uniform(0.0, 5e-5, (3, n)), 0.0)
    p = rng.choice([1.0, 1.5, 2.0, 2.5, 3.5], n)
    bl = np.where(rng.random((3, n)) < 0.5, rng.uniform(0.0, 0.01, (3, n)), 0.0)
    top = np.sort(rng.uniform(10.0, 60.0, n))
    bot = top + rng.uniform(2.0, 15.0, n)
    rates = rng.uniform(0.0, 4000.0, 6)
    kw = dict(nonlinear_loss=d, exponent=p, linear_loss=bl, zone_top=top, zone_bottom=bot)
    fast = solve_wellbore_head(rates, g, h0, **kw)
    saved = hyd.NEWTON_ITERATIONS
    hyd.NEWTON_ITERATIONS = 0
    try:
        slow = solve_wellbore_head(rates, g, h0, **kw)
    finally:
        hyd.NEWTON_ITERATIONS = saved
    np.testing.assert_array_equal(np.isnan(fast.wellbore_head), np.isnan(slow.wellbore_head))
    # compared where the wellbore head lies within ten times the deepest zone bottom: beyond,
    # the entrance losses of a random case reach hundreds of metres to millions (seed 439:
    # -852 m and -5.3e6 m), a state no well reaches, and the two solves agree only to the
    # conditioning of such a loss (1e-7 relative)
    ok = np.isfinite(fast.wellbore_head) & (fast.wellbore_head > -10.0 * bot.max())
    np.testing.assert_allclose(fast.wellbore_head[ok], slow.wellbore_head[ok], rtol=1e-7,
                               atol=1e-6)
    np.testing.assert_allclose(fast.zone_flow[ok], slow.zone_flow[ok], rtol=1e-7, atol=1e-5)
    np.testing.assert_allclose(fast.zone_flow[ok].sum(-1), np.broadcast_to(rates, ok.shape)[ok],
                               rtol=1e-9, atol=1e-7)


@pytest.mark.parametrize("case", ["confined", "dewatered", "losses"])
def test_flow_sensitivity_equals_central_differences(case):
    rng = np.random.default_rng(21)
    n = 5
    top = 20.0 + 10.0 * np.arange(n)
    kw = {} if case == "confined" else {"zone_top": top, "zone_bottom": top + 5.0}
    g = rng.uniform(20.0, 100.0, (4, n))
    # dewatered: the static heads of two zones inside their open intervals
    h0 = rng.uniform(-15.0, -5.0, (4, n))
    if case == "dewatered":
        h0[:, 1:3] = -top[1:3] - 2.0
    d = None
    if case == "losses":
        d = rng.uniform(1e-6, 1e-5, (4, n))
        kw["linear_loss"] = np.full((4, n), 1e-4)
    rates = np.array([500.0, 2000.0, 4000.0])

    def solve(g, h0, d):
        return solve_wellbore_head(rates, g, h0, d, 2.0, **kw)

    sens = flow_sensitivity(solve(g, h0, d), g, h0, d, 2.0, **kw)
    kinds = [("log_conductance", 1e-6), ("static_head", 1e-6)]
    if d is not None:
        kinds.append(("nonlinear_loss", 1e-11))
    for name, h in kinds:
        dq = sens.flow_derivative(getattr(sens, name))
        dh = sens.head_derivative(getattr(sens, name))
        for k in range(n):
            e = np.eye(n)[k]
            plus = {"log_conductance": (g * np.exp(h * e), h0, d),
                    "static_head": (g, h0 + h * e, d),
                    "nonlinear_loss": (g, h0, None if d is None else d + h * e)}[name]
            minus = {"log_conductance": (g * np.exp(-h * e), h0, d),
                     "static_head": (g, h0 - h * e, d),
                     "nonlinear_loss": (g, h0, None if d is None else d - h * e)}[name]
            sp, sm = solve(*plus), solve(*minus)
            fq = (sp.zone_flow - sm.zone_flow) / (2 * h)
            fh = (sp.wellbore_head - sm.wellbore_head) / (2 * h)
            np.testing.assert_allclose(dq[..., k], fq, rtol=1e-5, atol=1e-6 * np.abs(fq).max())
            np.testing.assert_allclose(dh[..., k], fh, rtol=1e-5, atol=1e-6 * np.abs(fh).max())
