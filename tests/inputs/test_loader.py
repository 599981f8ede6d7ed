"""Tests of blendq.inputs.loader: the good test projects, the malformed corpus, and read-only loading."""

from __future__ import annotations

import hashlib
import math
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from molmass import Formula

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.project import TABLE_COLUMNS, Settings

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

DATA = Path(__file__).parents[1] / "data"
US = DATA / "projects" / "quillmarsh_us"
SI = DATA / "projects" / "quillmarsh_si"
MALFORMED = DATA / "malformed"

# Exact unit definitions (NIST SP 811, appendix B; the 1959 international yard and pound
# agreement): 1 ft = 0.3048 m, 1 in = 0.0254 m, US gallon = 231 in^3 exactly.
FT = 0.3048
INCH = 0.0254
GALLON = 231 * INCH**3  # = 0.003785411784 m^3
GPM = GALLON * 1440.0  # m^3/d per gpm
LPS = 1e-3 * 86400.0  # m^3/d per L/s


@pytest.fixture(scope="module")
def us():
    return load_project(US)


def test_gallon_definition():
    # NIST SP 811 B.8: gallon (US liquid) = 3.785 411 784 E-03 m^3, exact
    assert GALLON == pytest.approx(0.003785411784, rel=1e-15)
    assert GPM / 1440.0 == pytest.approx(0.003785411784, rel=1e-15)  # m^3/min per gpm


def test_well(us):
    w = us.well
    assert us.name == "Quillmarsh 3 step test, April 2025"
    assert w.name == "Quillmarsh 3"
    assert w.well_radius == pytest.approx(6 * INCH, rel=1e-12)
    assert w.pump_intake_depth == pytest.approx(170 * FT, rel=1e-12)
    assert w.submergence == pytest.approx(15 * FT, rel=1e-12)
    assert w.rate_min == pytest.approx(150 * GPM, rel=1e-12)
    assert w.rate_max == pytest.approx(600 * GPM, rel=1e-12)
    assert w.demand == pytest.approx(400 * GPM, rel=1e-12)
    # 2.5 s^2/ft^5 in d^2/m^5: 1 s = 1/86400 d
    assert w.well_loss == pytest.approx(2.5 / 86400**2 / FT**5, rel=1e-12)
    # 1 s^2/ft^5 = (1/60 min)^2 / (0.3048 m)^5 = 0.1056 min^2/m^5 (NIST SP 811 foot)
    assert w.well_loss / 2.5 * 1440**2 == pytest.approx(0.1056, rel=5e-4)
    assert w.keep_above_screen is True
    assert w.radius_of_influence == pytest.approx(1500 * FT, rel=1e-12)
    assert w.location == "Quillmarsh well field (invented)"


def test_zones(us):
    assert us.zone_names == ["Upper", "Middle", "Lower"]
    up, mid, low = us.zones
    assert (up.top, up.bottom) == pytest.approx((180 * FT, 230 * FT), rel=1e-12)
    assert up.static_level == pytest.approx(95 * FT, rel=1e-12)
    assert up.transmissivity == pytest.approx(1500 * FT**2, rel=1e-12)
    assert up.storativity == 1e-4 and up.skin == 0.0 and up.conductivity is None
    assert mid.conductivity == pytest.approx(12 * FT, rel=1e-12)
    assert mid.zone_transmissivity == pytest.approx(12 * FT * 60 * FT, rel=1e-12)
    assert mid.skin == 2.5
    assert low.transmissivity == 200.0
    assert low.static_level == pytest.approx(32.9184, rel=1e-12)  # = 108 ft, written in m
    assert low.nonlinear_loss == pytest.approx(0.5 / 86400**2 / FT**5, rel=1e-12)
    assert np.all(np.diff(us.zone_top) > 0)


def test_settings_limits_scenarios(us):
    s = us.settings
    assert s.limit_sets == ("US-EPA", "WHO")
    assert s.display_units == "US"
    assert (s.margin, s.exceedance_probability, s.interval) == (0.8, 0.05, 0.9)
    assert s.horizon == pytest.approx(10 * 365.25, rel=1e-12)  # pint "year" is the Julian year
    assert s.rate_grid_points == 61 and s.draws == 500 and s.seed == 7
    assert s.rate_grid_max == pytest.approx(700 * GPM, rel=1e-12)
    assert s.conductance_model == "transient"
    assert s.qa == {"duplicate_rpd_limit": 20, "field_readings": 5}
    assert s.level_error == Settings().level_error  # not given: dataclass default
    authorities = [lim.authority for lim in us.limits]
    assert authorities[-1] == "Quillmarsh Water District"
    assert {"US-EPA", "WHO"} <= set(authorities)
    own = us.limits[-1]
    assert (own.analyte, own.value, own.unit, own.basis) == ("nitrate", 8.0, "mg/L", "N")
    assert own.canonical() == pytest.approx(8.0, rel=1e-12)
    assert us.limits_for("nitrate")[0] is own  # strictest first
    assert [sc["name"] for sc in us.scenarios] == ["seal lower zone", "blend with spring"]
    assert us.scenarios[0]["seal"] == ["Lower"]


def test_steps(us):
    steps = us.steps
    assert list(steps.columns) == TABLE_COLUMNS["steps"]
    assert list(steps["step"]) == ["S1", "S2", "S3", "S4"]
    np.testing.assert_allclose(steps["rate"], np.array([150, 250, 350, 450]) * GPM, rtol=1e-12)
    np.testing.assert_allclose(steps["duration"], 120 / 1440, rtol=1e-12)
    assert steps["end"].iloc[0] == pd.Timestamp("2025-04-08 10:00")
    np.testing.assert_allclose(steps["pumping_level"],
                               np.array([121.4, 129.8, 139.1, 149.6]) * FT, rtol=1e-12)
    assert list(steps["recovered_before"]) == [True, False, False, False]
    assert list(steps["source_row"]) == [1, 2, 3, 4]


def test_samples(us):
    s = us.samples.set_index(["sample_id", "analyte"])
    assert list(us.samples.columns) == TABLE_COLUMNS["samples"]
    # nitrate as NO3 -> as N by molar masses from the molmass library (independent of blendq)
    no3_to_n = Formula("N").mass / Formula("NO3").mass
    assert s.loc[("QW3-S1", "nitrate"), "value"] == pytest.approx(31.0 * no3_to_n, rel=1e-4)
    # National Research Council (1995): 1 mg/L NO3-N = 4.429 mg/L NO3
    assert s.loc[("QW3-S4", "nitrate"), "value"] == pytest.approx(40.9 / 4.429, rel=1e-3)
    assert s.loc[("QW3-S1", "nitrate"), "uncertainty"] == pytest.approx(
        0.05 * 31.0 * no3_to_n, rel=1e-4)  # "5%" of the reported value
    assert s.loc[("QW3-S1", "nitrate"), "detection_limit"] == pytest.approx(0.1 * no3_to_n,
                                                                            rel=1e-4)
    assert s.loc[("QW3-S1", "arsenic"), "value"] == pytest.approx(0.0061, rel=1e-12)
    assert s.loc[("QW3-S1", "arsenic"), "uncertainty"] == pytest.approx(0.0004, rel=1e-12)
    # non-detect written "<0.05" (mg/L as N)
    nitrite = s.loc[("QW3-S1", "nitrite")]
    assert nitrite["nondetect"] and math.isnan(nitrite["value"])
    assert nitrite["detection_limit"] == pytest.approx(0.05, rel=1e-12)
    assert nitrite["reported_value"] == 0.05 and nitrite["qualifier"] == "U"
    # non-detect flagged in the nondetect column, limit in detection_limit (1.0 ug/L)
    uranium = s.loc[("QW3-S4", "uranium")]
    assert uranium["nondetect"] and math.isnan(uranium["value"])
    assert uranium["detection_limit"] == pytest.approx(0.001, rel=1e-12)
    # field duplicate reported as N
    dup = s.loc[("QW3-S3-D", "nitrate")]
    assert dup["duplicate_of"] == "QW3-S3" and dup["value"] == pytest.approx(8.49, rel=1e-12)
    assert (dup["reported_unit"], dup["reported_basis"]) == ("mg/L", "N")
    # sample taken inside the well at 335 ft; discharge samples have NaN depth
    assert s.loc[("QW3-S3-Z", "nitrate"), "depth"] == pytest.approx(335 * FT, rel=1e-12)
    assert math.isnan(s.loc[("QW3-S3", "nitrate"), "depth"])
    first = s.loc[("QW3-S1", "nitrate")]
    assert (first["reported_value"], first["reported_unit"], first["reported_basis"]) == (
        31.0, "mg/L", "as NO3")
    assert first["sampled_at"] == pd.Timestamp("2025-04-08 09:55")
    # a blank line in the file counts as a row: QW3-S3 is on the 7th line below the header
    assert s.loc[("QW3-S3", "nitrate"), "source_row"] == 7
    assert us.analytes() == ["nitrate", "arsenic", "nitrite", "uranium"]


def test_flowlogs_levels_field(us):
    logs = us.flowlogs
    assert list(logs.columns) == TABLE_COLUMNS["flowlogs"]
    ambient = logs[logs["log"] == "ambient"]
    pumped = logs[logs["log"] == "pumped-S3"]
    assert (ambient["rate"] == 0).all()
    np.testing.assert_allclose(pumped["rate"], 350 * GPM, rtol=1e-12)  # from step S3
    np.testing.assert_allclose(pumped["upward_flow"], np.array([22.1, 12.9, 7.6, 0]) * LPS,
                               rtol=1e-12)
    np.testing.assert_allclose(ambient["depth"], np.array([170, 245, 335, 420]) * FT,
                               rtol=1e-12)
    assert list(us.levels.columns) == TABLE_COLUMNS["levels"]
    assert us.levels["level"].iloc[0] == pytest.approx(96.2 * FT, rel=1e-12)
    f = us.field_readings
    assert list(f.columns) == TABLE_COLUMNS["field"]
    assert len(f) == 7 and list(f["step"].unique()) == ["S1", "S2"]
    assert f["specific_conductance"].iloc[0] == 612.0 and f["ph"].iloc[-1] == 7.36
    assert us.files == {"project": "project.toml", "steps": "steps.csv",
                        "samples": "lab/samples.csv", "flowlogs": "flowlogs.csv",
                        "levels": "levels.csv", "field": "field.csv"}


def test_si_project_matches_us(us):
    """The same well written in SI, semicolon-delimited with decimal commas, a byte-order mark,
    CRLF line ends and blank lines, loads to the same base values (SI file rounded to 6 digits)."""
    si = load_project(SI)
    for key in ("well_radius", "pump_intake_depth", "submergence", "rate_min", "rate_max",
                "demand", "well_loss", "radius_of_influence"):
        assert getattr(si.well, key) == pytest.approx(getattr(us.well, key), rel=1e-5), key
    for a, b in zip(si.zones, us.zones, strict=True):
        for key in ("top", "bottom", "static_level", "zone_transmissivity", "nonlinear_loss"):
            assert getattr(a, key) == pytest.approx(getattr(b, key), rel=1e-5), key
    for col in ("rate", "duration", "pumping_level"):
        np.testing.assert_allclose(si.steps[col], us.steps[col], rtol=1e-5)
    assert list(si.steps["source_row"]) == [1, 2, 4, 5]  # blank line after S2
    np.testing.assert_allclose(si.flowlogs[["rate", "depth", "upward_flow"]],
                               us.flowlogs[["rate", "depth", "upward_flow"]], rtol=1e-5)
    cols = ["value", "detection_limit", "uncertainty", "depth"]
    np.testing.assert_allclose(si.samples[cols], us.samples[cols], rtol=1e-5)
    assert si.settings.limit_sets == ("EU",)


def test_project_file_path_or_folder(tmp_path):
    target = tmp_path / "p"
    shutil.copytree(US, target)
    (target / "project.toml").rename(target / "well3.toml")
    project = load_project(target / "well3.toml")
    assert project.files["project"] == "well3.toml"
    assert len(project.steps) == 4
    with pytest.raises(InputError, match="project file not found"):
        load_project(target)


def _checksums(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.parametrize("folder", [US, SI], ids=["us", "si"])
def test_loading_changes_no_file(folder):
    before = _checksums(folder)
    load_project(folder)
    assert _checksums(folder) == before  # same files, same bytes, nothing added


def test_minimal_project_defaults(tmp_path):
    (tmp_path / "project.toml").write_text(
        '[project]\nname = "m"\n[well]\nname = "w"\nwell_radius = "0.1 m"\n'
        'pump_intake_depth = "30 m"\n[[zones]]\nname = "z"\ntop = "40 m"\nbottom = "50 m"\n'
        '[tables]\nsteps = "s.csv"\n', encoding="utf-8")
    (tmp_path / "s.csv").write_text("step,rate [L/s]\n1,10\n", encoding="utf-8")
    p = load_project(tmp_path)
    assert p.settings == Settings()
    assert p.well.rate_max == math.inf and p.well.demand is None
    assert [lim.authority for lim in p.limits] == ["US-EPA"] * len(p.limits)
    assert p.steps["rate"].iloc[0] == pytest.approx(10 * LPS, rel=1e-12)
    assert p.steps["recovered_before"].iloc[0]
    assert p.samples.empty and p.flowlogs.empty and p.field_readings.empty


def test_xlsx_table_reads_like_csv(tmp_path, us):
    openpyxl = pytest.importorskip("openpyxl")
    target = tmp_path / "p"
    shutil.copytree(US, target)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["step", "rate [gpm]", "start", "duration [min]", "pumping_level [ft]"])
    for i, (q, level) in enumerate([(150, 121.4), (250, 129.8), (350, 139.1), (450, 149.6)]):
        sheet.append([f"S{i + 1}", q, pd.Timestamp(f"2025-04-08 {8 + 2 * i:02d}:00").to_pydatetime(),
                      120, level])
    book.save(target / "steps.xlsx")
    toml = (target / "project.toml").read_text(encoding="utf-8")
    (target / "project.toml").write_text(toml.replace('"steps.csv"', '"steps.xlsx"'),
                                         encoding="utf-8")
    project = load_project(target)
    # the same steps; rows keep the spreadsheet's numbers (header on row 1: one more than CSV)
    pd.testing.assert_frame_equal(project.steps.drop(columns="source_row"),
                                  us.steps.drop(columns="source_row"))
    np.testing.assert_array_equal(project.steps["source_row"], us.steps["source_row"] + 1)


def _lab_workbook(target: Path, bad_row: int | None = None) -> None:
    """lab/samples.csv copied into lab/lab.xlsx behind a cover sheet (worksheet "Results")."""
    import csv

    openpyxl = pytest.importorskip("openpyxl")
    with open(target / "lab" / "samples.csv", encoding="utf-8", newline="") as f:
        lines = list(csv.reader(f))
    book = openpyxl.Workbook()
    cover = book.active
    cover.title = "Cover"
    cover.append(["Laboratory report for the Quillmarsh test well (invented)"])
    results = book.create_sheet("Results")
    for i, cells in enumerate(lines, start=1):
        if i == bad_row:
            cells = [*cells[:3], "six", *cells[4:]]
        results.append(cells)
    book.save(target / "lab" / "lab.xlsx")


def test_xlsx_worksheet_named_in_tables(tmp_path, us):
    target = tmp_path / "p"
    shutil.copytree(US, target)
    _lab_workbook(target)
    toml = (target / "project.toml").read_text(encoding="utf-8")
    named = toml.replace('samples = "lab/samples.csv"',
                         'samples = { file = "lab/lab.xlsx", sheet = "Results" }')
    (target / "project.toml").write_text(named, encoding="utf-8")
    project = load_project(target)
    # the same results; rows numbered as the spreadsheet shows them (one more than in CSV)
    pd.testing.assert_frame_equal(project.samples.drop(columns="source_row"),
                                  us.samples.drop(columns="source_row"))
    np.testing.assert_array_equal(project.samples["source_row"], us.samples["source_row"] + 1)
    assert project.files["samples"] == "lab/lab.xlsx (sheet Results)"
    # a bad cell on sheet row 5 is reported on row 5 of that worksheet
    _lab_workbook(target, bad_row=5)
    with pytest.raises(InputError) as info:
        load_project(target)
    assert str(info.value).startswith("lab/lab.xlsx (sheet Results) row 5, column value:")
    # without the worksheet the cover sheet is read, and the message says which sheet to name
    (target / "project.toml").write_text(
        toml.replace('samples = "lab/samples.csv"', 'samples = "lab/lab.xlsx"'), encoding="utf-8")
    with pytest.raises(InputError, match='samples = { file = "lab/lab.xlsx", sheet = "Results" }'):
        load_project(target)


@pytest.mark.parametrize(("entry", "field", "fragment"), [
    ('{ file = "lab/samples.csv", sheet = "Results" }', "tables.samples", "not an .xlsx"),
    ('{ file = "lab/lab.xlsx", tab = "Results" }', "tables.samples.tab", "not a key"),
    ('{ sheet = "Results" }', "tables.samples.file", "missing"),
    ('{ file = "lab/lab.xlsx", sheet = "" }', "tables.samples.sheet", "is empty"),
])
def test_bad_worksheet_entries_name_the_key(tmp_path, entry, field, fragment):
    target = tmp_path / "p"
    shutil.copytree(US, target)
    _lab_workbook(target)
    toml = (target / "project.toml").read_text(encoding="utf-8")
    (target / "project.toml").write_text(
        toml.replace('samples = "lab/samples.csv"', f"samples = {entry}"), encoding="utf-8")
    with pytest.raises(InputError, match=fragment) as info:
        load_project(target)
    assert info.value.field == field


# ----------------------------------------------------------------------------- malformed corpus
CASES = tomllib.loads((MALFORMED / "cases.toml").read_text(encoding="utf-8"))


def test_corpus_is_complete():
    folders = {p.name for p in MALFORMED.iterdir() if p.is_dir()}
    assert folders == set(CASES)
    assert len(CASES) >= 25


@pytest.mark.parametrize("name", sorted(CASES))
def test_malformed_input_is_located(name, tmp_path):
    case = CASES[name]
    target = tmp_path / "project"
    shutil.copytree(US, target)
    for rel in case.get("remove", []):
        (target / rel).unlink()
    shutil.copytree(MALFORMED / name, target, dirs_exist_ok=True)
    with pytest.raises(InputError) as info:
        load_project(target)
    err = info.value
    assert err.file == case["file"]
    assert err.row == case.get("row")
    assert err.field == case.get("field")
    assert case["text"] in err.message
    message = str(err)
    assert "\n" not in message and message.startswith(case["file"])
    if "row" in case:
        assert f"row {case['row']}" in message


# ----------------------------------------------------------------------------- properties
@settings(max_examples=25)
@given(rates=st.lists(st.floats(0.0, 5000.0, allow_nan=False), min_size=1, max_size=6),
       semicolon=st.booleans())
def test_rates_convert_exactly_for_any_delimiter(rates, semicolon):
    """A gpm rate written with repr() comes back as rate x 5.45099296896 m^3/d, whatever the
    delimiter (a semicolon file uses decimal commas)."""
    sep = ";" if semicolon else ","
    lines = [f"step{sep}rate [gpm]"]
    for i, q in enumerate(rates):
        text = repr(q).replace(".", ",") if semicolon else repr(q)
        lines.append(f"S{i}{sep}{text}")
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        (root / "project.toml").write_text(
            '[project]\nname = "p"\n[well]\nname = "w"\nwell_radius = "0.1 m"\n'
            'pump_intake_depth = "30 m"\n[[zones]]\nname = "z"\ntop = "40 m"\n'
            'bottom = "50 m"\n[tables]\nsteps = "steps.csv"\n', encoding="utf-8")
        (root / "steps.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
        loaded = load_project(root).steps["rate"].to_numpy()
    np.testing.assert_allclose(loaded, np.array(rates) * GPM, rtol=1e-13, atol=0.0)


# ----------------------------------------------------------------------------- sample forms
def _with_samples(tmp_path: Path, text: str):
    target = tmp_path / "p"
    shutil.copytree(US, target)
    (target / "lab" / "samples.csv").write_text(text, encoding="utf-8")
    return load_project(target).samples


def test_basis_in_unit_cell_and_value_header_unit(tmp_path):
    samples = _with_samples(tmp_path, (
        "sample_id,step,analyte,value [mg/L],unit,basis,notes,notes,,\n"
        "a,S1,nitrate,8.0,mg/L as N,,x,y,,\n"
        "b,S1,nitrate,8.0,mg/L as N,NO3-N,,,,\n"  # same basis, other spelling
        "c,S1,arsenic,0.006,,,,,,\n"  # unit from the value header
        "d,S1,chloride,2000,milligram / liter,,,,,\n"))  # the header's unit, other spelling
    np.testing.assert_allclose(samples["value"], [8.0, 8.0, 0.006, 2000.0], rtol=1e-12)
    assert list(samples["reported_basis"].iloc[:2]) == ["N", "NO3-N"]


@pytest.mark.parametrize("unit", ["meq/L", "ug/L", "mg/kg"])
def test_unit_column_that_disagrees_with_value_header(tmp_path, unit):
    with pytest.raises(InputError, match="disagrees with the unit of the value header") as info:
        _with_samples(tmp_path, "sample_id,step,analyte,value [mg/L],unit\n"
                                f"a,S1,chloride,2,mg/L\nb,S1,chloride,2,{unit}\n")
    assert (info.value.file, info.value.row, info.value.field) == ("lab/samples.csv", 2, "unit")


def test_basis_that_disagrees_with_unit_cell(tmp_path):
    with pytest.raises(InputError, match='"as NO3" disagrees with the unit "mg/L as N"') as info:
        _with_samples(tmp_path, "sample_id,step,analyte,value,unit,basis\n"
                                "a,S1,nitrate,8.0,mg/L as N,as NO3\n")
    assert (info.value.row, info.value.field) == (1, "basis")


def test_nondetect_forms_agree(tmp_path):
    samples = _with_samples(tmp_path, (
        "sample_id,step,analyte,value,unit,nondetect,detection_limit\n"
        "a,S1,arsenic,<1,ug/L,,\n"
        "b,S1,arsenic,ND,ug/L,,1\n"
        "c,S1,arsenic,1,ug/L,yes,\n"
        "d,S1,arsenic,,ug/L,true,1\n"))
    assert samples["nondetect"].all() and samples["value"].isna().all()
    np.testing.assert_allclose(samples["detection_limit"], 0.001, rtol=1e-12)
    with pytest.raises(InputError, match='says false but the value is "<1"'):
        _with_samples(tmp_path / "x", "sample_id,step,analyte,value,unit,nondetect\n"
                                      "a,S1,arsenic,<1,ug/L,no\n")
    with pytest.raises(InputError, match="differs from the limit in the value"):
        _with_samples(tmp_path / "y", "sample_id,step,analyte,value,unit,detection_limit\n"
                                      "a,S1,arsenic,<1,ug/L,2\n")


def _samples_with(tmp_path, analyte: str, basis: str):
    import shutil

    folder = tmp_path / "p"
    shutil.copytree(Path(__file__).parents[1] / "data" / "projects" / "quillmarsh_us", folder)
    f = folder / "lab" / "samples.csv"
    lines = f.read_text(encoding="utf-8").splitlines()
    head = lines[0].split(",")
    row = lines[1].split(",")
    row[head.index("analyte")] = analyte
    row[head.index("basis")] = basis
    row[head.index("unit")] = "mg/L"
    lines[1] = ",".join(row)
    f.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return folder


def test_analyte_name_states_the_basis(tmp_path):
    # "NO3-N" is nitrate reported as nitrogen: no basis column needed (NRC 1995 usage)
    p = load_project(_samples_with(tmp_path, "NO3-N", ""))
    first = p.samples.iloc[0]
    assert first["analyte"] == "nitrate"
    assert first["reported_basis"] in ("N", "as N")
    assert first["value"] == pytest.approx(first["reported_value"], rel=1e-12)


def test_analyte_name_and_basis_disagree(tmp_path):
    with pytest.raises(InputError) as err:
        load_project(_samples_with(tmp_path, "NO3-N", "as NO3"))
    text = str(err.value)
    assert "samples.csv" in text and "row 1" in text and "basis" in text
