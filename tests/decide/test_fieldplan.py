"""The wellfield's blending plan from the batch: the plan on the demo wells meets each entry
point's demand exactly with the blend under margin x limit, a well out of service stays out,
N-1 names the outage that breaks an entry point, the objective follows the pumps, and the same
seed gives the same files."""

from __future__ import annotations

import copy
import io
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import blendq as bq
from blendq.decide import fieldplan
from blendq.decide.blendplan import BlendWell, EntryPoint, n_minus_one, outage_table
from blendq.report.outputs import to_csv_safe

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "wellfield"
DRAWS = 40


@pytest.fixture(scope="module")
def field(tmp_path_factory):
    """The demo wells with the North plant's demand lowered to 600 gpm (from the shipped
    650 gpm, which leaves the few draws of the test too little room)."""
    root = tmp_path_factory.mktemp("field")
    text = (EXAMPLE / "wellfield.toml").read_text(encoding="utf-8")
    text = text.replace('project = "TH-', f'project = "{EXAMPLE.as_posix()}/TH-')
    text = text.replace('demand = "650 gpm"', 'demand = "600 gpm"')
    (root / "wellfield.toml").write_text(text, encoding="utf-8")
    return bq.analyse_wellfield(root, workers=1, draws=DRAWS, keep_analyses=False)


def _load(w: BlendWell, q: float) -> np.ndarray:
    """Load of each draw (n_draws, n_analytes) [mg/L m^3/d] at rate q: rate x concentration
    interpolated linearly on the well's grid, as the plan's program states it."""
    load = w.rates[None, :, None] * w.concentration
    return np.stack([[np.interp(q, w.rates, load[d, :, a]) for a in range(load.shape[2])]
                     for d in range(load.shape[0])])


def test_the_plan_meets_each_demand_and_the_blend_stays_under_margin_x_limit(field):
    fp = field.field_plan
    p, inp = fp.plan, fp.inputs
    assert p.feasible, p.status
    assert p.objective == "even"  # no demo well has a [pump] table
    assert p.draws_used == p.draws_total == DRAWS
    wells = {w.name: w for w in inp.wells}
    for e in inp.entry_points:
        mine = [w for w in inp.wells if w.entry_point == e.name]
        others = [o for o in inp.others if o.entry_point == e.name]
        total = sum(p.rates[w.name] for w in mine) + sum(p.other_rates[o.name] for o in others)
        np.testing.assert_allclose(total, e.demand, rtol=1e-7)
        for w in mine:  # inside each well's hydraulic range, or off
            q = p.rates[w.name]
            assert q == 0 or w.min_rate * (1 - 1e-9) <= q <= w.max_rate * (1 + 1e-9)
        # the blend recomputed here from the plan's inputs (not the plan's own report)
        load = sum(_load(wells[w.name], p.rates[w.name]) for w in mine if p.rates[w.name] > 0)
        load = load + sum(p.other_rates[o.name] * np.array(
            [o.concentration[a] for a in inp.analytes]) for o in others)
        blend = load / e.demand
        target = inp.margin * np.array([inp.limits[a] for a in inp.analytes])
        share = np.mean(np.all(blend <= target * (1 + 1e-7), axis=1))
        assert share >= inp.probability
        np.testing.assert_allclose(share, p.compliance[e.name], atol=1e-12)
        rows = p.blend[p.blend["entry_point"] == e.name]
        assert np.all(rows["quantile_in_plan_mg_l"] <= rows["target_mg_l"] * (1 + 1e-6))


def test_plan_inputs_follow_the_summaries(field):
    inp = fieldplan.plan_inputs(field.wellfield, field.outcomes)
    assert [w.name for w in inp.wells] == ["TH-2", "TH-5", "TH-7", "TH-9"]
    assert inp.limits == {"nitrate": pytest.approx(10.0), "arsenic": pytest.approx(0.010)}
    for w in inp.wells:
        s = field.summaries[w.name]
        keep = np.isin(s.rates, w.rates)
        assert np.all(s.hydraulic_ok[keep])
        assert w.min_rate == w.rates[0] and w.max_rate == w.rates[-1]
        # the 850 gpm cap of TH-7 in the file (850 gpm = 4633.5 m3/d) holds
        if w.name == "TH-7":
            assert w.max_rate <= 850 * 5.450961 * (1 + 1e-6)
        f = fieldplan.variability_factors(inp.seed, w.name, DRAWS,
                                          [s.log_sd[a] for a in inp.analytes])
        np.testing.assert_allclose(w.concentration,
                                   s.concentration[:, keep] * f[:, None, :], rtol=1e-12)
        assert w.level_limit == pytest.approx(s.level_limit)
    # interference: Theis at the file's distances, symmetric, zero diagonal
    a = inp.interference
    assert a.shape == (4, 4) and np.allclose(a, a.T, rtol=1e-12) and np.all(np.diag(a) == 0)


def test_variability_factors_have_mean_one_and_the_asked_log_sd():
    # a lognormal with log sd s has mean exp(mu + s^2/2) (Aitchison and Brown 1957)
    f = fieldplan.variability_factors(7, "W", 40000, [0.1, 0.3, 0.0])
    np.testing.assert_allclose(f.mean(axis=0), [1.0, 1.0, 1.0], atol=0.006)
    np.testing.assert_allclose(np.log(f).std(axis=0), [0.1, 0.3, 0.0], rtol=0.02, atol=1e-12)
    np.testing.assert_array_equal(f, fieldplan.variability_factors(7, "W", 40000,
                                                                   [0.1, 0.3, 0.0]))
    assert not np.array_equal(f, fieldplan.variability_factors(7, "V", 40000, [0.1, 0.3, 0.0]))


def test_a_well_out_of_service_is_left_out(field):
    wf = copy.copy(field.wellfield)
    wf.wells = [replace(w, in_service=False) if w.name == "TH-9" else w for w in wf.wells]
    fp = fieldplan.field_plan(wf, field.outcomes)
    assert fp.inputs.left_out == {"TH-9": "out of service"}
    assert "TH-9" not in [w.name for w in fp.inputs.wells]
    assert "TH-9" not in fp.plan.rates
    assert [r.well for r in fp.outages] == ["TH-2", "TH-5", "TH-7"]
    assert any("TH-9: not in the plan (out of service)" in x
               for x in fieldplan.plan_lines(fp, "US"))


def test_n_minus_one_names_the_outage_that_breaks_an_entry_point(field):
    table = field.n_minus_one()
    row = table[(table["well_out"] == "TH-2") & (table["entry_point"] == "North plant")]
    # without TH-2 the North plant has only TH-5, whose nitrate is over margin x limit at
    # every rate (its own window is empty for nitrate)
    assert not row["met"].item() and row["shortfall_m3_d"].item() > 0
    assert "nitrate" in row["noncompliant"].item()
    assert table[table["well_out"] == "TH-5"]["met"].all()
    assert row["fails"].item() == "itself"
    assert row["cause"].item() == "short; nitrate over margin x limit"
    # the demo's interference links the two plants into one program: the South plant has no
    # re-optimised plan only because of the North plant
    south = table[(table["well_out"] == "TH-2") & (table["entry_point"] == "South plant")]
    assert south["fails"].item() == "through the link" and not south["met"].item()
    assert south["linked_to"].item() == "North plant" and south["cause"].item() == ""
    assert south["shortfall_m3_d"].item() == 0 and south["noncompliant"].item() == ""
    # TH-7 out: the South plant is short on its own wells, the North plant fails through it
    th7 = table[table["well_out"] == "TH-7"].set_index("entry_point")
    assert th7.loc["South plant", "fails"] == "itself" and th7.loc["South plant", "cause"] == \
        "short"
    assert th7.loc["North plant", "fails"] == "through the link"
    assert th7.loc["North plant", "linked_to"] == "South plant"
    assert (table["fails"] == "no").tolist() == table["met"].tolist()


@pytest.mark.parametrize("units", ["US", "SI"])
def test_n_minus_one_text_says_which_entry_point_fails_and_why(field, units):
    from blendq.units import DISPLAY_UNITS, from_base, significant

    fp, table = field.field_plan, field.n_minus_one()
    lines = fieldplan.outage_lines(fp, units)
    text = "\n".join(lines)
    assert "no plan for the entry points" not in text
    i = lines.index("  TH-2 out:")
    north, south = lines[i + 1], lines[i + 2]
    # the shortfall in the display unit, as the table gives it in m^3/d
    row = table[(table["well_out"] == "TH-2") & (table["entry_point"] == "North plant")]
    unit = DISPLAY_UNITS[units]["rate"]
    short = float(from_base(row["shortfall_m3_d"].item(), "rate", unit))
    label = {"US": "gpm", "SI": "m³/d"}[units]
    assert north.startswith(f"    North plant fails on its own wells: short "
                            f"{significant(short, 3, units)} {label} of its "), north
    assert "nitrate over margin x limit (lowest achievable 95 % quantile" in north
    assert "against 9 mg/L" in north  # 0.9 x the 10 mg/L nitrate limit
    assert south == ("    South plant: meets demand and limits on its own wells, but no joint plan "
                     "exists because its wells' drawdown is linked to North plant's")
    assert "  TH-5 out: every entry point met (plan re-optimised)" in lines
    j = lines.index("  TH-7 out:")
    assert lines[j + 1].startswith("    North plant: meets demand and limits on its own wells")
    assert lines[j + 2].startswith("    South plant fails on its own wells: short ")
    assert ("gpm" in text) == (units == "US") and ("m³/d" in text) == (units == "SI")


def test_n_minus_one_of_a_single_well_is_a_shortfall():
    # one well feeding one entry point: out of service, nothing is left to meet the demand
    rates = np.array([100.0, 200.0])
    w = BlendWell("A", "E", rates, np.full((5, 2, 1), 1.0), 100.0, 200.0)
    out = n_minus_one([w], [EntryPoint("E", 150.0)], {"x": 10.0}, 0.9, 0.9, ["x"])
    assert len(out) == 1 and not out[0].feasible
    np.testing.assert_allclose(out[0].shortfall["E"], 150.0, rtol=1e-9)
    assert not outage_table(out)["met"].any()


def test_the_objective_is_energy_when_every_well_has_a_pump_else_even(field):
    outcomes = copy.deepcopy(field.outcomes)
    for o in outcomes:  # an invented energy curve: 0.3 kWh/m3 rising with the rate
        o.summary.energy = 0.3 + 2e-5 * o.summary.rates
    fp = fieldplan.field_plan(field.wellfield, outcomes, n_minus_one=False)
    assert fp.plan.feasible and fp.plan.objective == "energy"
    assert all(w.energy is not None for w in fp.inputs.wells)
    outcomes[1].summary.energy = None
    fp = fieldplan.field_plan(field.wellfield, outcomes, n_minus_one=False)
    assert fp.plan.objective == "even"


def test_same_seed_same_plan_files(field):
    again = bq.api.WellfieldResult(field.wellfield, field.outcomes, field.units)
    a, b = field.files(), again.files()
    for name in ("plan.csv", "n_minus_1.csv", "wellfield.txt", "wellfield.csv"):
        assert a[name] == b[name], name
    assert "planning aid" in a["wellfield.txt"]
    rows = [ln for ln in a["plan.csv"].splitlines() if not ln.startswith("# ")]
    assert rows[1].endswith(",optimal plan")


def test_every_wellfield_csv_starts_with_the_cautions_and_reads_back(field):
    files = field.files()
    tables = {"wellfield.csv": field.table, "plan.csv": field._plan_table(),
              "n_minus_1.csv": field.n_minus_one()}
    for name, table in tables.items():
        lines = files[name].split("\r\n")
        assert lines[0].startswith("# ") and lines[0].endswith(
            "; wellfield Tamsett Hollow well field (invented)"), name
        assert lines[1] == f"# written by blendq {bq.__version__}"
        assert lines[2:5] == [f"# {c}" for c in field.cautions]
        assert "planning aid, not a compliance determination" in lines[2]
        assert not lines[5].startswith("#"), name
        back = pd.read_csv(io.StringIO(files[name]), comment="#")
        # the same table as the file without its comment block (and as the table itself)
        pd.testing.assert_frame_equal(back, pd.read_csv(io.StringIO(to_csv_safe(table))))
        assert list(back.columns) == [str(c) for c in table.columns] and len(back) == len(table)


def test_an_other_source_without_a_planned_analyte_is_an_input_error(field):
    wf = copy.copy(field.wellfield)
    wf.sources = [replace(s, concentrations={"nitrate": 0.3}) for s in wf.sources]
    with pytest.raises(bq.api.InputError, match=r"sources\[1\]"):
        fieldplan.plan_inputs(wf, field.outcomes)



def test_the_energy_curve_of_a_well_with_a_pump(tmp_path):
    from pumped_wells import well_with_test_pump

    from blendq.decide.batch import WellTask, analyse_well

    o = analyse_well(WellTask("TH-9", "E", well_with_test_pump(tmp_path), seed=3, draws=DRAWS))
    assert o.error is None, o.error
    s = o.summary
    e = s.energy
    assert e is not None and e.shape == s.rates.shape
    ok = np.isfinite(e)
    assert ok.sum() >= 3
    # E = rho g H / (eta_pump eta_motor eta_drive) per volume (the wire-to-water energy,
    # e.g. Karassik et al. 2008): the total head H is at least the lift from the median
    # pumping level to the 50 psi (35.2 m) at the wellhead, the efficiencies at most 1
    rho_g = 1000.0 * 9.80665  # [N/m^3]
    lift = s.pumping_level[ok] + 50 * 6894.757 / rho_g
    assert np.all(e[ok] >= rho_g * lift / 3.6e6 * (1 - 1e-9))
    # and no more than that lift plus 10 m of column losses at a 30 % pump efficiency with the
    # default motor and drive efficiencies (0.92, 0.97)
    assert np.all(e[ok] <= rho_g * (lift + 10.0) / (3.6e6 * 0.30 * 0.92 * 0.97))


# ------------------------------------------------------------------- N-1 with linked entry points
def _well(name: str, ep: str, rates, conc: float, levels=None, limit=None) -> BlendWell:
    """A well of constant nitrate ``conc`` [mg/L] in 5 identical draws; ``levels`` its
    pumping level per rate [m depth], ``limit`` its deepest allowed level [m depth]."""
    rates = np.asarray(rates, float)
    return BlendWell(name, ep, rates, np.full((5, rates.size, 1), conc), float(rates[0]),
                     float(rates[-1]), None, None if levels is None else np.asarray(levels, float),
                     limit)


def _hand_plan(wells, demands, interference) -> fieldplan.FieldPlan:
    """Plan and N-1 of hand-built wells (nitrate limit 10 mg/L, margin 0.9, probability 0.8)."""
    from blendq.decide import blendplan as bp

    eps = [EntryPoint(n, d) for n, d in demands.items()]
    inp = fieldplan.PlanInputs(wells, eps, [], {"nitrate": 10.0}, ["nitrate"],
                               np.asarray(interference, float), 0.9, 0.8, 0)
    args = (wells, eps, inp.limits, inp.margin, inp.probability, inp.analytes, [],
            inp.interference)
    outages = bp.n_minus_one(*args)
    return fieldplan.FieldPlan(inp, bp.blending_plan(*args), outages,
                               [fieldplan.entry_outcomes(inp, r) for r in outages])


def test_n_minus_one_an_entry_point_failing_only_through_the_link():
    # N: A (1 mg/L) and B (20 mg/L, over 0.9 x 10 at every rate); S: C (1 mg/L). A small
    # drawdown of every well at the others (1e-4 m per m^3/d) links N and S into one program;
    # the levels (10..15 m against 100 m) never bind
    levels = dict(levels=[10.0, 15.0], limit=100.0)
    wells = [_well("A", "N", [50.0, 150.0], 1.0, **levels),
             _well("B", "N", [50.0, 150.0], 20.0, **levels),
             _well("C", "S", [50.0, 200.0], 1.0, **levels)]
    g = np.full((3, 3), 1e-4)
    fp = _hand_plan(wells, {"N": 150.0, "S": 100.0}, g)
    assert fp.plan.feasible
    by = {r.well: {o.entry_point: o for o in e} for r, e in zip(fp.outages, fp.outcomes, strict=True)}
    # A out: B alone cannot deliver any water under 9 mg/L (20 mg/L at every rate): N is short
    # its whole demand of 150 m^3/d and its lowest achievable nitrate is B's 20 mg/L
    n, s = by["A"]["N"], by["A"]["S"]
    assert n.fails == "itself" and s.fails == "through the link"
    np.testing.assert_allclose(n.shortfall, 150.0, rtol=1e-6)
    assert [a for a, *_ in n.over] == ["nitrate"]
    np.testing.assert_allclose(n.over[0][1:3], (20.0, 9.0), rtol=1e-6)
    assert s.failing == ["N"] and s.shortfall == 0 and s.over == []
    # B out: A carries N; C out: S has no well left and fails itself, N (no longer linked,
    # C being the only link) is met
    assert all(o.fails == "no" for o in by["B"].values())
    assert by["C"]["S"].fails == "itself" and by["C"]["N"].fails == "no"
    np.testing.assert_allclose(by["C"]["S"].shortfall, 100.0, rtol=1e-6)
    assert by["C"]["N"].linked == []
    lines = fieldplan.outage_lines(fp, "SI")
    # what "on its own wells" means, said once: the other entry points' wells off
    assert lines[1].startswith("  (an entry point left without a plan is planned again on its "
                               "own wells, the other entry points' wells off")
    del lines[1]
    assert lines[1:4] == [
        "  A out:",
        "    N fails on its own wells: short 150 m³/d of its 150 m³/d demand; nitrate over "
        "margin x limit (lowest achievable 80 % quantile 20 mg/L against 9 mg/L)",
        "    S: meets demand and limits on its own wells, but no joint plan exists because its "
        "wells' drawdown is linked to N's"]
    assert lines[4] == "  B out: every entry point met (plan re-optimised)"
    assert lines[5:] == ["  C out:", "    S fails on its own wells: short 100 m³/d of its "
                         "100 m³/d demand"]
    # a FieldPlan made without the outcomes works them out (same seed, same draws)
    bare = fieldplan.FieldPlan(fp.inputs, fp.plan, fp.outages)
    bare_lines = fieldplan.outage_lines(bare, "SI")
    assert bare_lines[:1] + bare_lines[2:] == lines
    # US: 150 m^3/d = 150 / (3.785411784e-3 m^3/gal x 1440 min/d) = 27.52 gpm (NIST SP 811,
    # the US gallon 231 in^3 = 3.785411784 L exactly)
    assert "short 27.5 gpm of its 27.5 gpm demand" in fieldplan.outage_lines(fp, "US")[3]
    table = fieldplan.outage_table(fp)
    a = table[table["well_out"] == "A"].set_index("entry_point")
    assert a.loc["N", "fails"] == "itself" and a.loc["S", "fails"] == "through the link"
    assert a.loc["S", "linked_to"] == "N" and a.loc["N", "linked_to"] == ""
    assert a.loc["N", "cause"] == "short; nitrate over margin x limit"
    assert a.loc["N", "noncompliant"] == "nitrate" and not a["met"].any()


def test_n_minus_one_entry_points_that_each_meet_alone_but_not_together():
    # N: A and A2; S: C; demands 200 m^3/d each. Pumping levels 20 m at 100 and 30 m at
    # 200 m^3/d, deepest allowed 35 m. A and C draw each other down 0.04 m per m^3/d (A2 is
    # far from both). With A2 out, A must pump 200: each level 30 + 0.04 x 200 = 38 m, 3 m
    # below the deepest allowed, while N alone (A at 200: 30 m) and S alone (30 m) are fine
    levels = dict(levels=[20.0, 30.0], limit=35.0)
    wells = [_well("A", "N", [100.0, 200.0], 1.0, **levels),
             _well("A2", "N", [100.0, 200.0], 1.0, **levels),
             _well("C", "S", [100.0, 200.0], 1.0, **levels)]
    g = np.zeros((3, 3))
    g[0, 2] = g[2, 0] = 0.04
    fp = _hand_plan(wells, {"N": 200.0, "S": 200.0}, g)
    assert fp.plan.feasible  # A2 carries N, A off: C at 30 m
    by = {r.well: {o.entry_point: o for o in e} for r, e in zip(fp.outages, fp.outcomes, strict=True)}
    n, s = by["A2"]["N"], by["A2"]["S"]
    assert n.fails == s.fails == "through the link" and n.failing == s.failing == []
    np.testing.assert_allclose([n.level_excess, s.level_excess], [3.0, 3.0], rtol=1e-6)
    assert n.cause() == "level limits"
    assert all(o.fails == "no" for o in by["A"].values())
    text = fieldplan.outage_lines(fp, "US")
    i = text.index("  A2 out:")
    # 3 m = 9.84 ft (1 ft = 0.3048 m exactly, NIST SP 811)
    assert text[i + 1] == ("    N: meets demand and limits on its own wells, and so does S; "
                           "together no plan exists because the wells' drawdown links them: "
                           "pumping levels would reach 9.84 ft below the deepest allowed (level "
                           "limits bind)")
    assert text[i + 2].startswith("    S: meets demand and limits on its own wells, and so "
                                  "does N; together")
    table = fieldplan.outage_table(fp)
    row = table[(table["well_out"] == "A2") & (table["entry_point"] == "S")]
    assert row["fails"].item() == "through the link" and row["linked_to"].item() == "N"
    np.testing.assert_allclose(row["level_excess_m"].item(), 3.0, rtol=1e-6)
