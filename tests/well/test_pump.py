"""Checks of blendq.well.pump against a reference library, closed forms and a hand example."""

import fluids
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from blendq.errors import ModelError
from blendq.well import pump

# a straight curve: PCHIP reproduces collinear points exactly, so the hand example is exact
LINE = pump.PumpCurve(np.array([0.0, 1000.0, 2000.0]), np.array([100.0, 50.0, 0.0]),
                      np.array([0.40, 0.75, 0.50]))


def _system(level_at_zero=30.0, slope=0.01, discharge=10.0, length=0.0):
    return pump.SystemCurve(level=lambda q: level_at_zero + slope * np.asarray(q, float),
                            length=length, diameter=0.15, hazen_williams_c=120.0,
                            discharge_head=discharge)


def test_darcy_weisbach_friction_matches_fluids():
    # reference: Caleb Bell's fluids 1.3 (fluids.friction.friction_factor with the
    # Colebrook method, fluids.core.Reynolds and fluids.core.head_from_K with K = f L / D)
    d, eps, length = 0.1524, 4.5e-5, 60.0
    for q_day in (200.0, 1500.0, 3270.0, 8000.0):
        q = q_day / 86400.0
        v = q / (np.pi * d**2 / 4)
        re = fluids.core.Reynolds(V=v, D=d, nu=pump.WATER_VISCOSITY)
        f_ref = fluids.friction.friction_factor(Re=re, eD=eps / d, Method="Colebrook")
        assert pump.colebrook(re, eps / d) == pytest.approx(f_ref, rel=1e-9)
        h_ref = fluids.core.head_from_K(K=f_ref * length / d, V=v, g=pump.GRAVITY)
        got = pump.friction_loss(q_day, length, d, roughness=eps)
        assert float(got) == pytest.approx(h_ref, rel=1e-9)


def test_minor_losses_match_fluids():
    # reference: fluids 1.3 (Caleb Bell): the resistance coefficients of a gate valve
    # (fluids.fittings.K_gate_valve_Crane), a swing check valve
    # (fluids.fittings.K_swing_check_valve_Crane) and three 90-degree bends
    # (fluids.fittings.bend_rounded), and the head of their sum (fluids.core.head_from_K):
    # h = K v^2 / (2 g) (Crane TP-410)
    d = 0.1524
    k = (fluids.fittings.K_gate_valve_Crane(D1=d, D2=d, angle=0.0)
         + fluids.fittings.K_swing_check_valve_Crane(D=d)
         + 3 * fluids.fittings.bend_rounded(Di=d, angle=90.0, rc=1.5 * d, Re=4e5))
    assert 1.0 < k < 5.0
    for q_day in (500.0, 3270.0, 6000.0):
        v = q_day / 86400.0 / (np.pi * d**2 / 4)
        ref = fluids.core.head_from_K(K=k, V=v, g=pump.GRAVITY)
        assert float(pump.minor_loss(q_day, d, k)) == pytest.approx(ref, rel=1e-12)
    # the system curve adds them to the column friction
    plain = _system(length=50.0)
    fitted = pump.SystemCurve(plain.level, 50.0, plain.diameter, None, 120.0, 10.0, minor_k=k)
    extra = float(fitted.head(3270.0) - plain.head(3270.0))
    v = 3270.0 / 86400.0 / (np.pi * 0.15**2 / 4)
    assert extra == pytest.approx(fluids.core.head_from_K(K=k, V=v), rel=1e-12)
    assert pump.operating_point(LINE, fitted, 1.0) < pump.operating_point(LINE, plain, 1.0)


def test_hazen_williams_si_form_agrees_with_us_form():
    # reference: the US customary Hazen-Williams form h_f[ft] = 10.44 L[ft] Q[gpm]^1.85 /
    # (C^1.85 d[in]^4.8655) (Williams and Hazen 1920; e.g. Mays 2010, Water Resources
    # Engineering); the two published forms round their constants differently: within 2 %
    length_ft, d_in, c = 300.0, 6.0, 120.0
    for gpm in (100.0, 600.0, 1200.0):
        us_ft = 10.44 * length_ft * gpm**1.85 / (c**1.85 * d_in**4.8655)
        q_day = gpm * 3.785411784e-3 * 1440.0
        si_m = pump.friction_loss(q_day, length_ft * 0.3048, d_in * 0.0254, hazen_williams_c=c)
        assert float(si_m) / 0.3048 == pytest.approx(us_ft, rel=0.02)


def test_laminar_friction_factor():
    # Hagen-Poiseuille: f = 64 / Re
    assert pump.colebrook(1000.0, 1e-4) == pytest.approx(0.064, rel=1e-12)


@settings(max_examples=50, deadline=None)
@given(q=st.floats(10.0, 1900.0), r=st.floats(0.3, 1.2))
def test_affinity_laws_closed_form(q, r):
    # Q ~ N, H ~ N^2, P ~ N^3 (Karassik et al. 2008, Pump Handbook, affinity laws)
    qs, hs, ps = pump.affinity(q, 80.0, 5000.0, r)
    assert (qs, hs, ps) == (pytest.approx(q * r, rel=1e-12), pytest.approx(80 * r**2, rel=1e-12),
                            pytest.approx(5000 * r**3, rel=1e-12))
    # the point (q, H1(q)) of the rated curve moves to (r q, r^2 H1(q)) on the scaled curve
    assert float(LINE.head_at(q * r, r)) == pytest.approx(r**2 * float(LINE.head_at(q)),
                                                          rel=1e-9, abs=1e-9)
    assert float(LINE.efficiency_at(q * r, r)) == pytest.approx(float(LINE.efficiency_at(q)),
                                                                rel=1e-12)


def test_operating_point_hand_worked():
    # Hand-worked: pump H1(Q) = 100 - 0.05 Q [m, Q in m3/d]; system with no column friction
    # (length 0) H_sys = level + discharge = (30 + 0.01 Q) + 10 = 40 + 0.01 Q.
    # Rated speed: 100 - 0.05 Q = 40 + 0.01 Q  ->  0.06 Q = 60  ->  Q = 1000 m3/d, H = 50 m.
    # 80 % speed: H = 0.8^2 (100 - 0.05 Q / 0.8) = 64 - 0.04 Q = 40 + 0.01 Q
    #             ->  0.05 Q = 24  ->  Q = 480 m3/d.
    system = _system()
    assert pump.operating_point(LINE, system, 1.0) == pytest.approx(1000.0, rel=1e-9)
    assert pump.operating_point(LINE, system, 0.8) == pytest.approx(480.0, rel=1e-9)
    # and back: the speed that delivers 480 m3/d is 80 %
    assert pump.speed_for_rate(LINE, system, 480.0) == pytest.approx(0.8, rel=1e-9)


def test_friction_lowers_the_operating_point():
    no_friction = pump.operating_point(LINE, _system(), 1.0)
    with_friction = pump.operating_point(LINE, _system(length=200.0), 1.0)
    assert with_friction < no_friction


def test_cannot_lift_is_a_clear_error():
    # a pump with 100 m of shutoff head against a 120 m lift + 10 m discharge head
    deep = _system(level_at_zero=120.0)
    with pytest.raises(pump.PumpError, match="cannot lift the water") as err:
        pump.operating_point(LINE, deep, 1.0)
    assert "at shutoff (no flow) it gives 100 m of head but the system needs 130 m" \
        in str(err.value)
    # 100 m = 328 ft, 130 m = 427 ft (0.3048 m per ft)
    assert "gives 328 ft of head but the system needs 427 ft" in err.value.in_units("US")
    # at 1500 m3/d the system needs 40 + 15 = 55 m; the pump at rated speed gives 100 - 75 = 25 m
    with pytest.raises(ModelError) as err:
        pump.speed_for_rate(LINE, _system(), 1500.0)
    e = err.value
    assert isinstance(e, pump.PumpError) and e.cannot_lift
    assert "cannot lift the water at 1" in str(e) and "500 m³/d" in str(e)
    assert "needs 55 m of head" in str(e) and "gives 25 m" in str(e)
    # in the project's display units: 1500 m3/d = 275.2 gpm = 17.36 L/s; 55 m = 180.4 ft
    assert e.in_units("US").startswith("the pump cannot lift the water at 275 gpm: the system "
                                       "needs 180 ft of head")
    assert "at 17.4 L/s" in e.in_units("SI-L/s")
    assert "m3/d" not in e.in_units("US") and "m³/d" not in e.in_units("US")


def test_pump_messages_in_display_units():
    # every message of the pump core names its rates in the unit system asked for
    shallow = pump.SystemCurve(level=lambda q: np.zeros_like(np.asarray(q, float)), length=0.0,
                               diameter=0.15, hazen_williams_c=120.0, discharge_head=-10.0)
    for call in (lambda u: pump.operating_point(LINE, _system(level_at_zero=120.0), 1.0, units=u),
                 lambda u: pump.operating_point(LINE, shallow, 1.0, units=u),
                 lambda u: pump.speed_for_rate(LINE, _system(), 1500.0, units=u),
                 lambda u: pump.speed_for_rate(LINE, shallow, 1500.0, units=u)):
        for units, rate_unit in (("US", "gpm"), ("SI", "m³/d"), ("SI-L/s", "L/s")):
            with pytest.raises(pump.PumpError) as err:
                call(units)
            text = str(err.value)
            others = {"gpm", "m³/d", "L/s"} - {rate_unit}
            assert not any(o in text for o in others), text
            assert rate_unit in text or "shutoff" in text, text
            assert " m of" not in text or units != "US", text


def test_off_the_end_of_the_curve_is_an_error():
    # a flat system curve far below the pump's head: the pump runs out its curve
    shallow = pump.SystemCurve(level=lambda q: np.zeros_like(np.asarray(q, float)), length=0.0,
                               diameter=0.15, hazen_williams_c=120.0, discharge_head=-10.0)
    with pytest.raises(ModelError, match="off the curve"):
        pump.operating_point(LINE, shallow, 1.0)


def test_wire_to_water_power_and_energy():
    # 1000 m3/d at 50 m: water power = 999.1 * 9.80665 * (1000/86400) * 50 = 5670.1 W;
    # with 0.75 * 0.9 * 0.95 overall (0.64125): 8842.2 W; per volume 8.8422 kW * 24 h / 1000 m3
    w = pump.wire_to_water(1000.0, 50.0, 0.75, 0.9, 0.95)
    assert float(w) == pytest.approx(999.1 * 9.80665 * 1000 / 86400 * 50 / (0.75 * 0.9 * 0.95),
                                     rel=1e-12)
    assert float(w) == pytest.approx(8842.2, rel=1e-4)
    assert float(pump.energy_per_volume(w, 1000.0)) == pytest.approx(0.212213, rel=1e-4)


def test_bad_curve_is_refused():
    with pytest.raises(ModelError, match="increase"):
        pump.PumpCurve(np.array([0.0, 0.0]), np.array([10.0, 5.0]))
    with pytest.raises(ModelError, match="rise"):
        pump.PumpCurve(np.array([0.0, 1.0]), np.array([10.0, 12.0]))


@settings(max_examples=50, deadline=None)
@given(q=st.floats(1.0, 1e5), k=st.just(0.0) | st.floats(1e-6, 50.0), d=st.floats(0.05, 0.5))
def test_minor_loss_is_k_velocity_head(q, k, d):
    # K from 1e-6 (fittings have K of 0.01 and more): subnormal heads lose relative precision
    # h = K v^2 / (2 g): zero without fittings, linear in K, quadratic in the rate
    h = float(pump.minor_loss(q, d, k))
    v = q / 86400.0 / (np.pi * d**2 / 4)
    assert h == pytest.approx(k * v**2 / (2 * pump.GRAVITY), rel=1e-12, abs=0.0)
    assert float(pump.minor_loss(2 * q, d, k)) == pytest.approx(4 * h, rel=1e-12, abs=0.0)
