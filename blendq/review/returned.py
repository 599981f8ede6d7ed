"""Review rule for crossflow memory: step samples that may carry water a thief zone stored
while the well stood idle.

The volumes and shares come from :func:`blendq.well.memory.sample_memory` (the zone model is
above the review in the data flow, so the caller passes its table in). A sample whose predicted
share of returned water exceeds ``qa.returned_water_flag`` is a warning naming its step, the
volume pumped since the pump started and the volume stored; the fit then widens or drops it
(:func:`blendq.fit.observations.returned_water_sigma`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.review.rules import Outcome, fmt

SRC_MEMORY = ("crossflow memory: ambient crossflow x idle time, well-mixed washout "
              "(blendq docs methods); flag threshold qa.returned_water_flag, common practice")


def check_returned_water(samples: pd.DataFrame, memory: pd.DataFrame | None,
                         opts: dict) -> Outcome:
    """Flag step samples predicted to carry more than ``returned_water_flag`` of returned water.

    Parameters
    ----------
    samples : DataFrame
        Prepared samples (:func:`blendq.review.rules.prepare_samples`).
    memory : DataFrame or None
        :func:`blendq.well.memory.sample_memory` (columns sample_id, step, idle_time [d],
        stored [m^3], pumped [m^3], returned_fraction [-], thieves); None or empty when the
        idle time before the test is not given.
    opts : dict
        QA options (``returned_water_flag`` [-]).
    """
    out = Outcome()
    if memory is None or memory.empty:
        out.skip("returned_water", "no idle time before the test ([test] idle_time_before)"
                 if memory is None else memory.attrs.get("skipped", "no step samples"))
        return out
    flag = float(opts["returned_water_flag"])
    first_row = samples.groupby("sample_id", sort=False)["source_row"].min()
    unknown = []
    for m in memory.itertuples(index=False):
        if not np.isfinite(m.returned_fraction):
            unknown.append(m.sample_id)
            continue
        if not m.returned_fraction > flag:
            continue
        row = {"sample_id": m.sample_id, "step": m.step,
               "source_row": first_row.get(m.sample_id)}
        out.add("warning", "returned_water",
                f"step {m.step}: {fmt(m.pumped)} m^3 pumped since the pump started against "
                f"{fmt(m.stored)} m^3 of crossflow water stored in {m.thieves} during "
                f"{m.idle_time * 24:.1f} h idle; about {100 * m.returned_fraction:.1f} % of the "
                f"sample is predicted to be that returned water (flag above {100 * flag:g} %)",
                SRC_MEMORY, row, analyte="")
    if unknown:
        out.skip("returned_water", "no step times, durations or idle time for samples "
                 + ", ".join(unknown))
    return out
