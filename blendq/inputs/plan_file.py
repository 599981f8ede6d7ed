"""Read the ``[plan]`` table of a project file: priors and unit costs for planning a step test.

A project that has no test yet gives, per zone, a range of transmissivity (from logs, a
specific capacity or nearby tests) and a range of each analyte in the zone's water (from nearby
wells or old samples); the unit costs and the budget are the user's. All fields are optional
except that every zone used for planning needs a transmissivity (here or in ``[[zones]]``) and
a range of every planned analyte. The format is described in ``docs/input-files.md``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from blendq.chemistry.analytes import get_analyte, normalise_basis, to_canonical
from blendq.errors import InputError
from blendq.inputs.loader import load_project
from blendq.inputs.project import Project
from blendq.inputs.project_file import (
    PROJECT_FILE,
    _read_toml,
    _Section,
    _tables_list,
    read_project_file,
    resolve_project_file,
)
from blendq.inputs.tables import located, split_unit_basis


@dataclass(frozen=True)
class PlanInputs:
    """The ``[plan]`` table, in base units.

    Attributes
    ----------
    transmissivity : dict zone -> (low, high)
        Prior range of each zone's transmissivity [m^2/d] (read as +-2 sd of ln T).
    chemistry : dict zone -> dict analyte -> (low, high)
        Prior range of each analyte in each zone's water [mg/L canonical] (read as +-2 sd).
    budget : float or None
        Largest cost of the test, in the currency of the unit costs.
    costs : dict
        Unit costs and times given (keys of :class:`blendq.decide.plan.Costs`; hours in h).
    min_step_hours : float or None
        Shortest planned step [h].
    file : str
    """

    transmissivity: dict = field(default_factory=dict)
    chemistry: dict = field(default_factory=dict)
    budget: float | None = None
    costs: dict = field(default_factory=dict)
    min_step_hours: float | None = None
    file: str = PROJECT_FILE

    @property
    def analytes(self) -> list[str]:
        """Analytes with a prior range in some zone, in order of first appearance."""
        return list(dict.fromkeys(a for ranges in self.chemistry.values() for a in ranges))


_COSTS = ("lab_sample_cost", "flowlog_run_cost", "rig_hour_cost")
_HOURS = ("flowlog_hours", "depth_sample_hours", "min_step_duration")


def _range(s: _Section, key: str, convert) -> tuple[float, float]:
    value = s.get(key)
    if not (isinstance(value, list) and len(value) == 2):
        raise s.error(key, f"expected a range of two quantities such as "
                           f'["1500 ft2/d", "4000 ft2/d"], got {value!r}')
    low, high = (convert(v) for v in value)
    if not (0 < low <= high):
        raise s.error(key, f"{value!r}: the low end must be above zero and not above the high end")
    return low, high


def _concentration(s: _Section, key: str, text) -> float:
    if not isinstance(text, str):
        raise s.error(key, f'expected a concentration such as "4 mg/L", got {text!r}')
    try:
        analyte = get_analyte(key)
        number, unit, basis = split_unit_basis(text, with_number=True)
        if number is None or not math.isfinite(number):
            raise InputError(f'"{text}" is not a number with a unit such as "4 mg/L"')
        return to_canonical(number, unit, analyte, normalise_basis(analyte, basis))
    except InputError as err:
        raise located(err, s.file, None, f"{s.where}.{key}", text) from err


def read_plan(path: str | Path, zone_names: list[str]) -> PlanInputs:
    """The ``[plan]`` table of a project file (empty when there is none).

    Raises
    ------
    InputError
        Naming the file and the dotted key (``plan.zones[2].nitrate``).
    """
    project_file = resolve_project_file(path)
    label = project_file.name
    doc = _read_toml(project_file)
    if "plan" not in doc:
        return PlanInputs(file=label)
    s = _Section(doc["plan"], "plan", label)
    costs = {}
    for key in _COSTS:
        value = s.number(key, None, 0.0)
        if value is not None:
            costs[key.removesuffix("_cost")] = float(value)
    hours = {}
    for key in _HOURS:
        value = s.quantity(key, "time", None)
        if value is not None:
            hours[key] = 24.0 * value
    costs.update({k: v for k, v in hours.items() if k != "min_step_duration"})
    budget = s.number("budget", None, 0.0, open_low=True)
    s.get("zones", None)
    s.done()
    transmissivity, chemistry = {}, {}
    for i, entry in enumerate(_tables_list(doc["plan"], "zones", label), start=1):
        z = _Section(entry, f"plan.zones[{i}]", label)
        name = z.text("zone")
        if name not in zone_names:
            raise z.error("zone", f'"{name}" is not a zone of [[zones]] '
                                  f'({", ".join(zone_names)})')
        if "transmissivity" in entry:
            transmissivity[name] = _range(
                z, "transmissivity", lambda v, z=z: _quantity(z, "transmissivity", v))
        ranges = {}
        for key in entry:
            if key in ("zone", "transmissivity"):
                continue
            low_high = _range(z, key, lambda v, z=z, key=key: _concentration(z, key, v))
            ranges[get_analyte(key).key] = low_high
        chemistry[name] = ranges
        z.done()
    return PlanInputs(transmissivity, chemistry, None if budget is None else float(budget), costs,
                      hours.get("min_step_duration"), label)


def _quantity(s: _Section, key: str, text) -> float:
    probe = _Section({key: text}, s.where, s.file)
    return probe.quantity(key, "transmissivity")


def load_for_planning(path: str | Path):
    """The project and its ``[plan]`` table; the tables are read when the project has a test
    (a steps table), else the project has none.

    Returns
    -------
    (Project, PlanInputs, bool)
        The last is True for a finished test.
    """
    head = read_project_file(path)
    plan = read_plan(head.path, [z.name for z in head.zones])
    if "steps" in head.tables:
        return load_project(path), plan, True
    project = Project(name=head.name, well=head.well, zones=head.zones, settings=head.settings,
                      limits=head.limits, scenarios=head.scenarios, folder=head.path.parent,
                      files={"project": head.path.name})
    return project, plan, False
