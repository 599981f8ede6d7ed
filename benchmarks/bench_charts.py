"""How to draw the report's charts: ``blendq demo`` end to end, three ways.

(a) the charts drawn in the main process, one after the other;
(b) a plain ``concurrent.futures.ProcessPoolExecutor`` with 2 workers (forked, so they share
    the imports already made): made where the command starts, before the project is loaded,
    with one warm-up task a worker that imports matplotlib while the analysis runs; the
    chart jobs submitted as soon as the analysis is done, before the text of the report is
    built, and collected after it;
(c) the forked chart server that blendq used up to commit 391b0b7
    (``blendq.report.chart_pool.ChartPool``): forked before the project is loaded, it imports
    matplotlib during the analysis, then forks two workers.

The three variants run the same command (``blendq demo``) on the package as it was at commit
391b0b7 (taken with ``git archive``; the chart server is no longer part of blendq), with only
the chart drawer swapped, so the comparison does not move when the rest of the package
changes. A fourth line times ``blendq demo`` of this tree, which draws as (a) does.

The variants are interleaved (a b c this a b c this ...), since the machine is shared and its
speed drifts; each is printed with its best and median time and the ratio against (a)
measured in the same run, after a machine reference (the time of ``sum(range(10**6))``).

    python benchmarks/bench_charts.py [runs]     # 3 runs of each by default; about 2 min
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tarfile
import tempfile
import time
import timeit
from io import BytesIO
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CHART_SERVER_REV = "391b0b7"  #: the last commit with the chart server

#: ``blendq demo`` with the chart drawer chosen by argv[1] ("a", "b" or "c"); the command line
#: takes its drawer from ``blendq.report.chart_pool.ChartPool`` when it runs
DRIVER = r"""
import sys

import blendq.report.chart_pool as cp

variant, out = sys.argv[1], sys.argv[2]


class InMainProcess:
    # (a) draw each chart when it is asked for, one after the other
    def __init__(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        pass

    def submit(self, jobs):
        return lambda: [job.figure(cp.render_chart(job)) for job in jobs]


def _warm_up():
    cp._warm_up()  # import matplotlib and load the chart font


class Executor(InMainProcess):
    # (b) a plain ProcessPoolExecutor, 2 forked workers
    def __init__(self):
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        self.pool = ProcessPoolExecutor(2, mp_context=mp.get_context("fork"))
        for _ in range(2):
            self.pool.submit(_warm_up)

    def __exit__(self, *exc):
        self.pool.shutdown(cancel_futures=True)

    def submit(self, jobs):
        futures = [self.pool.submit(cp.render_chart, job) for job in jobs]
        return lambda: [job.figure(f.result()) for job, f in zip(jobs, futures)]


if variant == "a":
    cp.ChartPool = InMainProcess
elif variant == "b":
    cp.ChartPool = Executor
elif variant != "c":
    raise SystemExit(f"unknown variant {variant}")

from blendq.cli import main

sys.argv = ["blendq", "demo", "--out", out]
main()
"""


def old_tree(folder: Path) -> Path:
    """The package at :data:`CHART_SERVER_REV`, unpacked into ``folder``."""
    tar = subprocess.run(["git", "archive", CHART_SERVER_REV, "blendq"], cwd=ROOT, check=True,
                         capture_output=True).stdout
    with tarfile.open(fileobj=BytesIO(tar)) as t:
        t.extractall(folder, filter="data")
    return folder


def timed(cmd: list[str], pythonpath: Path, cwd: str) -> float:
    """Seconds ``cmd`` takes with the package at ``pythonpath`` (run in ``cwd``, a folder
    without a package of its own, since ``python -c`` looks there first)."""
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, cwd=cwd,
                   env={**os.environ, "PYTHONPATH": str(pythonpath)})
    return time.perf_counter() - t0


def main(runs: int = 3) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        old = old_tree(Path(tmp) / "old")
        out = str(Path(tmp) / "demo")
        commands = {
            "(a) main process, one after the other": ([sys.executable, "-c", DRIVER, "a", out],
                                                      old),
            "(b) ProcessPoolExecutor, 2 workers": ([sys.executable, "-c", DRIVER, "b", out],
                                                   old),
            "(c) chart server (up to 391b0b7)": ([sys.executable, "-c", DRIVER, "c", out], old),
            "this tree: blendq demo": ([sys.executable, "-m", "blendq", "demo", "--out", out],
                                       ROOT),
        }
        for cmd, path in commands.values():  # warm the file caches, check that each one runs
            timed(cmd, path, tmp)
        times: dict[str, list[float]] = {name: [] for name in commands}
        for _ in range(runs):
            for name, (cmd, path) in commands.items():
                times[name].append(timed(cmd, path, tmp))
    ref = min(timeit.repeat("sum(range(10**6))", number=10, repeat=5)) / 10
    print(f"machine reference: sum(range(10**6)) takes {ref * 1e3:.1f} ms (the speed of this "
          "machine now; shared machines vary by a third or more over a day)")
    a = times["(a) main process, one after the other"]
    best_a, med_a = min(a), statistics.median(a)
    print(f"blendq demo end to end, {runs} interleaved runs each (target: under 10 s on 2 cores)")
    for name, t in times.items():
        med = statistics.median(t)
        print(f"  {name:38s} best {min(t):5.2f} s ({min(t) / best_a:.2f} x (a)), median "
              f"{med:5.2f} s ({med / med_a:.2f} x (a)); runs {' '.join(f'{x:.2f}' for x in t)}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3)
