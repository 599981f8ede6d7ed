"""Synthetic wells with known truth for the calibration check, written independently of blendq.

Nothing here imports blendq's well model, mixing or synthetic modules: the forward model is
written again from the published equations so that blendq's own code is what gets measured.

Forward model (base units m, m^3/d, d, mg/L):

* zone conductance, steady Thiem with skin: G_i = 2 pi T_i / (ln(R / r_w) + s_i)
  (Thiem 1906; skin after Hawkins 1956; Kruseman and de Ridder 1990, section 3.2);
* common wellbore head for linear zones, from sum_i G_i (h0_i - h_w) = Q:
  h_w = (sum_i G_i h0_i - Q) / sum_i G_i, zone inflow q_i = G_i (h0_i - h_w) (negative for a
  thief zone);
* pumping level h_pwl = h_w - C Q^2 (Jacob 1947);
* wellbore mixing: the zones (at their mid depths) and the pump intake are nodes of a line;
  the flow in each segment follows from the node inflows by continuity, each node receives
  the streams that flow into it (zone inflow, the segment above if it flows down, the segment
  below if it flows up) and its water is their flow-weighted mix (complete mixing, upwind);
  the intake's mix is the discharge. The node balances are solved as one linear system.

Each replicate draws noise from a seeded generator: lab results with a stated relative
uncertainty (written in the samples table), pumping levels, flow-log readings, and the zone
properties handed to blendq as priors (transmissivity off the truth by a log-normal factor,
zone static levels off the truth by a normal error, both with the spreads blendq documents for
its priors in docs/methods.md, so that the truth is a draw from the prior the program is told).

References
----------
Thiem, G. (1906) Hydrologische Methoden. Gebhardt, Leipzig.
Hawkins, M.F. (1956) A note on the skin effect. J. Petroleum Technology 8(12), 65-66.
Jacob, C.E. (1947) Drawdown test to determine effective radius of artesian well.
Trans. ASCE 112, 1047-1064.
Kruseman, G.P. and de Ridder, N.A. (1990) Analysis and Evaluation of Pumping Test Data,
2nd ed. ILRI Publication 47.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

#: spread of the transmissivity written for blendq around the truth (1 sd of ln T): the prior
#: spread docs/methods.md gives for property-based conductances (a factor of about 3)
PRIOR_LOG_T_SD = math.log(3.0)
#: spread of the zone static levels written for blendq around the truth [m] (docs/methods.md:
#: sd of a measured zone level)
PRIOR_LEVEL_SD = 0.3
#: mg/L per ug/L
UG = 1e-3


@dataclass(frozen=True)
class Zone:
    """One zone of a synthetic well (depths below the datum [m], T [m^2/d], chemistry [mg/L])."""

    name: str
    top: float
    bottom: float
    transmissivity: float
    skin: float
    static_level: float
    nitrate: float
    arsenic: float

    @property
    def mid(self) -> float:
        return 0.5 * (self.top + self.bottom)


@dataclass(frozen=True)
class Design:
    """Test design of a kind of well: steps, logs, depth samples and noise levels.

    Rates [m^3/d], depths [m], durations [min], noise as one standard deviation.
    """

    step_rates: tuple[float, ...]
    step_minutes: float = 120.0
    log_steps: tuple[int, ...] = ()          # indices of steps with a pumped flow log
    ambient_log: bool = False
    log_depths: tuple[float, ...] = ()
    depth_samples: tuple[tuple[int, float], ...] = ()  # (step index, depth)
    nitrate_rel_u: float = 0.04
    arsenic_rel_u: float = 0.06
    nitrate_dl: float = 0.05                 # mg/L as N
    arsenic_dl: float = 1.0 * UG             # mg/L
    level_sd: float = 0.03                   # m
    flowlog_rel: float = 0.05
    flowlog_abs: float = 2.7                 # m^3/d
    prior_noise: bool = True


@dataclass(frozen=True)
class Well:
    """The truth of one synthetic well and its test design."""

    kind: str
    description: str
    zones: tuple[Zone, ...]
    well_radius: float
    radius_of_influence: float
    well_loss: float                         # C [d^2/m^5]
    intake_depth: float
    submergence: float
    rate_min: float
    rate_max: float
    demand: float
    keep_above_screen: bool
    design: Design
    grid_max: float = 6000.0
    grid_points: int = 121
    margin: float = 0.8
    alpha: float = 0.05
    interval: float = 0.90
    limits: dict = field(default_factory=lambda: {"nitrate": 10.0, "arsenic": 10.0 * UG})

    # -- hydraulics -------------------------------------------------------------------------
    @property
    def conductance(self) -> np.ndarray:
        """Thiem conductance with skin of each zone [m^2/d]."""
        ln_r = math.log(self.radius_of_influence / self.well_radius)
        return np.array([2 * math.pi * z.transmissivity / (ln_r + z.skin) for z in self.zones])

    @property
    def static_head(self) -> np.ndarray:
        """Zone static heads [m], elevation relative to the datum (minus the depth)."""
        return -np.array([z.static_level for z in self.zones])

    def wellbore_head(self, rate) -> np.ndarray:
        g = self.conductance
        return (g @ self.static_head - np.asarray(rate, float)) / g.sum()

    def zone_flows(self, rate) -> np.ndarray:
        """Zone inflows q_i [m^3/d], shape (n_rates, n_zones); negative into the aquifer."""
        hw = np.atleast_1d(self.wellbore_head(rate))
        return self.conductance[None, :] * (self.static_head[None, :] - hw[:, None])

    def pumping_level(self, rate) -> np.ndarray:
        """Depth of the pumping level [m]: -(h_w - C Q^2)."""
        q = np.asarray(rate, float)
        return -(self.wellbore_head(q) - self.well_loss * q**2)

    # -- wellbore mixing --------------------------------------------------------------------
    def _nodes(self):
        """Node depths and codes (zone index, or -1 for the intake), top to bottom."""
        items = [(z.mid, i) for i, z in enumerate(self.zones)] + [(self.intake_depth, -1)]
        items.sort()
        return np.array([d for d, _ in items]), [c for _, c in items]

    def _balance(self, rate: float):
        """Segment upward flows and node compositions at one rate.

        Returns
        -------
        up : ndarray (n_nodes - 1,)
            Upward flow in the segment between node k and node k + 1 [m^3/d].
        comp : ndarray (n_nodes, n_zones)
            Fraction of each zone's water in the water of each node (rows of nodes without
            water are zero).
        """
        q = self.zone_flows([rate])[0]
        depth, codes = self._nodes()
        n_nodes, n = len(codes), len(self.zones)
        inflow = np.array([q[c] if c >= 0 else -rate for c in codes])
        # upward flow above node k = net inflow of all nodes below it
        up = np.array([inflow[k + 1:].sum() for k in range(n_nodes - 1)])
        m = np.zeros((n_nodes, n_nodes))
        b = np.zeros((n_nodes, n))
        for k, c in enumerate(codes):
            total = 0.0
            if c >= 0 and q[c] > 0:
                total += q[c]
                b[k, c] = q[c]
            if k < n_nodes - 1 and up[k] > 0:      # from below, flowing up into node k
                total += up[k]
                m[k, k + 1] -= up[k]
            if k > 0 and up[k - 1] < 0:            # from above, flowing down into node k
                total += -up[k - 1]
                m[k, k - 1] -= -up[k - 1]
            m[k, k] += total if total > 0 else 1.0
        comp = np.linalg.solve(m, b)
        return up, comp

    def discharge_weights(self, rates) -> np.ndarray:
        """Share of each zone's water in the discharge, (n_rates, n_zones); NaN at zero rate."""
        _, codes = self._nodes()
        k = codes.index(-1)
        out = np.full((len(np.atleast_1d(rates)), len(self.zones)), np.nan)
        for r, rate in enumerate(np.atleast_1d(rates)):
            if rate > 0:
                out[r] = self._balance(float(rate))[1][k]
        return out

    def wellbore_weights(self, rate: float, depth: float) -> np.ndarray:
        """Zone shares of the water flowing past ``depth`` (between two nodes) at ``rate``."""
        up, comp = self._balance(rate)
        nd, _ = self._nodes()
        k = int(np.searchsorted(nd, depth)) - 1   # segment between node k and k + 1
        if k < 0 or k >= len(up) or up[k] == 0:
            raise ValueError(f"no flow past depth {depth} m at rate {rate} m3/d")
        return comp[k + 1] if up[k] > 0 else comp[k]

    def upward_flow(self, rate: float, depth: float) -> float:
        """Logged upward flow in the well at ``depth`` [m^3/d] (0 above and below all nodes)."""
        up, _ = self._balance(rate)
        nd, _ = self._nodes()
        k = int(np.searchsorted(nd, depth)) - 1
        return float(up[k]) if 0 <= k < len(up) else 0.0

    def zone_values(self, analyte: str) -> np.ndarray:
        return np.array([getattr(z, analyte) for z in self.zones])

    def discharge(self, rates) -> dict[str, np.ndarray]:
        """True discharge concentration per analyte at each rate [mg/L] (NaN at zero rate)."""
        w = self.discharge_weights(rates)
        return {a: w @ self.zone_values(a) for a in self.limits}

    # -- the true operating window -----------------------------------------------------------
    @property
    def rates(self) -> np.ndarray:
        return np.linspace(0.0, self.grid_max, self.grid_points)

    def statistic_log_sd(self, analyte: str) -> float:
        """sd of ln(statistic / true mean) of the statistic the US rule judges, for water with
        no temporal variability (the synthetic truth has none) and the lab's relative error.

        Nitrate: a sample and its confirmation sample, compliance on their average (40 CFR
        141.23): two independent lab factors of CV u, whose average has CV u / sqrt(2).
        Arsenic: the annual mean of four quarterly samples (40 CFR 141.23(i)): CV u / 2.
        Each average is matched by a lognormal of the same mean and variance (Fenton 1960).
        """
        d = self.design
        cv = d.nitrate_rel_u / math.sqrt(2.0) if analyte == "nitrate" else d.arsenic_rel_u / 2.0
        return math.sqrt(math.log1p(cv**2))

    def true_exceedance(self, analyte: str, mean, threshold: float) -> np.ndarray:
        """Probability that the judged statistic exceeds ``threshold``, given the true mean
        discharge concentration (scipy.stats.lognorm with mean ``mean``)."""
        from scipy.stats import lognorm

        s = self.statistic_log_sd(analyte)
        mean = np.asarray(mean, float)
        with np.errstate(divide="ignore", invalid="ignore"):
            p = lognorm.sf(threshold, s, scale=mean * math.exp(-0.5 * s * s))
        return np.where(np.isfinite(mean), np.where(mean > 0, p, 0.0), 1.0)

    def true_ok(self, rates=None) -> np.ndarray:
        """Rates where the statistic each rule judges exceeds margin x limit with probability
        at most alpha, and the pumping level meets the
        hydraulic constraints blendq applies (intake + submergence, top of screen if asked,
        the pump's range)."""
        rates = self.rates if rates is None else np.asarray(rates, float)
        conc = self.discharge(rates)
        ok = rates > 0
        for a, lim in self.limits.items():
            p = self.true_exceedance(a, np.nan_to_num(conc[a], nan=np.inf), self.margin * lim)
            ok &= p <= self.alpha
        level = self.pumping_level(rates)
        ok &= level <= self.intake_depth - self.submergence
        if self.keep_above_screen:
            ok &= level <= min(z.top for z in self.zones)
        ok &= (rates >= self.rate_min) & (rates <= self.rate_max)
        return ok


# -- kinds of well ----------------------------------------------------------------------------

def _zones(thief: bool = False, deep_nitrate: float = 0.4) -> tuple[Zone, ...]:
    return (
        Zone("Z1 upper sand", 40.0, 52.0, 250.0, 0.0, 20.0, 13.0, 2.0 * UG),
        Zone("Z2 silty sand", 60.0, 68.0, 80.0, 0.0, 23.0 if thief else 20.4, 10.0, 4.0 * UG),
        Zone("Z3 gravel", 76.0, 86.0, 300.0, 6.0, 21.0, 2.0, 8.0 * UG),
        Zone("Z4 deep sand", 95.0, 105.0, 150.0, 0.0, 21.5, deep_nitrate, 13.0 * UG),
    )


STEPS = (500.0, 1000.0, 1800.0, 2600.0, 3400.0)
LOG_DEPTHS = (38.0, 56.0, 72.0, 90.0, 110.0)


def well_of(kind: str) -> Well:
    """The synthetic well of one kind.

    Kinds
    -----
    ``logs``: four zones, intake above them, ambient and pumped flow logs, levels.
    ``priors``: the same well without flow logs: zone shares rest on the zone properties
    (transmissivity and static level, written off the truth by a draw from their prior spread)
    and the six pumping levels (five steps and the static level).
    ``thief``: the second zone has a low static level and takes water at low rates; the intake
    sits between the second and third zones; ambient and pumped logs.
    ``depth``: depth samples while pumping (below the third zone, where nitrate is a
    non-detect, below the second and below the first zone), an ambient flow log only.

    With the intake above every zone and all zones flowing in, the discharge weights are
    affine in 1/Q (a_i = G_i / sum G + G_i (h0_i - h_mean) / Q), so discharge samples alone
    give rank 2 for four zones: only the depth samples (and the thief zone's regime change)
    resolve single zones.
    """
    base = dict(well_radius=0.15, radius_of_influence=300.0, well_loss=8e-8, intake_depth=33.0,
                submergence=3.0, rate_min=300.0, rate_max=5500.0, demand=2500.0,
                keep_above_screen=False)
    if kind == "logs":
        return Well(kind, "four zones, ambient + pumped flow logs", _zones(), **base,
                    design=Design(STEPS, log_steps=(3,), ambient_log=True, log_depths=LOG_DEPTHS))
    if kind == "priors":
        return Well(kind, "four zones, no flow log (priors + levels)", _zones(), **base,
                    design=Design(STEPS))
    if kind == "thief":
        b = dict(base, intake_depth=71.0)
        return Well(kind, "thief zone at low rates, intake between zones", _zones(thief=True),
                    **b, design=Design(STEPS, log_steps=(3,), ambient_log=True,
                                       log_depths=(38.0, 56.0, 70.0, 73.0, 90.0, 110.0)))
    if kind == "depth":
        return Well(kind, "non-detect and depth samples, ambient log only",
                    _zones(deep_nitrate=0.02), **base,
                    design=Design(STEPS, ambient_log=True, log_depths=LOG_DEPTHS,
                                  depth_samples=((2, 90.0), (2, 72.0), (2, 56.0))))
    raise ValueError(f"unknown kind {kind!r}")


KINDS = ("logs", "priors", "thief", "depth")


# -- one noisy replicate written as a blendq project folder -------------------------------------

def _sig(x: float, digits: int = 4) -> str:
    return f"{x:.{digits}g}"


def write_replicate(well: Well, folder: Path, seed: int) -> Path:
    """Write one noisy replicate of ``well`` as a blendq project folder; returns the folder.

    Every random number comes from ``numpy.random.default_rng(seed)``.
    """
    rng = np.random.default_rng(seed)
    d = well.design
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    n = len(well.zones)
    # priors handed to blendq: the truth off by a draw from the documented prior spread
    t_fac = np.exp(PRIOR_LOG_T_SD * rng.standard_normal(n)) if d.prior_noise else np.ones(n)
    lvl_err = PRIOR_LEVEL_SD * rng.standard_normal(n) if d.prior_noise else np.zeros(n)
    static_well = float(well.pumping_level(0.0)) + d.level_sd * rng.standard_normal()

    zones_toml = []
    for i, z in enumerate(well.zones):
        zones_toml.append(
            f'[[zones]]\nname = "{z.name}"\ntop = "{z.top} m"\nbottom = "{z.bottom} m"\n'
            f'static_level = "{_sig(z.static_level + lvl_err[i], 6)} m"\n'
            f'transmissivity = "{_sig(z.transmissivity * t_fac[i], 5)} m2/d"\n'
            f"skin = {z.skin}\n")
    tables = 'steps = "steps.csv"\nsamples = "samples.csv"\n'
    if d.ambient_log or d.log_steps:
        tables += 'flowlogs = "flowlogs.csv"\n'
    toml = f"""# Synthetic well for the calibration check (invented; kind "{well.kind}", seed {seed}).
[project]
name = "Calibration well {well.kind} {seed}"
display_units = "SI"

[well]
name = "CAL-{well.kind}"
well_radius = "{well.well_radius} m"
pump_intake_depth = "{well.intake_depth} m"
submergence = "{well.submergence} m"
rate_min = "{well.rate_min} m3/d"
rate_max = "{well.rate_max} m3/d"
demand = "{well.demand} m3/d"
well_loss = "{well.well_loss!r} d2/m5"
keep_above_screen = {str(well.keep_above_screen).lower()}
radius_of_influence = "{well.radius_of_influence} m"
static_level = "{_sig(static_well, 6)} m"

{chr(10).join(zones_toml)}
[tables]
{tables}
[settings]
limit_sets = ["US-EPA"]
temporal_cv = 0.0  # the synthetic water varies only by the lab's error
margin = {well.margin}
exceedance_probability = {well.alpha}
interval = {well.interval}
rate_grid_points = {well.grid_points}
rate_grid_max = "{well.grid_max} m3/d"
conductance_model = "steady"
flowlog_relative_error = {d.flowlog_rel}
flowlog_absolute_error = "{d.flowlog_abs} m3/d"
level_error = "{d.level_sd} m"
"""
    (folder / "project.toml").write_text(toml, encoding="utf-8")

    rates = np.array(d.step_rates)
    levels = well.pumping_level(rates) + d.level_sd * rng.standard_normal(len(rates))
    lines = ["step,rate [m3/d],start,duration [min],pumping_level [m],recovered_before"]
    t0 = np.datetime64("2026-06-01T07:00")
    for k, (q, lv) in enumerate(zip(rates, levels, strict=True)):
        start = t0 + np.timedelta64(int(k * d.step_minutes), "m")
        stamp = str(start).replace("T", " ")
        lines.append(f"S{k + 1},{q:g},{stamp},{d.step_minutes:g},{lv:.3f},"
                     f"{'yes' if k == 0 else 'no'}")
    (folder / "steps.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")

    rel_u = {"nitrate": d.nitrate_rel_u, "arsenic": d.arsenic_rel_u}
    dl = {"nitrate": d.nitrate_dl, "arsenic": d.arsenic_dl}
    out = ["sample_id,step,analyte,value,unit,basis,detection_limit,uncertainty,depth [m]"]

    def sample(sid, step, weights, depth):
        for a in ("nitrate", "arsenic"):
            true = float(weights @ well.zone_values(a))
            value = true * (1.0 + rel_u[a] * rng.standard_normal())
            scale, unit = (1.0, "mg/L") if a == "nitrate" else (1e3, "ug/L")
            basis = "as N" if a == "nitrate" else ""
            if value < dl[a]:
                cell = f"<{dl[a] * scale:g}"
                unc = ""
            else:
                cell = _sig(value * scale, 4)
                unc = f"{100 * rel_u[a]:g}%"
            out.append(f"{sid},{step},{a},{cell},{unit},{basis},{dl[a] * scale:g},{unc},"
                       f"{'' if depth is None else depth}")

    w = well.discharge_weights(rates)
    for k in range(len(rates)):
        sample(f"CAL-{k + 1}", f"S{k + 1}", w[k], None)
    for j, (k, depth) in enumerate(d.depth_samples):
        sample(f"CAL-{k + 1}Z{j + 1}", f"S{k + 1}", well.wellbore_weights(rates[k], depth), depth)
    (folder / "samples.csv").write_text("\n".join(out) + "\n", encoding="utf-8")

    if d.ambient_log or d.log_steps:
        logs = ["log,step,rate [m3/d],depth [m],upward_flow [m3/d]"]
        runs = ([("ambient", "", 0.0)] if d.ambient_log else []) + \
            [(f"pumped-S{k + 1}", f"S{k + 1}", rates[k]) for k in d.log_steps]
        for name, step, q in runs:
            for depth in d.log_depths:
                f = well.upward_flow(float(q), depth)
                sd = math.hypot(d.flowlog_rel * abs(f), d.flowlog_abs)
                f_obs = f + sd * rng.standard_normal()
                rate_cell = "" if step else f"{q:g}"
                logs.append(f"{name},{step},{rate_cell},{depth:g},{f_obs:.2f}")
        (folder / "flowlogs.csv").write_text("\n".join(logs) + "\n", encoding="utf-8")
    return folder


def without_prior_noise(well: Well) -> Well:
    """The same well with its zone properties written exactly (for checks of the generator)."""
    return replace(well, design=replace(well.design, prior_noise=False))
