"""Per-well summaries of a wellfield and the wellfield table.

:func:`summarise` keeps of one well's :class:`~blendq.decide.analysis.Analysis` what the
wellfield table, its chart and the blending plan need (about 2 MB against about eleven
for the whole analysis of a demo-sized well, most of it the per-draw zone shares and flows):
the window, the rate grid with the rates every hydraulic criterion allows, the predictive draws
of the discharge concentration, the limits, and the table's texts. The texts come from the
analysis's own fields and sentence functions (window ends, monitoring-history trend tests,
thin-data note, unresolved zones), never a second derivation.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.decide.analysis import Analysis, thin_data_note
from blendq.errors import ModelError
from blendq.units import DISPLAY_UNITS, display_unit_label, from_base

#: text of a window end that no criterion closes (the end of the rate grid)
GRID_END = "end of the rate grid"


@dataclass
class WellSummary:
    """What the wellfield keeps of one well's analysis (base units: m^3/d, mg/L canonical).

    Attributes
    ----------
    name, entry_point : str
        The well's name in the wellfield file and the entry point it feeds.
    project_name : str
    seed, draws : int
        Seed and number of posterior draws of the well's analysis.
    rates : ndarray (n_rates,) [m^3/d]
        The project's rate grid.
    ok : ndarray of bool (n_rates,)
        Rates meeting every criterion of the well's own window.
    hydraulic_ok : ndarray of bool (n_rates,)
        Rates meeting every hydraulic and pump criterion (the well's limits in a blend,
        where quality is judged at the entry point instead).
    intervals : list of (low, high, low_reason, high_reason)
        The window ([m^3/d]; :class:`blendq.decide.sweep.Window`).
    recommended : float or None [m^3/d]
    reason_empty : str
    analytes : list of str
        Fitted analytes (the last axis of ``concentration``).
    concentration : ndarray (n_draws, n_rates, n_analytes) [mg/L]
        Predictive draws of the discharge concentration at each rate of the grid.
    limits : dict analyte -> float
        Governing limit of each fitted analyte [mg/L canonical].
    margin, exceedance_probability : float
        The project's settings the well's own window used.
    limiting, trend, gaps : str
        The table's texts (:func:`limiting_factor`, :func:`trend_text`, :func:`gaps_text`).
    decision : str
        The well's decision sentence (US units).
    pumping_level : ndarray (n_rates,) or None [m depth]
        Median over the draws of the predicted pumping level at each rate.
    level_limit : float or None [m depth]
        Deepest allowed pumping level: the operating intake depth minus the required
        submergence, as the well's own level criterion uses.
    log_sd : dict analyte -> float
        sd of ln(S / m) of the statistic each limit is judged on [-]
        (:attr:`blendq.decide.sweep.Statistic.log_sd`: temporal CV and lab error).
    energy : ndarray (n_rates,) or None [kWh/m^3]
        Wire-to-water energy per volume at the drive setting that delivers each rate, when the
        project has a ``[pump]`` table (NaN where the pump cannot deliver the rate).
    """

    name: str
    entry_point: str
    project_name: str
    seed: int
    draws: int
    rates: np.ndarray
    ok: np.ndarray
    hydraulic_ok: np.ndarray
    intervals: list
    recommended: float | None
    reason_empty: str
    analytes: list[str]
    concentration: np.ndarray
    limits: dict[str, float] = field(default_factory=dict)
    margin: float = 0.9
    exceedance_probability: float = 0.05
    limiting: str = ""
    trend: str = ""
    gaps: str = ""
    decision: str = ""
    pumping_level: np.ndarray | None = None
    level_limit: float | None = None
    log_sd: dict[str, float] = field(default_factory=dict)
    energy: np.ndarray | None = None

    @property
    def empty(self) -> bool:
        """True when no rate meets every criterion of the well's own window."""
        return not self.intervals

    @property
    def window_low(self) -> float:
        """Lowest rate of the window [m^3/d] (NaN without a window)."""
        return min((i[0] for i in self.intervals), default=float("nan"))

    @property
    def window_high(self) -> float:
        """Highest rate of the window [m^3/d] (NaN without a window)."""
        return max((i[1] for i in self.intervals), default=float("nan"))


def limiting_factor(a: Analysis) -> str:
    """What closes the window: the criteria at the ends of the interval that holds the
    recommended rate (the widest interval when there is none), or why there is no window."""
    w = a.window
    if w.empty:
        return f"no window: {w.reason_empty}"
    rec = w.recommended
    held = [i for i in w.intervals if rec is not None and i[0] <= rec <= i[1]]
    lo, hi, why_lo, why_hi = held[0] if held else max(w.intervals, key=lambda i: i[1] - i[0])
    return f"low end: {why_lo or GRID_END}; high end: {why_hi or GRID_END}"


def trend_text(a: Analysis) -> str:
    """Per analyte with a monitoring-history time model: the Mann-Kendall direction and Sen's
    slope of its blended history per year (:func:`blendq.decide.forecast.trend_tests`);
    "no history" when the project has none."""
    if not a.history:
        return "no history"
    from blendq.decide.forecast import trend_tests

    parts = []
    for r in trend_tests(a).itertuples(index=False):
        an = get_analyte(r.analyte)
        slope = float(an.in_display_unit(np.asarray([r.sen_slope_per_year]))[0])
        basis = f" as {an.canonical_basis}" if an.canonical_basis and len(an.bases) > 1 else ""
        parts.append(f"{r.analyte} {r.trend} ({slope:+.2g} {an.display_unit}{basis} per year)")
    return "; ".join(parts)


def gaps_text(a: Analysis) -> str:
    """Data gaps: the thin-data note, the zones the data do not resolve per fitted analyte,
    and the limited analytes without a detected result ("none" when there is nothing)."""
    parts = []
    thin = thin_data_note(a.project)
    if thin:
        parts.append(thin.split(" (")[0])
    z = a.zones
    for analyte in dict.fromkeys(z["analyte"]):
        rows = z[z["analyte"] == analyte]
        n = int((rows["verdict"] == "not resolved").sum())
        if n:
            parts.append(f"{analyte}: {n} of {len(rows)} zones not resolved")
    limited = {lim.analyte for lim in a.project.limits}
    present = set(a.project.analytes())
    for analyte, why in a.not_fitted.items():
        if analyte in limited:
            parts.append(f"{analyte} not fitted: {why}")
    missing = sorted(k for k in limited - present - set(a.not_fitted)
                     if k in _listed_analytes(a))
    if missing:
        parts.append("no results for " + ", ".join(missing))
    return "; ".join(parts) or "none"


def _listed_analytes(a: Analysis) -> set[str]:
    """Analytes whose limits the user named (``[[limits]]``), not the whole catalogue of a
    named limit set: a missing result of a catalogue analyte nobody asked for is no gap."""
    from blendq.chemistry.limits import limit_set

    named = {lim.analyte for name in a.project.settings.limit_sets for lim in limit_set(name)}
    return {lim.analyte for lim in a.project.limits if lim.analyte not in named}


def summarise(a: Analysis, name: str, entry_point: str, seed: int) -> WellSummary:
    """The :class:`WellSummary` of one well's analysis."""
    from blendq.decide.analysis import decision_sentence
    from blendq.decide.sweep import compliance_statistics

    w, s = a.window, a.project.settings
    hydraulic = np.ones(len(w.rates), bool)
    for c in w.criteria:
        if c.kind in ("hydraulic", "pump"):
            hydraulic &= np.asarray(c.ok, bool)
    pred = a.prediction
    return WellSummary(
        name=name, entry_point=entry_point, project_name=a.project.name, seed=int(seed),
        draws=int(a.draws.n_draws), rates=np.asarray(w.rates, float).copy(),
        ok=np.asarray(w.ok, bool).copy(), hydraulic_ok=hydraulic,
        intervals=list(w.intervals), recommended=w.recommended, reason_empty=w.reason_empty,
        analytes=list(pred.analytes), concentration=np.asarray(pred.concentration).copy(),
        limits={k: float(lim.canonical()) for k, lim in a.limits.items()},
        margin=float(s.margin), exceedance_probability=float(s.exceedance_probability),
        limiting=limiting_factor(a), trend=trend_text(a), gaps=gaps_text(a),
        decision=decision_sentence(a, "US"),
        pumping_level=np.median(np.asarray(pred.pumping_level, float), axis=0),
        level_limit=float(a.project.well.operating_intake - a.project.well.submergence),
        log_sd={k: float(st.log_sd)
                for k, st in compliance_statistics(a.project, a.limits).items()},
        energy=energy_curve(a))


def energy_curve(a: Analysis, pumping_level: np.ndarray | None = None,
                 intake: float | None = None) -> np.ndarray | None:
    """Wire-to-water energy per volume [kWh/m^3] at each rate of the grid, at the drive
    setting that delivers the rate against the median pumping level (the pump's curve scaled
    by the affinity laws meeting the system curve, :mod:`blendq.decide.pumpset`); NaN where
    no setting in the drive's range delivers it. None without a ``[pump]`` table.

    ``pumping_level`` (n_draws, n_rates) [m depth] and ``intake`` [m depth] give the levels
    and the pump intake of a modified well (a scenario's prediction): the band then comes from
    those draws alone, and a moved intake lengthens or shortens the pump column by the move
    (the pump hangs at its intake, as a scenario's new pump does).

    References
    ----------
    Karassik, I.J., Messina, J.P., Cooper, P. and Heald, C.C. (2008) Pump Handbook, 4th ed.
    McGraw-Hill (affinity laws, operating point, wire-to-water efficiency).
    """
    from blendq.decide import pumpset
    from blendq.inputs.pump_file import read_pump

    folder, files = a.project.folder, getattr(a.project, "files", {})
    if folder is None or "project" not in files:
        return None
    spec = read_pump(folder / files["project"])
    if spec is None:
        return None
    if pumping_level is None:
        rates, band = pumpset.level_band(a)
    else:
        rates, band = pumpset.band_of(a.prediction.rates, pumping_level,
                                      a.project.settings.exceedance_probability)
    if intake is not None:
        length = spec.column_length + intake - a.project.well.operating_intake
        if length <= 0:
            raise ModelError(f"the intake's move leaves a pump column of {length:.3g} m")
        spec = replace(spec, column_length=float(length))
    out = np.full(len(rates), np.nan)
    # a modified well may have no level at the high rates (it cannot give them): the system
    # curve is the part of the grid with a level
    known = np.isfinite(band[1])
    if not known.any():
        return out
    curve, top = pumpset.curve_of(spec), float(rates[known][-1])
    system = pumpset._system(spec, rates[known], band[1][known], 0.0)
    for k, q in enumerate(rates):
        if q <= 0 or not known[k] or q > top:
            continue
        f = pumpset._setting(curve, system, spec, float(q),
                             (spec.min_frequency, spec.max_frequency), top)
        e = pumpset.energy_at(curve, system, spec, f, top)
        if np.isfinite(e["kwh_per_m3"]) and abs(e["rate"] - q) <= 1e-6 * max(q, 1.0):
            out[k] = e["kwh_per_m3"]
    return out


#: columns of :func:`wellfield_table` ("{rate}" is the display rate unit)
TABLE_COLUMNS = ("well", "entry point", "status", "window low [{rate}]", "window high [{rate}]",
                 "recommended [{rate}]", "limiting factor", "trend", "data gaps", "error")


def wellfield_table(outcomes, units: str = "US") -> pd.DataFrame:
    """One row per well: window, recommended rate, limiting factor, trend and data gaps.

    Parameters
    ----------
    outcomes : iterable of :class:`blendq.decide.batch.WellOutcome`
        In the wellfield file's order.
    units : {"US", "SI", "SI-L/s"}
        Display units of the rates.

    Returns
    -------
    DataFrame
        Columns :data:`TABLE_COLUMNS`; rates NaN where a well has no window or failed;
        ``status`` is "window", "no window" or "failed" (with the one-line ``error``).
    """
    unit = DISPLAY_UNITS[units]["rate"]
    label = display_unit_label(unit)
    cols = [c.format(rate=label) for c in TABLE_COLUMNS]

    def rate(v):
        if v is None or not np.isfinite(v):
            return np.nan
        return float(f"{float(from_base(v, 'rate', unit)):.4g}")

    rows = []
    for o in outcomes:
        s = o.summary
        if s is None:
            rows.append([o.name, o.entry_point, "failed", np.nan, np.nan, np.nan, "", "", "",
                         o.error or ""])
            continue
        rows.append([o.name, o.entry_point, "no window" if s.empty else "window",
                     rate(s.window_low), rate(s.window_high), rate(s.recommended), s.limiting,
                     s.trend, s.gaps, ""])
    return pd.DataFrame(rows, columns=cols)


def table_lines(table: pd.DataFrame) -> list[str]:
    """The wellfield table as text lines (one block per well) for the command line."""
    rate_cols = [c for c in table.columns if c.startswith(("window low", "recommended"))]
    unit = rate_cols[0].split("[", 1)[1].rstrip("]") if rate_cols else ""
    lo_c, hi_c, rec_c = (c for c in table.columns if "[" in c)

    def fmt(v) -> str:
        return f"{v:,.4g}" if np.isfinite(v) else "-"

    out = []
    for r in table.to_dict("records"):
        head = f"{r['well']} (entry point {r['entry point']}): "
        if r["status"] == "failed":
            out.append(head + f"FAILED: {r['error']}")
            continue
        if r["status"] == "no window":
            out.append(head + r["limiting factor"])
        else:
            out.append(head + f"window {fmt(r[lo_c])} to {fmt(r[hi_c])} {unit}, recommended "
                       f"{fmt(r[rec_c])} {unit}; {r['limiting factor']}")
        out.append(f"    trend: {r['trend']}")
        out.append(f"    data gaps: {r['data gaps']}")
    return out
