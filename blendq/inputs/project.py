"""In-memory description of a well, its zones, its step test and its samples.

Everything here is in the core's base units (see :mod:`blendq.units`): lengths and depths in m
(depths positive downward from the well's datum), rates in m^3/d, times in d, concentrations in
mg/L on each analyte's canonical basis. :mod:`blendq.inputs.loader` builds a :class:`Project` from the
user's files; tests and scripts may build one directly.

Tables are pandas DataFrames with the columns listed in :data:`TABLE_COLUMNS`; every table has a
``source_row`` column (1-based data row in the file it came from) so later stages can name the
row in a message.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from blendq.chemistry.limits import DEFAULT_TEMPORAL_CV, Limit

#: columns of each table (in base units), in order
TABLE_COLUMNS: dict[str, list[str]] = {
    # one row per step of the step-rate test; start/end as pandas Timestamps (NaT if unknown)
    # duration [d]; pumping_level [m depth below datum] at the end of the step (NaN if not read)
    # recovered_before: True when the well recovered to static before this step began
    "steps": ["step", "rate", "start", "end", "duration", "pumping_level", "recovered_before",
              "source_row"],
    # one row per lab result. value [mg/L canonical basis]; for a non-detect value is NaN and
    # detection_limit holds the limit. uncertainty is one standard deviation [mg/L], NaN if the
    # lab gave none. depth [m] is NaN for a discharge sample, a depth for a sample taken inside
    # the well. duplicate_of names the sample_id of the primary sample ("" if not a duplicate).
    "samples": ["sample_id", "step", "analyte", "value", "nondetect", "detection_limit",
                "uncertainty", "qualifier", "sampled_at", "analyzed_at", "duplicate_of", "depth",
                "preservation", "reported_value", "reported_unit", "reported_basis",
                "source_row"],
    # spinner or heat-pulse log: upward_flow [m^3/d] (positive up) at depth [m], for a log run
    # at pumping rate `rate` [m^3/d] (0 for ambient). `step` may name the step it was run in.
    "flowlogs": ["log", "step", "rate", "depth", "upward_flow", "source_row"],
    # water-level record of the test: time (Timestamp), level [m depth below datum]
    "levels": ["time", "level", "source_row"],
    # field readings logged while purging before a sample: temperature [degC], ph [-],
    # specific_conductance [uS/cm], dissolved_oxygen [mg/L], turbidity [FNU]
    "field": ["step", "time", "temperature", "ph", "specific_conductance", "dissolved_oxygen",
              "turbidity", "source_row"],
    # monitoring history (optional): value etc. as in samples; rate [m^3/d] at the sample's
    # time (from the pump log, else the table's rate column; NaN if neither); rate_from says
    # which ("pump log", "history table", ""); volume_since_start [m^3] pumped since the pump
    # last started (NaN without a pump log)
    "history": ["sampled_at", "sample_point", "analyte", "value", "nondetect",
                "detection_limit", "uncertainty", "qualifier", "rate", "rate_from",
                "volume_since_start", "source_row"],
    # pump log (optional): the rate [m^3/d] from each time on (0 while the pump is off)
    "pumplog": ["time", "rate", "source_row"],
}


def empty_table(name: str) -> pd.DataFrame:
    """An empty table with the columns of ``name``."""
    return pd.DataFrame({c: pd.Series(dtype=object) for c in TABLE_COLUMNS[name]})


@dataclass(frozen=True)
class Well:
    """The well and its pump.

    Attributes
    ----------
    name : str
    well_radius : float
        Effective well (screen) radius r_w [m].
    pump_intake_depth : float
        Depth of the pump intake during the step test below the datum [m]: the intake the flow
        logs and depth samples were taken against (the fit's geometry).
    operating_intake_depth : float or None
        Depth of the intake for operation [m] (the window and scenarios); None: the test's.
    submergence : float
        Required water depth above the intake [m].
    rate_min, rate_max : float
        The pump's usable rate range [m^3/d].
    demand : float or None
        Rate the system would like to pump [m^3/d].
    well_loss : float
        Jacob's well-loss coefficient C [d^2/m^5] for the loss above the zones (s = C Q^2);
        zero when unknown.
    keep_above_screen : bool
        Also keep the pumping level above the top of the uppermost zone.
    radius_of_influence : float or None
        R [m] for steady Thiem conductances.
    static_level : float or None
        Depth to water in the well before pumping [m] (the composite ambient level).
    datum : str
        What depths are measured from (e.g. "top of casing").
    location : str
        Free text.
    """

    name: str
    well_radius: float
    pump_intake_depth: float
    submergence: float = 0.0
    rate_min: float = 0.0
    rate_max: float = np.inf
    demand: float | None = None
    well_loss: float = 0.0
    keep_above_screen: bool = False
    radius_of_influence: float | None = None
    static_level: float | None = None
    datum: str = "top of casing"
    location: str = ""
    operating_intake_depth: float | None = None

    @property
    def operating_intake(self) -> float:
        """Depth of the intake for operation [m]: ``operating_intake_depth``, else the test's."""
        if self.operating_intake_depth is None:
            return self.pump_intake_depth
        return self.operating_intake_depth


@dataclass(frozen=True)
class Zone:
    """One screened zone (or open interval) of the well.

    Attributes
    ----------
    name : str
    top, bottom : float
        Depths below the datum [m], top < bottom.
    static_level : float or None
        Depth to static water of the zone [m]; None where unknown (a flow log may give it).
    transmissivity : float or None
        T [m^2/d].
    conductivity : float or None
        K_h [m/d]; T = K_h (bottom - top) when T is not given.
    storativity : float or None
        S [-], for transient (Cooper-Jacob) conductances.
    skin : float
        Skin factor s [-] (positive for a clogged interval).
    nonlinear_loss : float
        Nonlinear entrance loss coefficient C [d^P/m^(3P-1)] of the zone node (MNW2 form:
        a loss C q |q|^(P-1) between the formation and the well; [d^2/m^5] for P = 2).
    loss_exponent : float
        Exponent P of the nonlinear entrance loss [-], from 1 to 3.5 (the range MNW2 takes).
    linear_loss : float
        Linear entrance loss coefficient B [d/m^2] of the zone node (loss B q).
    keep_level_above : bool
        Keep the pumping level above this zone's top: a hard limit on the operating window.
    conductance : float or None
        G [m^2/d], when known directly (overrides T, S, skin).
    sublayers : tuple of (top [m], bottom [m], conductivity [m/d])
        Optional sub-layers inside the open interval: how the zone's inflow is spread along it
        (in proportion to conductivity times thickness); empty: uniform over the interval.
    """

    name: str
    top: float
    bottom: float
    static_level: float | None = None
    transmissivity: float | None = None
    conductivity: float | None = None
    storativity: float | None = None
    skin: float = 0.0
    nonlinear_loss: float = 0.0
    conductance: float | None = None
    sublayers: tuple = ()
    loss_exponent: float = 2.0
    linear_loss: float = 0.0
    keep_level_above: bool = False

    @property
    def thickness(self) -> float:
        """Open thickness b [m]."""
        return self.bottom - self.top

    @property
    def zone_transmissivity(self) -> float | None:
        """T [m^2/d], from T or from K b."""
        if self.transmissivity is not None:
            return self.transmissivity
        if self.conductivity is not None:
            return self.conductivity * self.thickness
        return None

    @property
    def static_head(self) -> float | None:
        """Static head [m] as elevation relative to the datum (= -static_level)."""
        return None if self.static_level is None else -self.static_level


@dataclass(frozen=True)
class Settings:
    """Decision and computation settings.

    Attributes
    ----------
    limit_sets : tuple of str
        Named limit sets that apply ("US-EPA", "WHO", "EU").
    margin : float
        Operating margin as a fraction of each limit (0.8 = stay under 80 % of the limit).
        A utility's policy, not a rule.
    exceedance_probability : float
        alpha: largest acceptable posterior probability that a rate is not compliant, the
        confidence of the window being 1 - alpha.
    sample_exceedance_probability : float
        beta: a rate is compliant when the statistic a limit is judged on (a compliance sample
        with its confirmation, or an annual mean) exceeds margin x limit with probability at
        most beta [-]. A utility's policy, like the margin (common practice: 0.05).
    interval : float
        Central probability of reported intervals (0.90).
    horizon : float
        Operating horizon t [d] for transient conductances.
    rate_grid_points : int
    rate_grid_max : float or None
        Largest rate of the sweep [m^3/d]; default 1.2 x the largest of pump range and steps.
    draws : int
        Posterior draws (randomised maximum likelihood).
    seed : int
    display_units : str
        "US", "SI" or "SI-L/s" (SI with rates in litres per second).
    conductance_model : str
        "auto", "steady", "transient", "given" or "flowlog" (the conductances from the flow
        logs, with no prior from the zone properties).
    flowlog_relative_error : float
        Relative error of a logged flow [-] (1 sd).
    flowlog_absolute_error : float
        Absolute floor of a logged flow's error [m^3/d] (spinner stall; 2.7 m^3/d = 0.5 gpm).
    level_error : float
        Error of a measured water level [m] (1 sd).
    default_relative_uncertainty : float
        Lab uncertainty (1 sd, relative) used where a result has none.
    detection_limit_sigma_fraction : float
        Floor of the uncertainty of a result without a stated one, as a fraction of its
        detection limit [-] (common practice: a detection limit sits about three standard
        deviations of low-level replicates above zero, so half the limit is a cautious floor).
        A stated uncertainty is used as stated.
    measured_exceedance_rate_tolerance : float
        Relative band [-] around a step's rate that a discharge sample above margin x limit
        closes, whatever the model says (common practice: a step's rate is held and metered
        to within a few percent).
    fit_time_budget : float
        Longest CPU time of this process the hydraulic fit may take [s]; a fit still running then stops with an
        error (common practice for an interactive tool, not a published value).
    qa : dict
        Options of the lab and field review.
    seal_leakage : float
        Fraction of a sealed zone's conductance left by the seal [-]: flow through the gravel
        pack around a packer or liner (0 = a perfect seal, 1 = no seal). Common practice: 0.05.
    redevelopment_shortfall : float
        Redevelopment's uncertain outcome [-]: the achieved skin is uniform between the target
        skin and target + shortfall x (fitted skin - target). Common practice: 0.5.
    unresolved_tolerance : float
        A spread of an option's concentration over the values the data cannot pin smaller than
        this fraction of margin x limit is ignored [-]. Common practice: 0.05 (lab precision).
    unseen_zone_factor : float
        A zone value the data put no upper limit on is drawn up to this multiple of the
        analyte's largest result or detection limit [-]. Common practice: 3.
    recommended_headroom : float
        Relative distance [-] the recommended rate keeps from every end of the operating
        window, so that a drift of the rate by this fraction (meter error, pump wear, a falling
        water table) stays inside every hard limit. Common practice: 0.05 (a pump's rate is
        held and metered to within a few percent).
    min_window_steps : int
        Fewest steps with lab results an operating window should rest on; with fewer,
        ``check`` and ``window`` warn that the window rests on thin data. Common practice: 3
        (a curve of quality against rate needs three rates to show its shape, and a step-rate
        test usually has three to five steps).
    gross_outlier_factor : float
        A discharge result more than this multiple of every other step's result of its analyte
        (or less than its inverse), which no blend of the other steps can explain, is an error
        of the review [-]. Common practice: 10 (an order of magnitude).
    review_decisions : tuple of dict
        The reviewer's decisions on samples (``[[review]]`` in project.toml): each has
        ``sample`` (sample_id), ``analyte`` ("" for every analyte of the sample), ``action``
        ("exclude", "downweight" or "keep"), ``factor`` (uncertainty multiple of a
        down-weighted result [-]), ``reason`` and ``entry`` (its index in the file, from 1).
    temporal_cv : dict
        Coefficient of variation [-] of each analyte's concentration from sample to sample at
        a fixed rate, beyond lab error (analyte key -> value; the key "default" for analytes
        not named). Analytes without a value take ``DEFAULT_TEMPORAL_CV`` (common practice).
    forecast_years : int
        Horizon of the forecast from the monitoring history [years] (a planning choice).
    time_model : dict
        Analyte -> time model of its zone concentrations ("constant", "trend", "seasonal",
        "trend+seasonal" or "auto": the smallest AICc); the key "default" for the others.
    quarterly_trigger_fraction : float
        A result at or above this fraction of the MCL moves nitrate to quarterly monitoring
        [-]. Common practice (setting), read in a state rule restating 40 CFR 141.23(d)(2)
        (a secondary source): 0.5.
    history_condition_limit : float
        A time term (trend, season) is resolved per zone only when the column-scaled condition
        number of its part of the design is at most this [-]; otherwise it is fitted and
        reported as a term of the blend. Common practice (setting): 30.
    pump_nominal_rate : float or None
        Rate of a pump-log row that says "on" without a rate [m^3/d].
    prepared_by, reviewed_by : str
        Who prepared and who reviewed the report ("" when not given; [project] table).
    report_date : str
        Date of the report, ISO 8601 (YYYY-MM-DD); "" for the date of the run.
    paper : str
        "a4" or "letter"; "" for Letter with US display units and A4 with SI.
    fit_entrance_losses : bool
        Fit each zone's nonlinear entrance loss (kept where the data resolve it).
    idle_time_before_test : float or None
        How long the well stood idle before the first step [d] (``[test] idle_time_before``):
        the time the thief zones took in ambient crossflow (crossflow memory); None: unknown,
        not assessed.
    idle_time_before_sample : float or None
        Idle time before a compliance sample in operation [d] (``[test]
        idle_time_before_sample``), for the first-flush advice; None: not given.
    first_flush_tolerance : float
        Relative distance from the steady blend [-] within which the discharge counts as
        steady after a pump start (first-flush advice). Common practice: 0.05 (lab precision).
    """

    limit_sets: tuple[str, ...] = ("US-EPA",)
    margin: float = 0.8
    exceedance_probability: float = 0.05
    sample_exceedance_probability: float = 0.05
    interval: float = 0.90
    horizon: float = 365.0
    rate_grid_points: int = 121
    rate_grid_max: float | None = None
    draws: int = 1000
    seed: int = 20261202
    display_units: str = "US"
    conductance_model: str = "auto"
    flowlog_relative_error: float = 0.05
    flowlog_absolute_error: float = 2.7
    level_error: float = 0.05
    default_relative_uncertainty: float = 0.05
    detection_limit_sigma_fraction: float = 0.5
    measured_exceedance_rate_tolerance: float = 0.05
    fit_time_budget: float = 30.0
    qa: dict = field(default_factory=dict)
    seal_leakage: float = 0.05
    redevelopment_shortfall: float = 0.5
    unresolved_tolerance: float = 0.05
    unseen_zone_factor: float = 3.0
    recommended_headroom: float = 0.05
    gross_outlier_factor: float = 10.0
    min_window_steps: int = 3
    review_decisions: tuple = ()
    temporal_cv: dict = field(default_factory=dict)
    forecast_years: int = 10
    time_model: dict = field(default_factory=dict)
    quarterly_trigger_fraction: float = 0.5
    history_condition_limit: float = 30.0
    pump_nominal_rate: float | None = None
    #: analytes whose ``temporal_cv`` was estimated from the monitoring history
    temporal_cv_history: tuple = ()
    prepared_by: str = ""
    reviewed_by: str = ""
    report_date: str = ""
    paper: str = ""
    fit_entrance_losses: bool = False
    idle_time_before_test: float | None = None
    idle_time_before_sample: float | None = None
    first_flush_tolerance: float = 0.05

    def temporal_cv_for(self, analyte: str) -> tuple[float, str]:
        """Temporal coefficient of variation of ``analyte`` [-] and where it comes from
        ("monitoring history", "setting" or "default setting, common practice")."""
        if analyte in self.temporal_cv_history and analyte in self.temporal_cv:
            return float(self.temporal_cv[analyte]), "monitoring history"
        if analyte in self.temporal_cv:
            return float(self.temporal_cv[analyte]), "setting"
        if "default" in self.temporal_cv:
            return float(self.temporal_cv["default"]), "setting"
        return DEFAULT_TEMPORAL_CV, "default setting, common practice"


@dataclass
class Project:
    """A well, its zones, its test data and the settings of the analysis."""

    name: str
    well: Well
    zones: list[Zone]
    settings: Settings = field(default_factory=Settings)
    limits: list[Limit] = field(default_factory=list)
    steps: pd.DataFrame = field(default_factory=lambda: empty_table("steps"))
    samples: pd.DataFrame = field(default_factory=lambda: empty_table("samples"))
    flowlogs: pd.DataFrame = field(default_factory=lambda: empty_table("flowlogs"))
    levels: pd.DataFrame = field(default_factory=lambda: empty_table("levels"))
    field_readings: pd.DataFrame = field(default_factory=lambda: empty_table("field"))
    history: pd.DataFrame = field(default_factory=lambda: empty_table("history"))
    pumplog: pd.DataFrame = field(default_factory=lambda: empty_table("pumplog"))
    scenarios: list[dict] = field(default_factory=list)
    folder: Path | None = None
    files: dict[str, str] = field(default_factory=dict)
    #: what reading the files noted (e.g. rows of other wells counted and not read)
    notes: list[str] = field(default_factory=list)

    @property
    def zone_names(self) -> list[str]:
        return [z.name for z in self.zones]

    @property
    def zone_top(self) -> np.ndarray:
        return np.array([z.top for z in self.zones])

    @property
    def zone_bottom(self) -> np.ndarray:
        return np.array([z.bottom for z in self.zones])

    def analytes(self) -> list[str]:
        """Analyte keys present in the samples, in order of first appearance."""
        if self.samples.empty:
            return []
        return list(dict.fromkeys(self.samples["analyte"]))

    def limits_for(self, analyte: str) -> list[Limit]:
        """Limits that apply to ``analyte``, strictest (lowest canonical value) first."""
        return sorted((lim for lim in self.limits if lim.analyte == analyte),
                      key=lambda lim: lim.canonical())
