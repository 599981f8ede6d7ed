"""Regenerate the invented monitoring history and pump log of the demo well (TH-2).

Ten years of monthly compliance samples before the step test of May 2026, each at the rate
the pump log gives for its time. The zone values at the test are those of
``build_demo_data.py``; before it, the upper sand's nitrate rose by ``NITRATE_TREND`` a year
with an annual harmonic of ``NITRATE_AMPLITUDE`` (both invented), arsenic held steady. The
results are blends made by blendq's synthetic generator
(:func:`blendq.well.synthetic.synthetic_history`) with seeded temporal and lab noise. Writes
only ``history.csv`` and ``pumplog.csv``. Run from the repository root:
``python examples/build_demo_history.py``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))

from build_demo_data import (  # noqa: E402
    ARSENIC_UG,
    NITRATE_AS_N,
    RATES_GPM,
    STEP_MIN,
    WELL_RADIUS_FT,
    ZONES,
)

from blendq.api import demo_path, load_project  # noqa: E402
from blendq.units import from_base, to_base  # noqa: E402
from blendq.well import hydraulics  # noqa: E402
from blendq.well.model import model_from_parameters  # noqa: E402
from blendq.well.synthetic import synthetic_history  # noqa: E402

OUT = Path(__file__).resolve().parents[1] / "blendq" / "data" / "demo"
GPM = to_base(1, "gpm", "rate")
FT = to_base(1, "ft", "length")
#: invented: the upper sand's nitrate trend [mg/L as N per year] and seasonal amplitude
NITRATE_TREND = np.array([0.30, 0.0, 0.0, 0.0])
NITRATE_AMPLITUDE = np.array([0.8, 0.0, 0.0, 0.0])
#: invented water variability from sample to sample [mg/L]
TEMPORAL_SD = {"nitrate": 0.25, "arsenic": 0.0004}
TEST_START = pd.Timestamp("2026-05-12 07:00")


def pump_log(rng: np.random.Generator) -> pd.DataFrame:
    """A rate every two weeks or so (250 to 750 gpm, in steps of 25), off a few days a year."""
    rows, t = [], TEST_START - pd.Timedelta(days=3700)
    while t < TEST_START - pd.Timedelta(days=2):
        rows.append([t, int(rng.integers(10, 31)) * 25, ""])
        t += pd.Timedelta(days=int(rng.integers(10, 20)), hours=int(rng.integers(0, 24)))
        if rng.random() < 0.1:  # a short shutdown (maintenance)
            rows.append([t, "", "off"])
            t += pd.Timedelta(days=int(rng.integers(1, 4)))
            rows.append([t, "", "on"])
            t += pd.Timedelta(days=int(rng.integers(8, 15)))
    return pd.DataFrame(rows, columns=["time", "rate [gpm]", "pump"])


def main() -> None:
    rng = np.random.default_rng(20261515)
    project = load_project(demo_path())
    trans = np.array([to_base(z[4], "ft**2/d", "transmissivity") for z in ZONES])
    t_test = len(RATES_GPM) * STEP_MIN / 1440.0
    g = hydraulics.cooper_jacob_conductance(trans, np.array([z[5] for z in ZONES]), t_test,
                                            WELL_RADIUS_FT * FT, np.array([z[6] for z in ZONES]))
    h0 = -np.array([z[3] for z in ZONES]) * FT
    model = model_from_parameters(project, g, h0, project.well.well_loss)
    log = pump_log(rng)
    # monthly samples on a weekday morning; the rate is the log's at that time
    dates = [pd.Timestamp(year=2016, month=6, day=10, hour=9) + pd.DateOffset(months=k)
             + pd.Timedelta(days=int(rng.integers(0, 5)), minutes=int(rng.integers(0, 90)))
             for k in range(119)]
    times = pd.to_datetime(log["time"])
    rate_gpm = []
    for d in dates:
        k = int(np.searchsorted(times.to_numpy(), np.datetime64(d), side="right")) - 1
        while log["rate [gpm]"].iloc[k] == "":  # sampled while off: take the last rate
            k -= 1
        rate_gpm.append(float(log["rate [gpm]"].iloc[k]))
    zones = {"nitrate": {"c0": NITRATE_AS_N, "trend": NITRATE_TREND,
                         "amplitude": NITRATE_AMPLITUDE},
             "arsenic": {"c0": ARSENIC_UG / 1000.0}}
    h = synthetic_history(model, TEST_START, dates, np.array(rate_gpm) * GPM, zones, 0.04,
                          TEMPORAL_SD, seed=20261516)
    rows = []
    for r in h.itertuples(index=False):
        stamp = pd.Timestamp(r.sampled_at).strftime("%Y-%m-%d %H:%M")
        if r.analyte == "nitrate":
            rows.append([stamp, "EP-1", "nitrate", round(r.value, 2), "mg/L as N", "4%"])
        else:
            rows.append([stamp, "EP-1", "arsenic", round(r.value * 1000.0, 1), "ug/L", "6%"])
    out = pd.DataFrame(rows, columns=["sampled_at", "sample_point", "analyte", "value", "unit",
                                      "uncertainty"])
    out.sort_values(["sampled_at", "analyte"], kind="stable").to_csv(OUT / "history.csv",
                                                                     index=False)
    log["time"] = pd.to_datetime(log["time"]).dt.strftime("%Y-%m-%d %H:%M")
    log.to_csv(OUT / "pumplog.csv", index=False)
    print(f"{len(out)} history rows, {len(log)} pump-log rows; rates "
          f"{min(rate_gpm):g} to {max(rate_gpm):g} gpm; shares at 250 and 750 gpm:",
          np.round(model.weights(np.array([250.0, 750.0]) * GPM), 3),
          "levels ft:", np.round(from_base(model.pumping_level_depth(
              np.array([250.0, 750.0]) * GPM), "length", "ft"), 1))


if __name__ == "__main__":
    main()
