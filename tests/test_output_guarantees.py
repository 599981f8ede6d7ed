"""What blendq promises about its files: inputs are never modified; a failed run leaves no
partial report and an older report intact; the same seed gives byte-identical files;
user text is escaped in the HTML report; CSV cells a spreadsheet would run as a formula are
made inert.

One project with hostile names (markup, ampersands, quotes, a formula as a sample id, a sample id
beginning with the CSV comment mark ``#``) is run
through ``check``, ``fit`` and ``report`` once (``--draws 100``); the tests read its outputs.
"""

from __future__ import annotations

import hashlib
import html
import io
import shutil
from pathlib import Path

import pytest
from typer.testing import CliRunner

import blendq
import blendq.decide.analysis
import blendq.report.html
import blendq.report.outputs
from blendq.cli import app

US = Path(__file__).parent / "data" / "projects" / "quillmarsh_us"
DRAWS = "100"
WELL = "Well <b>\"3\"</b> & 'co'"
ZONE = "Upper <script>alert(1)</script>"
MIDDLE = 'Middle & "deep"'
MARKUP_ID = "<img src=x onerror=\"alert('S2')\">&amp;"
FORMULA_ID = '=HYPERLINK("http://example.invalid","open")'
HASH_ID = "#S3, bottle #2"  # the comment mark of the CSV outputs, at the start and inside

runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})


def _checksums(folder: Path) -> dict[str, str]:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _toml_text(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _hostile_project(folder: Path) -> Path:
    shutil.copytree(US, folder)
    toml = (folder / "project.toml").read_text(encoding="utf-8")
    toml = toml.replace('name = "Quillmarsh 3"\n', f"name = {_toml_text(WELL)}\n")
    toml = toml.replace('name = "Upper"', f"name = {_toml_text(ZONE)}")
    toml = toml.replace('name = "Middle"', f"name = {_toml_text(MIDDLE)}")
    (folder / "project.toml").write_text(toml, encoding="utf-8")
    samples = (folder / "lab" / "samples.csv").read_text(encoding="utf-8")
    quote = '"' + MARKUP_ID.replace('"', '""') + '"'
    formula = '"' + FORMULA_ID.replace('"', '""') + '"'
    samples = samples.replace("\nQW3-S2,", f"\n{quote},").replace("\nQW3-S1,", f"\n{formula},")
    samples = samples.replace("\nQW3-S3,", f'\n"{HASH_ID}",').replace(",QW3-S3,",
                                                                     f',"{HASH_ID}",')
    (folder / "lab" / "samples.csv").write_text(samples, encoding="utf-8")
    return folder


def _invoke(*args) -> object:
    result = runner.invoke(app, [str(a) for a in args])
    assert "Traceback" not in result.output
    return result


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """The hostile project, its checksums before and after check, fit and report, and the
    report folder."""
    root = tmp_path_factory.mktemp("guarantees")
    project = _hostile_project(root / "project")
    before = _checksums(project)
    results = {"check": _invoke("check", project),
               "fit": _invoke("fit", project, "--draws", DRAWS),
               "report": _invoke("report", project, "--out", root / "out", "--draws", DRAWS)}
    return {"project": project, "before": before, "after": _checksums(project),
            "results": results, "out": root / "out", "root": root}


def test_commands_ran(run):
    assert run["results"]["check"].exit_code in (0, 1), run["results"]["check"].output
    for name in ("fit", "report"):
        assert run["results"][name].exit_code == 0, run["results"][name].output
    assert (run["out"] / "report.html").is_file() and (run["out"] / "summary.json").is_file()


def test_inputs_never_modified(run):
    assert run["after"] == run["before"]  # same files, same bytes, nothing added
    assert len(run["before"]) == 6


def test_same_seed_gives_identical_files(run, tmp_path):
    again = _invoke("report", run["project"], "--out", tmp_path / "again", "--draws", DRAWS)
    assert again.exit_code == 0, again.output
    first = (run["out"] / "summary.json").read_bytes()
    assert (tmp_path / "again" / "summary.json").read_bytes() == first
    for table in ("zones", "sweep", "residuals", "hydraulics", "qa_findings"):
        name = f"tables/{table}.csv"
        assert (tmp_path / "again" / name).read_bytes() == (run["out"] / name).read_bytes()
    # every file, the PDF, the HTML page and the charts (PNG and SVG) included
    files = _checksums(run["out"])
    assert {"report.pdf", "report.html", "charts/chart_1.svg"} <= set(files)
    assert _checksums(tmp_path / "again") == files


def test_user_text_is_escaped_in_html(run):
    page = (run["out"] / "report.html").read_text(encoding="utf-8")
    for text in (WELL, ZONE, MIDDLE, MARKUP_ID):
        assert text not in page, text
    assert "<script>alert" not in page and "<img src=x" not in page and "<b>\"3\"" not in page
    for text in (WELL, ZONE, MIDDLE):
        assert html.escape(text, quote=True) in page, text
    assert html.escape(MARKUP_ID, quote=True) in page  # the sample with a review finding


def test_formula_cells_are_inert_in_csv(run):
    tables = {p.name: p.read_text(encoding="utf-8") for p in (run["out"] / "tables").glob("*.csv")}
    hits = [name for name, text in tables.items() if "HYPERLINK" in text]
    assert hits, "the formula sample id appears in some table"
    quoted = '"' + ("'" + FORMULA_ID).replace('"', '""') + '"'  # RFC 4180 quoting
    for name in hits:
        text = tables[name]
        assert quoted in text, name
        for line in text.splitlines():
            for cell_start in (",=", '"=', ",+", ",@"):
                assert not line.startswith(cell_start[1:]) and cell_start not in line, (name, line)


def test_cells_holding_the_comment_mark_read_back_whole(run):
    # every table begins with "# " comment lines; a cell holding "#" is quoted, so pandas
    # with comment="#" reads it whole and the row keeps all its cells
    import pandas as pd

    hits = 0
    for path in sorted((run["out"] / "tables").glob("*.csv")):
        text = path.read_bytes().decode("utf-8")
        assert text.startswith("# ") and f"# {blendq.CAUTIONS[0]}\r\n" in text, path.name
        table = pd.read_csv(path, comment="#", dtype=str, keep_default_na=False)
        if f'"{HASH_ID}"' in text:
            hits += 1
            assert HASH_ID in set(table.to_numpy().ravel()), path.name
        body = [ln for ln in text.split("\r\n") if ln and not ln.startswith("# ")]
        plain = pd.read_csv(io.StringIO("\r\n".join(body)), dtype=str, keep_default_na=False)
        pd.testing.assert_frame_equal(table, plain)
    assert hits, "the sample id holding '#' appears in some table"


# ----------------------------------------------------------------------------- failed runs
def _siblings(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.parent.iterdir() if p.name.startswith(f".{folder.name}."))


_analysis_cache: dict = {}


@pytest.fixture()
def old_report(run, tmp_path, monkeypatch):
    """A copy of the report folder (blendq's marker inside) as the output of a later run; the
    analysis of the failing runs is computed once (it is seeded, so a cached one is the same)."""
    real = blendq.decide.analysis.analyse

    def cached(project, draws=None, seed=None, sample_mode="keep", progress=None):
        key = (draws, seed, sample_mode)
        if key not in _analysis_cache:
            _analysis_cache[key] = real(project, draws=draws, seed=seed, sample_mode=sample_mode)
        return _analysis_cache[key]

    monkeypatch.setattr(blendq.decide.analysis, "analyse", cached)
    out = tmp_path / "out"
    shutil.copytree(run["out"], out)
    return out, _checksums(out)


def test_render_failure_leaves_old_report_intact(run, old_report, monkeypatch):
    out, before = old_report

    def broken(*args, **kwargs):
        raise RuntimeError("renderer broke")

    monkeypatch.setattr(blendq.report.html, "render_html", broken)
    result = _invoke("report", run["project"], "--out", out, "--draws", DRAWS)
    assert result.exit_code == 3 and "renderer broke" in result.output
    assert _checksums(out) == before
    assert _siblings(out) == []
    fresh = out.parent / "fresh"
    result = _invoke("report", run["project"], "--out", fresh, "--draws", DRAWS)
    assert result.exit_code == 3 and not fresh.exists() and _siblings(fresh) == []


def test_write_failure_midway_leaves_no_partial_folder(run, old_report, monkeypatch):
    out, before = old_report
    real_write, written = blendq.report.outputs._write_file, []

    def failing(path, data):
        if len(written) == 3:
            raise OSError(28, "No space left on device")
        written.append(path)
        real_write(path, data)

    monkeypatch.setattr(blendq.report.outputs, "_write_file", failing)
    result = _invoke("report", run["project"], "--out", out, "--draws", DRAWS)
    assert result.exit_code == 2 and "No space left on device" in result.output
    assert len(result.output.strip().splitlines()) == 1
    assert len(written) == 3  # three files were on disk in the staging folder before the fault
    assert _checksums(out) == before
    assert _siblings(out) == []
    assert {p.name for p in out.parent.iterdir()} == {"out"}
