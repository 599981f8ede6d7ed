"""The operating window as drive settings: the frequencies that keep the delivered rate inside
the window at every static level of the season, the recommended setting, and the energy.

The pump delivers the rate where its curve, scaled to the drive frequency by the affinity laws,
meets the system curve (:mod:`blendq.well.pump`). The lift comes from the zone model's pumping
level at each rate: its median and its band (the alpha and 1 - alpha quantiles of the
posterior draws, the deep side no shallower than the step test's where that is used). A
seasonal static level shifts the whole pumping-level curve by its difference from the test's
static level (drawdown taken as independent of the static level, as in a confined aquifer).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.optimize import brentq

from blendq.decide.analysis import Analysis
from blendq.decide.levelcheck import static_level_of
from blendq.decide.sweep import Window
from blendq.errors import ModelError
from blendq.inputs.pump_file import PumpSpec
from blendq.well import pump as pumpmod

#: points of the frequency scan for the energy across the window (common practice: 0.1 to
#: 0.5 Hz steps match what drive keypads set)
ENERGY_POINTS = 41
#: m^3 in 1,000 US gallons
M3_PER_KGAL = 3.785411784


@dataclass
class PumpSettings:
    """Drive settings for the operating window (frequencies [Hz], rates [m^3/d], power [W]).

    Attributes
    ----------
    window : tuple of float
        The window's interval (low, high) the settings keep the rate in [m^3/d].
    target : float
        The window's recommended rate [m^3/d].
    frequency_range : tuple of float or None
        Frequencies that keep the delivered rate inside the window at every seasonal static
        level and both ends of the level band; None when no single range works all year.
    recommended : float or None
        Recommended frequency (all-year), or None.
    seasons : DataFrame
        Per season: ``season``, ``static_level`` [m], ``low``, ``high`` (its own compliant
        frequencies, NaN when none), ``recommended`` [Hz], ``rate`` delivered at the
        recommended setting (median level) [m^3/d].
    energy : DataFrame
        Across the compliant frequencies at the middle static level (median band):
        ``frequency``, ``rate``, ``head`` [m], ``efficiency`` [-], ``power`` [W],
        ``kwh_per_m3``, ``kwh_per_kgal``.
    recommended_energy, cheapest_energy : float
        kWh/m^3 at the recommended and at the cheapest compliant setting (NaN without
        efficiencies).
    cheapest : float
        Frequency [Hz] of the cheapest compliant setting (NaN when unknown).
    notes : list of str
    test_static_level : float
        The test's static level [m depth] the seasonal levels are measured against.
    rate_span : tuple of float
        Lowest and highest rate [m^3/d] the pump delivers across the drive's frequency range,
        every seasonal static level and both ends of the level band (0 where it cannot lift
        the water at the lowest frequency; inf where it runs off its curve or beyond the rates
        modelled at the highest).
    """

    window: tuple[float, float]
    target: float
    frequency_range: tuple[float, float] | None
    recommended: float | None
    seasons: pd.DataFrame
    energy: pd.DataFrame
    recommended_energy: float = float("nan")
    cheapest_energy: float = float("nan")
    cheapest: float = float("nan")
    notes: list[str] = field(default_factory=list)
    test_static_level: float = float("nan")
    rate_span: tuple[float, float] = (float("nan"), float("nan"))


def level_band(a: Analysis) -> tuple[np.ndarray, np.ndarray]:
    """Sweep rates [m^3/d] and the pumping level [m depth] at each: rows shallow side, median,
    deep side (quantiles alpha, 0.5, 1 - alpha of the draws)."""
    deep = getattr(a.step_drawdown, "level_deep", None) if a.step_drawdown else None
    return band_of(a.prediction.rates, a.prediction.pumping_level,
                   a.project.settings.exceedance_probability, deep)


def band_of(rates, pumping_level, alpha: float, level_deep=None) -> tuple[np.ndarray, np.ndarray]:
    """Rates [m^3/d] and the (3, n_rates) pumping-level band [m depth] of draws
    ``pumping_level`` (n_draws, n_rates): quantiles alpha, 0.5 and 1 - alpha, the deep side no
    shallower than ``level_deep`` (the step test's) where given."""
    band = np.quantile(pumping_level, [alpha, 0.5, 1 - alpha], axis=0)
    if level_deep is not None and np.shape(level_deep) == band[2].shape:
        band[2] = np.fmax(band[2], np.asarray(level_deep, float))
    return np.asarray(rates, float), band


def _system(spec: PumpSpec, rates, levels, shift: float) -> pumpmod.SystemCurve:
    return pumpmod.SystemCurve(
        level=lambda q: np.interp(q, rates, levels) + shift, length=spec.column_length,
        diameter=spec.column_diameter, roughness=spec.roughness,
        hazen_williams_c=spec.hazen_williams_c, discharge_head=spec.discharge_head,
        minor_k=spec.minor_loss_k)


def curve_of(spec: PumpSpec) -> pumpmod.PumpCurve:
    return pumpmod.PumpCurve(spec.curve_rate, spec.curve_head, spec.curve_efficiency)


def delivered(curve: pumpmod.PumpCurve, system: pumpmod.SystemCurve, spec: PumpSpec,
              frequency: float, max_rate: float) -> float:
    """Rate [m^3/d] at ``frequency`` [Hz]: 0 when the pump cannot lift the water, inf when it
    meets the system beyond the rates modelled or off its curve."""
    try:
        return pumpmod.operating_point(curve, system, frequency / spec.rated_frequency,
                                       max_rate=max_rate)
    except pumpmod.PumpError as err:
        return 0.0 if err.cannot_lift else float("inf")


def _frequency_for(rate_of, target: float, f_lo: float, f_hi: float) -> float:
    """Frequency where the delivered rate (rising with frequency) reaches ``target``;
    -inf when it is above the target already at f_lo, inf when below at f_hi."""
    lo, hi = rate_of(f_lo) - target, rate_of(f_hi) - target
    if lo >= 0:
        return -np.inf
    if hi < 0:
        return np.inf
    def short(f):  # inf (off the curve) capped so that the root solve can bracket
        return min(rate_of(f), 1e12) - target

    return float(brentq(short, f_lo, f_hi, xtol=1e-6))


def _range(curve, systems, spec, low, high, max_rate):
    """Frequencies [Hz] keeping every system's delivered rate in [low, high], or None."""
    f_lo, f_hi = spec.min_frequency, spec.max_frequency
    for system in systems:
        def rate_of(f, system=system):
            return delivered(curve, system, spec, f, max_rate)
        a = _frequency_for(rate_of, low, spec.min_frequency, spec.max_frequency)
        b = _frequency_for(rate_of, high, spec.min_frequency, spec.max_frequency)
        f_lo, f_hi = max(f_lo, a), min(f_hi, b)
    return (float(f_lo), float(f_hi)) if f_lo <= f_hi else None


def _setting(curve, system, spec, target, span, max_rate) -> float:
    def rate_of(f):
        return delivered(curve, system, spec, f, max_rate)
    f = _frequency_for(rate_of, target, span[0], span[1])
    return float(np.clip(f, span[0], span[1]))


def energy_at(curve, system, spec, frequency, max_rate) -> dict:
    """Rate, head, efficiency, wire-to-water power and energy per volume at ``frequency``."""
    r = frequency / spec.rated_frequency
    q = delivered(curve, system, spec, frequency, max_rate)
    head = float(curve.head_at(q, r)) if 0 < q < np.inf else np.nan
    eff = float(curve.efficiency_at(q, r)) if 0 < q < np.inf else np.nan
    power = float(pumpmod.wire_to_water(q, head, eff, spec.motor_efficiency,
                                        spec.drive_efficiency))
    kwh = float(pumpmod.energy_per_volume(power, q))
    return {"frequency": frequency, "rate": q, "head": head, "efficiency": eff, "power": power,
            "kwh_per_m3": kwh, "kwh_per_kgal": kwh * M3_PER_KGAL}


def pump_settings(a: Analysis, spec: PumpSpec, units: str | None = None) -> PumpSettings:
    """Drive settings that keep the delivered rate in the operating window all year.

    Parameters
    ----------
    a : Analysis
        The project's analysis (its window, pumping-level draws and static level).
    spec : PumpSpec
        The installed pump (:func:`blendq.inputs.pump_file.read_pump`).
    units : str, optional
        Display unit system of the messages (default: the project's ``display_units``).

    Returns
    -------
    PumpSettings

    Raises
    ------
    ModelError
        When there is no operating window to keep the rate in; a
        :class:`~blendq.well.pump.PumpError` when the pump cannot lift the water at its
        highest frequency at some seasonal static level.
    """
    rates, band = level_band(a)
    return settings_for_window(a.window, rates, band, static_level_of(a.project), spec,
                               units or a.project.settings.display_units)


def settings_for_window(w: Window, rates, band, test_static: float | None, spec: PumpSpec,
                        units: str = "SI") -> PumpSettings:
    """Drive settings that keep the delivered rate in window ``w`` all year.

    Parameters
    ----------
    w : Window
        The operating window (its intervals and recommended rate [m^3/d]).
    rates, band : ndarray
        Rates [m^3/d] and the (3, n_rates) pumping-level band [m depth] (:func:`band_of`).
    test_static : float or None
        The test's static level [m depth] the seasonal levels are measured against (None: the
        band's median level at the first rate).
    spec : PumpSpec
    units : str
        Display unit system of the messages.

    Returns
    -------
    PumpSettings

    Raises
    ------
    ModelError
        As :func:`pump_settings`.
    """
    if w.empty:
        raise ModelError(f"there is no operating window to set the pump for: {w.reason_empty}")
    target = w.recommended if w.recommended is not None else w.intervals[0][0]
    low, high = next(((lo, hi) for lo, hi, *_ in w.intervals if lo <= target <= hi),
                     w.intervals[0][:2])
    if test_static is None:
        test_static = float(band[1][0])
    curve, max_rate = curve_of(spec), float(rates[-1])
    seasons = spec.static_levels
    notes = []
    systems = {name: [_system(spec, rates, lv, s - test_static) for lv in band]
               for name, s in seasons.items()}
    top = spec.max_frequency / spec.rated_frequency
    for name, group in systems.items():  # a pump that cannot lift the water at full speed
        for system in group:
            if delivered(curve, system, spec, spec.max_frequency, max_rate) == 0.0:
                try:
                    pumpmod.operating_point(curve, system, top, max_rate=max_rate, units=units)
                except pumpmod.PumpError as err:
                    raise err.prefixed(f"at the {name} static level and "
                                       f"{spec.max_frequency:g} Hz, ") from None
    every = [sys for group in systems.values() for sys in group]
    span = _range(curve, every, spec, low, high, max_rate)
    middle = float(np.mean(list(seasons.values())))
    mid_system = _system(spec, rates, band[1], middle - test_static)
    rows = []
    for name, s in seasons.items():
        own = _range(curve, systems[name], spec, low, high, max_rate)
        use = span or own
        rec = _setting(curve, systems[name][1], spec, target, use, max_rate) if use else np.nan
        q = delivered(curve, systems[name][1], spec, rec, max_rate) if use else np.nan
        rows.append({"season": name, "static_level": s, "low": own[0] if own else np.nan,
                     "high": own[1] if own else np.nan, "recommended": rec, "rate": q})
    table = pd.DataFrame(rows)
    recommended = None
    if span:
        recommended = _setting(curve, mid_system, spec, target, span, max_rate)
        table["recommended"] = recommended
        table["rate"] = [delivered(curve, systems[n][1], spec, recommended, max_rate)
                         for n in seasons]
    else:
        lost = [r.season for r in table.itertuples() if not np.isfinite(r.low)]
        if len(lost) < len(table):
            notes.append("No single drive frequency keeps the rate inside the window at every "
                         "static level of the season: set the drive per season.")
        if lost:
            notes.append("At the static level of " + ", ".join(lost) + " no drive frequency "
                         f"from {spec.min_frequency:g} to {spec.max_frequency:g} Hz keeps the "
                         "rate inside the window: this pump cannot run the well compliantly "
                         "then (another pump, a deeper intake, or a rest period).")
    scan_span = span or next(((r.low, r.high) for r in table.itertuples()
                              if np.isfinite(r.low)), None)
    energy = pd.DataFrame([energy_at(curve, mid_system, spec, f, max_rate)
                           for f in np.linspace(*scan_span, ENERGY_POINTS)]) \
        if scan_span else pd.DataFrame()
    every_rate = [delivered(curve, sys, spec, f, max_rate) for sys in every
                   for f in (spec.min_frequency, spec.max_frequency)]
    reach = float(np.nanmax([delivered(curve, sys, spec, spec.max_frequency, max_rate)
                             for sys in every]))
    if reach < high:
        notes.append(f"At {spec.max_frequency:g} Hz this pump delivers at most "
                     f"{pumpmod.rate_text(reach, units)}: the window's upper part, up to "
                     f"{pumpmod.rate_text(high, units)}, is beyond its reach at every static "
                     "level of the season.")
    out = PumpSettings((float(low), float(high)), float(target), span, recommended, table,
                       energy, notes=notes, test_static_level=float(test_static),
                       rate_span=(float(min(every_rate)), float(max(every_rate))))
    if spec.curve_efficiency is None:
        notes.append("The pump curve gives no efficiency: power and energy are not computed.")
    elif not energy.empty:
        best = int(np.nanargmin(energy["kwh_per_m3"].to_numpy()))
        out.cheapest = float(energy["frequency"].iloc[best])
        out.cheapest_energy = float(energy["kwh_per_m3"].iloc[best])
        f_rec = recommended if recommended is not None else float(table["recommended"].iloc[0])
        out.recommended_energy = energy_at(curve, mid_system, spec, f_rec, max_rate)["kwh_per_m3"]
    return out
