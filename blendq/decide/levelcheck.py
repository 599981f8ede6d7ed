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


def static_level_of(project) -> float | None:
    """The well's static (ambient) level [m depth]: given, else the mean of the zones' levels."""
    if project.well.static_level is not None:
        return project.well.static_level
    levels = [z.static_level for z in project.zones if z.static_level is not None]
    return float(np.mean(levels)) if levels else None


def check_levels(fit: FitResult, draws: Draws, pred: Prediction, alpha: float,
                 horizon: float) -> LevelCheck:
    """Run the step-drawdown analysis and choose the pumping-level source for the window."""
    from blendq.well.stepdrawdown import compare_with_zone_model
    from blendq.well.steptest import analyse_step_test

    project = fit.problem.project
    static = static_level_of(project)
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
