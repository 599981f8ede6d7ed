"""End-to-end time of ``blendq demo`` and of the 1,000-draw Monte Carlo on the example project.

Each figure is printed with a ratio against a plain baseline measured in the same run:
- the demo against the same work done in one process, charts drawn one after the other in the
  main process (``ChartPool(0)``), so the ratio is what the chart workers buy; a bare start-up
  that imports the command line (the floor any command pays) is printed beside it;
- where the time of that one-process run goes (imports, analysis, charts, PDF, the rest);
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

#: the demo's work in one process, charts drawn in turn; prints its phases as "name seconds"
ONE_PROCESS = """
import sys, time
t0 = time.perf_counter()
marks = []
def mark(name):
    marks.append((name, time.perf_counter()))
from importlib import resources
from pathlib import Path
from blendq.report.chart_pool import ChartPool
from blendq.inputs.loader import load_project
from blendq.report.outputs import write_outputs
from blendq.decide.analysis import analyse
import blendq.report.chart_pool, blendq.report.pdf, blendq.report.assemble
mark("imports")
project = load_project(Path(str(resources.files("blendq") / "data" / "demo")))
analysis = analyse(project)
mark("load and analysis")
drawn = 0.0
render = blendq.report.chart_pool.render_chart
def timed_render(job):
    global drawn
    t = time.perf_counter()
    out = render(job)
    drawn += time.perf_counter() - t
    return out
blendq.report.chart_pool.render_chart = timed_render
pdf_time = 0.0
pdf = blendq.report.pdf.render_pdf_bytes
def timed_pdf(doc, paper="a4"):
    global pdf_time
    t = time.perf_counter()
    out = pdf(doc, paper)
    pdf_time += time.perf_counter() - t
    return out
blendq.report.pdf.render_pdf_bytes = timed_pdf
with ChartPool(0) as charts:
    files = blendq.report.assemble.output_files(analysis, "US", created="blendq", charts=charts)
write_outputs(Path(sys.argv[1]), files)
mark("report")
last = t0
for name, t in marks:
    print(name, t - last)
    last = t
print("charts (matplotlib import included)", drawn)
print("PDF", pdf_time)
print("total", time.perf_counter() - t0)
"""


def timed(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True)
    return time.perf_counter() - t0


def demo() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        out = str(Path(tmp) / "demo")
        timed([sys.executable, "-m", "blendq", "demo", "--out", out])  # warm caches
        runs = [timed([sys.executable, "-m", "blendq", "demo", "--out", out]) for _ in range(3)]
        serial = [timed([sys.executable, "-c", ONE_PROCESS, out]) for _ in range(3)]
        base = [timed([sys.executable, "-c", "import blendq.cli"]) for _ in range(3)]
        phases = subprocess.run([sys.executable, "-c", ONE_PROCESS, out], check=True,
                                capture_output=True, text=True).stdout
    t, b, one = min(runs), min(base), min(serial)
    import timeit

    ref = min(timeit.repeat("sum(range(10**6))", number=10, repeat=5)) / 10
    print(f"machine reference: sum(range(10**6)) takes {ref * 1e3:.1f} ms (the speed of this "
          "machine now; shared machines vary by a third or more over a day)")
    print(f"blendq demo end to end: {t:.2f} s (target < 5 s); the same work in one process "
          f"{one:.2f} s; ratio {one / t:.2f}x; bare start-up {b:.2f} s")
    print("one-process run, where the time goes:")
    for line in phases.splitlines():
        name, value = line.rsplit(" ", 1)
        print(f"  {name}: {float(value):.2f} s")


def example_monte_carlo() -> None:
    from blendq.fit import constrained_lsq as qp
    from blendq.fit.estimation import fit, row_weights
    from blendq.inputs.loader import load_project
    from blendq.fit.uncertainty import monte_carlo

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
