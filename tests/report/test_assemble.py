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

import numpy as np
import pandas as pd
import pytest
from scipy import stats
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


def _table_text(path: Path) -> io.StringIO:
    """A CSV file of the report folder without its leading ``# `` comment lines."""
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    return io.StringIO("".join(ln for ln in lines if not ln.startswith("# ")), newline="")


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
    rows = list(csv.DictReader(_table_text(demo_out / "tables" / "zones.csv")))
    assert {r["zone"] for r in rows} == {"Upper sand", "Silty sand", "Gravel (clogged)", "Deep sand"}


def test_every_table_starts_with_the_cautions_and_reads_back(demo_out):
    from blendq.report.csv_tables import CSV_TITLES

    names = sorted(p.relative_to(demo_out).as_posix() for p in demo_out.rglob("*.csv"))
    assert names == sorted(CSV_TITLES)
    for name in names:
        raw = (demo_out / name).read_bytes().decode("utf-8")
        lines = raw.split("\r\n")
        assert lines[0] == f"# {CSV_TITLES[name]} (US display units); blendq report of " \
                           "TH-2 step-rate test, May 2026", name
        assert lines[1] == f"# written by blendq {blendq.__version__}"
        assert lines[2:5] == [f"# {CAUTIONS[0]}", f"# {CAUTIONS[1]}", f"# {CAUTIONS[3]}"]
        assert not lines[5].startswith("#") and raw.endswith("\r\n")
        # comment="#" gives the table of the file without its comment block, cell for cell
        table = pd.read_csv(demo_out / name, comment="#", dtype=str, keep_default_na=False)
        plain = pd.read_csv(_table_text(demo_out / name), dtype=str, keep_default_na=False)
        pd.testing.assert_frame_equal(table, plain)
        assert len(table) == raw.count("\r\n") - 6, name  # one row per line (no cut cell)


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
    # the demo's monitoring history gives the temporal CV, replacing the setting
    assert "(monitoring history)" in text and "Monitoring history and the years ahead" in text


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
    rec = data["recommended_rate_m3_per_day"]
    assert lo <= rec <= hi
    # the demo asks 600 gpm = 600 x 5.45099296896 m^3/d (NIST SP 811 gallon) and gets it, with
    # its 5 % headroom kept inside both ends of the window
    assert data["demand_m3_per_day"] == pytest.approx(600 * 5.45099296896, rel=1e-9)
    assert data["demand_met"] is True
    assert data["headroom"] == pytest.approx(0.05) and data["headroom_kept"] is True
    assert lo <= rec * (1 - data["headroom"]) and rec * (1 + data["headroom"]) <= hi
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
    # the demo's monitoring history estimates the temporal CV (the invented history's arsenic
    # scatter: 0.4 ug/L on about 7 ug/L), replacing the 5 % setting
    assert 0.03 < basis["arsenic"]["temporal_cv"] < 0.08
    assert basis["arsenic"]["temporal_cv_source"] == "monitoring history"


def test_summary_json_carries_the_monitoring_history(demo_out):
    data = json.loads((demo_out / "summary.json").read_text(encoding="utf-8"))
    h = data["monitoring_history"]
    assert set(h["analytes"]) == {"nitrate", "arsenic"}
    # 1.6448536 = 95th percentile of the standard normal (NIST/SEMATECH e-Handbook of
    # Statistical Methods, 1.3.6.7.1): the two-sided 90 % interval of the trend
    assert h["interval"] == pytest.approx(0.9)
    for analyte, m in h["analytes"].items():
        assert m["time_model"] in ("constant", "trend", "seasonal", "trend+seasonal")
        assert m["trend_attribution"] in ("zone", "blend")
        for k, b in m["trend_mg_per_l_per_year"].items():
            sd = m["trend_sd_mg_per_l_per_year"][k]
            np.testing.assert_allclose(m["trend_interval_mg_per_l_per_year"][k],
                                       [b - 1.6448536 * sd, b + 1.6448536 * sd], rtol=1e-6,
                                       atol=1e-6 * sd)
        assert 0.0 <= m["mann_kendall_p"] <= 1.0
        # the temporal CV is the one the window used in place of the setting
        assert m["temporal_cv"] == pytest.approx(
            data["compliance_basis"][analyte]["temporal_cv"], rel=1e-12)
    # Sen's slope (Sen 1968) of the invented nitrate history checked with scipy's
    # Theil-Sen estimator on the history file (days / 365.25 per year)
    hist = pd.read_csv(DEMO / "history.csv")
    no3 = hist[hist["analyte"] == "nitrate"]
    when = pd.to_datetime(no3["sampled_at"])
    t = ((when - when.min()) / pd.Timedelta(days=1)).to_numpy(float) / 365.25
    expected = stats.theilslopes(no3["value"].to_numpy(float), t).slope
    assert h["analytes"]["nitrate"]["sen_slope_mg_per_l_per_year"] == pytest.approx(
        expected, rel=1e-9)
    # the invented nitrate history rises: the trend is fitted and the test sees it
    assert h["analytes"]["nitrate"]["mann_kendall_trend"] == "increasing"
    assert h["analytes"]["nitrate"]["trend_mg_per_l_per_year"]["blend"] > 0
    first, last = h["horizon_years"]
    at_rec = h["latest_compliant_year_at_recommended_rate"]
    assert at_rec is None or first <= at_rec <= last
    assert h["longest_compliant_rate_m3_per_day"] > 0
    assert h["longest_compliant_through_year"] >= (at_rec or first)


def test_summary_json_says_when_the_demand_is_not_met(tmp_path):
    project = tmp_path / "proj"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    text = toml.read_text(encoding="utf-8")
    assert re.search(r'^demand = "[^"]*"', text, re.M)
    # 5000 gpm is far above the demo's window (about 300-770 gpm)
    toml.write_text(re.sub(r'^demand = "[^"]*"', 'demand = "5000 gpm"', text, count=1,
                           flags=re.M), encoding="utf-8")
    out = tmp_path / "out"
    r = run("report", project, "--out", out, "--draws", "60", "--seed", SEED)
    assert r.exit_code == 0, r.output
    data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert data["demand_met"] is False
    assert data["demand_m3_per_day"] == pytest.approx(5000 * 5.45099296896, rel=1e-9)
    assert data["recommended_rate_m3_per_day"] < data["demand_m3_per_day"]
    # without a demand the field is null
    toml.write_text(re.sub(r'^demand = "[^"]*"\n', "", text, count=1, flags=re.M),
                    encoding="utf-8")
    r = run("report", project, "--out", out, "--draws", "60", "--seed", SEED)
    assert r.exit_code == 0, r.output
    data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert data["demand_met"] is None and data["demand_m3_per_day"] is None


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


def _significant_digits(text: str) -> int:
    mantissa = text.lower().split("e")[0].lstrip("-").replace(".", "").lstrip("0")
    return len(mantissa.rstrip("0")) if mantissa else 0


def test_csv_tables_have_units_in_every_numeric_column_and_rounded_values(demo_out):
    # display units (the demo is a US project), the unit in each numeric column name, and at
    # most 4 significant digits (no 0.0070999999999999995)
    for path in sorted((demo_out / "tables").glob("*.csv")):
        rows = list(csv.DictReader(_table_text(path)))
        assert rows, path.name
        for col in rows[0]:
            cells = [r[col] for r in rows if r[col] != ""]
            try:
                [float(c) for c in cells]
            except ValueError:
                continue  # a text column
            if not cells or col == "source_row" or set(cells) <= {"True", "False"}:
                continue
            assert col.endswith("]"), f"{path.name}: column {col!r} has no unit"
            worst = max(cells, key=_significant_digits)
            assert _significant_digits(worst) <= 4, f"{path.name} {col}: {worst}"
    sweep = _table_text(demo_out / "tables" / "sweep.csv").readline()
    assert sweep.startswith("rate [gpm],") and "Arsenic median [ug/L]" in sweep
    assert "pumping level median [ft depth]" in sweep


class _Tables(HTMLParser):
    """Each table of a page: its box's classes and, per column, the longest piece of text that
    cannot wrap (a word, or a whole number cell, which does not wrap)."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[tuple[list[str], list[int]]] = []
        self._box: list[str] = []
        self._cell: list[str] | None = None
        self._nowrap = False
        self._col = 0

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "div" and "tablewrap" in (a.get("class") or ""):
            self._box = a["class"].split()
        elif tag == "table":
            self.tables.append((self._box, []))
        elif tag == "tr":
            self._col = 0
        elif tag in ("td", "th") and self.tables:
            self._cell, self._nowrap = [], tag == "td" and a.get("class") == "num"

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            text = "".join(self._cell)
            pieces = [text] if self._nowrap else re.split(r"[ \t\n]+", text)
            longest = max(len(p) for p in pieces)
            widths = self.tables[-1][1]
            if self._col < len(widths):
                widths[self._col] = max(widths[self._col], longest)
            else:
                widths.append(longest)
            self._col, self._cell = self._col + 1, None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def test_every_report_table_fits_its_box_on_a_laptop_screen(demo_out):
    # Reasoned from the style sheet (no browser): a table's narrowest layout puts each column
    # at its longest unbreakable text. At 0.6 em per character of the 0.88 rem sans-serif table
    # font (wider than the average letter of common sans-serif faces) and 2 x 0.65 rem padding
    # per cell, that width must fit the text column (760 px) or, for a wide table, the wide box
    # of a 1366 px window (1312 px); then nothing scrolls sideways.
    from test_html import REM_PX, text_column_px, wide_box_px

    char, pad = 0.6 * 0.88 * REM_PX, 2 * 0.65 * REM_PX
    parsed = _Tables()
    parsed.feed((demo_out / "report.html").read_text(encoding="utf-8"))
    assert len(parsed.tables) >= 10
    assert any("wide" in box for box, _ in parsed.tables)
    for k, (box, widths) in enumerate(parsed.tables, start=1):
        narrowest = sum(w * char + pad for w in widths)
        room = wide_box_px() if "wide" in box else text_column_px()
        assert narrowest <= room, f"table {k}: {narrowest:.0f} px in {room:.0f} px"


def test_round_significant():
    from blendq.report.csv_tables import round_significant

    got = round_significant([0.0070999999999999995, 12345.678, -0.000123456, 0.0, float("nan")])
    assert [repr(float(v)) for v in got[:4]] == ["0.0071", "12350.0", "-0.0001235", "0.0"]
    assert got[4] != got[4]


# --- the report's identity, paper, dates and data appendix ------------------------------------

def _media_box(pdf: bytes) -> tuple[float, float]:
    # the page size of a PDF page: /MediaBox [0 0 width height] in points (ISO 32000-1, 7.7.3.3)
    m = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", pdf)
    return float(m.group(1)), float(m.group(2))


def test_demo_report_has_date_reviewers_letter_paper_and_data_appendix(demo_out):
    html = (demo_out / "report.html").read_text(encoding="utf-8")
    text = " ".join(_scan(html).text)
    assert "About this report" in text and "Report date" in text
    assert "2026-05-27" in text  # SOURCE_DATE_EPOCH set by tests/conftest.py
    assert "not yet reviewed" in text and "Prepared by" in text
    assert "Appendix: the data" in text
    assert "appendix-data" in _scan(html).ids
    # the lab results as reported with the lab's qualifier (demo samples.csv row 3: "<0.05 mg/L
    # as N", qualifier U); the steps with their rates and pumping levels
    assert "< 0.05 mg/L" in text
    assert "Lab results (samples.csv), with the lab's qualifiers." in text
    assert "Steps (steps.csv)." in text
    # a US project prints on Letter: 8.5 x 11 in = 612 x 792 pt
    pdf = (demo_out / "report.pdf").read_bytes()
    assert _media_box(pdf) == pytest.approx((612.0, 792.0))
    assert b"/CreationDate (D:20260527000000" in pdf
    # complete references: the step-drawdown method's source is listed
    assert "Kruseman, G.P. and de Ridder, N.A. (1990)" in text


def test_si_project_settings_prepared_reviewed_date_and_a4(tmp_path):
    project = tmp_path / "proj"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    text = toml.read_text(encoding="utf-8")
    text = text.replace('display_units = "US"', 'display_units = "SI"\n'
                        'prepared_by = "R. Quillfeather, hydrogeologist (invented)"\n'
                        'reviewed_by = "M. Estragon, PE (invented)"\nreport_date = 2026-06-03', 1)
    toml.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    # --units SI is given too: the paper follows the project's display_units either way
    r = run("report", project, "--out", out, "--draws", "60", "--seed", SEED, "--units", "SI")
    assert r.exit_code == 0, r.output
    page = " ".join(_scan((out / "report.html").read_text(encoding="utf-8")).text)
    assert "R. Quillfeather, hydrogeologist (invented)" in page
    assert "M. Estragon, PE (invented)" in page
    assert "2026-06-03" in page and "not yet reviewed" not in page
    pdf = (out / "report.pdf").read_bytes()
    assert _media_box(pdf) == pytest.approx((595.276, 841.89), abs=1e-3)  # ISO 216 A4
    sweep = _table_text(out / "tables" / "sweep.csv").readline()
    assert sweep.startswith("rate [m³/d],")
    # paper set explicitly
    toml.write_text(text.replace('report_date = 2026-06-03', 'report_date = 2026-06-03\n'
                                 'paper = "Letter"'), encoding="utf-8")
    r = run("report", project, "--out", out, "--draws", "60", "--seed", SEED)
    assert r.exit_code == 0, r.output
    assert _media_box((out / "report.pdf").read_bytes()) == pytest.approx((612.0, 792.0))


def test_litres_per_second_report(tmp_path):
    project = tmp_path / "proj"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        'display_units = "US"', 'display_units = "SI-L/s"', 1), encoding="utf-8")
    out = tmp_path / "out"
    r = run("report", project, "--out", out, "--draws", "60", "--seed", SEED)
    assert r.exit_code == 0, r.output
    sweep = list(csv.DictReader(_table_text(out / "tables" / "sweep.csv")))
    assert "rate [L/s]" in sweep[0] and "pumping level median [m depth]" in sweep[0]
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    # the window's ends in L/s are the base-unit ends / 86.4 (1 L/s = 86.4 m^3/d, exact)
    lo, hi = summary["window_m3_per_day"][0]
    assert f"Operate between {lo / 86.4:.3g} L/s and {hi / 86.4:.3g} L/s" in summary["decision"]
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "L/s" in html and "m³/d" not in html and " gpm<" not in html
    assert _media_box((out / "report.pdf").read_bytes()) == pytest.approx((595.276, 841.89),
                                                                          abs=1e-3)


@pytest.mark.parametrize("line, field", [('paper = "B5"', "project.paper"),
                                         ('report_date = "03/06/2026"', "project.report_date"),
                                         ("prepared_by = 3", "project.prepared_by")])
def test_bad_report_settings_name_the_field(tmp_path, line, field):
    project = tmp_path / "proj"
    shutil.copytree(DEMO, project)
    toml = project / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        'display_units = "US"', f'display_units = "US"\n{line}', 1), encoding="utf-8")
    r = run("check", project)
    assert r.exit_code == 2
    assert field in r.output and "project.toml" in r.output


def test_pdf_creation_date_is_real_unless_source_date_epoch(monkeypatch):
    import datetime as dt

    from blendq.report.document import Document, Paragraph, Section
    from blendq.report.pdf import render_pdf_bytes

    doc = Document("t", "s", "c", [Section("A", [Paragraph("hello")], key="a")])
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    before = dt.datetime.now().strftime("%Y%m%d")
    stamp = re.search(rb"/CreationDate \(D:(\d{8})", render_pdf_bytes(doc)).group(1).decode()
    after = dt.datetime.now().strftime("%Y%m%d")
    assert stamp in (before, after)
    assert stamp != "20000101"  # not ReportLab's fixed "invariant" date
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")  # 2023-11-14 22:13:20 UTC
    one, two = render_pdf_bytes(doc), render_pdf_bytes(doc)
    assert one == two
    assert b"/CreationDate (D:20231114221320" in one


def test_si_report_with_a_level_record(tmp_path):
    # the invented SI test well with a water-level record made from Cooper-Jacob superposition
    # (Cooper and Jacob 1946): the equal-time analysis, both drawdowns per step, the apparent
    # transmissivity from B, the levels in the appendix, SI thousands with a narrow space
    import numpy as np
    import pandas as pd

    from blendq.well.stepdrawdown import cooper_jacob_step_drawdown

    project = tmp_path / "si"
    shutil.copytree(Path(__file__).parents[1] / "data" / "projects" / "quillmarsh_si", project)
    rates = np.array([9.46353, 15.7725, 22.0816, 28.3906]) * 86.4  # L/s -> m^3/d
    starts = np.array([0, 2, 4, 6]) / 24.0
    t = np.concatenate([s + np.geomspace(1 / 1440, 2 / 24, 12) for s in starts])
    s = cooper_jacob_step_drawdown(t, starts, rates, 420.0, 2e-4, 0.1524, 2.0, 1.8e-6)
    origin = pd.Timestamp("2025-04-08 08:00")
    pd.DataFrame({"time": [(origin + pd.Timedelta(days=float(x))).strftime("%Y-%m-%d %H:%M:%S")
                           for x in t], "level [m]": np.round(30.6 + s, 3)}).to_csv(
        project / "levels.csv", index=False)
    toml = project / "project.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        'flowlogs = "flowlogs.csv"', 'flowlogs = "flowlogs.csv"\nlevels = "levels.csv"', 1),
        encoding="utf-8")
    out = tmp_path / "out"
    r = run("report", project, "--out", out, "--draws", "60", "--seed", SEED, "--units", "SI")
    assert r.exit_code == 0, r.output
    text = " ".join(_scan((out / "report.html").read_text(encoding="utf-8")).text)
    assert "Hantush-Bierschenk at 120 min" in text
    assert "measured drawdown" in text and "equal-time drawdown" in text
    assert "Apparent transmissivity from B" in text
    assert "Water levels (levels.csv)." in text
    assert "1\u202f363" in text  # step S2, 15.7725 L/s = 1 362.7 m^3/d, in the steps appendix
    assert "Depth [m]" in text  # the sample taken inside the well
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


def test_crossflow_memory_in_report_and_summary(demo_out):
    # the demo gives idle times ([test] in project.toml): the report says what the thief zones
    # stored, flags the first step's sample and advises how long to pump before a sample
    html = (demo_out / "report.html").read_text(encoding="utf-8")
    scan = _scan(html)
    assert "memory" in scan.ids
    text = re.sub(r"\s+", " ", " ".join(scan.text))
    assert "Crossflow memory and first flush" in text
    assert "Step S1 sample TH2-1" in text and "flagged" in text
    assert "before a compliance sample" in text
    data = json.loads((demo_out / "summary.json").read_text(encoding="utf-8"))
    lines = data["crossflow_memory"]
    assert lines[0].startswith("Idle time before the test: 2 h")
    assert lines[-1].startswith("After 6 h idle")


def test_thin_data_warning_in_the_report_and_summary(tmp_path):
    """The template has two sampled steps, fewer than settings.min_window_steps = 3."""
    from blendq.decide.analysis import analyse
    from blendq.inputs.loader import load_project
    from blendq.inputs.template import write_template
    from blendq.report.assemble import build_document
    from blendq.report.document import Callout

    write_template(tmp_path / "proj")
    out = tmp_path / "out"
    r = run("report", tmp_path / "proj", "--out", out, "--draws", "60", "--seed", SEED)
    assert r.exit_code == 0, r.output
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Thin data: the window rests on 2 steps with lab results" in html
    assert "settings.min_window_steps = 3" in html
    data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert any(n.startswith("warning: thin data: the window rests on 2 steps")
               for n in data["notes"])
    # the PDF is drawn from the same document: the warning is a caution of the decision
    doc = build_document(analyse(load_project(tmp_path / "proj"), draws=60, seed=1))
    decision = next(s for s in doc.sections if s.key == "decision")
    assert any(isinstance(b, Callout) and b.level == "caution" and b.text.startswith("Thin data")
               for b in decision.blocks)


def test_no_thin_data_warning_on_the_demo(demo_out):
    data = json.loads((demo_out / "summary.json").read_text(encoding="utf-8"))
    assert not any("thin data" in n for n in data["notes"])
    assert "Thin data" not in (demo_out / "report.html").read_text(encoding="utf-8")
