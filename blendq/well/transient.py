"""Pumping levels of a step test with the rate increments superposed in time, zone by zone.

The zone model of :mod:`blendq.well.model` holds, per zone, the conductance G_i of the response
to pumping at a reference time t_ref (the end of the step test) and the static head h0_i; at
Q = 0 it has the ambient wellbore head h_w0 and the ambient zone flows q0_i, a steady state that
was there before the test. A transient (Cooper-Jacob) zone's unit response after a time tau
since a change of its flow is

    W_i(tau) = 1 / G_i(tau) = 1 / G_i(t_ref) + ln(tau / t_ref) / (4 pi T_i)

(Cooper and Jacob 1946: 1 / G = (ln(2.25 T tau / (r_w^2 S)) + 2 s) / (4 pi T), so only T_i is
needed besides the fitted G_i(t_ref)); a steady or given zone has W_i = 1 / G_i at every time.
The zone flows change at the times t_0 < t_1 < ... of a grid that holds every rate change and
points inside each step (more of them early on); between grid points they are held. At grid
point t_m the common wellbore head h_w,m and the flows q_i,m solve

    h_w0 - h_w,m = sum_{j <= m} (q_i,j - q_i,j-1) W_i(t_m - t_(j-1)) + D_i (q_i,m |q_i,m| - q0_i |q0_i|)
    sum_i q_i,m = Q(t_m)

with q_i,0 = q0_i: the superposition of each zone's flow increments in time, recoveries (rate 0)
included. The unknowns enter only through the newest increment, so each point is the
common-head problem of :func:`blendq.well.hydraulics.solve_wellbore_head` with conductances
1 / W_i(t_m - t_(m-1)) and heads moved by the memory of the earlier increments.

A step that follows a full recovery (``recovered_before`` with no start times) begins a new
sequence from the ambient state. The pumping level at the end of a step is h_w - C Q^2 there.

References
----------
Cooper, H.H. and Jacob, C.E. (1946) A generalized graphical method for evaluating formation
constants and summarizing well-field history. Trans. AGU 27(4), 526-534.
Konikow, L.F., Hornberger, G.Z., Halford, K.J. and Hanson, R.T. (2009) Revised multi-node well
(MNW2) package for MODFLOW ground-water flow model. USGS Techniques and Methods 6-A30.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from blendq.errors import InputError
from blendq.inputs.project import Project
from blendq.well import hydraulics
from blendq.well.steptest import validated_schedule

#: where inside each rate period the zone flows are updated, as fractions of the period
#: (denser early, where the response changes fastest); a numerical setting checked against
#: ttim in tests/well/test_transient.py
SUBSTEP_FRACTIONS = np.array([0.01, 0.03, 0.07, 0.15, 0.3, 0.55, 1.0])
#: smallest unit response kept, as a fraction of 1 / G_i(t_ref): a guard against the
#: Cooper-Jacob log term turning negative very early after a change (common practice: the
#: approximation is not valid there anyway)
MIN_RESPONSE_FRACTION = 0.05


@dataclass(frozen=True)
class Schedule:
    """Rate schedule of a step test as sequences of rate periods, in base units.

    Attributes
    ----------
    sequences : list of (start, end, rate) arrays
        Per sequence (a new one after a full recovery given without start times), the time
        each rate period begins and ends [d from the sequence's start] and its rate [m^3/d]; a
        rate 0 is a recovery.
    level_step : list of (sequence index, period index)
        For each step in the project's order: the period whose end gives its level.
    reference_time : float
        t_ref [d]: the time the fitted conductances belong to (:func:`model.elapsed_test_time`).
    """

    sequences: list
    level_step: list
    reference_time: float


def step_schedule(project: Project, reference_time: float) -> Schedule:
    """The step test's schedule for :func:`step_levels`.

    With start times (and ends or durations) the steps are placed in time and a gap between two
    steps is a recovery (rate 0); without them consecutive steps follow each other, and a step
    marked ``recovered_before`` starts a new sequence from the ambient state. Needs every step's
    duration (or its start and end): an :class:`InputError` naming the steps file, row and field
    otherwise (no duration is assumed).
    """
    steps = project.steps
    label = project.files.get("steps", "steps.csv") if project.files else "steps.csv"
    sched = validated_schedule(steps, label, need_times=False)
    dur = np.asarray(sched["duration"], float)
    bad = np.flatnonzero(~(np.isfinite(dur) & (dur > 0)))
    if len(bad):
        raise InputError("duration missing: a transient zone model superposes the steps in "
                         "time and needs each step's duration (or its start and end)",
                         file=label, row=sched["row"][bad[0]], field="duration")
    timed = bool(sched["timed"])
    sequences, where = [], {}
    periods: list[tuple[float, float, float]] = []
    for k in range(len(dur)):
        if k > 0 and not timed and bool(sched["sequence_start"][k]):
            sequences.append(tuple(np.array(x) for x in zip(*periods, strict=True)))
            periods = []
        if timed:
            t0 = float(sched["start"][k])
            if periods and t0 > periods[-1][1] + 1e-9:
                periods.append((periods[-1][1], t0, 0.0))  # a recovery between two steps
        else:
            t0 = periods[-1][1] if periods else 0.0
        periods.append((t0, t0 + float(dur[k]), float(sched["rate"][k])))
        where[sched["row"][k]] = (len(sequences), len(periods) - 1)
    sequences.append(tuple(np.array(x) for x in zip(*periods, strict=True)))
    src = steps["source_row"] if "source_row" in steps else [np.nan] * len(steps)
    rows = [int(r) if r == r else i + 1 for i, r in enumerate(src)]
    return Schedule(sequences, [where[r] for r in rows], float(reference_time))


def unit_response(conductance, slope, tau, reference_time: float):
    """W_i(tau) = 1 / G_i(tau) [d/m^2] (module docstring), floored at
    :data:`MIN_RESPONSE_FRACTION` / G_i."""
    w_ref = 1.0 / np.asarray(conductance, float)
    w = w_ref + np.asarray(slope, float) * np.log(np.asarray(tau, float) / reference_time)
    return np.maximum(w, MIN_RESPONSE_FRACTION * w_ref)


def step_levels(conductance, static_head, nonlinear_loss, slope, schedule: Schedule,
                exponent=2.0, linear_loss=0.0):
    """Wellbore head at the end of each step [m] and the zone flows there [m^3/d].

    The memory of the earlier increments at grid point t_m is evaluated as
    sum_j dq_j W_i(t_m - t_(j-1)) = (1 / G_i) (q_(m-1) - q0) + s_i sum_j dq_j ln((t_m -
    t_(j-1)) / t_ref) + the floor's correction where :data:`MIN_RESPONSE_FRACTION` binds:
    the same sum as term-by-term :func:`unit_response`, with the log term one matrix-vector
    product over the increments of the whole batch.

    Parameters
    ----------
    conductance, static_head, nonlinear_loss : ndarray (..., n_zones)
        G_i(t_ref) [m^2/d], h0_i [m], D_i [d^2/m^5].
    slope : ndarray (n_zones,)
        1 / (4 pi T_i) [d/m^2] for a transient zone, 0 for a steady or given one.
    schedule : Schedule
    exponent, linear_loss : float or ndarray (n_zones,)
        P_i [-] and B_i [d/m^2] of the zones' entrance losses B q + D q |q|^(P-1).

    Returns
    -------
    wellbore_head : ndarray (..., n_steps)
    zone_flow : ndarray (..., n_steps, n_zones)
    """
    g = np.asarray(conductance, float)
    h0 = np.asarray(static_head, float)
    d = np.broadcast_to(np.asarray(nonlinear_loss, float), np.broadcast_shapes(g.shape, h0.shape))
    bl = np.broadcast_to(np.asarray(linear_loss, float), d.shape)
    has_d = bool(np.any(d > 0) or np.any(bl > 0))
    amb = hydraulics.solve_wellbore_head(np.zeros(1), g, h0, d if has_d else None, exponent,
                                         linear_loss=bl if has_d else None)
    hw0 = amb.wellbore_head[..., 0]
    q0_batch = amb.zone_flow[..., 0, :]
    batch, n = q0_batch.shape[:-1], q0_batch.shape[-1]
    # zone-major layout (n_zones, batch members): sums over the zones add contiguous rows
    q0 = _zone_major(q0_batch)
    t_ref = schedule.reference_time
    s_i = np.broadcast_to(np.asarray(slope, float), (n,))[:, None]
    w_ref = _zone_major(np.broadcast_to(1.0 / g, q0_batch.shape))
    floor = MIN_RESPONSE_FRACTION * w_ref
    # the floor binds only where the log term lies below this, for some zone of some member
    with np.errstate(divide="ignore", invalid="ignore"):
        binds_below = float(np.max(np.where(s_i > 0, (floor - w_ref) / s_i, -np.inf),
                                   initial=-np.inf))
    base_q0 = hw0.reshape(1, -1) + w_ref * q0
    if has_d:
        base_q0 += _zone_major(hydraulics.entrance_loss(q0_batch, bl, d, exponent)[0])
    out_h, out_q = {}, {}
    for s, (start, end, rate) in enumerate(schedule.sequences):
        grid = np.concatenate([[0.0], (start[:, None] + (end - start)[:, None]
                                       * SUBSTEP_FRACTIONS[None, :]).ravel()])
        grid_rate = np.concatenate([[0.0], np.repeat(rate, len(SUBSTEP_FRACTIONS))])
        read = {k * len(SUBSTEP_FRACTIONS) + len(SUBSTEP_FRACTIONS): k
                for k in range(len(start))}
        n_grid = len(grid)
        # ln((t_m - t_j) / t_ref) for j < m: row m, column j
        with np.errstate(divide="ignore", invalid="ignore"):
            log_tau = np.log((grid[:, None] - grid[None, :]) / t_ref)
        # increments q_j - q_(j-1), j = 1 .. m-1, one flat row each
        increments = np.empty((n_grid,) + q0.shape)
        flat = increments.reshape(n_grid, -1)
        last = q0
        for m in range(1, n_grid):
            # the newest increment's unit response; h_w0 + L_0 + W_new q_(m-1) minus the memory
            # of the increments so far, (1 / G) (q_(m-1) - q0) + s sum_j dq_j ln(tau_mj / t_ref)
            # + the floor's correction
            w_new = np.maximum(w_ref + s_i * log_tau[m, m - 1], floor)
            heads = base_q0 + last * (w_new - w_ref)
            if m > 1:
                logs = log_tau[m, :m - 1]
                # not BLAS: the same sums whatever its thread count
                heads -= s_i * np.einsum("k,kb->b", logs, flat[:m - 1]).reshape(q0.shape)
                for j in np.flatnonzero(logs < binds_below * (1 - 1e-9)):
                    u = w_ref + s_i * logs[j]
                    heads -= np.maximum(floor - u, 0.0) * increments[j]
            if has_d:
                st = hydraulics.solve_wellbore_head(
                    np.array([grid_rate[m]]), (1.0 / w_new).T.reshape(q0_batch.shape),
                    heads.T.reshape(q0_batch.shape), d, exponent, linear_loss=bl)
                q, hw = _zone_major(st.zone_flow[..., 0, :]), st.wellbore_head[..., 0]
            else:  # linear zones: the closed form of section 2, h_w = (sum G h - Q) / sum G
                ge = 1.0 / w_new
                hw = ((ge * heads).sum(0) - grid_rate[m]) / ge.sum(0)
                q = ge * (heads - hw)
            np.subtract(q, last, out=increments[m - 1])
            last = q
            if m in read:
                out_h[(s, read[m])] = np.reshape(hw, batch)
                out_q[(s, read[m])] = q.T.reshape(batch + (n,))
    keys = list(schedule.level_step)
    return (np.stack([out_h[key] for key in keys], -1),
            np.stack([out_q[key] for key in keys], -2))


def _zone_major(x) -> np.ndarray:
    """(..., n_zones) -> contiguous (n_zones, batch members)."""
    x = np.asarray(x, float)
    return np.ascontiguousarray(x.reshape(-1, x.shape[-1]).T)
