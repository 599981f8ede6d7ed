"""The pump settings in the report, the API and the command line."""

import json
from dataclasses import replace

import pytest
from inputs.test_pump_file import pump_project
from typer.testing import CliRunner

from blendq.api import Result, analyse, demo_path, pump_settings
from blendq.cli import app
from blendq.errors import InputError
from blendq.report.pump_section import pump_section_for

runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return pump_project(tmp_path_factory.mktemp("pumpreport"))


@pytest.fixture(scope="module")
def result(folder):
    return analyse(folder, draws=200, seed=7)


def test_section_in_report_only_with_a_pump(result):
    section = pump_section_for(result.analysis, "US")
    assert section.key == "pump"
    text = " ".join(getattr(b, "text", "") for b in section.blocks)
    assert "Hz" in text and "kWh/1,000 gal" in text and "licensed professional" in text
    demo = replace(result.analysis, project=replace(result.analysis.project,
                                                    folder=demo_path()))
    assert pump_section_for(demo, "US") is None


def test_api_tables_in_display_units(result):
    plan = pump_settings(result)
    seasons = plan.season_table()
    assert list(seasons["season"]) == ["spring", "summer", "autumn"]
    assert "rate [gpm]" in seasons.columns and "static level [ft]" in seasons.columns
    si = pump_settings(Result(result.analysis, "SI"))
    assert "energy [kWh/m3]" in si.energy_table().columns
    us_e, si_e = plan.energy_table(), si.energy_table()
    # kWh per 1,000 gal = kWh per m3 x 3.785411784 (1,000 US gal = 3.785411784 m3)
    assert us_e.iloc[0, 3] == pytest.approx(si_e.iloc[0, 3] * 3.785411784, abs=2e-3)
    assert "Caution" in str(plan)


def test_api_without_pump_names_the_table():
    with pytest.raises(InputError) as err:
        pump_settings(demo_path(), draws=50, seed=1)
    assert err.value.field == "pump"


def test_cli_pump_command(folder):
    out = runner.invoke(app, ["pump", str(folder), "--draws", "200", "--seed", "7"])
    assert out.exit_code == 0, out.output
    assert "recommended setting" in out.output and "Caution:" in out.output
    assert "frequency [Hz]" in out.output and "power [kW]" in out.output
    js = runner.invoke(app, ["pump", str(folder), "--draws", "200", "--seed", "7", "--json"])
    data = json.loads(js.output)
    assert data["cautions"] and len(data["seasons"]) == 3


def test_cli_bad_pump_is_one_line(folder, tmp_path):
    bad = pump_project(tmp_path, 'hazen_williams_c = 120\n')
    out = runner.invoke(app, ["pump", str(bad), "--draws", "50"])
    assert out.exit_code == 2
    assert "pump.roughness" in out.output


def test_cli_without_pump_fails_before_the_fit():
    out = runner.invoke(app, ["pump", str(demo_path())])
    assert out.exit_code == 2 and "field pump" in out.output


def test_section_has_the_energy_chart(result):
    from blendq.report.document import Figure

    section = pump_section_for(result.analysis, "SI")
    figures = [b for b in section.blocks if isinstance(b, Figure)]
    assert len(figures) == 1 and figures[0].png.startswith(b"\x89PNG")


def test_section_states_recommended_energy_against_the_cheapest(result):
    from blendq.report.document import Paragraph

    ps = pump_settings(result).settings
    text = " ".join(b.text for b in pump_section_for(result.analysis, "US").blocks
                    if isinstance(b, Paragraph))
    kgal = 3.785411784  # m3 per 1,000 US gal
    extra = ps.recommended_energy / ps.cheapest_energy - 1.0
    assert (f"Energy at the recommended setting: {ps.recommended_energy * kgal:.3f} "
            f"kWh/1,000 gal; the cheapest compliant setting ({ps.cheapest:.1f} Hz) uses "
            f"{ps.cheapest_energy * kgal:.3f} kWh/1,000 gal: the recommended setting uses "
            f"{extra:.1%} more per volume.") in text
    assert ps.energy["frequency"].min() <= ps.cheapest <= ps.energy["frequency"].max()


def test_section_cannot_lift_in_display_units(tmp_path):
    from blendq.report.document import Paragraph

    folder = pump_project(tmp_path)
    toml = folder / "project.toml"
    toml.write_text(toml.read_text().replace('autumn = "68 ft"', 'autumn = "400 ft"'))
    a = analyse(folder, draws=50, seed=7).analysis
    for units, rate, length in (("US", " gpm", " ft of head"), ("SI-L/s", " L/s", " m of head")):
        (block,) = pump_section_for(a, units).blocks
        assert isinstance(block, Paragraph) and "No drive setting: at the autumn static level" \
            in block.text
        assert "cannot lift the water" in block.text and length in block.text
        assert "m³/d" not in block.text and "m3/d" not in block.text
        assert rate in block.text or "shutoff" in block.text
