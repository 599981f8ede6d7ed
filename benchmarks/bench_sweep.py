"""Benchmark: a rate sweep of 10^4 rates x 10^3 Monte Carlo draws (4 zones, wellbore mixing).

Run twice: with linear zones (the closed-form wellbore head) and with a nonlinear entrance
loss at every zone node (MNW2 form C q |q|^(P-1), P = 2; the Newton iteration on all points at
once, started from the linear solution). The ratio of the two predict_summary times is printed
last; the target is at most 3.

Vectorised path: :func:`blendq.fit.uncertainty.predict_summary` (chunks of rates, every draw at
once: wellbore head, zone flows, discharge weights, concentrations, quantiles, exceedance
probabilities, pumping levels). For reference, :func:`blendq.fit.uncertainty.predict` on a share of
the draws, scaled.

Plain baseline, measured in the same run: for each (draw, rate) point, the wellbore head by
``scipy.optimize.brentq`` on sum_i q_i(h_w) = Q, then the discharge weights of that one point
by :func:`blendq.well.mixing.discharge_weights` and the blend a . c. It is timed on a random
subsample of points and scaled to the full sweep; the two paths are also compared on that
subsample.

Run:  python benchmarks/bench_sweep.py [--rates 10000] [--draws 1000] [--baseline-points 2000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import optimize

from blendq.fit import uncertainty
from blendq.fit.estimation import fit
from blendq.well import hydraulics, mixing
from blendq.well.synthetic import synthetic_project

# an invented four-zone well; the pump intake sits between Z2 and Z3, so water from above
# flows down to it and water from below flows up, and Z4 is a thief at low rates
G = np.array([40.0, 120.0, 60.0, 90.0])
H0 = np.array([-10.0, -12.0, -9.0, -14.0])
TOP = np.array([30.0, 50.0, 70.0, 90.0])
BOT = TOP + 10.0
INTAKE = 65.0
CONC = {"nitrate": np.array([12.0, 3.0, 7.0, 1.5]), "arsenic": np.array([0.002, 0.015, 0.004, 0.03])}
THRESHOLDS = np.array([[8.0, 0.008], [10.0, 0.010]])  # margin x limit and limit [mg/L]


def fitted_case(n_draws: int):
    p = synthetic_project(G, H0, TOP, BOT, CONC, [200.0, 500.0, 900.0, 1400.0, 2000.0], INTAKE,
                          relative_error=0.05, well_loss=2e-6, flowlog_rates=[0.0, 1000.0],
                          flowlog_depths=[27.0, 45.0, 62.0, 68.0, 85.0, 105.0], level_noise=0.05,
                          depth_samples=[("S5", 45.0), ("S5", 85.0)], seed=7)
    result = fit(p)
    return result, uncertainty.monte_carlo(result, n_draws, seed=1)


def baseline_point(g, h0, d, zone_values, rate, geometry):
    """One (draw, rate) point the plain way: brentq for h_w, then mixing of that point."""

    def excess(hw):
        q, _ = hydraulics.zone_flow_from_head_difference(h0 - hw, g, d)
        return q.sum() - rate

    lo = h0.min() - (rate / g.min() + d.max() * rate**2) - 1.0
    hw = optimize.brentq(excess, lo, h0.max() + 1.0, xtol=1e-12, rtol=1e-14)
    q, _ = hydraulics.zone_flow_from_head_difference(h0 - hw, g, d)
    a = mixing.discharge_weights(q, geometry)
    return a @ zone_values


def run(n_rates: int, n_draws: int, n_base: int, nonlinear: float, result, draws, rng):
    rates = np.linspace(0.0, 3000.0, n_rates + 1)[1:]
    d_zone = np.full(len(G), nonlinear)
    changes = (lambda m: m.with_changes(nonlinear_loss=d_zone)) if nonlinear > 0 else None
    label = "linear zone law" if nonlinear == 0 else \
        f"entrance loss C = {nonlinear:g} d^2/m^5 at every zone (P = 2)"
    points = n_rates * n_draws
    print(f"\n== {n_rates} rates x {n_draws} draws = {points:.2e} points, {label} ==")

    t = time.perf_counter()
    uncertainty.predict_summary(result, draws, rates, probs=(0.05, 0.5, 0.95),
                                thresholds=THRESHOLDS, changes=changes)
    t_vec = time.perf_counter() - t
    print(f"predict_summary (chunked, vectorised): {t_vec:8.2f} s   "
          f"({1e9 * t_vec / points:.0f} ns per point)")

    share = max(1, n_draws // 10)
    sub = uncertainty.Draws(draws.theta[:share], draws.zone_values[:share], draws.analytes,
                            draws.seed)
    t = time.perf_counter()
    for lo in range(0, n_rates, 1000):
        uncertainty.predict(result, sub, rates[lo:lo + 1000], changes=changes)
    t_pred = (time.perf_counter() - t) * n_draws / share
    print(f"predict (full arrays, {share} draws timed, scaled): {t_pred:8.2f} s")

    model = result.problem.model(draws.theta)
    if changes is not None:
        model = changes(model)
    pick_draw = rng.integers(0, n_draws, n_base)
    pick_rate = rng.integers(0, n_rates, n_base)
    g_all = np.asarray(model.conductance)
    h_all = np.asarray(model.static_head)
    t = time.perf_counter()
    base = np.array([baseline_point(g_all[b], h_all[b], d_zone, draws.zone_values[b],
                                    rates[r], model.geometry)
                     for b, r in zip(pick_draw, pick_rate, strict=True)])
    t_base = (time.perf_counter() - t) * points / n_base
    print(f"per-point loop (brentq + mixing, {n_base} points timed, scaled): {t_base:8.1f} s")
    print(f"speed-up predict_summary / loop: {t_base / t_vec:8.0f} x")
    print(f"speed-up predict / loop:         {t_base / t_pred:8.0f} x")

    # the vectorised numbers at the subsampled points equal the plain ones
    state = model.state(rates)
    w = uncertainty.intake_weights(state.zone_flow[pick_draw, pick_rate], model.geometry)
    vec = np.einsum("pn,pna->pa", w, draws.zone_values[pick_draw])
    print(f"largest difference vectorised vs loop: {np.nanmax(np.abs(vec - base)):.2e} mg/L")
    return t_vec


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rates", type=int, default=10_000)
    ap.add_argument("--draws", type=int, default=1_000)
    ap.add_argument("--baseline-points", type=int, default=2_000)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    result, draws = fitted_case(args.draws)
    t_lin = run(args.rates, args.draws, args.baseline_points, 0.0, result, draws, rng)
    t_nl = run(args.rates, args.draws, args.baseline_points, 2e-5, result, draws, rng)
    print(f"\npredict_summary with entrance losses / linear: {t_nl / t_lin:.2f} x "
          f"({t_nl:.2f} s against {t_lin:.2f} s; target at most 3 x)")


if __name__ == "__main__":
    main()
