"""Tests of blendq.well.transient: step levels with the rate increments superposed in time.

Sources:
- ttim (PyPI; Bakker's transient analytic-element multi-aquifer model): a well screened in two
  aquifer layers joined only through the well (aquitard resistance 1e8 d), pumped at a stepped
  schedule with a recovery; ttim gives the head inside the well and each layer's discharge.
- Cooper, H.H. and Jacob, C.E. (1946) Trans. AGU 27(4): for one zone the superposed drawdown is
  s(t) = sum_i dQ_i (ln(2.25 T (t - t_i) / (r_w^2 S)) + 2 s) / (4 pi T), written out here.
- A steady zone (no time term) has the common-head closed form h_w = (sum G h0 - Q) / sum G of
  docs/methods.md, section 2, at every rate.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pandas as pd
import pytest

from blendq.errors import InputError
from blendq.well import hydraulics
from blendq.well.transient import (
    SUBSTEP_FRACTIONS,
    Schedule,
    step_levels,
    step_schedule,
    unit_response,
)

RW = 0.15
K = np.array([20.0, 5.0])
H = np.array([10.0, 8.0])
SS = np.array([2e-5, 2e-3])  # very different diffusivities: the zone shares drift in time
T = K * H
S = SS * H
# steps of 500 and 900 m3/d, a recovery, then 700 m3/d
STARTS = np.array([0.0, 0.125, 0.25, 0.35])
ENDS = np.array([0.125, 0.25, 0.35, 0.475])
RATES = np.array([500.0, 900.0, 0.0, 700.0])
T_REF = 0.475


def _cj_conductance(t):
    return 4 * np.pi * T / np.log(2.25 * T * t / (RW**2 * S))


def _schedule():
    return Schedule([(STARTS, ENDS, RATES)], [(0, 0), (0, 1), (0, 3)], T_REF)


@pytest.fixture(scope="module")
def ttim_well():
    ttim = pytest.importorskip("ttim")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ml = ttim.ModelMaq(kaq=K, z=[0.0, -10.0, -12.0, -20.0], c=[1e8], Saq=SS, Sll=[1e-12],
                           topboundary="conf", tmin=1e-5, tmax=10.0)
        w = ttim.Well(ml, 0.0, 0.0, rw=RW, tsandQ=list(zip(STARTS, RATES, strict=True)),
                      layers=[0, 1])
        ml.solve(silent=True)
        t = ENDS[[0, 1, 3]]
        return np.asarray(w.headinside(t))[0], np.asarray(w.discharge(t))


def test_stepped_schedule_with_recovery_matches_ttim(ttim_well):
    head, discharge = ttim_well
    hw, q = step_levels(_cj_conductance(T_REF), np.zeros(2), np.zeros(2),
                        1.0 / (4 * np.pi * T), _schedule())
    # tolerance: the zone flows are held between the points of the time grid
    np.testing.assert_allclose(hw, head, rtol=2e-3)
    np.testing.assert_allclose(q, discharge.T, rtol=1e-2, atol=1.0)
    np.testing.assert_allclose(q.sum(-1), RATES[[0, 1, 3]], rtol=1e-12)
    # the shares drift in time: a steady model at the reference time would miss them
    share_first = q[0, 0] / q[0].sum()
    share_last = q[2, 0] / q[2].sum()
    assert abs(share_first - share_last) > 0.003


def test_one_zone_is_cooper_jacob_superposition():
    t, s, skin = T[0], S[0], 2.0
    g_ref = 4 * np.pi * t / (np.log(2.25 * t * T_REF / (RW**2 * s)) + 2 * skin)
    hw, q = step_levels(np.array([g_ref]), np.array([-5.0]), np.zeros(1),
                        np.array([1 / (4 * np.pi * t)]), _schedule())
    expect = []
    for te in ENDS[[0, 1, 3]]:
        dq = np.diff(RATES, prepend=0.0)
        on = STARTS < te
        expect.append(np.sum(dq[on] * (np.log(2.25 * t * (te - STARTS[on]) / (RW**2 * s))
                                       + 2 * skin)) / (4 * np.pi * t))
    np.testing.assert_allclose(-5.0 - hw, expect, rtol=1e-10)


def test_steady_zones_give_the_closed_form_at_each_rate():
    g = np.array([150.0, 60.0, 220.0])
    h0 = np.array([-8.0, -9.5, -11.0])
    hw, q = step_levels(g, h0, np.zeros(3), np.zeros(3), _schedule())
    rates = RATES[[0, 1, 3]]
    np.testing.assert_allclose(hw, ((g * h0).sum() - rates) / g.sum(), rtol=1e-12)
    np.testing.assert_allclose(q, g * (h0 - hw[:, None]), rtol=1e-10, atol=1e-9)


def test_batched_parameters():
    g = np.stack([_cj_conductance(T_REF), 1.5 * _cj_conductance(T_REF)])
    hw, q = step_levels(g, np.zeros((2, 2)), np.zeros(2), 1 / (4 * np.pi * T), _schedule())
    assert hw.shape == (2, 3) and q.shape == (2, 3, 2)
    one, _ = step_levels(g[1], np.zeros(2), np.zeros(2), 1 / (4 * np.pi * T), _schedule())
    np.testing.assert_allclose(hw[1], one, rtol=1e-12)


def _reference_step_levels(conductance, static_head, nonlinear_loss, slope, schedule,
                           exponent=2.0, linear_loss=0.0):
    """The superposition written term by term: every earlier increment times its own
    unit_response at every grid point (the form the batched memory sum must reproduce)."""
    g = np.asarray(conductance, float)
    h0 = np.asarray(static_head, float)
    d = np.broadcast_to(np.asarray(nonlinear_loss, float), np.broadcast_shapes(g.shape, h0.shape))
    bl = np.broadcast_to(np.asarray(linear_loss, float), d.shape)
    has_d = bool(np.any(d > 0) or np.any(bl > 0))
    amb = hydraulics.solve_wellbore_head(np.zeros(1), g, h0, d if has_d else None, exponent,
                                         linear_loss=bl if has_d else None)
    hw0 = amb.wellbore_head[..., 0]
    q0 = amb.zone_flow[..., 0, :]
    loss0 = hydraulics.entrance_loss(q0, bl, d, exponent)[0] if has_d else 0.0
    out_h, out_q = {}, {}
    nsub = len(SUBSTEP_FRACTIONS)
    for s, (start, end, rate) in enumerate(schedule.sequences):
        grid = np.concatenate([[0.0], (start[:, None] + (end - start)[:, None]
                                       * SUBSTEP_FRACTIONS[None, :]).ravel()])
        grid_rate = np.concatenate([[0.0], np.repeat(rate, nsub)])
        increments, last = [], q0
        for m in range(1, len(grid)):
            w_new = unit_response(g, slope, grid[m] - grid[m - 1], schedule.reference_time)
            heads = hw0[..., None] + last * w_new + loss0
            for j, inc in enumerate(increments):
                heads = heads - inc * unit_response(g, slope, grid[m] - grid[j],
                                                    schedule.reference_time)
            if has_d:
                st = hydraulics.solve_wellbore_head(np.array([grid_rate[m]]), 1.0 / w_new,
                                                    heads, d, exponent, linear_loss=bl)
                q, hw = st.zone_flow[..., 0, :], st.wellbore_head[..., 0]
            else:
                ge = 1.0 / w_new
                hw = ((ge * heads).sum(-1) - grid_rate[m]) / ge.sum(-1)
                q = ge * (heads - hw[..., None])
            increments.append(q - last)
            last = q
            if m % nsub == 0:
                out_h[(s, m // nsub - 1)] = hw
                out_q[(s, m // nsub - 1)] = q
    keys = list(schedule.level_step)
    return (np.stack([out_h[k] for k in keys], -1), np.stack([out_q[k] for k in keys], -2))


def _two_sequences():
    """A stepped sequence with a recovery, then a new sequence after a full recovery."""
    first = (STARTS, ENDS, RATES)
    second = (np.array([0.0, 0.1]), np.array([0.1, 0.3]), np.array([400.0, 800.0]))
    return Schedule([first, second], [(0, 0), (0, 1), (0, 3), (1, 0), (1, 1)], T_REF)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_batched_memory_sum_equals_the_term_by_term_superposition(seed):
    # conductances over two decades so that the floor of the unit response binds early after a
    # change for some batch members and not for others; one zone steady (slope 0)
    rng = np.random.default_rng(seed)
    g = np.exp(rng.uniform(np.log(30.0), np.log(3000.0), (40, 3)))
    h0 = rng.uniform(-12.0, -4.0, (40, 3))
    slope = np.array([1 / (4 * np.pi * 150.0), 0.0, 1 / (4 * np.pi * 40.0)])
    sched = _two_sequences()
    hw, q = step_levels(g, h0, np.zeros(3), slope, sched)
    ref_h, ref_q = _reference_step_levels(g, h0, np.zeros(3), slope, sched)
    np.testing.assert_allclose(hw, ref_h, rtol=1e-10)
    np.testing.assert_allclose(q, ref_q, rtol=1e-10, atol=1e-9)
    # the floor did bind somewhere (the test covers its correction term)
    tau_min = SUBSTEP_FRACTIONS[1] - SUBSTEP_FRACTIONS[0]
    raw = 1 / g + slope * np.log(0.1 * tau_min / T_REF)
    assert np.any(raw < 0.05 / g)


def test_batched_memory_sum_with_entrance_losses_equals_the_term_by_term_form():
    rng = np.random.default_rng(7)
    g = np.exp(rng.uniform(np.log(50.0), np.log(2000.0), (12, 2)))
    h0 = rng.uniform(-10.0, -5.0, (12, 2))
    d = np.array([2e-6, 5e-7])
    slope = 1 / (4 * np.pi * T)
    sched = _two_sequences()
    hw, q = step_levels(g, h0, d, slope, sched, np.array([2.0, 2.5]), np.array([1e-4, 0.0]))
    ref_h, ref_q = _reference_step_levels(g, h0, d, slope, sched, np.array([2.0, 2.5]),
                                          np.array([1e-4, 0.0]))
    np.testing.assert_allclose(hw, ref_h, rtol=1e-10)
    np.testing.assert_allclose(q, ref_q, rtol=1e-10, atol=1e-9)
    # unbatched parameters give the batch member's result
    one_h, _ = step_levels(g[3], h0[3], d, slope, sched, np.array([2.0, 2.5]),
                           np.array([1e-4, 0.0]))
    np.testing.assert_allclose(one_h, hw[3], rtol=1e-12)


def _project(durations, recovered=None, starts=None):
    from blendq.well.synthetic import synthetic_project

    p = synthetic_project(np.array([100.0, 50.0]), np.array([-5.0, -6.0]),
                          np.array([20.0, 40.0]), np.array([30.0, 50.0]), {"nitrate": [5.0, 1.0]},
                          np.array([300.0, 600.0, 900.0]), 10.0)
    steps = p.steps.drop(columns=[c for c in ("start", "end") if c in p.steps])
    steps["duration"] = durations
    if recovered is not None:
        steps["recovered_before"] = recovered
    if starts is not None:
        steps["start"] = pd.to_datetime(starts)
    return dataclasses.replace(p, steps=steps)


def test_schedule_of_a_project():
    sc = step_schedule(_project([0.1, 0.1, 0.2]), 0.4)
    (start, end, rate), = sc.sequences
    np.testing.assert_allclose(start, [0.0, 0.1, 0.2])
    np.testing.assert_allclose(end, [0.1, 0.2, 0.4])
    assert sc.level_step == [(0, 0), (0, 1), (0, 2)]
    # a full recovery given without times starts a new sequence from the ambient state
    sc = step_schedule(_project([0.1, 0.1, 0.2], recovered=[False, False, True]), 0.4)
    assert len(sc.sequences) == 2 and sc.level_step == [(0, 0), (0, 1), (1, 0)]
    # with start times a gap is a recovery at rate 0
    sc = step_schedule(_project([0.1, 0.1, 0.2], starts=["2026-01-01 00:00", "2026-01-01 02:24",
                                                         "2026-01-01 12:00"]), 0.4)
    (start, end, rate), = sc.sequences
    np.testing.assert_allclose(rate, [300.0, 600.0, 0.0, 900.0])
    np.testing.assert_allclose(start, [0.0, 0.1, 0.2, 0.5], atol=1e-9)
    assert sc.level_step == [(0, 0), (0, 1), (0, 3)]


def test_missing_duration_is_an_input_error():
    with pytest.raises(InputError) as err:
        step_schedule(_project([0.1, np.nan, 0.2]), 0.4)
    assert err.value.field == "duration" and err.value.row is not None
    assert "duration" in err.value.message
