"""Calibration of blendq on synthetic wells with known truth (tests/calibration).

For each kind of synthetic well, fits N noisy replicates with ``blendq.decide.analysis.analyse``
and prints (a) coverage of the 90 % zone intervals (zones the diagnostics call resolved) and of
the 90 % discharge bands at every rate of the sweep grid, (b) how often the reported window
sticks out of the true window (by more than one grid step), (c) the reported window's width as
a fraction of the true width, with 95 % Wilson intervals and the targets beside them; also the
time of each fit and every failure.

    python benchmarks/bench_calibration.py --replicates 20 --draws 1000
    python benchmarks/bench_calibration.py --kinds logs thief --replicates 40

Run from the repository root; tests/calibration is put on the path by this script.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "calibration"))
sys.path.insert(0, str(ROOT))

from harness import Failure, run, summarise  # noqa: E402
from truth import KINDS, well_of  # noqa: E402


def pct(x: float) -> str:
    return "  n/a" if x != x else f"{100 * x:5.1f}%"


def ci(t) -> str:
    return "" if t[0] != t[0] else f"[{100 * t[0]:.0f}-{100 * t[1]:.0f}%]"


def line(name: str, s) -> str:
    return (f"{name:8s} {s.replicates:4d} {s.failures:4d} "
            f"{pct(s.zone_coverage)} {ci(s.zone_ci):10s} n={s.zone_n:<4d}"
            f"{pct(s.band_coverage)} {ci(s.band_ci):10s} "
            f"{pct(s.band50_coverage)} {ci(s.band50_ci):10s} "
            f"{pct(s.level_coverage)} {ci(s.level_ci):10s} "
            f"{s.stick_out:3d} {pct(s.stick_out_rate)} {ci(s.stick_out_ci):10s} "
            f"{pct(s.width_median)} {pct(s.width_min)} {s.width_under_70:3d}  "
            f"{s.seconds_median:5.2f} {s.seconds_max:6.2f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=40, help="replicates per kind (40)")
    ap.add_argument("--draws", type=int, default=1000, help="draws per fit (1000)")
    ap.add_argument("--kinds", nargs="*", default=list(KINDS), choices=list(KINDS))
    ap.add_argument("--seed", type=int, default=20261202, help="base seed")
    args = ap.parse_args(argv)
    try:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT,
                                capture_output=True, text=True).stdout.strip()
    except OSError:
        commit = "?"
    print(f"blendq calibration, commit {commit}, {args.replicates} replicates x "
          f"{len(args.kinds)} kinds, {args.draws} draws, base seed {args.seed}")
    for k in args.kinds:
        w = well_of(k)
        ok = w.true_ok()
        rng = f"{w.rates[ok].min():g}-{w.rates[ok].max():g} m3/d" if ok.any() else "empty"
        print(f"  {k:8s} {w.description}; true window {rng}")

    def progress(kind, r, res):
        mark = "x" if isinstance(res, Failure) else ("s" if res.stick_out else ".")
        print(mark, end="" if r + 1 < args.replicates else f" {kind}\n", flush=True)

    t0 = time.perf_counter()
    scores, failures = run(args.kinds, args.replicates, args.draws, args.seed, progress)
    total = time.perf_counter() - t0
    head = (f"{'kind':8s} {'reps':>4s} {'fail':>4s} {'zone 90%':>6s} {'(95% CI)':10s} "
            f"{'checks':6s}{'band 90%':>6s} {'(95% CI)':10s} {'band 50%':>6s} {'(95% CI)':10s} "
            f"{'level90':>6s} {'(95% CI)':10s} "
            f"{'out':>3s} {'rate':>6s} {'(95% CI)':10s} {'width':>6s} {'min':>6s} {'<70':>3s}  "
            f"{'s med':>5s} {'s max':>6s}")
    print()
    print(head)
    for k in args.kinds:
        print(line(k, summarise([s for s in scores if s.kind == k],
                                [f for f in failures if f.kind == k])))
    print(line("all", summarise(scores, failures)))
    print("targets: zone and band 90% coverage 85-95%; band 50% coverage near 50%; stick-out "
          "<= 5% of replicates at alpha 0.05; width: as wide as the data allow (explain < 70%)")
    print("level90: 90% band of the pumping level against the true level (target 85-95%)")
    print("band CIs count one trial per (replicate, analyte): rates of one replicate are "
          "strongly correlated")
    for s in scores:
        if s.stick_out:
            print(f"  stick-out: {s.kind} replicate {s.replicate}: reported rates outside the "
                  f"true window {', '.join(f'{r:g}' for r in s.stick_out_rates)} m3/d")
    for s in scores:
        if s.width_fraction < 0.7:
            print(f"  width {100 * s.width_fraction:.0f}%: {s.kind} replicate {s.replicate}: "
                  f"{s.reasons}")
    for s in scores:
        if not s.converged:
            print(f"  not converged (results still returned): {s.kind} replicate {s.replicate}")
    for f in failures:
        print(f"  failure: {f.kind} replicate {f.replicate} after {f.seconds:.1f} s: {f.error}")
    print(f"total {total:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
