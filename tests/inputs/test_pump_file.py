"""Reading the optional [pump] table and its curve."""

import shutil
from pathlib import Path

import numpy as np
import pytest

from blendq.api import demo_path
from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.pump_file import read_pump

PUMP = Path(__file__).parent.parent / "data" / "pump"


def pump_project(tmp_path: Path, extra: str = "", curve: str | None = None) -> Path:
    """A copy of the demo project with the test pump appended (and ``extra`` lines)."""
    folder = tmp_path / "proj"
    shutil.copytree(demo_path(), folder)
    (folder / "curve.csv").write_text(curve or (PUMP / "curve.csv").read_text())
    toml = folder / "project.toml"
    toml.write_text(toml.read_text() + "\n" + (PUMP / "pump.toml").read_text() + extra)
    return folder


def test_demo_has_no_pump():
    assert read_pump(demo_path()) is None


def test_reads_pump_in_base_units(tmp_path):
    folder = pump_project(tmp_path)
    spec = read_pump(folder)
    gpm = 3.785411784e-3 * 1440.0  # m3/d per gpm
    np.testing.assert_allclose(spec.curve_rate[[0, -1]], [100 * gpm, 1150 * gpm], rtol=1e-12)
    np.testing.assert_allclose(spec.curve_head[0], 298 * 0.3048, rtol=1e-12)
    np.testing.assert_allclose(spec.curve_efficiency[3], 0.78, rtol=1e-12)
    assert (spec.rated_frequency, spec.min_frequency, spec.max_frequency) == (60, 35, 60)
    assert spec.column_diameter == pytest.approx(0.1524, rel=1e-12)
    assert spec.roughness == pytest.approx(0.0018 * 0.0254, rel=1e-12)
    # 50 psi = 344,737.9 Pa; / (999.1 * 9.80665) = 35.185 m
    assert spec.discharge_head == pytest.approx(344737.9 / (999.1 * 9.80665), rel=1e-6)
    assert spec.static_levels["autumn"] == pytest.approx(68 * 0.3048, rel=1e-12)
    assert spec.minor_loss_k == 0.0
    assert read_pump(pump_project(tmp_path / "k", "minor_loss_k = 4.2\n")).minor_loss_k == 4.2
    # the rest of the project still loads
    assert load_project(folder).well.name == "TH-2"


@pytest.mark.parametrize("extra, field", [
    ('hazen_williams_c = 120\n', "pump.roughness"),
    ('discharge_head = "10 ft"\n', "pump.discharge_pressure"),
    ('motor_efficiency = 1.5\n', "pump.motor_efficiency"),
    ('flow = 3\n', "pump.flow"),
    ('minor_loss_k = -1\n', "pump.minor_loss_k"),
    ('minor_loss_k = "3"\n', "pump.minor_loss_k"),
])
def test_errors_name_the_field(tmp_path, extra, field):
    folder = pump_project(tmp_path, extra)
    with pytest.raises(InputError) as err:
        read_pump(folder)
    assert err.value.field == field and err.value.file == "project.toml"


def test_bad_frequency_names_the_field(tmp_path):
    folder = pump_project(tmp_path)
    toml = folder / "project.toml"
    toml.write_text(toml.read_text().replace('min_frequency = "35 Hz"', 'min_frequency = "35 ft"'))
    with pytest.raises(InputError, match="pump.min_frequency"):
        read_pump(folder)


def test_curve_errors_name_row_and_column(tmp_path):
    folder = pump_project(tmp_path, curve="rate [gpm],head [ft]\n100,200\n50,180\n")
    with pytest.raises(InputError) as err:
        read_pump(folder)
    assert (err.value.file, err.value.row, err.value.field) == ("curve.csv", 2, "rate")
    folder = pump_project(tmp_path / "b", curve="rate [gpm],head [ft]\n100,200\n200,210\n")
    with pytest.raises(InputError, match="rises with the rate"):
        read_pump(folder)
    folder = pump_project(tmp_path / "c", curve="rate [gpm],head\n100,200\n200,180\n")
    with pytest.raises(InputError, match="head"):
        read_pump(folder)


def test_curve_in_si_without_efficiency(tmp_path):
    folder = pump_project(tmp_path, curve="rate [L/s],head [m]\n5,90\n40,60\n70,30\n")
    spec = read_pump(folder)
    assert spec.curve_efficiency is None
    assert spec.curve_rate[0] == pytest.approx(5 * 86.4, rel=1e-12)
