"""Time the wellfield blending plan (blendq.decide.blendplan) on an invented wellfield.

Five wells (three feed EP1, two EP2), 40 rate levels each, nitrate and arsenic, rate-dependent
concentrations from two zones with lognormal draws. Each case runs, in the same run, as the
package solves it (the diagnosis's yes-or-no questions with a zero objective, its rate and level
relaxations first with a zero objective and with the objective only when a point exists, the
lowest quantiles from margin x limit up; with ``feasibility_first`` the plan's own programs also
first with a zero objective) and as a baseline with every program solved with its objective
straight away and no floor on the quantiles (the same flow otherwise). The printed ratios (baseline CPU
over package CPU) do not depend on the machine's speed; each line says whether the status,
rates and diagnosis texts agree with the baseline's. A reference line times the plan with 50
draws. Run from the repository root: ``python benchmarks/bench_blendplan.py`` (about 2 min).
"""

from __future__ import annotations

import time

import numpy as np

from blendq.decide import blendplan as bp
from blendq.decide.blendplan import BlendWell, EntryPoint, blending_plan

LIMITS = {"nitrate": 10.0, "arsenic": 0.010}


def wellfield(n_draws: int, levels: int = 40, seed: int = 1):
    rng = np.random.default_rng(seed)
    wells = []
    for i in range(5):
        r = np.linspace(200.0, 2000.0, levels)
        top = np.array([rng.uniform(5, 25), rng.uniform(0.002, 0.02)])
        bottom = np.array([rng.uniform(0.5, 6), rng.uniform(0.001, 0.012)])
        share = (0.2 + 0.6 * r / (r + rng.uniform(300, 1500)))[None, :, None]
        conc = (share * top * rng.lognormal(0, 0.15, (n_draws, 1, 2))
                + (1 - share) * bottom * rng.lognormal(0, 0.15, (n_draws, 1, 2)))
        energy = 0.3 + 0.1 * (r / 2000) ** 2 + 0.05 * i
        wells.append(BlendWell(f"W{i + 1}", "EP1" if i < 3 else "EP2", r, conc, 300.0, 1800.0,
                               energy=energy))
    return wells, [EntryPoint("EP1", 3000.0), EntryPoint("EP2", 2000.0)]


def _objective_first(p, lay, time_limit, optimise=True, check=True):
    """The baseline: every program solved with its objective straight away."""
    t0 = time.perf_counter()
    res = lay.prog.solve(time_limit)
    if res.status == 1:
        raise RuntimeError("time limit")
    return res, time.perf_counter() - t0


def run(n_draws: int, limit_scale: float, diagnose: bool, baseline: bool = False,
        first: bool = False):
    wells, eps = wellfield(n_draws)
    limits = {k: v * limit_scale for k, v in LIMITS.items()}
    package_run, package_build = bp._run, bp._build
    if baseline:
        bp._run = _objective_first
        bp._build = lambda *a, **k: package_build(*a, **{**k, "floor": 0.0})
    try:
        t0, c0 = time.perf_counter(), time.process_time()
        plan = blending_plan(wells, eps, limits, 0.9, 0.9, list(LIMITS), diagnose=diagnose,
                             feasibility_first=first)
        return time.perf_counter() - t0, time.process_time() - c0, plan
    finally:
        bp._run, bp._build = package_run, package_build


def main() -> None:
    print("5 wells x 40 levels x 2 analytes x 2 entry points, probability 0.9, margin 0.9")
    t, cpu, plan = run(50, 1.4, False)
    print(f"reference   50 draws, plan found: {t:6.1f} s wall, {cpu:6.1f} s CPU  {plan.status}")
    print("CPU [s] of the baseline (objective first everywhere), the package's default and the "
          "package with feasibility_first (as n_minus_one); ratio baseline over package")
    for n, scale, diag, what in [(200, 1.4, False, "plan found"),
                                 (200, 1.2, False, "no plan at EP2"),
                                 (200, 1.2, True, "no plan at EP2, diagnosis"),
                                 (200, 0.95, False, "no plan at either"),
                                 (100, 0.95, True, "no plan at either, diagnosis")]:
        _, cb, pb = run(n, scale, diag, baseline=True)
        _, c0, p0 = run(n, scale, diag)
        plans, line = [p0], f"{cb:5.1f} / {c0:5.1f} (ratio {cb / c0:4.2f})"
        if not diag:  # the option changes only the plan's own programs
            _, c1, p1 = run(n, scale, diag, first=True)
            plans.append(p1)
            line += f" / {c1:5.1f} (ratio {cb / c1:4.2f})"
        same = all(p.status == pb.status and p.rates == pb.rates
                   and [r.text for r in p.diagnosis] == [r.text for r in pb.diagnosis]
                   for p in plans)
        print(f"{n:4d} draws, {what:28s}: {line}  same answer: {same}  {p0.status}",
              flush=True)


if __name__ == "__main__":
    main()
