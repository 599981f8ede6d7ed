"""What-if scenarios: the calibrated well with changes, compared with the base case.

A scenario changes the fitted well model (seal zones, redevelop a zone, move the pump intake,
lower the static heads) and/or the water delivered (blend with a second source), may put in a
new pump (another curve, with its drive settings and energy against the system curve), and may
set its own margin and exceedance probability. Every scenario is evaluated with the same posterior
draws and the same rate grid as the base case (common random numbers), so differences between
scenarios are differences of the changes, not of sampling noise.

Scenario entries (``[[scenarios]]`` in project.toml; see ``docs/scenarios.md``)::

    name = "Seal the upper sand and blend"
    seal = ["Upper sand"]              # conductance x settings.seal_leakage (gravel pack)
    redevelop = { zone = "Gravel (clogged)", skin = 0 }  # or factor = 2; or a list of these
    intake = "140 ft"                                # new pump intake depth
    lower_heads = "10 ft"                            # every static head lowered (drought)
    blend = { rate = "200 gpm", nitrate = "2 mg/L as N", arsenic = "1 ug/L" }
    pump = { curve = "pump-b.csv", rated_speed = "3550 rpm" }  # over the [pump] table
    margin = 0.8
    exceedance_probability = 0.05

Rates on the comparison are the well's own pumping rate; a blend adds its rate to what is
delivered. The core works in base units (m, m^3/d, d, mg/L canonical).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte, to_canonical
from blendq.decide import pumpset
from blendq.decide.levelcheck import static_level_of
from blendq.decide.sweep import Window, operating_window, sweep
from blendq.errors import InputError, ModelError
from blendq.fit.uncertainty import Prediction
from blendq.inputs.project import Project
from blendq.inputs.pump_file import PumpSpec, option_pump, read_pump
from blendq.units import UNIT_SYSTEMS, parse_quantity
from blendq.well.model import WellModel

#: keys a scenario entry may have
SCENARIO_KEYS = ("name", "description", "seal", "redevelop", "intake", "lower_heads", "blend",
                 "pump", "margin", "exceedance_probability")
BASE_NAME = "Base case"

_CONC = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)(?:\s+as\s+(\S+))?\s*$",
                   re.IGNORECASE)


@dataclass(frozen=True)
class Blend:
    """A second source mixed into the discharge.

    Attributes
    ----------
    rate : float
        Q_b [m^3/d].
    concentration : dict analyte key -> float
        C_b [mg/L canonical basis].
    """

    rate: float
    concentration: dict[str, float]


@dataclass(frozen=True)
class Scenario:
    """One what-if case, resolved against a project (base units).

    Attributes
    ----------
    name : str
    zone_factor : ndarray (n_zones,)
        Multiplier of each zone conductance [-]: ``settings.seal_leakage`` for a sealed zone
        (flow through the gravel pack past the seal), 1 otherwise.
    redevelop : tuple of (int, str, float)
        Redevelopments: (zone index, "skin" or "factor", target skin [-] or conductance
        factor [-]); applied to each draw's fitted conductance with an uncertain outcome.
    intake_depth : float or None
        New pump intake depth [m]; None keeps the well's.
    head_drop : float
        Lowering of every static head [m] (0 for none).
    blend : Blend or None
    margin, exceedance_probability : float or None
        Override the project's settings when given.
    changes : list of str
        The changes in words (for tables).
    pump : PumpSpec or None
        A new pump (its curve, drive, column and seasonal static levels); the base case of a
        comparison with a new pump carries the project's current ``[pump]`` here.
    """

    name: str
    zone_factor: np.ndarray
    redevelop: tuple = ()
    intake_depth: float | None = None
    head_drop: float = 0.0
    blend: Blend | None = None
    margin: float | None = None
    exceedance_probability: float | None = None
    changes: list[str] = field(default_factory=list)
    pump: PumpSpec | None = None

    @property
    def changes_well(self) -> bool:
        """True when the well model itself changes (not only the blend or the settings)."""
        return (bool(np.any(self.zone_factor != 1.0)) or bool(self.redevelop)
                or self.intake_depth is not None or self.head_drop != 0.0)


def base_scenario(project: Project) -> Scenario:
    """The base case as a scenario with no change."""
    return Scenario(BASE_NAME, np.ones(len(project.zones)), changes=["as tested"])


# ------------------------------------------------------------------------------ parsing
def _zone_index(project: Project, name, file: str, field_name: str) -> int:
    names = project.zone_names
    if not isinstance(name, str) or name not in names:
        raise InputError(f"{name!r} is not a zone of this well (expected one of "
                         f"{', '.join(repr(n) for n in names)})", file=file, field=field_name)
    return names.index(name)


def _number(value, file: str, field_name: str, low: float, high: float, open_low: bool,
            what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"expected {what}, got {value!r}", file=file, field=field_name)
    v = float(value)
    if not np.isfinite(v) or v > high or v < low or (open_low and v == low):
        raise InputError(f"expected {what}, got {value!r}", file=file, field=field_name)
    return v


def _skin_terms(project: Project, zone: int, file: str = "project.toml",
                field_name: str | None = None) -> tuple[float, float, float]:
    """(c, L, k) of a zone's conductance G = c T / (L + k s) at the operating horizon.

    Cooper-Jacob with skin (storativity known and the model not "steady"): c = 4 pi,
    L = ln(2.25 T t / (r_w^2 S)), k = 2; Thiem with skin: c = 2 pi, L = ln(R / r_w), k = 1.
    Returns c T [m^2/d], L [-] and k [-].
    """
    z = project.zones[zone]
    where = dict(file=file, field=field_name or f"zones[{zone + 1}]")
    t = z.zone_transmissivity
    if z.conductance is not None or t is None:
        raise InputError(f'zone "{z.name}" has no transmissivity to scale by a new skin (its '
                         'conductance is given); redevelop it with factor = ... instead', **where)
    rw = project.well.well_radius
    if z.storativity is not None and project.settings.conductance_model != "steady":
        big_l = float(np.log(2.25 * t * project.settings.horizon / (rw**2 * z.storativity)))
        return 4.0 * np.pi * t, big_l, 2.0
    r = project.well.radius_of_influence
    if r is None:
        raise InputError(f'a new skin for zone "{z.name}" needs its storativity or '
                         "well.radius_of_influence", **where)
    return 2.0 * np.pi * t, float(np.log(r / rw)), 1.0


def redeveloped_conductance(project: Project, zone: int, conductance, target_skin: float,
                            achieved, shortfall: float | None = None) -> np.ndarray:
    """Conductance [m^2/d] of a zone after redevelopment, from its fitted conductance.

    Parameters
    ----------
    project : Project
    zone : int
        Zone index.
    conductance : array_like
        Fitted conductance of the zone at the operating horizon, one per draw [m^2/d].
    target_skin : float
        Skin factor the redevelopment aims at [-].
    achieved : array_like
        Where in the range of outcomes each draw falls, in [0, 1] (0 = the target is reached).
    shortfall : float, optional
        ``settings.redevelopment_shortfall`` (default: the project's).

    Returns
    -------
    ndarray
        With G = c T / (L + k s) (Cooper-Jacob: c = 4 pi, k = 2, L = ln(2.25 T t / (r_w^2 S));
        Thiem: c = 2 pi, k = 1, L = ln(R / r_w)), the fitted skin of each draw is
        s_fit = (c T / G - L) / k; the achieved skin is
        s_new = s_t + achieved x shortfall x (s_fit - s_t) where s_fit > s_t (else no change),
        and G_new = c T / (L + k s_new).

    Raises
    ------
    InputError
        When the zone lacks what the log term needs.
    ModelError
        When the new skin makes the log term non-positive.

    References
    ----------
    Thiem, G. (1906) Hydrologische Methoden. Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU
    27(4). Hawkins, M.F. (1956) J. Petroleum Technology 8 (skin factor).
    """
    coef, big_l, k = _skin_terms(project, zone)
    f = project.settings.redevelopment_shortfall if shortfall is None else shortfall
    g = np.asarray(conductance, float)
    s_fit = (coef / g - big_l) / k
    s_new = np.where(s_fit > target_skin,
                     target_skin + np.asarray(achieved, float) * f * (s_fit - target_skin), s_fit)
    denom = big_l + k * s_new
    if np.any(denom <= 0):
        raise ModelError(f"a skin of {target_skin:g} makes the log term of zone "
                         f'"{project.zones[zone].name}" non-positive: no conductance')
    return coef / denom


def parse_concentration(text, analyte: str, file: str, field_name: str) -> float:
    """``"2 mg/L as N"`` (or ``{value = "2 mg/L", basis = "as N"}``) -> mg/L canonical."""
    try:
        an = get_analyte(analyte)
        if isinstance(text, dict):
            extra = set(text) - {"value", "basis"}
            if extra or "value" not in text:
                raise InputError(f"expected {{value = \"2 mg/L\", basis = \"as N\"}}, got {text!r}")
            inner = str(text["value"])
            m = _CONC.match(inner)
            basis = text.get("basis")
        else:
            m = _CONC.match(str(text)) if isinstance(text, str) else None
            basis = m.group(3) if m else None
        if not m or not m.group(2):
            raise InputError(f'expected a concentration with a unit such as "2 mg/L as N", '
                             f"got {text!r}")
        value = float(m.group(1))
        if value < 0:
            raise InputError(f"a concentration cannot be negative, got {text!r}")
        return to_canonical(value, m.group(2), an, basis)
    except InputError as err:
        raise InputError(err.message, file=file, field=field_name) from None


def _parse_blend(raw, project: Project, file: str, key: str) -> Blend:
    if not isinstance(raw, dict):
        raise InputError(f'expected a table such as {{ rate = "200 gpm", nitrate = "2 mg/L as N" }}, '
                         f"got {raw!r}", file=file, field=key)
    if "rate" not in raw:
        raise InputError("a blend needs the rate of the second source", file=file,
                         field=f"{key}.rate")
    try:
        rate = parse_quantity(raw["rate"], "rate")
    except InputError as err:
        raise InputError(err.message, file=file, field=f"{key}.rate") from None
    if rate <= 0:
        raise InputError(f"the blend rate must be above zero, got {raw['rate']!r}", file=file,
                         field=f"{key}.rate")
    conc = {}
    for name, text in raw.items():
        if name == "rate":
            continue
        try:
            analyte_key = get_analyte(name).key
        except InputError as err:
            raise InputError(err.message, file=file, field=f"{key}.{name}") from None
        conc[analyte_key] = parse_concentration(text, name, file, f"{key}.{name}")
    if not conc:
        raise InputError("a blend needs the second source's concentration of each analyte, "
                         'e.g. nitrate = "2 mg/L as N"', file=file, field=key)
    return Blend(rate, conc)


def parse_scenario(raw: dict, index: int, project: Project, file: str = "project.toml",
                   prefix: str | None = None) -> Scenario:
    """Resolve one raw scenario entry against a project.

    Parameters
    ----------
    raw : dict
        The entry as written (see the module docstring).
    index : int
        1-based position in ``[[scenarios]]`` (for messages).
    project : Project
    file : str
        Where the entry came from (for messages).
    prefix : str, optional
        Field prefix for messages (default ``scenarios[index]``).

    Raises
    ------
    InputError
        For an unknown key or a bad value, naming ``scenarios[k].key``.
    ModelError
        When every zone would be sealed.
    """
    pre = prefix if prefix is not None else f"scenarios[{index}]"
    if not isinstance(raw, dict):
        raise InputError(f"expected a table, got {raw!r}", file=file, field=pre)
    unknown = [k for k in raw if k not in SCENARIO_KEYS]
    if unknown:
        raise InputError(f"{unknown[0]!r} is not a scenario key (expected one of "
                         f"{', '.join(SCENARIO_KEYS)})", file=file, field=f"{pre}.{unknown[0]}")
    name = raw.get("name")
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"each scenario needs a name, got {name!r}", file=file, field=f"{pre}.name")
    n = len(project.zones)
    factor = np.ones(n)
    sealed = np.zeros(n, bool)
    changes = []
    seal = raw.get("seal", [])
    if isinstance(seal, str):
        seal = [seal]
    if not isinstance(seal, list):
        raise InputError(f'expected a list of zone names such as ["Upper sand"], got {seal!r}',
                         file=file, field=f"{pre}.seal")
    leak = project.settings.seal_leakage
    for z in seal:
        i = _zone_index(project, z, file, f"{pre}.seal")
        sealed[i] = True
        factor[i] = leak
    if seal:
        changes.append("seal " + ", ".join(seal)
                       + (f" ({leak:.0%} leakage past the seal)" if leak > 0 else ""))
        if np.all(sealed):
            raise ModelError(f'scenario "{name}" seals every zone: the well would yield nothing')
    redev = raw.get("redevelop", [])
    redev = [redev] if isinstance(redev, dict) else redev
    if not isinstance(redev, list):
        raise InputError(f'expected {{ zone = "...", skin = 0 }} or {{ zone = "...", factor = 2 }}, '
                         f"got {redev!r}", file=file, field=f"{pre}.redevelop")
    redevelop = []
    for item in redev:
        key = f"{pre}.redevelop"
        if not isinstance(item, dict) or set(item) - {"zone", "skin", "factor"} or "zone" not in item \
                or ("skin" in item) == ("factor" in item):
            raise InputError(f'expected {{ zone = "...", skin = 0 }} or {{ zone = "...", factor = 2 }}, '
                             f"got {item!r}", file=file, field=key)
        i = _zone_index(project, item["zone"], file, f"{key}.zone")
        if sealed[i]:
            raise InputError(f'zone "{item["zone"]}" is both sealed and redeveloped', file=file,
                             field=f"{key}.zone")
        if "skin" in item:
            skin = _number(item["skin"], file, f"{key}.skin", -np.inf, np.inf, False,
                           "a skin factor (a plain number)")
            _skin_terms(project, i, file, f"{key}.zone")  # the zone must have what it needs
            redevelop.append((i, "skin", skin))
            changes.append(f'redevelop {item["zone"]} to skin {skin:g} from its fitted skin')
        else:
            f = _number(item["factor"], file, f"{key}.factor", 0.0, np.inf, True,
                        "a conductance factor above zero")
            redevelop.append((i, "factor", f))
            changes.append(f'redevelop {item["zone"]} (fitted conductance x up to {f:.3g})')
    intake = None
    if "intake" in raw:
        try:
            intake = parse_quantity(raw["intake"], "length")
        except InputError as err:
            raise InputError(err.message, file=file, field=f"{pre}.intake") from None
        if intake <= 0:
            raise InputError(f"the intake depth must be below the datum, got {raw['intake']!r}",
                             file=file, field=f"{pre}.intake")
        changes.append(f"intake at {raw['intake']}")
    drop = 0.0
    if "lower_heads" in raw:
        try:
            drop = parse_quantity(raw["lower_heads"], "length")
        except InputError as err:
            raise InputError(err.message, file=file, field=f"{pre}.lower_heads") from None
        changes.append(f"static heads {raw['lower_heads']} lower")
    blend = _parse_blend(raw["blend"], project, file, f"{pre}.blend") if "blend" in raw else None
    if blend is not None:
        parts = ", ".join(f"{k} {v}" for k, v in raw["blend"].items() if k != "rate")
        changes.append(f"blend {raw['blend']['rate']} ({parts})")
    margin = alpha = None
    if "margin" in raw:
        margin = _number(raw["margin"], file, f"{pre}.margin", 0.0, 1.0, True,
                         "a fraction of the limit above 0 and at most 1")
        changes.append(f"margin {margin:g}")
    if "exceedance_probability" in raw:
        alpha = _number(raw["exceedance_probability"], file, f"{pre}.exceedance_probability",
                        0.0, 0.5, True, "a probability above 0 and at most 0.5")
        changes.append(f"exceedance probability {alpha:g}")
    new_pump = _parse_pump(raw["pump"], project, intake, file, f"{pre}.pump") \
        if "pump" in raw else None
    if new_pump is not None:
        changes.append(new_pump[1])
    if not changes:
        changes.append("no change")
    return Scenario(name.strip(), factor, tuple(redevelop), intake, drop, blend, margin, alpha,
                    changes, new_pump[0] if new_pump else None)


def _project_file(project: Project) -> Path | None:
    if project.folder is None or "project" not in project.files:
        return None
    return Path(project.folder) / project.files["project"]


def _parse_pump(raw, project: Project, intake: float | None, file: str,
                key: str) -> tuple[PumpSpec, str]:
    """A new pump's spec and its change in words. Its keys replace those of the project's
    ``[pump]``; a new intake without a ``column_length`` of its own lengthens (or shortens) the
    column by the intake's move (the pump hangs at its intake)."""
    where = _project_file(project)
    if where is None:
        raise InputError("a new pump needs the project file (its folder holds the curve)",
                         file=file, field=key)
    spec = option_pump(raw, where, key)
    if intake is not None and isinstance(raw, dict) and "column_length" not in raw:
        length = spec.column_length + intake - project.well.operating_intake
        if length <= 0:
            raise InputError(f"the intake's move leaves a column of {length:.3g} m; give the "
                             "new pump's column_length", file=file, field=f"{key}.column_length")
        spec = replace(spec, column_length=float(length))
    words = f"new pump ({Path(spec.curve_file).name}"
    if spec.rated_speed is not None:
        words += f", {spec.rated_speed:g} rpm"
    return spec, words + f", {spec.min_frequency:g} to {spec.max_frequency:g} Hz)"


def current_pump(project: Project) -> PumpSpec | None:
    """The project's ``[pump]`` (None without one, or without a project file)."""
    where = _project_file(project)
    return None if where is None else read_pump(where)


def project_scenarios(project: Project) -> list[Scenario]:
    """Every ``[[scenarios]]`` entry of a project, resolved."""
    return [parse_scenario(raw, k, project) for k, raw in enumerate(project.scenarios, start=1)]


# ------------------------------------------------------------------------------ the core
def well_changes(scenario: Scenario, project: Project | None = None, seed: int = 0,
                 central: bool = False) -> Callable[[WellModel], WellModel] | None:
    """The change of the (batched) well model a scenario makes, or None for no change.

    Parameters
    ----------
    scenario : Scenario
    project : Project, optional
        Needed for a redevelopment to a new skin.
    seed : int
        Seed of the redevelopment outcome of each draw.
    central : bool
        Use the middle of the redevelopment outcomes instead of a random one per draw.

    Notes
    -----
    A redevelopment starts from each draw's fitted conductance. Its outcome is uncertain
    (``settings.redevelopment_shortfall``): to a new skin, the achieved skin of each draw is
    uniform between the target and target + shortfall x (fitted skin - target)
    (:func:`redeveloped_conductance`); by a factor f, the achieved factor is uniform between
    1 + (1 - shortfall) (f - 1) and f.
    """
    if not scenario.changes_well:
        return None

    def apply(model: WellModel) -> WellModel:
        geometry = model.geometry
        if scenario.intake_depth is not None:
            geometry = replace(geometry, intake_depth=scenario.intake_depth)
        g = np.array(np.broadcast_to(model.conductance * scenario.zone_factor,
                                     np.shape(model.conductance)), float)
        if scenario.redevelop:
            rng = np.random.default_rng([seed, 5])
            batch = g.shape[:-1]
            for i, kind, value in scenario.redevelop:
                u = np.full(batch, 0.5) if central else rng.random(batch)
                if kind == "skin":
                    g[..., i] = redeveloped_conductance(project, i, g[..., i], value, u)
                else:
                    f = project.settings.redevelopment_shortfall if project is not None else 0.0
                    low = 1.0 + (1.0 - f) * (value - 1.0)
                    g[..., i] = g[..., i] * (low + u * (value - low))
        return model.with_changes(conductance=g,
                                  static_head=model.static_head - scenario.head_drop,
                                  geometry=geometry)

    return apply


def blend_concentration(well_concentration, rate, blend_rate: float, blend_concentration):
    """Concentration of the well's discharge mixed with a second source [mg/L].

    Parameters
    ----------
    well_concentration : array_like (..., n_rates[, ...])
        C_w [mg/L] at each well rate.
    rate : array_like
        Well rate Q [m^3/d], broadcastable against ``well_concentration``.
    blend_rate : float
        Q_b [m^3/d] > 0.
    blend_concentration : float or array_like
        C_b [mg/L].

    Notes
    -----
    Complete mixing of two streams: C = (Q C_w + Q_b C_b) / (Q + Q_b). At Q = 0 the delivered
    water is the second source alone.
    """
    q = np.asarray(rate, float)
    cw = np.where(q > 0, np.asarray(well_concentration, float), 0.0)
    return (q * cw + blend_rate * np.asarray(blend_concentration, float)) / (q + blend_rate)


def required_blend_rate(well_concentration, rate: float, blend_concentration: float,
                        threshold: float, alpha: float) -> float:
    """Smallest blend rate Q_b [m^3/d] that keeps P(C > threshold) <= alpha at well rate Q.

    Parameters
    ----------
    well_concentration : array_like (n_draws,)
        C_w of each draw at the well rate [mg/L].
    rate : float
        Well rate Q [m^3/d] > 0.
    blend_concentration : float
        C_b [mg/L].
    threshold : float
        Concentration to stay under, e.g. margin x limit [mg/L].
    alpha : float
        Largest acceptable fraction of draws above the threshold.

    Returns
    -------
    float
        Q_b [m^3/d]; 0 when the well alone complies.

    Raises
    ------
    ModelError
        When no blend rate can do it (the second source is itself at or above the threshold
        where the well water is above it in more than alpha of the draws).

    Notes
    -----
    For one draw, (Q C_w + Q_b C_b) / (Q + Q_b) <= T holds for Q_b >= Q (C_w - T) / (T - C_b)
    when C_w > T > C_b, for every Q_b when C_w <= T, and for none when C_b >= T < C_w. The
    draws above T at Q_b are those whose own requirement exceeds Q_b, so the answer is the
    (n - m)-th smallest requirement, with m the largest count with m / n <= alpha.
    """
    cw = np.asarray(well_concentration, float).ravel()
    if rate <= 0:
        raise ModelError(f"the well rate must be above zero for a blend ratio, got {rate!r}")
    n = len(cw)
    with np.errstate(divide="ignore", invalid="ignore"):
        need = np.where(cw <= threshold, 0.0,
                        np.where(blend_concentration < threshold,
                                 rate * (cw - threshold) / (threshold - blend_concentration), np.inf))
    m = int(np.floor(alpha * n))
    while m + 1 <= n and (m + 1) / n <= alpha:
        m += 1
    while m > 0 and m / n > alpha:
        m -= 1
    if m >= n:
        return 0.0
    # a relative 1e-12 above the binding draw's own requirement, so that rounding in the blend
    # formula cannot put that draw a hair above the threshold
    q_b = float(np.sort(need)[n - m - 1]) * (1.0 + 1e-12)
    if not np.isfinite(q_b):
        raise ModelError(f"no blend rate keeps the discharge under {threshold:.4g} mg/L: the "
                         f"second source ({blend_concentration:.4g} mg/L) is not below it")
    return q_b


# ------------------------------------------------------------------------------ evaluation
@dataclass
class ScenarioResult:
    """One evaluated scenario.

    Attributes
    ----------
    scenario : Scenario
    prediction : Prediction
        Delivered water (blended where the scenario blends) at each well rate.
    window : Window
    yield_rate : float
        Largest well rate [m^3/d] at which the pumping-level criteria hold (interpolated on the
        grid); the top of the grid when they hold everywhere.
    yield_beyond_grid : bool
        True when the pumping-level criteria hold up to the top of the grid.
    margin, alpha : float
        The margin and exceedance probability used.
    undecided : dict analyte -> ndarray of bool (n_rates,)
        Rates (within the pump range and the pumping-level limits) at which the analyte's
        compliance depends on zone values the data cannot pin (see :func:`undecided_rates`).
    tell_zones : list of int
        Unresolved zones that matter most where compliance is undecided.
    would_tell : dict units -> list of str
        Measurements that would decide a "cannot tell" option, in each display unit system.
    pump : PumpSettings or None
        Drive settings, delivered rates and energy of the scenario's pump in its window (None
        when the scenario has no pump, or its pump cannot serve the window).
    pump_error : ModelError or None
        Why the scenario's pump cannot serve its window (no window, or it cannot lift the
        water); a :class:`~blendq.well.pump.PumpError` writes itself in any display units.
    """

    scenario: Scenario
    prediction: Prediction
    window: Window
    yield_rate: float
    yield_beyond_grid: bool
    margin: float
    alpha: float
    undecided: dict = field(default_factory=dict)
    tell_zones: list = field(default_factory=list)
    would_tell: dict = field(default_factory=dict)
    pump: pumpset.PumpSettings | None = None
    pump_error: ModelError | None = None

    @property
    def cannot_tell(self) -> bool:
        """True when the option's window depends on zone values the data cannot pin."""
        return any(bool(np.any(v)) for v in self.undecided.values())


@dataclass
class Comparison:
    """All scenarios side by side.

    Attributes
    ----------
    table : DataFrame
        One row per scenario, the base case first (base units; see :func:`compare`).
    results : list of ScenarioResult
    """

    table: pd.DataFrame
    results: list[ScenarioResult]


def pumping_level_yield(rates, level, allowed_depth: float) -> tuple[float, bool]:
    """Largest rate [m^3/d] whose pumping level [m depth] stays at or above ``allowed_depth``.

    ``level`` (n_rates,) grows with rate; the crossing is interpolated linearly between grid
    rates. Returns (rate, True) when the level never reaches the allowed depth on the grid.
    """
    rates = np.asarray(rates, float)
    level = np.asarray(level, float)
    bad = np.nonzero(level > allowed_depth)[0]
    if not len(bad):
        return float(rates[-1]), True
    k = int(bad[0])
    if k == 0:
        return 0.0, False
    x0, x1, y0, y1 = rates[k - 1], rates[k], level[k - 1], level[k]
    return float(x0 + (allowed_depth - y0) * (x1 - x0) / (y1 - y0)), False


def evaluate(analysis, scenario: Scenario) -> ScenarioResult:
    """Evaluate one scenario with the base case's draws and rate grid.

    Parameters
    ----------
    analysis : blendq.decide.analysis.Analysis
    scenario : Scenario
    """
    project = analysis.project
    s, w = project.settings, project.well
    rates = analysis.prediction.rates
    seed = analysis.draws.seed
    pred = sweep(analysis.fit, analysis.draws, rates,
                 changes=well_changes(scenario, project, seed))
    if scenario.blend is not None:
        missing = [a for a in pred.analytes if a not in scenario.blend.concentration]
        if missing:
            raise InputError(f'the blend of scenario "{scenario.name}" needs a concentration of '
                             f"{', '.join(missing)} (every analyte that is predicted)",
                             file="project.toml", field=f"scenario {scenario.name!r} blend")
        cb = np.array([scenario.blend.concentration[a] for a in pred.analytes])
        conc = blend_concentration(pred.concentration, rates[None, :, None], scenario.blend.rate,
                                   cb[None, None, :])
        conc = np.where(rates[None, :, None] > 0, conc, np.nan)
        pred = replace(pred, concentration=conc)
    margin = s.margin if scenario.margin is None else scenario.margin
    alpha = s.exceedance_probability if scenario.exceedance_probability is None \
        else scenario.exceedance_probability
    intake = w.operating_intake if scenario.intake_depth is None else scenario.intake_depth
    top = float(project.zone_top.min()) if w.keep_above_screen else None
    from blendq.decide.sweep import (
        applicable_ratio_rules,
        compliance_statistics,
        measured_exceedances,
    )

    same_water = scenario.blend is None and not scenario.changes_well
    # the base case's step-test levels and measured exceedances describe the well as tested:
    # they carry over only to options that change neither the well nor the water
    lc = analysis.step_drawdown
    level_deep = lc.level_deep if (lc is not None and not scenario.changes_well
                                   and scenario.intake_depth is None) else None
    extra = measured_exceedances(analysis.fit, analysis.limits, margin, rates) \
        if same_water else []
    window = operating_window(pred, analysis.limits, margin, alpha, intake, w.submergence,
                              w.rate_min, w.rate_max, w.demand, top, level_deep=level_deep,
                              ratio_rules=applicable_ratio_rules(s.limit_sets, pred.analytes,
                                                                 project.limits)[0],
                              extra_criteria=extra,
                              statistics=compliance_statistics(project, analysis.limits),
                              headroom=s.recommended_headroom,
                              keep_above=[(z.name, z.top) for z in project.zones
                                          if z.keep_level_above],
                              zone_top=project.zone_top, zone_names=project.zone_names)
    allowed = intake - w.submergence if top is None else min(intake - w.submergence, top)
    allowed = min([allowed] + [z.top for z in project.zones if z.keep_level_above])
    level = np.quantile(pred.pumping_level, 1 - alpha, axis=0)
    y, beyond = pumping_level_yield(rates, level, allowed)
    undecided, tell = undecided_rates(analysis, scenario, window, margin)
    res = ScenarioResult(scenario, pred, window, y, beyond, margin, alpha, undecided, tell)
    res.would_tell = {u: would_tell(analysis, res, u) for u in UNIT_SYSTEMS}
    if scenario.pump is not None:
        res.pump, res.pump_error = pump_in_window(project, res, level_deep)
    return res


def pump_in_window(project: Project, res: ScenarioResult, level_deep=None) -> tuple:
    """The drive settings of a scenario's pump in its window, or why there are none.

    The pump meets the system curve whose lift is the scenario's own pumping level (median and
    band of its draws, the deep side no shallower than the step test's where the option keeps
    the well as tested) across the seasonal static levels of its ``[pump]`` table
    (:func:`blendq.decide.pumpset.settings_for_window`).

    Returns
    -------
    tuple of (PumpSettings or None, ModelError or None)
    """
    if res.cannot_tell:
        return None, ModelError("the data cannot tell this option's window, so no drive "
                                "setting is given")
    rates, band = pumpset.band_of(res.prediction.rates, res.prediction.pumping_level,
                                  res.alpha, level_deep)
    try:
        return pumpset.settings_for_window(res.window, rates, band, static_level_of(project),
                                           res.scenario.pump,
                                           project.settings.display_units), None
    except ModelError as err:
        return None, err


def undecided_rates(analysis, scenario: Scenario, window: Window, margin: float,
                    max_zones: int = 2) -> tuple[dict, list[int]]:
    """Rates at which an option's compliance depends on zone values the data cannot pin.

    Parameters
    ----------
    analysis : blendq.decide.analysis.Analysis
    scenario : Scenario
    window : Window
        The option's window (its pump-range and pumping-level criteria say which rates count).
    margin : float
    max_zones : int
        Unresolved zones named (those that matter most).

    Returns
    -------
    undecided : dict analyte -> ndarray of bool (n_rates,)
    zones : list of int

    Notes
    -----
    At the fitted hydraulics (the central redevelopment outcome), the option's discharge
    concentration C(Q) = sum_i w_i(Q) c_i is linear in the zone values, so its range over the
    zone values with the fitted blends (:func:`blendq.fit.unresolved.unresolved_sets`) is its
    range over the corners of that set. A rate is undecided for an analyte when that range
    straddles margin x limit and is wider than ``settings.unresolved_tolerance`` x margin x
    limit. For the well as tested the discharge weights of any rate lie in the span of the
    tested ones (linear zone losses), so the range is nil there; an option that changes the
    zone shares (seal, redevelop, intake) can bring the unseen combinations into the blend.
    """
    from blendq.fit.uncertainty import Draws
    from blendq.fit.unresolved import unresolved_sets

    fit = analysis.fit
    sets = unresolved_sets(fit, analysis.zones)
    rates = window.rates
    sets = {a: u for a, u in sets.items() if a in analysis.limits}
    if not sets:
        return {}, []
    ref = Draws(fit.theta[None, :], fit.zone_values()[None], list(fit.analytes), 0)
    changes = well_changes(scenario, analysis.project, central=True)
    weights = sweep(fit, ref, rates, changes=changes).shares[0]  # (n_rates, n_zones)
    feasible = rates > 0
    for crit in window.criteria:
        if crit.kind != "quality":
            feasible &= crit.ok
    tol = analysis.project.settings.unresolved_tolerance
    undecided, effect = {}, {}
    for analyte, uset in sets.items():
        lo, hi = uset.value_range(np.nan_to_num(weights, nan=0.0))
        if scenario.blend is not None:
            cb = scenario.blend.concentration[analyte]
            lo = blend_concentration(lo, rates, scenario.blend.rate, cb)
            hi = blend_concentration(hi, rates, scenario.blend.rate, cb)
        thr = margin * analysis.limits[analyte].canonical()
        und = feasible & (hi - lo > tol * thr) & (lo <= thr) & (hi > thr)
        undecided[analyte] = und
        if und.any():
            spread = uset.vertices.max(0) - uset.vertices.min(0)
            for i in uset.zones:
                e = float(np.nanmax(weights[und, i])) * spread[i]
                effect[i] = max(effect.get(i, 0.0), e)
    ranked = sorted((i for i in effect if effect[i] > 0), key=lambda i: -effect[i])
    return undecided, ranked[:max_zones]


def would_tell(analysis, result: ScenarioResult, units: str = "US") -> list[str]:
    """Measurements that would decide a "cannot tell" option (empty when it is decided)."""
    from blendq.fit.unresolved import what_would_tell

    if not result.cannot_tell:
        return []
    return what_would_tell(analysis.fit, result.tell_zones, units)


def _row(analysis, res: ScenarioResult) -> dict:
    s = analysis.project.settings
    win, pred = res.window, res.prediction
    widths = [hi - lo for lo, hi, _, _ in win.intervals]
    row = {
        "scenario": res.scenario.name,
        "changes": "; ".join(res.scenario.changes),
        "window_low": min((lo for lo, _, _, _ in win.intervals), default=np.nan),
        "window_high": max((hi for _, hi, _, _ in win.intervals), default=np.nan),
        "window_width": float(sum(widths)) if widths else 0.0,
        "n_intervals": len(win.intervals),
        "lower_end_set_by": win.intervals[0][2] if win.intervals else win.reason_empty,
        "upper_end_set_by": win.intervals[-1][3] if win.intervals else win.reason_empty,
        "recommended": np.nan if win.recommended is None else win.recommended,
        "blend_rate": res.scenario.blend.rate if res.scenario.blend else 0.0,
        "yield": res.yield_rate,
        "yield_beyond_grid": res.yield_beyond_grid,
    }
    row["delivered"] = row["recommended"] + row["blend_rate"]
    row["cannot_tell"] = res.cannot_tell
    und = [a for a, v in res.undecided.items() if np.any(v)]
    row["undecided"] = ", ".join(und)
    anyund = np.any([res.undecided[a] for a in und], axis=0) if und else None
    row["undecided_low"] = float(pred.rates[anyund].min()) if und else np.nan
    row["undecided_high"] = float(pred.rates[anyund].max()) if und else np.nan
    row["would_tell"] = "; ".join(res.would_tell.get(s.display_units, []))
    if res.scenario.pump is not None:
        row.update(_pump_row(res))
    q = [(1 - s.interval) / 2, 0.5, 1 - (1 - s.interval) / 2]
    k = None if win.recommended is None else int(np.argmin(np.abs(pred.rates - win.recommended)))
    for j, a in enumerate(pred.analytes):
        vals = (np.full(3, np.nan) if k is None
                else np.quantile(pred.concentration[:, k, j], q))
        row[f"{a}_median"], row[f"{a}_lower"], row[f"{a}_upper"] = (float(v) for v in
                                                                    (vals[1], vals[0], vals[2]))
    return row


def _pump_row(res: ScenarioResult) -> dict:
    """The pump columns of a comparison row (base units; NaN where not known)."""
    nan = float("nan")
    ps = res.pump
    row = {"pump_curve": Path(res.scenario.pump.curve_file).name,
           "pump_frequency_low": nan, "pump_frequency_high": nan, "pump_setting": nan,
           "pump_rate_low": nan, "pump_rate_high": nan, "pump_setting_rate_low": nan,
           "pump_setting_rate_high": nan, "pump_kwh_per_m3": nan,
           "pump_cheapest_kwh_per_m3": nan, "pump_cheapest_setting": nan,
           "pump_per_season": False, "pump_note": "" if res.pump_error is None
           else str(res.pump_error)}
    if ps is None:
        return row
    if ps.frequency_range is not None:
        row["pump_frequency_low"], row["pump_frequency_high"] = ps.frequency_range
        row["pump_setting"] = ps.recommended
    else:
        row["pump_per_season"] = True
        row["pump_note"] = " ".join(ps.notes)
    row["pump_rate_low"], row["pump_rate_high"] = ps.rate_span
    at_setting = ps.seasons["rate"].to_numpy(float)
    if np.isfinite(at_setting).any():
        row["pump_setting_rate_low"] = float(np.nanmin(at_setting))
        row["pump_setting_rate_high"] = float(np.nanmax(at_setting))
    row["pump_kwh_per_m3"] = ps.recommended_energy
    row["pump_cheapest_kwh_per_m3"] = ps.cheapest_energy
    row["pump_cheapest_setting"] = ps.cheapest
    return row


def compare(analysis, scenarios: list[Scenario] | None = None,
            include_base: bool = True) -> Comparison:
    """Evaluate the base case and every scenario with common random numbers.

    Parameters
    ----------
    analysis : blendq.decide.analysis.Analysis
    scenarios : list of Scenario, optional
        Default: the project's ``[[scenarios]]``.
    include_base : bool
        Put the base case (no change) first.

    Returns
    -------
    Comparison
        ``table`` columns (base units): scenario, changes, window_low, window_high,
        window_width [m^3/d] (sum of the interval widths), n_intervals, lower_end_set_by and
        upper_end_set_by (what sets the lowest and the highest end of the window),
        recommended, blend_rate, yield, yield_beyond_grid, delivered [m^3/d] (recommended well
        rate + blend rate), cannot_tell (the window depends on zone values the data cannot
        pin), undecided (those analytes), undecided_low and undecided_high [m^3/d] (the rates
        concerned), would_tell (measurements that would decide, in the project's display
        units), and per analyte ``<a>_median``, ``<a>_lower``, ``<a>_upper``
        [mg/L] at the recommended rate. When an option puts in a new pump, the rows with a
        pump (the new pumps, and the base case with the project's current ``[pump]``) add
        pump_curve (file name), pump_frequency_low and pump_frequency_high [Hz] (the drive
        frequencies that keep the rate in the window all year), pump_setting [Hz] (the
        recommended one; NaN when the drive must be set per season, pump_per_season True),
        pump_rate_low and pump_rate_high [m^3/d] (the rates the pump delivers across the
        drive's range and the seasonal static levels; 0 where it cannot lift the water at the
        lowest frequency), pump_setting_rate_low and pump_setting_rate_high [m^3/d] (the rates
        at the setting across the seasons, median pumping level), pump_kwh_per_m3 (wire-to-water energy
        per volume at the recommended setting), pump_cheapest_kwh_per_m3 and
        pump_cheapest_setting [Hz] (the cheapest compliant setting) and pump_note (why there
        is no setting, in the project's display units).
    """
    project = analysis.project
    scenarios = project_scenarios(project) if scenarios is None else list(scenarios)
    if include_base:
        base = base_scenario(project)
        current = current_pump(project) if any(sc.pump is not None for sc in scenarios) \
            else None
        if current is not None:
            base = replace(base, pump=current, changes=[
                "as tested", f"current pump ({Path(current.curve_file).name})"])
        scenarios = [base, *scenarios]
    results = [evaluate(analysis, sc) for sc in scenarios]
    table = pd.DataFrame([_row(analysis, r) for r in results])
    return Comparison(table, results)


def blend_needed(analysis, rate: float, blend_concentration: dict[str, float],
                 margin: float | None = None, alpha: float | None = None) -> pd.DataFrame:
    """Blend rate needed per analyte at one well rate of the base case.

    Parameters
    ----------
    analysis : blendq.decide.analysis.Analysis
    rate : float
        Well rate Q [m^3/d] (the nearest grid rate is used).
    blend_concentration : dict analyte -> float
        C_b [mg/L canonical].
    margin, alpha : float, optional
        Default: the project's settings.

    Returns
    -------
    DataFrame
        Columns analyte, rate, blend_rate [m^3/d], ratio (Q_b / Q) [-]; the row "all" holds
        the largest, which meets every analyte.
    """
    s = analysis.project.settings
    margin = s.margin if margin is None else margin
    alpha = s.exceedance_probability if alpha is None else alpha
    pred = analysis.prediction
    k = int(np.argmin(np.abs(pred.rates - rate)))
    q = float(pred.rates[k])
    rows = []
    for j, a in enumerate(pred.analytes):
        if a not in analysis.limits or a not in blend_concentration:
            continue
        qb = required_blend_rate(pred.concentration[:, k, j], q, blend_concentration[a],
                                 margin * analysis.limits[a].canonical(), alpha)
        rows.append({"analyte": a, "rate": q, "blend_rate": qb, "ratio": qb / q})
    if rows:
        top = max(rows, key=lambda r: r["blend_rate"])
        rows.append({**top, "analyte": "all"})
    return pd.DataFrame(rows, columns=["analyte", "rate", "blend_rate", "ratio"])
