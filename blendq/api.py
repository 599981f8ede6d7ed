"""The public Python API of blendq: load a project, analyse it, and read the results in the
project's display units.

::

    import blendq as bq

    project = bq.load_project("my-well")            # a folder or its project.toml
    result = bq.analyse(project, draws=1000, seed=1)
    result.window                                   # the operating window, in display units
    result.zones                                    # zone water quality (DataFrame)
    result.predict("200, 400 gpm")                  # discharge quality at given rates
    result.compare(seal="Upper sand")               # options side by side
    result.write_report("out")                      # the report folder of `blendq report`
    result.plot.quality()                           # a matplotlib Figure

:class:`Result` is a thin holder over the pipeline's plain
:class:`~blendq.decide.analysis.Analysis` (base units throughout; ``result.analysis``): it
converts tables to the display units ("US": gpm, ft; "SI": m^3/d, m) at the edge and calls the
same functions as the command line and the report, never a second implementation. The command
line (:mod:`blendq.cli`) is built on this module. See ``docs/api.md``.

This module sits at the top of the package beside the command line and may import every
package below it; ``import blendq`` loads it only when one of its names is asked for.
"""

from __future__ import annotations

import html
import os
import re
import textwrap
from collections.abc import Callable, Iterable, Sequence
from functools import cached_property
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from blendq import CAUTIONS, __version__
from blendq.chemistry.analytes import get_analyte
from blendq.decide import analysis as _pipeline
from blendq.decide import scenarios as _scenarios
from blendq.decide import sweep as _sweep
from blendq.errors import InputError, ModelError
from blendq.inputs.loader import load_project
from blendq.inputs.project import Project
from blendq.report import assemble as _assemble
from blendq.report import outputs as _outputs
from blendq.report import scenario_section as _scenario_section
from blendq.units import (
    DISPLAY_UNITS,
    format_quantity,
    from_base,
    parse_quantity,
    to_base,
    unit_system,
)

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = [
    "CAUTIONS",
    "ComparisonResult",
    "OperatingWindow",
    "Plots",
    "PumpPlan",
    "Result",
    "StepTestPlan",
    "WellfieldPlots",
    "WellfieldResult",
    "analyse",
    "analyse_wellfield",
    "build_scenarios",
    "check_report_folder",
    "demo_path",
    "load_project",
    "option_entries",
    "parse_rates",
    "plan_test",
    "pump_settings",
    "to_json",
]

#: characters of a printed line in the text summaries
_WIDTH = 96


# ------------------------------------------------------------------------------ helpers
def _unit_system(units: str) -> str:
    """``"US"``, ``"SI"`` or ``"SI-L/s"`` from any capitalisation; InputError otherwise."""
    return unit_system(units)


def _unit_label(unit: str) -> str:
    """A unit expression as it is typed: ``m**3/d`` -> ``m3/d``, ``gallon`` -> ``gal``."""
    return unit.replace("**", "").replace("gallon", "gal")


def _concentration_unit(analyte: str) -> str:
    """The display unit of an analyte's concentrations with its basis (``"mg/L as N"``)."""
    an = get_analyte(analyte)
    basis = f" as {an.canonical_basis}" if an.canonical_basis and len(an.bases) > 1 else ""
    return an.display_unit + basis


def _short_caution() -> str:
    return "Caution: " + " ".join(CAUTIONS[:2])


def _wrap(text: str, first: str = "") -> list[str]:
    """``text`` in lines of :data:`_WIDTH`, the first starting with ``first``, the others
    indented two spaces more than its leading spaces."""
    rest = " " * (len(first) - len(first.lstrip()) + 2)
    return textwrap.wrap(text, _WIDTH, initial_indent=first, subsequent_indent=rest)


def _html_cautions() -> str:
    items = "".join(f"<li>{html.escape(c)}</li>" for c in CAUTIONS)
    return f"<p><b>Cautions</b></p><ul>{items}</ul>"


def _html_rows(rows: Iterable[tuple[str, str]]) -> str:
    body = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
                   f"<td style='text-align:left'>{html.escape(v)}</td></tr>" for k, v in rows)
    return f"<table>{body}</table>"


def _is_quantity(value: Any) -> bool:
    return hasattr(value, "magnitude") and hasattr(value, "units")


def _quantity_text(value: Any) -> str:
    """A pint Quantity as text that :func:`blendq.units.parse_quantity` reads ("140 ft")."""
    return f"{float(value.magnitude):g} {value.units:~}"


def demo_path() -> Path:
    """Folder of the invented demo project shipped with blendq (well TH-2).

    Returns
    -------
    pathlib.Path
        ``blendq/data/demo`` inside the installed package.
    """
    return Path(str(resources.files("blendq") / "data" / "demo"))


def to_json(obj: Any) -> str:
    """JSON text that is byte-identical for equal inputs (sorted keys, NaN as null).

    Parameters
    ----------
    obj : Any
        Dicts, lists, numbers, strings, numpy arrays, DataFrames (see
        :func:`blendq.report.outputs.to_json_stable`).

    Returns
    -------
    str
    """
    return _outputs.to_json_stable(obj)


_NUMBER_UNIT = re.compile(r"^\s*[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\s*(.*?)\s*$")


def parse_rates(rates: Any, units: str = "US") -> np.ndarray:
    """Pumping rates from numbers, pint Quantities or text, in base units.

    Parameters
    ----------
    rates : float, str, pint.Quantity or sequence of these
        Numbers are read in the display rate unit of ``units`` (gpm for "US", m^3/d for
        "SI"). Text gives the unit: ``"450 gpm"``, ``"30 L/s"``, or a list such as
        ``"200, 400 gpm"`` (comma or semicolon between rates; a rate without a unit takes the
        unit of the last rate). Write numbers without thousands separators.
    units : {"US", "SI"}
        Unit system of bare numbers.

    Returns
    -------
    ndarray (n_rates,)
        Rates [m^3/d].

    Raises
    ------
    InputError
        For text that is not a rate, a unit that is not a rate unit, or a rate below zero or
        not finite (field ``rates``).
    """
    unit = DISPLAY_UNITS[_unit_system(units)]["rate"]
    out: list[float] = []

    def add(item: Any) -> None:
        if isinstance(item, bool) or item is None:
            raise InputError(f"{item!r} is not a rate", field="rates")
        if _is_quantity(item):
            magnitudes = np.atleast_1d(np.asarray(item.magnitude, float))
            factor = to_base(1.0, f"{item.units}", "rate")  # rate units have no offset
            out.extend(float(m) * factor for m in magnitudes)
        elif isinstance(item, str):
            parts = [p for p in re.split(r"[,;]", item) if p.strip()]
            if not parts:
                raise InputError(f'"{item}" holds no rate', field="rates")
            last = _NUMBER_UNIT.match(parts[-1])
            default = last.group(1) if last and last.group(1) else unit
            out.extend(parse_quantity(p, "rate", default_unit=default) for p in parts)
        elif isinstance(item, (int, float, np.integer, np.floating)):
            out.append(parse_quantity(float(item), "rate", default_unit=unit))
        elif isinstance(item, (Sequence, np.ndarray, pd.Series, pd.Index)):
            for sub in item:
                add(sub)
        else:
            raise InputError(f"{item!r} is not a rate (give a number, a pint Quantity or text "
                             'such as "450 gpm")', field="rates")

    try:
        add(rates)
    except InputError as err:
        raise err.located(field="rates") from None
    values = np.asarray(out, float)
    if values.size == 0:
        raise InputError("no rate given", field="rates")
    bad = values[~np.isfinite(values) | (values < 0)]
    if bad.size:
        raise InputError("a pumping rate must be zero or above, got "
                         f"{format_quantity(bad[0], 'rate', _unit_system(units))}",
                         field="rates")
    return values


def check_report_folder(folder: str | os.PathLike[str], project: Project) -> None:
    """Raise :class:`InputError` now if :meth:`Result.write_report` would refuse ``folder``
    (a folder blendq did not write, or one holding the project's input files), so that a long
    analysis does not end in a refusal."""
    _outputs.check_output_folder(folder, _protected(project))


def _protected(project: Project) -> list[Path]:
    return [project.folder / f for f in project.files.values()] if project.folder else []


# ------------------------------------------------------------------------------ scenarios
def _as_list(value: Any) -> list:
    if value is None:
        return []
    if isinstance(value, (str, dict, int, float)) or _is_quantity(value):
        return [value]
    return list(value)


def _raw_redevelop(item: Any, file: str, key: str) -> dict:
    if isinstance(item, dict):
        kind = "skin" if "skin" in item else "factor"
        value = item.get(kind)
        shown = f"{value:g}" if isinstance(value, (int, float)) else f"{value}"
        return {"name": f"Redevelop {item.get('zone')} ({kind} {shown})", "redevelop": item}
    text = str(item)
    zone, sep, change = text.rpartition(":")
    kind, eq, value = change.partition("=")
    if not sep or not eq or kind.strip() not in ("skin", "factor"):
        raise InputError(f'"{text}" is not ZONE:skin=VALUE or ZONE:factor=VALUE', file=file,
                         field=key)
    try:
        number = float(value)
    except ValueError:
        raise InputError(f'"{value.strip()}" in "{text}" is not a number', file=file,
                         field=key) from None
    return {"name": f"Redevelop {zone.strip()} ({kind.strip()} {number:g})",
            "redevelop": {"zone": zone.strip(), kind.strip(): number}}


def _raw_blend(item: Any, file: str, key: str) -> dict:
    if isinstance(item, dict):
        entry = {k: (_quantity_text(v) if _is_quantity(v) else v) for k, v in item.items()}
        return {"name": f"Blend {entry.get('rate')}", "blend": entry}
    text = str(item)
    parts = [p.strip() for p in text.split(";") if p.strip()]
    if parts and "," in parts[0] and "=" in parts[0]:
        raise InputError(f'"{text}" separates its parts with commas; separate the rate and each '
                         'concentration with semicolons, e.g. "200 gpm; nitrate=2 mg/L as N; '
                         'arsenic=1 ug/L"', file=file, field=key)
    if not parts or "=" in parts[0]:
        raise InputError(f'"{text}" does not start with the blend rate (expected e.g. '
                         '"200 gpm; nitrate=2 mg/L as N; arsenic=1 ug/L")', file=file, field=key)
    entry: dict = {"rate": parts[0]}
    for p in parts[1:]:
        name, eq, value = p.partition("=")
        if not eq:
            raise InputError(f'"{p}" is not ANALYTE=CONCENTRATION', file=file, field=key)
        entry[name.strip()] = value.strip()
    return {"name": f"Blend {parts[0]}", "blend": entry}


def _length_text(item: Any, units: str) -> str:
    """A length given as a Quantity, a number in display units or text, as text with a unit."""
    if _is_quantity(item):
        return _quantity_text(item)
    if isinstance(item, (int, float)) and not isinstance(item, bool):
        return f"{item:g} {_unit_label(DISPLAY_UNITS[units]['length'])}"
    return item


def _raw_intake(item: Any, units: str) -> dict:
    text = _length_text(item, units)
    return {"name": f"Intake at {text}", "intake": text}


def _raw_lower_heads(item: Any, units: str) -> dict:
    text = _length_text(item, units)
    return {"name": f"Static heads {text} lower", "lower_heads": text}


#: keys of a new pump given as text whose values are plain numbers
_PUMP_NUMBERS = ("motor_efficiency", "drive_efficiency", "hazen_williams_c", "minor_loss_k")


def _raw_new_pump(item: Any, units: str, file: str, key: str) -> dict:
    """``"pump-b.csv; intake=150 ft; rated_speed=3550 rpm"`` or ``{"curve": ..., "intake":
    ...}`` as a ``[[scenarios]]`` entry; a curve path found from the current folder is made
    absolute (else it is read from the project's folder)."""
    if isinstance(item, (str, os.PathLike)):
        parts = [p.strip() for p in str(item).split(";") if p.strip()]
        if not parts or "=" in parts[0]:
            raise InputError(f'"{item}" does not start with the pump curve file (expected e.g. '
                             '"pump-b.csv; intake=150 ft; rated_speed=3550 rpm")', file=file,
                             field=key)
        table: dict = {"curve": parts[0]}
        for part in parts[1:]:
            name, eq, value = part.partition("=")
            if not eq:
                raise InputError(f'"{part}" is not KEY=VALUE', file=file, field=key)
            name, value = name.strip(), value.strip()
            if name in _PUMP_NUMBERS:
                try:
                    value = float(value)
                except ValueError:
                    raise InputError(f'{name} "{value}" is not a plain number', file=file,
                                     field=key) from None
            table[name] = value
    elif isinstance(item, dict):
        table = {k: (_quantity_text(v) if _is_quantity(v) else v) for k, v in item.items()}
    else:
        raise InputError(f"expected a curve file or a table with a curve, got {item!r}",
                         file=file, field=key)
    if not isinstance(table.get("curve"), (str, os.PathLike)):
        raise InputError("a new pump needs its curve file", file=file, field=key)
    curve = Path(table["curve"])
    table["curve"] = str(curve.resolve()) if curve.is_file() else str(curve)
    entry: dict = {"name": f"New pump {curve.name}"}
    intake = table.pop("intake", None)
    if intake is not None:
        text = _length_text(intake, units)
        entry["name"] += f", intake at {text}"
        entry["intake"] = text
    entry["pump"] = table
    return entry


def option_entries(project: Project, seal: Any = None, redevelop: Any = None,
                   intake: Any = None, blend: Any = None, lower_heads: Any = None, *,
                   new_pump: Any = None, units: str | None = None, file: str = "compare()",
                   option_prefix: str = "") -> list[tuple[str, dict]]:
    """One-change options as raw ``[[scenarios]]`` entries, each with the argument it came
    from (``("--seal", {"name": "Seal Upper sand", "seal": ["Upper sand"]})``).

    Adding the entries to ``project.scenarios`` makes the options part of the project, so that
    the report compares them too (``blendq report --seal ...``). Arguments as in
    :func:`build_scenarios`.
    """
    units = _unit_system(units or project.settings.display_units)
    raws: list[tuple[str, Any]] = []
    raws += [(option_prefix + "seal", {"name": f"Seal {zone}", "seal": [zone]})
             for zone in _as_list(seal)]
    key = option_prefix + "redevelop"
    raws += [(key, _raw_redevelop(item, file, key)) for item in _as_list(redevelop)]
    raws += [(option_prefix + "intake", _raw_intake(item, units)) for item in _as_list(intake)]
    key = option_prefix + "lower-heads" if option_prefix else "lower_heads"
    raws += [(key, _raw_lower_heads(item, units)) for item in _as_list(lower_heads)]
    key = option_prefix + "blend"
    raws += [(key, _raw_blend(item, file, key)) for item in _as_list(blend)]
    key = option_prefix + "new-pump" if option_prefix else "new_pump"
    pumps = [new_pump] if isinstance(new_pump, os.PathLike) else _as_list(new_pump)
    raws += [(key, _raw_new_pump(item, units, file, key)) for item in pumps]
    return raws


def build_scenarios(project: Project, seal: Any = None, redevelop: Any = None,
                    intake: Any = None, blend: Any = None, *, lower_heads: Any = None,
                    new_pump: Any = None,
                    scenarios: Sequence[dict | _scenarios.Scenario] | None = None,
                    include_project: bool = True, units: str | None = None,
                    file: str = "compare()", option_prefix: str = "",
                    ) -> list[_scenarios.Scenario]:
    """The options to compare with the base case, resolved against a project.

    Each ``seal``, ``redevelop``, ``intake`` and ``blend`` item is one option of its own;
    ``scenarios`` holds options that combine changes, written as a ``[[scenarios]]`` entry of
    project.toml (see ``docs/scenarios.md``).

    Parameters
    ----------
    project : Project
    seal : str or list of str, optional
        Zone names; one option seals each.
    redevelop : str, dict or list of these, optional
        ``"Lower gravel:skin=0"``, ``"Lower gravel:factor=2"`` or
        ``{"zone": "Lower gravel", "skin": 0}`` (new skin [-] or conductance factor [-]).
    intake : str, float, pint.Quantity or list of these, optional
        New pump intake depth below the datum: ``"140 ft"``, a Quantity, or a number in the
        display length unit (ft for "US", m for "SI").
    blend : str, dict or list of these, optional
        A second source: ``"200 gpm; nitrate=2 mg/L as N; arsenic=1 ug/L"`` or
        ``{"rate": "200 gpm", "nitrate": "2 mg/L as N", "arsenic": "1 ug/L"}``; every predicted
        analyte needs a concentration.
    lower_heads : str, float, pint.Quantity or list of these, optional
        Every static head lowered by this much (a drought): ``"10 ft"``, a Quantity, or a
        number in the display length unit.
    new_pump : str, Path, dict or list of these, optional
        A new pump: its curve file, then any ``[pump]`` key and an ``intake`` separated by
        semicolons, ``"pump-b.csv; intake=150 ft; rated_speed=3550 rpm"``, or a table
        ``{"curve": "pump-b.csv", "intake": "150 ft"}``. The curve is read from the current
        folder (else the project's); the keys not given are the project's ``[pump]`` ones
        (docs/scenarios.md).
    scenarios : list of dict or Scenario, optional
        Further options as raw ``[[scenarios]]`` entries (or already resolved).
    include_project : bool
        Start with the project's own ``[[scenarios]]``.
    units : {"US", "SI"}, optional
        Unit system of a bare intake number (default: the project's display units).
    file, option_prefix : str
        Where the options came from, for messages (the command line gives
        ``"command line"`` and ``"--"``).

    Returns
    -------
    list of Scenario
        In order: the project's, ``seal``, ``redevelop``, ``intake``, ``lower_heads``,
        ``blend``, ``new_pump``, ``scenarios``.

    Raises
    ------
    InputError
        For a bad option (naming it) or a name given twice.
    ModelError
        When an option seals every zone.
    """
    units = _unit_system(units or project.settings.display_units)
    out = _scenarios.project_scenarios(project) if include_project else []
    names = {s.name for s in out}
    raws = option_entries(project, seal, redevelop, intake, blend, lower_heads,
                          new_pump=new_pump, units=units, file=file,
                          option_prefix=option_prefix)
    predicted = _pipeline.fit_analytes(project)[0]
    # a one-change option is named by its argument alone; a [[scenarios]] entry keeps the key
    # inside it (scenarios[2].blend.rate) in messages
    entries = [(key, raw, True) for key, raw in raws]
    entries += [(f"{option_prefix}scenarios[{k}]", raw, False)
                for k, raw in enumerate(_as_list(scenarios), 1)]
    for k, (key, raw, by_argument) in enumerate(entries, 1):
        if isinstance(raw, _scenarios.Scenario):
            sc = raw
        else:
            try:
                sc = _scenarios.parse_scenario(raw, k, project, file=file, prefix=key)
            except InputError as err:
                if not by_argument:
                    raise
                raise InputError(err.message, file=file, field=key) from None
        missing = [a for a in predicted if sc.blend is not None
                   and a not in sc.blend.concentration]
        if missing:  # found now, not after the long run
            raise InputError(f'the blend of "{sc.name}" needs a concentration of '
                             f"{', '.join(missing)} (every analyte that is predicted)",
                             file=file, field=key if by_argument else f"{key}.blend")
        if sc.name in names:
            raise InputError(f'"{sc.name}" is given twice', file=file, field=key)
        names.add(sc.name)
        out.append(sc)
    return out


# ------------------------------------------------------------------------------ analysis
def analyse(project: Project | str | os.PathLike[str], draws: int | None = None,
            seed: int | None = None, *, sample_mode: str = "keep", units: str | None = None,
            progress: Callable[[int, int], None] | None = None) -> Result:
    """Run the whole analysis of a project: review, fit, uncertainty, sweep and window.

    Parameters
    ----------
    project : Project or path
        A loaded project (:func:`load_project`) or its folder / project.toml.
    draws : int, optional
        Posterior draws (default: the project's ``draws`` setting).
    seed : int, optional
        Random seed (default: the project's ``seed`` setting). The same seed gives the same
        numbers.
    sample_mode : {"keep", "exclude", "downweight"}
        Use of the samples the lab and field review flags.
    units : {"US", "SI"}, optional
        Display units of the result's tables (default: the project's ``display_units``).
    progress : callable(done, total), optional
        Called as the posterior draws advances.

    Returns
    -------
    Result

    Raises
    ------
    InputError
        For unreadable or inconsistent inputs (naming file, row and field).
    ModelError
        When nothing can be fitted.
    """
    if not isinstance(project, Project):
        project = load_project(project)
    units = _unit_system(units or project.settings.display_units)
    # looked up at call time, so the pipeline function stays the one place the analysis runs
    a = _pipeline.analyse(project, draws=draws, seed=seed, sample_mode=sample_mode,
                          progress=progress)
    return Result(a, units)


class Result:
    """The analysis of one project, with its tables in display units.

    Made by :func:`analyse`. Tables are pandas DataFrames whose column names carry their unit
    (``"rate [gpm]"``); concentrations are in each analyte's display unit (``"mg/L as N"``,
    ``"ug/L"``), which does not change with the unit system.

    Attributes
    ----------
    analysis : blendq.decide.analysis.Analysis
        The pipeline's plain result (base units: m, m^3/d, d, mg/L canonical basis).
    units : {"US", "SI"}
        Display units of the tables and texts.
    """

    def __init__(self, analysis: _pipeline.Analysis, units: str = "US") -> None:
        self.analysis = analysis
        self.units = _unit_system(units)

    def in_units(self, units: str) -> Result:
        """The same result shown in another unit system ("US" or "SI"); nothing is re-run."""
        return Result(self.analysis, units)

    # -- plain facts -----------------------------------------------------------------------
    @property
    def project(self) -> Project:
        """The project analysed."""
        return self.analysis.project

    @property
    def _du(self) -> dict[str, str]:
        return DISPLAY_UNITS[self.units]

    @property
    def rate_unit(self) -> str:
        """Display unit of rates ("gpm", "m3/d" or "L/s")."""
        return _unit_label(self._du["rate"])

    @property
    def length_unit(self) -> str:
        """Display unit of depths and lengths ("ft" or "m")."""
        return _unit_label(self._du["length"])

    @property
    def decision(self) -> str:
        """The decision in one sentence, in display units."""
        return _pipeline.decision_sentence(self.analysis, self.units)

    @property
    def notes(self) -> list[str]:
        """Notes of the analysis (what the decision rests on, what to check)."""
        return list(self.analysis.notes)

    @property
    def not_fitted(self) -> dict[str, str]:
        """Analytes reviewed but not fitted, with the reason."""
        return dict(self.analysis.not_fitted)

    # -- tables ----------------------------------------------------------------------------
    @cached_property
    def window(self) -> OperatingWindow:
        """The operating window (intervals, what limits each end, recommended rate)."""
        return OperatingWindow(self.analysis, self.units)

    @cached_property
    def zones(self) -> pd.DataFrame:
        """Zone water quality, one row per zone and analyte (tidy).

        Columns: zone, analyte, unit (the analyte's display unit, which differs between
        analytes), estimate, sd, lower, upper (the project's interval), range low, range high
        (the values the data allow), verdict ("resolved", "weakly resolved", "not resolved";
        estimate, sd, lower and upper are NaN for a zone the data do not resolve).
        """
        z = self.analysis.zones
        out = pd.DataFrame({"zone": z["zone"], "analyte": z["analyte"],
                            "unit": [_concentration_unit(a) for a in z["analyte"]]})
        for col, name in (("estimate", "estimate"), ("sd", "sd"), ("lower", "lower"),
                          ("upper", "upper"), ("range_low", "range low"),
                          ("range_high", "range high")):
            out[name] = [float(get_analyte(a).in_display_unit(v))
                         for a, v in zip(z["analyte"], z[col], strict=True)]
        out["verdict"] = z["verdict"].to_numpy()
        out.attrs["interval"] = self.project.settings.interval
        return out

    @cached_property
    def hydraulics(self) -> pd.DataFrame:
        """Fitted zone hydraulics: conductance and static level of each zone, with their
        uncertainty and whether the test data or the zone properties (prior) set them."""
        h = self.analysis.hydraulics
        du, cu = self._du, _unit_label(self._du["conductance"])
        return pd.DataFrame({
            "zone": h["zone"],
            f"conductance [{cu}]": from_base(h["conductance"].to_numpy(float), "conductance",
                                             du["conductance"]),
            "conductance relative sd [-]": h["conductance_rel_sd"].to_numpy(float),
            "conductance from": h["conductance_from"],
            f"static level [{self.length_unit} depth]": from_base(
                -h["static_head"].to_numpy(float), "length", du["length"]),
            f"static level sd [{self.length_unit}]": from_base(
                h["static_head_sd"].to_numpy(float), "length", du["length"]),
            "static level from": h["static_head_from"],
            "prior source": h["prior_source"],
        })

    @cached_property
    def residuals(self) -> pd.DataFrame:
        """One row per lab result: observed and fitted concentration (in the row's unit),
        lab sigma, standardised residual [-] and the outlier flag. A non-detect shows its
        detection limit as observed."""
        r = self.analysis.residuals
        out = pd.DataFrame({"sample id": r["sample_id"], "step": r["step"],
                            "analyte": r["analyte"],
                            f"depth [{self.length_unit}]": from_base(
                                r["depth"].to_numpy(float), "length", self._du["length"]),
                            "unit": [_concentration_unit(a) for a in r["analyte"]]})
        for col in ("observed", "fitted", "sigma"):
            out[col] = [float(get_analyte(a).in_display_unit(v))
                        for a, v in zip(r["analyte"], r[col], strict=True)]
        out["standardised [-]"] = r["standardised"].to_numpy(float)
        out["nondetect"] = r["nondetect"].to_numpy(bool)
        out["outlier"] = r["outlier"].to_numpy(bool)
        return out

    @property
    def review(self) -> pd.DataFrame:
        """Findings of the lab and field review, most severe first (severity, rule,
        sample_id, step, analyte, message, source, source_row)."""
        return self.analysis.qa.findings.copy()

    @cached_property
    def sweep(self) -> pd.DataFrame:
        """The rate sweep behind the window: :meth:`predict` at every rate of the grid."""
        return self._sweep_frame(self.analysis.sweep_table)

    def predict(self, rates: Any) -> pd.DataFrame:
        """Discharge quality, pumping level and zone shares at given pumping rates.

        Parameters
        ----------
        rates : float, str, pint.Quantity or sequence of these
            Numbers in the display rate unit (gpm for "US", m^3/d for "SI"), Quantities, or
            text such as ``"450 gpm"``, ``"200, 400 gpm"`` or ``"30 L/s"`` (see
            :func:`parse_rates`).

        Returns
        -------
        DataFrame
            One row per rate: ``rate [<unit>]``; per analyte its median, lower and upper (the
            project's interval band) in the analyte's display unit, and the probabilities
            [-] of exceeding the margin x limit and the limit; the pumping level [depth in the
            display length unit] (median and deep side of the band); each zone's median share
            of the discharge [-]. Predictions are at the operating horizon, with the same
            posterior draws as the window.
        """
        a = self.analysis
        s = self.project.settings
        pred = _sweep.sweep(a.fit, a.draws, parse_rates(rates, self.units))
        table = _sweep.sweep_table(pred, a.limits, s.margin, s.interval, self.project.zone_names,
                                   _sweep.compliance_statistics(self.project, a.limits),
                                   self.project.zone_top)
        return self._sweep_frame(table)

    def _sweep_frame(self, table: pd.DataFrame) -> pd.DataFrame:
        """A base-unit sweep table (:func:`blendq.decide.sweep.sweep_table`) in display units."""
        du, lu = self._du, self.length_unit
        s = self.project.settings
        out = {f"rate [{self.rate_unit}]": from_base(table["rate"].to_numpy(float), "rate",
                                                     du["rate"])}
        for a in self.analysis.prediction.analytes:
            cu, an = _concentration_unit(a), get_analyte(a)
            for stat in ("median", "lower", "upper"):
                out[f"{a} {stat} [{cu}]"] = an.in_display_unit(table[f"{a}_{stat}"])
            if f"{a}_p_exceed_margin" in table:
                out[f"{a} P(above {s.margin:.0%} of limit) [-]"] = \
                    table[f"{a}_p_exceed_margin"].to_numpy(float)
                out[f"{a} P(above limit) [-]"] = table[f"{a}_p_exceed_limit"].to_numpy(float)
        for stat in ("median", "deep"):
            out[f"pumping level {stat} [{lu} depth]"] = from_base(
                table[f"pumping_level_{stat}"].to_numpy(float), "length", du["length"])
        for z in self.project.zone_names:
            out[f"share {z} [-]"] = table[f"share_{z}"].to_numpy(float)
        for z in self.project.zone_names:
            if f"cascading_{z}" in table:
                out[f"P(water cascades from {z}) [-]"] = table[f"cascading_{z}"].to_numpy(float)
        frame = pd.DataFrame(out)
        frame.attrs.update(units=self.units, interval=s.interval)
        return frame

    # -- monitoring history -----------------------------------------------------------------
    @cached_property
    def _forecast(self):
        from blendq.decide.forecast import forecast

        return forecast(self.analysis, self.units)

    def forecast(self):
        """The years ahead from the monitoring history: the operating window year by year,
        the latest year each rate stays compliant, the predictive check, the triggers and the
        Mann-Kendall test (:class:`blendq.decide.forecast.Forecast`, rates in m^3/d and
        concentrations in mg/L; its sentences in this result's units). None when the project
        has no usable history."""
        return self._forecast

    def history_models(self) -> pd.DataFrame:
        """The time model of each analyte beside the Mann-Kendall test and Sen's slope, in
        display units (empty when the project has no usable history)."""
        from blendq.report.history_section import model_table

        fc = self.forecast()
        return pd.DataFrame() if fc is None else model_table(self.analysis, fc)

    # -- options, report, charts -----------------------------------------------------------
    def compare(self, seal: Any = None, redevelop: Any = None, intake: Any = None,
                blend: Any = None, *, lower_heads: Any = None, new_pump: Any = None,
                scenarios: Sequence[dict] | None = None,
                include_project: bool = True) -> ComparisonResult:
        """Compare options with the base case, all with the same posterior draws.

        Parameters
        ----------
        seal, redevelop, intake, blend, lower_heads, new_pump, scenarios, include_project
            See :func:`build_scenarios` (one option per item; the project's own
            ``[[scenarios]]`` first unless ``include_project`` is False).

        Returns
        -------
        ComparisonResult
        """
        built = build_scenarios(self.project, seal, redevelop, intake, blend,
                                lower_heads=lower_heads, new_pump=new_pump, scenarios=scenarios,
                                include_project=include_project, units=self.units)
        return ComparisonResult(_scenarios.compare(self.analysis, built), self.analysis,
                                self.units)

    def write_report(self, folder: str | os.PathLike[str], units: str | None = None) -> Path:
        """Write the report folder of ``blendq report``: report.html, report.pdf, the tables
        (CSV), summary.json and the charts.

        Parameters
        ----------
        folder : path-like
            Output folder; replaced as a whole if blendq wrote it before, refused if it holds
            anything else or the project's input files.
        units : {"US", "SI"}, optional
            Display units of the report (default: this result's).

        Returns
        -------
        pathlib.Path
            The folder written (absolute).
        """
        u = self.units if units is None else _unit_system(units)
        protect = _protected(self.project)
        _outputs.check_output_folder(folder, protect)
        files = _assemble.output_files(self.analysis, u, created=f"blendq {__version__}")
        return _outputs.write_outputs(folder, files, protect=protect)

    @cached_property
    def plot(self) -> Plots:
        """The report's charts as matplotlib Figures (``result.plot.quality()`` ...)."""
        return Plots(self.analysis, self.units)

    # -- texts -----------------------------------------------------------------------------
    def summary(self) -> dict:
        """The machine-readable summary of the report's summary.json (base units, with the
        decision sentence in display units)."""
        return _assemble.summary_json(self.analysis, self.units)

    def leave_one_step_out(self, draws: int | None = None) -> pd.DataFrame:
        """The window found again without each step's lab samples: which steps drive it.

        Parameters
        ----------
        draws : int, optional
            Posterior draws of each rerun (default: this result's).

        Returns
        -------
        DataFrame
            One row per step with samples, the base case first (step ``"none"``): ``step``,
            ``results left out``, ``window low``, ``window high``, ``recommended``, ``shift
            low``, ``shift high`` (display rate unit in each name) and ``note``
            (:func:`blendq.decide.analysis.leave_one_step_out`).
        """
        t = _pipeline.leave_one_step_out(self.analysis, draws)
        du, ru = self._du["rate"], self.rate_unit
        out = pd.DataFrame({"step": t["step"], "results left out": t["results_left_out"]})
        for col in ("window_low", "window_high", "recommended", "shift_low", "shift_high"):
            out[f"{col.replace('_', ' ')} [{ru}]"] = from_base(t[col].to_numpy(float), "rate", du)
        out["note"] = t["note"]
        return out

    @property
    def failure_drivers(self) -> list[str]:
        """For each limit that fails at every rate or ends the window, the lab result that
        drives it (:func:`blendq.decide.analysis.failure_drivers`)."""
        return _pipeline.failure_drivers(self.analysis, self.units)

    @property
    def decisions(self) -> pd.DataFrame:
        """The review decisions recorded in the project (``[[review]]``) as the fit used them."""
        return self.analysis.decisions.copy()

    def text_table(self, name: str) -> pd.DataFrame:
        """A table as the report and the command line print it (text cells, display units).

        Parameters
        ----------
        name : {"zones", "window"}
        """
        if name == "zones":
            return _assemble.zone_display_table(self.analysis)
        if name == "window":
            return _assemble.window_display_table(self.analysis, self.units)
        raise InputError(f'"{name}" is not a text table (expected "zones" or "window")',
                         field="name")

    def _facts(self) -> list[tuple[str, str]]:
        a, p = self.analysis, self.project
        return [
            ("Project", p.name),
            ("Well", f"{p.well.name}: {len(p.zones)} zones, {len(p.steps)} steps, "
                     f"{len(p.samples)} lab results"),
            ("Fitted", ", ".join(a.prediction.analytes)
             + (f" ({len(a.not_fitted)} analytes reviewed only or not fitted)"
                if a.not_fitted else "")),
            ("Posterior draws", f"{a.draws.n_draws} draws, seed {a.draws.seed}"),
            ("Review", "; ".join(a.qa.summary_lines()) or "no findings"),
            ("Window", self.window.interval_text()),
            ("Display units", self.units),
        ]

    def __repr__(self) -> str:
        lines = [f"blendq result: {self.project.name}"]
        for key, value in self._facts()[1:]:
            lines += _wrap(value, f"  {key.lower()}: ")
        lines += _wrap(self.decision, "  decision: ")
        n = len(self.analysis.notes)
        if n:
            lines.append(f"  {n} note{'s' if n > 1 else ''} (result.notes)")
        lines += _wrap("zones, window, review, hydraulics, residuals, sweep; predict(rates), "
                       "compare(options), plot, write_report(folder)", "  tables: ")
        return "\n".join([*lines, *_wrap(_short_caution())])

    def _repr_html_(self) -> str:
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.analysis.notes)
        return (f"<div><p><b>blendq result</b></p>{_html_rows(self._facts())}"
                f"<p><b>Decision:</b> {html.escape(self.decision)}</p>"
                + (f"<details><summary>Notes ({len(self.analysis.notes)})</summary>"
                   f"<ul>{notes}</ul></details>" if notes else "")
                + _html_cautions() + "</div>")


class OperatingWindow:
    """The rates that meet every limit with the margin inside the well's hydraulic limits.

    Attributes
    ----------
    intervals : DataFrame
        One row per interval: ``from [<rate unit>]``, ``to [<rate unit>]``, ``lower end set
        by``, ``upper end set by`` (the criterion that fails just outside each end).
    recommended : float or None
        Recommended rate in the display unit (the largest rate in the window not above the
        demand), None when there is no window.
    demand : float or None
        The well's demand in the display unit.
    demand_met : bool or None
        Whether the recommended rate reaches the demand (None when no demand is given).
    headroom : float
        Relative distance [-] the recommended rate keeps from every end of the window
        (``settings.recommended_headroom``); ``headroom_kept`` is False when the window is too
        narrow to keep it.
    decision : str
        The decision sentence.
    reason_empty : str
        Why there is no window ("" when there is one).
    cascading : DataFrame
        Zones water cascades from above the pumping level (in more than alpha of the draws):
        ``zone``, ``from [<rate unit>]`` (the lowest such rate), ``inside window``.
    units : {"US", "SI"}
    """

    def __init__(self, analysis: _pipeline.Analysis, units: str) -> None:
        self._analysis = analysis
        self.units = units
        w, du = analysis.window, DISPLAY_UNITS[units]
        self.rate_unit = _unit_label(du["rate"])
        self.intervals = pd.DataFrame(
            [(float(from_base(lo, "rate", du["rate"])), float(from_base(hi, "rate", du["rate"])),
              why_lo, why_hi) for lo, hi, why_lo, why_hi in w.intervals],
            columns=[f"from [{self.rate_unit}]", f"to [{self.rate_unit}]", "lower end set by",
                     "upper end set by"])
        self.recommended = (None if w.recommended is None
                            else float(from_base(w.recommended, "rate", du["rate"])))
        demand = analysis.project.well.demand
        self.demand = None if not demand else float(from_base(demand, "rate", du["rate"]))
        self.demand_met = w.demand_met
        self.headroom, self.headroom_kept = w.headroom, w.headroom_kept
        self.cascading = pd.DataFrame(
            [(z, float(from_base(r, "rate", du["rate"])), inside)
             for z, r, inside in w.cascading],
            columns=["zone", f"from [{self.rate_unit}]", "inside window"])
        self.decision = _pipeline.decision_sentence(analysis, units)
        self.reason_empty = w.reason_empty

    @property
    def empty(self) -> bool:
        """True when no rate meets every criterion."""
        return self._analysis.window.empty

    @property
    def criteria(self) -> pd.DataFrame:
        """Each criterion of the window on the sweep's rate grid: ``rate [<unit>]``, one
        True/False column per criterion, and ``all met``."""
        w = self._analysis.window
        data = {f"rate [{self.rate_unit}]": from_base(w.rates, "rate",
                                                      DISPLAY_UNITS[self.units]["rate"])}
        for c in w.criteria:
            data[c.name] = np.asarray(c.ok, bool)
        data["all met"] = np.asarray(w.ok, bool)
        return pd.DataFrame(data)

    def interval_text(self) -> str:
        """The window in one line ("283 gpm to 658 gpm; recommended 600 gpm")."""
        w = self._analysis.window
        if w.empty:
            return "none"
        spans = " and ".join(f"{format_quantity(lo, 'rate', self.units)} to "
                             f"{format_quantity(hi, 'rate', self.units)}"
                             for lo, hi, _, _ in w.intervals)
        return f"{spans}; recommended {format_quantity(w.recommended, 'rate', self.units)}"

    def _lines(self, shown: int = 4) -> list[str]:
        w = self._analysis.window
        lines = [f"Operating window of {self._analysis.project.well.name} ({self.units} units)"]
        if w.empty:
            lines += _wrap(f"no rate meets every criterion: {w.reason_empty}", "  ")
        for lo, hi, why_lo, why_hi in w.intervals[:shown]:
            lines.append(f"  {format_quantity(lo, 'rate', self.units)} to "
                         f"{format_quantity(hi, 'rate', self.units)}")
            lines += _wrap(f"lower end set by: {why_lo}", "    ")
            lines += _wrap(f"upper end set by: {why_hi}", "    ")
        if len(w.intervals) > shown:
            lines.append(f"  and {len(w.intervals) - shown} more intervals (see .intervals)")
        if w.recommended is not None:
            demand = self._analysis.project.well.demand
            lines.append(f"  recommended rate: {format_quantity(w.recommended, 'rate', self.units)}"
                         + (f" (demand {format_quantity(demand, 'rate', self.units)})"
                            if demand else ""))
        return lines + _wrap(self.decision, "  decision: ")

    def __repr__(self) -> str:
        return "\n".join([*self._lines(), *_wrap(_short_caution())])

    def _repr_html_(self) -> str:
        w = self._analysis.window
        rows = [(f"{format_quantity(lo, 'rate', self.units)} to "
                 f"{format_quantity(hi, 'rate', self.units)}",
                 f"lower end set by {why_lo}; upper end set by {why_hi}")
                for lo, hi, why_lo, why_hi in w.intervals]
        if w.empty:
            rows = [("none", w.reason_empty)]
        if w.recommended is not None:
            rows.append(("Recommended rate", format_quantity(w.recommended, "rate", self.units)))
        return (f"<div><p><b>Operating window of {html.escape(self._analysis.project.well.name)}"
                f"</b></p>{_html_rows(rows)}<p><b>Decision:</b> {html.escape(self.decision)}</p>"
                f"{_html_cautions()}</div>")


class ComparisonResult:
    """Options compared with the base case (made by :meth:`Result.compare`).

    Attributes
    ----------
    comparison : blendq.decide.scenarios.Comparison
        The plain comparison (base units).
    units : {"US", "SI"}
    """

    def __init__(self, comparison: _scenarios.Comparison, analysis: _pipeline.Analysis,
                 units: str) -> None:
        self.comparison = comparison
        self._analysis = analysis
        self.units = units

    @cached_property
    def table(self) -> pd.DataFrame:
        """One row per option, the base case first: window, recommended and delivered rate,
        pumping-level yield (display rate unit), what limits the window, and each analyte's
        median and band at the recommended rate (its display unit)."""
        t = self.comparison.table
        du = DISPLAY_UNITS[self.units]
        ru = _unit_label(du["rate"])
        out = pd.DataFrame({"option": t["scenario"], "changes": t["changes"]})
        for col, name in (("window_low", "window low"), ("window_high", "window high"),
                          ("window_width", "window width"), ("recommended", "recommended"),
                          ("blend_rate", "blend rate"), ("delivered", "delivered"),
                          ("yield", "pumping-level yield")):
            out[f"{name} [{ru}]"] = from_base(t[col].to_numpy(float), "rate", du["rate"])
        out["yield beyond grid"] = t["yield_beyond_grid"].to_numpy(bool)
        out["intervals"] = t["n_intervals"].to_numpy(int)
        out["lower end set by"] = t["lower_end_set_by"]
        out["upper end set by"] = t["upper_end_set_by"]
        analytes = self.comparison.results[0].prediction.analytes if self.comparison.results \
            else []
        for a in analytes:
            cu, an = _concentration_unit(a), get_analyte(a)
            for stat in ("median", "lower", "upper"):
                out[f"{a} {stat} [{cu}]"] = an.in_display_unit(t[f"{a}_{stat}"])
        if "pump_curve" in t:  # an option with a new pump: every pump's setting and energy
            from blendq.report.pump_section import energy_unit

            label, factor = energy_unit(self.units)
            out["pump curve"] = t["pump_curve"].fillna("")
            for col, name in (("pump_frequency_low", "drive low"),
                              ("pump_frequency_high", "drive high"),
                              ("pump_setting", "drive setting")):
                out[f"{name} [Hz]"] = t[col].to_numpy(float)
            for col, name in (("pump_rate_low", "pump rate at lowest frequency"),
                              ("pump_rate_high", "pump rate at highest frequency"),
                              ("pump_setting_rate_low", "rate at setting low"),
                              ("pump_setting_rate_high", "rate at setting high")):
                out[f"{name} [{ru}]"] = from_base(t[col].to_numpy(float), "rate", du["rate"])
            out[f"energy at setting [{label}]"] = t["pump_kwh_per_m3"].to_numpy(float) * factor
            out[f"cheapest energy [{label}]"] = \
                t["pump_cheapest_kwh_per_m3"].to_numpy(float) * factor
            out["pump note"] = [_scenario_section.pump_error_text(res, self.units)
                                for res in self.comparison.results]
        return out

    def text_table(self) -> pd.DataFrame:
        """The comparison as the report and the command line print it (text cells)."""
        return _scenario_section.comparison_display_table(
            self.comparison, self.units, self._analysis.project.settings.interval)

    @property
    def widest(self) -> str:
        """A sentence naming the option with the widest operating window."""
        return _scenario_section.widest_sentence(self.comparison, self.units)

    def pump_lines(self) -> list[str]:
        """Each new pump against the current one (drive setting, rates, energy per volume);
        empty when no option puts in a new pump."""
        if not _scenario_section.has_pump(self.comparison):
            return []
        return _scenario_section.pump_sentences(self.comparison, self.units)

    def plot(self) -> Figure:
        """Median delivered quality against rate for each option, and their windows
        (matplotlib Figure; the report's chart)."""
        from blendq.report.charts.scenarios import scenario_chart

        return scenario_chart(self.comparison, self._analysis.limits, self.units)

    def _rows(self) -> list[tuple[str, str]]:
        rows = []
        for res in self.comparison.results:
            w = res.window
            window = " and ".join(f"{format_quantity(lo, 'rate', self.units)} to "
                                  f"{format_quantity(hi, 'rate', self.units)}"
                                  for lo, hi, _, _ in w.intervals) or "none"
            rec = ("" if w.recommended is None
                   else f"; recommended {format_quantity(w.recommended, 'rate', self.units)}")
            rows.append((res.scenario.name, f"window {window}{rec}"))
        return rows

    def __repr__(self) -> str:
        lines = [f"Options compared for {self._analysis.project.well.name} "
                 f"({len(self.comparison.results)} including the base case)"]
        rows = self._rows()
        for name, text in rows[:12]:
            lines += _wrap(f"{name}: {text}", "  ")
        if len(rows) > 12:
            lines.append(f"  and {len(rows) - 12} more options (see .table)")
        return "\n".join([*lines, *_wrap(self.widest), *_wrap(_short_caution())])

    def _repr_html_(self) -> str:
        return (f"<div><p><b>Options compared for "
                f"{html.escape(self._analysis.project.well.name)}</b></p>"
                f"{_html_rows(self._rows())}<p>{html.escape(self.widest)}</p>"
                f"{_html_cautions()}</div>")


class Plots:
    """The report's charts of one result, each returned as a matplotlib Figure.

    The charts are the report's own (same functions, same arguments); matplotlib is imported
    only when a chart is drawn. In a notebook, a Figure shows itself as the cell's value.
    """

    def __init__(self, analysis: _pipeline.Analysis, units: str) -> None:
        self._analysis = analysis
        self.units = units

    def quality(self) -> Figure:
        """Discharge quality against pumping rate: median, band, limits, step samples and
        the operating window, one panel per fitted analyte."""
        return _assemble.quality_chart(self._analysis, self.units)

    def shares(self) -> Figure:
        """Each zone's share of the discharge against pumping rate."""
        return _assemble.shares_chart(self._analysis, self.units)

    def levels(self) -> Figure:
        """Pumping level against rate at the operating horizon, with the intake and screen."""
        return _assemble.levels_chart(self._analysis, self.units)

    def zones(self) -> Figure:
        """Zone estimates with intervals; unresolved zones as the range the data allow."""
        return _assemble.zones_chart(self._analysis)

    def step_drawdown(self, kind: str = "specific") -> Figure:
        """A chart of the step-drawdown analysis.

        Parameters
        ----------
        kind : {"specific", "drawdown", "record"}
            Specific drawdown against rate with the well-loss fits; drawdown against rate;
            the water-level record with each step's extrapolation (needs the levels table).

        Raises
        ------
        ModelError
            When the project has no step-drawdown analysis (or no level record for
            ``"record"``).
        """
        from blendq.report.charts import stepdrawdown as sd

        draws = {"specific": sd.specific_drawdown_chart, "drawdown": sd.drawdown_rate_chart,
                 "record": sd.step_record_chart}
        if kind not in draws:
            raise InputError(f'"{kind}" is not a step-drawdown chart (expected '
                             '"specific", "drawdown" or "record")', field="kind")
        lc = self._analysis.step_drawdown
        if lc is None or lc.result is None:
            raise ModelError(f"no step-drawdown chart {kind!r}: "
                             f"{lc.reason if lc is not None else 'not run'}")
        if kind == "record" and lc.result.record is None:
            raise ModelError(f"no step-drawdown chart {kind!r}: the project has no water-level "
                             "record")
        return draws[kind](lc.result, self.units)

    def __repr__(self) -> str:
        return (f"charts of {self._analysis.project.well.name}: quality(), shares(), levels(), "
                "zones(), step_drawdown(kind)")


# ------------------------------------------------------------------------------ planning
class StepTestPlan:
    """A planned step test (or, after a test, the next measurement), in display units.

    Made by :func:`plan_test`. ``report`` is the planner's plain result
    (:class:`blendq.decide.plan.PlanReport`, base units).
    """

    def __init__(self, report, units: str = "US") -> None:
        self.report = report
        self.units = units

    @property
    def lines(self) -> list[str]:
        """The plan as text: expected spread of the window's ends, unresolved zones, the value
        of each item (or the ranked next measurements)."""
        from blendq.report.fieldsheet import plan_lines

        return plan_lines(self.report, self.units)

    @property
    def field_sheet(self) -> pd.DataFrame:
        """The actions of the planned test in field order (display units in ``attrs``)."""
        from blendq.report.fieldsheet import field_sheet, sheet_design

        return field_sheet(self.report, sheet_design(self.report), self.units)

    @property
    def candidates(self) -> pd.DataFrame:
        """Every candidate design evaluated with its cost, expected end spreads and the zones
        it leaves unresolved (empty after a finished test)."""
        from blendq.report.fieldsheet import candidates_table

        return candidates_table(self.report, self.units)

    def write(self, folder: str | os.PathLike[str]) -> Path:
        """Write fieldsheet.pdf, fieldsheet.csv, plan.txt (and candidates.csv) to ``folder``
        (replaced as a whole, as the report folder is)."""
        from blendq.report.fieldsheet import field_sheet_files

        files = field_sheet_files(self.report, self.units, f"blendq {__version__}")
        return _outputs.write_outputs(folder, files, _protected(self.report.project))

    def __repr__(self) -> str:
        return "\n".join(self.lines)


def plan_test(project: Project | str | os.PathLike[str], budget: float | None = None,
              units: str | None = None) -> StepTestPlan:
    """Plan a step test before the field day, or the next measurement after one.

    Parameters
    ----------
    project : Project or path
        A project folder / project.toml (its ``[plan]`` table gives prior ranges, unit costs
        and the budget), or a loaded project (a finished test; default unit costs).
    budget : float, optional
        Largest cost of the test (overrides ``[plan] budget``).
    units : {"US", "SI"}, optional

    Returns
    -------
    StepTestPlan
    """
    from blendq.decide import plan as _plan
    from blendq.inputs.plan_file import PlanInputs, load_for_planning

    if isinstance(project, Project):
        proj, inputs, finished = project, PlanInputs(), len(project.steps) > 0
    else:
        proj, inputs, finished = load_for_planning(project)
    units = _unit_system(units or proj.settings.display_units)
    return StepTestPlan(_plan.plan_test(proj, inputs, finished, budget), units)


# ------------------------------------------------------------------------------ pump settings
class PumpPlan:
    """Drive settings for the operating window, made by :func:`pump_settings`.

    Attributes
    ----------
    settings : blendq.decide.pumpset.PumpSettings
        Frequencies [Hz], rates [m^3/d], power [W] and energy [kWh/m^3] in base units.
    units : {"US", "SI"}
    """

    def __init__(self, settings, units: str = "US") -> None:
        self.settings = settings
        self.units = units

    def season_table(self) -> pd.DataFrame:
        """Per season: static level, compliant frequencies, setting and delivered rate."""
        from blendq.report.pump_section import season_table

        return season_table(self.settings, self.units)

    def energy_table(self, rows: int = 5) -> pd.DataFrame:
        """Rate, frequency, power and energy per volume across the compliant frequencies."""
        from blendq.report.pump_section import energy_table

        return energy_table(self.settings, self.units, rows)

    def lines(self) -> list[str]:
        """The settings and their energy in a few sentences."""
        from blendq.report.pump_section import pump_lines

        return pump_lines(self.settings, self.units)

    def __str__(self) -> str:
        return "\n".join([*self.lines(), _short_caution()])


def pump_settings(project: Result | Project | str | os.PathLike[str], draws: int | None = None,
                  seed: int | None = None, *, units: str | None = None) -> PumpPlan:
    """The drive frequencies that keep the pump's delivered rate in the operating window.

    Parameters
    ----------
    project : Result, Project or path
        An analysis (:func:`analyse`), or a project to analyse; its project file needs a
        ``[pump]`` table (docs/input-files.md).
    draws, seed : int, optional
        Posterior draws and seed of the analysis when ``project`` is not a Result.
    units : {"US", "SI"}, optional

    Returns
    -------
    PumpPlan

    Raises
    ------
    InputError
        When the project has no ``[pump]`` table or it is not valid.
    ModelError
        When there is no window, or the pump cannot lift the water.
    """
    from blendq.inputs.pump_file import read_pump
    from blendq.report.pump_section import settings_for

    if not isinstance(project, Result):
        proj = project if isinstance(project, Project) else load_project(project)
        # a missing or bad [pump] fails before the fit
        if proj.folder is None or read_pump(proj.folder / proj.files["project"]) is None:
            raise _no_pump(proj)
    result = project if isinstance(project, Result) else analyse(proj, draws, seed, units=units)
    units = _unit_system(units or result.units)
    ps = settings_for(result.analysis, units)
    if ps is None:
        raise _no_pump(result.analysis.project)
    return PumpPlan(ps, units)


def _no_pump(project: Project) -> InputError:
    return InputError("has no [pump] table; add one to set the pump (blendq docs input-files)",
                      file=project.files.get("project", "project.toml"), field="pump")


# ------------------------------------------------------------------------------ wellfield
class WellfieldPlots:
    """The wellfield's charts as matplotlib Figures."""

    def __init__(self, result: WellfieldResult) -> None:
        self._result = result

    def overview(self) -> Figure:
        """Each well's operating window on a common rate axis, the recommended rate marked,
        failed wells shown as such (cautions at the foot)."""
        from blendq.report.charts.wellfield import wellfield_chart

        r = self._result
        plan = r.plan()
        planned = plan.rates if plan.feasible else None
        return wellfield_chart(r.outcomes, r.units,
                               f"{r.wellfield.name}: each well's operating window",
                               planned=planned)

    def __repr__(self) -> str:
        return f"charts of {self._result.wellfield.name}: overview()"


class WellfieldResult:
    """The batch analysis of a wellfield, made by :func:`analyse_wellfield`.

    Attributes
    ----------
    wellfield : blendq.inputs.wellfield_file.Wellfield
        The wellfield file, checked, in base units.
    outcomes : list of blendq.decide.batch.WellOutcome
        One per well in the file's order: its summary (window, rate grid, predictive draws of
        the discharge concentration, limits; base units) or its one-line error.
    units : {"US", "SI", "SI-L/s"}
    plan_draws : int
        Draws of each well kept in the blending plan's program (the plan is checked against
        all of them).
    """

    def __init__(self, wellfield, outcomes, units: str = "US",
                 plan_draws: int | None = None) -> None:
        from blendq.decide.fieldplan import PLAN_DRAWS

        self.wellfield = wellfield
        self.outcomes = list(outcomes)
        self.units = _unit_system(units)
        self.plan_draws = PLAN_DRAWS if plan_draws is None else int(plan_draws)

    @cached_property
    def table(self) -> pd.DataFrame:
        """One row per well: window, recommended rate, limiting factor, trend, data gaps (and
        the error of a failed well), rates in the display unit."""
        from blendq.decide.wellfield import wellfield_table

        return wellfield_table(self.outcomes, self.units)

    @cached_property
    def wells(self) -> dict[str, Result]:
        """Well name -> :class:`Result` of each well analysed (none for a failed well, nor
        when the analyses were not kept)."""
        return {o.name: Result(o.analysis, self.units) for o in self.outcomes
                if o.analysis is not None}

    @property
    def summaries(self) -> dict:
        """Well name -> :class:`blendq.decide.wellfield.WellSummary` of each well analysed."""
        return {o.name: o.summary for o in self.outcomes if o.summary is not None}

    @property
    def errors(self) -> dict[str, str]:
        """Well name -> one-line error of each well whose analysis failed."""
        return {o.name: o.error for o in self.outcomes if o.error is not None}

    @cached_property
    def plot(self) -> WellfieldPlots:
        """The wellfield's charts (``result.plot.overview()``)."""
        return WellfieldPlots(self)

    @cached_property
    def field_plan(self):
        """The blending plan and its N-1 outages
        (:class:`blendq.decide.fieldplan.FieldPlan`, solved on first use)."""
        from blendq.decide.fieldplan import field_plan

        return field_plan(self.wellfield, self.outcomes, max_draws=self.plan_draws,
                          units=self.units)

    def plan(self):
        """The blending plan (:class:`blendq.decide.blendplan.BlendPlan`): rates per well
        [m^3/d] that meet each entry point's demand with every analyte under margin x limit
        with the wellfield's probability, or, without one, its diagnosis."""
        return self.field_plan.plan

    def n_minus_one(self) -> pd.DataFrame:
        """The N-1 table: one row per planned well out of service and entry point, with
        whether the entry point fails by itself or only through the link of the wells'
        drawdown, and why (:func:`blendq.decide.fieldplan.outage_table`; shortfall in m^3/d,
        level excess in m)."""
        from blendq.decide.fieldplan import outage_table

        table = outage_table(self.field_plan)
        table.attrs["cautions"] = self.cautions
        return table

    @cached_property
    def field_modifications(self):
        """Without a plan at some entry points, the well modifications that would open one
        (:class:`blendq.decide.fieldmods.Modifications`, searched on first use; empty when the
        plan exists). A well whose analysis was not kept is analysed again with its seed."""
        from blendq.decide.fieldmods import search
        from blendq.decide.fieldplan import field_plan

        # the plan already solved with its N-1 when there is one; else the plan alone
        fp = self.__dict__.get("field_plan") or field_plan(
            self.wellfield, self.outcomes, max_draws=self.plan_draws, n_minus_one=False,
            units=self.units)
        return search(self.wellfield, self.outcomes, fp.inputs, fp.plan,
                      max_draws=self.plan_draws, units=self.units)

    def modifications(self) -> pd.DataFrame:
        """Without a plan, the well modifications tried (:func:`blendq.decide.fieldmods.
        modification_table`): one row per modification with ``well``, ``modification``,
        ``origin``, ``status``, ``opens_plan``, the re-solved plan's rate of every source of
        the unmet entry points in the display unit, ``compliance <entry point>`` (share of
        all draws meeting every limit) and ``note``. Empty when the plan exists. Each is a
        planning idea for a licensed professional to check."""
        from blendq.decide.fieldmods import modification_table

        return modification_table(self.field_modifications, self.units)

    def _plan_table(self) -> pd.DataFrame:
        """The plan's table with its status in a last column (a wellfield without a plan
        shows every rate 0 and says why)."""
        table = self.plan().table()
        table["plan_status"] = self.plan().status
        return table

    def plan_lines(self) -> list[str]:
        """The plan (without one, the well modifications that would open it) and the N-1
        outcome as text (display units)."""
        from blendq.decide.fieldmods import modification_lines
        from blendq.decide.fieldplan import outage_lines, plan_lines

        return [*plan_lines(self.field_plan, self.units),
                *modification_lines(self.field_modifications, self.units),
                *outage_lines(self.field_plan, self.units)]

    @property
    def cautions(self) -> list[str]:
        """The cautions every wellfield output carries."""
        return [CAUTIONS[0], CAUTIONS[1], CAUTIONS[3]]

    def lines(self) -> list[str]:
        """The wellfield table as text, one block per well, and the cautions."""
        from blendq.decide.wellfield import table_lines

        head = (f"{self.wellfield.name}: {len(self.outcomes)} wells, "
                f"{len(self.outcomes) - len(self.errors)} analysed, {len(self.errors)} failed")
        return [head, *table_lines(self.table), *self.plan_lines(),
                "Caution: " + " ".join(self.cautions)]

    def files(self) -> dict[str, bytes | str]:
        """The output files of ``blendq wellfield``: wellfield.csv (the table), wellfield.png
        and wellfield.svg (the overview chart, the planned rates marked), wellfield.txt (the
        table, the plan and N-1 as text with the cautions), plan.csv (the plan's rates and
        blends, :meth:`blendq.decide.blendplan.BlendPlan.table`, with ``plan_status``) and
        n_minus_1.csv (:meth:`n_minus_one`). Each CSV begins with ``# `` comment lines (what
        it holds, the blendq version, the cautions): read it with
        ``pandas.read_csv(path, comment="#")``."""
        from blendq.report.charts.render import render_chart

        png, svg = render_chart(self.plot.overview())
        name = self.wellfield.name

        def csv(table: pd.DataFrame, what: str) -> str:
            return _outputs.to_csv_safe(table, comments=_outputs.csv_comments(
                f"{what}; wellfield {name}"))

        return {"wellfield.csv": csv(self.table, f"Wellfield table: window, recommended rate, "
                                     f"limiting factor, trend and data gaps per well "
                                     f"(rates in {self.units} display units)"),
                "plan.csv": csv(self._plan_table(), "Blending plan: rates per well and other "
                                "source, blend per entry point (rates in m3/d, concentrations "
                                "in mg/L)"),
                "n_minus_1.csv": csv(self.n_minus_one(), "N-1: the plan with each planned well "
                                     "out of service in turn, per entry point: whether it "
                                     "fails by itself or only through the link of the wells' "
                                     "drawdown, and why (shortfall in m3/d, level excess in "
                                     "m)"),
                "wellfield.png": png, "wellfield.svg": svg,
                "wellfield.txt": "\n".join(self.lines()) + "\n"}

    def protected(self) -> list[Path]:
        """The run's input files and folders (an output folder may hold none of them)."""
        return [self.wellfield.path, *(w.project for w in self.wellfield.wells)]

    def write(self, folder: str | os.PathLike[str]) -> Path:
        """Write :meth:`files` to ``folder`` (replaced as a whole, as the report folder is)."""
        protect = self.protected()
        _outputs.check_output_folder(folder, protect)
        return _outputs.write_outputs(folder, self.files(), protect)

    def __repr__(self) -> str:
        return "\n".join(self.lines())


def analyse_wellfield(path: str | os.PathLike[str], workers: int | None = None,
                      scheduler: Any = None, seed: int | None = None, *,
                      draws: int | None = None, units: str | None = None,
                      keep_analyses: bool = True,
                      progress: Callable[[int, int, str], None] | None = None,
                      plan_draws: int | None = None) -> WellfieldResult:
    """Analyse every well of a wellfield file (``wellfield.toml``, docs/input-files.md).

    Parameters
    ----------
    path : path-like
        The wellfield file or its folder.
    workers : int, optional
        Local worker processes (default: one per core); 1 runs the wells in this process.
    scheduler : str or distributed.Client, optional
        Run the wells on this Dask cluster instead (needs ``pip install 'blendq[wellfield]'``).
    seed : int, optional
        Wellfield seed (default: the file's); each well's seed derives from it and the well's
        name, so the results do not depend on the executor or the number of workers.
    draws : int, optional
        Posterior draws of each well (default: each project's setting).
    units : {"US", "SI", "SI-L/s"}, optional
        Display units (default: the wellfield file's ``display_units``).
    keep_analyses : bool
        Keep each well's whole analysis (``result.wells``; about 11 MB per demo-sized well).
        False keeps only the summaries the table, the chart and the plan need.
    progress : callable(done, total, well name), optional
    plan_draws : int, optional
        Draws of each well kept in the blending plan's program (default
        :data:`blendq.decide.blendplan.PLAN_DRAWS`; a whole number, 1 or more; more than the
        wells' draws keeps them all); the plan is solved on first use (``result.plan()``,
        ``result.n_minus_one()``, the output files). ``blendq wellfield --plan-draws N``.

    Returns
    -------
    WellfieldResult

    Raises
    ------
    InputError
        For a bad wellfield file (a bad well project is that well's error instead), or a bad
        ``plan_draws``.
    """
    from blendq.decide.batch import run_batch, tasks_for
    from blendq.inputs.wellfield_file import read_wellfield

    if plan_draws is not None and (isinstance(plan_draws, bool) or not isinstance(
            plan_draws, (int, np.integer)) or plan_draws < 1):
        raise InputError(f"{plan_draws!r} is not a number of draws (a whole number, 1 or more)",
                         field="plan_draws")

    wf = read_wellfield(path)
    tasks = tasks_for(wf, seed=seed, draws=draws, keep_analysis=keep_analyses)
    outcomes = run_batch(tasks, workers=workers, scheduler=scheduler, progress=progress)
    return WellfieldResult(wf, outcomes, units or wf.display_units, plan_draws)
