"""Tests of the crossflow-memory review (blendq.review.returned) and the purge volume that
counts the water the thief zones stored (blendq.review.field.check_purge).

Sources: hand calculations written beside each check (casing volume pi r^2 L; the volumes of
the invented demo well TH-2); the stored volumes themselves are checked against hand-computed
mass balances in tests/well/test_memory.py.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import blendq
from blendq.inputs.loader import load_project
from blendq.review.field import check_purge, step_schedule
from blendq.review.findings import qa_options, review
from blendq.review.returned import check_returned_water
from blendq.review.rules import prepare_samples
from blendq.well.memory import review_memory

DEMO = Path(blendq.__file__).parent / "data" / "demo"
OPTS = qa_options(None)


def _memory(fraction: float) -> pd.DataFrame:
    return pd.DataFrame({"sample_id": ["A"], "step": ["1"], "idle_time": [0.5],
                         "stored": [40.0], "pumped": [120.0], "returned_fraction": [fraction],
                         "thieves": ["deep"], "shares": [(0.0, fraction)]})


def _samples() -> pd.DataFrame:
    return pd.DataFrame({"sample_id": ["A"], "source_row": [3]})


def test_flag_names_step_and_volumes():
    out = check_returned_water(_samples(), _memory(0.05), OPTS)
    (f,) = out.findings
    assert f.rule == "returned_water" and f.severity == "warning" and f.source_row == 3
    assert f.message.startswith("step 1: 120 m^3 pumped since the pump started against 40 m^3")
    assert "12.0 h idle" in f.message and "5.0 %" in f.message


def test_no_flag_at_or_below_the_threshold_and_skips():
    assert not check_returned_water(_samples(), _memory(0.02), OPTS).findings
    assert check_returned_water(_samples(), None, OPTS).skipped[0][0] == "returned_water"
    unknown = _memory(np.nan)
    assert "A" in check_returned_water(_samples(), unknown, OPTS).skipped[0][1]


def test_demo_first_step_is_flagged():
    p = load_project(DEMO)
    assert p.settings.idle_time_before_test == pytest.approx(2 / 24, rel=1e-12)
    mem, stored = review_memory(p)
    result = review(p, memory=mem)
    hits = result.findings[result.findings["rule"] == "returned_water"]
    assert list(hits["sample_id"]) == ["TH2-1"]
    assert "step S1" in hits["message"].iloc[0]
    # stored over 2 h, in m3: total of the thief zones' crossflow x idle time
    np.testing.assert_allclose(stored.total, np.sum(np.clip(-stored.ambient_flow, 0, None))
                               * 2 / 24, rtol=1e-12)
    no_idle = replace(p, settings=replace(p.settings, idle_time_before_test=None))
    assert review_memory(no_idle) == (None, None)
    assert "returned_water" not in set(review(no_idle).findings["rule"])


def test_purge_counts_the_stored_volume():
    p = load_project(DEMO)
    samples = prepare_samples(p.samples)
    samples["step_key"] = samples["step"].astype(str)
    schedule = step_schedule(p.steps)
    # hand calculation, TH2-1: 200 gpm x 170 min = 34,000 gal = 128.7 m3 pumped; casing
    # pi 0.2032^2 x 81.65 = 10.59 m3, three casing volumes 31.8 m3: enough without memory
    plain = check_purge(p, samples, schedule, {}, OPTS)
    assert "TH2-1" not in [f.sample_id for f in plain.findings]
    # with 100 m3 stored: 31.8 + 100 = 131.8 m3 > 128.7 m3 -> a warning that names it
    out = check_purge(p, samples, schedule, {}, OPTS, stored={"TH2-1": 100.0})
    (f,) = [f for f in out.findings if f.sample_id == "TH2-1"]
    assert f.severity == "warning" and "100 m^3 the thief zones stored" in f.message
    assert "131.8 m^3" in f.message
