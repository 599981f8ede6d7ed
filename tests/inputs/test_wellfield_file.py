"""The wellfield file: the demo reads in base units; every bad input is one located line."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from blendq.errors import InputError
from blendq.inputs.wellfield_file import read_wellfield

DEMO = Path(__file__).resolve().parents[2] / "blendq" / "data" / "demo"
EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "wellfield"

# exact conversion factors: 1 US gallon = 3.785411784 L, 1 ft = 0.3048 m (NIST Handbook 44,
# Appendix C, 2024)
GPM = 3.785411784e-3 * 1440.0  # m3/d
FT = 0.3048

GOOD = """
[wellfield]
name = "Test field"
display_units = "SI"
margin = 0.8
probability = 0.9
seed = 7

[[entry_points]]
name = "East"
demand = "500 gpm"

[[entry_points]]
name = "West"
demand = "20 L/s"

[[wells]]
name = "A"
project = "a"
entry_point = "East"
x = "100 ft"
y = "-50 m"
rate_max = "400 gpm"

[[wells]]
name = "B"
project = "b"
entry_point = "West"
in_service = false

[[sources]]
name = "Bought"
entry_point = "West"
max_rate = "100 gpm"
nitrate = "10 mg/L as NO3"
arsenic = "2 ug/L"

[interference]
transmissivity = "1000 ft2/d"
radius_of_influence = "2000 ft"
"""


@pytest.fixture
def field(tmp_path):
    for name in ("a", "b"):
        (tmp_path / name).mkdir()
        shutil.copy(DEMO / "project.toml", tmp_path / name / "project.toml")
    return tmp_path


def _write(folder: Path, text: str) -> Path:
    path = folder / "wellfield.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_reads_a_wellfield_in_base_units(field):
    wf = read_wellfield(_write(field, GOOD))
    assert (wf.name, wf.display_units, wf.margin, wf.probability, wf.seed) == \
        ("Test field", "SI", 0.8, 0.9, 7)
    a, b = wf.wells
    assert a.project == (field / "a").resolve() and a.entry_point == "East"
    assert a.x == pytest.approx(100 * FT, rel=1e-12) and a.y == pytest.approx(-50.0, rel=1e-12)
    assert a.rate_max == pytest.approx(400 * GPM, rel=1e-12) and a.rate_min is None
    assert b.in_service is False and b.x is None
    east, west = wf.entry_points
    assert east.demand == pytest.approx(500 * GPM, rel=1e-12) and east.wells == ("A",)
    assert west.demand == pytest.approx(20 * 86.4, rel=1e-12) and west.wells == ("B",)
    (src,) = wf.sources
    assert src.rate is None and src.max_rate == pytest.approx(100 * GPM, rel=1e-12)
    # nitrate 10 mg/L as NO3 is 10 x 14.0067 / 62.0049 mg/L as N (IUPAC 2021 atomic weights)
    assert src.concentrations["nitrate"] == pytest.approx(10 * 14.0067 / 62.0049, rel=1e-4)
    assert src.concentrations["arsenic"] == pytest.approx(0.002, rel=1e-12)
    assert wf.interference.transmissivity == pytest.approx(1000 * FT**2, rel=1e-12)
    assert wf.interference.radius_of_influence == pytest.approx(2000 * FT, rel=1e-12)
    assert wf.interference.time is None


def test_the_folder_is_enough_and_defaults_apply(field):
    _write(field, GOOD.replace("margin = 0.8\n", "").replace("seed = 7\n", ""))
    wf = read_wellfield(field)
    assert wf.margin == 0.9 and wf.seed is None


def test_the_demo_wellfield_reads():
    wf = read_wellfield(EXAMPLE / "wellfield.toml")
    assert [w.name for w in wf.wells] == ["TH-2", "TH-5", "TH-7", "TH-9"]
    assert [ep.name for ep in wf.entry_points] == ["North plant", "South plant"]
    assert all(w.x is not None for w in wf.wells) and wf.interference.time == 180.0


@pytest.mark.parametrize(("change", "fragments"), [
    (("seed = 7", "seed = 7\ncolour = 1"), ["wellfield.toml", "wellfield.colour",
                                             "not a key"]),
    (("[interference]", "[pumps]\n[interference]"), ["wellfield.toml", "pumps", "not a table"]),
    (('name = "B"', 'name = "A"'), ["wells[2].name", '"A" is listed twice', "wells[1]"]),
    (('project = "b"', 'project = "nowhere"'), ["wells[2].project", "nowhere",
                                                "holds no project.toml"]),
    (('project = "b"', 'project = "a"'), ["wells[2].project", "already the project of wells[1]"]),
    (('entry_point = "West"\nin_service', 'entry_point = "East"\nin_service'),
     ["entry_points[2].name", 'no [[wells]] feeds entry point "West"']),
    (('entry_point = "East"', 'entry_point = "North"'), ["wells[1].entry_point", '"North"',
                                                         "East, West"]),
    (('x = "100 ft"', 'x = "100 gpm"'), ["wells[1].x", "100 gpm"]),
    (('x = "100 ft"', "x = 100"), ["wells[1].x", "no unit"]),
    (('x = "100 ft"\n', ""), ["wells[1].x", "both x and y"]),
    (('demand = "500 gpm"', 'demand = "lots"'), ["entry_points[1].demand", "lots"]),
    (('rate_max = "400 gpm"', 'rate_max = "400 gpm"\nrate_min = "500 gpm"'),
     ["wells[1].rate_max", "not above rate_min"]),
    (("in_service = false", 'in_service = "no"'), ["wells[2].in_service", "true or false"]),
    (('max_rate = "100 gpm"', 'max_rate = "100 gpm"\nrate = "5 gpm"'),
     ["sources[1].rate", "either rate"]),
    (('arsenic = "2 ug/L"', 'arsenic = "2 ft"'), ["sources[1].arsenic", "2 ft"]),
    (('radius_of_influence = "2000 ft"', 'time = "30 d"'), ["interference.storativity",
                                                            "is missing"]),
    (("probability = 0.9", "probability = 1.0"), ["wellfield.probability", "out of range"]),
    (('display_units = "SI"', 'display_units = "metric-ish"'), ["wellfield.display_units"]),
])
def test_bad_input_is_one_located_line(field, change, fragments):
    old, new = change
    assert old in GOOD
    with pytest.raises(InputError) as err:
        read_wellfield(_write(field, GOOD.replace(old, new, 1)))
    text = str(err.value)
    assert "\n" not in text and text.startswith("wellfield.toml")
    for fragment in fragments:
        assert fragment in text


@pytest.mark.parametrize(("text", "fragment"), [
    ("", "the [wellfield] table is missing"),
    ('[wellfield]\nname = "x"\n', "no [[entry_points]] given"),
    ('[wellfield]\nname = "x"\n[[entry_points]]\nname = "E"\ndemand = "1 gpm"\n',
     "no [[wells]] given"),
    ("[wellfield\n", "not valid TOML"),
])
def test_missing_tables(tmp_path, text, fragment):
    with pytest.raises(InputError, match="^wellfield.toml") as err:
        read_wellfield(_write(tmp_path, text))
    assert fragment in str(err.value)


def test_a_missing_file_is_named(tmp_path):
    with pytest.raises(InputError, match="wellfield file not found"):
        read_wellfield(tmp_path)
