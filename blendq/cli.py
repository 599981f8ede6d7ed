"""Command line of blendq. Heavy modules are imported inside the commands so that
``blendq --help`` starts fast."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer
from typer.core import TyperGroup

from blendq import CAUTIONS, __version__

#: the commands in the order of the work: a new project, its checks, the analysis, the report
WORKFLOW = ("new", "plan", "check", "inflow", "drawdown", "fit", "window", "history", "pump",
            "compare", "report", "wellfield", "demo")


class _WorkflowGroup(TyperGroup):
    """Lists the commands in workflow order (:data:`WORKFLOW`) rather than by name."""

    def list_commands(self, ctx):  # noqa: ARG002 - click's signature
        return sorted(self.commands, key=lambda n: (WORKFLOW.index(n) if n in WORKFLOW
                                                    else len(WORKFLOW), n))


app = typer.Typer(
    cls=_WorkflowGroup,
    # plain help text: brackets such as [[scenarios]] print as written, flags show no type
    rich_markup_mode=None,
    name="blendq",
    help="Discharge quality against pumping rate for a supply well screened across several "
         "zones: fit zone chemistry from step-test samples, find the rate window that meets "
         "the limits. A planning aid, not a compliance determination.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

ProjectArg = Annotated[Path, typer.Argument(metavar="PROJECT", help="Project file (project.toml) or its folder.")]
UnitsOpt = Annotated[str | None, typer.Option(
    "--units", "-u", metavar="US|SI|SI-L/s",
    help="Display units: US (gpm, ft), SI (m3/d, m) or SI-L/s (L/s, m) (default: the "
         "project's display_units).")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print machine-readable JSON.")]
DrawsOpt = Annotated[int | None, typer.Option("--draws", metavar="N", help="Posterior draws (default: project setting).")]
SeedOpt = Annotated[int | None, typer.Option("--seed", metavar="N", help="Random seed (default: project setting).")]
SealOpt = Annotated[list[str] | None, typer.Option(
    "--seal", metavar="ZONE", help="Option: seal this zone (repeatable; one option each).")]
RedevelopOpt = Annotated[list[str] | None, typer.Option(
    "--redevelop", metavar="ZONE:skin=S",
    help='Option: a zone with a new skin or a conductance factor, e.g. "Lower gravel:skin=0" '
         'or "Lower gravel:factor=2" (repeatable).')]
IntakeOpt = Annotated[list[str] | None, typer.Option(
    "--intake", metavar="DEPTH", help='Option: the pump intake moved to this depth below the '
                                      'datum, e.g. "140 ft" (repeatable).')]
LowerHeadsOpt = Annotated[list[str] | None, typer.Option(
    "--lower-heads", metavar="LENGTH", help='Option: every static head lowered by this much '
                                            '(a drought), e.g. "10 ft" (repeatable).')]
BlendOpt = Annotated[list[str] | None, typer.Option(
    "--blend", metavar="RATE;A=C",
    help='Option: a second source, its rate then each concentration separated by semicolons, '
         'e.g. "200 gpm; nitrate=2 mg/L as N; arsenic=1 ug/L" (repeatable).')]
NewPumpOpt = Annotated[list[str] | None, typer.Option(
    "--new-pump", metavar="CURVE;KEY=VALUE",
    help='Option: a new pump, its curve file then any [pump] key or a new intake separated by '
         'semicolons, e.g. "pump-b.csv; intake=150 ft; rated_speed=3550 rpm" (repeatable; '
         'the keys not given are the project\'s [pump] ones).')]


def _fail(message: str, code: int = 2) -> None:
    from blendq.inputs.tables import one_line

    typer.echo(f"blendq: error: {one_line(message)}", err=True)
    raise typer.Exit(code)


def _guard(fn):
    """Run a command body; user and model errors become one line and exit code 2."""
    from blendq.errors import BlendqError, InputError

    try:
        return fn()
    except typer.Exit:
        raise
    except typer.BadParameter as exc:  # a bad option value found inside the body is user input
        _fail(exc.format_message(), 2)
    except InputError as exc:
        if exc.field and exc.field.startswith("--") and exc.row is None:
            _fail(f"option {exc.field}: {exc.message}", 2)  # a command-line option, no file
        _fail(str(exc), 2)
    except BlendqError as exc:
        _fail(str(exc), 2)
    except (OSError, UnicodeDecodeError) as exc:
        _fail(f"{exc.__class__.__name__}: {exc}", 2)
    except Exception as exc:  # noqa: BLE001 - never show a traceback to a user
        _fail(f"internal error ({exc.__class__.__name__}: {exc}); please report it", 3)


def _units(units: str | None, project=None) -> str:
    """``--units`` when given, else the project's ``display_units`` (else US)."""
    if units is None:
        return project.settings.display_units if project is not None else "US"
    from blendq.errors import InputError
    from blendq.units import UNIT_SYSTEMS, unit_system

    try:
        return unit_system(units)
    except InputError:
        raise typer.BadParameter(f'"{units}" is not ' + ", ".join(UNIT_SYSTEMS[:-1]) +
                                 f" or {UNIT_SYSTEMS[-1]}", param_hint="--units") from None


def cautions_for(*texts: str) -> list[str]:
    """The cautions a command prints: always the planning-aid, sampling-rules and
    licensed-review / local-codes cautions; ``texts`` (what the command says) add nothing today
    but are kept so a command can pass what it advises (e.g. well work) for future cautions."""
    del texts
    return [CAUTIONS[0], CAUTIONS[1], CAUTIONS[3]]


def _caution_line(*texts: str) -> str:
    return "Caution: " + " ".join(cautions_for(*texts))


def _progress():
    """A rich progress bar on stderr for the posterior draws; returns (callback, context)."""
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    prog = Progress(TextColumn("posterior draws"), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                    TimeElapsedColumn(), console=Console(stderr=True), transient=True,
                    disable=not sys.stderr.isatty())
    task = prog.add_task("mc", total=1)

    def callback(done: int, total: int) -> None:
        prog.update(task, completed=done, total=total)

    return callback, prog


def _load(project: Path):
    from blendq.inputs.loader import load_project

    return load_project(project)


def _analyse(project, draws, seed, units: str, sample_mode="keep"):
    """The analysis through the public API (:func:`blendq.api.analyse`), with a progress bar."""
    from blendq.api import analyse

    callback, prog = _progress()
    with prog:
        return analyse(project, draws=draws, seed=seed, sample_mode=sample_mode, units=units,
                       progress=callback)


def version_callback(value: bool) -> None:
    if value:
        typer.echo(f"blendq {__version__}")
        raise typer.Exit()


@app.callback()
def main_options(
    version: Annotated[bool, typer.Option("--version", callback=version_callback, is_eager=True,
                                          help="Print the version and exit.")] = False,
) -> None:
    """blendq command line."""


def _echo_cautions(*texts: str) -> None:
    typer.echo(_caution_line(*texts))


def _step_table_lines(table, units: str) -> list[str]:
    """The leave-one-step-out table as text lines (display rate unit)."""
    from blendq.units import format_quantity

    def rate(v):
        return "-" if v != v else format_quantity(v, "rate", units)  # NaN: no window

    def shift(v):
        if v != v:
            return "-"
        return ("+" if v > 0 else "") + format_quantity(v, "rate", units)

    lines = ["Window without each step's lab samples (which steps drive the result; each row "
             f"a run with {table.attrs.get('draws', '')} posterior draws):"]
    for r in table.itertuples(index=False):
        what = "all steps" if r.step == "none" else f"without {r.step} ({r.results_left_out} results)"
        if r.window_low != r.window_low:  # NaN: no window
            lines.append(f"  {what}: {r.note or 'no window'}")
            continue
        moved = ("" if r.step == "none"
                 else f"; lower end moves {shift(r.shift_low)}, upper end {shift(r.shift_high)}")
        lines.append(f"  {what}: {rate(r.window_low)} to {rate(r.window_high)}; recommended "
                     f"{rate(r.recommended)}{moved}" + (f"; {r.note}" if r.note else ""))
    return lines


def data_notes(proj) -> list[str]:
    """Lines ``check`` and ``window`` print about how the project's data and limits shape the
    window (:func:`blendq.review.data_notes.data_notes`)."""
    from blendq.review.data_notes import data_notes as notes

    return notes(proj)


@app.command("new")
def new_cmd(folder: Annotated[Path, typer.Argument(help="Folder for the new project (must not hold project files yet).")]) -> None:
    """Write a commented template project for a new well."""

    def body():
        from blendq.inputs.template import write_template

        written = write_template(folder)
        typer.echo(f"Template written: {', '.join(str(p) for p in written)}")
        typer.echo("Edit the files, then run: blendq check " + str(folder))
        _echo_cautions()

    _guard(body)


#: `blendq check` in text mode prints at most this many findings of each rule, then the count
#: of the rest (--json lists every finding); a readable screen, common practice
CHECK_SHOWN_PER_RULE = 20


@app.command("check")
def check_cmd(
    project: ProjectArg,
    fail_on: Annotated[str, typer.Option("--fail-on", metavar="SEVERITY", help="Exit 1 when a finding at or above this severity exists: error, warning or info.")] = "error",
    as_json: JsonOpt = False,
) -> None:
    """Read a project, check every input and review the lab and field results."""

    def body():
        from blendq.review import findings as qa

        if fail_on not in ("error", "warning", "info"):
            raise typer.BadParameter(f'"{fail_on}" is not error, warning or info', param_hint="--fail-on")
        from blendq.chemistry.limits import catalogue_gaps, limit_notes
        from blendq.well import memory as crossflow

        proj = _load(project)
        mem, stored = crossflow.review_memory(proj)
        result = qa.review(proj, memory=mem)
        memory_line = ("" if stored is None else "crossflow memory (zone properties): "
                       + crossflow.stored_line(stored, None, _units(None, proj)))
        sets = proj.settings.limit_sets
        if as_json:
            payload = json.loads(result.to_json())
            if memory_line:
                payload["crossflow_memory"] = memory_line
            payload["limits"] = [lim.as_dict() for lim in proj.limits]
            payload["limits_not_in_catalogue"] = [
                g.as_dict() for g in catalogue_gaps(sets, proj.analytes())
                if not any(lim.authority == g.authority and lim.analyte == g.analyte
                           for lim in proj.limits)]
            payload["cautions"] = cautions_for(*result.findings["message"].astype(str))
            payload["notes"] = data_notes(proj)
            typer.echo(json.dumps(payload, indent=2))
        else:
            typer.echo(f"{proj.name}: {len(proj.zones)} zones, {len(proj.steps)} steps, "
                       f"{len(proj.samples)} lab results, "
                       f"{proj.flowlogs['log'].nunique() if len(proj.flowlogs) else 0} flow logs.")
            for line in result.summary_lines():
                typer.echo("  " + line)
            shown = result.findings[result.findings["severity"] != "info"]
            per_rule: dict[str, int] = {}
            for severity, rule, message in zip(shown["severity"], shown["rule"],
                                               shown["message"], strict=True):
                per_rule[rule] = per_rule.get(rule, 0) + 1
                if per_rule[rule] <= CHECK_SHOWN_PER_RULE:
                    typer.echo(f"  [{severity}] {rule}: {message}")
            for rule, n in per_rule.items():
                if n > CHECK_SHOWN_PER_RULE:
                    typer.echo(f"  ... {rule}: {n - CHECK_SHOWN_PER_RULE:,} more not shown "
                               f"(first {CHECK_SHOWN_PER_RULE} of {n:,}; --json lists all)")
            for rule, why in result.skipped:
                typer.echo(f"  skipped {rule}: {why}")
            if memory_line:
                typer.echo("  " + memory_line)
            for line in result.decision_lines():
                typer.echo(f"  review decision: {line}")
            for line in [*limit_notes(proj.limits, sets, proj.analytes()), *data_notes(proj)]:
                typer.echo(f"  {line}")
            _echo_cautions(*result.findings["message"].astype(str))
        if qa.at_or_above(result.findings, fail_on):
            raise typer.Exit(1)

    _guard(body)


@app.command("inflow")
def inflow_cmd(
    project: ProjectArg,
    rates: Annotated[str, typer.Option("--rates", metavar="RATES", help='Comma-separated rates with a unit, e.g. "100,300,500 gpm".')] = "",
    units: UnitsOpt = None,
    as_json: JsonOpt = False,
) -> None:
    """Each zone's flow and share of the discharge, and the pumping level, at given rates,
    from the zone properties alone (no fitting)."""

    def body():
        from blendq.errors import InputError
        from blendq.units import DISPLAY_UNITS, from_base, parse_quantity
        from blendq.well.inflow import inflow_table

        proj = _load(project)
        u = _units(units, proj)
        if rates.strip():
            text = rates.strip()
            parts = text.replace(";", ",").split(",")
            unit = parts[-1].strip().split(maxsplit=1)[1] if len(parts[-1].strip().split()) > 1 else None
            if unit is None:
                raise InputError('give the unit after the last rate, e.g. "100,300,500 gpm"',
                                 field="--rates")
            values = [p.strip().split()[0] for p in parts]
            q = [parse_quantity(f"{v} {unit}", "rate") for v in values]
        else:
            q = list(proj.steps["rate"].astype(float)) if len(proj.steps) else []
        if not q:
            raise InputError("no rates: give --rates or a steps table", field="--rates")
        table = inflow_table(proj, q)
        du = DISPLAY_UNITS[u]
        table["rate"] = from_base(table["rate"].to_numpy(), "rate", du["rate"])
        table["zone_flow"] = from_base(table["zone_flow"].to_numpy(), "rate", du["rate"])
        table["pumping_level"] = from_base(table["pumping_level"].to_numpy(), "length", du["length"])
        if as_json:
            typer.echo(json.dumps({"units": {"rate": du["rate"], "depth": du["length"]},
                                   "rows": table.to_dict(orient="records"),
                                   "cautions": cautions_for()}, indent=2))
            return
        from rich.console import Console
        from rich.markup import escape
        from rich.table import Table

        from blendq.units import display_unit_label

        t = Table(title=escape(f"{proj.well.name}: zone inflow from zone properties"))

        ru, lu = display_unit_label(du["rate"]), display_unit_label(du["length"])
        for col in (f"rate [{ru}]", "zone", f"zone flow [{ru}]", "share",
                    f"pumping level [{lu} depth]", "note"):
            t.add_column(escape(col), overflow="fold")  # "[m³/d]" is not rich markup
        for _, r in table.iterrows():
            note = "takes water from the well" if r["zone_flow"] < 0 else ""
            if r["dewatered"]:
                note = (note + "; " if note else "") + (
                    "water cascades: pumping level below zone top" if r["cascading"]
                    else "pumping level below zone top")
            t.add_row(f"{r['rate']:.4g}", escape(str(r["zone"])), f"{r['zone_flow']:.3g}",
                      f"{r['share']:.1%}", f"{r['pumping_level']:.4g}", note)
        Console().print(t)
        _echo_cautions()

    _guard(body)


@app.command("drawdown")
def drawdown_cmd(project: ProjectArg, units: UnitsOpt = None, as_json: JsonOpt = False,
                 chart: Annotated[Path | None, typer.Option(
                     "--chart", help="Also write the chart of s/Q against Q with the fitted "
                                     "line to this PNG file.")] = None) -> None:
    """Step-drawdown analysis: well loss, specific capacity, efficiency and well condition."""

    def body():
        from blendq.decide.levelcheck import static_level_of
        from blendq.errors import InputError
        from blendq.well.steptest import analyse_step_test

        proj = _load(project)
        u = _units(units, proj)
        static = static_level_of(proj)
        if static is None:
            raise InputError("the step-drawdown analysis needs the well's static level (or "
                             "every zone's static level with zone properties that give their "
                             "conductances)", file="project.toml", field="well.static_level")
        zone_s = [z.storativity for z in proj.zones]
        res = analyse_step_test(proj.steps, static,
                                proj.levels if len(proj.levels) else None,
                                steps_file=proj.files.get("steps", "steps.csv"),
                                levels_file=proj.files.get("levels", "levels.csv"),
                                well_radius=proj.well.well_radius,
                                storativity=(sum(zone_s) if zone_s and None not in zone_s
                                             else None))
        if chart is not None:
            from blendq.report.charts.stepdrawdown import specific_drawdown_chart

            specific_drawdown_chart(res, u).savefig(chart, dpi=150)
        lines = res.summary_lines(u)
        if as_json:
            from blendq.report.outputs import to_json_stable

            typer.echo(to_json_stable({**res.to_json_dict(), "cautions": cautions_for(*lines)}))
            return
        for line in lines:
            typer.echo(line)
        if chart is not None:
            typer.echo(f"  chart of s/Q against Q: {chart}")
        _echo_cautions(*lines)

    _guard(body)


@app.command("fit")
def fit_cmd(project: ProjectArg, units: UnitsOpt = None, draws: DrawsOpt = None,
            seed: SeedOpt = None, as_json: JsonOpt = False,
            samples: Annotated[str, typer.Option("--flagged", metavar="MODE", help="Use of samples the review flags and no [[review]] decision covers: keep, exclude or downweight.")] = "keep",
            by_step: Annotated[bool, typer.Option("--by-step/--no-by-step", help="Also find the window without each step's samples (one more analysis per step).")] = True,
            ) -> None:
    """Fit each zone's water quality (and the zone hydraulics) and print the zone table."""

    def body():
        from blendq.api import load_project, to_json
        from blendq.decide.analysis import leave_one_step_out

        proj = load_project(project)
        u = _units(units, proj)  # concentrations print in each analyte's unit
        result = _analyse(proj, draws, seed, u, samples)
        a = result.analysis  # the JSON holds the pipeline's tables in base units
        steps = leave_one_step_out(result.analysis) if by_step else None
        if as_json:
            typer.echo(to_json({"zones": a.zones.to_dict(orient="records"),
                                "sample_mode": a.sample_mode,
                                "sample_use": a.sample_use.to_dict(orient="records"),
                                "review_decisions": a.decisions.to_dict(orient="records"),
                                "hydraulics": a.hydraulics.to_dict(orient="records"),
                                "diagnostics": a.analyte_diagnostics.to_dict(orient="records"),
                                **({"leave_one_step_out": steps.to_dict(orient="records")}
                                   if steps is not None else {}),
                                **({"crossflow_memory": _memory_lines(a, u)}
                                   if a.memory is not None else {}),
                                "units": "mg/L canonical basis; m2/d; m; m3/d",
                                "cautions": cautions_for(*result.notes)}))
            return
        from rich.console import Console
        from rich.markup import escape
        from rich.table import Table

        t = Table(title=escape(f"{proj.well.name}: zone water quality"))
        df = result.text_table("zones")
        for col in df.columns:
            t.add_column(escape(str(col)))
        for _, r in df.iterrows():
            t.add_row(*[escape(str(v)) for v in r])
        Console().print(t)
        use = a.sample_use
        flagged = use[use["reason"].astype(str) != ""]
        typer.echo(f"Samples in the fit ({a.sample_mode}): {int(use['used'].sum())} of "
                   f"{len(use)} used; {len(flagged)} flagged by the review"
                   + (f" ({', '.join(flagged['sample_id'].astype(str))})" if len(flagged) else "")
                   + ".")
        for line in a.qa.decision_lines():
            typer.echo(f"Review decision: {line}")
        for note in result.notes:
            typer.echo("Note: " + note)
        for line in _memory_lines(a, u):
            typer.echo("Crossflow memory: " + line)
        if steps is not None:
            for line in _step_table_lines(steps, u):
                typer.echo(line)
        _echo_cautions(*result.notes)

    _guard(body)


def _memory_lines(a, units: str) -> list[str]:
    """The crossflow-memory lines of an analysis (stored water, flagged step samples, the
    first-flush advice); none without an idle time."""
    from blendq.well.memory import memory_lines

    if a.memory is None:
        return []
    return memory_lines(a.memory, float(a.qa.options["returned_water_flag"]), units,
                        only_flagged=True)


@app.command("window")
def window_cmd(project: ProjectArg, units: UnitsOpt = None, draws: DrawsOpt = None,
               seed: SeedOpt = None, as_json: JsonOpt = False,
               by_step: Annotated[bool, typer.Option("--by-step/--no-by-step", help="Also find the window without each step's samples (one more analysis per step).")] = True,
               ) -> None:
    """Find the rates at which the discharge meets every limit with the margin."""

    def body():
        from blendq.api import load_project, to_json
        from blendq.decide.analysis import failure_drivers, leave_one_step_out

        proj = load_project(project)
        u = _units(units, proj)
        result = _analyse(proj, draws, seed, u)
        drivers = failure_drivers(result.analysis, u)
        steps = leave_one_step_out(result.analysis) if by_step else None
        if as_json:
            summary = result.summary()
            summary["failure_drivers"] = drivers
            summary["notes"] = data_notes(proj)
            if steps is not None:
                summary["leave_one_step_out"] = steps.to_dict(orient="records")
            typer.echo(to_json(summary))
            return
        typer.echo(result.decision)
        df = result.text_table("window")
        for _, r in df.iterrows():
            typer.echo(f"  {r['From']} to {r['To']}: lower end set by {r['Lower end set by']}; "
                       f"upper end set by {r['Upper end set by']}")
        if not result.analysis.window.empty:  # an empty window's sentence names them
            for line in drivers:
                typer.echo(f"  {line}")
        from blendq.decide.sweep import compliance_statistics

        for st in compliance_statistics(result.analysis.project, result.analysis.limits).values():
            typer.echo(f"  judged: {st.describe()}")
        for line in result.analysis.qa.decision_lines():
            typer.echo(f"  review decision: {line}")
        for line in data_notes(proj):
            typer.echo(f"  {line}")
        if steps is not None:
            for line in _step_table_lines(steps, u):
                typer.echo(line)
        _echo_cautions(result.decision)

    _guard(body)


@app.command("history")
def history_cmd(project: ProjectArg, units: UnitsOpt = None, draws: DrawsOpt = None,
                seed: SeedOpt = None, as_json: JsonOpt = False) -> None:
    """The monitoring history: each analyte's time model beside the Mann-Kendall test, the
    operating window year by year, results outside their bands, monitoring triggers."""

    def body():
        from blendq.api import load_project, to_json

        proj = load_project(project)
        u = _units(units, proj)
        if proj.history.empty:
            _fail("the project has no monitoring history (add a history table to [tables])")
        result = _analyse(proj, draws, seed, u)
        fc = result.forecast()
        if fc is None:
            _fail("no analyte with a limit has enough usable history results for a time model")
        if as_json:
            typer.echo(to_json({
                "units": {"rate": "m3/d", "concentration": "mg/L canonical basis"},
                "models": result.history_models().to_dict(orient="records"),
                "years": [int(y) for y in fc.years],
                "rates_m3_per_day": fc.rates.tolist(),
                "compliant": fc.ok.tolist(),
                "last_compliant_year": [None if not v == v else int(v) for v in fc.last_year],
                "rate_compliant_longest_m3_per_day": fc.best_rate,
                "sentences": fc.sentences, "triggers": fc.triggers, "notes": fc.notes,
                "outside_band": fc.check[fc.check["outside"]].assign(
                    sampled_at=lambda d: d["sampled_at"].astype(str)).to_dict(orient="records"),
                "trend_tests": fc.trend_tests.to_dict(orient="records"),
                "cautions": cautions_for()}))
            return
        for _, r in result.history_models().iterrows():
            cells = "; ".join(f"{k}: {v}" for k, v in r.items() if k != "Analyte")
            typer.echo(f"{r['Analyte']}: {cells}")
        for tf in result.analysis.history.values():
            for note in tf.notes:
                typer.echo(f"  note: {note}")
        for line in fc.sentences + fc.notes:
            typer.echo(line)
        out = fc.check[fc.check["outside"]]
        interval = proj.settings.interval
        typer.echo(f"Predictive check: {len(out)} of {len(fc.check)} results outside their "
                   f"{interval:.0%} band (about {1 - interval:.0%} expected by chance).")
        for (analyte, why), rows in out.groupby(["analyte", "suggests"], sort=False):
            dates = ", ".join(f"{t:%Y-%m-%d} (row {n})"
                              for t, n in zip(rows["sampled_at"], rows["source_row"],
                                              strict=True))
            typer.echo(f"  {analyte}, {why}: {dates}")
        for line in fc.triggers:
            typer.echo(line)
        _echo_cautions()

    _guard(body)


def _with_options(proj, seal, redevelop, intake, lower_heads, blend, units, new_pump=None):
    """The project with the command line's options added to its [[scenarios]] (checked now,
    before the long run, with messages naming the option)."""
    from dataclasses import replace

    from blendq.api import build_scenarios, option_entries

    build_scenarios(proj, seal, redevelop, intake, blend, lower_heads=lower_heads,
                    new_pump=new_pump, units=units, file="command line", option_prefix="--")
    extra = [raw for _, raw in option_entries(proj, seal, redevelop, intake, blend, lower_heads,
                                              new_pump=new_pump, units=units,
                                              file="command line", option_prefix="--")]
    return replace(proj, scenarios=[*proj.scenarios, *extra]) if extra else proj


def _write_report(proj, out: Path, units: str, draws, seed) -> None:
    from blendq.api import check_report_folder
    from blendq.errors import InputError

    try:  # refuse a bad folder before the long run, not after
        check_report_folder(out, proj)
    except InputError as err:  # the option is at fault, not the input file it would replace
        message = err.message.replace("this input file", f"the input file {err.file}") \
            if err.file else err.message
        raise InputError(message, field="--out") from None
    result = _analyse(proj, draws, seed, units)
    folder = result.write_report(out)
    typer.echo(result.decision)
    typer.echo(f"Report written to {folder / 'report.html'} and {folder / 'report.pdf'}")
    _echo_cautions(result.decision, *(str(s.get("name", "")) for s in proj.scenarios))


@app.command("pump")
def pump_cmd(project: ProjectArg, units: UnitsOpt = None, draws: DrawsOpt = None,
             seed: SeedOpt = None, as_json: JsonOpt = False) -> None:
    """Turn the operating window into drive settings: rate, frequency, power and energy."""

    def body():
        from blendq.api import load_project, pump_settings, to_json
        from blendq.errors import InputError
        from blendq.inputs.pump_file import read_pump

        proj = load_project(project)
        if read_pump(project) is None:  # a missing or bad [pump] fails before the fit
            raise InputError("has no [pump] table; add one to set the pump "
                             "(blendq docs input-files)", file="project.toml", field="pump")
        u = _units(units, proj)
        plan = pump_settings(_analyse(proj, draws, seed, u), units=u)
        lines = plan.lines()
        if as_json:
            typer.echo(to_json({"lines": lines,
                                "seasons": plan.season_table().to_dict(orient="records"),
                                "energy": plan.energy_table().to_dict(orient="records"),
                                "cautions": cautions_for(*lines)}))
            return
        for line in lines:
            typer.echo(line)
        for table in (plan.season_table(), plan.energy_table()):
            if not table.empty:
                typer.echo(table.to_string(index=False))
        _echo_cautions(*lines)

    _guard(body)


@app.command("compare")
def compare_cmd(
    project: ProjectArg,
    seal: SealOpt = None, redevelop: RedevelopOpt = None, intake: IntakeOpt = None,
    lower_heads: LowerHeadsOpt = None, blend: BlendOpt = None, new_pump: NewPumpOpt = None,
    units: UnitsOpt = None, draws: DrawsOpt = None, seed: SeedOpt = None,
    as_json: JsonOpt = False,
) -> None:
    """Compare options (seal a zone, redevelop, move the intake, lower the heads, blend, a new
    pump) with the base case: the project's [[scenarios]] plus any given here, all with the
    same Monte Carlo draws. The same options given to `blendq report` enter the report."""

    def body():
        from blendq.api import load_project, to_json

        proj = load_project(project)
        u = _units(units, proj)
        proj = _with_options(proj, seal, redevelop, intake, lower_heads, blend, u, new_pump)
        result = _analyse(proj, draws, seed, u)
        comp = result.compare()
        names = [str(s.get("name", "")) for s in proj.scenarios]
        if as_json:
            typer.echo(to_json({
                "units": {"rate": "m3/d", "concentration": "mg/L canonical basis"},
                "comparison": comp.comparison.table.to_dict(orient="records"),
                "cautions": cautions_for(*names)}))
            return
        df = comp.text_table()
        band = f"{proj.settings.interval:.0%} band"
        for _, r in df.iterrows():
            typer.echo(f"{r['Option']} ({r['Changes']})")
            typer.echo(f"  window {r['Operating window']}; recommended {r['Recommended']}; "
                       f"delivered {r['Delivered']}; pumping-level yield {r['Pumping-level yield']}")
            quality = [f"{c[:-len(' median')]} {r[c]} ({band} {r[c[:-len('median')] + band]})"
                       for c in df.columns if c.endswith(" median") and r[c] != "-"]
            if quality:
                typer.echo("  at the recommended rate: " + "; ".join(quality))
            if r["What would tell"]:
                typer.echo(f"  {r['Window limited by']}")
                typer.echo(f"  what would tell: {r['What would tell']}")
            else:
                typer.echo(f"  window limited by: {r['Window limited by']}")
            if r.get("Drive setting", "-") != "-":
                typer.echo(f"  pump: drive {r['Drive setting']}; delivers {r['Pump delivers']}; "
                           f"energy at setting {r['Energy at setting']}")
        typer.echo(comp.widest)
        for line in comp.pump_lines():
            typer.echo(line)
        _echo_cautions(*names)

    _guard(body)


@app.command("report")
def report_cmd(project: ProjectArg,
               out: Annotated[Path, typer.Option("--out", "-o", metavar="FOLDER", help="Output folder (replaced as a whole).")] = Path("blendq-out"),
               units: UnitsOpt = None, draws: DrawsOpt = None, seed: SeedOpt = None,
               seal: SealOpt = None, redevelop: RedevelopOpt = None, intake: IntakeOpt = None,
               lower_heads: LowerHeadsOpt = None, blend: BlendOpt = None,
               new_pump: NewPumpOpt = None) -> None:
    """Run the whole analysis and write the report (HTML, PDF), tables (CSV) and a JSON
    summary. Options given here (as to `blendq compare`) join the project's [[scenarios]]."""

    def body():
        from blendq.api import load_project

        proj = load_project(project)
        u = _units(units, proj)
        proj = _with_options(proj, seal, redevelop, intake, lower_heads, blend, u, new_pump)
        _write_report(proj, out, u, draws, seed)

    _guard(body)


def _batch_progress():
    """A rich progress bar on stderr for the wells of a wellfield; returns (callback, context)."""
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    prog = Progress(TextColumn("wells analysed"), BarColumn(),
                    TextColumn("{task.completed}/{task.total} {task.description}"),
                    TimeElapsedColumn(), console=Console(stderr=True), transient=True,
                    disable=not sys.stderr.isatty())
    task = prog.add_task("", total=1)

    def callback(done: int, total: int, name: str) -> None:
        prog.update(task, completed=done, total=total, description=f"(last: {name})")

    return callback, prog


@app.command("wellfield")
def wellfield_cmd(
    file: Annotated[Path, typer.Argument(metavar="FILE", help="Wellfield file (wellfield.toml) or its folder.")],
    workers: Annotated[int | None, typer.Option("--workers", "-w", metavar="N", help="Local worker processes (default: one per core; 1 runs in this process).")] = None,
    scheduler: Annotated[str | None, typer.Option("--scheduler", metavar="ADDRESS", help='Run the wells on this Dask scheduler, e.g. "tcp://10.0.0.5:8786" (needs blendq[wellfield]).')] = None,
    out: Annotated[Path | None, typer.Option("--out", "-o", metavar="FOLDER", help="Write the table (CSV), the chart (PNG, SVG) and the text to this folder (replaced as a whole).")] = None,
    units: UnitsOpt = None, draws: DrawsOpt = None, seed: SeedOpt = None,
    plan_draws: Annotated[int | None, typer.Option("--plan-draws", metavar="N", help="Draws of each well kept in the blending plan's program (default 200; at most the wells' draws); the plan is checked against all of them. Fewer solve sooner.")] = None,
) -> None:
    """Analyse every well of a wellfield (one project per well) and print the wellfield table:
    each well's window, recommended rate, limiting factor, trend and data gaps. A well that
    fails reports its error; the others go on. Then the blending plan (rates per well meeting
    each entry point's demand under margin x limit), or what would open one (with the well
    modifications from the wells' scenarios that would), and the N-1 outages."""

    def body():
        from blendq.api import analyse_wellfield
        from blendq.errors import InputError
        from blendq.inputs.wellfield_file import read_wellfield
        from blendq.report.outputs import check_output_folder

        if workers is not None and workers < 1:
            raise typer.BadParameter(f"{workers} is not 1 or more", param_hint="--workers")
        if plan_draws is not None and plan_draws < 1:
            raise typer.BadParameter(f"{plan_draws} is not 1 or more", param_hint="--plan-draws")
        if plan_draws is not None and draws is not None and plan_draws > draws:
            raise typer.BadParameter(f"{plan_draws} is more than the wells' draws ({draws}, "
                                     "--draws)", param_hint="--plan-draws")
        u = _units(units) if units else None
        wf = read_wellfield(file)  # a bad file or output folder fails before the long run
        if out is not None:
            try:
                check_output_folder(out, [wf.path, *(w.project for w in wf.wells)])
            except InputError as err:
                raise InputError(err.message if not err.file else err.message.replace(
                    "this input file", f"the input file {err.file}"), field="--out") from None
        callback, prog = _batch_progress()
        with prog:
            result = analyse_wellfield(file, workers=workers, scheduler=scheduler, seed=seed,
                                       draws=draws, units=u, keep_analyses=False,
                                       progress=callback, plan_draws=plan_draws)
        have = [s.concentration.shape[0] for s in result.summaries.values()]
        if plan_draws is not None and have and plan_draws > min(have):
            raise typer.BadParameter(f"{plan_draws} is more than the wells' draws ({min(have)}, "
                                     "their projects' setting)", param_hint="--plan-draws")
        for line in result.lines()[:-1]:
            typer.echo(line)
        if out is not None:
            folder = result.write(out)
            typer.echo(f"Wellfield table, blending plan, N-1 table and chart written to "
                       f"{folder / 'wellfield.csv'}, {folder / 'plan.csv'}, "
                       f"{folder / 'n_minus_1.csv'} and {folder / 'wellfield.png'}")
        _echo_cautions()

    _guard(body)


@app.command("demo")
def demo_cmd(out: Annotated[Path, typer.Option("--out", "-o", metavar="FOLDER", help="Output folder.")] = Path("blendq-demo"),
             units: UnitsOpt = None, draws: DrawsOpt = None, seed: SeedOpt = None) -> None:
    """Run the whole analysis on the invented demo well (TH-2) and write its report."""

    def body():
        from blendq.api import demo_path, load_project

        proj = load_project(demo_path())
        _write_report(proj, out, _units(units, proj), draws, seed)

    _guard(body)


@app.command("plan")
def plan_cmd(project: ProjectArg,
             budget: Annotated[float | None, typer.Option("--budget", metavar="COST", help="Largest cost of the test, in the currency of the [plan] unit costs (default: [plan] budget).")] = None,
             out: Annotated[Path | None, typer.Option("--out", "-o", metavar="FOLDER", help="Also write the field sheet (PDF, CSV) and the plan to this folder.")] = None,
             units: UnitsOpt = None, as_json: JsonOpt = False) -> None:
    """Plan the step test before the field day (a project with a [plan] table and no test
    data), or the next measurement after a test: expected spread of the window's ends, zones
    left unresolved, the value of each step, log and depth sample."""

    def body():
        from blendq.api import plan_test, to_json

        result = plan_test(project, budget=budget, units=_units(units) if units else None)
        folder = result.write(out) if out is not None else None
        if as_json:
            typer.echo(to_json({"plan": result.lines,
                                "field_sheet": result.field_sheet.to_dict(orient="records"),
                                "candidates": result.candidates.to_dict(orient="records"),
                                "units": result.field_sheet.attrs["units"],
                                "cautions": cautions_for()}))
            return
        for line in result.lines:
            typer.echo(line)
        if folder is not None:
            typer.echo(f"Field sheet written to {folder / 'fieldsheet.pdf'} and "
                       f"{folder / 'fieldsheet.csv'}")
        _echo_cautions()

    _guard(body)


class _Stopped(BaseException):
    """Raised by the handler of SIGTERM or SIGHUP, so that every ``finally`` and the output
    writer's clean-up run before the process ends (the default action ends it at once)."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def _stop(signum: int, frame) -> None:
    raise _Stopped(signum)


#: reference pages installed with the package (copies of docs/<topic>.md; a test keeps them equal)
DOCS_FOLDER = ("data", "docs")


def doc_topics() -> dict[str, object]:
    """Topic -> installed reference page (an importlib.resources Traversable)."""
    from importlib import resources

    folder = resources.files("blendq").joinpath(*DOCS_FOLDER)
    return {p.name[:-3]: p for p in sorted(folder.iterdir(), key=lambda p: p.name)
            if p.name.endswith(".md")}


@app.command("docs")
def docs_cmd(topic: Annotated[str | None, typer.Argument(
        metavar="TOPIC", help="A reference page; leave out to list them.")] = None) -> None:
    """Print a reference page installed with blendq (the project file's format, the options)."""

    def body():
        topics = doc_topics()
        if topic is None:
            typer.echo("Reference pages (blendq docs TOPIC): " + ", ".join(topics))
        elif topic not in topics:
            raise typer.BadParameter(f'"{topic}" is not a reference page (pages: '
                                     f'{", ".join(topics)})', param_hint="TOPIC")
        else:
            typer.echo(topics[topic].read_text(encoding="utf-8").rstrip("\n"))
        _echo_cautions()

    _guard(body)


def main() -> None:
    """Console-script entry point.

    SIGTERM and SIGHUP end a command as an error would: nothing half-written is left (see
    :func:`blendq.report.outputs.write_outputs`), one line on stderr, exit code 128 + the
    signal number (the shell's convention).
    """
    import signal

    if hasattr(signal, "SIGPIPE"):  # `blendq ... | head`: stop quietly when the reader goes
        signal.signal(signal.SIGPIPE, signal.SIG_DFL)
    from blendq.report.outputs import hold_aware

    for name in ("SIGTERM", "SIGHUP"):
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), hold_aware(_stop))
    if signal.getsignal(signal.SIGINT) is signal.default_int_handler:  # Ctrl-C waits too
        signal.signal(signal.SIGINT, hold_aware(signal.default_int_handler))
    try:
        app()
    except _Stopped as stop:
        name = signal.Signals(stop.signum).name
        typer.echo(f"blendq: stopped by {name}; no partial output was left", err=True)
        raise SystemExit(128 + stop.signum) from None
