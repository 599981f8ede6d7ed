"""Read a well's monitoring history and its pump-rate log (both optional tables).

The history table holds routine samples over the years: ``sampled_at``, ``analyte``, ``value``
(with ``unit``, ``basis``, ``nondetect``, ``detection_limit``, ``uncertainty``, ``qualifier``
read as in the samples table), an optional ``sample_point`` and an optional ``rate`` (the rate
the well ran at when sampled). The pump log gives, from each ``time`` on, the ``rate`` (0 when
off) or ``pump`` on/off with the nominal rate (``settings.pump_nominal_rate``, else the last
rate the log gave). With a log, the rate at each sample's time and the volume pumped since the
pump last started come from it; without, from the history's rate column. Errors are one line
naming file, row and field, as for the other tables.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte, implied_basis, normalise_basis, to_canonical
from blendq.errors import InputError
from blendq.inputs.project import TABLE_COLUMNS
from blendq.inputs.tables import MAX_UNIT, Table, located, split_unit_basis

_PUMP = {"on": True, "off": False, "true": True, "false": False, "1": True, "0": False,
         "yes": True, "no": False, "running": True, "stopped": False}
_NONDETECT_WORDS = {"nd", "n.d.", "<dl", "<rl", "<mdl", "bdl"}


def read_pumplog(t: Table, nominal_rate: float | None) -> pd.DataFrame:
    """The pump log as (time, rate [m^3/d]) rows in time order.

    Parameters
    ----------
    t : Table
        The ``pumplog`` table.
    nominal_rate : float or None
        Rate of a row that says the pump is on without a rate [m^3/d].

    Raises
    ------
    InputError
        A negative rate, a rate that contradicts ``pump = off``, an "on" row without a rate
        when no nominal rate is known, two rows at one time with different rates.
    """
    if "rate" not in t.columns and "pump" not in t.columns:
        raise t.error(0, "rate", 'the pump log needs a "rate [unit]" or a "pump" (on/off) column')
    rows, last, seen = [], nominal_rate, {}
    for row, get in t.records():
        time, rate, pump = get("time"), get("rate"), get("pump")
        if pump is not None:
            if pump.lower() not in _PUMP:
                raise t.error(row, "pump", f'"{pump}" is not on or off')
            pump = _PUMP[pump.lower()]
        if rate is not None and rate < 0:
            raise t.error(row, "rate", f'"{t.raw(row, "rate")}" is negative')
        if pump is False:
            if rate:
                raise t.error(row, "rate", f'"{t.raw(row, "rate")}" contradicts pump = off')
            rate = 0.0
        elif rate is None:
            if pump is None:
                raise t.error(row, "rate", "is empty and the pump column says nothing; give one")
            if last is None:
                raise t.error(row, "rate", "is empty and no nominal rate is known (give the "
                                           "rate here or the setting pump_nominal_rate)")
            rate = last if nominal_rate is None else nominal_rate
        if rate > 0:
            last = rate
        if time in seen and not math.isclose(seen[time][1], rate, rel_tol=1e-9):
            raise t.error(row, "time", f'"{t.raw(row, "time")}" repeats the time of row '
                                       f"{seen[time][0]} with another rate")
        seen[time] = (row, rate)
        rows.append([time, rate, row])
    rows.sort(key=lambda r: r[0])
    return _frame("pumplog", rows)


def rate_at(log: pd.DataFrame, times) -> tuple[np.ndarray, np.ndarray]:
    """Rate [m^3/d] at each time and the volume [m^3] pumped since the pump last started.

    The rate is the last logged rate at or before the time (NaN before the log's first row);
    the volume integrates the stepwise rate from the last start (a row with a positive rate
    after a zero one, or the log's first row) to the time.
    """
    t = log["time"].to_numpy("datetime64[ns]")
    q = log["rate"].to_numpy(float)
    times = np.asarray(pd.to_datetime(times), "datetime64[ns]")
    k = np.searchsorted(t, times, side="right") - 1
    rate = np.where(k >= 0, q[np.clip(k, 0, None)], np.nan)
    days = (t - t[0]) / np.timedelta64(1, "D") if len(t) else np.zeros(0)
    # cumulative volume at each log row, and the volume at the last start before each row
    cum = np.concatenate([[0.0], np.cumsum(q[:-1] * np.diff(days))]) if len(t) else days
    start_cum = np.zeros(len(t))
    for i in range(1, len(t)):
        start_cum[i] = cum[i] if (q[i] > 0 and q[i - 1] <= 0) else start_cum[i - 1]
    volume = np.full(len(times), np.nan)
    ok = k >= 0
    kk = k[ok]
    at = (times[ok] - t[kk]) / np.timedelta64(1, "D")
    volume[ok] = np.where(q[kk] > 0, cum[kk] + q[kk] * at - start_cum[kk], 0.0)
    return rate, volume


def read_history(t: Table, pumplog: pd.DataFrame | None = None) -> pd.DataFrame:
    """The monitoring history in base units (mg/L on each analyte's canonical basis, m^3/d).

    Parameters
    ----------
    t : Table
        The ``history`` table (rows of other wells already dropped).
    pumplog : DataFrame, optional
        From :func:`read_pumplog`; gives the rate at each sample's time and the volume since
        the last start.

    Raises
    ------
    InputError
        As for the samples table (unit, basis, value, non-detect), and a negative rate.
    """
    if "unit" not in t.columns and t.unit("value") is None:
        raise t.error(0, "unit", "column is missing; add a unit column or a unit in the value "
                                 'header such as "value [mg/L]"')
    header_unit = t.unit("value")
    rows, analytes, factors = [], {}, {}
    for row, get in t.records():
        name = get("analyte")
        try:
            analyte = analytes[name] if name in analytes else get_analyte(name)
        except InputError as err:
            raise located(err, t.label, row, "analyte", t.raw(row, "analyte")) from err
        analytes[name] = analyte
        unit_text = get("unit") or header_unit
        if not unit_text:
            raise t.error(row, "unit", "is empty; give the unit of the value")
        if len(unit_text) > MAX_UNIT:
            raise t.error(row, "unit", f'"{unit_text[:20]}..." is longer than {MAX_UNIT} '
                                       "characters")
        _, unit, unit_basis = split_unit_basis(unit_text)
        basis_text = get("basis") or unit_basis or implied_basis(name) or None
        try:
            basis = normalise_basis(analyte, basis_text)
        except InputError as err:
            raise located(err, t.label, row, "basis", basis_text) from err
        key = (analyte.key, unit, basis)
        if key not in factors:
            try:
                factors[key] = to_canonical(1.0, unit, analyte, basis or None)
            except InputError as err:
                raise located(err, t.label, row, "unit", unit_text) from err
        value, nondetect, dl, unc = _value(t, row, get, factors[key])
        rate = get("rate")
        if rate is not None and rate < 0:
            raise t.error(row, "rate", f'"{t.raw(row, "rate")}" is negative')
        rows.append([get("sampled_at"), get("sample_point") or "", analyte.key, value,
                     nondetect, dl, unc, get("qualifier") or "",
                     math.nan if rate is None else rate, "" if rate is None else "history table",
                     math.nan, row])
    frame = _frame("history", rows)
    if pumplog is not None and len(pumplog):
        rate, volume = rate_at(pumplog, frame["sampled_at"])
        logged = np.isfinite(rate)
        frame.loc[logged, "rate"] = rate[logged]
        frame.loc[logged, "rate_from"] = "pump log"
        frame["volume_since_start"] = volume
    return frame.sort_values("sampled_at", kind="stable").reset_index(drop=True)


def _value(t: Table, row: int, get, factor: float) -> tuple[float, bool, float, float]:
    """(value, non-detect, detection limit, uncertainty) in canonical mg/L (NaN if absent)."""
    raw = t.raw(row, "value")
    marked = raw.startswith("<") or raw.lower() in _NONDETECT_WORDS
    flagged = get("nondetect")
    if flagged is False and marked:
        raise t.error(row, "nondetect", f'says false but the value is "{raw}"')
    nondetect = bool(flagged) or marked
    number = t.number_in(row, "value")
    if not nondetect and math.isnan(number):
        raise t.error(row, "value", "is empty; give the result or mark it as a non-detect")
    if number < 0:
        raise t.error(row, "value", f'"{raw}" is negative')
    dl = t.number_in(row, "detection_limit")
    if nondetect and math.isnan(dl):
        dl = number
    if nondetect and math.isnan(dl):
        raise t.error(row, "detection_limit", "is empty; a non-detect needs its detection limit "
                                              '(or write the value as "<0.5")')
    if dl <= 0:
        raise t.error(row, "detection_limit", f'"{t.raw(row, "detection_limit")}" is not positive')
    unc = t.share_or_number(row, "uncertainty", number)
    if nondetect:
        return math.nan, True, dl * factor, math.nan
    return number * factor, False, dl * factor, unc * factor


def _frame(name: str, rows: list[list]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=TABLE_COLUMNS[name])
    for col in frame.columns:
        if col in ("time", "sampled_at"):
            frame[col] = pd.to_datetime(frame[col]).astype("datetime64[ns]")
        elif col == "nondetect":
            frame[col] = frame[col].astype(bool)
        elif col == "source_row":
            frame[col] = frame[col].astype(int)
        elif col in ("value", "detection_limit", "uncertainty", "rate", "volume_since_start"):
            frame[col] = frame[col].astype(float)
    return frame
