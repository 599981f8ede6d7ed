"""Calibration harness: fit noisy replicates of synthetic wells and score blendq against the truth.

For each replicate of a kind of well (:mod:`truth`), the harness writes a blendq project
folder, loads it with ``blendq.inputs.loader.load_project`` and runs
``blendq.decide.analysis.analyse``; it then measures

(a) coverage: whether each 90 % zone interval of a zone the diagnostics call *resolved* holds
    the true zone value, and whether the 90 % discharge band at every rate of the sweep grid
    (rates > 0) holds the true discharge concentration; also the central 50 % band (its
    coverage should be near 50 %: a band far too wide shows there as well as at 90 %);
(b) stick-out: the reported window sticks out of the true window when a rate it calls
    compliant lies more than ``tolerance`` grid steps away from every truly compliant rate
    (default one step); a non-empty window against an empty true window always sticks out;
(c) width: the number of grid rates in the reported window over the number in the true window.

Only the public results of an analysis are read (``Analysis.zones``, ``.prediction``,
``.window``, ``.project``, ``.fit``), so the harness keeps working when the methods behind them
change. A fit that raises is counted and listed, never dropped silently.
"""

from __future__ import annotations

import tempfile
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import stats
from truth import KINDS, Well, well_of, write_replicate


@dataclass
class Estimate:
    """What the harness scores, taken from an analysis (or built by hand for a self-test).

    Attributes
    ----------
    zones : list of (zone, analyte, verdict, lower, upper)
        Zone intervals [mg/L]; lower/upper NaN where not shown.
    rates : ndarray (n_rates,) [m^3/d]
    bands : dict analyte -> ndarray (4, n_rates)
        Quantiles 5 %, 25 %, 75 %, 95 % of the discharge concentration [mg/L].
    window_ok : ndarray of bool (n_rates,)
    level_band : ndarray (2, n_rates) or None
        5 % and 95 % quantiles of the pumping-level depth [m].
    reasons : str
        What ends the reported window (or why it is empty), for the notes.
    """

    zones: list
    rates: np.ndarray
    bands: dict
    window_ok: np.ndarray
    level_band: np.ndarray | None = None
    reasons: str = ""

    @classmethod
    def from_analysis(cls, a) -> Estimate:
        interval = a.project.settings.interval
        lo, hi = (1 - interval) / 2, 1 - (1 - interval) / 2
        pred = a.prediction
        q = np.quantile(pred.concentration, [lo, 0.25, 0.75, hi], axis=0)  # (4, rates, analytes)
        bands = {an: q[:, :, j] for j, an in enumerate(pred.analytes)}
        zones = [(r.zone, r.analyte, r.verdict, float(r.lower), float(r.upper))
                 for r in a.zones.itertuples()]
        level = np.quantile(pred.pumping_level, [lo, hi], axis=0)
        w = a.window
        reasons = w.reason_empty if w.empty else " | ".join(
            f"{low:g}-{high:g} m3/d: low end {lr}; high end {hr}"
            for low, high, lr, hr in w.intervals)
        return cls(zones, np.asarray(pred.rates, float), bands, np.asarray(w.ok, bool), level,
                   reasons)


@dataclass
class Score:
    """Scores of one replicate."""

    kind: str
    replicate: int
    seconds: float
    converged: bool
    zone_checks: list = field(default_factory=list)     # (zone, analyte, covered)
    band90: dict = field(default_factory=dict)          # analyte -> bool array over rates > 0
    band50: dict = field(default_factory=dict)
    level90: np.ndarray | None = None                   # bool array over rates > 0
    stick_out: bool = False
    stick_out_rates: tuple = ()
    width_fraction: float = np.nan
    reported_points: int = 0
    true_points: int = 0
    reasons: str = ""


def score(well: Well, est: Estimate, kind: str = "", replicate: int = 0, seconds: float = 0.0,
          converged: bool = True, tolerance: int = 1) -> Score:
    """Score one estimate against the truth of ``well`` (see the module docstring)."""
    rates = est.rates
    truth_ok = well.true_ok(rates)
    truth_c = well.discharge(rates)
    out = Score(kind, replicate, seconds, converged)
    for zone, analyte, verdict, lower, upper in est.zones:
        if verdict != "resolved":
            continue
        true = well.zone_values(analyte)[[z.name for z in well.zones].index(zone)]
        out.zone_checks.append((zone, analyte, bool(lower <= true <= upper)))
    pos = rates > 0
    for analyte, q in est.bands.items():
        if analyte not in truth_c:
            continue
        t = truth_c[analyte][pos]
        out.band90[analyte] = (q[0, pos] <= t) & (t <= q[3, pos])
        out.band50[analyte] = (q[1, pos] <= t) & (t <= q[2, pos])
    if est.level_band is not None:
        t = well.pumping_level(rates[pos])
        out.level90 = (est.level_band[0, pos] <= t) & (t <= est.level_band[1, pos])
    out.reasons = est.reasons
    rep = est.window_ok & pos
    idx_true = np.flatnonzero(truth_ok)
    idx_rep = np.flatnonzero(rep)
    if len(idx_rep):
        if len(idx_true):
            dist = np.min(np.abs(idx_rep[:, None] - idx_true[None, :]), axis=1)
        else:
            dist = np.full(len(idx_rep), np.inf)
        bad = idx_rep[dist > tolerance]
        out.stick_out = bool(len(bad))
        out.stick_out_rates = tuple(float(r) for r in rates[bad])
    out.reported_points, out.true_points = len(idx_rep), len(idx_true)
    out.width_fraction = len(idx_rep) / len(idx_true) if len(idx_true) else np.nan
    return out


@dataclass
class Failure:
    kind: str
    replicate: int
    seconds: float
    error: str


def run_replicate(well: Well, replicate: int, draws: int, base_seed: int = 20261202,
                  folder: Path | None = None):
    """Write, load and analyse one replicate; returns a :class:`Score` or a :class:`Failure`."""
    from blendq.decide.analysis import analyse
    from blendq.inputs.loader import load_project

    seed = base_seed + 1000 * KINDS.index(well.kind) + replicate
    with tempfile.TemporaryDirectory() as tmp:
        path = write_replicate(well, Path(folder or tmp) / f"{well.kind}-{replicate}", seed)
        t0 = time.perf_counter()
        try:
            a = analyse(load_project(path), draws=draws, seed=seed)
        except Exception as exc:  # a failed fit is counted and listed, not hidden
            last = traceback.format_exception_only(type(exc), exc)[-1].strip()
            return Failure(well.kind, replicate, time.perf_counter() - t0, last)
        seconds = time.perf_counter() - t0
    return score(well, Estimate.from_analysis(a), well.kind, replicate, seconds,
                 bool(a.fit.success))


def run(kinds=KINDS, replicates: int = 20, draws: int = 1000, base_seed: int = 20261202,
        progress=None) -> tuple[list[Score], list[Failure]]:
    """Run ``replicates`` replicates of each kind; returns scores and failures."""
    scores, failures = [], []
    for kind in kinds:
        well = well_of(kind)
        for r in range(replicates):
            res = run_replicate(well, r, draws, base_seed)
            (failures if isinstance(res, Failure) else scores).append(res)
            if progress is not None:
                progress(kind, r, res)
    return scores, failures


# -- summaries ------------------------------------------------------------------------------------

def wilson(k: float, n: float, conf: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion k / n (Wilson 1927)."""
    if n <= 0:
        return (np.nan, np.nan)
    z = stats.norm.ppf(0.5 + conf / 2)
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return (max(0.0, centre - half), min(1.0, centre + half))


@dataclass
class Summary:
    """Figures of a set of replicates.

    Coverage of the discharge bands pools every (replicate, analyte, rate) check; the checks at
    neighbouring rates of one replicate are strongly correlated, so its confidence interval
    counts one trial per (replicate, analyte) (the mean of that cluster's fraction covered):
    a conservative effective sample size.
    """

    replicates: int
    failures: int
    zone_n: int
    zone_coverage: float
    zone_ci: tuple
    band_clusters: int
    band_coverage: float
    band_ci: tuple
    band50_coverage: float
    band50_ci: tuple
    level_coverage: float
    level_ci: tuple
    stick_out: int
    stick_out_rate: float
    stick_out_ci: tuple
    width_median: float
    width_min: float
    width_under_70: int
    seconds_median: float
    seconds_max: float
    not_converged: int


def summarise(scores: list[Score], failures: list[Failure] = ()) -> Summary:
    zc = [c for s in scores for (_, _, c) in s.zone_checks]
    cl90 = [float(v.mean()) for s in scores for v in s.band90.values() if v.size]
    cl50 = [float(v.mean()) for s in scores for v in s.band50.values() if v.size]
    n_cl = len(cl90)
    band = float(np.mean(cl90)) if n_cl else np.nan
    band50 = float(np.mean(cl50)) if n_cl else np.nan
    lv = [float(s.level90.mean()) for s in scores if s.level90 is not None and s.level90.size]
    level = float(np.mean(lv)) if lv else np.nan
    stick = sum(s.stick_out for s in scores)
    widths = np.array([s.width_fraction for s in scores], float)
    wf = widths[np.isfinite(widths)]
    secs = [s.seconds for s in scores] + [f.seconds for f in failures]
    n = len(scores)
    return Summary(
        replicates=n + len(failures), failures=len(failures),
        zone_n=len(zc), zone_coverage=float(np.mean(zc)) if zc else np.nan,
        zone_ci=wilson(sum(zc), len(zc)),
        band_clusters=n_cl, band_coverage=band, band_ci=wilson(band * n_cl, n_cl),
        band50_coverage=band50, band50_ci=wilson(band50 * n_cl, n_cl),
        level_coverage=level, level_ci=wilson(level * len(lv), len(lv)),
        stick_out=stick, stick_out_rate=stick / n if n else np.nan, stick_out_ci=wilson(stick, n),
        width_median=float(np.median(wf)) if len(wf) else np.nan,
        width_min=float(wf.min()) if len(wf) else np.nan,
        width_under_70=int((wf < 0.7).sum()),
        seconds_median=float(np.median(secs)) if secs else np.nan,
        seconds_max=float(np.max(secs)) if secs else np.nan,
        not_converged=sum(not s.converged for s in scores))


def coverage_bounds(n: int, p: float = 0.90, tail: float = 0.005) -> tuple[float, float]:
    """Range of the fraction k / n that a binomial(n, p) count leaves with probability
    ``tail`` on each side (a calibrated method lands inside with probability >= 1 - 2 tail)."""
    lo = stats.binom.ppf(tail, n, p) / n
    hi = stats.binom.isf(tail, n, p) / n
    return float(lo), float(hi)


def max_count(n: int, p: float = 0.05, tail: float = 0.01) -> int:
    """Largest count a binomial(n, p) exceeds with probability below ``tail``."""
    return int(stats.binom.isf(tail, n, p))
