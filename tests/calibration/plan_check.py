"""Check of the planned uncertainty against fitted replicates of the calibration wells.

For a kind of well (:mod:`truth`, an independent forward model) the plan predicts, at the
truth, the spread of the window's ends that its test design leaves (blendq.decide.plan). The
harness then writes noisy replicates of the same test (priors off the truth by their documented
spread, as the plan assumes), fits each with blendq and finds the ends of the window of the
fitted values by the same criteria; the sample sd of those ends is what the prediction must
match. Used by tests/decide/test_plan.py (few replicates) and benchmarks/bench_plan.py.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from truth import Well, well_of, without_prior_noise, write_replicate

from blendq.decide import plan
from blendq.errors import ModelError
from blendq.fit.estimation import fit
from blendq.inputs.loader import load_project
from blendq.well.model import prior_hydraulics


def truth_basis(well: Well, folder: Path) -> tuple[plan.Basis, plan.Design]:
    """The plan's basis at the truth of ``well`` and the design of its test."""
    exact = without_prior_noise(well)
    project = load_project(write_replicate(exact, folder / "truth", seed=0))
    prior = prior_hydraulics(project)
    n = len(well.zones)
    theta = np.concatenate([np.log(well.conductance), well.static_head, [well.well_loss]])
    np.testing.assert_allclose(prior.log_conductance, theta[:n], rtol=0, atol=1e-3)
    values = np.column_stack([well.zone_values(a) for a in ("nitrate", "arsenic")])
    theta_sd = np.concatenate([prior.log_conductance_sd, prior.static_head_sd, [np.inf]])
    d = well.design
    basis = plan.Basis(project, ["nitrate", "arsenic"], theta, values, theta_sd,
                       np.full(values.shape, np.inf),
                       {"nitrate": d.nitrate_rel_u, "arsenic": d.arsenic_rel_u},
                       log_depths=np.array(d.log_depths or plan.default_log_depths(project)))
    return basis, plan.design_of(project)


def replicate_ends(well: Well, seeds, folder: Path) -> np.ndarray:
    """Window ends [m^3/d] of the fitted values of each replicate, (n_seeds, 2); NaN for a
    replicate whose fitted values leave no window (counted by :func:`compare`)."""
    out = []
    for seed in seeds:
        project = load_project(write_replicate(well, folder / f"r{seed}", seed))
        basis = plan.basis_from_fit(fit(project))
        try:
            out.append([e.rate for e in plan.window_ends(basis)])
        except ModelError:
            out.append([np.nan, np.nan])
    return np.array(out)


def compare(kind: str, seeds) -> dict:
    """Predicted and replicate sd of each end of the window of one kind of well."""
    well = well_of(kind)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        basis, design = truth_basis(well, folder)
        ends = plan.window_ends(basis)
        ev = plan.evaluate(basis, design, ends, plan.Costs())
        got = replicate_ends(well, seeds, folder)
    return {"kind": kind, "ends": [e.rate for e in ends],
            "reasons": [e.reason for e in ends],
            "predicted": np.array([ev.end_sd["low"], ev.end_sd["high"]]),
            "replicates": np.nanstd(got, 0, ddof=1), "replicate_mean": np.nanmean(got, 0),
            "unresolved": ev.unresolved, "n": int(np.isfinite(got[:, 0]).sum()),
            "no_window": int((~np.isfinite(got[:, 0])).sum())}
