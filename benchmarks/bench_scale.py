"""How ``blendq check`` scales with the rows of a lab table: a lab's full export of several
wells (30 rows of this well; the others counted, not read) and a table whose rows all belong to
ONE well (every row read and reviewed); and the time to refuse a header unit of 100,000
characters.

It prints the load average and the start-up time (the small test project), then for each kind
of table and rows = 1e3, 1e4, 1e5 the wall time of ``blendq check`` in a fresh process
(start-up included), the CPU time of that process (the machine is shared: the CPU time is the
figure that does not depend on the other work running), and a baseline measured in the same
run: Python's csv module reading the same lab file (the least any reader must do); then the
fitted exponent b of time = a N^b (1 = linear). Target: 100,000 rows checked in under 10 s.
Runs in about a minute and a half on 2 cores.

    python benchmarks/bench_scale.py
"""

from __future__ import annotations

import csv
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_inputs import US, exponent, lab_rows, project  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def check(folder: Path) -> tuple[float, float, int]:
    """(wall [s], CPU [s], exit code) of ``blendq check folder`` in a fresh process."""
    cpu0, t0 = children_cpu(), time.perf_counter()
    run = subprocess.run([sys.executable, "-m", "blendq", "check", str(folder)],
                         stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    return time.perf_counter() - t0, children_cpu() - cpu0, run.returncode


def baseline(folder: Path) -> float:
    t0 = time.perf_counter()
    with open(folder / "lab" / "samples.csv", encoding="utf-8", newline="") as f:
        sum(1 for _ in csv.reader(f))
    return time.perf_counter() - t0


def rows_table(tmp: Path, title: str, own) -> tuple[list[float], list[float]]:
    """Print the check of lab tables of 1e3, 1e4 and 1e5 rows, ``own(n)`` of them this well's;
    return the wall and CPU times [s]."""
    print(title)
    print(f"{'rows':>8} {'wall [s]':>9} {'cpu [s]':>8} {'csv [s]':>8} {'cpu/csv':>8} exit")
    sizes, walls, cpus = [], [], []
    for n in (1_000, 10_000, 100_000):
        folder = project(tmp / f"own{own(n)}of{n}", lab_rows(n, own(n)))
        wall, cpu, code = check(folder)
        base = baseline(folder)
        sizes.append(n)
        walls.append(wall)
        cpus.append(cpu)
        print(f"{n:>8,} {wall:>9.2f} {cpu:>8.2f} {base:>8.3f} {cpu / base:>8.0f} {code}")
    print(f"  fitted exponent: wall {exponent(sizes, walls):.2f}, cpu {exponent(sizes, cpus):.2f}"
          f" (from 1e4 to 1e5: cpu {np.log(cpus[2] / cpus[1]) / np.log(10):.2f})")
    print(f"  100,000 rows: {walls[-1]:.1f} s wall, {cpus[-1]:.1f} s CPU (target < 10 s)")
    return walls, cpus


def main() -> None:
    print(f"load average at the start (1, 5, 15 min): "
          f"{', '.join(f'{x:.1f}' for x in os.getloadavg())} on {os.cpu_count()} CPUs")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        wall, cpu, code = check(US)
        print(f"start-up: `blendq check` of the small test project: {wall:.2f} s wall, "
              f"{cpu:.2f} s CPU (exit {code})")
        rows_table(tmp, "a lab's full export: N rows, 30 of this well (`well` column; the other "
                        "wells' rows counted, not read)", lambda n: 30)
        rows_table(tmp, "lab table of one well: every row read and reviewed (`blendq check`, "
                        "fresh process)", lambda n: n)
        folder = tmp / "header"
        shutil.copytree(US, folder)
        (folder / "levels.csv").write_text("time,level [" + "m" * 100_000 + "]\n"
                                           "2025-04-08 07:50,96\n", encoding="utf-8")
        wall, cpu, code = check(folder)
        print(f"header unit of 100,000 characters: refused in {wall:.2f} s wall, {cpu:.2f} s CPU "
              f"(exit {code})")


if __name__ == "__main__":
    main()
