"""Read and check the TOML project file (``project.toml``) of a blendq project.

Every physical quantity in the file is a string with its unit (``"185 ft"``, ``"350 gpm"``);
dimensionless values (skin, storativity, margin) are plain numbers. Each value is checked and
converted to the core's base units (see :mod:`blendq.units`); a problem is an
:class:`~blendq.errors.InputError` naming the file and the dotted key (``zones[2].top``, with
``[[zones]]`` entries counted from 1). The format is described in ``docs/input-files.md``.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field, replace
from pathlib import Path

from blendq.chemistry.analytes import get_analyte, normalise_basis
from blendq.chemistry.limits import (
    COMPLIANCE_BASES,
    DEFAULT_BASIS,
    ComplianceBasis,
    Limit,
    limit_set,
)
from blendq.errors import InputError
from blendq.inputs.project import TABLE_COLUMNS, Settings, Well, Zone
from blendq.inputs.tables import located, sheet_label, split_unit_basis
from blendq.units import UNIT_SYSTEMS, parse_quantity, unit_system

try:  # Python 3.11+
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

PROJECT_FILE = "project.toml"

#: conductance models the later stages understand
CONDUCTANCE_MODELS = ("auto", "steady", "transient", "given", "flowlog")

#: top-level tables of the project file
SECTIONS = ("project", "well", "zones", "tables", "settings", "limits", "scenarios", "review",
            "plan", "test", "pump")

#: what a ``[[review]]`` decision may do with a sample (see blendq.review.decisions)
REVIEW_ACTIONS = ("exclude", "downweight", "keep")

#: file suffixes a table may have
TABLE_SUFFIXES = (".csv", ".txt", ".xlsx")

_MISSING = object()

#: most zones a project may describe
MAX_ZONES = 100
#: deepest nesting of arrays and tables in the project file
MAX_DEPTH = 10
#: most characters in a text value of the project file (names, location, citations)
MAX_TEXT = 200
#: most characters in a zone or scenario name (drawn in chart legends and on chart axes)
MAX_NAME = 40
#: most characters in the well's name (chart and report titles)
MAX_WELL_NAME = 80
#: largest whole number accepted anywhere in the project file (a seed is below 2**63)
MAX_INTEGER = 2**63 - 1
#: largest project file [bytes]: a hand-written project file is a few kilobytes
MAX_PROJECT_BYTES = 1_000_000


@dataclass
class ProjectFile:
    """Contents of a checked project file, in base units.

    Attributes
    ----------
    name : str
    well : Well
    zones : list of Zone
        Sorted top to bottom.
    settings : Settings
    limits : list of Limit
        Limits of the named sets followed by the user's ``[[limits]]``.
    scenarios : list of dict
        ``[[scenarios]]`` as written (each has a unique ``name``).
    tables : dict
        Table name -> (path, label as written in ``[tables]``; with the worksheet when one
        is named, :func:`blendq.inputs.tables.sheet_label`).
    path : Path
        The project file.
    sheets : dict
        Table name -> worksheet named in ``[tables]`` for an .xlsx file (absent: the first).
    """

    name: str
    well: Well
    zones: list[Zone]
    settings: Settings
    limits: list[Limit]
    scenarios: list[dict]
    tables: dict[str, tuple[Path, str]] = field(default_factory=dict)
    path: Path = Path(PROJECT_FILE)
    sheets: dict[str, str] = field(default_factory=dict)


class _Section:
    """One TOML table, read key by key; every error names ``file`` and the dotted key."""

    def __init__(self, data, where: str, file: str) -> None:
        if not isinstance(data, dict):
            raise InputError(f"expected a table, got {data!r}", file=file, field=where)
        self.data, self.where, self.file, self.used = data, where, file, set()

    def error(self, key: str, message: str) -> InputError:
        return InputError(message, file=self.file, field=f"{self.where}.{key}" if self.where else key)

    def get(self, key: str, default=_MISSING):
        self.used.add(key)
        if key in self.data:
            return self.data[key]
        if default is _MISSING:
            raise self.error(key, "is missing (required)")
        return default

    def text(self, key: str, default=_MISSING) -> str:
        value = self.get(key, default)
        if key in self.data and not isinstance(value, str):
            raise self.error(key, f"expected text in quotes, got {value!r}")
        return value.strip() if isinstance(value, str) else value

    def flag(self, key: str, default: bool) -> bool:
        value = self.get(key, default)
        if not isinstance(value, bool):
            raise self.error(key, f"expected true or false, got {value!r}")
        return value

    def number(self, key: str, default=_MISSING, low=None, high=None, open_low=False,
               open_high=False, integer=False):
        """A plain (dimensionless) number, optionally within [low, high] (or open ends)."""
        value = self.get(key, default)
        if key not in self.data:
            return value
        kind = "a whole number" if integer else "a plain number"
        if isinstance(value, bool) or not isinstance(value, int if integer else (int, float)):
            raise self.error(key, f"expected {kind} without quotes or unit, got {value!r}")
        if not math.isfinite(value):
            raise self.error(key, f"{value!r} is not a finite number")
        too_low = low is not None and (value <= low if open_low else value < low)
        too_high = high is not None and (value >= high if open_high else value > high)
        if too_low or too_high:
            left = "(" if open_low else "["
            right = ")" if open_high else "]"
            span = f"{left}{'-inf' if low is None else low}, {'inf' if high is None else high}{right}"
            raise self.error(key, f"{value!r} is out of range (expected {kind} in {span})")
        return value

    def quantity(self, key: str, kind: str, default=_MISSING, sign: str = "positive"):
        """A quantity string such as ``"185 ft"`` in base units of ``kind``.

        ``sign`` is "positive" (> 0), "nonnegative" (>= 0) or "any".
        """
        value = self.get(key, default)
        if key not in self.data:
            return value
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            raise self.error(key, f"{value!r} has no unit; write the quantity as a string with "
                                  f'its unit, e.g. "{value} {_EXAMPLE_UNIT[kind]}"')
        if not isinstance(value, str):
            raise self.error(key, f'expected a quantity such as "10 {_EXAMPLE_UNIT[kind]}", '
                                  f"got {value!r}")
        try:
            base = parse_quantity(value, kind)
        except InputError as err:
            raise located(err, self.file, None, f"{self.where}.{key}", value) from err
        if (sign == "positive" and base <= 0) or (sign == "nonnegative" and base < 0):
            word = "greater than zero" if sign == "positive" else "zero or more"
            raise self.error(key, f'"{value}" must be {word}')
        return base

    def done(self) -> None:
        """Reject keys that were never read (most often a misspelling)."""
        unknown = [k for k in self.data if k not in self.used]
        if unknown:
            known = ", ".join(sorted(self.used))
            raise self.error(unknown[0], f'"{unknown[0]}" is not a key blendq knows here '
                                         f"(known: {known})")


_EXAMPLE_UNIT = {"length": "ft", "rate": "gpm", "time": "d", "transmissivity": "ft2/d",
                 "conductivity": "ft/d", "conductance": "ft2/d", "well_loss": "s2/ft5",
                 "nonlinear_loss": "s2/ft5", "concentration": "mg/L"}


def _read_toml(path: Path) -> dict:
    label = path.name
    try:
        size = path.stat().st_size
    except OSError:
        size = 0  # an unreadable file is reported by the read below
    if size > MAX_PROJECT_BYTES:
        raise InputError(f"is {size:,} bytes; the limit for a project file is "
                         f"{MAX_PROJECT_BYTES:,} bytes", file=label)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise InputError(f"is not UTF-8 text (byte 0x{err.object[err.start]:02x} at offset "
                         f"{err.start}); save it as UTF-8", file=label) from err
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"is not valid TOML: {err}", file=label) from err
    except RecursionError:
        raise InputError(f"is nested too deeply (the limit is {MAX_DEPTH} levels of arrays "
                         "and tables)", file=label) from None
    except ValueError:  # Python refuses to read a whole number of more than 4300 digits
        raise InputError("holds a whole number thousands of digits long; the largest whole "
                         f"number is {MAX_INTEGER}", file=label) from None
    _check_sizes(doc, label)
    return doc


def _check_sizes(doc: dict, label: str) -> None:
    """Refuse nesting deeper than :data:`MAX_DEPTH`, text longer than :data:`MAX_TEXT` and
    whole numbers beyond :data:`MAX_INTEGER`, naming the key (walked without recursion)."""
    stack = [(key, value, 1) for key, value in doc.items()]
    while stack:
        where, value, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise InputError(f"is nested more than {MAX_DEPTH} levels deep", file=label,
                             field=where)
        if isinstance(value, dict):
            stack.extend((f"{where}.{k}", v, depth + 1) for k, v in value.items())
        elif isinstance(value, list):
            stack.extend((f"{where}[{i}]", v, depth + 1) for i, v in enumerate(value, 1))
        elif isinstance(value, str) and len(value) > MAX_TEXT:
            raise InputError(f'"{value[:30]}..." has {len(value):,} characters; the limit is '
                             f"{MAX_TEXT}", file=label, field=where)
        elif isinstance(value, int) and not isinstance(value, bool) and abs(value) > MAX_INTEGER:
            raise InputError(f"{str(value)[:20]}... ({len(str(abs(value)))} digits) is too large; "
                             f"the largest whole number is {MAX_INTEGER}", file=label,
                             field=where)


def _tables_list(doc: dict, key: str, label: str) -> list[dict]:
    value = doc.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise InputError(f"write each entry as a [[{key}]] table, got {value!r}", file=label,
                         field=key)
    return value


def _short(s: _Section, key: str, limit: int) -> str:
    """Text of ``key`` of at most ``limit`` characters (a name drawn in charts)."""
    text = s.text(key)
    if len(text) > limit:
        raise s.error(key, f'"{text[:20]}..." has {len(text)} characters; the limit for this '
                           f"name is {limit} (it is drawn in chart legends and titles)")
    return text


def _well(doc: dict, label: str) -> Well:
    s = _Section(_table(doc, "well", label), "well", label)
    d = _WELL_DEFAULTS
    well = Well(
        name=_short(s, "name", MAX_WELL_NAME),
        location=s.text("location", d.location),
        datum=s.text("datum", d.datum),
        well_radius=s.quantity("well_radius", "length"),
        pump_intake_depth=s.quantity("pump_intake_depth", "length", sign="nonnegative"),
        operating_intake_depth=s.quantity("operating_intake_depth", "length",
                                          d.operating_intake_depth, sign="nonnegative"),
        submergence=s.quantity("submergence", "length", d.submergence, sign="nonnegative"),
        rate_min=s.quantity("rate_min", "rate", d.rate_min, sign="nonnegative"),
        rate_max=s.quantity("rate_max", "rate", d.rate_max),
        demand=s.quantity("demand", "rate", d.demand, sign="nonnegative"),
        well_loss=s.quantity("well_loss", "well_loss", d.well_loss, sign="nonnegative"),
        keep_above_screen=s.flag("keep_above_screen", d.keep_above_screen),
        radius_of_influence=s.quantity("radius_of_influence", "length", d.radius_of_influence),
        static_level=s.quantity("static_level", "length", d.static_level, sign="any"),
    )
    s.done()
    if well.rate_max <= well.rate_min:
        raise s.error("rate_max", f'"{s.data["rate_max"]}" is not above rate_min '
                                  f'"{s.data.get("rate_min", "0")}"')
    roi = well.radius_of_influence
    if roi is not None and roi <= well.well_radius:
        raise s.error("radius_of_influence", f'"{s.data["radius_of_influence"]}" is not larger '
                                             f'than well_radius "{s.data["well_radius"]}"')
    return well


# defaults of the optional keys come from the dataclasses themselves
_WELL_DEFAULTS = Well(name="", well_radius=1.0, pump_intake_depth=0.0)


def _table(doc: dict, name: str, label: str):
    if name not in doc:
        raise InputError(f"the [{name}] table is missing", file=label, field=name)
    return doc[name]


def _zones(doc: dict, label: str) -> list[Zone]:
    entries = _tables_list(doc, "zones", label)
    if not entries:
        raise InputError("no [[zones]] given; describe at least one screened zone", file=label,
                         field="zones")
    if len(entries) > MAX_ZONES:
        raise InputError(f"{len(entries)} [[zones]] given; the limit is {MAX_ZONES}",
                         file=label, field="zones")
    zones, where = [], {}
    for i, entry in enumerate(entries, start=1):
        s = _Section(entry, f"zones[{i}]", label)
        name = _short(s, "name", MAX_NAME)
        if not name:
            raise s.error("name", "is empty; give each zone a name")
        if name in where:
            raise s.error("name", f'"{name}" is already the name of zones[{where[name]}]')
        top = s.quantity("top", "length", sign="nonnegative")
        bottom = s.quantity("bottom", "length")
        if bottom <= top:
            raise s.error("bottom", f'"{entry["bottom"]}" is not below top "{entry["top"]}"')
        zone = Zone(
            name=name, top=top, bottom=bottom,
            static_level=s.quantity("static_level", "length", None, sign="any"),
            transmissivity=s.quantity("transmissivity", "transmissivity", None),
            conductivity=s.quantity("conductivity", "conductivity", None),
            storativity=s.number("storativity", None, 0.0, 1.0, open_low=True, open_high=True),
            skin=float(s.number("skin", 0.0)),
            conductance=s.quantity("conductance", "conductance", None),
            sublayers=_sublayers(s, top, bottom, label),
            **_entrance_losses(s),
            keep_level_above=s.flag("keep_level_above", False),
        )
        if zone.transmissivity is not None and zone.conductivity is not None:
            raise s.error("conductivity", "give transmissivity or conductivity, not both "
                                          f'(got "{entry["transmissivity"]}" and '
                                          f'"{entry["conductivity"]}")')
        s.done()
        zones.append(zone)
        where[name] = i
    ordered = sorted(zones, key=lambda z: z.top)
    for upper, lower in zip(ordered, ordered[1:], strict=False):
        if lower.top < upper.bottom:
            i = where[lower.name]
            raise InputError(
                f'zone "{lower.name}" (top "{entries[i - 1]["top"]}") overlaps zone '
                f'"{upper.name}" (bottom "{entries[where[upper.name] - 1]["bottom"]}")',
                file=label, field=f"zones[{i}].top")
    return ordered


def _entrance_losses(s: _Section) -> dict:
    """A zone's entrance losses (MNW2 form B q + C q |q|^(P-1)): ``loss_exponent`` P (1 to
    3.5), ``nonlinear_loss`` C in a unit of time^P / length^(3P-1) (e.g. "2 s2/ft5" for
    P = 2, "1e-6 d**2.5/m**6.5" for P = 2.5) and ``linear_loss`` B (time / length^2, e.g.
    "0.5 s/ft**2"), each converted to base units (d, m)."""
    p = float(s.number("loss_exponent", 2.0, 1.0, 3.5))
    if p == 2.0:
        c = s.quantity("nonlinear_loss", "nonlinear_loss", 0.0, sign="nonnegative")
    else:
        c = _loss_coefficient(s, "nonlinear_loss", p)
    return {"loss_exponent": p, "nonlinear_loss": c,
            "linear_loss": _loss_coefficient(s, "linear_loss", 1.0)}


def _loss_coefficient(s: _Section, key: str, p: float) -> float:
    """A loss coefficient of exponent ``p`` [d^p / m^(3p-1)] from a quantity string."""
    import pint

    from blendq.units import Q_, parse_unit

    raw = s.get(key, None)
    if raw is None:
        return 0.0
    unit = f"d**{p:g}/m**{3 * p - 1:g}"
    if not isinstance(raw, str):
        raise s.error(key, f'expected a quantity such as "1e-6 {unit}", got {raw!r}')
    number, _, text = raw.strip().partition(" ")
    try:
        value = float(Q_(float(number), parse_unit(text.strip())).to(unit).magnitude)
    except (ValueError, InputError, pint.errors.PintError) as err:
        raise s.error(key, f'"{raw}" is not a loss coefficient of exponent {p:g} (a unit of '
                           f'time^{p:g} / length^{3 * p - 1:g}, e.g. "1e-6 {unit}"): {err}') \
            from None
    if not value >= 0 or value == float("inf"):
        raise s.error(key, f'"{raw}" must be zero or more')
    return value


def _sublayers(s: _Section, top: float, bottom: float, label: str) -> tuple:
    """A zone's optional ``sublayers``: a list of { top, bottom, conductivity } tables inside
    the zone's open interval, not overlapping; returned as (top, bottom, K) in base units."""
    raw = s.get("sublayers", [])
    if not isinstance(raw, list) or not all(isinstance(v, dict) for v in raw):
        raise s.error("sublayers", 'expected a list such as [{ top = "120 ft", bottom = "130 ft", '
                                   f'conductivity = "40 ft/d" }}], got {raw!r}')
    rows = []
    for j, entry in enumerate(raw, start=1):
        sub = _Section(entry, f"{s.where}.sublayers[{j}]", label)
        t = sub.quantity("top", "length", sign="nonnegative")
        b = sub.quantity("bottom", "length")
        k = sub.quantity("conductivity", "conductivity")
        sub.done()
        if not (top <= t < b <= bottom):
            raise sub.error("bottom", f'"{entry["top"]}" to "{entry["bottom"]}" is not a layer '
                                      "inside the zone's open interval")
        rows.append((t, b, k))
    rows.sort()
    for (_, b1, _), (t2, _, _) in zip(rows, rows[1:], strict=False):
        if t2 < b1:
            raise s.error("sublayers", "sub-layers overlap")
    return tuple(rows)
def _report_fields(head: _Section) -> dict:
    """The report's optional [project] fields: who prepared and reviewed it, its date, paper."""
    out = {"prepared_by": head.text("prepared_by", ""),
           "reviewed_by": head.text("reviewed_by", "")}
    date = head.get("report_date", "")
    if isinstance(date, dt.datetime):
        date = date.date()
    if isinstance(date, dt.date):
        date = date.isoformat()
    elif not isinstance(date, str):
        raise head.error("report_date", f'expected a date such as 2026-05-20, got {date!r}')
    elif date.strip():
        try:
            date = dt.date.fromisoformat(date.strip()).isoformat()
        except ValueError:
            raise head.error("report_date", f'"{date}" is not a date such as 2026-05-20') \
                from None
    out["report_date"] = date.strip()
    paper = head.text("paper", "")
    if paper and paper.lower() not in ("a4", "letter"):
        raise head.error("paper", f'"{paper}" is not "Letter" or "A4"')
    out["paper"] = paper.lower()
    return out


def _settings(doc: dict, display_units: str, label: str) -> Settings:
    s, d = _Section(doc.get("settings", {}), "settings", label), Settings()
    sets = s.get("limit_sets", list(d.limit_sets))
    sets = [sets] if isinstance(sets, str) else sets
    if not isinstance(sets, list) or not all(isinstance(x, str) for x in sets):
        raise s.error("limit_sets", f'expected a list of names such as ["US-EPA"], got {sets!r}')
    for name in sets:
        try:
            limit_set(name)
        except InputError as err:
            raise located(err, label, None, "settings.limit_sets") from None
    model = s.text("conductance_model", d.conductance_model)
    if model not in CONDUCTANCE_MODELS:
        raise s.error("conductance_model", f'"{model}" is not one of {", ".join(CONDUCTANCE_MODELS)}')
    qa = s.get("qa", d.qa)
    if not isinstance(qa, dict):
        raise s.error("qa", f"expected a [settings.qa] table, got {qa!r}")
    fraction = {"low": 0.0, "high": 1.0, "open_low": True}
    settings = Settings(
        limit_sets=tuple(dict.fromkeys(sets)),
        margin=float(s.number("margin", d.margin, **fraction)),
        exceedance_probability=float(s.number("exceedance_probability",
                                              d.exceedance_probability, 0.0, 0.5, True)),
        sample_exceedance_probability=float(s.number(
            "sample_exceedance_probability", d.sample_exceedance_probability, 0.0, 0.5, True)),
        interval=float(s.number("interval", d.interval, **fraction, open_high=True)),
        horizon=s.quantity("horizon", "time", d.horizon),
        rate_grid_points=s.number("rate_grid_points", d.rate_grid_points, 3, 100_000,
                                  integer=True),
        rate_grid_max=s.quantity("rate_grid_max", "rate", d.rate_grid_max),
        draws=s.number("draws", d.draws, 1, 1_000_000, integer=True),
        seed=s.number("seed", d.seed, 0, None, integer=True),
        display_units=display_units,
        conductance_model=model,
        flowlog_relative_error=float(s.number("flowlog_relative_error",
                                              d.flowlog_relative_error, 0.0, 1.0)),
        flowlog_absolute_error=s.quantity("flowlog_absolute_error", "rate",
                                          d.flowlog_absolute_error, sign="nonnegative"),
        level_error=s.quantity("level_error", "length", d.level_error, sign="nonnegative"),
        default_relative_uncertainty=float(s.number("default_relative_uncertainty",
                                                    d.default_relative_uncertainty, 0.0, 1.0)),
        detection_limit_sigma_fraction=float(s.number("detection_limit_sigma_fraction",
                                                      d.detection_limit_sigma_fraction, 0.0,
                                                      1.0)),
        measured_exceedance_rate_tolerance=float(s.number(
            "measured_exceedance_rate_tolerance", d.measured_exceedance_rate_tolerance, 0.0,
            0.5)),
        fit_time_budget=float(s.number("fit_time_budget", d.fit_time_budget, 0.0, None, True)),
        qa=dict(qa),
        seal_leakage=float(s.number("seal_leakage", d.seal_leakage, 0.0, 1.0)),
        redevelopment_shortfall=float(s.number("redevelopment_shortfall",
                                               d.redevelopment_shortfall, 0.0, 1.0)),
        unresolved_tolerance=float(s.number("unresolved_tolerance", d.unresolved_tolerance,
                                            0.0, 1.0)),
        unseen_zone_factor=float(s.number("unseen_zone_factor", d.unseen_zone_factor, 1.0,
                                          None)),
        recommended_headroom=float(s.number("recommended_headroom", d.recommended_headroom,
                                            0.0, 0.5)),
        gross_outlier_factor=float(s.number("gross_outlier_factor", d.gross_outlier_factor,
                                            1.0, None, True)),
        min_window_steps=s.number("min_window_steps", d.min_window_steps, 2, 1000,
                                  integer=True),
        temporal_cv=_temporal_cv(s),
        fit_entrance_losses=s.flag("fit_entrance_losses", d.fit_entrance_losses),
        forecast_years=s.number("forecast_years", d.forecast_years, 1, 100, integer=True),
        time_model=_time_model(s),
        quarterly_trigger_fraction=float(s.number("quarterly_trigger_fraction",
                                                  d.quarterly_trigger_fraction, 0.0, 1.0, True)),
        history_condition_limit=float(s.number("history_condition_limit",
                                               d.history_condition_limit, 1.0, None)),
        pump_nominal_rate=s.quantity("pump_nominal_rate", "rate", d.pump_nominal_rate),
    )
    s.done()
    return settings


#: the time models of a zone concentration (blendq.fit.history)
TIME_MODELS = ("auto", "constant", "trend", "seasonal", "trend+seasonal")


def _time_model(s: _Section) -> dict[str, str]:
    """``time_model``: one name for every analyte, or a table analyte -> name."""
    value = s.get("time_model", None)
    if value is None:
        return {}
    if not isinstance(value, dict):
        value = {"default": value}
    out = {}
    for key, name in value.items():
        if name not in TIME_MODELS:
            raise s.error("time_model", f'"{name}" is not one of {", ".join(TIME_MODELS)}')
        if key == "default":
            out["default"] = name
            continue
        try:
            out[get_analyte(key).key] = name
        except InputError as err:
            raise located(err, s.file, None, f"{s.where}.time_model.{key}") from err
    return out


def _test(doc: dict, label: str) -> dict:
    """The ``[test]`` table: idle times for crossflow memory and the first-flush tolerance."""
    t = _Section(_table(doc, "test", label) if "test" in doc else {}, "test", label)
    d = Settings()
    out = {"idle_time_before_test": t.quantity("idle_time_before", "time", None,
                                               sign="nonnegative"),
           "idle_time_before_sample": t.quantity("idle_time_before_sample", "time", None,
                                                 sign="nonnegative"),
           "first_flush_tolerance": float(t.number("first_flush_tolerance",
                                                   d.first_flush_tolerance, 0.0, 1.0, True))}
    t.done()
    return out


#: largest accepted temporal coefficient of variation [-]
_CV_MAX = 5.0


def _temporal_cv(s: _Section) -> dict[str, float]:
    """``temporal_cv``: one number for every analyte, or a table analyte -> number (the key
    ``default`` for the analytes not named)."""
    value = s.get("temporal_cv", None)
    if value is None:
        return {}
    if not isinstance(value, dict):
        return {"default": float(s.number("temporal_cv", None, 0.0, _CV_MAX))}
    sub = _Section(value, f"{s.where}.temporal_cv", s.file)
    out = {}
    for key in value:
        cv = float(sub.number(key, None, 0.0, _CV_MAX))
        if key == "default":
            out["default"] = cv
            continue
        try:
            out[get_analyte(key).key] = cv
        except InputError as err:
            raise located(err, s.file, None, f"{sub.where}.{key}") from err
    return out


def _compliance(s: _Section, label: str) -> ComplianceBasis | None:
    text = s.text("compliance", None)
    if text is None:
        return None
    if text not in COMPLIANCE_BASES:
        raise s.error("compliance", f'"{text}" is not one of '
                                    + ", ".join(f'"{k}"' for k in COMPLIANCE_BASES))
    statistic, samples = COMPLIANCE_BASES[text]
    return ComplianceBasis(statistic, samples,
                           s.text("compliance_citation", f"{label} [[limits]]"), "user setting")


def _user_limits(doc: dict, label: str, limits: list[Limit]) -> list[Limit]:
    """The limits of the named sets with the user's ``[[limits]]`` applied.

    An entry with a ``value`` overrides the limit of the same ``authority`` and analyte when
    the named sets hold one (the entry replaces it and says which it replaced), else adds a
    limit; an entry with only ``compliance`` changes the compliance basis of the limits of that
    analyte (of ``authority`` when given) already in the list, which also counts as an
    override. Each entry's ``citation``, ``date``, ``status`` and ``checked`` are kept with it.
    """
    limits = list(limits)
    for i, entry in enumerate(_tables_list(doc, "limits", label), start=1):
        s = _Section(entry, f"limits[{i}]", label)
        origin = f"{label} limits[{i}]"
        try:
            analyte = get_analyte(s.text("analyte"))
        except InputError as err:
            raise located(err, label, None, f"limits[{i}].analyte") from err
        compliance = _compliance(s, label)
        if "value" not in entry and compliance is not None:
            authority = s.text("authority", s.text("name", None))
            hits = [k for k, lim in enumerate(limits) if lim.analyte == analyte.key
                    and (authority is None or lim.authority == authority)]
            if not hits:
                whose = f"{authority} " if authority else ""
                raise s.error("analyte", f"no {whose}limit of {analyte.key} to give a compliance "
                                         "basis to; add a value to make it a new limit")
            for k in hits:
                old = limits[k]
                limits[k] = replace(old, compliance=compliance,
                                    origin=f"{origin} (compliance basis)",
                                    replaces=old.replaces or
                                    f"{old.label()} judged on {old.compliance.describe()}")
            s.done()
            continue
        text = s.text("value")
        number, unit, basis_in_unit = split_unit_basis(text, with_number=True)
        if number is None or not math.isfinite(number) or number <= 0:
            raise s.error("value", f'"{text}" is not a positive number with a unit such as '
                                   '"10 mg/L"')
        basis = s.text("basis", basis_in_unit or "")
        try:
            basis = normalise_basis(analyte, basis or None)
            stated = normalise_basis(analyte, basis_in_unit) if basis_in_unit else basis
        except InputError as err:
            raise located(err, label, None, f"limits[{i}].basis", basis) from err
        if stated != basis:
            raise s.error("basis", f'"{entry["basis"]}" disagrees with the basis of the value '
                                   f'"{text}"; state the basis in one place or make them agree')
        authority = s.text("authority", s.text("name", "user"))
        same = [k for k, lim in enumerate(limits)
                if lim.authority == authority and lim.analyte == analyte.key]
        old = limits[same[0]] if same else None
        kind = s.text("kind", old.kind if old is not None else "user limit")
        limit = Limit(analyte.key, number, unit, basis, authority, kind,
                      s.text("citation", f"{label} [[limits]]"),
                      compliance if compliance is not None else
                      (old.compliance if old is not None else DEFAULT_BASIS),
                      s.text("date", ""), s.text("status", "user setting"),
                      s.text("checked", "user setting"), origin,
                      (old.replaces or old.label()) if old is not None else "")
        try:
            limit.canonical()
        except InputError as err:
            raise located(err, label, None, f"limits[{i}].value", text) from err
        s.done()
        if same:
            limits[same[0]] = limit
            for k in reversed(same[1:]):
                del limits[k]
        else:
            limits.append(limit)
    return limits


def _review_decisions(doc: dict, label: str) -> tuple[dict, ...]:
    """``[[review]]``: the reviewer's decisions on samples (sample, optional analyte, action,
    factor for a down-weighted result, and the reason, which is required)."""
    out = []
    for i, entry in enumerate(_tables_list(doc, "review", label), start=1):
        s = _Section(entry, f"review[{i}]", label)
        sample = s.text("sample")
        if not sample:
            raise s.error("sample", "is empty; give the sample_id the decision is about")
        analyte = s.text("analyte", "")
        if analyte:
            try:
                analyte = get_analyte(analyte).key
            except InputError as err:
                raise located(err, label, None, f"review[{i}].analyte") from err
        action = s.text("action")
        if action not in REVIEW_ACTIONS:
            raise s.error("action", f'"{action}" is not one of '
                                    + ", ".join(f'"{a}"' for a in REVIEW_ACTIONS))
        factor = float(s.number("factor", 3.0 if action == "downweight" else 1.0, 1.0, None))
        reason = s.text("reason")
        if not reason:
            raise s.error("reason", "is empty; say why (a reviewer reads it in the report)")
        s.done()
        out.append({"sample": sample, "analyte": analyte, "action": action, "factor": factor,
                    "reason": reason, "entry": i})
    return tuple(out)


def _scenarios(doc: dict, label: str) -> list[dict]:
    entries, seen = _tables_list(doc, "scenarios", label), {}
    for i, entry in enumerate(entries, start=1):
        name = entry.get("name")
        if not isinstance(name, str) or not name.strip():
            raise InputError(f"each scenario needs a name, got {name!r}", file=label,
                             field=f"scenarios[{i}].name")
        if name in seen:
            raise InputError(f'"{name}" is already the name of scenarios[{seen[name]}]',
                             file=label, field=f"scenarios[{i}].name")
        if len(name) > MAX_NAME:
            raise InputError(f'"{name[:20]}..." has {len(name)} characters; the limit for a '
                             f"scenario name is {MAX_NAME}", file=label,
                             field=f"scenarios[{i}].name")
        seen[name] = i
    return [dict(e) for e in entries]


def _table_paths(doc: dict, folder: Path, label: str
                 ) -> tuple[dict[str, tuple[Path, str]], dict[str, str]]:
    """Each table's (path, label) and the worksheets named for .xlsx files. A table is a path
    (``samples = "lab.csv"``) or a file and a worksheet (``samples = { file = "lab.xlsx",
    sheet = "Results" }``)."""
    # a project planning its test ([plan]) may have no tables yet
    planning = "plan" in doc
    if planning and "tables" not in doc:
        return {}, {}
    s = _Section(_table(doc, "tables", label), "tables", label)
    found, sheets = {}, {}
    for name in TABLE_COLUMNS:
        sheet = None
        if isinstance(s.data.get(name), dict):
            entry = _Section(s.get(name), f"tables.{name}", label)
            text, sheet = entry.text("file"), entry.text("sheet", None)
            entry.done()
            if sheet is not None and not sheet:
                raise entry.error("sheet", "is empty (name a worksheet, or leave the key out "
                                           "to read the first)")
        else:
            text = s.text(name) if name == "steps" and not planning else s.text(name, None)
        if text is None:
            continue
        path = folder / text
        try:
            is_file = bool(text) and path.is_file()
        except (OSError, ValueError):  # a name too long for the file system
            is_file = False
        if not is_file:
            what = "is a folder, not a file" if text and _is_dir(path) else "does not exist"
            raise s.error(name, f'file "{text}" {what} in {folder}')
        if path.suffix.lower() not in (".csv", ".txt", ".xlsx"):
            raise s.error(name, f'"{text}" is not a .csv or .xlsx file')
        if sheet is not None and path.suffix.lower() != ".xlsx":
            raise s.error(name, f'"{text}" is not an .xlsx workbook; only a workbook has '
                                "worksheets (leave out sheet)")
        found[name] = (path, Path(text).as_posix() if sheet is None
                       else sheet_label(Path(text).as_posix(), sheet))
        if sheet is not None:
            sheets[name] = sheet
    s.done()
    return found, sheets



def _is_dir(path: Path) -> bool:
    try:
        return path.is_dir()
    except (OSError, ValueError):
        return False


def resolve_project_file(path: str | Path) -> Path:
    """The project file for ``path`` (a project file or a folder holding ``project.toml``)."""
    path = Path(path)
    candidate = path / PROJECT_FILE if path.is_dir() else path
    if not candidate.is_file():
        raise InputError(f"project file not found: {candidate}", file=candidate.name)
    return candidate


def read_project_file(path: str | Path) -> ProjectFile:
    """Read and check a project file.

    Parameters
    ----------
    path : str or Path
        The project file or a folder holding ``project.toml``.

    Returns
    -------
    ProjectFile
        Everything but the tables' contents, in base units; table paths checked to exist.

    Raises
    ------
    InputError
        Naming the file and the dotted key, with the value received.
    """
    project_file = resolve_project_file(path)
    label = project_file.name
    doc = _read_toml(project_file)
    for key in doc:
        if key not in SECTIONS:
            raise InputError(f'"{key}" is not a table blendq knows (known: {", ".join(SECTIONS)})',
                             file=label, field=key)
    head = _Section(_table(doc, "project", label), "project", label)
    name = head.text("name")
    units = head.text("display_units", Settings().display_units)
    if units.strip().upper() not in {u.upper() for u in UNIT_SYSTEMS}:
        raise head.error("display_units", f'"{units}" is not ' +
                         ", ".join(f'"{u}"' for u in UNIT_SYSTEMS[:-1]) +
                         f' or "{UNIT_SYSTEMS[-1]}"')
    units = unit_system(units)
    report_fields = _report_fields(head)
    head.done()
    well, zones = _well(doc, label), _zones(doc, label)
    settings = replace(_settings(doc, units, label), **report_fields, **_test(doc, label),
                       review_decisions=_review_decisions(doc, label))
    limits = _user_limits(doc, label, [lim for s in settings.limit_sets for lim in limit_set(s)])
    tables, sheets = _table_paths(doc, project_file.parent, label)
    return ProjectFile(name, well, zones, settings, limits, _scenarios(doc, label), tables,
                       project_file, sheets)
