"""Benchmark: the joint fit and its 1,000-draw Monte Carlo (4 zones, 5 steps, 3 analytes).

Vectorised path: :func:`blendq.fit.estimation.fit` (variable projection) and
:func:`blendq.fit.uncertainty.monte_carlo` (randomised maximum likelihood: every draw's hydraulics
refitted by batched Levenberg-Marquardt, the zone values by the batched active-set solvers of
:mod:`blendq.fit.constrained_lsq`).

Plain baseline, measured in the same run: the zone values of the same draws (at each draw's
hydraulics) refitted one at a time -- a well model per draw, its weight rows, and one scipy
least-squares solve (``lsq_linear``, SLSQP where a
non-detect binds; :func:`blendq.fit.constrained_lsq.solve_censored_lsq`) per draw and analyte. Both paths use
the same random numbers, and the largest difference between their zone values is printed.

Run:  python benchmarks/bench_estimation.py [--draws 1000]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from blendq.fit import constrained_lsq as qp
from blendq.fit import diagnostics, uncertainty
from blendq.fit.estimation import fit, row_weights
from blendq.well.synthetic import synthetic_project

# an invented four-zone well, intake above the zones
G = np.array([40.0, 120.0, 60.0, 90.0])
H0 = np.array([-10.0, -12.0, -9.0, -14.0])
TOP = np.array([30.0, 50.0, 70.0, 90.0])
BOT = TOP + 10.0
CONC = {
    "nitrate": np.array([12.0, 3.0, 7.0, 1.5]),
    "arsenic": np.array([0.002, 0.015, 0.004, 0.030]),
    "uranium": np.array([0.010, 0.040, 0.020, 0.005]),
}
RATES = [200.0, 500.0, 900.0, 1400.0, 2000.0]


def project(nondetects: bool):
    return synthetic_project(
        G, H0, TOP, BOT, CONC, RATES, 25.0, relative_error=0.05, well_loss=2e-6,
        flowlog_rates=[0.0, 1000.0], flowlog_depths=[27.0, 45.0, 65.0, 85.0, 105.0],
        level_noise=0.05, depth_samples=[("S5", 45.0), ("S5", 65.0), ("S5", 85.0)],
        nondetect_limits={"arsenic": 0.006} if nondetects else None, seed=3)


def plain_monte_carlo(result, draws, n_draws: int, seed: int) -> np.ndarray:
    """The Monte Carlo refit one draw and one analyte at a time, with the same random draws."""
    problem = result.problem
    # the perturbations of the randomised-maximum-likelihood draws (uncertainty.monte_carlo)
    layout = uncertainty.draw_layout(problem)
    eps = np.random.default_rng(seed).standard_normal((n_draws, max(s.stop for s in layout.values())))
    widen = {g.group: g.scale for g in draws.groups}
    out = np.empty((n_draws, problem.n_zones, len(result.analytes)))
    for b in range(n_draws):
        model = problem.model(draws.theta[b])
        for j, analyte in enumerate(result.analytes):
            d = problem.data[analyte]
            a = row_weights(model, d.rate, d.depth)
            sigma = d.sigma * widen.get(analyte, 1.0)
            y = d.value + sigma * eps[b, layout[analyte]]
            lb, ub = problem.bounds(analyte)
            if len(d.cens_limit):
                ac = row_weights(model, d.cens_rate, d.cens_depth)
                out[b, :, j] = qp.solve_censored_lsq(a, y, sigma, lb, ub, ac, d.cens_limit)
            else:
                out[b, :, j] = qp.solve_censored_lsq(a, y, sigma, lb, ub)
    return out


def run(n_draws: int, nondetects: bool) -> None:
    p = project(nondetects)
    label = "with arsenic non-detects" if nondetects else "no non-detects"
    print(f"\n== 4 zones, 5 steps, 3 analytes, {label} ==")
    t = time.perf_counter()
    result = fit(p)
    t_fit = time.perf_counter() - t
    print(f"joint fit (variable projection):           {t_fit:8.2f} s   ({result.message})")

    t = time.perf_counter()
    draws = uncertainty.monte_carlo(result, n_draws, seed=1)
    t_mc = time.perf_counter() - t
    print(f"Monte Carlo, {n_draws} draws (batched):          {t_mc:8.2f} s")

    t = time.perf_counter()
    table = diagnostics.zone_table(result, draws)
    print(f"zone table (ranges, verdicts):             {time.perf_counter() - t:8.2f} s")

    t = time.perf_counter()
    plain = plain_monte_carlo(result, draws, n_draws, seed=1)
    t_plain = time.perf_counter() - t
    print(f"plain loop, {n_draws} draws x 3 analytes (scipy): {t_plain:8.2f} s")
    print(f"speed-up batched / plain:                  {t_plain / t_mc:8.1f} x")
    scale = np.abs(draws.zone_values).max(axis=(0, 1))
    diff = (np.abs(draws.zone_values - plain).max(axis=(0, 1)) / scale).max()
    print(f"largest difference batched vs plain:       {diff:.1e} (relative to each analyte's largest zone value)")
    print(f"zones resolved: {int((table['verdict'] == 'resolved').sum())} of {len(table)}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=1000)
    args = ap.parse_args()
    run(args.draws, nondetects=False)
    run(args.draws, nondetects=True)


if __name__ == "__main__":
    main()
