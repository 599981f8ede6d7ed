"""Which pumping-level prediction the operating window uses: the zone model or the step test.

Both predict the pumping level against rate: the zone model through the fitted conductances and
well loss (h_pwl = h_w - C Q^2), the step test through Jacob's s_w = B Q + C Q^2 (Jacob 1947).
Their linear terms are comparable: 1 / sum(G_i) against B. The window takes the better
constrained of the two (smaller relative standard error of the linear term) and says which;
the step test's prediction is only used when it can be carried to the operating horizon.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from blendq.errors import BlendqError
from blendq.fit.estimation import FitResult
from blendq.fit.uncertainty import Draws, Prediction


@dataclass
class LevelCheck:
    """Outcome of the step-drawdown analysis as used by the window.

    Attributes
    ----------
    result : StepDrawdownResult or None
        The step-drawdown analysis (None when it could not be run).
    comparison : LinearLossComparison or None
        Step-test B against the zone model's 1 / sum(G).
    source : str
        "zone model" or "step test": the pumping-level prediction the window uses.
    reason : str
        Why that source.
    level_deep : ndarray or None
        Deep-side pumping level [m depth] per sweep rate when the step test is used.
    """

    result: object | None
    comparison: object | None
    source: str
    reason: str
    level_deep: np.ndarray | None = None


def static_level_of(project, model=None) -> float | None:
    """The well's static (ambient) level [m depth]: given, else the composite level of the zones.

    With no pumping the zone flows balance, sum_i q_i = 0 with q_i = G_i (h0_i - h_w), so a
    well open to several zones stands at the conductance-weighted mean of the zone heads,

        h_w0 = sum_i G_i h0_i / sum_i G_i,

    not at their arithmetic mean (the composite head of a multi-node well: Konikow, Hornberger,
    Halford and Hanson 2009, USGS TM 6-A30; Sokol 1963). With nonlinear zone losses the same
    balance is solved by :meth:`WellModel.state` at Q = 0.

    Parameters
    ----------
    project : Project
    model : WellModel, optional
        The fitted well (its conductances and zone heads); default: the zones' property
        conductances at the end of the step test with the zones' given static levels.

    Returns
    -------
    float or None
        Depth [m]; None when the well states no static level and the composite cannot be
        formed (a zone without a static level, or zone properties that give no conductance,
        and no fitted model).

    References
    ----------
    Konikow, L.F., Hornberger, G.Z., Halford, K.J., Hanson, R.T. (2009) Revised multi-node well
    (MNW2) package for MODFLOW ground-water flow model. USGS Techniques and Methods 6-A30.
    Sokol, D. (1963) Position and fluctuations of water level in wells perforated in more than
    one aquifer. J. Geophysical Research 68(4), 1079-1080.
    """
    if project.well.static_level is not None:
        return project.well.static_level
    if model is None:
        from blendq.well.model import (
            elapsed_test_time,
            model_from_parameters,
            property_conductance,
        )

        if not project.zones or any(z.static_level is None for z in project.zones):
            return None
        try:
            g = property_conductance(project, elapsed_test_time(project))
        except BlendqError:
            return None
        model = model_from_parameters(project, g, [z.static_head for z in project.zones])
    return float(np.asarray(model.pumping_level_depth(np.array([0.0])), float).reshape(-1)[0])


def check_levels(fit: FitResult, draws: Draws, pred: Prediction, alpha: float,
                 horizon: float) -> LevelCheck:
    """Run the step-drawdown analysis and choose the pumping-level source for the window."""
    from blendq.well.stepdrawdown import compare_with_zone_model
    from blendq.well.steptest import analyse_step_test

    project = fit.problem.project
    static = static_level_of(project, fit.model)
    if static is None or len(project.steps) < 2:
        return LevelCheck(None, None, "zone model", "no static level or fewer than two steps: "
                          "no step-drawdown analysis")
    try:
        res = analyse_step_test(project.steps, static,
                                project.levels if len(project.levels) else None,
                                steps_file=project.files.get("steps", "steps.csv"),
                                levels_file=project.files.get("levels", "levels.csv"))
    except BlendqError as exc:
        return LevelCheck(None, None, "zone model", f"step-drawdown analysis not possible: {exc}")
    n = fit.problem.n_zones
    g = np.exp(draws.theta[:, :n])
    try:
        comp = compare_with_zone_model(res.jacob, g)
    except BlendqError as exc:
        return LevelCheck(res, None, "zone model", f"no comparison with the zone model: {exc}")
    if comp.better_constrained != "step test":
        if not np.isfinite(comp.step_relative_stderr):
            why = ("the step test's linear loss has no standard error (too few steps for the "
                   "fit)")
        else:
            why = ("the zone model's linear loss is the better constrained "
                   f"(relative sd {comp.zone_relative_stderr:.1%} against "
                   f"{comp.step_relative_stderr:.1%} for the step test)")
        return LevelCheck(res, comp, "zone model", why)
    try:
        q = 1.0 - 2.0 * alpha
        t_zones = [z.zone_transmissivity for z in project.zones]
        total_t = float(sum(t_zones)) if all(t is not None for t in t_zones) else None
        p = res.predict(pred.rates, time=horizon, transmissivity=total_t, interval=q,
                        method="draws", seed=draws.seed)
    except BlendqError as exc:
        return LevelCheck(res, comp, "zone model",
                          f"the step test is the better constrained but cannot be carried to "
                          f"the operating horizon ({exc})")
    if not np.all(np.isfinite(p.pumping_level_high)):
        return LevelCheck(res, comp, "zone model", "the step-test prediction has no static level")
    return LevelCheck(res, comp, "step test",
                      "the step test's linear loss is the better constrained "
                      f"(relative sd {comp.step_relative_stderr:.1%} against "
                      f"{comp.zone_relative_stderr:.1%} for the zone model)",
                      p.pumping_level_high)
