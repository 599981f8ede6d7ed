"""The well's static level when the project states none (blendq.decide.levelcheck)."""

from __future__ import annotations

import numpy as np
import pytest

from blendq.decide.levelcheck import static_level_of
from blendq.inputs.project import Project, Settings, Well, Zone
from blendq.well.hydraulics import thiem_conductance
from blendq.well.model import model_from_parameters

R, RW = 300.0, 0.15
K = np.array([5.0, 40.0, 12.0])  # [m/d]
THICK = np.array([10.0, 5.0, 8.0])  # [m]
LEVELS = np.array([58.0, 61.5, 66.0])  # depth to each zone's static level [m]
TOPS = np.array([70.0, 85.0, 95.0])


def three_zone_well(skin=(0.0, 0.0, 0.0), well_level=None) -> Project:
    zones = [Zone(f"z{i + 1}", float(TOPS[i]), float(TOPS[i] + THICK[i]),
                  static_level=float(LEVELS[i]), conductivity=float(K[i]), skin=float(skin[i]))
             for i in range(3)]
    return Project("Invented well", Well("W-1", well_radius=RW, pump_intake_depth=60.0,
                                         radius_of_influence=R, static_level=well_level),
                   zones, Settings(conductance_model="steady"))


def test_static_level_is_the_conductance_weighted_mean_of_the_zone_levels():
    # By hand: with no pumping sum_i G_i (h0_i - h_w) = 0, so h_w = sum G_i h0_i / sum G_i
    # (Konikow and others 2009, USGS TM 6-A30, the composite head of a multi-node well;
    # Sokol 1963). Thiem G_i = 2 pi K_i b_i / ln(R / r_w): the log term is common, so the
    # weights are the transmissivities 50, 200 and 96 m^2/d:
    # (50 x 58 + 200 x 61.5 + 96 x 66) / 346 = 21536 / 346 = 62.2428 m
    assert static_level_of(three_zone_well()) == pytest.approx(21536.0 / 346.0, rel=1e-12)
    # not the arithmetic mean of the zone levels (61.83 m)
    assert abs(static_level_of(three_zone_well()) - LEVELS.mean()) > 0.4


def test_static_level_with_skins_matches_timml_at_zero_rate():
    # timml (PyPI; Bakker's analytic-element multi-aquifer model, tests/reference/timml_well.py):
    # three layers joined only through a well with a screen resistance (skins s_i = K_i res /
    # r_w that differ between layers) and no pumping; the head inside the well is the ambient
    # composite head blendq must give as the well's static level
    pytest.importorskip("timml")
    from reference.timml_well import equivalent_skin, timml_zone_flows

    res = 0.01
    # 120 line sinks per ring: the ring's own discretisation error drops to about 1 mm
    q, head = timml_zone_flows(0.0, K, THICK, -LEVELS, R, RW, screen_resistance=res, n_ring=120)
    assert abs(q.sum()) < 1e-6 * np.abs(q).max()  # ambient crossflow, no net discharge
    level = static_level_of(three_zone_well(skin=equivalent_skin(K, res, RW)))
    assert level == pytest.approx(-head, abs=0.003)
    assert abs(level - LEVELS.mean()) > 0.1


def test_stated_static_level_and_fitted_model():
    assert static_level_of(three_zone_well(well_level=60.0)) == 60.0
    # a fitted model's conductances and heads give its own ambient level
    project = three_zone_well()
    g = np.array([10.0, 30.0, 60.0])
    model = model_from_parameters(project, g, [-50.0, -60.0, -70.0])
    assert static_level_of(project, model) == pytest.approx(
        (10 * 50 + 30 * 60 + 60 * 70) / 100.0, rel=1e-12)
    # thiem_conductance is what the property conductances are made of here
    assert thiem_conductance(50.0, R, RW) == pytest.approx(2 * np.pi * 50.0 / np.log(R / RW))


def test_no_composite_without_every_zone_level():
    project = three_zone_well()
    project.zones[1] = Zone("z2", 85.0, 90.0, conductivity=40.0)
    assert static_level_of(project) is None
