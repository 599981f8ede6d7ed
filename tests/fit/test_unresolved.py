"""Tests of blendq.fit.unresolved: zone values the data cannot pin, and what would tell.

The rank-deficient case is the invented four-zone synthetic well with flow logs but no depth
samples: discharge samples alone leave some zone values undetermined.
"""

from __future__ import annotations

import numpy as np
import pytest
import synthetic_wells as sw
from scipy import optimize
from scipy.optimize import brentq

from blendq.fit import diagnostics, uncertainty
from blendq.fit import unresolved as un
from blendq.fit.estimation import fit, row_weights, solve_concentrations


def _setup(depth: bool):
    f = fit(sw.project(relative_error=0.03, depth=depth, seed=3))
    d = uncertainty.monte_carlo(f, 600, seed=11)
    zones = diagnostics.zone_table(f, d)
    return f, d, zones


@pytest.fixture(scope="module")
def deficient():
    f, d, zones = _setup(depth=False)
    return f, d, zones, un.redraw_unresolved(f, d, zones, seed=5)


def test_the_case_is_rank_deficient(deficient):
    f, _, zones, _ = deficient
    diag = diagnostics.analyte_diagnostics(f)
    assert (diag["rank"] < diag["zones"]).all()
    assert (zones["verdict"] == "not resolved").sum() >= 4


def test_redrawn_values_span_the_corners_of_the_data_allowed_set(deficient):
    f, _, zones, new = deficient
    sets = un.unresolved_sets(f, zones)
    assert set(sets) == set(f.analytes)
    for j, analyte in enumerate(f.analytes):
        uset = sets[analyte]
        for i in uset.zones:
            lo_v, hi_v = uset.vertices[:, i].min(), uset.vertices[:, i].max()
            width = hi_v - lo_v
            assert width > 0
            v = new.zone_values[:, i, j]
            # the draws reach both ends of the zone's range (within 10 % of its width)
            assert v.min() <= lo_v + 0.1 * width, (analyte, i)
            assert v.max() >= hi_v - 0.1 * width, (analyte, i)
            row = zones[(zones["analyte"] == analyte) & (zones["zone"] == f.zone_names[i])]
            # and nearly all stay inside the data-allowed range of the linear programmes (at
            # the fitted hydraulics; the draws also carry the hydraulic uncertainty)
            lp_lo, lp_hi = float(row["range_low"].iloc[0]), float(row["range_high"].iloc[0])
            inside = (v >= lp_lo - 1e-9) & (v <= lp_hi + 1e-9)
            assert inside.mean() >= 0.97, (analyte, i, inside.mean())


def test_every_redrawn_draw_reproduces_the_samples_as_before(deficient):
    f, old, _, new = deficient
    model = f.problem.model(new.theta)
    np.testing.assert_array_equal(new.theta, old.theta)
    for j, analyte in enumerate(f.analytes):
        d = f.problem.data[analyte]
        a = row_weights(model, d.rate, d.depth)
        blend_old = np.einsum("bmn,bn->bm", a, old.zone_values[:, :, j])
        blend_new = np.einsum("bmn,bn->bm", a, new.zone_values[:, :, j])
        # the move is along the null space of each draw's own weights: every blend unchanged
        np.testing.assert_allclose(blend_new, blend_old, rtol=0, atol=1e-9 * d.value.max())
        # so every draw reproduces the blended samples within their errors as before
        chi = ((blend_new - d.value) / d.sigma) ** 2
        assert np.quantile(chi.sum(1), 0.5) < 3.0 * len(d.value)
        assert (new.zone_values[:, :, j] >= -1e-12).all()
        if len(d.cens_limit):
            ac = row_weights(model, d.cens_rate, d.cens_depth)
            cens = np.einsum("bpn,bn->bp", ac, new.zone_values[:, :, j])
            assert (cens <= d.cens_limit * (1 + 1e-9)).all()


def test_corners_give_the_same_range_as_linear_programming(deficient):
    # reference: scipy's HiGHS linear programme over {c : A c = A c*, bounds, non-detects, cap}
    f, _, zones, _ = deficient
    for analyte, uset in un.unresolved_sets(f, zones).items():
        c, a, ac = solve_concentrations(f.problem, f.model, analyte)
        d = f.problem.data[analyte]
        cap = un.value_cap(f, analyte)
        bounds = [(0.0, cap)] * len(c)
        kw = dict(A_eq=a, b_eq=a @ c, bounds=bounds, method="highs")
        if len(ac):
            kw.update(A_ub=ac, b_ub=d.cens_limit)
        for i in uset.zones:
            e = np.zeros(len(c))
            e[i] = 1.0
            lo = optimize.linprog(e, **kw)
            hi = optimize.linprog(-e, **kw)
            assert lo.status == 0 and hi.status == 0
            got_lo, got_hi = uset.value_range(e)
            np.testing.assert_allclose(got_lo, lo.x[i], rtol=1e-6, atol=1e-9 * cap)
            np.testing.assert_allclose(got_hi, hi.x[i], rtol=1e-6, atol=1e-9 * cap)


def test_redraw_is_seeded(deficient):
    f, old, zones, new = deficient
    again = un.redraw_unresolved(f, old, zones, seed=5)
    np.testing.assert_array_equal(again.zone_values, new.zone_values)
    other = un.redraw_unresolved(f, old, zones, seed=6)
    assert not np.array_equal(other.zone_values, new.zone_values)


def test_resolved_case_is_left_alone():
    f, d, zones = _setup(depth=True)
    assert not (zones["verdict"] == "not resolved").any()
    new = un.redraw_unresolved(f, d, zones)
    np.testing.assert_array_equal(new.zone_values, d.zone_values)
    assert un.unresolved_sets(f, zones) == {}


def test_reversal_rate_is_where_the_zone_flow_changes_sign(deficient):
    # reference: scipy's brentq on the zone flow of the fitted model; closed form
    # Q = sum_k G_k (h0_k - h0_i) from sum_k G_k (h0_k - h_w) = Q with q_i = 0 at h_w = h0_i
    f = deficient[0]
    i = 3  # Z4 has the lowest static head: it takes water at low rates
    q_rev = un.reversal_rate(f, i)
    ref = brentq(lambda q: f.model.state(np.array([q])).zone_flow[0, i], 0.0, 5000.0,
                 xtol=1e-10)
    np.testing.assert_allclose(q_rev, ref, rtol=1e-8)
    assert un.reversal_rate(f, 2) == 0.0  # Z3 (highest head) gives water at every rate


def test_what_would_tell_names_the_gaps_where_the_water_flows(deficient):
    f = deficient[0]
    # intake at 25 m above every zone (tops 30, 50, 70, 90 m; 10 m thick): water flows up
    text = un.what_would_tell(f, [2, 3], "SI")
    z3 = next(t for t in text if t.startswith("Z3"))
    assert "between 60 m and 70 m and one between 80 m and 90 m" in z3
    z4 = next(t for t in text if t.startswith("Z4"))
    assert "between 80 m and 90 m during a pumped step above" in z4
    assert " and one " not in z4  # nothing below the deepest zone
    z1 = un.what_would_tell(f, [0], "SI")[0]
    assert "between 25 m and 30 m and one between 40 m and 50 m" in z1
    # Z2 takes water below about 80 m3/d, under the lowest step (200 m3/d): a step there
    # would add a blend without Z2; Z4 takes water below about 700 m3/d, where steps were run
    q2, q4 = un.reversal_rate(f, 1), un.reversal_rate(f, 3)
    assert 0 < q2 < 200 < q4
    steps = [t for t in text if t.startswith("a step at a rate below")]
    assert len(steps) == 1 and "Z2" in steps[0]
