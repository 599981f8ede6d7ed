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
    # the samples and options are part of the key: the window without each step reruns the
    # analysis on fewer samples, and options given on the command line join the scenarios
    key = (str(project.folder), project.well.name, draws, seed, sample_mode,
           tuple(project.samples["sample_id"].astype(str) + project.samples["analyte"]),
           tuple(str(s.get("name")) for s in project.scenarios),
           str(project.settings.review_decisions))
    if key not in _cache:
        _cache[key] = _real_analyse(project, draws=draws, seed=seed, sample_mode=sample_mode,
                                    progress=progress)
    return _cache[key]


@pytest.fixture(autouse=True)
def _fast_analyse(monkeypatch):
    monkeypatch.setattr(blendq.decide.analysis, "analyse", _cached_analyse)
    monkeypatch.setattr(blendq.decide.analysis, "_run", _cached_analyse)


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


def test_check_shows_crossflow_memory():
    # the demo's [test] idle_time_before: the first step's sample is flagged with its volumes
    r = run("check", DEMO)
    assert "[warning] returned_water: step S1:" in r.stdout
    assert "crossflow memory (zone properties): Idle time before the test: 2 h" in r.stdout
    assert "Caution:" in r.stdout
    j = json.loads(run("check", DEMO, "--json").stdout)
    assert j["crossflow_memory"].startswith("crossflow memory")
    assert any(f["rule"] == "returned_water" for f in j["findings"])


def test_check_fail_on():
    assert run("check", DEMO, "--fail-on", "warning").exit_code == 1  # the demo has warnings
    assert run("check", DEMO, "--fail-on", "error").exit_code == 0
    assert run("check", DEMO, "--fail-on", "info").exit_code == 1
    assert run("check", DEMO, "--fail-on", "bogus").exit_code == 2


def test_check_json():
    r = run("check", DEMO, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    # the demo's limits: the US-EPA set as catalogued, each with its source, date and status
    assert {lim["analyte"] for lim in data["limits"]} >= {"nitrate", "arsenic"}
    assert not any(lim["override"] for lim in data["limits"])
    assert all(lim["source"] and lim["status"] and lim["date"] for lim in data["limits"])


def test_check_lists_limit_overrides_and_gaps(tmp_path):
    # a copy of the demo with its US-EPA nitrate MCL overridden and the WHO set added, which
    # has no fluoride value in the catalogue (the demo has no fluoride: none is named)
    folder = tmp_path / "demo"
    shutil.copytree(DEMO, folder)
    text = (folder / "project.toml").read_text(encoding="utf-8")
    text = text.replace('limit_sets = ["US-EPA"]', 'limit_sets = ["US-EPA", "EU"]')
    text += ('\n[[limits]]\nanalyte = "nitrate"\nauthority = "US-EPA"\nvalue = "9 mg/L as N"\n'
             'citation = "an invented state rule"\n')
    (folder / "project.toml").write_text(text, encoding="utf-8")
    with open(folder / "samples.csv", "a", encoding="utf-8") as fh:
        fh.write("TH2-F,S1,fluoride,0.9,mg/L,,,0.1,,,,,,,\n")
    r = run("check", folder, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    (over,) = [lim for lim in data["limits"] if lim["override"]]
    assert (over["analyte"], over["value"], over["replaces"]) == (
        "nitrate", 9.0, "US-EPA MCL 10 mg/L as N")
    assert [(g["authority"], g["analyte"]) for g in data["limits_not_in_catalogue"]] == [
        ("EU", "fluoride")]
    r = run("check", folder)
    assert ("Limit override: US-EPA MCL 10 mg/L as N (nitrate) replaced by US-EPA MCL 9 mg/L "
            "as N") in r.stdout
    assert "No EU limit of fluoride is tested" in r.stdout


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
    # the demo's temporal CV (estimated from its monitoring history) leaves a window; at the
    # default 10 % it has none (tests/decide/test_analysis.py)
    assert lines[0].startswith("Operate between")
    assert "recommended rate" in lines[0] and "gpm" in lines[0]
    assert any("lower end set by" in ln for ln in lines)
    # each limit's judged statistic, its rule's source and the temporal CV
    assert any(ln.startswith("  judged: nitrate: single sample with confirmation (40 CFR 141.23; "
                             "secondary), temporal CV ") and "(monitoring history), lab error "
               in ln for ln in lines)
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
    # without the monitoring history, whose scatter would replace the temporal_cv setting
    text = "\n".join(ln for ln in text.splitlines()
                     if not ln.startswith(("history =", "pumplog =")))
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


# --- issue: a report and a command line a utility's reviewer accepts -------------------------

def _demo_copy(tmp_path: Path, name: str = "w") -> Path:
    folder = tmp_path / name
    shutil.copytree(DEMO, folder)
    return folder


def _edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text
    path.write_text(text.replace(old, new), encoding="utf-8")


def test_project_display_units_are_the_default_and_units_overrides(tmp_path):
    folder = _demo_copy(tmp_path)
    _edit(folder / "project.toml", 'display_units = "US"', 'display_units = "SI"')
    si = run("inflow", folder, "--rates", "300 gpm")
    assert si.exit_code == 0, si.output
    assert "m³/d" in si.stdout and "gpm" not in si.stdout
    us = run("inflow", folder, "--rates", "300 gpm", "--units", "US")
    assert "gpm" in us.stdout and "m³/d" not in us.stdout
    dd = run("drawdown", folder)
    assert dd.exit_code == 0, dd.output
    assert " m" in dd.stdout and " ft" not in dd.stdout
    w = run("window", folder, "--draws", DRAWS, "--no-by-step")
    assert w.exit_code == 0, w.output
    assert "m³/d" in w.stdout.splitlines()[0] and "gpm" not in w.stdout.splitlines()[0]


def test_litres_per_second_from_the_project_or_the_option(tmp_path):
    folder = _demo_copy(tmp_path)
    _edit(folder / "project.toml", 'display_units = "US"', 'display_units = "SI-L/s"')
    # 300 gpm = 300 x 3.785411784 L / 60 s = 18.927 L/s (NIST SP 811 gallon)
    ls = run("inflow", folder, "--rates", "300 gpm")
    assert ls.exit_code == 0, ls.output
    assert "18.9" in ls.stdout and "[L/s]" in ls.stdout
    assert "gpm" not in ls.stdout and "m³/d" not in ls.stdout
    dd = run("drawdown", folder)
    assert dd.exit_code == 0, dd.output
    assert "L/s/m" in dd.stdout and "m/(L/s)" in dd.stdout and "gpm" not in dd.stdout
    w = run("window", folder, "--draws", DRAWS, "--no-by-step")
    assert w.exit_code == 0, w.output
    assert " L/s" in w.stdout.splitlines()[0] and "m³/d" not in w.stdout.splitlines()[0]
    # the option in any capitalisation, over a US project
    us = run("inflow", DEMO, "--rates", "300 gpm", "--units", "si-l/s")
    assert us.exit_code == 0 and "[L/s]" in us.stdout
    bad = run("inflow", DEMO, "--rates", "300 gpm", "--units", "L/s")
    assert bad.exit_code == 2 and "SI-L/s" in bad.output
    _edit(folder / "project.toml", 'display_units = "SI-L/s"', 'display_units = "lps"')
    r = run("check", folder)
    assert r.exit_code == 2 and "display_units" in r.output and "SI-L/s" in r.output


def test_template_check_and_window_say_margin_and_thin_data(tmp_path):
    folder = tmp_path / "new"
    assert run("new", folder).exit_code == 0
    margin = "the operating margin (settings.margin = 0.8) applies to your own limit too"
    held = "Nitrate (as N) is held below 6.4 mg/L as N"  # 0.8 x 8 mg/L as N
    thin = "thin data: the window rests on 2 steps with lab results"
    c = run("check", folder)
    assert c.exit_code == 0, c.output
    assert margin in c.stdout and held in c.stdout and thin in c.stdout
    assert "settings.min_window_steps = 3, common practice" in c.stdout
    cj = json.loads(run("check", folder, "--json").stdout)
    assert any(held in n for n in cj["notes"]) and any(thin in n for n in cj["notes"])
    w = run("window", folder, "--draws", "40", "--no-by-step")
    assert w.exit_code == 0, w.output
    assert margin in w.stdout and held in w.stdout and thin in w.stdout
    # a minimum of two sampled steps and a margin of 1 silence both
    _edit(folder / "project.toml", "min_window_steps = 3", "min_window_steps = 2")
    _edit(folder / "project.toml", "margin = 0.8 ", "margin = 1.0 ")
    c = run("check", folder)
    assert c.exit_code == 0, c.output
    assert margin not in c.stdout and "thin data" not in c.stdout


def test_demo_has_no_thin_data_warning():
    c = run("check", DEMO)
    assert c.exit_code == 0 and "thin data" not in c.stdout


def test_docs_pages_are_installed_and_match_the_source_docs():
    from blendq.cli import DOCS_FOLDER, doc_topics

    r = run("docs")
    assert r.exit_code == 0 and "input-files, methods, scenarios" in r.stdout
    assert "Caution:" in r.stdout
    source = Path(blendq.__file__).parent.parent / "docs"
    for topic, page in doc_topics().items():
        # the installed copy is docs/<topic>.md as it stands (copy it again after an edit)
        assert page.read_text(encoding="utf-8") == \
            (source / f"{topic}.md").read_text(encoding="utf-8"), topic
        out = run("docs", topic)
        assert out.exit_code == 0 and out.stdout.startswith("# ")
    # pip installs blendq/data/** with the package (pyproject package data)
    pyproject = (source.parent / "pyproject.toml").read_text(encoding="utf-8")
    assert 'blendq = ["data/**/*"]' in pyproject and DOCS_FOLDER[0] == "data"
    bad = run("docs", "nope")
    assert bad.exit_code == 2 and "input-files, methods, scenarios" in bad.output


def test_help_is_plain_text_in_workflow_order():
    r = run("compare", "--help")
    assert r.exit_code == 0
    text = " ".join(r.stdout.split())
    assert "the project's [[scenarios]] plus any given here" in text
    assert "<bool>" not in r.stdout and "<list" not in r.stdout
    for option in ("--intake", "--lower-heads", "--seal", "--blend", "--redevelop"):
        assert option in r.stdout
    for command in ("report", "fit", "window"):
        assert "<bool>" not in run(command, "--help").stdout
    top = run("--help").stdout
    listed = [ln.split()[0] for ln in top.split("Commands:")[1].splitlines() if ln.strip()]
    assert listed == ["new", "plan", "check", "inflow", "drawdown", "fit", "window", "history",
                      "pump", "compare", "report", "wellfield", "demo", "docs"]


def test_compare_option_errors_name_the_option():
    line = _one_error_line(run("compare", DEMO, "--seal", "Nope"), "option --seal:", "Nope")
    assert "project.toml" not in line and "command line" not in line
    line = _one_error_line(run("compare", DEMO, "--blend", "200 gpm, nitrate=2 mg/L as N"),
                           "option --blend:", "semicolons")
    # a missing concentration is found before the long run, and blames the option
    line = _one_error_line(run("compare", DEMO, "--blend", "200 gpm; nitrate=2 mg/L as N"),
                           "option --blend:", "arsenic")
    assert "project.toml" not in line
    _one_error_line(run("compare", DEMO, "--lower-heads", "ten feet"), "option --lower-heads")
    _one_error_line(run("report", DEMO, "--intake", "-5 ft", "--out", "x"), "option --intake")


def test_every_command_prints_the_cautions(tmp_path):
    for args in (["check", DEMO], ["drawdown", DEMO], ["new", tmp_path / "n"],
                 ["inflow", DEMO, "--rates", "300 gpm"]):
        r = run(*args)
        assert r.exit_code in (0, 1), r.output
        assert "Caution: blendq is a planning aid" in r.stdout, args
        # a licensed professional reviews decisions and local codes govern: on every command,
        # not only where well work is advised
        assert "licensed hydrogeologist" in r.stdout and "local codes" in r.stdout, args
    for args in (["check", DEMO, "--json"], ["drawdown", DEMO, "--json"]):
        data = json.loads(run(*args).stdout)
        assert data["cautions"][0] == blendq.CAUTIONS[0], args
        assert any("licensed" in c for c in data["cautions"]), args


def test_compare_and_report_take_options_and_the_well_work_caution(tmp_path):
    r = run("compare", DEMO, "--seal", "Upper sand", "--intake", "118 ft", "--lower-heads",
            "5 ft", "--draws", "100", "--seed", "3")
    assert r.exit_code == 0, r.output
    assert "Intake at 118 ft" in r.stdout and "Static heads 5 ft lower" in r.stdout
    assert "licensed hydrogeologist" in r.stdout and "local codes" in r.stdout
    j = json.loads(run("compare", DEMO, "--seal", "Upper sand", "--draws", "100", "--seed",
                       "3", "--json").stdout)
    assert any("licensed" in c for c in j["cautions"])
    out = tmp_path / "rep"
    r = run("report", DEMO, "--out", out, "--draws", "100", "--seed", "3", "--lower-heads",
            "5 ft")
    assert r.exit_code == 0, r.output
    assert "Static heads 5 ft lower" in (out / "report.html").read_text(encoding="utf-8")


def _typo_project(tmp_path: Path) -> Path:
    """The demo with a unit slip: step S2's arsenic written as 8.0 mg/L (its neighbours are
    5.5-7.6 ug/L; 8.0 mg/L is 1000 x 8.0 ug/L)."""
    folder = _demo_copy(tmp_path, "typo")
    _edit(folder / "samples.csv", "TH2-2,S2,arsenic,6.7,ug/L", "TH2-2,S2,arsenic,8.0,mg/L")
    return folder


def test_gross_outlier_is_a_check_error_and_window_names_it(tmp_path):
    folder = _typo_project(tmp_path)
    r = run("check", folder)
    assert r.exit_code == 1
    assert "[error] gross_outlier: samples.csv row 5: arsenic 8000 ug/L" in r.stdout
    w = run("window", folder, "--draws", DRAWS, "--no-by-step")
    assert w.exit_code == 0, w.output
    assert "fails at every rate" in w.stdout
    assert "driven by sample TH2-2 (step S2, 8000 ug/L, samples.csv row 5)" in w.stdout
    # the reviewer records the decision once; check passes and every fit leaves it out
    with (folder / "project.toml").open("a", encoding="utf-8") as fh:
        fh.write('\n[[review]]\nsample = "TH2-2"\nanalyte = "arsenic"\naction = "exclude"\n'
                 'reason = "lab confirmed 8.0 ug/L"\n')
    assert run("check", folder).exit_code == 0
    w = run("window", folder, "--draws", DRAWS, "--no-by-step")
    assert w.stdout.startswith("Operate between"), w.stdout
    assert "review decision: TH2-2 arsenic: excluded (review[1]: lab confirmed 8.0 ug/L)" \
        in w.stdout
    f = json.loads(run("fit", folder, "--draws", DRAWS, "--no-by-step", "--json").stdout)
    assert f["review_decisions"][0]["sample_id"] == "TH2-2"


def test_window_weighs_the_demand_and_keeps_a_headroom(tmp_path):
    r = run("window", DEMO, "--draws", DRAWS, "--json", "--no-by-step")
    data = json.loads(r.stdout)
    assert "The demand of 600 gpm is met" in data["decision"]
    # a demand above the window's top end (767 gpm on the demo)
    project = tmp_path / "demo"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace('demand = "600 gpm"',
                                                             'demand = "900 gpm"'),
                    encoding="utf-8")
    data = json.loads(run("window", project, "--draws", DRAWS, "--json", "--no-by-step").stdout)
    lo, hi = data["window_m3_per_day"][-1]
    rec = data["recommended_rate_m3_per_day"]
    # 5 % headroom (the default setting): the rate may drift by 5 % and stay in the window
    assert lo <= rec * 0.95 and rec * 1.05 <= hi + 1e-9
    assert "The demand of 900 gpm cannot be met" in data["decision"]
    assert "headroom of 5%" in data["decision"]


def test_window_and_fit_show_the_window_without_each_step():
    r = run("window", DEMO, "--draws", DRAWS)
    assert r.exit_code == 0, r.output
    assert "Window without each step's lab samples" in r.stdout
    for step in ("S1", "S2", "S3", "S4", "S5"):
        assert f"without {step} (" in r.stdout
    data = json.loads(run("window", DEMO, "--draws", DRAWS, "--json").stdout)
    table = data["leave_one_step_out"]
    assert [row["step"] for row in table] == ["none", "S1", "S2", "S3", "S4", "S5"]
    assert table[0]["shift_high"] == 0
    f = json.loads(run("fit", DEMO, "--draws", DRAWS, "--json").stdout)
    assert len(f["leave_one_step_out"]) == 6
    assert f["cautions"][:2] == list(blendq.CAUTIONS[:2])


def test_check_text_shows_the_first_findings_of_each_rule(monkeypatch):
    # the test project has five field_readings_few warnings and one field_stability warning
    us = Path(__file__).parent / "data" / "projects" / "quillmarsh_us"
    monkeypatch.setattr("blendq.cli.CHECK_SHOWN_PER_RULE", 2)
    r = run("check", us)
    assert r.stdout.count("[warning] field_readings_few:") == 2
    assert r.stdout.count("[warning] field_stability:") == 1
    assert "... field_readings_few: 3 more not shown (first 2 of 5; --json lists all)" in r.stdout
    assert "field_stability: 0 more" not in r.stdout
    j = json.loads(run("check", us, "--json").stdout)
    assert sum(f["rule"] == "field_readings_few" for f in j["findings"]) == 5
