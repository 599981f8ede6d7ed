"""Read a blendq project: a TOML project file and its tables, checked, in base units.

:func:`load_project` is the one entry point. It reads ``project.toml`` (see
:mod:`blendq.inputs.project_file`), the tables it names (cells and header units by
:mod:`blendq.inputs.tables`), checks each table's rows and the links between tables, converts
every quantity to the core's base units (m, m^3/d, d, mg/L on the analyte's canonical basis;
see :mod:`blendq.units`) and returns a :class:`blendq.inputs.project.Project`. Any problem is an
:class:`~blendq.errors.InputError` naming the file, the row (1-based data row, header = row 0)
and the field, with the value received. Files are opened for reading only; the format is
described in ``docs/input-files.md``.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte, implied_basis, normalise_basis, to_canonical
from blendq.errors import InputError
from blendq.inputs.project import TABLE_COLUMNS, Project
from blendq.inputs.project_file import read_project_file
from blendq.inputs.tables import (
    MAX_UNIT,
    Table,
    located,
    no_collection,
    one_line,
    read_table,
    split_unit_basis,
)
from blendq.units import parse_unit

#: a flow log's stated rate may differ from the rate of the step it names by this fraction
#: [-] (common practice: a step's rate is held and metered to within a few percent)
FLOWLOG_RATE_TOLERANCE = 0.10
#: a sample depth more than this multiple of the deepest zone's bottom is refused as a typo
#: [-] (a plausibility bound: a well's sump is far shorter than its screened depth)
DEPTH_TYPO_FACTOR = 2.0


def _steps(t: Table) -> pd.DataFrame:
    """The steps in time order when every step has a start (file order otherwise); the
    ``recovered_before`` default (true for the first step, false after) follows that order."""
    out, seen = [], {}
    for row, get in t.records():
        step = get("step")
        if step in seen:
            raise t.error(row, "step", f'"{step}" is already the id of row {seen[step]}')
        seen[step] = row
        rate = get("rate")
        if rate < 0:
            raise t.error(row, "rate", f'"{t.raw(row, "rate")}" is negative')
        start, end, duration = get("start"), get("end"), get("duration")
        if duration is not None and duration <= 0:
            raise t.error(row, "duration", f'"{t.raw(row, "duration")}" is not positive')
        if start is not None and end is not None:
            span = (end - start) / pd.Timedelta(days=1)
            if span <= 0:
                raise t.error(row, "end", f'"{t.raw(row, "end")}" is not after the start')
            if duration is not None and abs(span - duration) > 1.0 / 1440:
                raise t.error(row, "duration", f'"{t.raw(row, "duration")}" differs from end '
                                               "minus start by more than a minute")
            duration = span
        elif start is not None and duration is not None:
            end = _shifted(t, row, start, duration)
        elif end is not None and duration is not None:
            start = _shifted(t, row, end, -duration)
        out.append([step, rate, start, end, duration, get("pumping_level"),
                    get("recovered_before"), row])
    if all(r[2] is not None for r in out):
        out.sort(key=lambda r: r[2])  # stable: equal starts keep the file's order
        for a, b in zip(out, out[1:], strict=False):
            if b[3] is not None and a[3] is not None and b[2] < a[3] - pd.Timedelta(seconds=1):
                raise t.error(b[7], "start", f'"{t.raw(b[7], "start")}" is before the end of '
                                             f'step "{a[0]}" (row {a[7]}, ends {a[3]}); steps '
                                             "must not overlap")
    for n, r in enumerate(out):
        r[6] = (n == 0) if r[6] is None else r[6]
    return _frame("steps", out)


def _shifted(t: Table, row: int, stamp: pd.Timestamp, days: float) -> pd.Timestamp:
    """``stamp`` moved by ``days``; a duration that leaves the datetime range is an error."""
    try:
        moved = stamp + pd.Timedelta(days=days)
    except (OverflowError, ValueError):  # pandas' out-of-bounds errors are ValueErrors
        moved = None
    if moved is None or not pd.Timestamp.min <= moved <= pd.Timestamp.max:
        raise t.error(row, "duration", f'"{t.raw(row, "duration")}" is too long (the step '
                                       "would end outside the years 1678 to 2261)")
    return moved


def _this_well(t: Table, well: str) -> int:
    """Keep the rows whose ``well`` cell names ``well`` (case and outer spaces ignored), when
    the table has a well column; return the number of rows dropped (other wells' rows are
    counted, not read)."""
    if "well" not in t.columns:
        return 0
    name = well.strip().casefold()
    cells = t.column("well")
    keep = {row for (row, _), cell in zip(t.rows, cells, strict=True) if cell.casefold() == name}
    if not keep:
        found = sorted(set(cells))
        shown = ", ".join(f'"{w}"' for w in found[:5]) + (", ..." if len(found) > 5 else "")
        raise t.error(None, "well", f'no row names the well "{well}" (found: {shown})')
    dropped = len(t.rows) - len(keep)
    if dropped:
        t.keep(keep)
    return dropped


def _samples(t: Table, steps: dict[str, float], deepest: float) -> pd.DataFrame:
    if "unit" not in t.columns and t.unit("value") is None:
        raise t.error(0, "unit", "column is missing; add a unit column or a unit in the value "
                                 'header such as "value [mg/L]"')
    fast = _samples_by_column(t, steps, deepest)
    if fast is not None:
        return fast
    out, seen, analytes, factors, units = [], {}, {}, {}, {}
    header_unit = t.unit("value")
    for row, get in t.records():
        sample_id, step = get("sample_id"), get("step")
        _known_step(t, row, step, steps)
        name = get("analyte")
        try:
            analyte = analytes[name] if name in analytes else get_analyte(name)
        except InputError as err:
            raise located(err, t.label, row, "analyte", t.raw(row, "analyte")) from err
        analytes[name] = analyte
        if (sample_id, analyte.key) in seen:
            raise t.error(row, "analyte", f'sample "{sample_id}" already has a {analyte.key} '
                                          f"result in row {seen[sample_id, analyte.key]}")
        seen[sample_id, analyte.key] = row
        combination = (name, t.raw(row, "unit"), t.raw(row, "basis"))
        if combination not in units:  # a long table repeats a few of them: each checked once
            units[combination] = _sample_unit(t, row, get, analyte, header_unit, factors)
        unit, basis_text, factor = units[combination]
        value, nondetect, dl, uncertainty, reported = _sample_value(t, row, get, factor)
        analyzed, sampled = get("analyzed_at"), get("sampled_at")
        if analyzed is not None and sampled is not None and analyzed < sampled:
            raise t.error(row, "analyzed_at", f'"{t.raw(row, "analyzed_at")}" is before '
                                              f'sampled_at "{t.raw(row, "sampled_at")}"')
        depth = get("depth")
        if depth is not None and depth < 0:
            raise t.error(row, "depth", f'"{t.raw(row, "depth")}" is above the datum')
        if depth is not None and depth > DEPTH_TYPO_FACTOR * deepest:
            raise t.error(row, "depth", f'"{t.raw(row, "depth")}" is more than '
                                        f"{DEPTH_TYPO_FACTOR:g} times the depth of the deepest "
                                        f"zone's bottom ({deepest:.4g} m); a typing error?")
        out.append([sample_id, step, analyte.key, value, nondetect, dl, uncertainty,
                    get("qualifier") or "", sampled, analyzed, get("duplicate_of") or "",
                    math.nan if depth is None else depth, get("preservation") or "",
                    reported, unit, basis_text, row])
    ids = {r[0] for r in out}
    for r in out:
        if r[10] and (r[10] not in ids or r[10] == r[0]):
            raise t.error(r[-1], "duplicate_of", f'"{r[10]}" is not the sample_id of another '
                                                 "sample in this file")
    return _frame("samples", out)


def _samples_by_column(t: Table, steps: dict[str, float], deepest: float
                       ) -> pd.DataFrame | None:
    """The samples table read column by column: each distinct text of a column is parsed and
    checked once, and the checks that join cells of a row run on arrays. Returns None when any
    row breaks a rule; :func:`_samples` then reads the rows one by one, in file order, and
    refuses the first bad one with its row, field and value (so the message does not depend
    on which way the table was read). The result equals that of the row-by-row reading."""
    n, rows = len(t.rows), [row for row, _ in t.rows]

    def parsed(column: str, read=t.value) -> list | None:
        """Parsed value of ``column`` in each row (None when empty), or None if a cell is bad;
        each distinct text is read once (an error's row does not matter here)."""
        texts = t.column(column) or [""] * n
        try:
            values = {text: read(rows[0], column, text) for text in dict.fromkeys(texts)}
        except InputError:
            return None
        return list(map(values.__getitem__, texts))

    def numbers(column: str) -> np.ndarray | None:
        """:meth:`Table.number_in` of each row of ``column``, or None if a cell is bad."""
        values = parsed(column, t.number_in)
        return None if values is None else np.array(values, dtype=float)

    sample_id, step, name = parsed("sample_id"), parsed("step"), parsed("analyte")
    if sample_id is None or step is None or name is None or not set(step) <= steps.keys():
        return None
    analytes = {}
    for text in set(name):
        try:
            analytes[text] = get_analyte(text)
        except InputError:
            return None
    keys = [analytes[text].key for text in name]
    if len(set(zip(sample_id, keys, strict=True))) < n:
        return None
    header_unit, factors, units = t.unit("value"), {}, {}
    unit_col, basis_col = t.column("unit") or [""] * n, t.column("basis") or [""] * n
    combinations = list(zip(name, unit_col, basis_col, strict=True))
    for k, combination in enumerate(combinations):
        if combination not in units:
            try:
                units[combination] = _sample_unit(
                    t, rows[k], lambda column, row=rows[k]: t.value(row, column),
                    analytes[combination[0]], header_unit, factors)
            except InputError:
                return None
    flagged = parsed("nondetect")
    number, dl = numbers("value"), numbers("detection_limit")
    sampled, analyzed, depth = parsed("sampled_at"), parsed("analyzed_at"), parsed("depth")
    if any(v is None for v in (flagged, number, dl, sampled, analyzed, depth)):
        return None
    raw = t.column("value") or [""] * n
    marked = np.array([v.startswith("<") or v.lower() in _NONDETECT_WORDS for v in raw])
    said_false = np.array([f is False for f in flagged])
    nondetect = np.array([bool(f) for f in flagged]) | marked
    if np.any(said_false & marked) or np.any(~nondetect & np.isnan(number)) \
            or np.any(number < 0):
        return None
    missing_dl = np.isnan(dl)
    if np.any(nondetect & ~missing_dl & ~np.isnan(number)
              & ~np.array([math.isclose(a, b, rel_tol=1e-9) for a, b in zip(number, dl,
                                                                              strict=True)])):
        return None
    dl = np.where(nondetect & missing_dl, number, dl)
    if np.any(nondetect & np.isnan(dl)) or np.any(dl <= 0):
        return None
    unc_text = t.column("uncertainty") or [""] * n
    share = [k for k, v in enumerate(unc_text) if v.endswith("%")]
    unc = numbers("uncertainty") if not share else np.full(n, math.nan)
    if unc is None:
        return None
    try:
        for k in range(n) if share else ():
            unc[k] = t.share_or_number(rows[k], "uncertainty", float(number[k]))
    except InputError:
        return None
    if np.any(unc < 0):
        return None
    factor = np.array([units[c][2] for c in combinations])
    with np.errstate(over="ignore", invalid="ignore"):
        value = np.where(nondetect, math.nan, number * factor)
        uncertainty = np.where(nondetect, math.nan, unc * factor)
        dl_base = dl * factor
    if np.any(np.isinf(value) | np.isinf(uncertainty) | np.isinf(dl_base)):
        return None
    if any(a is not None and s is not None and a < s
           for a, s in zip(analyzed, sampled, strict=True)):
        return None
    if any(d is not None and (d < 0 or d > DEPTH_TYPO_FACTOR * deepest) for d in depth):
        return None
    qualifier, duplicate_of, preservation = (parsed(c) for c in
                                             ("qualifier", "duplicate_of", "preservation"))
    ids = set(sample_id)
    if any(d and (d not in ids or d == own) for d, own in zip(duplicate_of, sample_id,
                                                              strict=True)):
        return None
    unit = [units[c] for c in combinations]
    return _frame_of_columns("samples", [
        sample_id, step, keys, value.tolist(), nondetect.tolist(), dl_base.tolist(),
        uncertainty.tolist(), [q or "" for q in qualifier], sampled, analyzed,
        [d or "" for d in duplicate_of], [math.nan if d is None else d for d in depth],
        [p or "" for p in preservation], number.tolist(), [u[0] for u in unit],
        [u[1] for u in unit], rows])


def _sample_unit(t: Table, row: int, get, analyte, header_unit: str | None,
                 factors: dict) -> tuple[str, str, float]:
    """(unit, basis as written, factor to canonical mg/L) of a result row, checked; a
    function of the row's analyte, unit and basis cells (and the value header), so that
    :func:`_samples` checks each combination once."""
    unit_text = get("unit") or header_unit
    if not unit_text:
        raise t.error(row, "unit", "is empty; give the unit of the value")
    if len(unit_text) > MAX_UNIT:
        raise t.error(row, "unit", f'"{unit_text[:20]}..." has {len(unit_text):,} '
                                   f"characters; the limit is {MAX_UNIT}")
    if header_unit and unit_text != header_unit:
        _same_unit(t, row, unit_text, header_unit)
    _, unit, unit_basis = split_unit_basis(unit_text)
    basis_text = get("basis") or ""
    named = implied_basis(t.raw(row, "analyte"))
    if named and not (basis_text or unit_basis):
        basis_text = named  # "Nitrate-N", "NO3-N", "nitrate as N": the name states it
    elif named and _row_basis(t, row, analyte, basis_text or unit_basis) != \
            _row_basis(t, row, analyte, named):
        raise t.error(row, "basis", f'"{basis_text or unit_basis}" disagrees with the '
                                    f'analyte name "{t.raw(row, "analyte")}"')
    basis = _row_basis(t, row, analyte, basis_text or unit_basis)
    if unit_basis and basis_text and _row_basis(t, row, analyte, unit_basis) != basis:
        raise t.error(row, "basis", f'"{basis_text}" disagrees with the unit "{unit_text}"')
    basis_text = basis_text or unit_basis or ""
    factor = _factor(t, row, analyte, unit, basis, unit_text, factors)
    return unit, basis_text, factor


def _factor(t: Table, row: int, analyte, unit: str, basis: str, unit_text: str,
            cache: dict) -> float:
    """Factor from ``unit`` (on ``basis``) to canonical mg/L, cached per (analyte, unit,
    basis): a long table repeats a few units."""
    key = (analyte.key, unit, basis)
    if key not in cache:
        try:
            cache[key] = to_canonical(1.0, unit, analyte, basis or None)
        except InputError as err:
            raise located(err, t.label, row, "unit", unit_text) from err
    return cache[key]


def _same_unit(t: Table, row: int, unit_text: str, header_text: str) -> None:
    """Refuse a row whose unit column names another unit than the value header (a basis
    written in only one of them is allowed: the header then gives none)."""
    unit, header = split_unit_basis(unit_text)[1], split_unit_basis(header_text)[1]
    try:
        same = unit == header or math.isclose(
            (1.0 * parse_unit(unit)).to(parse_unit(header)).magnitude, 1.0, rel_tol=1e-9)
    except Exception:  # noqa: BLE001 - pint: other dimension, or a unit it cannot read
        same = False
    if not same:
        raise t.error(row, "unit", f'"{unit_text}" disagrees with the unit of the value header '
                                   f'"[{header_text}]"; give the unit in one place or make '
                                   "them agree")


def _row_basis(t: Table, row: int, analyte, text: str | None) -> str:
    try:
        return normalise_basis(analyte, text or None)
    except InputError as err:
        raise located(err, t.label, row, "basis", text) from err


_NONDETECT_WORDS = {"nd", "n.d.", "<dl", "<rl", "<mdl", "bdl"}


def _sample_value(t: Table, row: int, get, factor: float) -> tuple:
    """(value, nondetect, detection limit, uncertainty, reported number) of one result.

    The first four are in canonical mg/L; the reported number is as written (NaN if none).
    """
    raw = t.raw(row, "value")
    marked = raw.startswith("<") or raw.lower() in _NONDETECT_WORDS
    flagged = get("nondetect")
    if flagged is False and marked:
        raise t.error(row, "nondetect", f'says false but the value is "{raw}"')
    nondetect = bool(flagged) or marked
    try:
        number = t.number_in(row, "value")
    except InputError as err:
        raise t.error(row, "value", f'{err.message} (expected e.g. "4.2", "<0.5" or "ND")') from None
    if not nondetect and math.isnan(number):
        raise t.error(row, "value", "is empty; give the result or mark it as a non-detect")
    if number < 0:
        raise t.error(row, "value", f'"{raw}" is negative')
    dl = t.number_in(row, "detection_limit")
    if nondetect:
        if math.isnan(dl):
            dl = number
        elif not math.isnan(number) and not math.isclose(number, dl, rel_tol=1e-9):
            raise t.error(row, "detection_limit", f'"{t.raw(row, "detection_limit")}" differs '
                                                  f'from the limit in the value "{raw}"')
        if math.isnan(dl):
            raise t.error(row, "detection_limit", "is empty; a non-detect needs its detection "
                                                  'limit (or write the value as "<0.5")')
    if dl <= 0:
        raise t.error(row, "detection_limit", f'"{t.raw(row, "detection_limit")}" is not positive')
    unc = t.share_or_number(row, "uncertainty", number)
    value = math.nan if nondetect else number * factor
    uncertainty = math.nan if nondetect else unc * factor
    for column, base in (("value", value), ("detection_limit", dl * factor),
                         ("uncertainty", uncertainty)):
        if math.isinf(base):  # a finite number that overflows in mg/L (1e308 g/L)
            raise t.error(row, column, f'"{t.raw(row, column)}" is too large (not a finite '
                                       "number once converted to mg/L)")
    return value, nondetect, dl * factor, uncertainty, number


def _flowlogs(t: Table, steps: dict[str, float]) -> pd.DataFrame:
    out, logs = [], {}
    for row, get in t.records():
        log, step, rate = get("log"), get("step") or "", get("rate")
        if step:
            _known_step(t, row, step, steps)
        if rate is None:
            if not step:
                raise t.error(row, "rate", "is empty and no step is given; give the pumping "
                                           "rate of the log (0 for ambient)")
            rate = steps[step]
        elif step and abs(rate - steps[step]) > FLOWLOG_RATE_TOLERANCE * steps[step]:
            raise t.error(row, "rate", f'"{t.raw(row, "rate")}" contradicts the rate of step '
                                       f'"{step}" ({steps[step]:.6g} m3/d; more than '
                                       f"{FLOWLOG_RATE_TOLERANCE:.0%} apart); correct the rate "
                                       "or the step")
        if rate < 0:
            raise t.error(row, "rate", f'"{t.raw(row, "rate")}" is negative')
        first_row, first_rate, first_step = logs.setdefault(log, (row, rate, step))
        if first_step != step:
            raise t.error(row, "step", f'"{step}" differs from the step "{first_step}" of log '
                                       f'"{log}" in row {first_row}; one log is one run')
        if not math.isclose(first_rate, rate, rel_tol=1e-9, abs_tol=1e-12):
            raise t.error(row, "rate", f'"{t.raw(row, "rate")}" differs from the rate of log '
                                       f'"{log}" in row {first_row}; one log is run at one rate')
        depth = get("depth")
        if depth < 0:
            raise t.error(row, "depth", f'"{t.raw(row, "depth")}" is above the datum')
        out.append([log, step, rate, depth, get("upward_flow"), row])
    return _frame("flowlogs", out)


def _levels(t: Table) -> pd.DataFrame:
    """The level record; a reading repeated at the same time with the same level is read
    once, with a different level it is refused."""
    out, seen = [], {}
    for row, get in t.records():
        time, level = get("time"), get("level")
        if time in seen:
            first_row, first = seen[time]
            if not math.isclose(level, first, rel_tol=1e-9, abs_tol=1e-9):
                raise t.error(row, "level", f'"{t.raw(row, "level")}" differs from the reading '
                                            f'at the same time in row {first_row} '
                                            f'("{t.raw(first_row, "level")}"); keep one')
            continue
        seen[time] = (row, level)
        out.append([time, level, row])
    return _frame("levels", out)


#: parameter columns of the field table
FIELD_PARAMETERS = ("temperature", "ph", "specific_conductance", "dissolved_oxygen", "turbidity")


def _field(t: Table, steps: dict[str, float]) -> pd.DataFrame:
    measured = FIELD_PARAMETERS
    if not any(c in t.columns for c in measured):
        raise t.error(0, measured[0], "no field parameter columns found (expected one or more "
                                      f"of {', '.join(measured)})")
    out = []
    for row, get in t.records():
        step = get("step")
        _known_step(t, row, step, steps)
        values = [get(c) for c in measured]
        for c, v in zip(measured, values, strict=True):
            low, high = (0.0, 14.0) if c == "ph" else (-math.inf if c == "temperature" else 0.0,
                                                       math.inf)
            if v is not None and not low <= v <= high:
                expected = "0 to 14" if c == "ph" else "zero or more"
                raise t.error(row, c, f'"{t.raw(row, c)}" is out of range (expected {expected})')
        out.append([step, get("time")] + [math.nan if v is None else v for v in values] + [row])
    return _frame("field", out)


def _known_step(t: Table, row: int, step: str, steps: dict[str, float]) -> None:
    if step not in steps:
        known = ", ".join(f'"{s}"' for s in steps)
        raise t.error(row, "step", f'"{step}" is not a step of the steps table (known: {known})')


def _frame(name: str, rows: list[list]) -> pd.DataFrame:
    return _frame_of_columns(name, [list(c) for c in zip(*rows, strict=True)] if rows
                             else [[] for _ in TABLE_COLUMNS[name]])


def _frame_of_columns(name: str, cells: list[list]) -> pd.DataFrame:
    """Table ``name`` from the values of each of its columns (:data:`TABLE_COLUMNS` order)."""
    frame = pd.DataFrame(dict(zip(TABLE_COLUMNS[name], cells, strict=True)))
    rows_by_column = dict(zip(TABLE_COLUMNS[name], cells, strict=True))
    for col in frame.columns:
        if col in ("start", "end", "time", "sampled_at", "analyzed_at"):
            frame[col] = pd.to_datetime(frame[col]).astype("datetime64[ns]")
        elif col in ("recovered_before", "nondetect"):
            frame[col] = frame[col].astype(bool)
        elif col == "source_row":
            frame[col] = frame[col].astype(int)
        elif all(k is type(None) or issubclass(k, float)
                 for k in set(map(type, rows_by_column[col]))):
            frame[col] = frame[col].astype(float)
    return frame


def load_project(path: str | Path) -> Project:
    """Read, check and convert a blendq project.

    Parameters
    ----------
    path : str or Path
        The project file (TOML) or a folder holding ``project.toml``.

    Returns
    -------
    Project
        Well, zones, settings, limits (the named sets followed by the user's own) and tables,
        all in base units: m, m^3/d, d, mg/L on each analyte's canonical basis.

    Raises
    ------
    InputError
        For any problem, naming file, row (1-based data row; header = row 0) and field.

    Notes
    -----
    The format is described in ``docs/input-files.md``. Reading never writes to any file.
    """
    try:
        with no_collection():  # a long table makes many small objects and no cycles
            return _load(path)
    except InputError as err:  # a cell or key may hold a line break: keep the message one line
        raise InputError(one_line(err.message), file=one_line(err.file or "") or None,
                         row=err.row, field=one_line(err.field or "") or None) from None


def _load(path: str | Path) -> Project:
    head = read_project_file(path)
    if "steps" not in head.tables:  # a project that only plans its test ([plan])
        raise InputError("no steps table yet: this project plans its test; `blendq plan` "
                         "reads it, the other commands need the test's steps",
                         file=head.path.name, field="tables.steps")
    files = {"project": head.path.name} | {k: v[1] for k, v in head.tables.items()}
    tables = {k: read_table(p, lbl, k, head.sheets.get(k)) for k, (p, lbl) in head.tables.items()}
    steps = _steps(tables["steps"])
    step_rates = dict(zip(steps["step"], steps["rate"], strict=True))
    project = Project(name=head.name, well=head.well, zones=head.zones, settings=head.settings,
                      limits=head.limits, steps=steps, scenarios=head.scenarios,
                      folder=head.path.parent, files=files)
    if "samples" in tables:
        other = _this_well(tables["samples"], head.well.name)
        if other:
            project.notes.append(f"{files['samples']}: {other:,} rows of other wells (well "
                                 "column) counted and not read")
        deepest = max(z.bottom for z in head.zones)
        project.samples = _samples(tables["samples"], step_rates, deepest)
    if "flowlogs" in tables:
        project.flowlogs = _flowlogs(tables["flowlogs"], step_rates)
    if "levels" in tables:
        project.levels = _levels(tables["levels"])
    if "field" in tables:
        project.field_readings = _field(tables["field"], step_rates)
    if "pumplog" in tables or "history" in tables:
        from blendq.inputs.monitoring import read_history, read_pumplog

        if "pumplog" in tables:
            project.pumplog = read_pumplog(tables["pumplog"], head.settings.pump_nominal_rate)
        if "history" in tables:
            _this_well(tables["history"], head.well.name)
            project.history = read_history(tables["history"], project.pumplog)
    return project

