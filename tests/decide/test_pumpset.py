"""Drive settings for the operating window (blendq.decide.pumpset) on the demo well with an
invented pump."""

from dataclasses import replace

import numpy as np
import pytest
from inputs.test_pump_file import pump_project

from blendq.decide.analysis import analyse
from blendq.decide.levelcheck import static_level_of
from blendq.decide.pumpset import (
    _system,
    curve_of,
    delivered,
    level_band,
    pump_settings,
)
from blendq.errors import ModelError
from blendq.inputs.loader import load_project
from blendq.inputs.pump_file import read_pump

FT = 0.3048


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    folder = pump_project(tmp_path_factory.mktemp("pump"))
    return analyse(load_project(folder), draws=200, seed=7), read_pump(folder)


def _all_systems(a, spec):
    rates, band = level_band(a)
    s0 = static_level_of(a.project)
    return rates, [_system(spec, rates, lv, s - s0) for s in spec.static_levels.values()
                   for lv in band]


def test_range_keeps_every_season_and_band_in_the_window(setup):
    a, spec = setup
    out = pump_settings(a, spec)
    assert out.frequency_range is not None
    lo, hi = out.frequency_range
    rates, systems = _all_systems(a, spec)
    curve = curve_of(spec)
    for f in np.linspace(lo, hi, 7):
        for system in systems:
            q = delivered(curve, system, spec, f, rates[-1])
            assert out.window[0] * (1 - 1e-6) <= q <= out.window[1] * (1 + 1e-6)
    # the low end is where the most demanding system (deepest level) reaches the window's low
    # end, unless the drive's lowest frequency binds
    lowest = min(delivered(curve, s, spec, lo, rates[-1]) for s in systems)
    assert lo == spec.min_frequency or lowest == pytest.approx(out.window[0], rel=1e-4)
    # just below the low end some system falls out of the window
    if lo > spec.min_frequency:
        assert min(delivered(curve, s, spec, lo - 0.05, rates[-1]) for s in systems) \
            < out.window[0]
    assert lo <= out.recommended <= hi


def test_recommended_delivers_the_target_at_the_middle_level(setup):
    a, spec = setup
    out = pump_settings(a, spec)
    rates, band = level_band(a)
    middle = np.mean(list(spec.static_levels.values()))
    system = _system(spec, rates, band[1], middle - static_level_of(a.project))
    q = delivered(curve_of(spec), system, spec, out.recommended, rates[-1])
    if out.frequency_range[0] < out.recommended < out.frequency_range[1]:
        assert q == pytest.approx(out.target, rel=1e-4)
    # a deeper season delivers less at the same setting
    seasons = out.seasons.sort_values("static_level")
    assert np.all(np.diff(seasons["rate"].to_numpy()) < 0)


def test_energy_cheapest_is_no_dearer_than_recommended(setup):
    a, spec = setup
    out = pump_settings(a, spec)
    assert np.isfinite(out.cheapest_energy) and np.isfinite(out.recommended_energy)
    assert out.cheapest_energy <= out.recommended_energy + 1e-12
    e = out.energy
    assert e["kwh_per_kgal"].to_numpy() == pytest.approx(e["kwh_per_m3"].to_numpy() * 3.785411784,
                                                         rel=1e-12)
    assert np.all(np.diff(e["rate"].to_numpy()) > 0)  # faster -> more water


def test_wide_seasons_need_per_season_settings(setup):
    a, spec = setup
    wide = replace(spec, static_levels={"spring": 10 * FT, "autumn": 110 * FT})
    out = pump_settings(a, wide)
    assert out.frequency_range is None and out.recommended is None
    assert any("per season" in n for n in out.notes)
    assert not any("cannot run the well" in n for n in out.notes)
    row = out.seasons.set_index("season")
    assert row.loc["autumn", "low"] > row.loc["spring", "high"]
    for name in ("spring", "autumn"):
        assert row.loc[name, "low"] <= row.loc[name, "recommended"] <= row.loc[name, "high"]


def test_a_season_with_no_compliant_setting_is_named(setup):
    # autumn's static level 150 ft: no frequency of the drive's range keeps the delivered rate
    # in the window (the level band of the demo well and the invented pump's curve)
    a, spec = setup
    out = pump_settings(a, replace(spec, static_levels={"spring": 10 * FT, "autumn": 150 * FT}))
    assert out.frequency_range is None
    row = out.seasons.set_index("season")
    assert np.isnan(row.loc["autumn", "low"]) and np.isfinite(row.loc["spring", "low"])
    (note,) = [n for n in out.notes if "cannot run the well" in n]
    assert "At the static level of autumn" in note


def test_no_window_is_a_model_error(setup):
    a, spec = setup
    empty = replace(a, window=replace(a.window, intervals=[], recommended=None,
                                      ok=np.zeros_like(a.window.ok), reason_empty="closed"))
    with pytest.raises(ModelError, match="no operating window"):
        pump_settings(empty, spec)


def test_pump_that_cannot_lift_is_a_model_error(setup):
    a, spec = setup
    # 400 ft of static level + 115 ft of discharge head is above the pump's 298 ft at 60 Hz
    deep = replace(spec, static_levels={"drought": 400 * FT})
    with pytest.raises(ModelError, match="drought static level and 60 Hz, the pump cannot lift") \
            as err:
        pump_settings(a, deep)
    # the message speaks the project's display units (US: gpm and ft), never internal m3/d
    text = str(err.value)
    assert " gpm," in text and " ft of head" in text and "m³/d" not in text and "m3/d" not in text
    si = err.value.in_units("SI-L/s")
    assert " L/s," in si and " m of head" in si and "gpm" not in si
    with pytest.raises(ModelError) as err:
        pump_settings(a, deep, units="SI")
    assert "m³/d," in str(err.value)


def test_window_top_beyond_the_pumps_reach_is_said(setup):
    a, spec = setup
    assert not any("beyond its reach" in n for n in pump_settings(a, spec).notes)
    # a drive limited to 55 Hz: the invented pump then delivers less than the window's top
    out = pump_settings(a, replace(spec, max_frequency=55.0))
    (note,) = [n for n in out.notes if "beyond its reach" in n]
    assert out.rate_span[1] < out.window[1]
    assert note.startswith("At 55 Hz this pump delivers at most ") and " gpm" in note
    top = float(note.split("at most ")[1].split(" gpm")[0].replace(",", ""))
    np.testing.assert_allclose(top, out.rate_span[1] / 5.450992969, rtol=5e-3)  # m3/d per gpm
