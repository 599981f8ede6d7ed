"""Well modifications that open a wellfield's blending plan (blendq.decide.fieldmods), on the
demo wellfield with the North plant's demand raised to 800 gpm (no plan as analysed).

The plan itself is checked against closed forms and a brute-force grid in
tests/decide/test_blendplan.py; here a modification that opens a plan is re-evaluated and
re-solved independently and its plan checked by the mass balance of complete mixing at each
entry point (C = sum Q_i C_i / sum Q_i; Appelo and Postma 2005, Geochemistry, Groundwater and
Pollution, 2nd ed., section 2.3), and a case without a plan is checked against the bound that
mass balance gives (a blend is never leaner than its leanest water).
"""

from __future__ import annotations

import shutil
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import blendq as bq
from blendq.decide import blendplan as bp
from blendq.decide import fieldmods, fieldplan
from blendq.decide import scenarios as sc

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "wellfield"
DRAWS, PLAN_DRAWS = 200, 100


@pytest.fixture(scope="module")
def field(tmp_path_factory):
    root = tmp_path_factory.mktemp("fieldmods") / "wf"
    shutil.copytree(EXAMPLE, root)
    f = root / "wellfield.toml"
    f.write_text(f.read_text(encoding="utf-8").replace('demand = "650 gpm"', 'demand = "800 gpm"'),
                 encoding="utf-8")
    r = bq.analyse_wellfield(root, workers=1, draws=DRAWS, plan_draws=PLAN_DRAWS)
    fp = fieldplan.field_plan(r.wellfield, r.outcomes, max_draws=PLAN_DRAWS, n_minus_one=False,
                              units="US")
    mods = fieldmods.search(r.wellfield, r.outcomes, fp.inputs, fp.plan, max_draws=PLAN_DRAWS,
                            units="US")
    return r, fp, mods


def _outcome(r, name):
    return next(o for o in r.outcomes if o.name == name)


def _modified_inputs(wellfield, outcomes, cand):
    """The plan's inputs with the candidate's well modified, built here from the scenario's
    own window (not through fieldmods.modified_summary)."""
    o = next(o for o in outcomes if o.name == cand.well)
    res = sc.evaluate(o.analysis, cand.scenario)
    hyd = np.all([c.ok for c in res.window.criteria if c.kind in ("hydraulic", "pump")], axis=0)
    summary = replace(o.summary, hydraulic_ok=hyd, concentration=res.prediction.concentration,
                      pumping_level=np.median(res.prediction.pumping_level, axis=0))
    changed = [replace(x, summary=summary) if x.name == cand.well else x for x in outcomes]
    return fieldplan.plan_inputs(wellfield, changed), o, res


def _used(n_draws, seed):
    # the program's draw subset (blendplan: a seeded choice without replacement, sorted)
    return np.sort(np.random.default_rng(seed).choice(n_draws, size=PLAN_DRAWS, replace=False))


def _load(w, q, a):
    """Load of a BlendWell at rate q for analyte index a, per draw [mg/L m^3/d]: rate x
    concentration interpolated on its grid (the program's piecewise-linear load)."""
    return np.array([np.interp(q, w.rates, w.rates * w.concentration[d, :, a])
                     for d in range(w.concentration.shape[0])])


def test_the_demo_at_800_gpm_has_no_plan_and_a_seal_of_th5_opens_one(field):
    r, fp, mods = field
    assert not fp.plan.feasible
    assert "North plant" in mods.unmet
    assert mods.binding["North plant"] == ["nitrate"]
    tried = [(c.well, c.origin, c.scenario.name) for c in mods.tried]
    # TH-5 (richest in nitrate) has no scenario of its own: the seal of its main nitrate zone;
    # TH-2 its two scenarios that change the well (its blend with an outside source is not one)
    assert tried == [("TH-5", "standard", "Seal Upper sand"),
                     ("TH-2", "scenario", "Seal the upper sand"),
                     ("TH-2", "scenario", "Redevelop the clogged gravel")]
    assert any('"Blend 200 gpm of the river-terrace well" (a blend' in x for x in mods.left_out)
    assert [c.scenario.name for c in mods.opening] == ["Seal Upper sand"]


def test_the_seal_lowers_th5_nitrate_at_every_allowed_rate(field):
    r, fp, mods = field
    cand = mods.opening[0]
    o = _outcome(r, "TH-5")
    res = sc.evaluate(o.analysis, cand.scenario)
    a = o.summary.analytes.index("nitrate")
    allowed = o.summary.hydraulic_ok & (o.summary.rates > 0)
    before = np.median(o.summary.concentration[:, allowed, a], axis=0)
    after = np.median(res.prediction.concentration[:, allowed, a], axis=0)
    assert np.all(after < before)


def test_an_opening_modification_resolved_independently_meets_every_constraint(field):
    r, fp, mods = field
    cand = mods.opening[0]
    inputs, _, _ = _modified_inputs(r.wellfield, r.outcomes, cand)
    plan = bp.blending_plan(inputs.wells, inputs.entry_points, inputs.limits, inputs.margin,
                            inputs.probability, inputs.analytes, inputs.others,
                            inputs.interference, max_draws=PLAN_DRAWS, seed=inputs.seed,
                            diagnose=False)
    assert plan.feasible
    for name, q in cand.plan.rates.items():
        np.testing.assert_allclose(plan.rates[name], q, rtol=1e-6, atol=1e-6)
    n = inputs.wells[0].concentration.shape[0]
    used = _used(n, inputs.seed)
    rates = {**plan.rates, **plan.other_rates}
    for e in inputs.entry_points:
        wells = [w for w in inputs.wells if w.entry_point == e.name]
        others = [o for o in inputs.others if o.entry_point == e.name]
        total = sum(rates[w.name] for w in wells) + sum(rates[o.name] for o in others)
        np.testing.assert_allclose(total, e.demand, rtol=1e-7)          # demand met exactly
        ok = np.ones(n, bool)
        for j, a in enumerate(inputs.analytes):
            if a not in inputs.limits:
                continue
            load = sum(_load(w, rates[w.name], j) for w in wells if rates[w.name] > 0)
            load = load + sum(rates[o.name] * o.concentration[a] for o in others)
            ok &= load / total <= inputs.margin * inputs.limits[a] * (1 + 1e-7)
        assert ok[used].mean() >= inputs.probability                   # the chance constraint
        np.testing.assert_allclose(ok.mean(), cand.plan.compliance[e.name], atol=1e-12)
    for i, w in enumerate(inputs.wells):                                # hydraulic limits
        q = rates[w.name]
        if q <= 0:
            continue
        assert w.min_rate * (1 - 1e-9) <= q <= w.max_rate * (1 + 1e-9)
        level = np.interp(q, w.rates, w.drawdown)
        if inputs.interference is not None:
            level += sum(inputs.interference[i, k] * rates[x.name]
                         for k, x in enumerate(inputs.wells) if k != i)
        assert level <= w.level_limit + 1e-6


def test_the_base_case_as_a_modification_gives_the_well_as_analysed(field):
    # common random numbers: the unchanged well evaluated as a scenario is the analysis itself
    r, fp, mods = field
    o = _outcome(r, "TH-5")
    res = sc.evaluate(o.analysis, sc.base_scenario(o.analysis.project))
    s = fieldmods.modified_summary(o.summary, o.analysis, res)
    np.testing.assert_array_equal(s.concentration, o.summary.concentration)
    np.testing.assert_array_equal(s.hydraulic_ok, o.summary.hydraulic_ok)
    np.testing.assert_allclose(s.pumping_level, o.summary.pumping_level, rtol=0, atol=0)
    assert s.level_limit == o.summary.level_limit


def test_same_seed_same_table_and_text_with_the_analyses_repeated(field):
    r, fp, mods = field
    dropped = [replace(o, analysis=None) for o in r.outcomes]   # analysed again in the search
    again = fieldmods.search(r.wellfield, dropped, fp.inputs, fp.plan, max_draws=PLAN_DRAWS,
                             units="US")
    one = fieldmods.modification_table(mods, "US").to_csv(index=False).encode()
    two = fieldmods.modification_table(again, "US").to_csv(index=False).encode()
    assert one == two
    assert fieldmods.modification_lines(mods, "US") == fieldmods.modification_lines(again, "US")


def test_table_and_text(field):
    r, fp, mods = field
    t = fieldmods.modification_table(mods, "US")
    assert list(t.columns[:5]) == ["well", "modification", "origin", "status", "opens_plan"]
    assert {"TH-2 [gpm]", "TH-5 [gpm]", "compliance North plant"} <= set(t.columns)
    row = t[t["opens_plan"]].iloc[0]
    plan = mods.opening[0].plan
    # 1 US gallon = 3.785411784 L exactly (NIST Handbook 44, appendix C): 1 gpm = 5.450993 m3/d
    np.testing.assert_allclose(row["TH-5 [gpm]"], plan.rates["TH-5"] / (3.785411784e-3 * 1440),
                               rtol=1e-3)
    np.testing.assert_allclose(row["compliance North plant"], plan.compliance["North plant"])
    assert t.attrs["cautions"][0].startswith("blendq is a planning aid")
    lines = fieldmods.modification_lines(mods, "US")
    assert "licensed professional" in lines[0]
    assert lines[1].startswith("    opens a plan: TH-5, seal Upper sand")
    assert "North plant 800 gpm from TH-2 " in lines[1]
    assert not any("none of the" in x for x in lines)


def test_at_most_the_cap_is_re_solved(field):
    r, fp, mods = field
    capped = fieldmods.search(r.wellfield, r.outcomes, fp.inputs, fp.plan,
                              max_draws=PLAN_DRAWS, units="US", max_resolves=1)
    assert [c.status for c in capped.candidates] == [fieldmods.OPENS, fieldmods.NOT_TRIED,
                                                      fieldmods.NOT_TRIED]
    text = "\n".join(fieldmods.modification_lines(capped, "US"))
    assert "not tried (at most 1 plan re-solved): TH-2" in text


def test_no_modification_opens_a_plan_at_a_margin_of_half_the_limit(field):
    r, fp, mods = field
    wf = replace(r.wellfield, margin=0.5, interference=None)
    strict = fieldplan.field_plan(wf, r.outcomes, max_draws=PLAN_DRAWS, n_minus_one=False)
    found = fieldmods.search(wf, r.outcomes, strict.inputs, strict.plan, max_draws=PLAN_DRAWS)
    assert found.unmet == ["North plant"] and len(found.tried) == 3
    assert not found.opening and all(c.status == fieldmods.NO_PLAN for c in found.tried)
    lines = fieldmods.modification_lines(found)
    assert lines[-1].startswith("    none of the 3 modifications tried opens a plan; treatment "
                                "or another source lower in nitrate remains")
    # the bound of mass balance: the blend of a draw is no leaner than the leanest water any
    # well gives at any allowed rate; where that exceeds 0.5 x limit in more draws than the
    # chance constraint may give up, no plan exists (checked for the seal that opened one at 0.9)
    cand = next(c for c in found.tried if c.origin == "standard")
    inputs, _, _ = _modified_inputs(wf, r.outcomes, cand)
    j = inputs.analytes.index("nitrate")
    north = [w for w in inputs.wells if w.entry_point == "North plant"]
    leanest = np.min([w.concentration[:, :, j].min(axis=1) for w in north], axis=0)
    used = _used(leanest.size, inputs.seed)
    over = leanest[used] > 0.5 * inputs.limits["nitrate"]
    assert over.sum() > np.floor((1 - inputs.probability) * PLAN_DRAWS)


def test_a_plan_that_exists_needs_no_search(field):
    r, fp, mods = field
    feasible = replace(fp.plan, feasible=True, unmet=[])
    found = fieldmods.search(r.wellfield, r.outcomes, fp.inputs, feasible)
    assert found.candidates == [] and fieldmods.modification_lines(found) == []
    assert fieldmods.modification_table(found).empty


def test_the_energy_of_a_modified_well_follows_its_own_levels(tmp_path):
    from pumped_wells import well_with_test_pump

    from blendq.decide.batch import WellTask, analyse_well

    o = analyse_well(WellTask("TH-9", "E", well_with_test_pump(tmp_path), seed=3, draws=100))
    assert o.error is None, o.error
    a = o.analysis
    seal = sc.parse_scenario({"name": "s", "seal": ["Gravel"]}, 1, a.project)
    s = fieldmods.modified_summary(o.summary, a, sc.evaluate(a, seal))
    ok = np.isfinite(s.energy) & np.isfinite(o.summary.energy)
    assert ok.sum() >= 3
    # wire-to-water energy E = rho g H / efficiencies (Karassik et al. 2008, Pump Handbook):
    # H at least the lift from the modified median level to the 50 psi (35.2 m) at the wellhead
    rho_g = 1000.0 * 9.80665  # [N/m^3]
    bound = rho_g * (s.pumping_level[ok] + 50 * 6894.757 / rho_g) / 3.6e6
    assert np.all(s.energy[ok] >= bound * (1 - 1e-9))
    # the modified energy follows the modified levels: where the seal draws the level down by
    # more than half a metre, the same rate takes more energy to lift
    deeper = s.pumping_level[ok] > o.summary.pumping_level[ok] + 0.5
    assert deeper.sum() >= 3
    assert np.all(s.energy[ok][deeper] > o.summary.energy[ok][deeper])
