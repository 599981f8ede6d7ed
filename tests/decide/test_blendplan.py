"""The wellfield blending plan (blendq.decide.blendplan) against closed-form mass balances, a
brute-force grid search, property invariants, N-1 outages and the infeasibility diagnosis."""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from blendq.decide.blendplan import (
    BlendWell,
    EntryPoint,
    OtherSource,
    blending_plan,
    n_minus_one,
    outage_table,
)
from blendq.errors import InputError, ModelError


def _flat(name, c, energy=None, lo=0.0, hi=1000.0, ep="EP", levels=11, draws=1, **kw):
    """A well whose concentrations do not depend on its rate (one value per analyte)."""
    r = np.linspace(lo, hi, levels)
    c = np.atleast_1d(np.asarray(c, float))
    conc = np.broadcast_to(c, (draws, levels, c.size)).copy()
    e = None if energy is None else np.full(levels, float(energy))
    return BlendWell(name, ep, r, conc, lo, hi, energy=e, **kw)


# ---- (a) two wells, closed form -------------------------------------------------------------

@pytest.mark.parametrize("c1, c2, limit, margin, demand, draws, prob", [
    (15.0, 4.0, 10.0, 0.9, 1000.0, 3, 0.95),
    (0.025, 0.004, 0.010, 0.8, 640.0, 1, 0.5),
    (15.0, 4.0, 10.0, 0.9, 1000.0, 40, 0.9),  # 4 of 40 identical draws may be violated
])
def test_two_wells_give_the_closed_form_largest_rate_of_the_rich_well(c1, c2, limit, margin,
                                                                       demand, draws, prob):
    # Conservative two-stream mixing, (Q1 c1 + Q2 c2) / (Q1 + Q2) <= m L with Q1 + Q2 = D,
    # solved for Q1: Q1 = D (m L - c2) / (c1 - c2) (mass balance; the cheaper well 1 is run up
    # to it). Identical draws make the chance constraint deterministic.
    wells = [_flat("A", c1, 0.30, hi=demand, draws=draws),
             _flat("B", c2, 0.50, hi=demand, draws=draws)]
    plan = blending_plan(wells, [EntryPoint("EP", demand)], {"x": limit}, margin, prob, ["x"])
    q1 = demand * (margin * limit - c2) / (c1 - c2)
    assert plan.feasible and plan.objective == "energy"
    np.testing.assert_allclose(plan.rates["A"], q1, rtol=1e-6)
    np.testing.assert_allclose(plan.rates["B"], demand - q1, rtol=1e-6)
    np.testing.assert_allclose(plan.objective_value, 0.30 * q1 + 0.50 * (demand - q1), rtol=1e-6)
    row = plan.blend.iloc[0]
    np.testing.assert_allclose(row["quantile_mg_l"], margin * limit, rtol=1e-6)
    assert any(b.startswith("x at EP") for b in plan.binding)
    table = plan.table()
    assert list(table["kind"]) == ["well", "well", "blend"] and table.attrs["cautions"]


def test_another_source_and_even_use():
    # With an other source of 300 m^3/d at 1 mg/L, well A (12 mg/L) and well B (6 mg/L) meet
    # 1000 m^3/d; the most even use runs both at the same share of their max rate (700 each)
    # when that blend (0.3*1 + 0.35*12 + 0.35*6 = 6.6) meets 0.9 x 10 (mass balance).
    wells = [_flat("A", 12.0, hi=700.0), _flat("B", 6.0, hi=700.0)]
    src = [OtherSource("spring", "EP", 300.0, {"x": 1.0})]
    plan = blending_plan(wells, [EntryPoint("EP", 1000.0)], {"x": 10.0}, 0.9, 0.9, ["x"],
                         other_sources=src)
    assert plan.objective == "even"
    np.testing.assert_allclose([plan.rates["A"], plan.rates["B"]], [350.0, 350.0], rtol=1e-6)
    np.testing.assert_allclose(plan.objective_value, 0.5, rtol=1e-6)
    np.testing.assert_allclose(plan.blend.iloc[0]["median_mg_l"], 6.6, rtol=1e-9)


def test_interference_limits_the_cheap_well():
    # Pumping level of A: 10 + 0.01 Q_A + 0.005 Q_B [m depth] (own drawdown plus the linear
    # superposition of the other well's drawdown; Reilly, Franke and Bennett 1987, USGS TWRI
    # 3-B6), deepest allowed 18 m, Q_A + Q_B = 1000: Q_A <= 600, and B stays at 17 m.
    r = np.linspace(0.0, 1000.0, 11)
    wells = [_flat("A", 1.0, 0.3, drawdown=10 + 0.01 * r, level_limit=18.0),
             _flat("B", 1.0, 0.5, drawdown=10 + 0.01 * r, level_limit=18.0)]
    a = np.array([[0.0, 0.005], [0.005, 0.0]])
    plan = blending_plan(wells, [EntryPoint("EP", 1000.0)], {"x": 10.0}, 0.9, 0.9, ["x"],
                         interference=a)
    np.testing.assert_allclose(plan.rates["A"], 600.0, rtol=1e-6)
    assert any("A pumping level" in b for b in plan.binding)


# ---- (b) three wells against a brute-force grid ---------------------------------------------

def _three_wells():
    rng = np.random.default_rng(11)
    r = np.linspace(100.0, 900.0, 9)
    wells = []
    for k, (c_top, c_bottom, e0) in enumerate([(18.0, 3.0, 0.25), (9.0, 1.0, 0.40),
                                               (4.0, 2.0, 0.55)]):
        share = (0.2 + 0.6 * r / (r + 400.0))[None, :, None]  # rate-dependent zone share
        top = c_top * rng.lognormal(0, 0.2, (5, 1, 1))
        bottom = c_bottom * rng.lognormal(0, 0.2, (5, 1, 1))
        energy = e0 + 0.1 * (r / 900.0) ** 2
        wells.append(BlendWell(f"W{k + 1}", "EP", r, share * top + (1 - share) * bottom,
                               150.0 + 50 * k, 850.0, energy=energy))
    return wells


def _brute_force(wells, demand, target, probability, step):
    """Best energy over a fine grid of (Q1, Q2) with Q3 = D - Q1 - Q2 [kWh/d]."""
    def options(w):
        return np.r_[0.0, np.arange(w.min_rate, w.max_rate + 1e-9, step)]

    def load(w, q):  # (n_draws,) interpolated mass load
        return np.array([np.interp(q, w.rates, w.rates * c[:, 0]) for c in w.concentration])

    def energy(w, q):
        return np.interp(q, w.rates, w.rates * w.energy) if q > 0 else 0.0

    best, arg = np.inf, None
    need = int(np.ceil(probability * wells[0].concentration.shape[0] - 1e-9))
    for q1 in options(wells[0]):
        for q2 in options(wells[1]):
            q3 = demand - q1 - q2
            w3 = wells[2]
            if not (abs(q3) < 1e-9 or w3.min_rate <= q3 <= w3.max_rate):
                continue
            q3 = max(q3, 0.0)
            blend = sum(load(w, q) if q > 0 else 0.0
                        for w, q in zip(wells, (q1, q2, q3), strict=True)) / demand
            if np.sum(blend <= target + 1e-9) < need:
                continue
            obj = sum(energy(w, q) for w, q in zip(wells, (q1, q2, q3), strict=True))
            if obj < best:
                best, arg = obj, (q1, q2, q3)
    return best, arg


def test_three_wells_match_a_brute_force_grid():
    wells = _three_wells()
    demand, limit, margin, prob = 1500.0, 10.0, 0.9, 0.6  # 2 of the 5 draws may exceed
    plan = blending_plan(wells, [EntryPoint("EP", demand)], {"nitrate": limit}, margin, prob,
                         ["nitrate"])
    step = 5.0
    best, arg = _brute_force(wells, demand, margin * limit, prob, step)
    assert plan.feasible and np.isfinite(best)
    # the program is at least as good as every grid point (up to its optimality gap) ...
    assert plan.objective_value <= best * (1 + 1e-6)
    # ... and within a grid spacing's worth of energy: moving two rates by one step changes
    # the energy by at most 2 x step x the steepest d(Q e(Q))/dQ
    slope = max(np.max(np.abs(np.diff(w.rates * w.energy) / np.diff(w.rates))) for w in wells)
    assert best - plan.objective_value <= 2 * step * slope
    # the plan itself passes the brute-force feasibility check
    q = [plan.rates[w.name] for w in wells]
    np.testing.assert_allclose(sum(q), demand, rtol=1e-9)
    blend = sum(np.array([np.interp(qi, w.rates, w.rates * c[:, 0]) for c in w.concentration])
                for w, qi in zip(wells, q, strict=True) if qi > 0) / demand
    assert np.sum(blend <= margin * limit * (1 + 1e-7)) >= 3
    assert plan.compliance_in_plan["EP"] >= prob
    # and its objective is the energy of its rates, Q e(Q) interpolated on each well's grid
    energy = sum(np.interp(qi, w.rates, w.rates * w.energy)
                 for w, qi in zip(wells, q, strict=True) if qi > 0)
    np.testing.assert_allclose(plan.objective_value, energy, rtol=1e-9)


# ---- (c) invariants ---------------------------------------------------------------------------

@st.composite
def _problems(draw):
    n = draw(st.integers(2, 3))
    draws = draw(st.integers(1, 6))
    seed = draw(st.integers(0, 2**16))
    rng = np.random.default_rng(seed)
    wells = []
    for k in range(n):
        r = np.sort(rng.uniform(50, 1000, 4))
        r = np.r_[r[0], r[0] + np.cumsum(np.diff(r) + 1.0)]
        conc = rng.uniform(0.5, 20.0, (draws, 4, 1))
        wells.append(BlendWell(f"W{k}", "EP", r, conc, r[0] + rng.uniform(0, 20),
                               r[-1] - rng.uniform(0, 20), energy=rng.uniform(0.2, 0.8, 4)))
    demand = float(rng.uniform(100, 0.8 * sum(w.max_rate for w in wells)))
    prob = draw(st.sampled_from([0.5, 0.8, 1.0]))
    limit = float(rng.uniform(3, 20))
    raise_by = draw(st.floats(1.0, 3.0))
    return wells, demand, prob, limit, raise_by


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_problems())
def test_plan_invariants(problem):
    wells, demand, prob, limit, raise_by = problem
    eps = [EntryPoint("EP", demand)]
    plan = blending_plan(wells, eps, {"x": limit}, 1.0, prob, ["x"], diagnose=False)
    if not plan.feasible:
        return
    # demand met exactly (equality) and the chance constraint met on the draws used
    np.testing.assert_allclose(sum(plan.rates.values()), demand, rtol=1e-7)
    assert plan.compliance_in_plan["EP"] >= prob - 1e-12
    for w in wells:
        q = plan.rates[w.name]
        assert q == 0 or w.min_rate * (1 - 1e-7) <= q <= w.max_rate * (1 + 1e-7)
    # a higher limit keeps the problem feasible and never costs more
    wider = blending_plan(wells, eps, {"x": limit * raise_by}, 1.0, prob, ["x"], diagnose=False)
    assert wider.feasible
    assert wider.objective_value <= plan.objective_value * (1 + 1e-6) + 1e-9


# ---- (d) N-1 ----------------------------------------------------------------------------------

def test_n_minus_one_finds_the_outage_that_breaks_compliance():
    # A 15, B 2, C 8 mg/L, each up to 600 m^3/d, demand 1000, target 0.9 x 10 = 9 mg/L.
    # Without B: Q_A >= 400 with C at 600 -> blend >= (400*15 + 600*8)/1000 = 10.8 mg/L, and
    # the most water meeting 9 mg/L is 15x + 8*600 <= 9(x + 600) -> x = 100, i.e. 700 m^3/d
    # (mass balance). Without A or without C a plan exists.
    wells = [_flat("A", 15.0, hi=600.0), _flat("B", 2.0, hi=600.0), _flat("C", 8.0, hi=600.0)]
    args = ([EntryPoint("EP", 1000.0)], {"nitrate": 10.0}, 0.9, 0.95, ["nitrate"])
    assert blending_plan(wells, *args).feasible
    out = {r.well: r for r in n_minus_one(wells, *args)}
    assert out["A"].feasible and out["C"].feasible and not out["B"].feasible
    assert out["B"].noncompliant == {"EP": ["nitrate"]}
    np.testing.assert_allclose(out["B"].shortfall["EP"], 300.0, rtol=1e-6)
    quality = [r for r in out["B"].plan.diagnosis if r.family == "quality"]
    np.testing.assert_allclose(quality[0].value, 10.8, rtol=1e-6)
    table = outage_table(list(out.values()))
    assert table.loc[table.well_out == "B", "noncompliant"].item() == "nitrate"
    assert list(table["met"]) == [True, False, True]
    assert out["B"].plan.unmet == ["EP"]


# ---- (e) infeasibility diagnosis ---------------------------------------------------------------

def test_diagnosis_names_the_binding_analyte():
    # Nitrate is easy (every well under the target); arsenic is not: both wells are above
    # 0.9 x 0.010 at the demand, the lowest blend is all from B at its max 800 m^3/d plus A's
    # 200: (200*0.020 + 800*0.012)/1000 = 0.0136 mg/L (mass balance).
    wells = [_flat("A", [3.0, 0.020], 0.3, hi=1000.0), _flat("B", [1.0, 0.012], 0.3, hi=800.0)]
    limits = {"nitrate": 10.0, "arsenic": 0.010}
    plan = blending_plan(wells, [EntryPoint("EP", 1000.0)], limits, 0.9, 0.9,
                         ["nitrate", "arsenic"])
    assert not plan.feasible
    quality = [r for r in plan.diagnosis if r.family == "quality"]
    assert [r.analyte for r in quality] == ["arsenic"] and quality[0].opens
    np.testing.assert_allclose(quality[0].value, 0.0136, rtol=1e-6)
    assert "arsenic" in quality[0].text and "treatment" in quality[0].text
    assert "quality: arsenic at EP" in plan.binding
    demand = [r for r in plan.diagnosis if r.family == "demand"]
    # the largest compliant delivery: all of B's water alone is 0.012 > 0.009, so nothing
    np.testing.assert_allclose(demand[0].value, 0.0, atol=1e-6)


def test_rate_limits_named_when_they_bind():
    # Demand 1000 but the wells together give at most 900 inside their limits; their rate
    # grids reach 600 each, so relaxing the rate limits opens a plan 100 m^3/d outside them.
    wells = [BlendWell(n, "EP", np.linspace(0, 600, 7), np.full((1, 7, 1), 1.0), 0, 450)
             for n in ("A", "B")]
    plan = blending_plan(wells, [EntryPoint("EP", 1000.0)], {"x": 10.0}, 0.9, 0.9, ["x"])
    rel = {r.family: r for r in plan.diagnosis}
    assert not plan.feasible and rel["rate limits"].opens
    np.testing.assert_allclose(rel["rate limits"].value, 100.0, rtol=1e-6)
    np.testing.assert_allclose(rel["demand"].value, 900.0, rtol=1e-6)
    assert not rel["all quality"].opens


# ---- draws subset, reproducibility, input errors -----------------------------------------------

def test_subset_of_draws_is_seeded_and_checked_on_all():
    rng = np.random.default_rng(3)
    r = np.linspace(100, 900, 5)
    wells = [BlendWell(n, "EP", r, c * rng.lognormal(0, 0.3, (400, 5, 1)), 100, 900)
             for n, c in (("A", 14.0), ("B", 3.0))]
    args = ([EntryPoint("EP", 1000.0)], {"x": 10.0}, 0.9, 0.9, ["x"])
    one = blending_plan(wells, *args, max_draws=60, seed=5)
    two = blending_plan(wells, *args, max_draws=60, seed=5)
    assert one.draws_used == 60 and one.draws_total == 400
    assert one.rates == two.rates and one.compliance == two.compliance
    assert one.compliance_in_plan["EP"] >= 0.9
    assert 0.0 <= one.compliance["EP"] <= 1.0


def test_bad_input_raises_input_error():
    w = _flat("A", 1.0)
    with pytest.raises(InputError, match="concentration"):
        blending_plan([w], [EntryPoint("EP", 10.0)], {"x": 1.0, "y": 1.0}, 0.9, 0.9,
                      ["x", "y"])
    with pytest.raises(InputError, match="not an entry point"):
        blending_plan([w], [EntryPoint("E2", 10.0)], {"x": 1.0}, 0.9, 0.9, ["x"])
    with pytest.raises(InputError, match="energy"):
        blending_plan([w], [EntryPoint("EP", 10.0)], {"x": 1.0}, 0.9, 0.9, ["x"],
                      objective="energy")


def test_diagnosis_speaks_the_display_units():
    # the arsenic case above: 0.0136 mg/L is 13.6 ug/L against 9 ug/L; B's 800 m^3/d cap
    wells = [_flat("A", [3.0, 0.020], 0.3, hi=1000.0), _flat("B", [1.0, 0.012], 0.3, hi=800.0)]
    args = ([EntryPoint("EP", 1000.0)], {"nitrate": 10.0, "arsenic": 0.010}, 0.9, 0.9,
            ["nitrate", "arsenic"])
    us = blending_plan(wells, *args, units="US")
    (quality,) = [r.text for r in us.diagnosis if r.family == "quality"]
    assert "13.6 ug/L against margin x limit 9 ug/L" in quality.replace("µ", "u")
    (demand,) = [r.text for r in us.diagnosis if r.family == "demand"]
    # 1000 m^3/d = 183 gpm (1 gpm = 5.450992969 m^3/d)
    assert "of the demand 183 gpm" in demand and "m^3/d" not in demand
    si = blending_plan(wells, *args, units="SI-L/s")
    (demand,) = [r.text for r in si.diagnosis if r.family == "demand"]
    assert "of the demand 11.6 L/s" in demand  # 1000 / 86.4


def test_a_program_cut_off_by_the_clock_is_an_error():
    # a plan cut off by the wall clock would differ from run to run: never returned
    rng = np.random.default_rng(3)
    r = np.linspace(100, 900, 40)
    wells = [BlendWell(f"W{k}", "EP", r, c * rng.lognormal(0, 0.3, (200, 40, 1)), 100, 900,
                       energy=np.linspace(0.3, 0.5, 40) * (1 + k / 10))
             for k, c in enumerate((14.0, 3.0, 9.0, 11.0, 6.0))]
    with pytest.raises(ModelError, match="did not finish within 1e-06 s"):
        blending_plan(wells, [EntryPoint("EP", 2500.0)], {"x": 10.0}, 0.9, 0.9, ["x"],
                      time_limit=1e-6)


# ---- (f) the quicker ways to the same answer ----------------------------------------------------

@st.composite
def _two_analyte_problems(draw):
    """Two or three wells with two analytes and a few draws, limits from loose to impossible,
    so that some have a plan and some need the diagnosis."""
    seed = draw(st.integers(0, 2**16))
    rng = np.random.default_rng(seed)
    n, draws = draw(st.integers(2, 3)), draw(st.integers(3, 8))
    wells = []
    for k in range(n):
        r = np.linspace(100.0, 800.0, 5)
        conc = rng.uniform(0.5, 20.0, (1, 5, 2)) * rng.lognormal(0, 0.2, (draws, 1, 2))
        wells.append(BlendWell(f"W{k}", "EP", r, conc, 100.0, 800.0,
                               energy=rng.uniform(0.2, 0.8, 5)))
    demand = float(rng.uniform(200, 0.9 * 800 * n))
    limits = {"a": float(rng.uniform(2, 25)), "b": float(rng.uniform(2, 25))}
    return wells, demand, limits, draw(st.sampled_from([0.6, 0.8, 1.0]))


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_two_analyte_problems())
def test_feasibility_first_and_the_quantile_floor_change_no_answer(problem):
    # Reference: every program solved with its objective straight away and no floor on the
    # lowest quantiles (the formulation without the shortcuts); the package's default and
    # feasibility_first must give the same status, rates and diagnosis.
    import blendq.decide.blendplan as bp

    wells, demand, limits, prob = problem
    args = (wells, [EntryPoint("EP", demand)], limits, 0.9, prob, ["a", "b"])
    default = blending_plan(*args)
    first = blending_plan(*args, feasibility_first=True)
    build = bp._build

    def objective_first(p, lay, time_limit, optimise=True, check=True):
        return lay.prog.solve(time_limit), 0.0

    run = bp._run
    bp._run = objective_first
    bp._build = lambda *a, **k: build(*a, **{**k, "floor": 0.0})
    try:
        ref = blending_plan(*args)
    finally:
        bp._run, bp._build = run, build
    for plan in (default, first):
        assert plan.feasible == ref.feasible and plan.status == ref.status
        for name, q in ref.rates.items():
            np.testing.assert_allclose(plan.rates[name], q, rtol=1e-6, atol=1e-6)
        assert [(r.family, r.analyte, r.opens) for r in plan.diagnosis] == [
            (r.family, r.analyte, r.opens) for r in ref.diagnosis]
        np.testing.assert_allclose([r.value for r in plan.diagnosis],
                                   [r.value for r in ref.diagnosis], rtol=1e-6, atol=1e-9)


def test_solver_console_output_is_silenced():
    # HiGHS writes a debugging line of its own to the process's standard output now and then;
    # the solve sends file descriptor 1 to the null device and flushes the C buffers before
    # restoring it, so a line written from C inside never reaches the user, and Python's own
    # output before and after does
    import subprocess
    import sys
    code = ("import ctypes, sys\n"
            "from blendq.decide.blendplan import _solver_console_silenced\n"
            "print('before', flush=True)\n"
            "with _solver_console_silenced():\n"
            "    ctypes.CDLL(None).printf(b'solver noise\\n')\n"
            "print('after')\n")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=60)
    assert run.returncode == 0, run.stderr
    assert run.stdout == "before\nafter\n"
