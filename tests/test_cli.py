"""Tests of the command line (blendq.cli): help, version, the README examples, JSON output,
exit codes and one-line errors for bad input.

The Monte Carlo analysis is the slow part of every command that fits; these tests check the
command line around it, so :func:`blendq.decide.analysis.analyse` is wrapped in a cache keyed by the
project folder, well name, draws, seed and sample use. The analysis is seeded, so a cached
result equals a fresh one; tests/test_pipeline.py and tests/test_report.py run it uncached.
"""

from __future__ import annotations

import hashlib
import json
import re
import shutil
from pathlib import Path

import pytest
from typer.testing import CliRunner

import blendq
import blendq.decide.analysis
from blendq import __version__
from blendq.cli import app

DEMO = Path(blendq.__file__).parent / "data" / "demo"
DRAWS = "200"

# A wide terminal so that rich tables print zone names on one line.
runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})

_real_analyse = blendq.decide.analysis.analyse
_cache: dict = {}


def _cached_analyse(project, draws=None, seed=None, sample_mode="keep", progress=None):
    key = (str(project.folder), project.well.name, draws, seed, sample_mode)
    if key not in _cache:
        _cache[key] = _real_analyse(project, draws=draws, seed=seed, sample_mode=sample_mode,
                                    progress=progress)
    return _cache[key]


@pytest.fixture(autouse=True)
def _fast_analyse(monkeypatch):
    monkeypatch.setattr(blendq.decide.analysis, "analyse", _cached_analyse)


def run(*args: str):
    return runner.invoke(app, [str(a) for a in args])


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _one_error_line(result, *fragments: str) -> str:
    """The single 'blendq: error:' line of a failed command; no traceback anywhere."""
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)
    lines = [ln for ln in result.stderr.splitlines() if ln.startswith("blendq: error:")]
    assert len(lines) == 1, result.stderr
    for frag in fragments:
        assert frag in lines[0], lines[0]
    return lines[0]


# --- help and version ------------------------------------------------------------------------

def test_version():
    r = run("--version")
    assert r.exit_code == 0
    assert r.stdout.strip() == f"blendq {__version__}"


@pytest.mark.parametrize("command", ["", "demo", "new", "check", "inflow", "fit", "window",
                                     "report", "drawdown", "compare"])
def test_help(command):
    r = run(*([command] if command else []), "--help")
    assert r.exit_code == 0, r.output
    assert "Usage" in r.stdout
    if command:
        assert command in r.stdout


def test_help_lists_every_command():
    r = run("--help")
    for name in ("demo", "new", "check", "inflow", "fit", "window", "report", "drawdown", "compare"):
        assert name in r.stdout


# --- README examples -------------------------------------------------------------------------

def test_readme_new_then_check(tmp_path):
    # README: blendq new my-well; blendq check my-well
    folder = tmp_path / "my-well"
    r = run("new", folder)
    assert r.exit_code == 0, r.output
    assert (folder / "project.toml").is_file()
    assert f"blendq check {folder}" in r.stdout
    c = run("check", folder)
    assert c.exit_code in (0, 1), c.output  # findings decide 0 or 1; 2 would be unreadable input
    assert "zones" in c.stdout and "steps" in c.stdout
    j = run("check", folder, "--json")
    assert j.exit_code in (0, 1)
    json.loads(j.stdout)


def test_new_refuses_existing_project(tmp_path):
    folder = tmp_path / "w"
    assert run("new", folder).exit_code == 0
    before = _sha(folder / "project.toml")
    r = run("new", folder)
    assert r.exit_code == 2
    assert "Traceback" not in r.output
    assert _sha(folder / "project.toml") == before


def test_readme_check_demo():
    r = run("check", DEMO)
    assert r.exit_code == 0, r.output  # default --fail-on error; the demo has no error
    assert "4 zones, 5 steps" in r.stdout
    assert "[warning]" in r.stdout


def test_check_fail_on():
    assert run("check", DEMO, "--fail-on", "warning").exit_code == 1  # the demo has warnings
    assert run("check", DEMO, "--fail-on", "error").exit_code == 0
    assert run("check", DEMO, "--fail-on", "info").exit_code == 1
    assert run("check", DEMO, "--fail-on", "bogus").exit_code == 2


def test_check_json():
    r = run("check", DEMO, "--json")
    assert r.exit_code == 0, r.output
    json.loads(r.stdout)


def test_readme_inflow():
    # README: blendq inflow my-well --rates "200,400,600 gpm"
    r = run("inflow", DEMO, "--rates", "200,400,600 gpm")
    assert r.exit_code == 0, r.output
    for zone in ("Upper sand", "Silty sand", "Gravel (clogged)", "Deep sand"):
        assert r.stdout.count(zone) == 3
    assert "Caution:" in r.stdout


def test_inflow_json_shares():
    r = run("inflow", DEMO, "--rates", "200,400,600 gpm", "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    assert data["units"]["rate"] == "gpm"
    rates = sorted({row["rate"] for row in data["rows"]})
    assert rates == pytest.approx([200.0, 400.0, 600.0], rel=1e-9)
    for q in rates:
        rows = [row for row in data["rows"] if row["rate"] == q]
        assert len(rows) == 4
        assert sum(row["share"] for row in rows) == pytest.approx(1.0, abs=1e-9)
        # zone flows add up to the pumping rate (mass balance in the well)
        assert sum(row["zone_flow"] for row in rows) == pytest.approx(q, rel=1e-6)


def test_inflow_rates_without_unit():
    r = run("inflow", DEMO, "--rates", "200,400")
    line = _one_error_line(r, "--rates")
    assert "unit" in line


NO_T = Path(__file__).parent / "data" / "projects" / "quillmarsh_no_transmissivity"


def test_inflow_assumes_no_transmissivity():
    # the zone flows of `inflow` rest on zone properties alone: none given, none assumed
    r = run("inflow", NO_T, "--rates", "200,400 gpm")
    _one_error_line(r, "project.toml", "zones[1].transmissivity", 'zone "Upper"')
    assert r.stdout == ""


def test_fit_without_transmissivity_says_the_flow_logs_decide():
    r = run("fit", NO_T, "--draws", DRAWS)
    assert r.exit_code == 0, r.output
    assert "Note: No zone transmissivity, conductivity or conductance is given" in r.stdout
    assert "start value with no weight" in r.stdout


@pytest.mark.parametrize("command", ["fit", "window"])
def test_no_transmissivity_and_no_flow_log_is_an_input_error(tmp_path, command):
    project = tmp_path / "no-t"
    shutil.copytree(NO_T, project)
    toml = project / "project.toml"
    toml.write_text("\n".join(ln for ln in toml.read_text().splitlines()
                              if not ln.startswith("flowlogs =")) + "\n")
    r = run(command, project, "--draws", DRAWS)
    line = _one_error_line(r, "project.toml", "zones[1].transmissivity", "flow log")
    assert "assumes none" in line


def test_readme_drawdown():
    r = run("drawdown", DEMO)
    assert r.exit_code == 0, r.output
    assert "specific capacity" in r.stdout
    assert "S1" in r.stdout and "S5" in r.stdout
    j = run("drawdown", DEMO, "--json")
    assert j.exit_code == 0
    data = json.loads(j.stdout)
    assert len(data["steps"]) == 5


def test_readme_fit():
    r = run("fit", DEMO, "--draws", DRAWS)
    assert r.exit_code == 0, r.output
    assert "zone water quality" in r.stdout
    for zone in ("Upper sand", "Deep sand"):
        assert zone in r.stdout
    assert "Nitrate" in r.stdout or "nitrate" in r.stdout
    assert "Caution:" in r.stdout


def test_fit_json():
    r = run("fit", DEMO, "--draws", DRAWS, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    assert {"zones", "hydraulics", "diagnostics"} <= set(data)
    assert {row["zone"] for row in data["hydraulics"]} == {
        "Upper sand", "Silty sand", "Gravel (clogged)", "Deep sand"}


def test_readme_window():
    r = run("window", DEMO, "--draws", DRAWS)
    assert r.exit_code == 0, r.output
    lines = r.stdout.splitlines()
    # the demo's temporal CV (5 %, from its monitoring record) leaves a window; at the default
    # 10 % it has none (tests/decide/test_analysis.py)
    assert lines[0].startswith("Operate between")
    assert "recommended rate" in lines[0] and "gpm" in lines[0]
    assert any("lower end set by" in ln for ln in lines)
    # each limit's judged statistic, its rule's source and the temporal CV
    assert any(ln.startswith("  judged: nitrate: single sample with confirmation (40 CFR 141.23; "
                             "secondary), temporal CV 5% (setting), lab error ") for ln in lines)
    assert any(ln.startswith("  judged: arsenic: annual mean of 4 quarterly samples "
                             "(40 CFR 141.23(i); secondary)") for ln in lines)
    assert lines[-1].startswith("Caution: blendq is a planning aid")


def test_window_json_matches_text():
    r = run("window", DEMO, "--draws", DRAWS, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    assert data["draws"] == int(DRAWS)
    lo, hi = data["window_m3_per_day"][0]
    assert lo < data["recommended_rate_m3_per_day"] <= hi
    assert data["compliance_basis"]["nitrate"]["description"] == "single sample with confirmation"
    text = run("window", DEMO, "--draws", DRAWS).stdout.splitlines()[0]
    assert data["decision"] == text


def _demo_with(tmp_path, settings: str, limits: str) -> Path:
    """A copy of the demo with lines added to [settings] and [[limits]] entries appended."""
    project = tmp_path / "demo"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    text = toml.read_text(encoding="utf-8")
    start = text.index("[settings.temporal_cv]")  # the demo's own table; the test sets its own
    end = text.index("\n\n", start)
    text = (text[:start] + text[end + 2:]).replace("[settings]\n", "[settings]\n" + settings, 1)
    toml.write_text(text + "\n" + limits, encoding="utf-8")
    return project


def test_window_with_a_basis_and_temporal_cv_from_the_project_file(tmp_path):
    # arsenic judged on single samples instead of the annual mean, no temporal variability
    project = _demo_with(tmp_path, "temporal_cv = 0.0\n",
                         '[[limits]]\nanalyte = "arsenic"\nauthority = "US-EPA"\n'
                         'compliance = "single sample"\ncompliance_citation = "district rule"\n')
    r = run("window", project, "--draws", DRAWS, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    arsenic = data["compliance_basis"]["arsenic"]
    assert (arsenic["statistic"], arsenic["samples_averaged"]) == ("single sample", 1)
    assert (arsenic["citation"], arsenic["status"]) == ("district rule", "user setting")
    assert data["compliance_basis"]["nitrate"]["temporal_cv"] == 0.0
    assert data["compliance_basis"]["nitrate"]["temporal_cv_source"] == "setting"
    assert data["window_m3_per_day"]  # lab error only: the demo's window opens
    text = run("window", project, "--draws", DRAWS).stdout
    assert "judged: arsenic: single sample (district rule; user setting), temporal CV 0% " \
           "(setting)" in text


def test_window_si_units():
    r = run("window", DEMO, "--draws", DRAWS, "--units", "si")
    assert r.exit_code == 0, r.output
    assert "gpm" not in r.stdout.splitlines()[0]
    assert run("window", DEMO, "--units", "furlongs").exit_code == 2


def test_readme_report(tmp_path):
    # README: blendq report my-well --out my-well-report --units SI
    project = tmp_path / "my-well"
    shutil.copytree(DEMO, project)
    out = tmp_path / "my-well-report"
    r = run("report", project, "--out", out, "--units", "SI", "--draws", DRAWS)
    assert r.exit_code == 0, r.output
    assert r.stdout.startswith("Operate between")
    assert "Report written to" in r.stdout
    assert "Caution:" in r.stdout
    for name in ("report.html", "report.pdf", "summary.json", "tables/zones.csv"):
        assert (out / name).is_file(), name
    # a second run into the folder blendq wrote replaces it
    r2 = run("report", project, "--out", out, "--units", "SI", "--draws", DRAWS)
    assert r2.exit_code == 0, r2.output


# --- bad input -------------------------------------------------------------------------------

def test_malformed_cell_one_line(tmp_path):
    project = tmp_path / "bad"
    shutil.copytree(DEMO, project)
    steps = project / "steps.csv"
    text = steps.read_text()
    assert "\nS2,350," in text
    steps.write_text(text.replace("\nS2,350,", "\nS2,3x0,"))
    for command in (["check"], ["window", "--draws", DRAWS], ["report", "--out", str(tmp_path / "o")]):
        r = run(command[0], project, *command[1:])
        line = _one_error_line(r, "steps.csv", "rate", "3x0")
        assert re.search(r"row \d+", line), line
    assert not (tmp_path / "o").exists()


def test_missing_project_path(tmp_path):
    for command in ("check", "fit", "window", "inflow", "drawdown"):
        r = run(command, tmp_path / "nowhere")
        _one_error_line(r, "nowhere")


def test_report_into_input_folder_refused(tmp_path):
    project = tmp_path / "well"
    shutil.copytree(DEMO, project)
    before = {p.name: _sha(p) for p in project.iterdir()}
    r = run("report", project, "--out", project, "--draws", DRAWS)
    _one_error_line(r)
    after = {p.name: _sha(p) for p in project.iterdir()}
    assert after == before


def test_report_into_foreign_folder_refused(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    keep = out / "notes.txt"
    keep.write_text("my own notes")
    r = run("report", DEMO, "--out", out, "--draws", DRAWS)
    _one_error_line(r)
    assert keep.read_text() == "my own notes"


def test_readme_compare():
    # README: blendq compare my-well --seal "Upper sand" --blend "200 gpm; nitrate=2 mg/L as N;
    # arsenic=1 ug/L"
    r = run("compare", DEMO, "--seal", "Upper sand", "--blend",
            "200 gpm; nitrate=2 mg/L as N; arsenic=1 ug/L", "--draws", "100", "--json")
    assert r.exit_code == 0, r.output
    rows = json.loads(r.stdout)
    text = json.dumps(rows)
    assert "Base case" in text and "Upper sand" in text


def test_rich_tables_show_units_and_user_text_literally(tmp_path):
    # "[m³/d]" in a header and "[bold]" in a zone name are text, not rich markup
    import shutil

    folder = tmp_path / "w"
    shutil.copytree(DEMO, folder)
    toml = folder / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace('name = "Deep sand"',
                                                            'name = "[bold]Deep sand"'),
                    encoding="utf-8")
    r = run("inflow", folder, "--rates", "300 gpm", "--units", "SI")
    assert r.exit_code == 0, r.output
    assert "rate [m³/d]" in r.stdout.replace("\n", " ") or "[m³/d]" in r.stdout
    assert "[bold]Deep" in r.stdout


@pytest.mark.parametrize("command", [["drawdown"], ["check"], ["inflow", "--rates", "300 gpm"]])
def test_commands_in_a_fresh_process(command):
    # a new interpreter imports modules in the command's own order (an import cycle hidden by
    # the test process's earlier imports shows up here)
    import subprocess
    import sys

    r = subprocess.run([sys.executable, "-m", "blendq", command[0], str(DEMO), *command[1:]],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode in (0, 1), r.stderr
    assert "Traceback" not in r.stderr and "internal error" not in r.stderr
