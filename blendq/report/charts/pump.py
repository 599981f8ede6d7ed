"""Chart of the pump settings: energy per volume against the delivered rate across the drive
frequencies that keep the rate in the operating window, with the recommended and the cheapest
settings marked. A :class:`matplotlib.figure.Figure` from the object API (no pyplot state).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from blendq.units import DISPLAY_UNITS, display_unit_label, from_base

if TYPE_CHECKING:
    from matplotlib.figure import Figure as MplFigure


def energy_chart(ps, units: str = "US") -> MplFigure:
    """Energy per volume [kWh per 1,000 gal or per m3] against rate at the mean seasonal level.

    Parameters
    ----------
    ps : blendq.decide.pumpset.PumpSettings
    units : {"US", "SI"}
    """
    from matplotlib.figure import Figure

    from blendq.decide.pumpset import M3_PER_KGAL

    label, factor = ("kWh per 1,000 gal", M3_PER_KGAL) if units == "US" else ("kWh per m3", 1.0)
    unit = DISPLAY_UNITS[units]["rate"]
    e = ps.energy
    rate = from_base(e["rate"].to_numpy(), "rate", unit)
    fig = Figure(figsize=(6.6, 3.6), layout="constrained")
    ax = fig.add_subplot()
    ax.grid(True, color="#e0e0e0", linewidth=0.6)
    ax.set_axisbelow(True)
    ax.spines[["top", "right"]].set_visible(False)
    ax.plot(rate, e["kwh_per_m3"].to_numpy() * factor, color="#1f4e79", linewidth=1.6)
    for freq, name, style in ((ps.recommended, "recommended", "o"),
                              (ps.cheapest, "cheapest compliant", "s")):
        if freq is None or not np.isfinite(freq):
            continue
        i = int(np.argmin(np.abs(e["frequency"].to_numpy() - freq)))
        ax.plot(rate[i], e["kwh_per_m3"].iloc[i] * factor, style, color="#b5651d",
                label=f"{name} ({freq:.1f} Hz)")
    top = ax.secondary_xaxis("top")
    top.set_xticks(rate[::10], [f"{f:.1f}" for f in e["frequency"].to_numpy()[::10]])
    top.set_xlabel("drive frequency [Hz]", fontsize=8.5)
    ax.set_xlabel(f"delivered rate [{display_unit_label(unit)}]", fontsize=8.5)
    ax.set_ylabel(f"energy [{label}]", fontsize=8.5)
    ax.tick_params(labelsize=8.5)
    ax.legend(fontsize=8, frameon=False)
    return fig
