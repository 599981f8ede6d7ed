"""Benchmark: 1,000 posterior draws of the demo well, batched against a per-draw refit loop.

Batched path: :func:`blendq.fit.uncertainty.monte_carlo` (randomised maximum likelihood: every
datum and prior mean perturbed, every draw refitted by the batched Levenberg-Marquardt of
:func:`blendq.fit.uncertainty.levenberg_marquardt_batch`, zone values projected out exactly with
warm-started active sets).

Baseline, measured in the same run: the same perturbed objectives refitted one draw at a time by
``scipy.optimize.least_squares`` (trust-region reflective, the method of the best fit) from the
best fit, the zone values projected out by the scipy-based censored solver at every evaluation.
The baseline runs on a subset of the draws (``--subset``, default 50) and is scaled to the full
count. The largest difference between the two paths on the subset is printed, with the draws'
chi-square against the measured data (median per group, and the chi-square quantiles of the
group's row count).

Run:  python benchmarks/bench_posterior.py [--draws 1000] [--subset 50]
"""

from __future__ import annotations

import argparse
import os
import time
from dataclasses import replace
from importlib import resources

import numpy as np
from scipy import optimize, stats

from blendq.decide.analysis import fit_analytes
from blendq.fit import constrained_lsq as qp
from blendq.fit import estimation, uncertainty
from blendq.inputs.loader import load_project


def demo_fit():
    """The demo project's best fit, on the analytes the pipeline fits."""
    p = load_project(resources.files("blendq") / "data" / "demo")
    analytes, _ = fit_analytes(p)
    p = replace(p, samples=p.samples[p.samples["analyte"].isin(analytes)])
    return estimation.fit(p)


def loop_refit(fit, draws, rows) -> tuple[np.ndarray, np.ndarray]:
    """Refit the draws ``rows`` one at a time with scipy (same perturbations as ``draws``)."""
    problem = fit.problem
    layout = uncertainty.draw_layout(problem)
    m = max(sl.stop for sl in layout.values())
    eps = np.random.default_rng(draws.seed).standard_normal((draws.n_draws, m))
    scale = {g.group: g.scale for g in draws.groups}
    data = uncertainty._PerturbedData(problem, eps, scale, list(fit.analytes), fit.model)
    n = problem.n_zones
    lo = np.full(len(fit.theta), -np.inf)
    if problem.fit_c:
        lo[2 * n] = 0.0
    theta = np.empty((len(rows), len(fit.theta)))
    zv = np.empty((len(rows), n, len(fit.analytes)))
    for k, b in enumerate(rows):

        def fun(t, b=b):
            model = problem.model(t)
            r_h = uncertainty._hydraulic_residuals_batch(problem, t[None], problem.model(t[None]))
            parts = [r_h[0] / data.hyd_scale - eps[b, :data.n_hyd]]
            for analyte in fit.analytes:
                d = problem.data[analyte]
                a = estimation.row_weights(model, d.rate, d.depth)
                y = data.y[analyte][b]
                lb, ub = problem.bounds(analyte)
                ac = estimation.row_weights(model, d.cens_rate, d.cens_depth)
                c = qp.solve_censored_lsq(a, y, data.sigma[analyte], lb, ub,
                                          ac if len(ac) else None,
                                          d.cens_limit if len(ac) else None)
                parts.append((a @ c - y) / data.sigma[analyte])
            return np.concatenate(parts)

        sol = optimize.least_squares(fun, fit.theta, bounds=(lo, np.full(len(lo), np.inf)),
                                     method="trf", x_scale="jac")
        theta[k] = sol.x
        _, c, _ = data.residuals(sol.x[None], np.array([b]))
        zv[k] = c[0]
    return theta, zv


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--subset", type=int, default=50)
    args = ap.parse_args()
    print(f"cores: {os.cpu_count()}, load average: {os.getloadavg()[0]:.1f}")
    t = time.perf_counter()
    fit = demo_fit()
    print(f"best fit (demo well, {', '.join(fit.analytes)}):   {time.perf_counter() - t:7.2f} s")

    t, c = time.perf_counter(), time.process_time()
    draws = uncertainty.monte_carlo(fit, args.draws, seed=1)
    t_batch, c_batch = time.perf_counter() - t, time.process_time() - c
    print(f"batched RML, {args.draws} draws:           {t_batch:7.2f} s wall, {c_batch:.2f} s CPU")

    rows = np.arange(min(args.subset, args.draws))
    t, c = time.perf_counter(), time.process_time()
    theta, zv = loop_refit(fit, draws, rows)
    f = args.draws / len(rows)
    t_loop, c_loop = (time.perf_counter() - t) * f, (time.process_time() - c) * f
    print(f"per-draw scipy loop, {len(rows)} draws scaled to {args.draws}: {t_loop:7.2f} s wall, "
          f"{c_loop:.2f} s CPU")
    print(f"speed-up batched / loop:               {t_loop / t_batch:7.1f} x wall, "
          f"{c_loop / c_batch:.1f} x CPU")
    sd = np.sqrt(np.diag(fit.theta_cov))
    d_theta = np.abs(draws.theta[rows] - theta) / sd
    scale = np.abs(draws.zone_values).max(axis=(0, 1))
    d_zone = np.abs(draws.zone_values[rows] - zv) / scale
    print(f"largest difference on the subset: theta {d_theta.max():.1e} posterior sd; zone "
          f"values {d_zone.max():.1e} of each analyte's largest; median {np.median(d_theta):.1e}")

    misfit = uncertainty.draw_misfit(fit, draws)
    layout = uncertainty.draw_layout(fit.problem)
    rows_of = {g: sl.stop - sl.start for g, sl in layout.items()}
    rows_of["total"] = sum(rows_of.values())
    print("draws' chi-square against the measured data (median; chi-square 5-95 % of the rows):")
    for group, values in misfit.items():
        lo, hi = stats.chi2.ppf([0.05, 0.95], rows_of[group])
        print(f"  {group:16s} rows {rows_of[group]:3d}  median {np.median(values):7.2f}  "
              f"[{lo:.1f}, {hi:.1f}]")
    for g in draws.groups:
        print(f"  best fit {g.group:16s} chi-square {g.chi_square:6.2f} on {g.dof:4.1f} dof, "
              f"errors x {g.scale:.2f}")
    for note in draws.notes:
        print("  note:", note)


if __name__ == "__main__":
    main()
