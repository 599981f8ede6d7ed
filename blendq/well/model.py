"""Build the zone inflow model of a well from a project: geometry, conductances and heads.

A :class:`WellModel` holds one set of hydraulic parameters (zone conductances, static heads,
nonlinear losses, the well loss) and answers, for any array of rates, the zone flows, the
discharge weights and the pumping level. :func:`prior_hydraulics` turns the zone properties of
a project into prior values with spreads for the fit (:mod:`blendq.fit.estimation`).

Conductances from properties (docs/methods.md, section 1):

* ``steady``: Thiem with skin, G = 2 pi T / (ln(R/r_w) + s);
* ``transient``: Cooper-Jacob with skin at time t, G = 4 pi T / (ln(2.25 T t/(r_w^2 S)) + 2 s);
* ``given``: the zone's own ``conductance``.
"""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass, replace

import numpy as np

from blendq.errors import InputError, ModelError
from blendq.inputs.project import Project
from blendq.well import hydraulics, mixing

#: spread of a property-based conductance prior, as a factor (1 sd of ln G): common practice
#: for transmissivities estimated from lithology or slug tests (within a factor of about 3)
PRIOR_LOG_CONDUCTANCE_SD = np.log(3.0)
#: spread of a measured zone static level [m] (common practice)
PRIOR_HEAD_SD_MEASURED = 0.3
#: spread of a zone static level taken from the well's composite level [m] (common practice)
PRIOR_HEAD_SD_ASSUMED = 3.0
#: start value of every zone conductance [m^2/d] when no zone has usable properties and flow
#: logs at a pumped rate decide the zone shares: where the fit starts, with no prior weight
START_CONDUCTANCE = 100.0
#: how the hydraulics table labels a zone whose conductance has no prior (flow logs decide)
NO_PRIOR_SOURCE = "none: no zone properties; shares from the flow logs"
#: how it labels every zone under ``conductance_model = "flowlog"`` (properties not used)
FLOWLOG_SOURCE = 'none: conductance_model = "flowlog"; shares from the flow logs'


@dataclass(frozen=True)
class WellModel:
    """Hydraulic parameters of one well, in base units; arrays may carry batch dimensions.

    Attributes
    ----------
    geometry : mixing.WellGeometry
    conductance : ndarray (..., n_zones)
        G_i [m^2/d].
    static_head : ndarray (..., n_zones)
        h0_i [m] (elevation relative to the datum).
    nonlinear_loss : ndarray (..., n_zones)
        Nonlinear entrance loss C_i of each zone node [d^P/m^(3P-1)] (MNW2 form).
    well_loss : ndarray (...,) or float
        C [d^2/m^5] (pumping level = h_w - C Q^2).
    loss_exponent : ndarray (n_zones,) or float
        Exponent P_i of the nonlinear entrance loss C_i q |q|^(P_i-1) [-].
    linear_loss : ndarray (..., n_zones) or float
        Linear entrance loss B_i [d/m^2].

    Each zone's transmissivity follows its saturated thickness once the head at its well face
    falls into its open interval (``geometry`` depths; :func:`hydraulics.saturated_potential`).
    """

    geometry: mixing.WellGeometry
    conductance: np.ndarray
    static_head: np.ndarray
    nonlinear_loss: np.ndarray
    well_loss: np.ndarray | float = 0.0
    loss_exponent: np.ndarray | float = 2.0
    linear_loss: np.ndarray | float = 0.0

    def state(self, rate) -> hydraulics.WellState:
        """Wellbore head and zone flows at each rate [m^3/d]; shapes (..., n_rates[, n_zones])."""
        d = self.nonlinear_loss if np.any(np.asarray(self.nonlinear_loss) > 0) else None
        b = self.linear_loss if np.any(np.asarray(self.linear_loss) > 0) else None
        return hydraulics.solve_wellbore_head(
            rate, self.conductance, self.static_head, d, self.loss_exponent, linear_loss=b,
            zone_top=self.geometry.zone_top, zone_bottom=self.geometry.zone_bottom)

    def sensitivity(self, state: hydraulics.WellState) -> hydraulics.FlowSensitivity:
        """Derivatives of ``state`` (:meth:`state` of this model) by each zone's ln G_i, h0_i
        and C_i, rate held (:func:`hydraulics.flow_sensitivity`)."""
        return hydraulics.flow_sensitivity(
            state, self.conductance, self.static_head, self.nonlinear_loss, self.loss_exponent,
            linear_loss=self.linear_loss, zone_top=self.geometry.zone_top,
            zone_bottom=self.geometry.zone_bottom)

    def weights(self, rate) -> np.ndarray:
        """Discharge weights a_i(Q), shape (..., n_rates, n_zones)."""
        return mixing.discharge_weights(self.state(rate).zone_flow, self.geometry)

    def pumping_level_depth(self, rate, state: hydraulics.WellState | None = None) -> np.ndarray:
        """Depth of the pumping level below the datum [m], shape (..., n_rates)."""
        st = self.state(rate) if state is None else state
        c = np.asarray(self.well_loss, float)[..., None]
        return -hydraulics.pumping_level_head(st.wellbore_head, st.rate, c)

    def at_horizon(self, factor) -> WellModel:
        """The well at the operating horizon: each zone's response to pumping scaled by
        ``factor`` (G_i(horizon) / G_i(test)), the ambient crossflow held.

        The ambient crossflow q0_i (at Q = 0, wellbore head h_w0) is a steady state that was
        there before the test; pumping superposes a response whose conductance falls with time
        (linear superposition; Cooper and Jacob 1946). With G'_i = f_i G_i the static heads are
        moved to h0'_i = h_w0 + q0_i / G'_i + L_i(q0_i) (L_i the zone's entrance loss) so that
        the model at Q = 0 still gives h_w0 and q0_i exactly, while q_i - q0_i follows G'_i.
        For linear zones this is q_i(Q) = q0_i + G'_i (h_w0 - h_w(Q)) with sum_i q_i = Q. For a
        zone dewatered at rest the same holds in its discharge potential:
        psi(h0'_i) = psi(h_w0 + L_i(q0_i)) + q0_i / G'_i; where that would need a head below
        the zone's bottom (a thief zone unconfined at rest) its static head is its bottom and
        it takes less water at rest.

        Parameters
        ----------
        factor : array_like (n_zones,)
            G_i(horizon) / G_i(test) [-] (:func:`horizon_factor`).
        """
        f = np.asarray(factor, float)
        if np.all(f == 1.0):
            return self
        amb = self.state(np.zeros(1))
        hw0 = amb.wellbore_head[..., 0]
        q0 = amb.zone_flow[..., 0, :]
        g = np.asarray(self.conductance, float) * f
        loss, _ = hydraulics.entrance_loss(q0, self.linear_loss, self.nonlinear_loss,
                                           self.loss_exponent)
        # the static head whose potential lies q0 / G' above the face head's (dewatering law)
        top, bottom = -self.geometry.zone_top, -self.geometry.zone_bottom
        psi_face, _ = hydraulics.saturated_potential(hw0[..., None] + loss, top, bottom)
        h0 = hydraulics.head_of_potential(psi_face + q0 / g, top, bottom)
        return replace(self, conductance=g, static_head=h0)

    def with_changes(self, **kw) -> WellModel:
        """A copy with some attributes replaced."""
        return replace(self, **kw)


def geometry_of(project: Project) -> mixing.WellGeometry:
    """Zone depths and the intake of the step test (what the flow logs and depth samples were
    taken against): the geometry of the fit."""
    return mixing.WellGeometry(project.zone_top, project.zone_bottom,
                               project.well.pump_intake_depth, _sublayers(project))


def _sublayers(project: Project) -> tuple | None:
    """Each zone's sub-layers (or None: uniform inflow), or None when no zone has any."""
    layers = tuple(np.asarray(z.sublayers, float) if z.sublayers else None
                   for z in project.zones)
    return layers if any(x is not None for x in layers) else None


def operating_geometry(project: Project) -> mixing.WellGeometry:
    """Zone depths and the intake for operation (``well.operating_intake_depth``, else the
    test's): the geometry of the sweep, the window and the scenarios."""
    return mixing.WellGeometry(project.zone_top, project.zone_bottom,
                               project.well.operating_intake, _sublayers(project))


def elapsed_test_time(project: Project) -> float:
    """Pumping time of the step test [d]: the sum of the step durations (each from its
    ``duration``, or its start and end). The time the fitted conductances belong to.

    Raises
    ------
    InputError
        When a zone is transient (Cooper-Jacob) and a step has no duration, naming the steps
        file, row and field: no duration is assumed. Without a transient zone the time is not
        used, and NaN is returned when it is unknown.
    """
    from blendq.well.steptest import validated_schedule

    label = project.files.get("steps", "steps.csv") if project.files else "steps.csv"
    transient = "transient" in zone_conductance_models(project)
    if project.steps is None or project.steps.empty:
        if transient:
            raise InputError("the steps table has no steps: transient (Cooper-Jacob) zone "
                             "conductances need the test's pumping time", file=label)
        return float("nan")
    sched = validated_schedule(project.steps, label, need_times=False)
    dur = np.asarray(sched["duration"], float)
    bad = np.flatnonzero(~(np.isfinite(dur) & (dur > 0)))
    if len(bad):
        if transient:
            raise InputError("duration missing: transient (Cooper-Jacob) zone conductances need "
                             "each step's duration (or its start and end)", file=label,
                             row=sched["row"][bad[0]], field="duration")
        return float("nan")
    return float(dur.sum())


def transient_slope(project: Project) -> np.ndarray:
    """Per zone 1 / (4 pi T_i) [d/m^2] for a transient (Cooper-Jacob) zone with T and S known,
    0 for the others: the growth of 1 / G_i per unit of ln t (Cooper and Jacob 1946)."""
    out = []
    for z, use in zip(project.zones, zone_conductance_models(project), strict=True):
        t = z.zone_transmissivity
        ok = use == "transient" and t is not None and z.storativity is not None
        out.append(1.0 / (4.0 * np.pi * t) if ok else 0.0)
    return np.array(out, float)


def property_conductance(project: Project, time: float | None, model: str | None = None) -> np.ndarray:
    """Zone conductances [m^2/d] from zone properties.

    Parameters
    ----------
    project : Project
    time : float or None
        Elapsed pumping time t [d] for the transient model.
    model : str, optional
        "steady", "transient", "given" or "auto" (default: the project's setting). "auto" takes
        each zone's given conductance, else Cooper-Jacob when storativity is known, else Thiem.

    Raises
    ------
    InputError
        When a zone lacks what the model needs.
    """
    out = []
    rw = project.well.well_radius
    label = project_file_name(project)
    for i, (z, use) in enumerate(zip(project.zones, zone_conductance_models(project, model),
                                     strict=True)):
        if use == "given":
            if z.conductance is None:
                raise InputError(f'zone "{z.name}" has no conductance', file=label,
                                 field=f"zones[{i + 1}].conductance")
            out.append(z.conductance)
            continue
        t = z.zone_transmissivity
        if t is None:
            raise InputError(f'zone "{z.name}" needs transmissivity, conductivity or conductance',
                             file=label, field=f"zones[{i + 1}].transmissivity")
        if use == "transient":
            if z.storativity is None:
                raise InputError(f'zone "{z.name}" needs storativity for transient conductance',
                                 file=label, field=f"zones[{i + 1}].storativity")
            with _zone_skin(label, i):
                out.append(float(hydraulics.cooper_jacob_conductance(t, z.storativity, time, rw,
                                                                     z.skin)))
        else:
            r = project.well.radius_of_influence
            if r is None:
                raise InputError("steady conductances need well.radius_of_influence (or zone "
                                 "storativity for transient ones)", file=label,
                                 field="well.radius_of_influence")
            with _zone_skin(label, i):
                out.append(float(hydraulics.thiem_conductance(t, r, rw, z.skin)))
    return np.array(out)


@contextmanager
def _zone_skin(label: str, i: int):
    """Turn a conductance made undefined by the zone's skin (a non-positive denominator) into
    an InputError naming the zone's skin in the project file."""
    try:
        yield
    except ModelError as err:
        raise InputError(f"makes the conductance of the zone undefined: {err}", file=label,
                         field=f"zones[{i + 1}].skin") from None


def zone_conductance_models(project: Project, model: str | None = None) -> list[str]:
    """The conductance model of each zone: "given", "steady" or "transient".

    ``settings.conductance_model`` (or ``model``) "steady", "transient" and "given" apply to
    every zone; "auto" takes a zone's given conductance, else Cooper-Jacob when its
    storativity is known, else Thiem (docs/methods.md, section 1). "flowlog" takes the same
    models here, where they carry the conductances to the operating horizon and give the
    fit's start values; the fit's conductances rest on the flow logs (:func:`prior_hydraulics`).
    """
    model = model or project.settings.conductance_model
    if model not in ("auto", "flowlog"):
        return [model] * len(project.zones)
    return ["given" if z.conductance is not None else
            "transient" if z.storativity is not None else "steady" for z in project.zones]


@dataclass(frozen=True)
class HorizonScaling:
    """How each zone's conductance is carried from the step test to the operating horizon.

    Attributes
    ----------
    factor : ndarray (n_zones,)
        G_i(horizon) / G_i(test) [-].
    basis : list of str
        Per zone, what the factor rests on (for the report).
    assumed : list of int
        Zones of a transient model held at their test value for want of transmissivity and
        storativity (an assumption the report states).
    """

    factor: np.ndarray
    basis: list[str]
    assumed: list[int]

    def note(self, project: Project) -> str:
        """One sentence on the zones held at their test value by assumption ("" if none)."""
        if not self.assumed:
            return ""
        names = ", ".join(project.zones[i].name for i in self.assumed)
        return (f"The transient model carries each zone's conductance to the operating horizon "
                f"by Cooper-Jacob; {names} lack(s) the transmissivity or storativity this needs "
                "and is held at its step-test conductance (an assumption: its response would "
                "weaken with time like the other zones').")


def horizon_scaling(project: Project, conductance_test_time: float,
                    horizon: float) -> HorizonScaling:
    """Factor G_i(horizon) / G_i(test) per zone [-], following each zone's conductance model.

    Fitted conductances describe the well's response to pumping at the end of the step test.

    * transient zones (Cooper-Jacob): the cone of depression keeps growing, so the factor is
      (ln(2.25 T t_test / (r_w^2 S)) + 2 s) / (ln(2.25 T t_h / (r_w^2 S)) + 2 s) (Cooper and
      Jacob 1946); a transient zone without T or S is held at 1 and listed in ``assumed``;
    * steady zones (Thiem): the conductance does not change with time (factor 1);
    * given conductances: held as given (factor 1).

    References
    ----------
    Cooper, H.H. and Jacob, C.E. (1946) A generalized graphical method for evaluating formation
    constants and summarizing well-field history. Trans. AGU 27(4), 526-534.
    """
    f, basis, assumed = [], [], []
    rw = project.well.well_radius
    for i, (z, use) in enumerate(zip(project.zones, zone_conductance_models(project),
                                     strict=True)):
        t = z.zone_transmissivity
        if use == "given":
            f.append(1.0)
            basis.append("given conductance: held as given")
        elif use == "steady":
            f.append(1.0)
            basis.append("steady (Thiem): no change with time")
        elif t is None or z.storativity is None:
            f.append(1.0)
            basis.append("transient, no transmissivity or storativity: held at its test value "
                         "(assumed)")
            assumed.append(i)
        else:
            with _zone_skin(project_file_name(project), i):
                g1 = hydraulics.cooper_jacob_conductance(t, z.storativity,
                                                         conductance_test_time, rw, z.skin)
                g2 = hydraulics.cooper_jacob_conductance(t, z.storativity, horizon, rw, z.skin)
            f.append(float(g2 / g1))
            basis.append("transient (Cooper-Jacob ratio)")
    return HorizonScaling(np.array(f, float), basis, assumed)


def horizon_factor_of(conductance, slope, test_time: float, horizon: float) -> np.ndarray:
    """G_i(t_h) / G_i(t_ref) [-] of conductances G_i(t_ref) [m^2/d] (any batch shape).

    With 1 / G_i(t) = 1 / G_i(t_ref) + slope_i ln(t / t_ref), slope_i = 1 / (4 pi T_i) for a
    transient zone and 0 for a steady or given one (:func:`transient_slope`), the factor is
    1 / (1 + G_i slope_i ln(t_h / t_ref)): Cooper-Jacob with the skin the conductance implies
    (Cooper and Jacob 1946; the same law as the step levels of :mod:`blendq.well.transient`).
    For G_i from the zone properties it equals the ratio of :func:`horizon_scaling`.

    Raises
    ------
    ModelError
        When the horizon lies so far before the test time that a conductance turns negative.
    """
    slope = np.asarray(slope, float)
    if not np.any(slope > 0):
        return np.ones(np.shape(conductance))
    denom = 1.0 + np.asarray(conductance, float) * slope * np.log(horizon / test_time)
    if np.any(denom <= 0):
        raise ModelError(f"an operating horizon of {horizon:g} d is too short next to the test "
                         f"time {test_time:g} d for the Cooper-Jacob form")
    return 1.0 / denom


def horizon_factor(project: Project, conductance_test_time: float, horizon: float) -> np.ndarray:
    """Factor G_i(horizon) / G_i(test) per zone [-]: :attr:`HorizonScaling.factor` of
    :func:`horizon_scaling` (1 for steady zones and given conductances)."""
    return horizon_scaling(project, conductance_test_time, horizon).factor


@dataclass(frozen=True)
class HydraulicPrior:
    """Prior values and spreads of the hydraulic parameters.

    Attributes
    ----------
    log_conductance, log_conductance_sd : ndarray (n_zones,)
        Mean and sd of ln G_i (G in m^2/d); sd ``inf`` for no prior information.
    static_head, static_head_sd : ndarray (n_zones,)
        Mean and sd of h0_i [m]; sd ``inf`` for no prior information.
    source : list of str
        Where each zone's prior came from (for the report).
    """

    log_conductance: np.ndarray
    log_conductance_sd: np.ndarray
    static_head: np.ndarray
    static_head_sd: np.ndarray
    source: list[str]


def project_file_name(project: Project) -> str:
    """Name of the project file (for error messages)."""
    return project.files.get("project", "project.toml") if project.files else "project.toml"


def shares_from_flow_logs(project: Project) -> bool:
    """True when the project has a flow log at a pumped rate, which measures the zone shares
    at that rate (two-condition method, docs/methods.md, section 4)."""
    logs = project.flowlogs
    if logs is None or logs.empty:
        return False
    return bool((np.asarray(logs["rate"], float) > 0).any())


def prior_hydraulics(project: Project, need_properties: bool = False) -> HydraulicPrior:
    """Prior zone conductances and static heads from the project's zone properties.

    Under ``settings.conductance_model = "flowlog"`` the zone conductances rest on the flow logs
    (fitted jointly with the levels and the chemistry) and not on the zone properties: every
    conductance gets a flat prior (no weight), starting from the property conductance where the
    properties give one, else from :data:`START_CONDUCTANCE`; ``source`` says so
    (:data:`FLOWLOG_SOURCE`), and a project without a flow log at a pumped rate is an input
    error. The properties still carry the conductances to the operating horizon.

    No command invents hydraulics. When a zone lacks the properties its conductance model needs
    (transmissivity or conductivity, storativity, radius of influence, a given conductance),
    this is an input error, except where flow logs at a pumped rate decide the zone shares and
    properties are not required: then every conductance gets a flat prior (no weight) from the
    start value :data:`START_CONDUCTANCE`, and ``source`` says so (:data:`NO_PRIOR_SOURCE`).

    Parameters
    ----------
    project : Project
    need_properties : bool
        True for uses that rest on the properties alone (``blendq inflow``): a missing property
        is an error even with flow logs.

    Raises
    ------
    InputError
        Naming the project file and the zone's missing field.
    """
    n = len(project.zones)
    t_test = elapsed_test_time(project)
    if project.settings.conductance_model == "flowlog" and not need_properties:
        if not shares_from_flow_logs(project):
            raise InputError('conductance_model = "flowlog" takes the zone conductances from the '
                             "flow logs, and the project has no flow log at a pumped rate",
                             file=project_file_name(project), field="settings.conductance_model")
        try:
            logg = np.log(property_conductance(project, t_test))
        except InputError:
            logg = np.log(np.full(n, START_CONDUCTANCE))
        logg_sd = np.full(n, np.inf)
        src = [FLOWLOG_SOURCE] * n
        return _with_heads(project, logg, logg_sd, src)
    try:
        g = property_conductance(project, t_test)
        logg = np.log(g)
        logg_sd = np.where([z.conductance is not None for z in project.zones],
                           0.25 * PRIOR_LOG_CONDUCTANCE_SD, PRIOR_LOG_CONDUCTANCE_SD)
        src = ["zone properties"] * n
    except InputError as err:
        if need_properties:
            raise InputError(f"{err.message}: zone flows from the zone properties alone need "
                             "it (blendq assumes none)", file=err.file, field=err.field) from None
        if not shares_from_flow_logs(project):
            raise InputError(f"{err.message}: without a flow log at a pumped rate the zone "
                             "shares rest on the zone properties (blendq assumes none)",
                             file=err.file, field=err.field) from None
        # the flow logs decide the shares: a flat prior, labelled, from a start value
        logg = np.log(np.full(n, START_CONDUCTANCE))
        logg_sd = np.full(n, np.inf)
        src = [NO_PRIOR_SOURCE] * n
    return _with_heads(project, logg, logg_sd, src)


def _with_heads(project: Project, logg, logg_sd, src) -> HydraulicPrior:
    """The prior with the zone heads: a zone's static level, else the well's, else none."""
    well_level = project.well.static_level
    heads = []
    head_sd = []
    for z in project.zones:
        if z.static_level is not None:
            heads.append(-z.static_level)
            head_sd.append(PRIOR_HEAD_SD_MEASURED)
        elif well_level is not None:
            heads.append(-well_level)
            head_sd.append(PRIOR_HEAD_SD_ASSUMED)
        else:
            heads.append(0.0)
            head_sd.append(np.inf)
    return HydraulicPrior(logg, np.asarray(logg_sd, float), np.array(heads, float),
                          np.array(head_sd, float), src)


def model_from_parameters(project: Project, conductance, static_head, well_loss=None,
                          nonlinear_loss=None) -> WellModel:
    """A :class:`WellModel` of the project with the given conductances and heads (and, when
    given, nonlinear entrance losses C_i in place of the zones' own)."""
    nl = np.array([z.nonlinear_loss for z in project.zones], float)
    return WellModel(
        geometry=geometry_of(project),
        conductance=np.asarray(conductance, float),
        static_head=np.asarray(static_head, float),
        nonlinear_loss=nl if nonlinear_loss is None else np.asarray(nonlinear_loss, float),
        well_loss=project.well.well_loss if well_loss is None else well_loss,
        loss_exponent=np.array([z.loss_exponent for z in project.zones], float),
        linear_loss=np.array([z.linear_loss for z in project.zones], float),
    )
