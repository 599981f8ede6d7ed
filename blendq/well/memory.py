"""Crossflow memory: the water thief zones store while the well stands idle, and its return.

At rest, ambient crossflow carries water from the zones of high head into the zones of low head
(thief zones) through the open borehole. A thief zone stores that water, the blend of the donor
zones, for as long as the well stands idle. When the pump starts, the thief zone turns to inflow
and returns its stored water first, so the first water pumped is not the steady blend: step
samples of a test that began after a shut-in, and compliance samples taken soon after a pump
start in a cycling well, can carry recycled water.

Model (docs/methods.md, section "Crossflow memory"):

* stored volume of zone j after an idle time t_idle: V_j = max(-q0_j, 0) t_idle, with q0_j the
  ambient crossflow of the zone model at Q = 0 (positive into the well). The crossflow is taken
  as steady over the whole idle time, from the moment the pump stops (heads recover in minutes
  to hours in most wells, and regional flow drifts the stored water away over days): the volume
  is an upper bound that grows linearly with idle time, with no cap;
* stored concentration: the donors' blend, sum_i max(q0_i, 0) c_i / sum_i max(q0_i, 0);
* return: each thief zone that flows into the well at the pumping rate is a well-mixed volume
  V_j washed out by its own inflow q_j(Q): the stored share of its water after a cumulative
  outflow W_j is exp(-W_j / V_j) (exponential washout). The discharge then carries the stored
  water in the share r(t) = sum_j a_j(Q) exp(-W_j / V_j), with a_j the discharge weights.

Base units: m^3 (volumes), m^3/d (rates), d (times), mg/L (concentrations).

References
----------
Levenspiel, O. (1999). Chemical Reaction Engineering, 3rd ed. Wiley: the washout of an ideal
mixed vessel, C(t) = C0 exp(-t q / V) (the tests check it against a numerical integration of the
mass balance dC/dt = q (c_in - C) / V with scipy).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from blendq.chemistry.analytes import get_analyte
from blendq.errors import InputError, ModelError
from blendq.inputs.project import Project
from blendq.review.field import sample_table, step_schedule
from blendq.review.rules import prepare_samples
from blendq.units import format_quantity, significant
from blendq.well.model import WellModel, model_from_parameters, prior_hydraulics

#: columns of :func:`sample_memory`'s table
MEMORY_COLUMNS = ["sample_id", "step", "idle_time", "stored", "pumped", "returned_fraction",
                  "thieves", "shares"]


@dataclass(frozen=True)
class StoredWater:
    """Water the thief zones took in during an idle time.

    Attributes
    ----------
    zone_names : list of str
    ambient_flow : ndarray (n_zones,)
        q0_i [m^3/d], positive into the well (a donor), negative out of it (a thief zone).
    idle_time : float
        t_idle [d].
    volume : ndarray (n_zones,)
        V_j [m^3]: max(-q0_j, 0) t_idle (zero for a donor).
    donor_share : ndarray (n_zones,)
        Share of each donor in the stored water [-] (zero for a thief zone; sums to 1 when
        there is crossflow).
    """

    zone_names: list
    ambient_flow: np.ndarray
    idle_time: float
    volume: np.ndarray
    donor_share: np.ndarray

    @property
    def total(self) -> float:
        """Volume stored in all thief zones [m^3]."""
        return float(np.sum(self.volume))

    @property
    def thieves(self) -> list[str]:
        """Names of the zones that stored water."""
        return [n for n, v in zip(self.zone_names, self.volume, strict=True) if v > 0]

    def concentration(self, zone_values) -> np.ndarray:
        """Concentration of the stored water [mg/L]: the donors' blend.

        Parameters
        ----------
        zone_values : array_like (n_zones,) or (n_zones, n_analytes)
            Zone concentrations [mg/L].
        """
        return np.tensordot(self.donor_share, np.asarray(zone_values, float), axes=(0, 0))


def ambient_crossflow(model: WellModel) -> np.ndarray:
    """Zone flows at rest, q0_i [m^3/d] (positive into the well), shape (n_zones,)."""
    return np.asarray(model.state(np.zeros(1)).zone_flow, float)[..., 0, :]


def stored_water(model: WellModel, idle_time: float, zone_names) -> StoredWater:
    """Volume each thief zone stores during ``idle_time`` [d] of ambient crossflow.

    Returns
    -------
    StoredWater

    Raises
    ------
    ModelError
        For a negative or non-finite idle time.
    """
    t = float(idle_time)
    if not (np.isfinite(t) and t >= 0):
        raise ModelError(f"idle time {idle_time!r} d must be finite and >= 0")
    q0 = ambient_crossflow(model)
    inflow = np.clip(q0, 0.0, None)
    total_in = float(inflow.sum())
    share = inflow / total_in if total_in > 0 else np.zeros_like(q0)
    return StoredWater(list(zone_names), q0, t, np.clip(-q0, 0.0, None) * t, share)


def remaining_share(stored: np.ndarray, outflow) -> np.ndarray:
    """Share of each thief zone's stored water still in it after a cumulative outflow [-].

    Well-mixed washout: exp(-W_j / V_j); 0 where nothing was stored.

    Parameters
    ----------
    stored : array_like (n_zones,)
        V_j [m^3].
    outflow : array_like (..., n_zones)
        W_j [m^3]: the zone's inflow to the well since the pump started (>= 0).
    """
    v = np.asarray(stored, float)
    w = np.clip(np.asarray(outflow, float), 0.0, None)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.exp(-np.where(v > 0, w / np.where(v > 0, v, 1.0), np.inf))
    return np.where(v > 0, r, 0.0)


def returned_shares(model: WellModel, stored: StoredWater, rates, durations) -> np.ndarray:
    """Share of each thief zone's stored water in the discharge at the end of a pumping
    schedule [-], shape (n_zones,): a_j(Q) exp(-W_j / V_j), W_j the zone's inflow since the
    pump started (negative flows count as none). Their sum is the returned share r.

    Parameters
    ----------
    model : WellModel
    stored : StoredWater
    rates, durations : array_like (k,)
        Rates [m^3/d] and durations [d] pumped since the pump started, in order; the shares
        are the ones at the end of the last, at its rate.
    """
    q = np.asarray(rates, float)
    dt = np.asarray(durations, float)
    if not len(q):
        return np.full(len(stored.volume), np.nan)
    flows = np.clip(np.asarray(model.state(q).zone_flow, float), 0.0, None)  # (k, n_zones)
    outflow = np.sum(flows * dt[:, None], axis=0)
    weights = np.asarray(model.weights(q[-1:]), float)[0]
    return weights * remaining_share(stored.volume, outflow)


@dataclass(frozen=True)
class FirstFlush:
    """Discharge after a pump start at a constant rate, with stored water returning.

    Attributes
    ----------
    rate : float
        Q [m^3/d].
    times : ndarray (k,)
        Times since the pump start [d].
    returned : ndarray (k,)
        Share of stored water in the discharge [-].
    concentration : ndarray (k, n_analytes)
        Discharge concentration [mg/L].
    steady : ndarray (n_analytes,)
        The steady blend at Q [mg/L] (no stored water left).
    time_to_tolerance : ndarray (n_analytes,)
        Pumping time after which every later discharge is within ``tolerance`` of the steady
        blend [d] (0 when it always is).
    tolerance : float
        Relative tolerance [-].
    """

    rate: float
    times: np.ndarray
    returned: np.ndarray
    concentration: np.ndarray
    steady: np.ndarray
    time_to_tolerance: np.ndarray
    tolerance: float

    @property
    def volume_to_tolerance(self) -> np.ndarray:
        """Volume pumped before the discharge is within the tolerance [m^3], per analyte."""
        return self.rate * self.time_to_tolerance


def first_flush(model: WellModel, stored: StoredWater, rate: float, zone_values,
                tolerance: float, times=None) -> FirstFlush:
    """Discharge concentration after a pump start at ``rate``, the stored water washing out.

    c(t) = c_ss + sum_j a_j(Q) (c_s - c_j) exp(-q_j(Q) t / V_j), summed over the thief zones
    that flow into the well at Q, with c_s the stored (donors') concentration and c_ss the
    steady blend.

    The time to tolerance is the earliest t after which the bound
    sum_j a_j |c_s - c_j| exp(-q_j t / V_j) <= tolerance |c_ss| holds (the bound falls with t,
    so every later discharge is within the tolerance too); for one thief zone it is the closed
    form t = (V_j / q_j) ln(a_j |c_s - c_j| / (tolerance |c_ss|)).

    Parameters
    ----------
    model : WellModel
    stored : StoredWater
    rate : float
        Q [m^3/d], > 0.
    zone_values : array_like (n_zones, n_analytes)
        Zone concentrations [mg/L].
    tolerance : float
        Relative distance from the steady blend that counts as steady [-], > 0.
    times : array_like, optional
        Times to report [d] (default: 0 to three times the longest time to tolerance).

    Raises
    ------
    ModelError
        For a rate or tolerance that is not positive.
    """
    if not rate > 0 or not tolerance > 0:
        raise ModelError("the first flush needs a positive rate and a positive tolerance")
    c = np.asarray(zone_values, float)
    c = c[:, None] if c.ndim == 1 else c
    state = model.state(np.array([float(rate)]))
    q = np.asarray(state.zone_flow, float)[0]
    a = np.asarray(model.weights(np.array([float(rate)])), float)[0]
    steady = a @ c
    cs = stored.concentration(c)
    returns = (stored.volume > 0) & (q > 0) & (a > 0)
    k = np.where(returns, q / np.where(returns, stored.volume, 1.0), 0.0)  # washout rate [1/d]
    amp = np.where(returns[:, None], a[:, None] * (cs[None, :] - c), 0.0)  # (n_zones, n_an)
    need = tolerance * np.abs(steady)

    def bound(t):
        return np.sum(np.abs(amp) * np.exp(-k[:, None] * t), axis=0)

    ttol = np.zeros(c.shape[1])
    for m in range(c.shape[1]):
        if not bound(0.0)[m] > need[m]:
            continue
        if need[m] <= 0:
            ttol[m] = np.inf
            continue
        # each term alone reaches need/n at a closed-form time; the bound is below need then
        live = returns & (np.abs(amp[:, m]) > 0)
        hi = float(np.max(np.log(np.abs(amp[live, m]) * live.sum() / need[m]) / k[live]))
        lo = 0.0
        for _ in range(200):  # bisection on a decreasing function
            mid = 0.5 * (lo + hi)
            if bound(mid)[m] > need[m]:
                lo = mid
            else:
                hi = mid
            if hi - lo <= 1e-9 * max(hi, 1e-12):
                break
        ttol[m] = hi
    if times is None:
        finite = ttol[np.isfinite(ttol)]
        end = 3.0 * float(finite.max()) if finite.size and finite.max() > 0 else 1.0
        times = np.linspace(0.0, end, 61)
    t = np.asarray(times, float)
    decay = np.exp(-k[None, :] * t[:, None])  # (k_t, n_zones)
    conc = steady[None, :] + decay @ amp
    returned = decay @ np.where(returns, a, 0.0)
    return FirstFlush(float(rate), t, returned, conc, steady, ttol, float(tolerance))


# ------------------------------------------------------------------ a project's step samples

def review_model(project: Project) -> WellModel:
    """The zone model from the zone properties (priors): what the review, run before the fit,
    knows of the ambient crossflow."""
    prior = prior_hydraulics(project)
    return model_from_parameters(project, np.exp(prior.log_conductance), prior.static_head)


def review_memory(project: Project) -> tuple[pd.DataFrame | None, StoredWater | None]:
    """The crossflow memory the review sees, from the zone properties (before any fit).

    Returns
    -------
    (DataFrame or None, StoredWater or None)
        :func:`sample_memory` and the water stored before the test; (None, None) without an
        idle time before the test. When the zone properties give no zone model, an empty
        table whose ``attrs["skipped"]`` says why.
    """
    idle = project.settings.idle_time_before_test
    if idle is None:
        return None, None
    try:
        model = review_model(project)
    except InputError as err:
        table = pd.DataFrame(columns=MEMORY_COLUMNS)
        table.attrs["skipped"] = f"no zone model from the zone properties ({err.message})"
        return table, None
    return sample_memory(project, model), stored_water(model, idle, project.zone_names)


def sample_memory(project: Project, model: WellModel | None = None) -> pd.DataFrame:
    """For each step sample, the stored volume it may carry and the volume pumped before it.

    The pump starts at the first step after the idle time before the test
    (``settings.idle_time_before_test``), or at a step that began after a recovery, idle since
    the end of the step before (when both times are known). The returned share is the
    well-mixed washout at the sample's time (:func:`returned_shares`), with the pumped
    schedule taken from the steps table (a sample without a time is taken at the end of its
    step).

    Parameters
    ----------
    project : Project
    model : WellModel, optional
        Zone model (default :func:`review_model`, from the zone properties).

    Returns
    -------
    DataFrame
        Columns :data:`MEMORY_COLUMNS`: ``idle_time`` [d], ``stored`` [m^3] (all thief zones),
        ``pumped`` [m^3] since the pump started, ``returned_fraction`` [-], ``thieves`` (text),
        ``shares`` (each zone's returned share [-], :func:`returned_shares`).
        Empty without an idle time, steps or samples. Samples whose step or times are unknown
        have NaN volumes.
    """
    idle = project.settings.idle_time_before_test
    if idle is None or project.steps.empty or project.samples.empty or not project.zones:
        return pd.DataFrame(columns=MEMORY_COLUMNS)
    model = review_model(project) if model is None else model
    schedule = step_schedule(project.steps)
    samples = sample_table(prepare_samples(project.samples))
    keys = list(schedule.index)
    one_day = pd.Timedelta(days=1)
    rows = []
    for sid, s in samples.iterrows():
        if not pd.isna(s["depth"]) or s["step_key"] not in schedule.index:
            continue  # a depth sample is not discharge; an unknown step is the review's error
        k = keys.index(s["step_key"])
        p = max([j for j in range(k + 1) if schedule["recovered_before"].iloc[j]] or [0])
        t_idle = float(idle)
        if p > 0:
            gap = (schedule["start"].iloc[p] - schedule["end"].iloc[p - 1]) / one_day
            t_idle = float(gap) if pd.notna(gap) and gap >= 0 else float("nan")
        span = schedule.iloc[p:k + 1]
        dur = span["duration"].to_numpy(float).copy()
        if pd.notna(s["sampled_at"]) and pd.notna(span["start"].iloc[-1]):
            dur[-1] = min(dur[-1], (s["sampled_at"] - span["start"].iloc[-1]) / one_day) \
                if np.isfinite(dur[-1]) else (s["sampled_at"] - span["start"].iloc[-1]) / one_day
        dur = np.clip(dur, 0.0, None)
        rates = span["rate"].to_numpy(float)
        known = np.isfinite(t_idle) and np.all(np.isfinite(dur)) and np.all(np.isfinite(rates))
        if known:
            stored = stored_water(model, t_idle, project.zone_names)
            shares = (returned_shares(model, stored, rates, dur) if dur.sum() > 0
                      else np.asarray(model.weights(rates[-1:]), float)[0]
                      * (stored.volume > 0))
            frac = float(np.sum(shares))
            pumped = float(np.sum(rates * dur))
            volume, thieves = stored.total, ", ".join(stored.thieves)
        else:
            frac, pumped, volume, thieves = np.nan, np.nan, np.nan, ""
            shares = np.full(len(project.zones), np.nan)
        rows.append({"sample_id": sid, "step": s["step_key"], "idle_time": t_idle,
                     "stored": volume, "pumped": pumped, "returned_fraction": frac,
                     "thieves": thieves, "shares": tuple(float(x) for x in shares)})
    return pd.DataFrame(rows, columns=MEMORY_COLUMNS)


def returned_bias(stored: StoredWater, shares, zone_values) -> np.ndarray:
    """Predicted error of a sample carrying stored water [mg/L], per analyte.

    The stored water replaces part of each thief zone's own water in the discharge, so the
    sample differs from the steady blend by sum_j s_j (c_s - c_j), with s_j the zone's
    returned share (:func:`returned_shares`) and c_s the stored (donors') concentration.

    Parameters
    ----------
    stored : StoredWater
    shares : array_like (n_zones,)
        s_j [-].
    zone_values : array_like (n_zones, n_analytes)
        Zone concentrations [mg/L].
    """
    c = np.asarray(zone_values, float)
    c = c[:, None] if c.ndim == 1 else c
    s = np.nan_to_num(np.asarray(shares, float))
    return s @ (stored.concentration(c)[None, :] - c)


def sample_bias(model: WellModel, table: pd.DataFrame, zone_values: pd.DataFrame) -> pd.DataFrame:
    """Predicted error of each step sample from returned water [mg/L] (:func:`returned_bias`).

    Parameters
    ----------
    model : WellModel
        The zone model ``table`` was computed with (it gives the donors' blend).
    table : DataFrame
        :func:`sample_memory`.
    zone_values : DataFrame
        Zone concentrations [mg/L], index zone names, one column per analyte.

    Returns
    -------
    DataFrame
        Index sample_id, one column per analyte.
    """
    stored = stored_water(model, 1.0, list(zone_values.index))
    c = zone_values.to_numpy(float)
    rows = {m.sample_id: returned_bias(stored, m.shares, c) for m in table.itertuples()}
    return pd.DataFrame.from_dict(rows, orient="index", columns=list(zone_values.columns))


@dataclass(frozen=True)
class MemorySummary:
    """Crossflow memory of a project, for the report and the command line.

    Attributes
    ----------
    test : StoredWater
        Water stored during the idle time before the test (fitted zone model).
    samples : DataFrame
        :func:`sample_memory` with the fitted model, plus the predicted error of each analyte
        (columns ``bias:<analyte>`` [mg/L]).
    stored_concentration : Series
        Concentration of the stored water [mg/L] per analyte (the donors' blend).
    operation : StoredWater or None
        Water stored during the idle time before a compliance sample
        (``settings.idle_time_before_sample``), None when not given.
    flush : FirstFlush or None
        First flush after a pump start at ``flush.rate`` (the recommended rate, else the
        demand) with the ``operation`` stored water.
    """

    test: StoredWater | None
    samples: pd.DataFrame
    stored_concentration: pd.Series
    operation: StoredWater | None = None
    flush: FirstFlush | None = None


def summarise(project: Project, model: WellModel, operating_model: WellModel,
              zone_values: pd.DataFrame, rate: float | None) -> MemorySummary | None:
    """Stored volumes, the step samples' returned shares and the first-flush advice.

    Parameters
    ----------
    project : Project
    model : WellModel
        The fitted zone model with the test's geometry (step samples).
    operating_model : WellModel
        The same with the operating intake (first flush in operation). The response to
        pumping is the one at the test's time, not the operating horizon: a pump start is
        short.
    zone_values : DataFrame
        Fitted zone concentrations [mg/L] (index zone names, columns analytes).
    rate : float or None
        Operating rate for the first flush [m^3/d].

    Returns
    -------
    MemorySummary or None
        None when neither idle time is given.
    """
    s = project.settings
    if s.idle_time_before_test is None and s.idle_time_before_sample is None:
        return None
    names = project.zone_names
    c = zone_values.to_numpy(float)
    test = (stored_water(model, s.idle_time_before_test, names)
            if s.idle_time_before_test is not None else None)
    table = sample_memory(project, model)
    if len(table):
        bias = sample_bias(model, table, zone_values)
        for a in zone_values.columns:
            table[f"bias:{a}"] = bias[a].reindex(table["sample_id"]).to_numpy(float)
    donors = stored_water(operating_model, 1.0, names)
    conc = pd.Series(donors.concentration(c), index=list(zone_values.columns))
    operation = flush = None
    if s.idle_time_before_sample is not None:
        operation = stored_water(operating_model, s.idle_time_before_sample, names)
        if rate is not None and rate > 0 and operation.total > 0:
            flush = first_flush(operating_model, operation, rate, c, s.first_flush_tolerance)
    return MemorySummary(test, table, conc, operation, flush)


# ------------------------------------------------------------------ text

def _conc(analyte: str, value: float, signed: bool = False) -> str:
    a = get_analyte(analyte)
    basis = f" as {a.canonical_basis}" if a.canonical_basis and len(a.bases) > 1 else ""
    sign = ("+" if value > 0 else "-") if signed else ""
    return (f"{a.name.lower()} {sign}{significant(abs(float(a.in_display_unit(value))), 3)} "
            f"{a.display_unit}{basis}")


def _hours(days: float) -> str:
    return f"{days * 24:.3g} h"


def _minutes(days: float) -> str:
    return f"{days * 1440:.0f} min" if days * 24 < 10 else f"{days * 24:.1f} h"


def stored_line(stored: StoredWater, concentration: pd.Series | None, units: str = "US",
                when: str = "before the test") -> str:
    """One sentence: the idle time, each thief zone's crossflow and stored volume, and the
    stored water's concentration (when known)."""
    if stored.total <= 0:
        return (f"Idle time {when}: {_hours(stored.idle_time)}; the zone model has no "
                "ambient crossflow into a thief zone, so no water is stored.")
    parts = [f"{n} {format_quantity(-q, 'rate', units)} ({format_quantity(v, 'volume', units)})"
             for n, q, v in zip(stored.zone_names, stored.ambient_flow, stored.volume, strict=True)
             if v > 0]
    line = (f"Idle time {when}: {_hours(stored.idle_time)}; ambient crossflow into "
            + ", ".join(parts) + f": {format_quantity(stored.total, 'volume', units)} stored")
    if concentration is not None and len(concentration):
        line += (" of the donor zones' blend ("
                 + ", ".join(_conc(a, v) for a, v in concentration.items()) + ")")
    return line + " (the crossflow held steady over the idle time: an upper bound)."


def sample_lines(table: pd.DataFrame, flag: float, units: str = "US",
                 only_flagged: bool = False) -> list[str]:
    """One line per step sample: volume pumped since the pump started against the volume
    stored, the predicted share of returned water and its error per analyte."""
    lines = []
    for m in table.to_dict("records"):
        f = m["returned_fraction"]
        if not np.isfinite(f) or (only_flagged and f <= flag):
            continue
        line = (f"Step {m['step']} sample {m['sample_id']}: "
                f"{format_quantity(m['pumped'], 'volume', units)} pumped since the start against "
                f"{format_quantity(m['stored'], 'volume', units)} stored; {100 * f:.1f} % "
                "returned water predicted")
        shown = [_conc(c.split(":", 1)[1], b, signed=True)
                 for c, b in m.items() if c.startswith("bias:") and np.isfinite(b) and b != 0]
        if f > flag:
            line += (" (error " + ", ".join(shown) + ")" if shown else "") + ": flagged"
        lines.append(line + ".")
    return lines


def flush_line(summary: MemorySummary, units: str = "US") -> str:
    """The first-flush advice in one or two sentences ("" without an idle time before a
    compliance sample)."""
    op, fl = summary.operation, summary.flush
    if op is None:
        return ""
    if fl is None:
        if op.total <= 0:
            return ("No thief zone takes water at rest: a compliance sample needs no first "
                    "flush beyond the usual purge.")
        return ("No operating rate (no window and no demand): the first flush is not "
                "assessed.")
    longest = float(np.max(fl.time_to_tolerance))
    each = ", ".join(f"{get_analyte(a).name.lower()} {_minutes(t)}" for a, t in
                     zip(summary.stored_concentration.index, fl.time_to_tolerance, strict=True))
    return (f"After {_hours(op.idle_time)} idle the thief zones hold "
            f"{format_quantity(op.total, 'volume', units)}; after a pump start at "
            f"{format_quantity(fl.rate, 'rate', units)}, pump at least {_minutes(longest)} "
            f"({format_quantity(fl.rate * longest, 'volume', units)}) before a compliance "
            f"sample, for the discharge to be within {100 * fl.tolerance:g} % of the steady "
            f"blend ({each}; well-mixed washout of the stored water, a cautious model).")


def memory_lines(summary: MemorySummary, flag: float, units: str = "US",
                 only_flagged: bool = False) -> list[str]:
    """Every line of the crossflow-memory section: stored water, step samples, advice."""
    lines = []
    if summary.test is not None:
        lines.append(stored_line(summary.test, summary.stored_concentration, units))
    lines += sample_lines(summary.samples, flag, units, only_flagged)
    advice = flush_line(summary, units)
    return lines + ([advice] if advice else [])
