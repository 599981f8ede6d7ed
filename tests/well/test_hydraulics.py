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
"""

from __future__ import annotations

import numpy as np
import pytest

from blendq.errors import ModelError
from blendq.well.hydraulics import (
    cooper_jacob_conductance,
    dewatered_zones,
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
