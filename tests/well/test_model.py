"""Tests of blendq.well.model: prior hydraulics from zone properties, and no invented ones.

Sources:
- Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU 27(4): transient conductance
  G = 4 pi T / (ln(2.25 T t / (r_w^2 S)) + 2 s) (skin after Hawkins 1956), written out here
  independently of blendq.well.hydraulics.
- The rule that no command assumes a transmissivity (an input error, or a flat prior labelled
  as such where flow logs at a pumped rate decide the shares) is the project's own
  (docs/methods.md, section 6.3); tested here as documented behaviour.
- Operating horizon: the Cooper-Jacob ratio above for transient zones, no change for steady
  (Thiem 1906) zones; the ambient crossflow held under linear superposition, checked against the
  closed form h_w = (sum G h0 - Q) / sum G of the common-head model (docs/methods.md, section 2).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.well.model import (
    FLOWLOG_SOURCE,
    NO_PRIOR_SOURCE,
    PRIOR_LOG_CONDUCTANCE_SD,
    START_CONDUCTANCE,
    WellModel,
    elapsed_test_time,
    horizon_scaling,
    prior_hydraulics,
    shares_from_flow_logs,
)

DATA = Path(__file__).parents[1] / "data" / "projects"


@pytest.fixture
def with_t():
    return load_project(DATA / "quillmarsh_us")


@pytest.fixture
def without_t():
    return load_project(DATA / "quillmarsh_no_transmissivity")


def test_prior_from_zone_properties_is_cooper_jacob(with_t):
    p = with_t
    prior = prior_hydraulics(p)
    t = elapsed_test_time(p)
    rw = p.well.well_radius
    for i, z in enumerate(p.zones):
        tz = z.zone_transmissivity
        g = 4 * np.pi * tz / (np.log(2.25 * tz * t / (rw ** 2 * z.storativity)) + 2 * z.skin)
        np.testing.assert_allclose(prior.log_conductance[i], np.log(g), rtol=1e-12)
    np.testing.assert_allclose(prior.log_conductance_sd, PRIOR_LOG_CONDUCTANCE_SD, rtol=1e-12)
    assert prior.source == ["zone properties"] * 3


def test_missing_transmissivity_without_a_flow_log_is_an_input_error(without_t):
    p = without_t
    p.flowlogs = p.flowlogs.iloc[0:0]
    with pytest.raises(InputError) as err:
        prior_hydraulics(p)
    assert err.value.file == "project.toml"
    assert err.value.field == "zones[1].transmissivity"
    assert 'zone "Upper"' in err.value.message and "flow log" in err.value.message


def test_an_ambient_log_alone_does_not_tell_the_shares(without_t):
    p = without_t
    assert shares_from_flow_logs(p)
    p.flowlogs = p.flowlogs[p.flowlogs["rate"].astype(float) == 0.0]
    assert len(p.flowlogs) and not shares_from_flow_logs(p)
    with pytest.raises(InputError):
        prior_hydraulics(p)


def test_missing_transmissivity_with_a_pumped_flow_log_is_a_labelled_flat_prior(without_t):
    prior = prior_hydraulics(without_t)
    np.testing.assert_allclose(prior.log_conductance, np.log(START_CONDUCTANCE), rtol=1e-12)
    assert np.isinf(prior.log_conductance_sd).all()  # a start value, no weight
    assert prior.source == [NO_PRIOR_SOURCE] * 3
    # a use that rests on the properties alone refuses even then
    with pytest.raises(InputError) as err:
        prior_hydraulics(without_t, need_properties=True)
    assert err.value.field == "zones[1].transmissivity"


def test_one_zone_missing_is_named(with_t):
    p = with_t
    p.zones = [p.zones[0], dataclasses.replace(p.zones[1], conductivity=None), p.zones[2]]
    p.flowlogs = pd.DataFrame(columns=p.flowlogs.columns)
    p.files = {**p.files, "project": "site.toml"}
    with pytest.raises(InputError) as err:
        prior_hydraulics(p)
    assert (err.value.file, err.value.field) == ("site.toml", "zones[2].transmissivity")
    assert 'zone "Middle"' in err.value.message


def _set_model(p, model):
    p.settings = dataclasses.replace(p.settings, conductance_model=model)
    return p


def test_steady_model_means_no_horizon_scaling(with_t):
    # zones with storativity, but the project asks for the steady (Thiem) model
    p = _set_model(with_t, "steady")
    h = horizon_scaling(p, elapsed_test_time(p), 365.0)
    np.testing.assert_array_equal(h.factor, 1.0)
    assert h.assumed == [] and h.note(p) == ""
    assert all(b.startswith("steady") for b in h.basis)


def test_transient_model_scales_every_zone_by_cooper_jacob(with_t):
    p = with_t
    t1, t2 = elapsed_test_time(p), 365.0
    h = horizon_scaling(p, t1, t2)
    rw = p.well.well_radius
    for i, z in enumerate(p.zones):
        tz = z.zone_transmissivity
        big_l = [np.log(2.25 * tz * t / (rw ** 2 * z.storativity)) + 2 * z.skin for t in (t1, t2)]
        np.testing.assert_allclose(h.factor[i], big_l[0] / big_l[1], rtol=1e-12)
    assert np.all(h.factor < 1.0) and h.assumed == []


def test_transient_zone_without_storativity_is_held_and_stated(with_t):
    p = with_t
    p.zones = [p.zones[0], dataclasses.replace(p.zones[1], storativity=None), p.zones[2]]
    h = horizon_scaling(p, elapsed_test_time(p), 365.0)
    assert h.factor[1] == 1.0 and h.assumed == [1]
    assert h.factor[0] < 1.0 and h.factor[2] < 1.0
    assert "Middle" in h.note(p) and "assumption" in h.note(p)
    # under "auto" the same zone is a steady (Thiem) zone by its model: no assumption to state
    h = horizon_scaling(_set_model(p, "auto"), elapsed_test_time(p), 365.0)
    assert h.factor[1] == 1.0 and h.assumed == [] and h.basis[1].startswith("steady")


def _three_zone_model(d=0.0):
    from blendq.well.mixing import WellGeometry

    geo = WellGeometry([20.0, 40.0, 60.0], [30.0, 50.0, 70.0], 15.0)
    return WellModel(geo, np.array([150.0, 60.0, 220.0]), np.array([-8.0, -9.5, -11.0]),
                     np.full(3, d), 0.0)


@pytest.mark.parametrize("d", [0.0, 2e-6])
def test_at_horizon_holds_the_ambient_crossflow(d):
    m = _three_zone_model(d)
    f = np.array([0.73, 0.84, 0.6])
    h = m.at_horizon(f)
    a0, a1 = m.state(np.zeros(1)), h.state(np.zeros(1))
    assert np.abs(a0.zone_flow).max() > 50.0  # a real crossflow to hold
    np.testing.assert_allclose(a1.zone_flow, a0.zone_flow, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(a1.wellbore_head, a0.wellbore_head, rtol=0, atol=1e-9)
    if d == 0.0:
        # linear superposition: q_i = q0_i + f_i G_i (h_w0 - h_w), h_w0 - h_w = Q / sum f G
        q = np.array([500.0, 2000.0])
        dh = q / (f * m.conductance).sum()
        expect = a0.zone_flow[0] + (f * m.conductance)[None, :] * dh[:, None]
        np.testing.assert_allclose(h.state(q).zone_flow, expect, rtol=1e-12)


def test_uniform_horizon_factor_keeps_zone_flows_and_deepens_the_level():
    # every G x f with the ambient held: same zone flows at every rate, drawdown / f
    m = _three_zone_model()
    f = 0.7
    h = m.at_horizon(np.full(3, f))
    q = np.array([0.0, 800.0, 3000.0])
    np.testing.assert_allclose(h.state(q).zone_flow, m.state(q).zone_flow, rtol=1e-12,
                               atol=1e-9)
    s0 = m.state(q).wellbore_head[0] - m.state(q).wellbore_head
    s1 = h.state(q).wellbore_head[0] - h.state(q).wellbore_head
    np.testing.assert_allclose(s1, s0 / f, rtol=1e-12, atol=1e-12)


def test_at_horizon_is_batched():
    m = _three_zone_model()
    g = np.stack([m.conductance, 2 * m.conductance])
    batch = m.with_changes(conductance=g, static_head=np.stack([m.static_head] * 2))
    f = np.array([0.8, 0.9, 0.7])
    out = batch.at_horizon(f)
    for b in range(2):
        one = m.with_changes(conductance=g[b]).at_horizon(f)
        np.testing.assert_allclose(out.static_head[b], one.static_head, rtol=1e-12)


def _write_project(folder, well_extra="", zone_extra=""):
    (folder / "project.toml").write_text(
        '[project]\nname = "m"\n[well]\nname = "w"\nwell_radius = "0.1 m"\n'
        f'pump_intake_depth = "30 m"\n{well_extra}[[zones]]\nname = "z"\ntop = "40 m"\n'
        f'bottom = "50 m"\n{zone_extra}[tables]\nsteps = "s.csv"\n', encoding="utf-8")
    (folder / "s.csv").write_text("step,rate [L/s]\n1,10\n", encoding="utf-8")
    return load_project(folder)


def test_operating_intake_and_sublayers_are_read(tmp_path):
    from blendq.well.model import geometry_of, operating_geometry

    p = _write_project(tmp_path)
    assert p.well.operating_intake_depth is None and p.well.operating_intake == 30.0
    assert operating_geometry(p).intake_depth == 30.0 and geometry_of(p).sublayers is None
    p = _write_project(tmp_path, 'operating_intake_depth = "60 m"\n',
                       'sublayers = [{ top = "40 m", bottom = "44 m", conductivity = "10 m/d" },'
                       ' { top = "46 m", bottom = "50 m", conductivity = "30 m/d" }]\n')
    assert geometry_of(p).intake_depth == 30.0 and operating_geometry(p).intake_depth == 60.0
    layers = geometry_of(p).sublayers[0]
    np.testing.assert_allclose(layers, [[40.0, 44.0, 10.0], [46.0, 50.0, 30.0]], rtol=1e-12)
    # K b shares 40 : 120 -> a quarter of the inflow enters above 44 m, none in the parting
    np.testing.assert_allclose(geometry_of(p).fraction_above([42.0, 44.0, 45.0, 48.0])[:, 0],
                               [0.125, 0.25, 0.25, 0.625], rtol=1e-12)


@pytest.mark.parametrize("layers, field", [
    ('[{ top = "38 m", bottom = "44 m", conductivity = "10 m/d" }]', "zones[1].sublayers[1].bottom"),
    ('[{ top = "40 m", bottom = "46 m", conductivity = "10 m/d" },'
     ' { top = "45 m", bottom = "50 m", conductivity = "10 m/d" }]', "zones[1].sublayers"),
    ('[{ top = "40 m", bottom = "46 m" }]', "zones[1].sublayers[1].conductivity"),
    ('"40 m"', "zones[1].sublayers"),
])
def test_bad_sublayers_are_input_errors(tmp_path, layers, field):
    with pytest.raises(InputError) as err:
        _write_project(tmp_path, zone_extra=f"sublayers = {layers}\n")
    assert err.value.field == field and err.value.file == "project.toml"


def test_horizon_factor_of_a_fitted_conductance_keeps_its_skin(with_t):
    # Cooper-Jacob (1946): 1 / G(t) = (ln(2.25 T t / (r_w^2 S)) + 2 s) / (4 pi T); a fitted G at
    # the test time implies a skin s_fit, which the horizon keeps
    from blendq.well.model import horizon_factor_of, transient_slope

    p = with_t
    t1, t2 = elapsed_test_time(p), 365.0
    rw = p.well.well_radius
    tz = np.array([z.zone_transmissivity for z in p.zones])
    sz = np.array([z.storativity for z in p.zones])
    big_l = [np.log(2.25 * tz * t / (rw ** 2 * sz)) for t in (t1, t2)]
    g_prop = np.exp(prior_hydraulics(p).log_conductance)
    slope = transient_slope(p)
    np.testing.assert_allclose(horizon_factor_of(g_prop, slope, t1, t2),
                               horizon_scaling(p, t1, t2).factor, rtol=1e-12)
    g_fit = np.stack([0.6 * g_prop, 1.3 * g_prop])  # two draws
    s_fit = 0.5 * (4 * np.pi * tz / g_fit - big_l[0])
    g_h = 4 * np.pi * tz / (big_l[1] + 2 * s_fit)
    np.testing.assert_allclose(horizon_factor_of(g_fit, slope, t1, t2), g_h / g_fit, rtol=1e-12)
    # steady zones: no factor
    np.testing.assert_array_equal(horizon_factor_of(g_fit, np.zeros(3), t1, t2), 1.0)


@pytest.mark.parametrize("d", [0.0, 2e-6])
def test_at_horizon_holds_the_ambient_crossflow_of_a_water_table_zone(d):
    # the upper zone's static level (21 m) lies inside its interval (20-30 m): unconfined;
    # at rest the well's level lies in that interval too, so it flows in across a seepage face
    from blendq.well.mixing import WellGeometry

    geo = WellGeometry([20.0, 40.0, 60.0], [30.0, 50.0, 70.0], 15.0)
    m = WellModel(geo, np.array([150.0, 60.0, 220.0]), np.array([-21.0, -24.0, -26.0]),
                  np.full(3, d), 0.0, loss_exponent=np.array([2.0, 2.5, 2.0]))
    h = m.at_horizon(np.array([0.73, 0.84, 0.6]))
    a0, a1 = m.state(np.zeros(1)), h.state(np.zeros(1))
    assert a0.zone_flow[0, 0] > 50.0 and -a0.wellbore_head[0] > 20.0
    np.testing.assert_allclose(a1.zone_flow, a0.zone_flow, rtol=1e-9, atol=1e-8)
    np.testing.assert_allclose(a1.wellbore_head, a0.wellbore_head, rtol=0, atol=1e-8)


def test_demo_upper_sand_with_heads_lowered_30_ft_stops_gaining_at_full_transmissivity():
    # the demo's zone properties (no fit), static heads 30 ft lower: once the wellbore head
    # falls below the upper sand's top (120 ft), its inflow grows with its saturated thickness
    # (Dupuit-Thiem; Kruseman and de Ridder 1990), less than the confined law would give
    from blendq.well.model import model_from_parameters

    demo = load_project(Path(__file__).parents[2] / "blendq" / "data" / "demo")
    prior = prior_hydraulics(demo)
    m = model_from_parameters(demo, np.exp(prior.log_conductance), prior.static_head - 9.144)
    rates = np.linspace(0.0, 6000.0, 61)  # m^3/d, to 1100 gpm
    st = m.state(rates)
    top = demo.zones[0].top
    below = -st.wellbore_head > top
    assert below.any() and not below[0]
    g = m.conductance
    # confined law: each zone gains G_i / sum G of every increment of the rate
    gain = np.diff(st.zone_flow[:, 0])
    full = g[0] / g.sum() * np.diff(rates)
    np.testing.assert_allclose(gain[~below[1:] & ~below[:-1]],
                               full[~below[1:] & ~below[:-1]], rtol=1e-9)
    dry = gain[below[:-1]]
    assert np.all(dry < full[below[:-1]] * (1 - 1e-6)) and np.all(np.diff(dry) < 0)
    assert dry[-1] < 0.8 * full[-1]
    # the zone's slope dq/dh_w is G times its saturated fraction
    k = np.flatnonzero(below)[-1]
    z = demo.zones[0]
    sat = (st.wellbore_head[k] + z.bottom) / (z.bottom - z.top)
    assert 0.0 < sat < 1.0
def test_flowlog_conductance_model_takes_no_prior_from_the_properties(with_t):
    # conductance_model = "flowlog": the zone conductances rest on the flow logs; the zone
    # properties give only the start value and the horizon scaling (docs/methods.md, section 1)
    auto = prior_hydraulics(with_t)
    p = dataclasses.replace(with_t, settings=dataclasses.replace(with_t.settings,
                                                                 conductance_model="flowlog"))
    prior = prior_hydraulics(p)
    assert np.isinf(prior.log_conductance_sd).all()
    assert np.isfinite(auto.log_conductance_sd).all()
    np.testing.assert_allclose(prior.log_conductance, auto.log_conductance, rtol=1e-12)
    assert prior.source == [FLOWLOG_SOURCE] * 3
    np.testing.assert_array_equal(prior.static_head, auto.static_head)
    # blendq inflow, which rests on the properties alone, keeps them
    assert prior_hydraulics(p, need_properties=True).source == ["zone properties"] * 3


def test_flowlog_conductance_model_without_a_pumped_log_is_an_input_error(with_t):
    p = dataclasses.replace(with_t, settings=dataclasses.replace(with_t.settings,
                                                                 conductance_model="flowlog"))
    p.flowlogs = p.flowlogs[p.flowlogs["rate"].astype(float) == 0.0]
    with pytest.raises(InputError) as err:
        prior_hydraulics(p)
    assert err.value.field == "settings.conductance_model"
