"""Short check of the planner on an independent calibration well (full: bench_plan.py)."""

from __future__ import annotations

import numpy as np
import pytest
from plan_check import compare


@pytest.mark.slow
def test_predicted_end_spread_matches_fitted_replicates_of_the_thief_well():
    """The thief well (intake between zones, a zone taking water at low rates; ambient and
    pumped logs): the window's low end is set by nitrate, the high end by the pump's range.
    The sd of the low end over 12 fitted replicates within 25 % of the plan's prediction; the
    high end does not move."""
    r = compare("thief", range(1, 13))
    assert r["reasons"] == ["nitrate", "pump rate range"]
    assert r["no_window"] == 0
    np.testing.assert_allclose(r["replicates"][0], r["predicted"][0], rtol=0.25)
    assert r["predicted"][1] == 0.0 and r["replicates"][1] == 0.0
