"""End-to-end time of ``blendq demo`` and of the 1,000-draw Monte Carlo on the example project.

Each figure is printed with a ratio against a plain baseline measured in the same run:
- the demo against a bare Python start-up that imports the command line (the floor any command
  pays), so the ratio says how much the analysis and the report cost on top;
- the example project's 1,000-draw Monte Carlo against the same draws refitted one draw and
  one analyte at a time with scipy (``qp.solve_censored_lsq``).
Targets: demo under 5 s on 2 cores; Monte Carlo under 5 s.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def timed(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True)
    return time.perf_counter() - t0


def demo() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "demo"
        timed([sys.executable, "-m", "blendq", "demo", "--out", str(out)])  # warm caches
        runs = [timed([sys.executable, "-m", "blendq", "demo", "--out", str(out)])
                for _ in range(3)]
        base = [timed([sys.executable, "-c", "import blendq.cli"]) for _ in range(3)]
    t, b = min(runs), min(base)
    print(f"blendq demo end to end: {t:.2f} s (target < 5 s); bare start-up {b:.2f} s; "
          f"ratio {t / b:.1f}x")


def example_monte_carlo() -> None:
    from blendq import qp
    from blendq.estimation import fit, row_weights
    from blendq.loader import load_project
    from blendq.uncertainty import monte_carlo

    project = load_project(ROOT / "examples" / "quillmarsh_us")
    limited = {lim.analyte for lim in project.limits}
    project.samples = project.samples[project.samples["analyte"].isin(limited)]
    project.samples = project.samples[~project.samples.groupby("analyte")["nondetect"].transform("all")]
    result = fit(project)
    t0 = time.perf_counter()
    draws = monte_carlo(result, 1000, seed=1)
    t_mc = time.perf_counter() - t0
    # baseline: the same perturbed problems solved one at a time
    problem = result.problem
    model = problem.model(draws.theta)
    t0 = time.perf_counter()
    for analyte in result.analytes:
        d = problem.data[analyte]
        a = row_weights(model, d.rate, d.depth)
        ac = row_weights(model, d.cens_rate, d.cens_depth)
        lb, ub = problem.bounds(analyte)
        y = d.value[None, :] + d.sigma[None, :] * np.random.default_rng(1).standard_normal(
            (draws.n_draws, len(d.value)))
        for k in range(draws.n_draws):
            qp.solve_censored_lsq(a[k], y[k], d.sigma, lb, ub, ac[k] if len(ac[k]) else None,
                                  d.cens_limit if len(d.cens_limit) else None)
    t_loop = time.perf_counter() - t0
    print(f"example project (Quillmarsh 3), 1,000-draw Monte Carlo: {t_mc:.2f} s (target < 5 s); "
          f"per-draw scipy loop {t_loop:.2f} s; ratio {t_loop / t_mc:.1f}x")


if __name__ == "__main__":
    demo()
    example_monte_carlo()
