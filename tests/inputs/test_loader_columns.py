"""The samples table read column by column (the fast path of a long lab table) equals the
row-by-row reading, and a bad table gets the same located message either way."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pandas as pd
import pytest
from fuzz_projects import mutated_projects, write_project
from hypothesis import HealthCheck, given, settings

from blendq.errors import InputError
from blendq.inputs import loader

DATA = Path(__file__).parents[1] / "data"
FOLDERS = sorted(p.parent for p in DATA.glob("*/*/project.toml")
                 if b"samples" in p.read_bytes())


def _both(folder: Path, monkeypatch: pytest.MonkeyPatch):
    """(outcome by columns, outcome row by row): the project or the error's text."""
    outcomes = []
    for by_rows in (False, True):
        with monkeypatch.context() as m:
            if by_rows:
                m.setattr(loader, "_samples_by_column", lambda *args: None)
            try:
                outcomes.append(loader.load_project(folder))
            except InputError as err:
                outcomes.append(str(err))
    return outcomes


def _same(a, b) -> None:
    assert type(a) is type(b), (a, b)
    if isinstance(a, str):
        assert a == b
    else:
        pd.testing.assert_frame_equal(a.samples, b.samples, check_exact=True)


@pytest.mark.parametrize("folder", FOLDERS, ids=lambda p: f"{p.parent.name}/{p.name}")
def test_columns_equal_rows_on_the_corpus(folder, monkeypatch):
    _same(*_both(folder, monkeypatch))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(files=mutated_projects())
def test_columns_equal_rows_on_mutated_projects(files, monkeypatch):
    with tempfile.TemporaryDirectory() as tmp:
        _same(*_both(write_project(Path(tmp) / "p", files), monkeypatch))
