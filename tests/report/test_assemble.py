"""Tests of the report folder (blendq.report.assemble with the HTML and PDF renderers), written through
``blendq demo`` and ``blendq report`` on the invented demo well TH-2."""

from __future__ import annotations

import csv
import io
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest
from typer.testing import CliRunner

import blendq
from blendq import CAUTIONS
from blendq.cli import app

DEMO = Path(blendq.__file__).parent / "data" / "demo"
DRAWS = "200"
SEED = "11"
SECTIONS = ("decision", "cautions", "inputs", "zones", "window", "charts", "assumptions", "methods")

runner = CliRunner(env={"COLUMNS": "200", "NO_COLOR": "1"})


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


class _Scan(HTMLParser):
    """Collects element ids, resource links and the visible text of an HTML page."""

    def __init__(self) -> None:
        super().__init__()
        self.ids: set[str] = set()
        self.links: list[str] = []
        self.text: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        for name, value in attrs:
            if name in ("id", "data-key") and value:
                self.ids.add(value)
            if name in ("src", "href", "srcset", "action", "data") and value is not None:
                self.links.append(value)

    def handle_data(self, data):
        self.text.append(data)


def _scan(html: str) -> _Scan:
    s = _Scan()
    s.feed(html)
    s.close()
    return s


def _pdf_pages(data: bytes) -> int:
    # Page objects of a PDF carry "/Type /Page"; the page tree carries "/Type /Pages"
    # (ISO 32000-1:2008, 7.7.3).
    return len(re.findall(rb"/Type\s*/Page(?!s)", data))


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "blendq-demo"
    r = run("demo", "--out", out, "--draws", DRAWS, "--seed", SEED)
    assert r.exit_code == 0, r.output
    # the demo's temporal CV (5 %, from its monitoring record) leaves a window
    assert r.stdout.startswith("Operate between")
    return out


def test_demo_writes_every_file(demo_out):
    for name in ("report.html", "report.pdf", "summary.json"):
        assert (demo_out / name).is_file(), name
    tables = sorted(p.name for p in (demo_out / "tables").glob("*.csv"))
    assert {"zones.csv", "sweep.csv", "hydraulics.csv", "residuals.csv", "qa_findings.csv"} <= set(tables)
    pngs = sorted((demo_out / "charts").glob("*.png"))
    assert len(pngs) >= 4
    for png in pngs:
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    rows = list(csv.DictReader(io.StringIO((demo_out / "tables" / "zones.csv").read_text())))
    assert {r["zone"] for r in rows} == {"Upper sand", "Silty sand", "Gravel (clogged)", "Deep sand"}


def test_html_sections_and_no_external_resource(demo_out):
    html = (demo_out / "report.html").read_text(encoding="utf-8")
    scan = _scan(html)
    for key in SECTIONS:
        assert key in scan.ids, key
    assert scan.links, "expected at least the in-page contents links and embedded charts"
    for link in scan.links:
        low = link.strip().lower()
        assert not low.startswith(("http:", "https:", "//", "file:", "ftp:")), link
    assert not re.search(r"url\(\s*['\"]?(https?:|//|file:)", html, re.I)
    assert "<script" not in html.lower()
    text = re.sub(r"\s+", " ", " ".join(scan.text))
    for caution in CAUTIONS:
        assert caution in text, caution
    assert "Operate between" in text
    assert "TH-2" in text
    # the report names the statistic each limit is judged on, with its rule's source
    assert "single sample with confirmation" in text and "40 CFR 141.23" in text
    assert "annual mean of 4 quarterly samples" in text and "40 CFR 141.23(i)" in text
    assert "5% (setting)" in text


def test_pdf_has_pages(demo_out):
    data = (demo_out / "report.pdf").read_bytes()
    assert data.startswith(b"%PDF")
    assert data.rstrip().endswith(b"%%EOF")
    assert _pdf_pages(data) > 3


def test_summary_json(demo_out):
    data = json.loads((demo_out / "summary.json").read_text(encoding="utf-8"))
    assert data["well"] == "TH-2"
    assert data["draws"] == int(DRAWS)
    assert data["seed"] == int(SEED)
    assert data["cautions"] == list(CAUTIONS)
    assert data["decision"].startswith("Operate between")
    lo, hi = data["window_m3_per_day"][0]
    assert lo <= data["recommended_rate_m3_per_day"] <= hi
    basis = data["compliance_basis"]
    assert set(basis) == {"nitrate", "arsenic"}
    # 40 CFR 141.23: nitrate confirmation sample, compliance on the average of the two
    assert (basis["nitrate"]["statistic"], basis["nitrate"]["samples_averaged"]) == \
        ("single sample", 2)
    assert basis["nitrate"]["citation"] == "40 CFR 141.23"
    assert basis["nitrate"]["status"] == "secondary"
    # 40 CFR 141.23(i): running annual average of quarterly samples
    assert (basis["arsenic"]["statistic"], basis["arsenic"]["samples_averaged"]) == \
        ("annual mean", 4)
    assert basis["arsenic"]["temporal_cv"] == 0.05
    assert basis["arsenic"]["temporal_cv_source"] == "setting"


def test_same_seed_same_summary(demo_out, tmp_path):
    out = tmp_path / "again"
    r = run("demo", "--out", out, "--draws", DRAWS, "--seed", SEED)
    assert r.exit_code == 0, r.output
    assert (out / "summary.json").read_bytes() == (demo_out / "summary.json").read_bytes()
    assert (out / "tables" / "zones.csv").read_bytes() == (demo_out / "tables" / "zones.csv").read_bytes()


def test_user_text_escaped_in_html(tmp_path):
    project = tmp_path / "proj"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    text = toml.read_text(encoding="utf-8")
    evil = "<script>alert(1)</script>"
    assert 'name = "TH-2"' in text
    text = text.replace('name = "TH-2"', f'name = "TH-2 {evil}"', 1)
    text = text.replace('location = "', f'location = "{evil} & <b>x</b> ', 1)
    toml.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    r = run("report", project, "--out", out, "--draws", DRAWS, "--seed", SEED)
    assert r.exit_code == 0, r.output
    html = (out / "report.html").read_text(encoding="utf-8")
    assert evil not in html
    assert "<b>x</b>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    scan = _scan(html)
    assert "script" not in scan.tags
    assert "b" not in scan.tags
    # the parsed text shows the name as the user wrote it
    assert f"TH-2 {evil}" in " ".join(scan.text)
    assert json.loads((out / "summary.json").read_text(encoding="utf-8"))["well"] == f"TH-2 {evil}"
    assert (out / "report.pdf").read_bytes().startswith(b"%PDF")


def test_report_lists_review_decisions_and_the_window_without_each_step():
    from dataclasses import replace

    from blendq.decide.analysis import analyse
    from blendq.inputs.loader import load_project
    from blendq.report.assemble import sample_use_blocks

    p = load_project(DEMO)
    decision = {"sample": "TH2-4", "analyte": "", "action": "downweight", "factor": 2.0,
                "reason": "turbid purge water", "entry": 1}
    p = replace(p, settings=replace(p.settings, review_decisions=(decision,)))
    a = analyse(p, draws=30, seed=2)
    tables = {b.caption.split(" (")[0].split(":")[0]: b.data for b in sample_use_blocks(a, "SI")
              if hasattr(b, "data")}
    dec = tables["Review decisions recorded in the project"]
    assert dec.iloc[0].tolist() == ["review[1]", "TH2-4", "all", "downweight", "2",
                                    "turbid purge water", 3]
    loo = next(v for k, v in tables.items() if k.startswith("The operating window found again"))
    assert loo["Left out"].tolist() == ["nothing", "step S1", "step S2", "step S3", "step S4",
                                        "step S5"]
    assert "m³/d" in " ".join(loo["Window"]) or "m3/d" in " ".join(loo["Window"])
