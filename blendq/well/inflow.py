"""Zone flows, discharge shares and pumping level from the zone properties alone (no fitting).

The quick look at a well before any lab result: the common-wellbore-head inflow of
:mod:`blendq.well.hydraulics` with the prior conductances of :mod:`blendq.well.model`, and the
discharge weights of :mod:`blendq.well.mixing`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.errors import ModelError
from blendq.inputs.project import Project
from blendq.well.mixing import discharge_weights
from blendq.well.model import (
    elapsed_test_time,
    horizon_factor,
    model_from_parameters,
    prior_hydraulics,
)


def inflow_table(project: Project, rates, horizon: float | None = None) -> pd.DataFrame:
    """Zone flows, discharge shares and pumping level at each rate from the zone properties
    (no fitting): the quick look at a well before any lab result.

    Raises
    ------
    InputError
        When a zone lacks the properties its conductance model needs (nothing is assumed).
    ModelError
        When a zone has no static level.
    """
    prior = prior_hydraulics(project, need_properties=True)
    if not np.all(np.isfinite(prior.static_head_sd)):
        missing = [z.name for z, sd in zip(project.zones, prior.static_head_sd, strict=False) if not np.isfinite(sd)]
        raise ModelError(f"zones without a static level: {', '.join(missing)} (give zone "
                         "static_level or well static_level)")
    model = model_from_parameters(project, np.exp(prior.log_conductance), prior.static_head)
    if horizon is not None:
        model = model.at_horizon(horizon_factor(project, elapsed_test_time(project), horizon))
    rates = np.asarray(rates, float)
    st = model.state(rates)
    share = np.nan_to_num(discharge_weights(st.zone_flow, model.geometry), nan=0.0)
    level = model.pumping_level_depth(rates, st)
    rows = []
    for k, q in enumerate(rates):
        for i, z in enumerate(project.zones):
            rows.append(dict(rate=q, zone=z.name, zone_flow=st.zone_flow[k, i],
                             share=share[k, i], pumping_level=level[k],
                             dewatered=bool(level[k] > z.top),
                             cascading=bool(level[k] > z.top and st.zone_flow[k, i] > 0)))
    return pd.DataFrame(rows)
