"""The report section and text lines for the pump settings (``[pump]``): the drive frequencies
that keep the rate in the operating window, per season where needed, and the energy.

:func:`pump_section_for` gives the :class:`~blendq.report.document.Section` with key ``"pump"``
(None for a project without ``[pump]``); :func:`pump_lines` the same facts as short lines for
the command line.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.decide.analysis import Analysis
from blendq.decide.pumpset import M3_PER_KGAL, PumpSettings, pump_settings
from blendq.errors import ModelError
from blendq.inputs.pump_file import read_pump
from blendq.report.document import Paragraph, Section, Table
from blendq.units import DISPLAY_UNITS, display_unit_label, format_quantity, from_base


def energy_unit(units: str) -> tuple[str, float]:
    """Energy-per-volume label and factor from kWh/m^3."""
    return ("kWh/1,000 gal", M3_PER_KGAL) if units == "US" else ("kWh/m3", 1.0)


def _rate_unit(units: str) -> str:
    return display_unit_label(DISPLAY_UNITS[units]["rate"])


def season_table(ps: PumpSettings, units: str = "US") -> pd.DataFrame:
    """Per season: static level, its own compliant frequencies, the setting and the rate it
    delivers (median pumping level), in display units."""
    t = ps.seasons
    length = DISPLAY_UNITS[units]["length"]
    return pd.DataFrame({
        "season": t["season"],
        f"static level [{display_unit_label(length)}]": from_base(
            t["static_level"].to_numpy(), "length", length).round(1),
        "lowest [Hz]": t["low"].round(1), "highest [Hz]": t["high"].round(1),
        "setting [Hz]": t["recommended"].round(1),
        f"rate [{_rate_unit(units)}]": from_base(
            t["rate"].to_numpy(), "rate", DISPLAY_UNITS[units]["rate"]).round(0),
    })


def energy_table(ps: PumpSettings, units: str = "US", rows: int = 5) -> pd.DataFrame:
    """Rate, frequency, power and energy at ``rows`` frequencies across the compliant range."""
    e = ps.energy
    if e.empty:
        return pd.DataFrame()
    pick = np.unique(np.linspace(0, len(e) - 1, rows).round().astype(int))
    e = e.iloc[pick]
    label, factor = energy_unit(units)
    return pd.DataFrame({
        "frequency [Hz]": e["frequency"].round(1).to_numpy(),
        f"rate [{_rate_unit(units)}]": from_base(
            e["rate"].to_numpy(), "rate", DISPLAY_UNITS[units]["rate"]).round(0),
        "power [kW]": (e["power"] / 1000.0).round(1).to_numpy(),
        f"energy [{label}]": (e["kwh_per_m3"] * factor).round(3).to_numpy(),
    })


def pump_lines(ps: PumpSettings, units: str = "US") -> list[str]:
    """The settings in a few sentences."""
    label, factor = energy_unit(units)
    lo, hi = (format_quantity(v, "rate", units) for v in ps.window)
    lines = [f"Operating window kept: {lo} to {hi}; target "
             f"{format_quantity(ps.target, 'rate', units)}."]
    if ps.frequency_range:
        f0, f1 = ps.frequency_range
        lines.append(f"Drive frequencies that keep the rate in the window at every seasonal "
                     f"static level and across the pumping-level band: {f0:.1f} to {f1:.1f} Hz; "
                     f"recommended setting {ps.recommended:.1f} Hz.")
    else:
        for r in ps.seasons.itertuples():
            if np.isfinite(r.low):
                lines.append(f"{r.season}: {r.low:.1f} to {r.high:.1f} Hz, setting "
                             f"{r.recommended:.1f} Hz "
                             f"({format_quantity(r.rate, 'rate', units)}).")
            else:
                lines.append(f"{r.season}: no drive frequency keeps the rate in the window.")
    if np.isfinite(ps.recommended_energy):
        extra = ps.recommended_energy / ps.cheapest_energy - 1.0
        lines.append(f"Energy at the recommended setting: "
                     f"{ps.recommended_energy * factor:.3f} {label}; the cheapest compliant "
                     f"setting ({ps.cheapest:.1f} Hz) uses {ps.cheapest_energy * factor:.3f} "
                     f"{label}: the recommended setting uses {extra:.1%} more per volume.")
    lines.append("Each seasonal static level shifts the pumping-level curve by its difference "
                 f"from the test's static level "
                 f"({format_quantity(ps.test_static_level, 'length', units)}); the drawdown is "
                 "taken as the same in every season.")
    return lines + list(ps.notes)


def settings_for(a: Analysis, units: str | None = None) -> PumpSettings | None:
    """The pump settings of an analysis whose project has ``[pump]`` (None otherwise); an
    error's message in ``units`` (default: the project's display units)."""
    p = a.project
    if p.folder is None or "project" not in p.files:
        return None
    spec = read_pump(p.folder / p.files["project"])
    return None if spec is None else pump_settings(a, spec, units)


def _energy_figure(ps: PumpSettings, units: str):
    from blendq.report.charts.pump import energy_chart
    from blendq.report.charts.render import chart_figure

    return chart_figure("Energy per volume against the delivered rate across the compliant drive "
                        "frequencies (mean seasonal static level, median pumping level).",
                        energy_chart(ps, units), svg=False,
                        alt="; ".join(pump_lines(ps, units)[:3]))


def pump_section(ps: PumpSettings, units: str = "US") -> Section:
    """The report section for the pump settings (key ``"pump"``)."""
    seasons = season_table(ps, units)
    blocks = [
        Paragraph("The pump delivers the rate where its curve, scaled to the drive frequency by "
                  "the affinity laws, meets the system curve: the lift from the zone model's "
                  "pumping level (median and band of the posterior draws), column friction "
                  "(Darcy-Weisbach with Colebrook-White, or Hazen-Williams), the fittings' minor "
                  "losses and the discharge head (blendq docs methods). Settings are planning figures: check the delivered "
                  "rate on the meter after each change; a licensed professional reviews them."),
        *(Paragraph(line) for line in pump_lines(ps, units)),
        Table(seasons, "Drive settings by season (rate at the median pumping level).",
              formats={c: ".1f" for c in seasons.columns if c.endswith("[Hz]")}),
    ]
    energy = energy_table(ps, units)
    if not energy.empty and np.isfinite(ps.recommended_energy):
        blocks.append(Table(energy, "Wire-to-water power and energy across the compliant "
                                    "frequencies (middle static level, median pumping level).",
                            formats={"frequency [Hz]": ".1f", "power [kW]": ".1f",
                                     energy.columns[-1]: ".3f"},
                            note="Motor and drive efficiencies are named settings (common "
                                 "practice values)."))
        blocks.append(_energy_figure(ps, units))
    return Section("Pump settings and energy", tuple(blocks), "pump")


def pump_section_for(a: Analysis, units: str = "US") -> Section | None:
    """The pump section of a report, or None when the project has no ``[pump]``."""
    try:
        ps = settings_for(a, units)
    except ModelError as err:
        return Section("Pump settings and energy", (Paragraph(f"No drive setting: {err}."),),
                       "pump")
    return None if ps is None else pump_section(ps, units)
