"""Coverage of the monitoring-history time model on synthetic wells with known zone trends.

Each replicate makes a new noisy step test of an invented two-zone well (flow logs, levels,
3 % lab error) with blendq's synthetic generator, fits it in full (hydraulics and zone values),
makes ten years of monthly history samples at random rates (a trend and an annual harmonic in
the upper zone, temporal sd 0.3 mg/L, 3 % lab error) and fits the time model with the step
fit's shares and anchor. Prints the coverage of the 90 % interval of the upper zone's trend
and of the lower zone's (zero) trend with 95 % Wilson intervals (target 85-95 %), the mean
recovered seasonal amplitude and temporal sd against the truth, and the time per replicate.

    python benchmarks/bench_history_coverage.py --replicates 300
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from blendq.fit import estimation  # noqa: E402
from blendq.fit.history import fit_time_model, step_test_date, years_since  # noqa: E402
from blendq.fit.uncertainty import linearised_zone_sd  # noqa: E402
from blendq.well.model import model_from_parameters  # noqa: E402
from blendq.well.synthetic import synthetic_history, synthetic_project  # noqa: E402

G = np.array([60.0, 100.0])
H0 = np.array([-8.0, -14.0])
TOP = np.array([30.0, 60.0])
BOT = TOP + 15.0
C0 = np.array([8.0, 1.0])
TREND = np.array([0.25, 0.0])
AMPLITUDE = np.array([0.8, 0.0])
TEMPORAL_SD = 0.3
RATES = np.array([200.0, 600.0, 1000.0, 1500.0, 2000.0])


def wilson(k: int, n: int, z: float = 1.96) -> tuple[float, float]:
    """95 % Wilson score interval of a proportion k / n (Wilson 1927)."""
    p = k / n
    centre = (p + z**2 / (2 * n)) / (1 + z**2 / n)
    half = z * np.sqrt(p * (1 - p) / n + z**2 / (4 * n**2)) / (1 + z**2 / n)
    return centre - half, centre + half


def replicate(seed: int) -> dict:
    p = synthetic_project(G, H0, TOP, BOT, {"nitrate": C0}, RATES, 25.0, relative_error=0.03,
                          flowlog_rates=[0.0, 1000.0], flowlog_depths=[27.0, 50.0, 80.0],
                          flowlog_noise=0.02, level_noise=0.05, seed=seed)
    fit = estimation.fit(p)
    t0 = step_test_date(p)
    rng = np.random.default_rng(seed + 1_000_000)
    dates = [t0 - pd.Timedelta(days=30.44 * k) for k in range(120, 0, -1)]
    rates = rng.uniform(200.0, 2000.0, len(dates))
    truth = model_from_parameters(p, G, H0, 0.0)
    h = synthetic_history(truth, t0, dates, rates, {"nitrate": {
        "c0": C0, "trend": TREND, "amplitude": AMPLITUDE}}, 0.03, {"nitrate": TEMPORAL_SD},
        seed=seed + 2_000_000)
    r = fit_time_model(years_since(h["sampled_at"], t0), fit.model.weights(h["rate"].to_numpy()),
                       h["value"].to_numpy(), h["uncertainty"].to_numpy(),
                       fit.zone_values()[:, 0], linearised_zone_sd(fit)[:, 0], "trend+seasonal")
    names = r["layout"].names
    out = {"resolved": dict(r["layout"].terms) == {"trend": "zone", "seasonal": "zone"},
           "sigma": r["sigma_temporal"]}
    if out["resolved"]:
        for z in (0, 1):
            i = names.index(f"b{z}")
            out[f"cover{z}"] = abs(r["coef"][i] - TREND[z]) <= 1.6449 * np.sqrt(r["cov"][i, i])
        out["amplitude"] = np.hypot(r["coef"][names.index("s0")], r["coef"][names.index("k0")])
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=300)
    args = ap.parse_args()
    start = time.perf_counter()
    results = [replicate(seed) for seed in range(args.replicates)]
    elapsed = time.perf_counter() - start
    ok = [r for r in results if r["resolved"]]
    print(f"{len(results)} replicates, {len(ok)} with both terms resolved per zone; "
          f"{elapsed / len(results) * 1000:.0f} ms per replicate (step fit + time model)")
    for z, name in ((0, "upper zone trend 0.25 mg/L/a"), (1, "lower zone trend 0")):
        k = sum(bool(r[f"cover{z}"]) for r in ok)
        lo, hi = wilson(k, len(ok))
        print(f"coverage of the 90 % interval, {name}: {k / len(ok):.1%} "
              f"(95 % Wilson {lo:.1%} to {hi:.1%}; target 85-95 %)")
    amp = np.mean([r["amplitude"] for r in ok])
    sig = np.mean([r["sigma"] for r in results])
    print(f"seasonal amplitude: mean {amp:.3f} mg/L (truth {AMPLITUDE[0]:g}); temporal sd: "
          f"mean {sig:.3f} mg/L (truth {TEMPORAL_SD:g})")


if __name__ == "__main__":
    main()
