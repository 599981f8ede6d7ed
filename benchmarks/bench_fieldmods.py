"""The search for well modifications that open a blending plan, against the plan it follows.

The demo wellfield (``examples/wellfield``) with the North plant's demand raised to 800 gpm, in
a temporary folder: no plan as analysed. Printed, all in the same run:

- the baseline: the blending plan with its diagnosis (``fieldplan.field_plan`` without N-1),
  the work the command does before the search;
- the search with the wells' analyses kept (``keep_analyses=True``, the API's default): each
  candidate evaluated and the plan of the unmet entry points re-solved;
- the search with the analyses not kept (the command line's batch): the candidate wells are
  analysed again with their seeds first;
- each against the baseline (ratio), and the number of plans re-solved.

Run from the repository root: ``python benchmarks/bench_fieldmods.py`` (about 1.5 minutes with
the projects' 1,000 draws; ``--draws 200 --plan-draws 100`` as the tests take about 30 s).
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "wellfield"


def main() -> None:
    import blendq as bq
    from blendq.decide import fieldmods, fieldplan

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=None, help="draws per well (default: each "
                    "project's)")
    ap.add_argument("--plan-draws", type=int, default=fieldplan.PLAN_DRAWS)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "wf"
        shutil.copytree(EXAMPLE, root)
        f = root / "wellfield.toml"
        f.write_text(f.read_text(encoding="utf-8").replace('demand = "650 gpm"',
                                                           'demand = "800 gpm"'),
                     encoding="utf-8")
        t0 = time.perf_counter()
        r = bq.analyse_wellfield(root, workers=1, draws=args.draws, plan_draws=args.plan_draws)
        t_analyse = time.perf_counter() - t0
        t0 = time.perf_counter()
        fp = fieldplan.field_plan(r.wellfield, r.outcomes, max_draws=args.plan_draws,
                                  n_minus_one=False, units="US")
        t_plan = time.perf_counter() - t0
        kept = fieldmods.search(r.wellfield, r.outcomes, fp.inputs, fp.plan,
                                max_draws=args.plan_draws, units="US")
        dropped = [replace(o, analysis=None) for o in r.outcomes]
        again = fieldmods.search(r.wellfield, dropped, fp.inputs, fp.plan,
                                 max_draws=args.plan_draws, units="US")
    same = (fieldmods.modification_lines(kept, "US")
            == fieldmods.modification_lines(again, "US"))
    draws = r.outcomes[0].summary.draws
    print(f"demo wellfield at 800 gpm, {draws} draws per well, {args.plan_draws} in the program")
    print(f"  analyses of the 4 wells (one process)  {t_analyse:7.1f} s")
    print(f"  baseline: plan and diagnosis           {t_plan:7.1f} s  ({fp.plan.status})")
    print(f"  search, analyses kept                  {kept.seconds:7.1f} s  "
          f"ratio {kept.seconds / t_plan:.2f} x the baseline; {len(kept.tried)} plans "
          f"re-solved, {len(kept.opening)} opening a plan")
    print(f"  search, analyses repeated              {again.seconds:7.1f} s  "
          f"ratio {again.seconds / t_plan:.2f} x the baseline; same text: {same}")
    for line in fieldmods.modification_lines(kept, "US"):
        print(line)


if __name__ == "__main__":
    main()
