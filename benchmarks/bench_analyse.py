"""Benchmark: one ``analyse()`` of the demo project (blendq/data/demo) with its default draws.

Prints the CPU and wall time per call after imports, the time of ``load_project`` alone, and
the same ``analyse()`` with the previous forms of the two parts made faster, measured in the
same run as the baseline:

* the step levels of a transient zone model (``blendq.well.transient.step_levels``) with the
  memory of the earlier rate increments summed by stacking them and evaluating the unit
  response of every earlier increment at every grid point (two ``unit_response`` calls and one
  ``np.stack`` per grid point);
* the quantiles of the judged statistic (``blendq.decide.sweep.statistic_quantiles``) by 48
  bisection steps over the whole bracket.

Both previous forms are kept below verbatim; the script also checks that the two runs give the
same window and zone table (to rounding). The goal for a wellfield of 100 demo-sized wells on
2 worker processes is under 1.1 s CPU per call.

Run:  python benchmarks/bench_analyse.py [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import time
import warnings

import numpy as np

import blendq
from blendq.api import demo_path
from blendq.decide import sweep
from blendq.fit import estimation
from blendq.inputs.loader import load_project
from blendq.well import hydraulics
from blendq.well.transient import SUBSTEP_FRACTIONS, unit_response


def previous_step_levels(conductance, static_head, nonlinear_loss, slope, schedule,
                         exponent=2.0, linear_loss=0.0):
    """The step levels as computed before the batched memory sum (kept as the baseline)."""
    g = np.asarray(conductance, float)
    h0 = np.asarray(static_head, float)
    d = np.broadcast_to(np.asarray(nonlinear_loss, float), np.broadcast_shapes(g.shape, h0.shape))
    bl = np.broadcast_to(np.asarray(linear_loss, float), d.shape)
    has_d = bool(np.any(d > 0) or np.any(bl > 0))
    amb = hydraulics.solve_wellbore_head(np.zeros(1), g, h0, d if has_d else None, exponent,
                                         linear_loss=bl if has_d else None)
    hw0 = amb.wellbore_head[..., 0]
    q0 = amb.zone_flow[..., 0, :]
    t_ref = schedule.reference_time
    loss0 = hydraulics.entrance_loss(q0, bl, d, exponent)[0] if has_d else 0.0
    out_h, out_q = {}, {}
    for s, (start, end, rate) in enumerate(schedule.sequences):
        grid = np.concatenate([[0.0], (start[:, None] + (end - start)[:, None]
                                       * SUBSTEP_FRACTIONS[None, :]).ravel()])
        grid_rate = np.concatenate([[0.0], np.repeat(rate, len(SUBSTEP_FRACTIONS))])
        read = {k * len(SUBSTEP_FRACTIONS) + len(SUBSTEP_FRACTIONS): k
                for k in range(len(start))}
        increments = []
        last = q0
        for m in range(1, len(grid)):
            tau = grid[m] - grid[:m]
            w_new = unit_response(g, slope, tau[-1], t_ref)
            heads = hw0[..., None] + last * w_new + loss0
            if increments:
                shape = (len(increments),) + (1,) * (np.ndim(g))
                w_old = unit_response(g, slope, tau[:-1].reshape(shape), t_ref)
                heads = heads - (np.stack(increments) * w_old).sum(0)
            if has_d:
                st = hydraulics.solve_wellbore_head(np.array([grid_rate[m]]), 1.0 / w_new,
                                                    heads, d, exponent, linear_loss=bl)
                q, hw = st.zone_flow[..., 0, :], st.wellbore_head[..., 0]
            else:
                ge = 1.0 / w_new
                hw = ((ge * heads).sum(-1) - grid_rate[m]) / ge.sum(-1)
                q = ge * (heads - hw[..., None])
            increments.append(q - last)
            last = q
            if m in read:
                out_h[(s, read[m])] = hw
                out_q[(s, read[m])] = q
    keys = list(schedule.level_step)
    return (np.stack([out_h[key] for key in keys], -1),
            np.stack([out_q[key] for key in keys], -2))


def previous_statistic_quantiles(concentration, probs, log_sd, iterations=48):
    """The mixture quantiles by 48 bisection steps (kept as the baseline)."""
    from scipy.special import ndtr

    c = np.asarray(concentration, float)
    probs = np.asarray(probs, float)
    if log_sd <= 0:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return np.nanquantile(c, probs, axis=0)
    s = float(log_sd)
    valid = np.isfinite(c)
    n = valid.sum(0)
    pos = valid & (c > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        lm = np.where(pos, np.log(np.where(pos, c, 1.0)) - 0.5 * s * s, np.nan)
    zero_frac = np.where(n > 0, (valid & ~pos).sum(0) / np.maximum(n, 1), np.nan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        lo = np.nanmin(lm, axis=0) - 9 * s
        hi = np.nanmax(lm, axis=0) + 9 * s
    lo = np.where(np.isfinite(lo), lo, 0.0)[None, :].repeat(len(probs), 0)
    hi = np.where(np.isfinite(hi), hi, 0.0)[None, :].repeat(len(probs), 0)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        z = (mid[:, None, :] - lm[None, :, :]) / s
        cdf = (np.where(pos[None], ndtr(z), 0.0).sum(1) + (valid & ~pos).sum(0)) \
            / np.maximum(n, 1)
        below = cdf < probs[:, None]
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    out = np.exp(0.5 * (lo + hi))
    out = np.where(zero_frac[None, :] >= probs[:, None], 0.0, out)
    return np.where(n[None, :] > 0, out, np.nan)


CURRENT = {"step_levels": estimation.step_levels, "quantiles": sweep.statistic_quantiles}


def use(previous: bool) -> None:
    estimation.step_levels = previous_step_levels if previous else CURRENT["step_levels"]
    sweep.statistic_quantiles = previous_statistic_quantiles if previous \
        else CURRENT["quantiles"]


def timed(fn):
    c, w = time.process_time(), time.perf_counter()
    out = fn()
    return out, time.process_time() - c, time.perf_counter() - w


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    path = demo_path()
    load = [timed(lambda: load_project(path))[1] for _ in range(5)]
    print(f"load_project(demo): {min(load) * 1e3:.1f} ms CPU (best of 5)")
    use(False)
    blendq.analyse(load_project(path), seed=1)  # first call: lazy imports, caches of numpy
    cpu = {True: [], False: []}
    wall = {True: [], False: []}
    results = {}
    for _ in range(args.repeat):
        for previous in (True, False):  # interleaved, so that the machine's load hits both
            use(previous)
            res, c, w = timed(lambda: blendq.analyse(load_project(path), seed=1))
            cpu[previous].append(c)
            wall[previous].append(w)
            results[previous] = res
    use(False)
    for previous, name in ((True, "previous forms (baseline)"), (False, "current")):
        print(f"analyse(demo, seed=1), {name}: CPU best {min(cpu[previous]):.3f} s, median "
              f"{np.median(cpu[previous]):.3f} s; wall median {np.median(wall[previous]):.3f} s")
    print(f"ratio baseline / current (best CPU): {min(cpu[True]) / min(cpu[False]):.2f} x")
    old, new = results[True].analysis, results[False].analysis
    same_window = old.window.intervals == new.window.intervals \
        and old.window.recommended == new.window.recommended
    zt_old = old.zones.select_dtypes("number").to_numpy(float)
    zt_new = new.zones.select_dtypes("number").to_numpy(float)
    scale = np.nanmax(np.abs(zt_old))
    diff = float(np.nanmax(np.abs(zt_old - zt_new))) / scale if scale > 0 else 0.0
    print(f"same window: {same_window}; zone table largest difference {diff:.1e} of its "
          f"largest entry")
    if not same_window:
        # the draws agree to the draws' convergence tolerance, not bit for bit, and a rate whose
        # exceedance share sits at alpha can then fall on either side of it
        for name, res in (("baseline", old), ("current", new)):
            ends = ", ".join(f"{lo:.1f} to {hi:.1f}" for lo, hi, _, _ in res.window.intervals)
            print(f"  window {name}: {ends} m3/d; recommended {res.window.recommended} m3/d")
    print(f"load average (1, 5, 15 min): {', '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
