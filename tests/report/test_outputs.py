"""Tests of blendq.report.outputs: all-or-nothing output folders, safe CSV, stable JSON."""

from __future__ import annotations

import dataclasses
import datetime as dt
import io
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

import blendq as bq
import blendq.report.outputs as outputs
from blendq import csvtext
from blendq.errors import InputError
from blendq.report.outputs import MARKER_NAME, to_csv_safe, to_json_stable, write_outputs


def _tree(folder: Path) -> dict[str, bytes]:
    return {
        p.relative_to(folder).as_posix(): p.read_bytes()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _siblings(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.parent.iterdir())


# --- write_outputs ----------------------------------------------------------------------------


def test_writes_all_files_and_marker(tmp_path: Path) -> None:
    target = tmp_path / "out"
    result = write_outputs(target, {"report.html": "<p>é</p>", "charts/rate.png": b"\x89PNG"})
    assert result == target
    tree = _tree(target)
    assert tree["report.html"] == "<p>é</p>".encode()
    assert tree["charts/rate.png"] == b"\x89PNG"
    assert MARKER_NAME in tree
    assert _siblings(target) == ["out"]  # no working folder left beside it


def test_replaces_a_folder_blendq_made(tmp_path: Path) -> None:
    target = tmp_path / "out"
    write_outputs(target, {"a.txt": "old", "old-only.txt": "x"})
    write_outputs(target, {"a.txt": "new"})
    assert _tree(target) == {"a.txt": b"new", MARKER_NAME: (target / MARKER_NAME).read_bytes()}
    assert _siblings(target) == ["out"]


def test_empty_existing_folder_is_used(tmp_path: Path) -> None:
    target = tmp_path / "out"
    target.mkdir()
    write_outputs(target, {"a.txt": "x"})
    assert (target / "a.txt").read_text() == "x"


def test_refuses_a_folder_blendq_did_not_make(tmp_path: Path) -> None:
    target = tmp_path / "fieldnotes"
    target.mkdir()
    (target / "mine.txt").write_text("keep me")
    with pytest.raises(InputError, match="not written by blendq"):
        write_outputs(target, {"a.txt": "x"})
    assert _tree(target) == {"mine.txt": b"keep me"}
    assert _siblings(target) == ["fieldnotes"]


def test_refuses_a_file_in_place_of_the_folder(tmp_path: Path) -> None:
    target = tmp_path / "out"
    target.write_text("a file")
    with pytest.raises(InputError, match="is a file"):
        write_outputs(target, {"a.txt": "x"})
    assert target.read_text() == "a file"


def test_failure_mid_write_leaves_old_folder_intact(tmp_path: Path, monkeypatch) -> None:
    target = tmp_path / "out"
    write_outputs(target, {"a.txt": "old a", "b.txt": "old b"})
    before = _tree(target)
    real_write = outputs._write_file
    calls = []

    def failing_write(path: Path, data: bytes) -> None:
        calls.append(path.name)
        if len(calls) == 2:  # the first file is already on disk in the working folder
            raise OSError("disk full (simulated)")
        real_write(path, data)

    monkeypatch.setattr(outputs, "_write_file", failing_write)
    with pytest.raises(OSError, match="disk full"):
        write_outputs(target, {"a.txt": "new a", "b.txt": "new b", "c.txt": "new c"})
    assert calls == ["a.txt", "b.txt"]
    assert _tree(target) == before
    assert _siblings(target) == ["out"]


def test_failure_while_swapping_puts_old_folder_back(tmp_path: Path, monkeypatch) -> None:
    target = tmp_path / "out"
    write_outputs(target, {"a.txt": "old"})
    before = _tree(target)
    real_rename = os.rename
    calls = []

    def failing_rename(source, destination) -> None:
        calls.append((Path(source).name, Path(destination).name))
        if len(calls) == 2:  # old folder already moved aside; moving the new one in fails
            raise OSError("rename failed (simulated)")
        real_rename(source, destination)

    monkeypatch.setattr(outputs.os, "rename", failing_rename)
    with pytest.raises(OSError, match="rename failed"):
        write_outputs(target, {"a.txt": "new"})
    assert calls[0][0] == "out" and calls[1][1] == "out" and calls[2][1] == "out"
    assert _tree(target) == before
    assert _siblings(target) == ["out"]


def test_failure_on_first_write_of_a_new_folder_leaves_nothing(tmp_path: Path, monkeypatch) -> None:
    def failing_write(path: Path, data: bytes) -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr(outputs, "_write_file", failing_write)
    with pytest.raises(KeyboardInterrupt):
        write_outputs(tmp_path / "out", {"a.txt": "x"})
    assert list(tmp_path.iterdir()) == []


def test_refuses_to_overwrite_a_protected_input(tmp_path: Path) -> None:
    project = tmp_path / "project"
    write_outputs(project, {"x.txt": "earlier output"})
    samples = project / "samples.csv"
    samples.write_text("step,rate\n1,400\n")
    with pytest.raises(InputError, match="samples.csv") as info:
        write_outputs(project, {"samples.csv": "overwritten"}, protect={samples})
    assert info.value.file == "samples.csv"
    with pytest.raises(InputError, match="samples.csv"):
        write_outputs(project, {"other.csv": "x"}, protect={samples})  # would delete it
    assert samples.read_text() == "step,rate\n1,400\n"
    with pytest.raises(InputError, match="well.toml"):
        write_outputs(tmp_path / "well.toml", {"a": "x"}, protect={tmp_path / "well.toml"})


def test_protected_input_is_found_through_relative_and_dotted_paths(
    tmp_path: Path, monkeypatch
) -> None:
    monkeypatch.chdir(tmp_path)
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "input.csv").write_text("a\n")
    with pytest.raises(InputError, match="input.csv"):
        write_outputs("out/../out", {"a.txt": "x"}, protect={"./out/input.csv"})


def test_protected_input_elsewhere_does_not_block(tmp_path: Path) -> None:
    inputs = tmp_path / "inputs.csv"
    inputs.write_text("x")
    write_outputs(tmp_path / "out", {"a.txt": "x"}, protect={inputs})
    assert inputs.read_text() == "x"


@pytest.mark.parametrize("name", ["../escape.txt", "/abs.txt", "a/../../b", "", "a\\b", "C:evil"])
def test_bad_file_names_are_refused(tmp_path: Path, name: str) -> None:
    with pytest.raises(InputError, match="plain relative path"):
        write_outputs(tmp_path / "out", {name: "x"})
    assert list(tmp_path.iterdir()) == []


def test_redundant_separators_are_normalised(tmp_path: Path) -> None:
    target = write_outputs(tmp_path / "out", {"charts//rate.png": b"1", "./notes.txt": "n"})
    assert (target / "charts" / "rate.png").read_bytes() == b"1"
    with pytest.raises(InputError, match="given twice"):
        write_outputs(tmp_path / "out2", {"a/b": "1", "a//b": "2"})


def test_reserved_and_conflicting_names_are_refused(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="reserved"):
        write_outputs(tmp_path / "out", {MARKER_NAME: "x"})
    with pytest.raises(InputError, match="also a file"):
        write_outputs(tmp_path / "out", {"charts": "x", "charts/a.png": b""})


def test_symlinked_output_folder_is_refused(tmp_path: Path) -> None:
    real = tmp_path / "real"
    write_outputs(real, {"a.txt": "x"})
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    with pytest.raises(InputError, match="symbolic link"):
        write_outputs(link, {"a.txt": "y"})
    assert (real / "a.txt").read_text() == "x"


def test_folder_permissions_follow_umask(tmp_path: Path) -> None:
    target = write_outputs(tmp_path / "out", {"a.txt": "x"})
    umask = os.umask(0)
    os.umask(umask)
    assert target.stat().st_mode & 0o777 == 0o777 & ~umask


# --- to_csv_safe ------------------------------------------------------------------------------


def test_formula_guard() -> None:
    frame = pd.DataFrame(
        {
            "text": ["=1+1", "+SUM(A1)", "-x", "@cmd", "\tx", "\rx", "ok", "-1.5", "+2e-3", None],
            "number": [-1.5, 2.0, -3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, np.nan],
            "flag": pd.Categorical(["=bad"] * 10),
        }
    )
    parsed = pd.read_csv(io.StringIO(to_csv_safe(frame)))
    assert parsed["text"].fillna("").tolist() == [
        "'=1+1",
        "'+SUM(A1)",
        "'-x",
        "'@cmd",
        "'\tx",
        "'\rx",
        "ok",
        "-1.5",
        "+2e-3",
        "",
    ]
    assert parsed["number"].tolist()[:9] == [-1.5, 2.0, -3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0]
    assert set(parsed["flag"]) == {"'=bad"}


def test_formula_guard_on_labels_and_index() -> None:
    frame = pd.DataFrame({"=HYPERLINK(x)": [1]}, index=pd.Index(["@x"], name="-name"))
    text = to_csv_safe(frame, index=True)
    assert text == "'-name,'=HYPERLINK(x)\r\n'@x,1\r\n"


def test_csv_is_stable_and_round_trips_numbers() -> None:
    frame = pd.DataFrame({"rate": [0.1, 1 / 3, 1e-12, -2.5], "step": [1, 2, 3, 4]})
    first, second = to_csv_safe(frame), to_csv_safe(frame.copy())
    assert first == second and first.count("\r\n") == 5
    back = pd.read_csv(io.StringIO(first))
    np.testing.assert_array_equal(back["rate"].to_numpy(), frame["rate"].to_numpy())


@given(st.text(max_size=12))
def test_formula_guard_property(text: str) -> None:
    # no guarded cell may begin with a formula character; plain numbers stay unchanged
    guarded = csvtext._guard_cell(text)
    if csvtext._PLAIN_NUMBER.fullmatch(text):
        assert guarded == text
    else:
        assert not guarded.startswith(("=", "+", "-", "@", "\t", "\r"))
        assert guarded in (text, "'" + text)


def test_comment_block_leads_and_is_skipped_by_pandas() -> None:
    frame = pd.DataFrame({"well": ["A", "B"], "rate [gpm]": [120.5, 80.0]})
    text = to_csv_safe(frame, comments=outputs.csv_comments("Test table,\nper well"))
    lines = text.split("\r\n")
    assert lines[0] == "# Test table, per well"  # a line end inside a comment becomes a space
    assert lines[1] == f"# written by blendq {bq.__version__}"
    assert lines[2:5] == [f"# {c}" for c in (bq.CAUTIONS[0], bq.CAUTIONS[1], bq.CAUTIONS[3])]
    assert lines[5] == "well,rate [gpm]" and text.endswith("\r\n") and "\n" not in text.replace(
        "\r\n", "")
    pd.testing.assert_frame_equal(pd.read_csv(io.StringIO(text), comment="#"), frame)
    # without comments the text is what it was: pandas' CSV of the guarded table
    assert to_csv_safe(frame) == frame.to_csv(index=False, lineterminator="\r\n")


def test_cells_holding_a_hash_are_quoted() -> None:
    frame = pd.DataFrame({"#id": ["#3", "well #2", "ok", "=#x"], "n": [1, 2, 3, 4]})
    text = to_csv_safe(frame, comments=["c"])
    assert text == ('# c\r\n"#id",n\r\n"#3",1\r\n"well #2",2\r\nok,3\r\n"\'=#x",4\r\n')
    back = pd.read_csv(io.StringIO(text), comment="#")
    assert list(back.columns) == ["#id", "n"]
    assert back["#id"].tolist() == ["#3", "well #2", "ok", "'=#x"]
    assert back["n"].tolist() == [1, 2, 3, 4]


_CELL = st.text(alphabet=st.sampled_from(list("ab #,\"\r\n=+-@\t1. ")), max_size=8)


@given(st.lists(st.tuples(_CELL, _CELL), min_size=1, max_size=5), st.lists(_CELL, max_size=3))
def test_text_cells_round_trip_with_comment_hash(rows, comments) -> None:
    # pandas' C reader with comment="#" gives back every (guarded) cell and label
    frame = pd.DataFrame(rows, columns=["x #1", "y"])
    text = to_csv_safe(frame, comments=comments)
    assert text.count("\r\n# ") + text.startswith("# ") == len(comments)
    back = pd.read_csv(io.StringIO(text), comment="#", dtype=str, keep_default_na=False)
    assert list(back.columns) == ["x #1", "y"]
    for col in frame.columns:
        assert back[col].tolist() == [csvtext._guard_cell(v) for v in frame[col]]


@given(st.lists(st.text(alphabet=st.sampled_from(list("ab ,\"\r\n=-1.")), max_size=6),
                min_size=1, max_size=4))
def test_without_hash_the_fields_are_pandas_own(cells) -> None:
    # the rewrite of the fields changes nothing but the quoting of "#"
    frame = pd.DataFrame({"t": cells, "v": np.arange(len(cells)) / 3})
    guarded = frame.assign(t=frame["t"].map(csvtext._guard_cell))
    assert to_csv_safe(frame) == guarded.to_csv(index=False, lineterminator="\r\n")


# --- to_json_stable ---------------------------------------------------------------------------


@dataclasses.dataclass
class _Result:
    rate: float
    window: tuple[float, float]


def _results() -> dict:
    rng = np.random.default_rng(42)
    return {
        "zones": {"upper": np.float64(12.5), "lower": np.float32(0.1), 3: np.int64(7)},
        "draws": rng.normal(size=4),
        "missing": [float("nan"), np.nan, float("inf"), -np.inf, None],
        "flags": [np.bool_(True), False],
        "negative_zero": -0.0,
        "table": pd.DataFrame({"rate": [100.0, 200.0], "nitrate": [4.5, np.nan]}),
        "series": pd.Series([1.5, 2.5], index=["a", "b"]),
        "when": dt.date(2024, 5, 1),
        "sampled": [np.datetime64("2024-05-01T10:30"), np.datetime64("NaT"), pd.NA, pd.NaT],
        "path": Path("charts") / "rate.png",
        "result": _Result(1150.0, (150.0, 1150.0)),
        "set": {3, 1, 2},
    }


def test_json_is_sorted_valid_and_handles_numpy_and_nan() -> None:
    text = to_json_stable(_results())
    data = json.loads(text)
    assert list(data) == sorted(data)
    assert list(data["zones"]) == ["3", "lower", "upper"]
    assert data["zones"] == {"3": 7, "lower": 0.1, "upper": 12.5}
    assert data["missing"] == [None, None, None, None, None]
    assert data["negative_zero"] == 0.0 and "-0.0" not in text
    assert data["table"] == {"columns": ["rate", "nitrate"], "rows": [[100.0, 4.5], [200.0, None]]}
    assert data["series"] == {"a": 1.5, "b": 2.5}
    assert data["when"] == "2024-05-01" and data["path"] == "charts/rate.png"
    assert data["sampled"] == ["2024-05-01T10:30:00", None, None, None]
    assert data["result"] == {"rate": 1150.0, "window": [150.0, 1150.0]}
    assert data["set"] == [1, 2, 3]
    assert "NaN" not in text and "Infinity" not in text
    assert text.endswith("}\n")


def test_json_floats_round_trip_exactly() -> None:
    values = np.random.default_rng(7).lognormal(size=50)
    back = json.loads(to_json_stable(values))
    assert back == values.tolist()  # shortest repr reads back as the same float


def test_json_significant_digits() -> None:
    assert json.loads(to_json_stable([1 / 3, 123456.789], digits=4)) == [0.3333, 123500.0]


def test_json_is_byte_identical_across_runs_and_processes() -> None:
    first = to_json_stable(_results())
    assert to_json_stable(_results()) == first
    # a fresh interpreter with another hash seed (set and dict order must not leak out)
    code = (
        "import sys; sys.path.insert(0, sys.argv[1]); import test_outputs as t; "
        "sys.stdout.write(t.to_json_stable(t._results()))"
    )
    env = dict(os.environ, PYTHONHASHSEED="12345")
    out = subprocess.run(
        [sys.executable, "-c", code, str(Path(__file__).parent)],
        capture_output=True,
        text=True,
        check=True,
        env=env,
    )
    assert out.stdout == first


def test_json_refuses_unknown_types_and_colliding_keys() -> None:
    with pytest.raises(TypeError, match="complex"):
        to_json_stable({"z": 1 + 2j})
    with pytest.raises(ValueError, match="same JSON key"):
        to_json_stable({1: "a", "1": "b"})


@given(
    st.recursive(
        st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=5),
        lambda children: (
            st.lists(children, max_size=4)
            | st.dictionaries(st.text(max_size=4), children, max_size=4)
        ),
        max_leaves=20,
    )
)
def test_json_property_valid_and_idempotent(value) -> None:
    text = to_json_stable(value)
    loaded = json.loads(text)
    assert to_json_stable(loaded) == text

    def finite(x):
        if isinstance(x, float):
            return x if math.isfinite(x) else None
        if isinstance(x, list):
            return [finite(i) for i in x]
        if isinstance(x, dict):
            return {k: finite(v) for k, v in x.items()}
        return x

    assert loaded == json.loads(json.dumps(finite(value)))
