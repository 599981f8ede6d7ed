"""The report folder's CSV tables in display units, the unit in every column name, rounded.

The analysis keeps its tables in base units (m, m^3/d, mg/L on each analyte's canonical basis)
with full floating-point precision. A reviewer opening ``tables/*.csv`` in a spreadsheet needs
the project's display units (US: gpm, ft; SI: m^3/d, m; each analyte in its own unit, ug/L for
arsenic), the unit beside each number and no digits beyond what the data carry. These functions
make those tables; nothing else reads them back.

Rules
-----
* Every numeric column name ends in its unit in brackets: ``rate [gpm]``, ``share Upper sand
  [-]``. In the long tables (one row per zone and analyte, or per lab result) the analytes have
  different units; those rows carry a ``unit`` column and their concentration columns are named
  ``estimate [unit column]``.
* Values are rounded to :data:`CSV_SIGNIFICANT_DIGITS` significant digits (probabilities to
  :data:`CSV_PROBABILITY_DECIMALS` decimals), so ``0.0070999999999999995`` is written
  ``0.0071``. The text, the command line and the charts round the same values to three
  significant digits (:func:`blendq.units.significant`); the CSV keeps one digit more.
* Each file begins with a few comment lines starting with ``# `` (what the table is, the blendq
  version, the cautions; :func:`blendq.report.outputs.csv_comments`): read the tables with
  ``pandas.read_csv(path, comment="#")``.
* CSV numbers have no thousands separator in either unit system and a point as the decimal
  mark (RFC 4180 files for programs and spreadsheets; a separator would split or mislead).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.units import BASE_UNITS, DISPLAY_UNITS, display_unit_label, from_base

#: Significant digits of numbers in the CSV tables; blendq's setting (one more than the
#: report's three, so a reader can recompute a rounded figure of the report).
CSV_SIGNIFICANT_DIGITS = 4
#: Decimals of probabilities in the CSV tables.
CSV_PROBABILITY_DECIMALS = 4


def round_significant(values, digits: int = CSV_SIGNIFICANT_DIGITS) -> np.ndarray:
    """Round to ``digits`` significant digits (NaN and 0 kept).

    Parameters
    ----------
    values : array_like
    digits : int

    Returns
    -------
    ndarray of float
        Each value the float nearest to its rounded decimal, so that Python writes it short
        (``0.0071``, ``12350.0``).
    """
    x = np.asarray(values, float)
    flat = [float(f"{v:.{digits}g}") if np.isfinite(v) else v for v in x.ravel()]
    return np.asarray(flat, float).reshape(x.shape)


def _unit(kind: str, units: str) -> str:
    return DISPLAY_UNITS[units].get(kind, BASE_UNITS[kind])


def _label(unit: str) -> str:
    return display_unit_label(unit)


def _numeric(series: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)


def sweep_csv_table(sweep: pd.DataFrame, units: str) -> pd.DataFrame:
    """The rate sweep: rate, quality bands, exceedance probabilities, level and zone shares."""
    rate_u, len_u = _unit("rate", units), _unit("length", units)
    out: dict[str, np.ndarray] = {}
    for col in sweep.columns:
        v = sweep[col].to_numpy(float)
        if col == "rate":
            out[f"rate [{_label(rate_u)}]"] = round_significant(from_base(v, "rate", rate_u))
            continue
        if col.startswith("pumping_level_"):
            what = col[len("pumping_level_"):]
            out[f"pumping level {what} [{_label(len_u)} depth]"] = round_significant(
                from_base(v, "length", len_u))
            continue
        if col.startswith("share_"):
            out[f"share {col[len('share_'):]} [-]"] = round_significant(v)
            continue
        analyte, _, stat = col.partition("_")
        an = get_analyte(analyte)
        if stat.startswith("p_exceed_"):
            which = "margin x limit" if stat.endswith("margin") else "limit"
            out[f"{an.label()} P(> {which}) [-]"] = np.round(v, CSV_PROBABILITY_DECIMALS)
        else:
            out[f"{an.label()} {stat.replace('_', ' ')} [{_label(an.display_unit)}]"] = \
                round_significant(an.in_display_unit(v))
    return pd.DataFrame(out)


def _concentration_rows(df: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Concentration columns of a long table in each row's analyte display unit."""
    out = df.copy()
    units = []
    for col in columns:
        out[col] = np.nan
    for analyte, idx in df.groupby("analyte").groups.items():
        an = get_analyte(analyte)
        for col in columns:
            out.loc[idx, col] = round_significant(an.in_display_unit(
                df.loc[idx, col].to_numpy(float)))
    units = [_label(get_analyte(a).display_unit) for a in df["analyte"]]
    out["analyte"] = [get_analyte(a).label() for a in df["analyte"]]
    out.insert(list(out.columns).index("analyte") + 1, "unit", units)
    return out.rename(columns={c: f"{c} [unit column]" for c in columns})


def zones_csv_table(zones: pd.DataFrame) -> pd.DataFrame:
    """Zone water quality: estimate, sd, interval and the data-allowed range per zone."""
    conc = [c for c in ("estimate", "sd", "lower", "upper", "range_low", "range_high")
            if c in zones.columns]
    return _concentration_rows(zones, conc)


def residuals_csv_table(residuals: pd.DataFrame, units: str) -> pd.DataFrame:
    """Lab results against the fitted blend, in display units."""
    conc = [c for c in ("observed", "fitted", "sigma") if c in residuals.columns]
    out = _concentration_rows(residuals, conc)
    len_u = _unit("length", units)
    if "depth" in out.columns:
        out["depth"] = round_significant(from_base(residuals["depth"].to_numpy(float),
                                                   "length", len_u))
        out = out.rename(columns={"depth": f"depth [{_label(len_u)}]"})
    if "standardised" in out.columns:
        out["standardised"] = round_significant(out["standardised"].to_numpy(float))
        out = out.rename(columns={"standardised": "standardised residual [-]"})
    return out


def hydraulics_csv_table(hydraulics: pd.DataFrame, units: str) -> pd.DataFrame:
    """Zone conductances and static levels (depths, from the fitted heads)."""
    g_u, len_u = _unit("conductance", units), _unit("length", units)
    out = hydraulics.copy()
    out["conductance"] = round_significant(from_base(hydraulics["conductance"].to_numpy(float),
                                                     "conductance", g_u))
    out["conductance_rel_sd"] = round_significant(hydraulics["conductance_rel_sd"])
    # the fitted static head is an elevation relative to the datum: its depth is -head
    out["static_head"] = round_significant(from_base(-hydraulics["static_head"].to_numpy(float),
                                                     "length", len_u))
    out["static_head_sd"] = round_significant(from_base(
        hydraulics["static_head_sd"].to_numpy(float), "length", len_u))
    return out.rename(columns={
        "conductance": f"conductance [{_label(g_u)}]",
        "conductance_rel_sd": "conductance relative sd [-]",
        "static_head": f"static level [{_label(len_u)} depth]",
        "static_head_sd": f"static level sd [{_label(len_u)}]",
    })


def findings_csv_table(findings: pd.DataFrame) -> pd.DataFrame:
    """The review findings (text; numbers only as row references)."""
    return findings.copy()


#: What each table of the report folder holds (the first comment line of its file).
CSV_TITLES = {
    "tables/zones.csv": "Zone water quality: estimate, sd, interval and data-allowed range "
                        "per zone and analyte",
    "tables/sweep.csv": "Rate sweep: discharge quality bands, exceedance probabilities, "
                        "pumping levels and zone shares per rate",
    "tables/residuals.csv": "Lab results against the fitted blend",
    "tables/hydraulics.csv": "Zone conductances and static levels",
    "tables/qa_findings.csv": "Data review findings",
}


def csv_tables(a, units: str) -> dict[str, pd.DataFrame]:
    """Every CSV table of the report folder, by file name, in ``units`` ("US" or "SI")."""
    return {
        "tables/zones.csv": zones_csv_table(a.zones),
        "tables/sweep.csv": sweep_csv_table(a.sweep_table, units),
        "tables/residuals.csv": residuals_csv_table(a.residuals, units),
        "tables/hydraulics.csv": hydraulics_csv_table(a.hydraulics, units),
        "tables/qa_findings.csv": findings_csv_table(a.qa.findings),
    }


def unlabelled_numeric_columns(df: pd.DataFrame) -> list[str]:
    """Numeric columns whose name carries no unit in brackets (for checks)."""
    return [c for c in df.columns if _numeric(df[c]) and not str(c).endswith("]")
            and c not in ("source_row",)]
