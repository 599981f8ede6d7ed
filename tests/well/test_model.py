"""Tests of blendq.well.model: prior hydraulics from zone properties, and no invented ones.

Sources:
- Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU 27(4): transient conductance
  G = 4 pi T / (ln(2.25 T t / (r_w^2 S)) + 2 s) (skin after Hawkins 1956), written out here
  independently of blendq.well.hydraulics.
- The rule that no command assumes a transmissivity (an input error, or a flat prior labelled
  as such where flow logs at a pumped rate decide the shares) is the project's own
  (docs/methods.md, section 6.3); tested here as documented behaviour.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.well.model import (
    NO_PRIOR_SOURCE,
    PRIOR_LOG_CONDUCTANCE_SD,
    START_CONDUCTANCE,
    elapsed_test_time,
    prior_hydraulics,
    shares_from_flow_logs,
)

DATA = Path(__file__).parents[1] / "data" / "projects"


@pytest.fixture
def with_t():
    return load_project(DATA / "quillmarsh_us")


@pytest.fixture
def without_t():
    return load_project(DATA / "quillmarsh_no_transmissivity")


def test_prior_from_zone_properties_is_cooper_jacob(with_t):
    p = with_t
    prior = prior_hydraulics(p)
    t = elapsed_test_time(p)
    rw = p.well.well_radius
    for i, z in enumerate(p.zones):
        tz = z.zone_transmissivity
        g = 4 * np.pi * tz / (np.log(2.25 * tz * t / (rw ** 2 * z.storativity)) + 2 * z.skin)
        np.testing.assert_allclose(prior.log_conductance[i], np.log(g), rtol=1e-12)
    np.testing.assert_allclose(prior.log_conductance_sd, PRIOR_LOG_CONDUCTANCE_SD, rtol=1e-12)
    assert prior.source == ["zone properties"] * 3


def test_missing_transmissivity_without_a_flow_log_is_an_input_error(without_t):
    p = without_t
    p.flowlogs = p.flowlogs.iloc[0:0]
    with pytest.raises(InputError) as err:
        prior_hydraulics(p)
    assert err.value.file == "project.toml"
    assert err.value.field == "zones[1].transmissivity"
    assert 'zone "Upper"' in err.value.message and "flow log" in err.value.message


def test_an_ambient_log_alone_does_not_tell_the_shares(without_t):
    p = without_t
    assert shares_from_flow_logs(p)
    p.flowlogs = p.flowlogs[p.flowlogs["rate"].astype(float) == 0.0]
    assert len(p.flowlogs) and not shares_from_flow_logs(p)
    with pytest.raises(InputError):
        prior_hydraulics(p)


def test_missing_transmissivity_with_a_pumped_flow_log_is_a_labelled_flat_prior(without_t):
    prior = prior_hydraulics(without_t)
    np.testing.assert_allclose(prior.log_conductance, np.log(START_CONDUCTANCE), rtol=1e-12)
    assert np.isinf(prior.log_conductance_sd).all()  # a start value, no weight
    assert prior.source == [NO_PRIOR_SOURCE] * 3
    # a use that rests on the properties alone refuses even then
    with pytest.raises(InputError) as err:
        prior_hydraulics(without_t, need_properties=True)
    assert err.value.field == "zones[1].transmissivity"


def test_one_zone_missing_is_named(with_t):
    p = with_t
    p.zones = [p.zones[0], dataclasses.replace(p.zones[1], conductivity=None), p.zones[2]]
    p.flowlogs = pd.DataFrame(columns=p.flowlogs.columns)
    p.files = {**p.files, "project": "site.toml"}
    with pytest.raises(InputError) as err:
        prior_hydraulics(p)
    assert (err.value.file, err.value.field) == ("site.toml", "zones[2].transmissivity")
    assert 'zone "Middle"' in err.value.message
