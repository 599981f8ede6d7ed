"""Batch analysis of a wellfield: the same results on every executor, a failed well does not
stop the others, and no worker process outlives the call."""

from __future__ import annotations

import hashlib
import multiprocessing
import shutil
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from blendq.decide.batch import run_batch, tasks_for, well_seed
from blendq.errors import InputError
from blendq.inputs.wellfield_file import read_wellfield

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "wellfield"
#: few draws: the tests compare executors, not windows
DRAWS = 40

FIELD = """
[wellfield]
name = "Batch test"
seed = 11

[[entry_points]]
name = "E"
demand = "500 gpm"

[[wells]]
name = "seven"
project = "TH-7"
entry_point = "E"

[[wells]]
name = "broken"
project = "broken"
entry_point = "E"

[[wells]]
name = "nine"
project = "TH-9"
entry_point = "E"
"""


@pytest.fixture(scope="module")
def field(tmp_path_factory):
    root = tmp_path_factory.mktemp("field")
    for name in ("TH-7", "TH-9"):
        shutil.copytree(EXAMPLE / name, root / name)
    shutil.copytree(EXAMPLE / "TH-9", root / "broken")
    bad = root / "broken" / "project.toml"
    bad.write_text(bad.read_text(encoding="utf-8").replace('well_radius = "8 in"',
                                                           'well_radius = "8 gpm"'),
                   encoding="utf-8")
    (root / "wellfield.toml").write_text(FIELD, encoding="utf-8")
    return read_wellfield(root)


@pytest.fixture(scope="module")
def in_process(field):
    return run_batch(tasks_for(field, draws=DRAWS, keep_analysis=False), workers=1)


def _same(a, b) -> None:
    assert [o.name for o in a] == [o.name for o in b]
    for x, y in zip(a, b, strict=True):
        assert x.error == y.error
        if x.summary is None:
            assert y.summary is None
            continue
        assert x.summary.seed == y.summary.seed
        assert x.summary.intervals == y.summary.intervals
        assert x.summary.recommended == y.summary.recommended
        np.testing.assert_array_equal(x.summary.concentration, y.summary.concentration)


def test_a_failed_well_reports_one_line_and_the_others_go_on(in_process):
    seven, broken, nine = in_process
    assert broken.failed and broken.summary is None
    assert broken.error.startswith("project.toml") and "well.well_radius" in broken.error
    assert "\n" not in broken.error
    assert not seven.failed and not nine.failed
    assert seven.summary.entry_point == "E" and seven.summary.draws == DRAWS


def test_local_processes_give_the_same_results(field, in_process):
    out = run_batch(tasks_for(field, draws=DRAWS, keep_analysis=False), workers=2)
    _same(in_process, out)
    assert multiprocessing.active_children() == []  # no worker outlives the call


def test_a_dask_local_cluster_gives_the_same_results(field, in_process):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        out = run_batch(tasks_for(field, draws=DRAWS, keep_analysis=False), scheduler=client)
    _same(in_process, out)


def test_the_seed_of_a_well_follows_its_name_not_its_place(field, in_process):
    reordered = list(reversed(tasks_for(field, draws=DRAWS, keep_analysis=False)))
    out = run_batch(reordered, workers=1)
    _same(in_process, list(reversed(out)))


def test_whole_analyses_come_back_when_asked(field, in_process):
    tasks = tasks_for(field, draws=DRAWS)[:1]
    (one,) = run_batch(tasks, workers=1)
    assert one.analysis is not None
    assert one.analysis.window.intervals == in_process[0].summary.intervals


def test_an_interrupt_leaves_no_worker(field):
    def stop(done, total, name):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_batch(tasks_for(field, draws=DRAWS, keep_analysis=False), workers=2, progress=stop)
    assert multiprocessing.active_children() == []


@settings(max_examples=50, deadline=None)
@given(st.integers(0, 2**63 - 1), st.text(min_size=1, max_size=40),
       st.text(min_size=1, max_size=40))
def test_well_seeds(seed, a, b):
    s = well_seed(seed, a)
    assert 0 <= s < 2**63 and s == well_seed(seed, a)
    # the first 63 bits of SHA-256 (FIPS 180-4) of "<seed>:<name>"
    digest = hashlib.sha256(f"{seed}:{a}".encode()).digest()
    assert s == int.from_bytes(digest[:8], "big") >> 1
    if a != b:
        assert s != well_seed(seed, b)


def test_bad_workers_and_a_missing_dask_are_one_line(field, monkeypatch):
    tasks = tasks_for(field, draws=DRAWS)
    with pytest.raises(InputError, match="--workers"):
        run_batch(tasks, workers=0)
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(InputError, match=r"pip install 'blendq\[wellfield\]'"):
        run_batch(tasks, scheduler="tcp://127.0.0.1:1")


def test_the_wellfield_rate_range_replaces_the_projects(field):
    # 1 US gallon = 3.785411784 L exactly (NIST Handbook 44, Appendix C)
    gpm = 3.785411784e-3 * 1440.0
    nine = tasks_for(field, draws=DRAWS, keep_analysis=False)[2]
    (out,) = run_batch([replace(nine, rate_max=200 * gpm)], workers=1)
    s = out.summary
    assert s.window_high <= 200 * gpm * (1 + 1e-12)
    assert not s.hydraulic_ok[s.rates > 200 * gpm * (1 + 1e-12)].any()
    (bad,) = run_batch([replace(nine, rate_min=2000 * gpm)], workers=1)
    assert bad.error.startswith("wellfield.toml field wells[3].rate_max: the rate range")


def test_worker_processes_get_one_blas_thread_unless_the_user_chose(monkeypatch):
    import os

    from blendq.decide import batch

    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    monkeypatch.delenv("MKL_NUM_THREADS", raising=False)
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    with batch._one_blas_thread():
        assert os.environ["OPENBLAS_NUM_THREADS"] == "1"
        assert os.environ["MKL_NUM_THREADS"] == "1"
        assert os.environ["OMP_NUM_THREADS"] == "3"  # the user's own setting stays
    assert "OPENBLAS_NUM_THREADS" not in os.environ and "MKL_NUM_THREADS" not in os.environ
    assert os.environ["OMP_NUM_THREADS"] == "3"
