"""Benchmark: planning a step test (blendq.decide.plan) -- speed and calibration.

1. Speed. The four-zone calibration well of kind "logs" (tests/calibration/truth.py, an
   independent forward model) at its truth: 200 candidate designs
   (:func:`blendq.decide.plan.candidate_designs`) evaluated from a fresh basis (window ends,
   their gradients and every observation's Jacobian rows included), then the greedy search under
   a budget. Baseline measured in the same run: the plain way to learn one design's spread,
   fitting simulated replicates of it (``--baseline`` replicates of the calibration well, each
   written, loaded and fitted by blendq); the ratio printed is the time of one simulated design
   over the planner's time per design. Target: 200 designs in under 30 s on 2 cores.

2. Calibration. For each kind of calibration well, the predicted sd of the window's ends
   against the sample sd of the ends of the fitted windows of ``--replicates`` noisy replicates
   (priors off the truth by their documented spread; tests/calibration/plan_check.py). Target:
   within 25 %. A replicate whose fitted values leave no window is counted and left out of the
   sd (it would have no ends).

Run:  python benchmarks/bench_plan.py [--replicates 30] [--baseline 20]   (about 2 min)
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests" / "calibration"))

from plan_check import compare, replicate_ends, truth_basis  # noqa: E402
from truth import well_of  # noqa: E402

from blendq.decide import plan  # noqa: E402


def speed(n_designs: int, n_baseline: int) -> None:
    well = well_of("logs")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        basis, design = truth_basis(well, folder)
        # the planner: a fresh basis, so every Jacobian row is computed inside the timing
        basis = plan.Basis(basis.project, basis.analytes, basis.theta, basis.zone_values,
                           basis.theta_sd, np.full(basis.zone_values.shape, 20.0),
                           basis.relative_error, log_depths=basis.log_depths)
        t0 = time.perf_counter()
        c0 = time.process_time()
        ends = plan.window_ends(basis)
        cands = plan.candidate_designs(basis)[:n_designs]
        evals = [plan.evaluate(basis, d, ends, plan.Costs()) for d in cands]
        t_plan = time.perf_counter() - t0
        cpu_plan = time.process_time() - c0
        t1 = time.perf_counter()
        chosen = plan.choose_design(basis, plan.Costs(), budget=12000.0, candidates=[])
        t_search = time.perf_counter() - t1
        t2 = time.perf_counter()
        replicate_ends(well, range(1, 1 + n_baseline), folder)
        t_base = time.perf_counter() - t2
    best = min(evals, key=lambda e: (e.objective, e.cost))
    print(f"speed: {len(cands)} candidate designs of a 4-zone well evaluated in {t_plan:.2f} s "
          f"wall ({cpu_plan:.2f} s CPU) = {1e3 * t_plan / len(cands):.1f} ms per design "
          f"(target: under 30 s)")
    print(f"  greedy search under a budget of 12,000: {t_search:.2f} s, "
          f"{len(chosen.steps_taken)} items added, expected window uncertainty "
          f"{chosen.evaluation.objective:.0f} m3/d at cost {chosen.evaluation.cost:,.0f}")
    print(f"  best candidate: {best.design.n_steps} steps, logs at {best.design.log_rates}, "
          f"{len(best.design.depth_samples)} depth samples, end sd "
          f"{best.end_sd['low']:.0f} / {best.end_sd['high']:.0f} m3/d, cost {best.cost:,.0f}")
    per_design_sim = t_base
    print(f"  baseline: {n_baseline} fitted replicates of one design (the simulated spread) in "
          f"{t_base:.1f} s; ratio simulated / planned per design = "
          f"{per_design_sim / (t_plan / len(cands)):.0f} x")


def calibration(n: int) -> None:
    for kind in ("logs", "thief"):
        t0 = time.perf_counter()
        r = compare(kind, range(1, 1 + n))
        ratio = r["predicted"] / np.where(r["replicates"] > 0, r["replicates"], np.nan)
        print(f"calibration {kind}: ends {r['ends'][0]:.0f} ({r['reasons'][0]}) and "
              f"{r['ends'][1]:.0f} m3/d ({r['reasons'][1]}); predicted sd "
              f"{r['predicted'][0]:.1f} / {r['predicted'][1]:.1f}, replicates "
              f"{r['replicates'][0]:.1f} / {r['replicates'][1]:.1f} "
              f"(n = {r['n']}, {r['no_window']} without a window); predicted / replicate "
              f"{ratio[0]:.2f} / {ratio[1]:.2f}; {time.perf_counter() - t0:.0f} s")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--designs", type=int, default=200)
    ap.add_argument("--baseline", type=int, default=20)
    ap.add_argument("--replicates", type=int, default=30)
    ap.add_argument("--skip-calibration", action="store_true")
    args = ap.parse_args()
    speed(args.designs, args.baseline)
    if not args.skip_calibration:
        calibration(args.replicates)


if __name__ == "__main__":
    main()
