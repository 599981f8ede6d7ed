"""Time the wellfield blending plan (blendq.decide.blendplan) on an invented wellfield.

Five wells (three feed EP1, two EP2), 40 rate levels each, nitrate and arsenic, rate-dependent
concentrations from two zones with lognormal draws. Baseline: the same plan with 50 draws in
the program, timed in the same run; the printed ratios do not depend on the machine's speed.
Run from the repository root: ``python benchmarks/bench_blendplan.py`` (about 1.5 min).
"""

from __future__ import annotations

import time

import numpy as np

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


def run(n_draws: int, limit_scale: float, diagnose: bool):
    wells, eps = wellfield(n_draws)
    limits = {k: v * limit_scale for k, v in LIMITS.items()}
    t0, c0 = time.perf_counter(), time.process_time()
    plan = blending_plan(wells, eps, limits, 0.9, 0.9, list(LIMITS), diagnose=diagnose)
    return time.perf_counter() - t0, time.process_time() - c0, plan


def main() -> None:
    print("5 wells x 40 levels x 2 analytes x 2 entry points, probability 0.9, margin 0.9")
    base, base_cpu, plan = run(50, 1.4, False)
    print(f"baseline   50 draws, plan found         : {base:6.1f} s wall, {base_cpu:6.1f} s CPU  "
          f"{plan.status}")
    for n, scale, diag, what in [(200, 1.4, False, "plan found"),
                                 (200, 1.2, False, "no plan at EP2"),
                                 (200, 1.2, True, "no plan, with diagnosis")]:
        t, cpu, plan = run(n, scale, diag)
        print(f"{n:4d} draws, {what:24s}: {t:6.1f} s wall, {cpu:6.1f} s CPU  ratio (CPU) "
              f"{cpu / base_cpu:5.1f}  {plan.status}; compliance over all draws "
              f"{plan.compliance}")


if __name__ == "__main__":
    main()
