"""Tests of blendq.inputs.monitoring: the monitoring history and the pump log."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.monitoring import rate_at

US = Path(__file__).parents[1] / "data" / "projects" / "quillmarsh_us"
# 1 US gallon = 231 in^3 exactly (NIST SP 811, appendix B)
GPM = 231 * 0.0254**3 * 1440.0  # m^3/d per gpm


def _project(tmp_path: Path, history: str | None, pumplog: str | None = None,
             settings: str = "") -> Path:
    folder = tmp_path / "p"
    shutil.copytree(US, folder)
    toml = (folder / "project.toml").read_text(encoding="utf-8")
    extra = ""
    if history is not None:
        (folder / "history.csv").write_text(history, encoding="utf-8")
        extra += 'history = "history.csv"\n'
    if pumplog is not None:
        (folder / "pumplog.csv").write_text(pumplog, encoding="utf-8")
        extra += 'pumplog = "pumplog.csv"\n'
    toml = toml.replace("[tables]\n", "[tables]\n" + extra, 1)
    if settings:
        toml = toml.replace("[settings]\n", "[settings]\n" + settings, 1)
    (folder / "project.toml").write_text(toml, encoding="utf-8")
    return folder


HISTORY = ("sampled_at,sample_point,analyte,value,unit,uncertainty,rate [gpm]\n"
           "2020-01-15 10:00,tap,nitrate,4.2,mg/L as N,5%,300\n"
           "2020-02-15 10:00,tap,arsenic,6,ug/L,,350\n"
           "2020-03-15 10:00,tap,nitrate,<0.5,mg/L as N,,400\n")


def test_history_in_base_units(tmp_path):
    p = load_project(_project(tmp_path, HISTORY))
    h = p.history
    assert list(h["analyte"]) == ["nitrate", "arsenic", "nitrate"]
    assert h["value"][0] == pytest.approx(4.2, rel=1e-12)
    assert h["uncertainty"][0] == pytest.approx(0.21, rel=1e-12)
    assert h["value"][1] == pytest.approx(0.006, rel=1e-12)  # 6 ug/L = 0.006 mg/L
    assert bool(h["nondetect"][2]) and np.isnan(h["value"][2])
    assert h["detection_limit"][2] == pytest.approx(0.5, rel=1e-12)
    assert h["rate"].to_numpy() == pytest.approx(np.array([300, 350, 400]) * GPM, rel=1e-12)
    assert set(h["rate_from"]) == {"history table"}


def test_rate_and_volume_from_the_pump_log(tmp_path):
    log = ("time,rate [gpm],pump\n"
           "2020-01-01 00:00,500,\n"
           "2020-01-10 00:00,,off\n"
           "2020-01-15 00:00,,on\n"
           "2020-02-01 00:00,250,\n")
    p = load_project(_project(tmp_path, HISTORY, log))
    h = p.history
    # 2020-01-15 10:00: on since 01-15 00:00 at the last rate 500 gpm: 10 h of 500 gpm
    assert h["rate"][0] == pytest.approx(500 * GPM, rel=1e-12)
    assert h["volume_since_start"][0] == pytest.approx(500 * GPM * 10 / 24, rel=1e-12)
    # 2020-02-15 10:00: 17 d at 500 gpm, then 14 d 10 h at 250 gpm, since the start on 01-15
    assert h["rate"][1] == pytest.approx(250 * GPM, rel=1e-12)
    assert h["volume_since_start"][1] == pytest.approx(GPM * (500 * 17 + 250 * (14 + 10 / 24)),
                                                       rel=1e-12)
    assert set(h["rate_from"]) == {"pump log"}


def test_rate_at_before_the_log_and_while_off():
    log = pd.DataFrame({"time": pd.to_datetime(["2020-01-02", "2020-01-03"]),
                        "rate": [100.0, 0.0], "source_row": [1, 2]})
    rate, volume = rate_at(log, pd.to_datetime(["2020-01-01 00:00", "2020-01-02 12:00",
                                                "2020-01-04 00:00"]))
    assert np.isnan(rate[0]) and np.isnan(volume[0])
    assert rate[1] == 100.0 and volume[1] == pytest.approx(50.0, rel=1e-12)
    assert rate[2] == 0.0 and volume[2] == 0.0


@pytest.mark.parametrize("history, pumplog, where", [
    (HISTORY.replace("4.2,", "-4.2,"), None, ("history.csv", 1, "value")),
    (HISTORY.replace("2020-02-15 10:00", "2020-02-31"), None, ("history.csv", 2, "sampled_at")),
    (HISTORY.replace(",400\n", ",-400\n"), None, ("history.csv", 3, "rate")),
    (HISTORY.replace("ug/L,,350", "furlong,,350"), None, ("history.csv", 2, "unit")),
    (HISTORY, "time,rate [gpm],pump\n2020-01-01,,on\n", ("pumplog.csv", 1, "rate")),
    (HISTORY, "time,rate [gpm],pump\n2020-01-01,200,off\n", ("pumplog.csv", 1, "rate")),
    (HISTORY, "time,pump\n2020-01-01,maybe\n", ("pumplog.csv", 1, "pump")),
])
def test_one_line_errors_name_file_row_and_field(tmp_path, history, pumplog, where):
    with pytest.raises(InputError) as err:
        load_project(_project(tmp_path, history, pumplog))
    e = err.value
    assert (e.file, e.row, e.field) == where
    assert "\n" not in str(e)


def test_nominal_rate_setting(tmp_path):
    log = "time,pump\n2020-01-01,on\n"
    p = load_project(_project(tmp_path, HISTORY, log, 'pump_nominal_rate = "450 gpm"\n'))
    assert p.history["rate"].to_numpy() == pytest.approx(np.full(3, 450 * GPM), rel=1e-12)


def test_history_settings(tmp_path):
    folder = _project(tmp_path, HISTORY, settings='forecast_years = 5\ntime_model = '
                                                  '{ nitrate = "trend", default = "auto" }\n')
    s = load_project(folder).settings
    assert s.forecast_years == 5
    assert s.time_model == {"nitrate": "trend", "default": "auto"}
    bad = _project(tmp_path / "b", HISTORY, settings='time_model = "wiggly"\n')
    with pytest.raises(InputError, match="time_model"):
        load_project(bad)


@settings(max_examples=50, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 500), st.sampled_from([0.0, 50.0, 100.0, 300.0])),
                min_size=1, max_size=12),
       st.lists(st.integers(0, 6000), min_size=1, max_size=8))
def test_rate_at_invariants(steps, probes):
    # times in hours after a start; the volume since the last start is never negative, never
    # more than the whole log's volume, zero while off, and the rate is the last logged one
    hours = np.cumsum([h for h, _ in steps])
    log = pd.DataFrame({"time": pd.Timestamp("2020-01-01") + pd.to_timedelta(hours, unit="h"),
                        "rate": [q for _, q in steps], "source_row": range(1, len(steps) + 1)})
    times = pd.Timestamp("2020-01-01") + pd.to_timedelta(probes, unit="h")
    rate, volume = rate_at(log, times)
    for k, t in enumerate(times):
        before = log[log["time"] <= t]
        if before.empty:
            assert np.isnan(rate[k]) and np.isnan(volume[k])
            continue
        assert rate[k] == before["rate"].iloc[-1]
        assert volume[k] >= -1e-9
        if rate[k] == 0:
            assert volume[k] == 0
        whole = 300.0 * (t - log["time"].iloc[0]) / pd.Timedelta(days=1)
        assert volume[k] <= whole + 1e-9
