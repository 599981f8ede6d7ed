"""Batch analysis of a wellfield: worker processes and a Dask LocalCluster against a one-process
loop measured in the same run.

The wellfield is made in a temporary folder of copies of the four demo wellfield wells
(``examples/wellfield``: the package demo TH-2 and its three variants), cycled to ``--wells``
wells, each with the project's own 1,000 draws. Printed:

- the one-process loop (``workers=1``, the baseline) and 2 local worker processes, both times
  and their ratio;
- a Dask ``LocalCluster`` (one thread per worker process) with 1 and 2 workers, and the
  scaling from 1 to 2;
- (the Dask workers start without the nanny's MALLOC_TRIM_THRESHOLD_, see below)
- the pickled size of one well's whole analysis against its summary (what crosses from a
  worker to the command when ``keep_analysis`` is off).

Target (issue: wellfield): 100 demo-sized wells in under 60 s on 2 cores. Every run here is
the same work, so the figure for 100 wells is 100 / ``--wells`` times the figure printed.
Run from the repository root: ``python benchmarks/bench_wellfield.py --wells 20`` (about 40 s
on an idle machine for the baseline and the processes; ``--wells 100`` about 2.5 minutes;
``--dask`` adds the LocalCluster runs).
"""

from __future__ import annotations

import argparse
import os
import pickle
import shutil
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "wellfield"
SOURCES = ("TH-2", "TH-5", "TH-7", "TH-9")


def make_field(folder: Path, n: int) -> Path:
    """A wellfield of ``n`` wells cycling through the demo wellfield's four projects."""
    lines = ['[wellfield]\nname = "Benchmark field"\nseed = 1\n',
             '[[entry_points]]\nname = "E"\ndemand = "1000 gpm"\n']
    for k in range(n):
        src = SOURCES[k % len(SOURCES)]
        name = f"W{k + 1:03d}"
        shutil.copytree(EXAMPLE / src, folder / name)
        lines.append(f'[[wells]]\nname = "{name}"\nproject = "{name}"\nentry_point = "E"\n')
    path = folder / "wellfield.toml"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def timed(label: str, fn):
    start = time.perf_counter()
    out = fn()
    seconds = time.perf_counter() - start
    failed = sum(o.failed for o in out)
    cpu = sum(o.cpu_seconds for o in out)
    print(f"{label:<36} {seconds:7.1f} s wall; processor time of the wells {cpu:6.1f} s; "
          f"load average {os.getloadavg()[0]:.1f} ({failed} failed)", flush=True)
    return seconds, out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--wells", type=int, default=20)
    parser.add_argument("--dask", action="store_true", help="also time a Dask LocalCluster")
    parser.add_argument("--no-baseline", action="store_true",
                        help="skip the one-process loop and the processes (with --dask)")
    args = parser.parse_args()

    from blendq.decide.batch import analyse_well, run_batch, tasks_for
    from blendq.inputs.wellfield_file import read_wellfield

    print(f"cores: {os.cpu_count()}; wells: {args.wells}")
    with tempfile.TemporaryDirectory() as tmp:
        wf = read_wellfield(make_field(Path(tmp), args.wells))
        tasks = tasks_for(wf, keep_analysis=False)
        whole = analyse_well(tasks_for(wf)[0])
        print(f"one well pickled: whole analysis {len(pickle.dumps(whole.analysis)) / 1e6:.1f} "
              f"MB, summary {len(pickle.dumps(whole.summary)) / 1e6:.1f} MB")
        scale = 100 / args.wells
        if not args.no_baseline:
            one, base = timed("one process (baseline)", lambda: run_batch(tasks, workers=1))
            two, out = timed("2 worker processes", lambda: run_batch(tasks, workers=2))
            same = all(a.summary.intervals == b.summary.intervals for a, b in
                       zip(base, out, strict=True) if a.summary is not None)
            print(f"ratio one process / 2 processes: {one / two:.2f} (same windows: {same})")
            print(f"for 100 wells: one process {one * scale:.0f} s, 2 processes "
                  f"{two * scale:.0f} s (target < 60 s)")
        if args.dask:
            import dask
            import distributed

            # Dask's nanny starts its workers with MALLOC_TRIM_THRESHOLD_=65536, which fixes
            # glibc's allocation thresholds and doubles a well's processor time (measured: a
            # demo-sized well 7.0 s against 3.5 s); the workers here start without it
            environ = {k: v for k, v in
                       dask.config.get("distributed.nanny.pre-spawn-environ").items()
                       if k != "MALLOC_TRIM_THRESHOLD_"}
            times = {}
            for n in (1, 2):
                with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}), \
                        distributed.LocalCluster(n_workers=n, threads_per_worker=1,
                                                 processes=True, dashboard_address=None,
                                                 silence_logs=40) as cluster, \
                        distributed.Client(cluster) as client:
                    client.run(lambda: __import__("blendq.decide.analysis"))  # warm workers
                    times[n], _ = timed(f"Dask LocalCluster, {n} worker(s)",
                                        lambda c=client: run_batch(tasks, scheduler=c))
            print(f"Dask scaling 1 -> 2 workers: {times[1] / times[2]:.2f}x; for 100 wells "
                  f"{times[1] * scale:.0f} s and {times[2] * scale:.0f} s")


if __name__ == "__main__":
    main()
