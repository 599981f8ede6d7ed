"""How the fit with 1,000 posterior draws grows with the zones and the steps of a well.

An invented well built by the package's synthetic generator (:mod:`blendq.well.synthetic`):
``n`` screened zones of 4 m, one under the other with 1 m blank between them, conductances
and static heads varying smoothly with depth, two analytes, a flow log at rest and one pumped
(a reading between every two zones), 5 % lab error, ``m`` steps. Each case runs in its own
process, which prints the time of the joint fit, of the 1,000 posterior draws
(:func:`blendq.fit.uncertainty.monte_carlo`) and of the zone table, the processor time of the
three (all threads; on a shared machine the wall time also counts the waits for a core, and
the load average is printed with the table), and its peak memory (maximum resident set size). Baseline, measured in the same run: the 4-zone, 5-step case.
Then the fitted exponents b of time = a n^b over zones (10 steps) and over steps (at each of
``--step-zones``);
a case whose fit runs out of its time budget (``fit_time_budget``) is printed as such.
Target: 30 zones, 10 steps, 1,000 draws in under 30 s on 2 cores; peak memory under 2 GB.

    python benchmarks/bench_zones.py             # zones 4 10 20 30, steps 5 10 20 at 4, 10 zones
    python benchmarks/bench_zones.py --zones 4 10 --steps 5 10 --step-zones 4   # a subset
    python benchmarks/bench_zones.py --one 30 10 # one case
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def well(n_zones: int, n_steps: int):
    from blendq.well.synthetic import synthetic_project

    k = np.arange(n_zones)
    top = 30.0 + 5.0 * k
    bottom = top + 4.0
    conductance = 60.0 + 40.0 * np.sin(0.7 * k) ** 2  # [m^2/d]
    head = -10.0 - 3.0 * np.cos(0.5 * k)  # [m]
    conc = {"nitrate": 2.0 + 10.0 * np.sin(0.3 * k) ** 2,
            "arsenic": 0.002 + 0.02 * np.cos(0.4 * k) ** 2}
    rates = np.linspace(300.0, 3000.0, n_steps)  # [m^3/d]
    log_depths = [27.0, *(top[1:] - 0.5), float(bottom[-1]) + 2.0]
    return synthetic_project(conductance, head, top, bottom, conc, rates, 25.0,
                             relative_error=0.05, well_loss=2e-7,
                             flowlog_rates=[0.0, 1500.0], flowlog_depths=log_depths,
                             level_noise=0.05, seed=5)


def one(n_zones: int, n_steps: int, draws: int) -> dict:
    from blendq.errors import ModelError
    from blendq.fit import diagnostics, uncertainty
    from blendq.fit.estimation import fit

    p = well(n_zones, n_steps)
    c0 = time.process_time()
    t0 = time.perf_counter()
    try:
        result = fit(p)
    except ModelError as err:  # the fit's time budget ran out: reported, not hidden
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        return {"fit": time.perf_counter() - t0, "draws": float("nan"), "table": float("nan"),
                "total": float("nan"), "cpu": time.process_time() - c0, "peak_mb": peak,
                "failed": str(err)[:90]}
    t1 = time.perf_counter()
    sample = uncertainty.monte_carlo(result, draws, seed=1)
    t2 = time.perf_counter()
    diagnostics.zone_table(result, sample)
    t3 = time.perf_counter()
    cpu = time.process_time() - c0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # [MB] (kB on Linux)
    return {"fit": t1 - t0, "draws": t2 - t1, "table": t3 - t2, "total": t3 - t0, "cpu": cpu,
            "peak_mb": peak}


def case(n_zones: int, n_steps: int, draws: int) -> dict:
    run = subprocess.run([sys.executable, __file__, "--one", str(n_zones), str(n_steps),
                          "--draws", str(draws)], capture_output=True, text=True, cwd=ROOT)
    if run.returncode:
        raise SystemExit(run.stderr)
    out = json.loads(run.stdout.strip().splitlines()[-1])
    print(f"{n_zones:>6} {n_steps:>6} {out['fit']:>8.2f} {out['draws']:>9.2f} {out['table']:>8.2f}"
          f" {out['total']:>8.2f} {out['cpu']:>8.2f} {out['peak_mb']:>9.0f}"
          f" {out.get('failed', '')}", flush=True)
    return out


def exponent(sizes, times) -> float:
    return float(np.polyfit(np.log(sizes), np.log(times), 1)[0])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--one", nargs=2, type=int, metavar=("ZONES", "STEPS"))
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--zones", type=int, nargs="+", default=[4, 10, 20, 30],
                    help="zone counts at 10 steps")
    ap.add_argument("--steps", type=int, nargs="+", default=[5, 10, 20],
                    help="step counts at each of --step-zones")
    ap.add_argument("--step-zones", type=int, nargs="+", default=[4, 10])
    args = ap.parse_args()
    if args.one:
        print(json.dumps(one(*args.one, args.draws)))
        return
    load = ", ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"load average (1, 5, 15 min) at the start: {load}")
    print(f"{'zones':>6} {'steps':>6} {'fit [s]':>8} {'draws [s]':>9} {'table':>8} {'total':>8}"
          f" {'cpu [s]':>8} {'peak [MB]':>9}")
    done: dict[tuple[int, int], dict] = {}

    def run(n, m):
        if (n, m) not in done:
            done[(n, m)] = case(n, m, args.draws)
        return done[(n, m)]

    base = run(4, 5)
    by_zone = [run(n, 10) for n in args.zones]
    by_step = {z: [run(z, m) for m in args.steps] for z in args.step_zones}
    big = by_zone[-1]
    print(f"baseline 4 zones, 5 steps: {base['total']:.2f} s; {args.zones[-1]} zones, 10 steps: "
          f"{big['total']:.2f} s, processor {big['cpu']:.2f} s ({big['total'] / base['total']:.1f}"
          f" x the baseline; target at 30 zones < 30 s), peak {big['peak_mb']:.0f} MB (target "
          f"< 2,048 MB); load average at the end: "
          f"{', '.join(f'{x:.2f}' for x in os.getloadavg())}")
    ok = [(n, c["total"]) for n, c in zip(args.zones, by_zone, strict=True)
          if np.isfinite(c["total"])]
    if len(ok) >= 2:
        sizes, times = zip(*ok, strict=True)
        print(f"fitted exponent of time over zones (10 steps, zones {list(sizes)}): "
              f"{exponent(sizes, times):.2f}")
    for z, cases in by_step.items():
        if len(cases) >= 2:
            print(f"fitted exponent of time over steps ({z} zones, steps {args.steps}): "
                  f"{exponent(args.steps, [c['total'] for c in cases]):.2f}")


if __name__ == "__main__":
    main()
