"""End-to-end time of ``blendq demo`` and of the 1,000-draw Monte Carlo on the example project.

Each figure is printed with a ratio against a plain baseline measured in the same run:
- the demo against a bare start-up that imports the command line (the floor any command pays);
- where the time of the demo's work goes (imports, analysis, charts, PDF, the rest), measured
  in a run of the same steps with timers around them;
- the example project's 1,000-draw Monte Carlo against the same draws refitted one draw and
  one analyte at a time with scipy (``qp.solve_censored_lsq``).
Targets: a full report (the demo) under 10 s on 2 cores; Monte Carlo under 5 s. How the charts
are drawn (in the main process, or in worker processes) is measured in ``bench_charts.py``.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]

#: the demo's work with timers around its phases; prints them as "name seconds"
ONE_PROCESS = """
import sys, time
t0 = time.perf_counter()
marks = []
def mark(name):
    marks.append((name, time.perf_counter()))
from importlib import resources
from pathlib import Path
from blendq.inputs.loader import load_project
from blendq.report.outputs import write_outputs
from blendq.decide.analysis import analyse
import blendq.report.assemble, blendq.report.pdf, blendq.report.scenario_section
mark("imports")
project = load_project(Path(str(resources.files("blendq") / "data" / "demo")))
analysis = analyse(project)
mark("load and analysis")
drawn = 0.0
def timed_charts(module, name):
    draw = getattr(module, name)
    def timed(*args):
        global drawn
        t = time.perf_counter()
        out = draw(*args)
        drawn += time.perf_counter() - t
        return out
    setattr(module, name, timed)
timed_charts(blendq.report.assemble, "quality_figures")
timed_charts(blendq.report.assemble, "step_drawdown_figures")
timed_charts(blendq.report.scenario_section, "scenario_chart_figure")
pdf_time = 0.0
pdf = blendq.report.pdf.render_pdf_bytes
def timed_pdf(doc, paper="a4"):
    global pdf_time
    t = time.perf_counter()
    out = pdf(doc, paper)
    pdf_time += time.perf_counter() - t
    return out
blendq.report.pdf.render_pdf_bytes = timed_pdf
files = blendq.report.assemble.output_files(analysis, "US", created="blendq")
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
        runs, base = [], []
        for _ in range(3):  # interleaved: the machine's speed drifts
            runs.append(timed([sys.executable, "-m", "blendq", "demo", "--out", out]))
            base.append(timed([sys.executable, "-c", "import blendq.cli"]))
        phases = subprocess.run([sys.executable, "-c", ONE_PROCESS, out], check=True,
                                capture_output=True, text=True).stdout
    t, b = min(runs), min(base)
    import timeit

    ref = min(timeit.repeat("sum(range(10**6))", number=10, repeat=5)) / 10
    print(f"machine reference: sum(range(10**6)) takes {ref * 1e3:.1f} ms (the speed of this "
          "machine now; shared machines vary by a third or more over a day)")
    print(f"blendq demo end to end: {t:.2f} s (target < 10 s); bare start-up {b:.2f} s; "
          f"ratio {t / b:.1f}x")
    print("where the time goes:")
    for line in phases.splitlines():
        name, value = line.rsplit(" ", 1)
        print(f"  {name}: {float(value):.2f} s")


def example_monte_carlo() -> None:
    from blendq.fit import constrained_lsq as qp
    from blendq.fit.estimation import fit, row_weights
    from blendq.fit.uncertainty import monte_carlo
    from blendq.inputs.loader import load_project

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
