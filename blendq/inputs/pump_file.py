"""Read the optional ``[pump]`` table of a project file and the pump curve it names.

``[pump]`` describes the installed pump and its drive: the head-capacity curve (a table with
``rate``, ``head`` and, where the maker gives it, ``efficiency`` in percent; units in the header
as in every blendq table), the rated and the drive's frequencies, the pump column, the discharge
pressure or head at the wellhead, the fittings' minor-loss coefficients, and the seasonal
range of static levels. A project without ``[pump]`` behaves as before (:func:`read_pump`
returns None). Errors name the file and the dotted key (``pump.column_diameter``) or the
curve's row and column. A "new pump" option (``pump = {...}`` in a ``[[scenarios]]`` entry) is
read by :func:`option_pump`: its keys replace those of ``[pump]``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from blendq.errors import InputError
from blendq.inputs.project_file import _read_toml, _Section, resolve_project_file
from blendq.inputs.tables import read_table
from blendq.units import ureg

#: efficiency of an induction motor driving a well pump [-] (common practice: premium
#: efficiency motors of 10 to 100 hp run near 0.90 to 0.95 at load)
MOTOR_EFFICIENCY = 0.92
#: efficiency of a variable-frequency drive [-] (common practice: 0.95 to 0.98 at load)
DRIVE_EFFICIENCY = 0.97
#: density [kg/m^3] and gravity [m/s^2] that turn a discharge pressure into head
_RHO_G = 999.1 * 9.80665


@dataclass(frozen=True)
class PumpSpec:
    """The installed pump, its drive and column, in base units.

    Attributes
    ----------
    curve_rate, curve_head : ndarray
        The maker's curve at rated speed: rate [m^3/d] and total dynamic head [m].
    curve_efficiency : ndarray or None
        Pump efficiency [-] at each rate (None when the curve has no efficiency column).
    curve_file : str
    rated_frequency, min_frequency, max_frequency : float
        Frequency [Hz] at which the curve was measured, and the drive's range.
    rated_speed : float or None
        Rated speed [rpm] (shown only; the affinity laws use the frequency ratio).
    column_length, column_diameter : float
        Pump column (drop pipe) length and inside diameter [m].
    roughness : float or None
        Absolute roughness [m] (Darcy-Weisbach).
    hazen_williams_c : float or None
    discharge_head : float
        Head at the wellhead above the well's datum [m].
    static_levels : dict
        Season name -> static level [m depth below the datum].
    motor_efficiency, drive_efficiency : float
    minor_loss_k : float
        Sum of the resistance coefficients K [-] of the column and discharge fittings (valves,
        elbows, check valve, pitless adapter, meter), referred to the column diameter.
    """

    curve_rate: np.ndarray
    curve_head: np.ndarray
    curve_efficiency: np.ndarray | None
    curve_file: str
    rated_frequency: float
    min_frequency: float
    max_frequency: float
    column_length: float
    column_diameter: float
    roughness: float | None = None
    hazen_williams_c: float | None = None
    discharge_head: float = 0.0
    static_levels: dict[str, float] = field(default_factory=dict)
    rated_speed: float | None = None
    motor_efficiency: float = MOTOR_EFFICIENCY
    drive_efficiency: float = DRIVE_EFFICIENCY
    minor_loss_k: float = 0.0


def _unit_value(s: _Section, key: str, unit: str, example: str, default=None):
    """A quantity with a unit outside the core's kinds (frequency, speed, pressure)."""
    value = s.get(key, default)
    if key not in s.data:
        return value
    if not isinstance(value, str):
        raise s.error(key, f'expected a quantity such as "{example}", got {value!r}')
    try:
        number = float(ureg.Quantity(value).to(unit).magnitude)
    except Exception:  # noqa: BLE001 - pint raises many kinds for a bad unit or dimension
        raise s.error(key, f'"{value}" is not a quantity in {unit} or a unit convertible to '
                           f'it (e.g. "{example}")') from None
    if not np.isfinite(number) or number <= 0:
        raise s.error(key, f'"{value}" must be a finite quantity greater than zero')
    return number


def _curve(path: Path, label: str, s: _Section) -> tuple:
    table = read_table(path, label, "pump_curve")
    rate, head, eff = [], [], []
    for row, get in table.records():
        q, h, e = get("rate"), get("head"), get("efficiency")
        if q < 0:
            raise table.error(row, "rate", "must be zero or more")
        if h < 0:
            raise table.error(row, "head", "must be zero or more")
        if rate and q <= rate[-1]:
            raise table.error(row, "rate", "must be larger than the rate of the row above "
                                           "(write the curve from low to high rate)")
        if head and h > head[-1]:
            raise table.error(row, "head", "rises with the rate; blendq needs a curve whose "
                                           "head falls as the rate rises")
        if e is not None and not 0 < e <= 100:
            raise table.error(row, "efficiency", f"{e:g} is not a percent in (0, 100]")
        rate.append(q)
        head.append(h)
        eff.append(e)
    if len(rate) < 2:
        raise InputError("needs at least two rows (rate, head)", file=label)
    given = [e is not None for e in eff]
    if any(given) and not all(given):
        row = given.index(False) + 1
        raise InputError("is empty while other rows give an efficiency (give it on every row "
                         "or on none)", file=label, row=row, field="efficiency")
    efficiency = np.array(eff, float) / 100.0 if all(given) else None
    return np.array(rate), np.array(head), efficiency


def read_pump(path: str | Path) -> PumpSpec | None:
    """The ``[pump]`` table of a project file, or None when the project has none.

    Parameters
    ----------
    path : str or Path
        The project file or its folder.

    Returns
    -------
    PumpSpec or None

    Raises
    ------
    InputError
        Naming the file and the dotted key, or the curve file's row and column.
    """
    project_file = resolve_project_file(path)
    doc = _read_toml(project_file)
    if "pump" not in doc:
        return None
    return pump_from_table(doc["pump"], project_file.parent, project_file.name, "pump")


#: keys of which a table gives one or the other: an option giving one drops the other
_EITHER = (("roughness", "hazen_williams_c"), ("discharge_pressure", "discharge_head"))


def option_pump(table, project_file: str | Path, where: str) -> PumpSpec:
    """A new pump of an option: its keys (at least ``curve``) over the project's ``[pump]``.

    Parameters
    ----------
    table : dict
        The option's ``pump`` table, e.g. ``{curve = "pump-b.csv", rated_speed = "3550 rpm"}``;
        a relative curve path is read from the project's folder.
    project_file : str or Path
        The project file (or its folder), whose ``[pump]`` gives the keys the option leaves
        out (column, discharge head, seasonal static levels). Without ``[pump]`` the option's
        table must give every required key.
    where : str
        Dotted key of the table for messages, e.g. ``scenarios[4].pump``.

    Raises
    ------
    InputError
        Naming ``where`` and the key, or the curve file's row and column.
    """
    project_file = resolve_project_file(project_file)
    label = project_file.name
    if not isinstance(table, dict):
        raise InputError(f'expected a table such as {{ curve = "pump-b.csv" }}, got {table!r}',
                         file=label, field=where)
    if "curve" not in table:
        raise InputError("a new pump needs its curve (a table of rate, head and efficiency)",
                         file=label, field=f"{where}.curve")
    base = dict(_read_toml(project_file).get("pump", {}))
    for pair in _EITHER:
        if any(k in table for k in pair):
            for k in pair:
                base.pop(k, None)
    return pump_from_table({**base, **table}, project_file.parent, label, where)


def pump_from_table(table, folder: Path, label: str, where: str = "pump") -> PumpSpec:
    """A :class:`PumpSpec` from a ``[pump]``-like table; a relative curve path is read from
    ``folder``; errors name ``label`` and ``where.key``."""
    s = _Section(table, where, label)
    curve_text = s.text("curve")
    curve_path = Path(folder) / curve_text
    if not curve_text or not curve_path.is_file():
        raise s.error("curve", f'file "{curve_text}" does not exist in {folder}')
    if curve_path.suffix.lower() not in (".csv", ".txt", ".xlsx"):
        raise s.error("curve", f'"{curve_text}" is not a .csv or .xlsx file')
    rate, head, eff = _curve(curve_path, Path(curve_text).name, s)
    rated = _unit_value(s, "rated_frequency", "Hz", "60 Hz", 60.0)
    low = _unit_value(s, "min_frequency", "Hz", "35 Hz", 0.5 * rated)
    high = _unit_value(s, "max_frequency", "Hz", "60 Hz", rated)
    if low >= high:
        raise s.error("min_frequency", f"{low:g} Hz is not below max_frequency {high:g} Hz")
    speed = _unit_value(s, "rated_speed", "rpm", "3500 rpm")
    length = s.quantity("column_length", "length")
    diameter = s.quantity("column_diameter", "length")
    rough = s.quantity("roughness", "length", None, sign="nonnegative")
    c = s.number("hazen_williams_c", None, low=0, high=200, open_low=True)
    if (rough is None) == (c is None):
        raise s.error("roughness", "give either roughness (Darcy-Weisbach) or "
                                   "hazen_williams_c, not both and not neither")
    if "discharge_head" in s.data and "discharge_pressure" in s.data:
        raise s.error("discharge_pressure", "give discharge_pressure or discharge_head, "
                                            "not both")
    pressure = _unit_value(s, "discharge_pressure", "Pa", "40 psi")
    discharge = pressure / _RHO_G if pressure is not None else \
        s.quantity("discharge_head", "length", 0.0, sign="any")
    levels_raw = s.get("static_levels")
    if not isinstance(levels_raw, dict) or not levels_raw:
        raise s.error("static_levels", 'expected a table of season = level, e.g. '
                                       '{spring = "95 ft", autumn = "120 ft"}')
    seasons = _Section(levels_raw, f"{where}.static_levels", label)
    levels = {name: seasons.quantity(name, "length", sign="any") for name in levels_raw}
    motor = s.number("motor_efficiency", MOTOR_EFFICIENCY, low=0, high=1, open_low=True)
    drive = s.number("drive_efficiency", DRIVE_EFFICIENCY, low=0, high=1, open_low=True)
    minor = s.number("minor_loss_k", 0.0, low=0, high=1000)
    s.done()
    return PumpSpec(rate, head, eff, curve_text, rated, low, high, length, diameter, rough, c,
                    float(discharge), levels, speed, motor, drive, float(minor))
