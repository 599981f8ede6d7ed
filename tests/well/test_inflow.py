"""Tests of blendq.well.inflow: the zone-property quick look assumes no hydraulics.

Sources: the project's rule that no command assumes a transmissivity (docs/methods.md,
section 6.3); mass balance in the well (zone flows add up to the pumping rate) is checked in
tests/decide/test_analysis.py.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.well.inflow import inflow_table

DATA = Path(__file__).parents[1] / "data" / "projects"


def test_inflow_without_transmissivity_is_an_input_error():
    # the project has flow logs, but the quick look works from zone properties alone
    p = load_project(DATA / "quillmarsh_no_transmissivity")
    assert len(p.flowlogs)
    with pytest.raises(InputError) as err:
        inflow_table(p, [500.0, 1000.0])
    assert err.value.file == "project.toml" and err.value.field == "zones[1].transmissivity"
    assert "assumes none" in err.value.message


def test_inflow_with_transmissivity_runs():
    t = inflow_table(load_project(DATA / "quillmarsh_us"), [500.0, 1000.0])
    assert len(t) == 6
    assert t.groupby("rate")["share"].sum().to_numpy() == pytest.approx([1.0, 1.0], abs=1e-9)
