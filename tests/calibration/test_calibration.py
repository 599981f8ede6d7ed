"""Calibration check: blendq against synthetic wells with known truth (short version for CI).

The generator (:mod:`truth`) is checked against published relations; the harness
(:mod:`harness`) is checked with oracle estimates whose calibration is known; then a few noisy
replicates of every kind of well are fitted and the figures compared with bounds that a
calibrated method meets with probability of at least 99 % at this sample size (binomial
quantiles). The full measurement is benchmarks/bench_calibration.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from harness import (
    Estimate,
    coverage_bounds,
    max_count,
    run,
    score,
    summarise,
    wilson,
)
from truth import KINDS, LOG_DEPTHS, Well, well_of, without_prior_noise, write_replicate

# -- the generator ------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_truth_heads_and_flows_balance(kind):
    """sum q_i = Q at the closed-form wellbore head; Thiem: q = G dh with G = 2 pi T / ln(R/r_w)
    for a zone without skin (Thiem 1906; Kruseman and de Ridder 1990, eq. 3.5)."""
    w = well_of(kind)
    rates = np.array([0.0, 250.0, 1800.0, 5000.0])
    q = w.zone_flows(rates)
    np.testing.assert_allclose(q.sum(1), rates, rtol=0, atol=1e-9)
    z = w.zones[0]
    g_thiem = 2 * math.pi * z.transmissivity / math.log(w.radius_of_influence / w.well_radius)
    np.testing.assert_allclose(w.conductance[0], g_thiem, rtol=1e-12)
    np.testing.assert_allclose(w.pumping_level(rates),
                               -w.wellbore_head(rates) + w.well_loss * rates**2, rtol=1e-12)


@pytest.mark.parametrize("kind", KINDS)
def test_truth_mixing_invariants(kind):
    """Weights sum to one, blends lie between the zone extremes, a thief zone has weight zero
    (BRIEF section 3 invariants)."""
    w = well_of(kind)
    rates = w.rates[1:]
    a = w.discharge_weights(rates)
    np.testing.assert_allclose(a.sum(1), 1.0, atol=1e-12)
    assert np.all(a >= -1e-12)
    for analyte in w.limits:
        c = w.discharge(rates)[analyte]
        zv = w.zone_values(analyte)
        assert np.all(c >= zv.min() - 1e-12) and np.all(c <= zv.max() + 1e-12)
    q = w.zone_flows(rates)
    np.testing.assert_array_equal(a[q < 0], 0.0)
    if kind == "thief":
        assert (q[:, 1] < 0).any(), "the thief well must have a thief zone at low rates"


def test_truth_depth_samples_mass_balance():
    """A zone value from flows and concentrations just below and above it (Izbicki and others,
    USGS; BRIEF section 3): c = (F_above C_above - F_below C_below) / (F_above - F_below)."""
    w = well_of("depth")
    rate = 1800.0
    for i, (below, above) in enumerate([(72.0, 56.0), (90.0, 72.0)], start=1):
        fb, fa = w.upward_flow(rate, below), w.upward_flow(rate, above)
        for analyte in w.limits:
            zv = w.zone_values(analyte)
            cb = w.wellbore_weights(rate, below) @ zv
            ca = w.wellbore_weights(rate, above) @ zv
            np.testing.assert_allclose((fa * ca - fb * cb) / (fa - fb), zv[i], rtol=1e-10)
        np.testing.assert_allclose(fa - fb, w.zone_flows([rate])[0][i], rtol=1e-10)


def test_replicate_round_trip_through_the_loader(tmp_path):
    """A replicate written without prior noise loads back with the truth's rates, levels and
    samples (to the noise and rounding written)."""
    from blendq.inputs.loader import load_project

    w = without_prior_noise(well_of("depth"))
    p = load_project(write_replicate(w, tmp_path / "rep", seed=5))
    d = w.design
    np.testing.assert_allclose(p.steps["rate"], d.step_rates, rtol=1e-12)
    lv = p.steps["pumping_level"].to_numpy(float) - w.pumping_level(np.array(d.step_rates))
    assert np.all(np.abs(lv) < 5 * d.level_sd + 1e-3)
    np.testing.assert_allclose([z.transmissivity for z in p.zones],
                               [z.transmissivity for z in w.zones], rtol=1e-4)
    s = p.samples
    disch = s[s["depth"].isna() & (s["analyte"] == "nitrate")]
    truth = w.discharge(np.array(d.step_rates))["nitrate"]
    rel = disch["value"].to_numpy(float) / truth - 1
    assert np.all(np.abs(rel) < 5 * d.nitrate_rel_u)
    nd = s[s["nondetect"].astype(bool)]
    assert len(nd) >= 1 and (nd["analyte"] == "nitrate").all()
    np.testing.assert_allclose(s.loc[~s["nondetect"].astype(bool) & (s["analyte"] == "arsenic"),
                                     "uncertainty"].to_numpy(float) /
                               s.loc[~s["nondetect"].astype(bool) & (s["analyte"] == "arsenic"),
                                     "value"].to_numpy(float), d.arsenic_rel_u, rtol=1e-3)


# -- the harness, fed oracle estimates ---------------------------------------------------------


def _oracle(well: Well, rng, band_sd_factor: float = 1.0, window_shift: int = 0) -> Estimate:
    """An estimate whose error is known: the centre is the truth plus one normal error per
    analyte (sd 5 % of the truth), the bands are centre +- z x (factor x that sd), the zone
    intervals likewise; the window is the true one, its upper end moved by ``window_shift``
    grid steps."""
    rates = well.rates
    z90, z50 = 1.6448536269514722, 0.6744897501960817
    bands = {}
    truth = well.discharge(rates)
    for analyte, t in truth.items():
        sd = 0.05 * t
        centre = t + sd * rng.standard_normal()
        half = band_sd_factor * sd
        bands[analyte] = np.array([centre - z90 * half, centre - z50 * half,
                                   centre + z50 * half, centre + z90 * half])
    zones = []
    for analyte in well.limits:
        for z, v in zip(well.zones, well.zone_values(analyte), strict=True):
            sd = 0.05 * v
            c = v + sd * rng.standard_normal()
            zones.append((z.name, analyte, "resolved", c - z90 * band_sd_factor * sd,
                          c + z90 * band_sd_factor * sd))
        zones.append((well.zones[0].name, analyte, "not resolved", np.nan, np.nan))
    ok = well.true_ok(rates)
    if window_shift:
        idx = np.flatnonzero(ok)
        ok = ok.copy()
        top = idx.max()
        if window_shift > 0:
            ok[top + 1: top + 1 + window_shift] = True
        else:
            ok[top + window_shift + 1: top + 1] = False
    return Estimate(zones, rates, bands, ok)


def test_harness_scores_a_calibrated_oracle():
    """Calibrated bands: the harness reports about 90 % (and 50 %) coverage; the true window
    scores no stick-out and width 1."""
    rng = np.random.default_rng(11)
    well = well_of("logs")
    scores = [score(well, _oracle(well, rng), "logs", r) for r in range(300)]
    s = summarise(scores)
    lo, hi = coverage_bounds(s.band_clusters, 0.90)
    assert lo <= s.band_coverage <= hi
    lo50, hi50 = coverage_bounds(s.band_clusters, 0.50)
    assert lo50 <= s.band50_coverage <= hi50
    zlo, zhi = coverage_bounds(s.zone_n, 0.90)
    assert zlo <= s.zone_coverage <= zhi
    assert s.zone_n == 300 * 2 * len(well.zones)  # "not resolved" rows are not scored
    assert s.stick_out == 0
    np.testing.assert_allclose(s.width_median, 1.0, rtol=0, atol=0)


def test_harness_detects_bands_too_narrow_and_too_wide():
    rng = np.random.default_rng(12)
    well = well_of("thief")
    narrow = summarise([score(well, _oracle(well, rng, 0.4)) for _ in range(200)])
    wide = summarise([score(well, _oracle(well, rng, 4.0)) for _ in range(200)])
    lo, hi = coverage_bounds(narrow.band_clusters, 0.90)
    assert narrow.band_coverage < lo and narrow.zone_coverage < lo
    assert wide.band_coverage > hi and wide.band50_coverage > coverage_bounds(200, 0.5)[1]


def test_harness_stick_out_tolerance_and_width():
    rng = np.random.default_rng(13)
    well = well_of("logs")
    n_true = int(well.true_ok().sum())
    one = score(well, _oracle(well, rng, window_shift=1))
    two = score(well, _oracle(well, rng, window_shift=2))
    short = score(well, _oracle(well, rng, window_shift=-5))
    assert not one.stick_out  # within the stated tolerance of one grid step
    assert two.stick_out and two.stick_out_rates == (float(well.rates[np.flatnonzero(
        well.true_ok()).max() + 2]),)
    assert not short.stick_out
    np.testing.assert_allclose(short.width_fraction, (n_true - 5) / n_true, rtol=1e-12)
    np.testing.assert_allclose(two.width_fraction, (n_true + 2) / n_true, rtol=1e-12)


def test_wilson_interval_reference_values():
    """Wilson (1927) score interval against the worked examples of Newcombe (1998), Statistics
    in Medicine 17, 857-872 (score method, 95 %), and against its definition: the set of
    p with |k/n - p| <= z sqrt(p (1 - p) / n)."""
    from scipy import optimize, stats

    cases = {(81, 263): (0.2553, 0.3662), (15, 148): (0.0624, 0.1605),
             (0, 20): (0.0, 0.1611), (1, 29): (0.0061, 0.1718)}
    z = stats.norm.ppf(0.975)
    for (k, n), ref in cases.items():
        lo, hi = wilson(k, n)
        np.testing.assert_allclose([lo, hi], ref, rtol=0, atol=1e-4)

        def f(p, k=k, n=n):
            return abs(k / n - p) - z * math.sqrt(p * (1 - p) / n)

        np.testing.assert_allclose(optimize.brentq(f, k / n + 1e-12, 1.0), hi, rtol=0, atol=1e-10)
        if k:
            np.testing.assert_allclose(optimize.brentq(f, 0.0, k / n - 1e-12), lo, rtol=0, atol=1e-10)


# -- blendq on noisy replicates ----------------------------------------------------------------

#: replicates per kind in CI (the full figures come from benchmarks/bench_calibration.py)
CI_REPLICATES = 3


@pytest.fixture(scope="module")
def measured():
    scores, failures = run(KINDS, CI_REPLICATES)
    return scores, failures


@pytest.mark.slow
def test_every_replicate_fits(measured):
    scores, failures = measured
    assert not failures, [f"{f.kind} {f.replicate}: {f.error}" for f in failures]
    assert all(s.converged for s in scores)


@pytest.mark.slow
def test_discharge_bands_cover_at_least_what_a_calibrated_method_would(measured):
    """Pooled coverage of the 90 % discharge bands is not below the 0.5 % binomial quantile
    at one trial per (replicate, analyte) (a calibrated method fails this with p < 0.005)."""
    s = summarise(*measured)
    lo, _ = coverage_bounds(s.band_clusters, 0.90)
    assert s.band_coverage >= lo, (s.band_coverage, lo)


@pytest.mark.slow
def test_discharge_bands_are_not_far_too_wide(measured):
    """The central 50 % band covers the truth about half the time; bands far too wide cover
    it nearly always. Bound: the 99.5 % binomial quantile at one trial per (replicate, analyte)."""
    s = summarise(*measured)
    _, hi = coverage_bounds(s.band_clusters, 0.50)
    assert s.band50_coverage <= hi, (s.band50_coverage, hi)


@pytest.mark.slow
def test_resolved_zone_intervals_cover(measured):
    s = summarise(*measured)
    assert s.zone_n > 0
    lo, _ = coverage_bounds(s.zone_n, 0.90)
    assert s.zone_coverage >= lo, (s.zone_coverage, lo)


@pytest.mark.slow
def test_window_rarely_sticks_out(measured):
    """At alpha = 0.05 at most 5 % of windows may stick out; the count allowed is the one a
    binomial(n, 0.05) exceeds with probability below 1 %."""
    scores, _ = measured
    n_out = sum(s.stick_out for s in scores)
    assert n_out <= max_count(len(scores), 0.05, 0.01), n_out


@pytest.mark.slow
def test_prior_only_bands_are_not_far_too_wide(measured):
    """Where zone shares rest on priors, the 50 % band still covers about half the time."""
    scores, _ = measured
    s = summarise([x for x in scores if x.kind == "priors"])
    _, hi = coverage_bounds(s.band_clusters, 0.50)
    assert s.band50_coverage <= hi, (s.band50_coverage, hi)


@pytest.mark.slow
def test_pumping_level_bands_cover(measured):
    """The 90 % band of the predicted pumping level holds the true level; bound: the 0.5 %
    binomial quantile at one trial per replicate."""
    s = summarise(*measured)
    lo, _ = coverage_bounds(s.replicates - s.failures, 0.90)
    assert s.level_coverage >= lo, (s.level_coverage, lo)


@pytest.mark.parametrize("kind", KINDS)
def test_blendq_forward_model_reproduces_the_truth(kind, tmp_path):
    """blendq's own forward model, given the true parameters, reproduces the independent
    generator (discharge weights, pumping level, logged flows, depth composition): a
    disagreement here would make every calibration figure meaningless."""
    from blendq.inputs.loader import load_project
    from blendq.well import mixing
    from blendq.well.model import model_from_parameters

    w = without_prior_noise(well_of(kind))
    p = load_project(write_replicate(w, tmp_path / "rep", seed=1))
    m = model_from_parameters(p, w.conductance, w.static_head, w.well_loss)
    rates = w.rates[1:]
    np.testing.assert_allclose(m.weights(rates), w.discharge_weights(rates), rtol=0, atol=1e-9)
    np.testing.assert_allclose(m.pumping_level_depth(rates), w.pumping_level(rates),
                               rtol=1e-10, atol=1e-9)
    for q in (0.0, 500.0, 2600.0):
        flows = m.state(np.array([q])).zone_flow[0]
        depths = np.array(w.design.log_depths or LOG_DEPTHS)
        np.testing.assert_allclose(mixing.wellbore_flow(flows, m.geometry, depths),
                                   [w.upward_flow(q, z) for z in depths], rtol=1e-10, atol=1e-7)
    for _, depth in w.design.depth_samples:
        flows = m.state(np.array([1800.0])).zone_flow[0]
        comp = mixing.wellbore_composition(flows, m.geometry, [depth])[0]
        np.testing.assert_allclose(comp, w.wellbore_weights(1800.0, depth), rtol=0, atol=1e-9)


def test_estimate_reads_the_analysis_as_reported(tmp_path):
    """The harness scores the bands and window the analysis reports: its 90 % band equals the
    sweep table's lower and upper columns, its window the reported one."""
    from blendq.decide.analysis import analyse
    from blendq.inputs.loader import load_project

    w = well_of("logs")
    a = analyse(load_project(write_replicate(w, tmp_path / "rep", seed=3)), draws=200, seed=3)
    est = Estimate.from_analysis(a)
    t = a.sweep_table
    for analyte in ("nitrate", "arsenic"):
        np.testing.assert_allclose(est.bands[analyte][0], t[f"{analyte}_lower"], rtol=1e-12)
        np.testing.assert_allclose(est.bands[analyte][3], t[f"{analyte}_upper"], rtol=1e-12)
    np.testing.assert_array_equal(est.window_ok, a.window.ok)
    np.testing.assert_allclose(est.level_band[1], t["pumping_level_deep"], rtol=1e-12)
    shown = a.zones[a.zones["verdict"] == "resolved"]
    assert len([z for z in est.zones if z[2] == "resolved"]) == len(shown)


@pytest.mark.parametrize("n", [12, 40, 160])
def test_binomial_bounds_hold_their_tail_probabilities(n):
    from scipy import stats

    lo, hi = coverage_bounds(n, 0.9, 0.005)
    assert stats.binom.cdf(round(lo * n) - 1, n, 0.9) <= 0.005
    assert stats.binom.sf(round(hi * n), n, 0.9) <= 0.005
    k = max_count(n, 0.05, 0.01)
    assert stats.binom.sf(k, n, 0.05) <= 0.01 < stats.binom.sf(k - 1, n, 0.05)
