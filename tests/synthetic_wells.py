"""Invented synthetic wells shared by the estimation, uncertainty and diagnostics tests.

Every number here is invented; the data come from blendq.well.synthetic.synthetic_project, which
follows the blendq model exactly, so a fit must recover these values.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from blendq.inputs.project import Project, Settings
from blendq.well.synthetic import synthetic_project

# four zones, top to bottom: conductance [m^2/d], static head [m], depths [m]
G = np.array([40.0, 120.0, 60.0, 90.0])
H0 = np.array([-10.0, -12.0, -9.0, -14.0])  # Z4 has the lowest head: a thief at low rates
TOP = np.array([30.0, 50.0, 70.0, 90.0])
BOT = TOP + 10.0
WELL_LOSS = 2e-6  # C [d^2/m^5]
RATES = np.array([200.0, 500.0, 900.0, 1400.0, 2000.0])  # step rates [m^3/d]
CONC = {
    "nitrate": np.array([12.0, 3.0, 7.0, 1.5]),  # mg/L as N
    "arsenic": np.array([0.002, 0.015, 0.004, 0.030]),  # mg/L
}
# log readings between the zones and below the bottom one [m]
LOG_DEPTHS = [27.0, 45.0, 65.0, 85.0, 105.0]


def depth_samples(intake: float) -> list[tuple[str, float]]:
    """Samples inside the well during the last step, between the zones (where water flows)."""
    if intake < TOP[0]:
        return [("S5", 45.0), ("S5", 65.0), ("S5", 85.0)]
    # intake between Z2 and Z3: Z1's water flows down past 45 m, Z4's up past 85 m
    return [("S5", 45.0), ("S5", 85.0)]


def project(intake: float = 25.0, *, logs: bool = True, depth: bool = True, seed: int = 0,
            settings: Settings | None = None, **kw) -> Project:
    """The four-zone synthetic well; keyword arguments go to synthetic_project."""
    args = dict(
        well_loss=WELL_LOSS,
        flowlog_rates=[0.0, 1000.0] if logs else None,
        flowlog_depths=LOG_DEPTHS if logs else None,
        depth_samples=depth_samples(intake) if depth else None,
        seed=seed,
        settings=settings,
    )
    args.update(kw)
    return synthetic_project(G, H0, TOP, BOT, CONC, RATES, intake, **args)


def without_priors(p: Project) -> Project:
    """The same project with no zone conductance or static level: flat hydraulic priors."""
    p.zones = [dataclasses.replace(z, conductance=None, static_level=None) for z in p.zones]
    return p


def true_values(analytes) -> np.ndarray:
    """True zone values, shape (n_zones, n_analytes) [mg/L]."""
    return np.column_stack([CONC[a] for a in analytes])
