"""Odd-but-valid and odd-and-invalid input files (tests/data/odd), read by the loader and by
``blendq check``: each case is read correctly or rejected with one located line, exit code 2.

The malformed corpus (tests/data/malformed) is run through the command line here too; its
loader checks live in tests/test_loader.py.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from blendq.cli import app
from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.tables import parse_number
from blendq.review.findings import review

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

DATA = Path(__file__).parent / "data"
US = DATA / "projects" / "quillmarsh_us"
ODD = DATA / "odd"
MALFORMED = DATA / "malformed"
ODD_CASES = tomllib.loads((ODD / "cases.toml").read_text(encoding="utf-8"))
MALFORMED_CASES = tomllib.loads((MALFORMED / "cases.toml").read_text(encoding="utf-8"))

runner = CliRunner()


def _laid_over(corpus: Path, name: str, case: dict, tmp_path: Path) -> Path:
    target = tmp_path / "project"
    shutil.copytree(US, target)
    for rel in case.get("remove", []):
        (target / rel).unlink()
    shutil.copytree(corpus / name, target, dirs_exist_ok=True)
    return target


@pytest.fixture(scope="module")
def good():
    return load_project(US)


def test_corpus_is_complete_and_large_enough():
    folders = {p.name for p in ODD.iterdir() if p.is_dir()}
    assert folders == set(ODD_CASES)
    assert {c["outcome"] for c in ODD_CASES.values()} == {"read", "rejected"}
    assert len(ODD_CASES) + len(MALFORMED_CASES) >= 40
    read = [n for n, c in ODD_CASES.items() if c["outcome"] == "read"]
    assert all(n.startswith("ok_") for n in read)
    assert all(n.startswith("bad_") for n in set(ODD_CASES) - set(read))


READ = sorted(n for n, c in ODD_CASES.items() if c["outcome"] == "read")
REJECTED = sorted(n for n, c in ODD_CASES.items() if c["outcome"] == "rejected")


@pytest.mark.parametrize("name", READ)
def test_odd_but_valid_input_is_read(name, tmp_path, good):
    case = ODD_CASES[name]
    project = load_project(_laid_over(ODD, name, case, tmp_path))
    for table in case.get("same_as_us", []):
        got, want = getattr(project, table), getattr(good, table)
        pd.testing.assert_frame_equal(got.drop(columns="source_row"),
                                      want.drop(columns="source_row"), rtol=1e-12, atol=0.0)
    if "source_rows" in case:
        assert list(project.steps["source_row"]) == case["source_rows"]
    if "well_name" in case:
        assert project.well.name == case["well_name"]
    if "zone_names" in case:
        assert project.zone_names == case["zone_names"]
    if "note" in case:
        assert any(case["note"] in note for note in project.notes), project.notes
    if "values" in case:
        spec = case["values"]
        table = getattr(project, spec["table"])
        assert list(table["sample_id"]) == spec["sample_id"]
        got = table[spec["column"]].to_numpy(float)
        want = np.array(spec["expected"], float)
        # rtol 1e-4: blendq's molar masses use abridged atomic weights (5 digits)
        np.testing.assert_allclose(got, want, rtol=1e-4, atol=0.0)  # NaN matches NaN
    assert case.keys() - {"outcome"}, "a read case must check something"


@pytest.mark.parametrize("name", REJECTED)
def test_odd_and_invalid_input_is_located(name, tmp_path):
    case = ODD_CASES[name]
    with pytest.raises(InputError) as info:
        project = load_project(_laid_over(ODD, name, case, tmp_path))
        assert case.get("stage") == "check", "the loader should have refused it"
        review(project)
    err = info.value
    assert (err.file, err.row, err.field) == (case["file"], case.get("row"), case.get("field"))
    assert case["text"] in err.message
    message = str(err)
    assert "\n" not in message and "\r" not in message and message.startswith(case["file"])
    if "row" in case:
        assert f"row {case['row']}" in message


ALL_CASES = [("odd", n) for n in sorted(ODD_CASES)] + [("malformed", n)
                                                      for n in sorted(MALFORMED_CASES)]


@pytest.mark.parametrize(("corpus", "name"), ALL_CASES, ids=[f"{c}-{n}" for c, n in ALL_CASES])
def test_check_command_on_corpus(corpus, name, tmp_path):
    folder, cases = (ODD, ODD_CASES) if corpus == "odd" else (MALFORMED, MALFORMED_CASES)
    case = cases[name]
    result = runner.invoke(app, ["check", str(_laid_over(folder, name, case, tmp_path))])
    assert "Traceback" not in result.output
    if case.get("outcome") == "read":
        assert result.exit_code in (0, 1), result.output
        assert "blendq: error:" not in result.output
        for rule in case.get("check_rules", []):
            assert f"] {rule}:" in result.output, result.output
        if "note" in case:
            assert case["note"] in result.output, result.output
        return
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert lines[0].startswith(f"blendq: error: {case['file']}")
    if "row" in case:
        assert f"row {case['row']}" in lines[0]
    if "field" in case:
        assert case["field"] in lines[0]


# ----------------------------------------------------------------------------- numbers
@pytest.mark.parametrize(("text", "comma", "expected"), [
    ("1200", False, 1200.0),
    ("12,5", True, 12.5),
    ("1,200", True, 1.2),  # semicolon file: the comma is the decimal mark
    ("0.250", True, 0.25),  # a leading zero cannot start a thousands group
    ("12.75", True, 12.75),  # a decimal point that is not three grouped digits
    ("1e308", False, 1e308),
    (" -0.44 ", False, -0.44),
])
def test_numbers_read(text, comma, expected):
    assert parse_number(text, decimal_comma=comma) == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(("text", "comma", "fragment"), [
    ("1,200", False, "without thousands separators"),
    ("1,200.5", False, "without thousands separators"),
    ("1.200,5", True, "without thousands separators"),
    ("1.250", True, "ambiguous in a file with decimal commas"),
    ("12.500.000", True, "ambiguous"),
    ("1e309", False, "too large"),
    ("-1e400", False, "too large"),
    ("NaN", False, "not a finite number"),
    ("-Infinity", True, "not a finite number"),
    ("1 200", False, "is not a number"),
])
def test_numbers_rejected(text, comma, fragment):
    with pytest.raises(InputError, match=fragment):
        parse_number(text, decimal_comma=comma)


def test_huge_values_stay_finite(tmp_path):
    """1e308 in a unit whose factor to base units is above one overflows: it is rejected,
    never read as inf; below one it is read."""
    target = tmp_path / "p"
    shutil.copytree(US, target)
    (target / "levels.csv").write_text("time,level [m]\n2025-04-08 07:50,1e308\n",
                                       encoding="utf-8")
    assert load_project(target).levels["level"].iloc[0] == 1e308
    (target / "levels.csv").write_text("time,level [ft]\n2025-04-08 07:50,1e308\n",
                                       encoding="utf-8")
    assert math.isfinite(load_project(target).levels["level"].iloc[0])  # x 0.3048
    (target / "levels.csv").write_text("time,level [km]\n2025-04-08 07:50,1e308\n",
                                       encoding="utf-8")
    with pytest.raises(InputError, match="too large") as info:
        load_project(target)
    assert (info.value.row, info.value.field) == (1, "level")


def test_multi_line_cell_gives_one_line_error(tmp_path):
    target = tmp_path / "p"
    shutil.copytree(US, target)
    (target / "steps.csv").write_text('step,rate [gpm]\nS1,"150\n160"\nS2,250\nS3,350\nS4,450\n',
                                      encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_project(target)
    assert "\n" not in str(info.value) and "150\\n160" in str(info.value)


# ----------------------------------------------------------------------------- step order
def test_steps_out_of_time_order_give_the_coefficients_of_the_sorted_file(tmp_path):
    """Shuffled steps without recovered_before: the first step in time starts from rest, so
    the step-drawdown fit matches the time-ordered file."""
    from blendq.well.steptest import analyse_step_test

    name = "ok_steps_out_of_time_order_default_recovery"
    shuffled = load_project(_laid_over(ODD, name, ODD_CASES[name], tmp_path / "a"))
    ordered_dir = tmp_path / "b"
    shutil.copytree(US, ordered_dir)
    lines = (ODD / name / "steps.csv").read_text(encoding="utf-8").splitlines()
    rows = sorted(lines[1:], key=lambda r: r.split(",")[2])
    (ordered_dir / "steps.csv").write_text("\n".join([lines[0]] + rows) + "\n", encoding="utf-8")
    ordered = load_project(ordered_dir)
    static = 99.0 * 0.3048  # [m], a level above every pumping level of the test
    for method in ("end of step", "auto"):
        a = analyse_step_test(shuffled.steps, static, shuffled.levels, method=method)
        b = analyse_step_test(ordered.steps, static, ordered.levels, method=method)
        np.testing.assert_allclose(a.jacob.values, b.jacob.values, rtol=1e-12, atol=0.0)
    assert list(shuffled.steps["recovered_before"]) == [True, False, False, False]


# ----------------------------------------------------------------------------- zone skin
def test_skin_that_makes_a_conductance_undefined_names_the_zone(tmp_path):
    from blendq.well.model import property_conductance

    target = tmp_path / "p"
    shutil.copytree(US, target)
    toml = (target / "project.toml").read_text(encoding="utf-8")
    # Cooper-Jacob: ln(2.25 T t / (r_w^2 S)) + 2 s <= 0 for s = -30 at any test time
    (target / "project.toml").write_text(toml.replace("skin = 2.5", "skin = -30"),
                                         encoding="utf-8")
    project = load_project(target)
    with pytest.raises(InputError, match="makes the conductance of the zone undefined") as info:
        property_conductance(project, time=1.0, model="transient")
    assert (info.value.file, info.value.field) == ("project.toml", "zones[2].skin")
    result = runner.invoke(app, ["inflow", str(target)])
    assert result.exit_code == 2 and "zones[2].skin" in result.output


# ----------------------------------------------------------------------------- charts
def test_names_with_dollars_and_emoji_report_without_warnings(tmp_path):
    """Zone names with dollar signs are drawn as written (not as mathematics) and emoji that
    the chart font lacks give no warning: the report run prints nothing on stderr."""
    import subprocess
    import sys

    name = "ok_names_with_dollars_and_emoji"
    folder = _laid_over(ODD, name, ODD_CASES[name], tmp_path)
    toml = (folder / "project.toml").read_text(encoding="utf-8")
    (folder / "project.toml").write_text(toml.replace("draws = 500", "draws = 20"),
                                         encoding="utf-8")
    run = subprocess.run([sys.executable, "-m", "blendq", "report", str(folder), "--out",
                          str(tmp_path / "out")], capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr
    assert run.stderr.strip() == "", run.stderr
    assert (tmp_path / "out" / "report.pdf").is_file()
