"""Hypothesis strategies for fuzzing: random mutations of the good Quillmarsh test project.

A generated project is a dict of relative file name -> bytes: the files of
``tests/data/projects/quillmarsh_us`` with one to four mutations applied. Mutations replace a
table cell with random text, numbers or unicode; drop or rename a column; scramble a header
unit; change, delete or break a value of ``project.toml``; swap a file's delimiter or encoding.
Used by tests/test_fuzz_loader.py and tests/test_fuzz_cli.py.
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
from pathlib import Path

from hypothesis import strategies as st

US = Path(__file__).parent / "data" / "projects" / "quillmarsh_us"
TABLES = ("steps.csv", "lab/samples.csv", "flowlogs.csv", "levels.csv", "field.csv")
BASE = {rel: (US / rel).read_bytes() for rel in ("project.toml",) + TABLES}

#: examples per fuzz test: BLENDQ_FUZZ_EXAMPLES=2000 for the full run
FUZZ_EXAMPLES = int(os.environ.get("BLENDQ_FUZZ_EXAMPLES", "100"))

_SPECIAL_CELLS = ["", " ", "ND", "nd", "<0.5", "< 0.5", "<", "<<1", "1,200", "1.200,5", "1e308",
                  "-1e308", "1e309", "1e-320", "NaN", "nan", "-inf", "Infinity", "yes", "no",
                  "true", "2025-13-01", "2025-04-08T25:00", "2025-04-08 09:55Z",
                  "2025-04-08T09:55+14:00", "0", "-0", "-1", "0.0", "mg/L", "gpm", "µg/L",
                  "mg/L as N", "as NO3", "5%", "-5%", "%", "=1+1", '"', "'", "\\", "\x00",
                  "\u2212" + "5", "１２", "٣", "ⅷ", "S1", "S9", "nitrate", "NO3", "As", "QW3-S3",
                  "\n", "a\r\nb", "🌊"]
_UNITS = ["gpm", "L/s", "m3/d", "ft", "m", "min", "h", "d", "degC", "degF", "K", "uS/cm",
          "mS/cm", "mg/L", "ug/L", "meq/L", "NTU", "FNU", "%", "", "-", "furlong", "m3",
          "gal", "s2/ft5", "1/0", "m**-1000", "ft^3000", "[", "]", "gpm as N", "mg/L as NO3",
          "delta_degC", "ppm", "ppb", "dimensionless", "radian", "mol/L"]
_COLUMNS = ["step", "rate", "start", "end", "duration", "pumping_level", "recovered_before",
            "sample_id", "analyte", "value", "unit", "basis", "nondetect", "detection_limit",
            "uncertainty", "qualifier", "sampled_at", "analyzed_at", "duplicate_of", "depth",
            "preservation", "log", "upward_flow", "time", "level", "temperature", "ph",
            "specific_conductance", "dissolved_oxygen", "turbidity", "", "Rate [gpm]"]

cell_text = st.one_of(
    st.sampled_from(_SPECIAL_CELLS),
    st.text(max_size=12),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(allow_nan=False, allow_infinity=False).map(lambda x: f"{x:.6g}"),
    st.integers(-10**6, 10**12).map(str),
)

toml_literal = st.one_of(
    st.text(max_size=16).map(json.dumps),  # a TOML basic string (JSON escapes are TOML escapes)
    st.sampled_from(['"0 ft"', '"-5 ft"', '"1e308 gpm"', '"nan ft"', '"inf m"', '"1,200 ft"',
                     '"350 ft2/d"', '"12 ft/d"', '"5 gpm"', '"5"', '"ft"', '""', '"US"', '"SI"',
                     '"auto"', '"flowlog"', '"given"', '"steps.csv"', '"../steps.csv"',
                     '"lab"', '"missing.csv"', '"field.csv"', '"project.toml"', "nan", "inf",
                     "-inf", "true", "false", "0", "-1", "1e308", "[]", '["WHO", "EU"]',
                     '["nope"]', "{}", '{ a = 1 }', "2025-04-08", "[[1]]", '"\\u0000"']),
    st.integers(-10**20, 10**20).map(str),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
)


def _rows(data: bytes) -> tuple[list[list[str]], str]:
    text = data.decode("utf-8-sig")
    return list(csv.reader(io.StringIO(text, newline=""))), ","


def _csv(rows: list[list[str]], delimiter: str = ",") -> bytes:
    out = io.StringIO(newline="")
    csv.writer(out, delimiter=delimiter, lineterminator="\n").writerows(rows)
    return out.getvalue().encode("utf-8", "surrogatepass")


@st.composite
def _cell_mutation(draw, files):
    rel = draw(st.sampled_from(TABLES))
    rows, _ = _rows(files[rel])
    r = draw(st.integers(0, len(rows) - 1))
    c = draw(st.integers(0, max(len(rows[r]) - 1, 0)))
    if rows[r]:
        rows[r][c] = draw(cell_text)
    files[rel] = _csv(rows)


@st.composite
def _column_mutation(draw, files):
    rel = draw(st.sampled_from(TABLES))
    rows, _ = _rows(files[rel])
    if not rows[0]:
        return
    c = draw(st.integers(0, len(rows[0]) - 1))
    action = draw(st.sampled_from(["drop", "rename", "unit", "duplicate", "column_of_text"]))
    if action == "drop":
        rows = [row[:c] + row[c + 1:] for row in rows]
    elif action == "rename":
        rows[0][c] = draw(st.one_of(st.sampled_from(_COLUMNS), st.text(max_size=10)))
    elif action == "unit":
        name = rows[0][c].split("[")[0].strip()
        rows[0][c] = f"{name} [{draw(st.one_of(st.sampled_from(_UNITS), st.text(max_size=6)))}]"
    elif action == "duplicate":
        rows = [row + [row[c] if c < len(row) else ""] for row in rows]
    else:
        value = draw(cell_text)
        rows = [rows[0]] + [row[:c] + [value] + row[c + 1:] for row in rows[1:]]
    files[rel] = _csv(rows)


@st.composite
def _file_mutation(draw, files):
    rel = draw(st.sampled_from(TABLES))
    action = draw(st.sampled_from(["semicolon", "tab", "latin1", "truncate", "empty", "remove",
                                   "crlf", "bom", "garbage"]))
    data = files[rel]
    if action in ("semicolon", "tab"):
        files[rel] = _csv(_rows(data)[0], ";" if action == "semicolon" else "\t")
    elif action == "latin1":
        files[rel] = data.decode("utf-8", "replace").replace("S1", "Sé").encode("latin-1", "replace")
    elif action == "truncate":
        files[rel] = data[: draw(st.integers(0, len(data)))]
    elif action == "empty":
        files[rel] = b""
    elif action == "remove":
        del files[rel]
    elif action == "crlf":
        files[rel] = data.replace(b"\n", b"\r\n")
    elif action == "bom":
        files[rel] = b"\xef\xbb\xbf" + data
    else:
        files[rel] = draw(st.binary(max_size=64))


@st.composite
def _toml_mutation(draw, files):
    lines = files["project.toml"].decode("utf-8").split("\n")
    keyed = [i for i, line in enumerate(lines) if " = " in line and not line.startswith("#")]
    action = draw(st.sampled_from(["value", "value", "value", "delete", "section", "garbage"]))
    if action in ("value", "delete"):
        i = draw(st.sampled_from(keyed))
        key = lines[i].split(" = ")[0]
        lines[i] = "" if action == "delete" else f"{key} = {draw(toml_literal)}"
    elif action == "section":
        heads = [i for i, line in enumerate(lines) if line.startswith("[")]
        i = draw(st.sampled_from(heads))
        lines[i] = draw(st.sampled_from(["[[zones]]", "[well]", "[settings]", "[extra]",
                                         "[[limits]]", "[[scenarios]]", "[tables]", ""]))
    else:
        i = draw(st.integers(0, len(lines)))
        lines.insert(i, draw(st.text(max_size=20)))
    files["project.toml"] = "\n".join(lines).encode("utf-8", "surrogatepass")


@st.composite
def mutated_projects(draw) -> dict[str, bytes]:
    """Files of a randomly mutated copy of the good project (relative name -> bytes)."""
    files = dict(BASE)
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from([_cell_mutation, _cell_mutation, _column_mutation,
                                     _toml_mutation, _toml_mutation]))
        draw(kind(files))
    if draw(st.integers(0, 4)) == 0:  # whole-file changes last: the others need readable CSV
        draw(_file_mutation(files))
    return files


def write_project(folder: Path, files: dict[str, bytes]) -> Path:
    """Write the files of a generated project into ``folder`` (created) and return it."""
    for rel, data in files.items():
        path = folder / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)
    return folder


# ----------------------------------------------------------------------------- input classes
# Each strategy below makes the good project odd in one way of a known class and says what
# must come of it: ("rejected", file, field) - one InputError naming that file and field - or
# ("read", None, None) - the project loads like the good one. Used by
# tests/test_fuzz_classes.py.

_DECIMAL = re.compile(r"^\d+\.\d+$")


@st.composite
def decimal_comma_rows(draw):
    """A decimal point turned into a comma in a comma-separated table (the cell unquoted, so
    the number splits in two cells and the rest of the row shifts)."""
    files = dict(BASE)
    choices = []
    for rel in TABLES:
        rows, _ = _rows(files[rel])
        for r, row in enumerate(rows[1:], 1):
            choices += [(rel, r, c) for c, cell in enumerate(row) if _DECIMAL.match(cell)]
    rel, r, c = draw(st.sampled_from(choices))
    lines = files[rel].decode("utf-8").split("\n")
    rows, _ = _rows(files[rel])
    cells = rows[r]
    cells[c] = cells[c].replace(".", ",")
    lines[r] = ",".join(cells)  # the good tables hold no quoted line breaks: record r = line r
    files[rel] = "\n".join(lines).encode("utf-8")
    return files, ("rejected", rel, None)


@st.composite
def repeated_level_times(draw):
    """A level reading repeated at the same time: with the same level it is read once (the
    project loads), with another level it is refused."""
    files = dict(BASE)
    lines = files["levels.csv"].decode("utf-8").rstrip("\n").split("\n")
    r = draw(st.integers(1, len(lines) - 1))
    time, level = lines[r].split(",")
    other = draw(st.one_of(st.just(level), st.floats(50.0, 200.0).map(lambda x: f"{x:.2f}")))
    lines.insert(r + 1, f"{time},{other}")
    files["levels.csv"] = ("\n".join(lines) + "\n").encode("utf-8")
    if float(other) == float(level):
        return files, ("read", None, None)
    return files, ("rejected", "levels.csv", "level")


@st.composite
def flow_log_rates(draw):
    """A rate on the pumped flow log (step S3, 350 gpm): within 10 % of the step's rate it is
    read, beyond it refused."""
    files = dict(BASE)
    factor = draw(st.floats(0.0, 3.0))
    rate = 350.0 * factor
    text = files["flowlogs.csv"].decode("utf-8").replace("pumped-S3,S3,,",
                                                         f"pumped-S3,S3,{rate!r},")
    files["flowlogs.csv"] = text.encode("utf-8")
    if abs(rate - 350.0) <= 0.1 * 350.0 * (1 - 1e-9):
        return files, ("read", None, None)
    if abs(rate - 350.0) <= 0.1 * 350.0 * (1 + 1e-9):
        return files, ("either", "flowlogs.csv", "rate")  # at the tolerance: rounding decides
    return files, ("rejected", "flowlogs.csv", "rate")


@st.composite
def shuffled_steps(draw):
    """The steps table in any row order: read, and sorted back into time order."""
    files = dict(BASE)
    lines = files["steps.csv"].decode("utf-8").rstrip("\n").split("\n")
    body = draw(st.permutations(lines[1:]))
    files["steps.csv"] = ("\n".join([lines[0], *body]) + "\n").encode("utf-8")
    return files, ("read", None, None)


@st.composite
def oversized_toml(draw):
    """A project file at or beyond a size limit: nesting depth, text length, whole-number
    size, number of zones."""
    files = dict(BASE)
    text = files["project.toml"].decode("utf-8")
    kind = draw(st.sampled_from(["nesting", "text", "integer", "zones"]))
    if kind == "nesting":
        depth = draw(st.one_of(st.integers(1, 12), st.integers(13, 5000)))
        # key depth: scenarios (1) -> entry (2) -> seal (3) -> nested arrays below it
        text += f'\n[[scenarios]]\nname = "n"\nseal = {"[" * depth}{"]" * depth}\n'
        outcome = ("rejected", "project.toml", None) if depth + 2 > 10 else ("any", None, None)
    elif kind == "text":
        n = draw(st.integers(150, 400))
        text = text.replace('location = "Quillmarsh well field (invented)"',
                            f'location = "{"x" * n}"')
        outcome = ("read", None, None) if n <= 200 else ("rejected", "project.toml",
                                                         "well.location")
    elif kind == "integer":
        digits = draw(st.integers(1, 6000))
        text = text.replace("seed = 7", f"seed = {'9' * digits}")
        outcome = (("read", None, None) if int("9" * min(digits, 19)) <= 2**63 - 1 and
                   digits <= 18 else ("rejected", "project.toml", None))
    else:
        n = draw(st.integers(95, 105))
        zone = ('\n[[zones]]\nname = "Z{i}"\ntop = "{top} ft"\nbottom = "{bottom} ft"\n'
                'transmissivity = "10 ft2/d"\n')
        extra = "".join(zone.format(i=i, top=500 + 2 * i, bottom=501 + 2 * i)
                        for i in range(n - 3))
        text = text.replace("\n[tables]", extra + "\n[tables]")
        outcome = ("read", None, None) if n <= 100 else ("rejected", "project.toml", "zones")
    files["project.toml"] = text.encode("utf-8")
    return files, outcome


@st.composite
def long_cells(draw):
    """A header unit or a cell of a given length: refused beyond the stated limits."""
    files = dict(BASE)
    n = draw(st.one_of(st.integers(1, 60), st.integers(900, 1100), st.integers(10**4, 10**5)))
    if draw(st.booleans()):
        unit = ("m*" * n)[:n].rstrip("*")
        text = files["levels.csv"].decode("utf-8").replace("level [ft]", f"level [{unit}]")
        files["levels.csv"] = text.encode("utf-8")
        return files, (("any", None, None) if len(unit) <= 40
                       else ("rejected", "levels.csv", None))
    note = "k" * n
    text = files["lab/samples.csv"].decode("utf-8").replace("cooled 4 C", note, 1)
    files["lab/samples.csv"] = text.encode("utf-8")
    return files, (("read", None, None) if n <= 1000
                   else ("rejected", "lab/samples.csv", "preservation"))


def _edit(files: dict[str, bytes], rel: str, old: str, new: str, count: int = 1) -> None:
    text = files[rel].decode("utf-8")
    assert old in text, (rel, old)
    files[rel] = text.replace(old, new, count).encode("utf-8")


# the lab table's value column by unit: mg/L rows and ug/L rows; a header unit equal to one of
# them (g/m^3 is mg/L, µg/L is ug/L) disagrees with the rows of the other; None: a unit of
# another dimension, or one blendq does not read
_SAME_AS = {"mg/L": "mg/L", "g/m^3": "mg/L", "ug/L": "ug/L", "µg/L": "ug/L", "ng/L": "ng/L",
            "mg/kg": None, "gpm": None, "g/m3": None}


@st.composite
def header_unit_against_unit_column(draw):
    """A unit in the header of the lab table's value column ("value [g/m3]") while the rows
    keep their unit column: refused naming the first row whose unit disagrees (a row that
    names the same unit in other words agrees); a header unit that is no concentration is
    refused at the header. With every row's unit cell emptied, the header gives the unit."""
    files = dict(BASE)
    unit = draw(st.sampled_from(sorted(_SAME_AS)))
    _edit(files, "lab/samples.csv", "analyte,value,unit", f"analyte,value [{unit}],unit")
    if draw(st.booleans()) and _SAME_AS[unit] is not None:  # the unit column emptied
        rows, _ = _rows(files["lab/samples.csv"])
        files["lab/samples.csv"] = _csv([rows[0]] + [r[:4] + [""] + r[5:] for r in rows[1:]])
        return files, ("read" if unit == "mg/L" else "any", None, None)
    # a unit blendq does not read is refused at the header; any other at the first row whose
    # unit cell disagrees (a concentration per mass, or a rate, disagrees with every row)
    return files, ("rejected", "lab/samples.csv", "value" if unit == "g/m3" else "unit")


def _typo(draw, word: str) -> str:
    """``word`` with one letter dropped, doubled or swapped with its neighbour."""
    i = draw(st.integers(0, len(word) - 2))
    kind = draw(st.sampled_from(["drop", "double", "swap"]))
    if kind == "drop":
        return word[:i] + word[i + 1:]
    if kind == "double":
        return word[:i] + word[i] + word[i:]
    return word[:i] + word[i + 1] + word[i] + word[i + 2:]


@st.composite
def review_rule_names(draw):
    """A severity override ``[settings.qa] severity`` naming a review rule: a known name is
    read, a misspelt one refused naming the project file's settings.qa field."""
    from blendq.review.findings import RULES

    files = dict(BASE)
    rule = draw(st.sampled_from(sorted(RULES)))
    name = _typo(draw, rule) if draw(st.booleans()) else rule
    severity = draw(st.sampled_from(["info", "warning", "error"]))
    _edit(files, "project.toml", "field_readings = 5\n",
          f'field_readings = 5\nseverity = {{ {json.dumps(name)} = "{severity}" }}\n')
    if name in RULES:
        return files, ("read", None, None)
    return files, ("rejected", "project.toml", f"settings.qa.severity.{name}")


@st.composite
def nitrate_bases(draw):
    """The nitrate basis stated twice, in a limit (value "8 mg/L as ..." and basis "as ...")
    or in a lab row (unit "mg/L as ..." and basis "..."): read when both name the same basis,
    refused naming the field when they differ."""
    files = dict(BASE)
    a, b = draw(st.sampled_from(["N", "NO3"])), draw(st.sampled_from(["N", "NO3"]))
    if draw(st.booleans()):
        _edit(files, "project.toml", 'value = "8 mg/L"\nbasis = "as N"',
              f'value = "{8 if a == "N" else 35.4} mg/L as {a}"\nbasis = "as {b}"')
        return files, (("read", None, None) if a == b else
                       ("rejected", "project.toml", "limits[1].basis"))
    _edit(files, "lab/samples.csv", "QW3-S2,S2,nitrate,34.5,mg/L,as NO3,",
          f"QW3-S2,S2,nitrate,{34.5 if a == 'NO3' else 7.79},mg/L as {a},as {b},")
    return files, (("read", None, None) if a == b else
                   ("rejected", "lab/samples.csv", "basis"))


@st.composite
def sample_depths(draw):
    """A depth sample at any depth (the deepest zone's bottom is 410 ft): read down to twice
    that depth (a sample below the zones is a review warning), refused beyond it as a typing
    error, and above the datum."""
    files = dict(BASE)
    depth = draw(st.one_of(st.floats(-50.0, 1500.0), st.floats(1e3, 1e7),
                           st.sampled_from([0.0, 410.0, 819.9, 820.1, 3350.0])))
    _edit(files, "lab/samples.csv", "10:00,,335,", f"10:00,,{depth!r},")
    if depth < 0 or depth > 820.0 * (1 + 1e-9):
        return files, ("rejected", "lab/samples.csv", "depth")
    if depth > 820.0 * (1 - 1e-9):
        return files, ("either", "lab/samples.csv", "depth")
    return files, ("read", None, None)


_ODD = ["$x$", "$", "$$", "a $b$ c", "🌊", "Zone 🌊 2", "🐟" * 30, "Über-Zone", "ﬁne",
        "x" * 199, "x" * 200, "x" * 201, "y" * 5000, "tab\there", "quote \" in", "back\\slash",
        "{braces}", "%d %s", "\u202eright-to-left", "名前"]


@st.composite
def odd_names(draw):
    """Names and texts of the project file with dollar signs (mathematics to a chart
    library), emoji, other scripts, control characters and great lengths: a zone name, the
    well's name or location. Read as given (a name is text), or refused at a stated length
    limit naming the field; never an internal error."""
    files = dict(BASE)
    name = draw(st.one_of(st.sampled_from(_ODD), st.text(
        st.characters(blacklist_categories=("Cs",)), min_size=1, max_size=40)))
    field = draw(st.sampled_from(["zones[2].name", "well.name", "well.location"]))
    old = {"zones[2].name": 'name = "Middle"', "well.name": 'name = "Quillmarsh 3"',
           "well.location": 'location = "Quillmarsh well field (invented)"'}[field]
    # a TOML basic string: JSON escapes the C0 controls; DEL must be escaped too
    quoted = json.dumps(name, ensure_ascii=False).replace("\x7f", "\\u007f")
    _edit(files, "project.toml", old, old.split(" = ")[0] + " = " + quoted)
    return files, ("any", "project.toml", field)


#: every class strategy
input_classes = st.one_of(decimal_comma_rows(), repeated_level_times(), flow_log_rates(),
                          shuffled_steps(), oversized_toml(), long_cells())

#: the classes of odd input a practitioner's files hold, each with its expected outcome
fault_classes = st.one_of(decimal_comma_rows(), repeated_level_times(), shuffled_steps(),
                          oversized_toml(), long_cells(), header_unit_against_unit_column(),
                          review_rule_names(), nitrate_bases(), sample_depths(), odd_names())
