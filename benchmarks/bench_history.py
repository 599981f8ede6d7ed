"""What the monitoring history adds to ``blendq demo``.

Times, in one process on the demo project, the parts the history adds (the time-model fits,
the forecast with its predictive check, triggers and trend tests, and the report section with
its two charts) and prints each with its ratio to the baseline measured in the same run: the
demo's analysis (``analyse``), which the demo runs with or without a history. Target: the
history adds at most a few seconds to the demo.

    python benchmarks/bench_history.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from blendq.api import demo_path, load_project  # noqa: E402
from blendq.decide.analysis import analyse  # noqa: E402
from blendq.decide.forecast import forecast  # noqa: E402
from blendq.fit.history import history_time_fits  # noqa: E402
from blendq.report.history_section import history_section  # noqa: E402


def main() -> None:
    from blendq.report.charts.quality import _figure
    from blendq.report.charts.render import render_chart

    render_chart(_figure(1, 1, (2.0, 2.0))[0])  # matplotlib loaded: the demo's charts load it
    project = load_project(demo_path())
    t = time.perf_counter()
    a = analyse(project)
    base = time.perf_counter() - t
    parts = {}
    t = time.perf_counter()
    history_time_fits(a.project, a.fit, a.draws)
    parts["time-model fits"] = time.perf_counter() - t
    t = time.perf_counter()
    fc = forecast(a)
    parts["forecast, check, triggers, trend tests"] = time.perf_counter() - t
    t = time.perf_counter()
    history_section(a, "US", fc)
    parts["report section with its charts"] = time.perf_counter() - t
    print(f"baseline: the demo's analysis {base:.2f} s")
    for name, sec in parts.items():
        print(f"{name}: {sec:.2f} s ({sec / base:.3f} x the analysis)")
    total = sum(parts.values())
    print(f"history in all: {total:.2f} s ({total / base:.3f} x the analysis)")


if __name__ == "__main__":
    main()
