"""Read and check a wellfield file (``wellfield.toml``): several wells, the entry points they feed.

A wellfield file lists blendq projects (one per supply well, each its own folder), the entry
points of the distribution system with their demand and the wells that feed each, optional
other sources (a purchased-water connection, a treated supply) with their own quality, and
optional aquifer properties for the interference of the wells on one another. Quantities are
strings with their unit as in the project file (``"600 gpm"``, ``"1200 ft"``); every problem
is one :class:`~blendq.errors.InputError` naming the file and the dotted key (``wells[3].project``,
with ``[[...]]`` entries counted from 1). The format is described in ``docs/input-files.md``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from blendq.chemistry.analytes import get_analyte, normalise_basis, to_canonical
from blendq.errors import InputError
from blendq.inputs.project_file import (
    MAX_NAME,
    PROJECT_FILE,
    _read_toml,
    _Section,
    _short,
    _tables_list,
)
from blendq.inputs.tables import located, split_unit_basis
from blendq.units import UNIT_SYSTEMS, unit_system

WELLFIELD_FILE = "wellfield.toml"

#: top-level tables of the wellfield file
SECTIONS = ("wellfield", "wells", "entry_points", "sources", "interference")

#: most wells one wellfield file may list (a state screening program runs a few hundred)
MAX_WELLS = 2000

#: default operating margin of the blending plan (fraction of each limit), as in a project
DEFAULT_MARGIN = 0.9
#: default probability that the blend at an entry point stays under margin x limit
DEFAULT_PROBABILITY = 0.95


@dataclass(frozen=True)
class WellEntry:
    """One ``[[wells]]`` entry, in base units.

    Attributes
    ----------
    name : str
    project : Path
        The well's blendq project folder (absolute).
    entry_point : str
    x, y : float or None
        Coordinates [m] in any local plane frame (both or neither).
    rate_min, rate_max : float or None
        Rate range for the plan [m^3/d] overriding the project's ``well.rate_min/rate_max``.
    in_service : bool
    key : str
        Where it stands in the file (``wells[2]``), for messages.
    """

    name: str
    project: Path
    entry_point: str
    x: float | None = None
    y: float | None = None
    rate_min: float | None = None
    rate_max: float | None = None
    in_service: bool = True
    key: str = ""


@dataclass(frozen=True)
class EntryPoint:
    """One ``[[entry_points]]`` entry: its demand [m^3/d] and the wells that feed it."""

    name: str
    demand: float
    wells: tuple[str, ...] = ()


@dataclass(frozen=True)
class OtherSource:
    """One ``[[sources]]`` entry: a source of known quality that is not a modelled well.

    Attributes
    ----------
    name, entry_point : str
    rate : float or None
        A fixed rate [m^3/d] (the source always gives it), or None.
    max_rate : float or None
        The most the source can give [m^3/d] (the plan chooses 0..max_rate), or None.
    concentrations : dict analyte -> float
        Concentration of each analyte [mg/L on the analyte's canonical basis].
    """

    name: str
    entry_point: str
    rate: float | None
    max_rate: float | None
    concentrations: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class Interference:
    """``[interference]``: aquifer properties for each well's drawdown at the others.

    Attributes
    ----------
    transmissivity : float [m^2/d]
    storativity : float or None [-]
        With ``time``, for the Theis solution.
    time : float or None [d]
        Pumping time for the Theis solution.
    radius_of_influence : float or None [m]
        For the Thiem solution (steady state).
    """

    transmissivity: float
    storativity: float | None = None
    time: float | None = None
    radius_of_influence: float | None = None


@dataclass
class Wellfield:
    """A checked wellfield file, in base units (m, m^3/d, d, mg/L).

    Attributes
    ----------
    name : str
    display_units : str
        "US", "SI" or "SI-L/s".
    margin : float
        Fraction of each limit the blend at an entry point is held below [-].
    probability : float
        Probability with which the blend meets margin x limit [-].
    seed : int or None
        Seed of the wellfield; each well's seed derives from it and the well's name
        (None: each project's own ``settings.seed``).
    wells : list of WellEntry
        In file order.
    entry_points : list of EntryPoint
    sources : list of OtherSource
    interference : Interference or None
    path : Path
        The wellfield file.
    """

    name: str
    display_units: str
    margin: float
    probability: float
    seed: int | None
    wells: list[WellEntry]
    entry_points: list[EntryPoint]
    sources: list[OtherSource] = field(default_factory=list)
    interference: Interference | None = None
    path: Path = Path(WELLFIELD_FILE)

    def well(self, name: str) -> WellEntry:
        """The well named ``name`` (KeyError if none)."""
        for w in self.wells:
            if w.name == name:
                return w
        raise KeyError(name)


def resolve_wellfield_file(path: str | Path) -> Path:
    """The wellfield file for ``path`` (the file, or a folder holding ``wellfield.toml``)."""
    path = Path(path)
    candidate = path / WELLFIELD_FILE if path.is_dir() else path
    if not candidate.is_file():
        raise InputError(f"wellfield file not found: {candidate}", file=candidate.name)
    return candidate


def read_wellfield(path: str | Path) -> Wellfield:
    """Read and check a wellfield file.

    Parameters
    ----------
    path : str or Path
        The wellfield file or a folder holding ``wellfield.toml``.

    Returns
    -------
    Wellfield
        In base units; each well's project folder checked to hold a project file (the
        projects themselves are read by the batch analysis).

    Raises
    ------
    InputError
        One line naming the file and the dotted key, with the value received.
    """
    file = resolve_wellfield_file(path)
    label = file.name
    doc = _read_toml(file)
    unknown = [k for k in doc if k not in SECTIONS]
    if unknown:
        raise InputError(f'"{unknown[0]}" is not a table blendq knows in a wellfield file '
                         f"(known: {', '.join(SECTIONS)})", file=label, field=unknown[0])
    if "wellfield" not in doc:
        raise InputError("the [wellfield] table is missing", file=label, field="wellfield")
    head = _Section(doc["wellfield"], "wellfield", label)
    name = _short(head, "name", 80)
    units = head.text("display_units", "US")
    try:
        units = unit_system(units)
    except InputError:
        raise head.error("display_units", f'"{units}" is not ' + ", ".join(UNIT_SYSTEMS[:-1])
                         + f" or {UNIT_SYSTEMS[-1]}") from None
    margin = float(head.number("margin", DEFAULT_MARGIN, 0.0, 1.0, open_low=True))
    probability = float(head.number("probability", DEFAULT_PROBABILITY, 0.0, 1.0,
                                    open_low=True, open_high=True))
    seed = head.number("seed", None, 0, integer=True)
    head.done()

    entries = _entry_points(doc, label)
    wells = _wells(doc, label, file.parent, entries)
    sources = _sources(doc, label, entries)
    for ep in entries.values():
        if not ep.wells:
            raise InputError(f'no [[wells]] feeds entry point "{ep.name}"; give a well '
                             f'entry_point = "{ep.name}" or remove the entry point',
                             file=label, field=f"entry_points[{ep.key}].name")
    out = [EntryPoint(ep.name, ep.demand, tuple(ep.wells)) for ep in entries.values()]
    return Wellfield(name, units, margin, probability, None if seed is None else int(seed),
                     wells, out, sources, _interference(doc, label), file)


@dataclass
class _Entry:
    name: str
    demand: float
    key: int
    wells: list[str] = field(default_factory=list)


def _entry_points(doc: dict, label: str) -> dict[str, _Entry]:
    rows = _tables_list(doc, "entry_points", label)
    if not rows:
        raise InputError("no [[entry_points]] given; name at least one entry point and its "
                         "demand", file=label, field="entry_points")
    out: dict[str, _Entry] = {}
    for i, entry in enumerate(rows, start=1):
        s = _Section(entry, f"entry_points[{i}]", label)
        name = _short(s, "name", MAX_NAME)
        if not name:
            raise s.error("name", "is empty; give each entry point a name")
        if name in out:
            raise s.error("name", f'"{name}" is already the name of entry_points[{out[name].key}]')
        demand = s.quantity("demand", "rate", sign="nonnegative")
        s.done()
        out[name] = _Entry(name, demand, i)
    return out


def _wells(doc: dict, label: str, folder: Path, entries: dict[str, _Entry]) -> list[WellEntry]:
    rows = _tables_list(doc, "wells", label)
    if not rows:
        raise InputError("no [[wells]] given; list each well's project folder",
                         file=label, field="wells")
    if len(rows) > MAX_WELLS:
        raise InputError(f"{len(rows)} [[wells]] given; the limit is {MAX_WELLS}",
                         file=label, field="wells")
    out, seen, folders = [], {}, {}
    for i, entry in enumerate(rows, start=1):
        s = _Section(entry, f"wells[{i}]", label)
        name = _short(s, "name", MAX_NAME)
        if not name:
            raise s.error("name", "is empty; give each well a name")
        if name in seen:
            raise s.error("name", f'"{name}" is listed twice (also wells[{seen[name]}])')
        seen[name] = i
        text = s.text("project")
        project = (folder / text).resolve()
        target = project / PROJECT_FILE if project.is_dir() else project
        if not text or not target.is_file():
            raise s.error("project", f'"{text}" holds no {PROJECT_FILE} (looked in '
                                     f"{project}); give the well's project folder relative to "
                                     f"{label}")
        project = target.parent
        if project in folders:
            raise s.error("project", f'"{text}" is already the project of '
                                     f"wells[{folders[project]}]")
        folders[project] = i
        ep = s.text("entry_point")
        if ep not in entries:
            raise s.error("entry_point", f'"{ep}" is not an entry point of [[entry_points]] '
                                         f"({', '.join(entries)})")
        has_x, has_y = "x" in entry, "y" in entry
        if has_x != has_y:
            missing = "y" if has_x else "x"
            raise s.error(missing, "is missing: give both x and y coordinates or neither")
        x = s.quantity("x", "length", None, sign="any")
        y = s.quantity("y", "length", None, sign="any")
        rate_min = s.quantity("rate_min", "rate", None, sign="nonnegative")
        rate_max = s.quantity("rate_max", "rate", None)
        if rate_min is not None and rate_max is not None and rate_max <= rate_min:
            raise s.error("rate_max", f'"{entry["rate_max"]}" is not above rate_min '
                                      f'"{entry["rate_min"]}"')
        in_service = s.flag("in_service", True)
        s.done()
        entries[ep].wells.append(name)
        out.append(WellEntry(name, project, ep, x, y, rate_min, rate_max, in_service,
                             f"wells[{i}]"))
    return out


def _concentration(s: _Section, key: str, text) -> tuple[str, float]:
    """Analyte key and concentration [mg/L canonical] of ``key = "2 mg/L as N"``."""
    if not isinstance(text, str):
        raise s.error(key, f'expected a concentration with its unit such as "2 mg/L", '
                           f"got {text!r}")
    try:
        analyte = get_analyte(key)
        number, unit, basis = split_unit_basis(text, with_number=True)
        if number is None or not math.isfinite(number) or number < 0:
            raise InputError(f'"{text}" is not a number of zero or more with a unit such as '
                             '"2 mg/L"')
        return analyte.key, float(to_canonical(number, unit, analyte,
                                               normalise_basis(analyte, basis)))
    except InputError as err:
        raise located(err, s.file, None, f"{s.where}.{key}", text) from err


def _sources(doc: dict, label: str, entries: dict[str, _Entry]) -> list[OtherSource]:
    out, seen = [], {}
    for i, entry in enumerate(_tables_list(doc, "sources", label), start=1):
        s = _Section(entry, f"sources[{i}]", label)
        name = _short(s, "name", MAX_NAME)
        if not name:
            raise s.error("name", "is empty; give each source a name")
        if name in seen:
            raise s.error("name", f'"{name}" is listed twice (also sources[{seen[name]}])')
        seen[name] = i
        ep = s.text("entry_point")
        if ep not in entries:
            raise s.error("entry_point", f'"{ep}" is not an entry point of [[entry_points]] '
                                         f"({', '.join(entries)})")
        rate = s.quantity("rate", "rate", None, sign="nonnegative")
        max_rate = s.quantity("max_rate", "rate", None)
        if (rate is None) == (max_rate is None):
            raise s.error("rate", "give either rate (a fixed rate) or max_rate (the most the "
                                  "source can give), not both or neither")
        conc = {}
        for key in entry:
            if key in ("name", "entry_point", "rate", "max_rate"):
                continue
            s.get(key)
            analyte, value = _concentration(s, key, entry[key])
            if analyte in conc:
                raise s.error(key, f"{analyte} is given twice")
            conc[analyte] = value
        s.done()
        if not conc:
            raise s.error("name", "gives no concentration; add one per analyte, e.g. "
                                  'nitrate = "2 mg/L as N"')
        out.append(OtherSource(name, ep, rate, max_rate, conc))
    return out


def _interference(doc: dict, label: str) -> Interference | None:
    if "interference" not in doc:
        return None
    s = _Section(doc["interference"], "interference", label)
    t = s.quantity("transmissivity", "transmissivity")
    storativity = s.number("storativity", None, 0.0, 1.0, open_low=True, open_high=True)
    time = s.quantity("time", "time", None)
    roi = s.quantity("radius_of_influence", "length", None)
    s.done()
    if time is None and roi is None:
        raise s.error("time", "give time and storativity (Theis) or radius_of_influence "
                              "(Thiem)")
    if time is not None and storativity is None:
        raise s.error("storativity", "is missing: the Theis solution at a time needs the "
                                     "storativity")
    return Interference(t, None if storativity is None else float(storativity), time, roi)
