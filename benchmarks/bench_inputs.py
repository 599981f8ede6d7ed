"""How the time of ``blendq check`` (read the project, review the lab and field data) grows with
the rows of the lab table, and the time to refuse an oversized header.

Printed, each with a baseline measured in the same run (Python's csv module reading the same
lab file, the least any reader must do):
- a lab's full export: N rows of which 30 name this well (``well`` column); the other wells'
  rows are counted, not read. Target: 100,000 rows checked in under 10 s (end to end, the
  command line in a fresh process, start-up included).
- a lab table whose N rows all belong to the well (every row read and reviewed).
- fitted exponent b of time = a N^b for both (1 = linear).
- a header unit of 100,000 characters: time to the one-line refusal.
Runs in about a minute on 2 cores.
"""

from __future__ import annotations

import csv
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
US = ROOT / "tests" / "data" / "projects" / "quillmarsh_us"
HEADER = ("sample_id,step,analyte,value,unit,basis,nondetect,detection_limit,uncertainty,"
          "qualifier,sampled_at,analyzed_at,duplicate_of,depth [ft],preservation,well")
STEP_TIMES = {"S1": "2025-04-08 09:55", "S2": "2025-04-08 11:55", "S3": "2025-04-08 13:55",
              "S4": "2025-04-08 15:55"}
ANALYTES = (("nitrate", "31.0", "mg/L", "as NO3", "0.1"), ("arsenic", "6.1", "ug/L", "", "0.5"),
            ("chloride", "12.0", "mg/L", "", "0.5"))


def lab_rows(n: int, own: int) -> list[str]:
    """``n`` lab rows; ``own`` of them (spread through the file) name this well."""
    rows, every = [], max(n // max(own, 1), 1)
    for k in range(n):
        mine = own >= n or (k % every == 0 and k // every < own)
        step = f"S{1 + (k // 3) % 4}"
        name, value, unit, basis, dl = ANALYTES[k % 3]
        sid = f"{'QW3' if mine else 'OTHER'}-{k // 3}"
        when = STEP_TIMES[step]
        rows.append(f"{sid},{step if mine else 'X9'},{name},{value},{unit},{basis},,{dl},,,"
                    f"{when},2025-04-09 10:00,,,cooled 4 C,"
                    f"{'Quillmarsh 3' if mine else 'Fenwick ' + str(k % 7)}")
    return rows


def project(folder: Path, rows: list[str]) -> Path:
    shutil.copytree(US, folder)
    (folder / "lab" / "samples.csv").write_text("\n".join([HEADER, *rows]) + "\n",
                                                encoding="utf-8")
    return folder


def check_in_process(folder: Path) -> float:
    from blendq.inputs.loader import load_project
    from blendq.review.findings import review

    t0 = time.perf_counter()
    review(load_project(folder))
    return time.perf_counter() - t0


def baseline(folder: Path) -> float:
    t0 = time.perf_counter()
    with open(folder / "lab" / "samples.csv", encoding="utf-8", newline="") as f:
        sum(1 for _ in csv.reader(f))
    return time.perf_counter() - t0


def exponent(sizes, times) -> float:
    return float(np.polyfit(np.log(sizes), np.log(times), 1)[0])


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        check_in_process(US)  # imports and pint's first parse, outside the timings
        print("lab export of several wells: N rows, 30 of this well")
        print(f"{'rows':>8} {'check [s]':>10} {'csv [s]':>9} {'ratio':>7}")
        sizes, times = [], []
        for n in (10_000, 30_000, 100_000):
            folder = project(tmp / f"export{n}", lab_rows(n, 30))
            t, b = check_in_process(folder), baseline(folder)
            sizes.append(n)
            times.append(t)
            print(f"{n:>8,} {t:>10.3f} {b:>9.3f} {t / b:>7.1f}")
        print(f"  fitted exponent {exponent(sizes, times):.2f}")
        t0 = time.perf_counter()
        run = subprocess.run([sys.executable, "-m", "blendq", "check",
                              str(tmp / "export100000")], capture_output=True, text=True,
                             cwd=ROOT)
        wall = time.perf_counter() - t0
        print(f"  100,000 rows, `blendq check` in a fresh process: {wall:.2f} s "
              f"(target < 10 s; exit {run.returncode})")
        print("lab table of one well: every row read and reviewed")
        print(f"{'rows':>8} {'check [s]':>10} {'csv [s]':>9} {'ratio':>7}")
        sizes, times = [], []
        for n in (3_000, 10_000, 30_000):
            folder = project(tmp / f"own{n}", lab_rows(n, n))
            t, b = check_in_process(folder), baseline(folder)
            sizes.append(n)
            times.append(t)
            print(f"{n:>8,} {t:>10.3f} {b:>9.3f} {t / b:>7.0f}")
        b = exponent(sizes, times)
        print(f"  fitted exponent {b:.2f}; 100,000 rows by extrapolation "
              f"{times[-1] * (100_000 / sizes[-1]) ** b:.0f} s")
        folder = tmp / "header"
        shutil.copytree(US, folder)
        (folder / "levels.csv").write_text("time,level [" + "m" * 100_000 + "]\n"
                                           "2025-04-08 07:50,96\n", encoding="utf-8")
        from blendq.errors import InputError
        from blendq.inputs.loader import load_project

        t0 = time.perf_counter()
        try:
            load_project(folder)
        except InputError as err:
            refused = str(err)[:60]
        print(f"header unit of 100,000 characters refused in {time.perf_counter() - t0:.3f} s: "
              f"{refused}...")


if __name__ == "__main__":
    main()
