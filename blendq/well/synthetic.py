"""Synthetic step tests from known zone hydraulics and chemistry.

Used by the tests (recovery and coverage experiments), the benchmarks and to make the invented
demo data. Nothing here is a measurement: every number comes from the arguments.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from blendq.errors import ModelError
from blendq.inputs.project import TABLE_COLUMNS, Project, Settings, Well, Zone, empty_table
from blendq.well import mixing
from blendq.well.model import model_from_parameters


def synthetic_project(
    conductance,
    static_head,
    zone_top,
    zone_bottom,
    concentrations: dict[str, np.ndarray],
    step_rates,
    intake_depth: float,
    relative_error: float = 0.0,
    absolute_error: dict[str, float] | None = None,
    well_loss: float = 0.0,
    flowlog_rates=None,
    flowlog_depths=None,
    flowlog_noise: float = 0.0,
    level_noise: float = 0.0,
    depth_samples: list[tuple[str, float]] | None = None,
    nondetect_limits: dict[str, float] | None = None,
    seed: int | None = None,
    settings: Settings | None = None,
    zone_names=None,
    step_hours: float = 4.0,
    entrance_loss=None,
) -> Project:
    """A project whose samples, logs and levels follow the blendq model exactly (plus noise).

    Parameters
    ----------
    conductance, static_head : array_like (n_zones,)
        True G_i [m^2/d] and h0_i [m].
    zone_top, zone_bottom : array_like (n_zones,)
        Depths [m].
    concentrations : dict
        Analyte -> true zone values (n_zones,) [mg/L canonical].
    step_rates : array_like
        Rate of each step [m^3/d].
    intake_depth : float [m]
    relative_error : float
        Lab error (1 sd, relative) used to perturb results and stated as their uncertainty.
    absolute_error : dict, optional
        Analyte -> absolute floor of the lab error [mg/L].
    well_loss : float
        C [d^2/m^5].
    flowlog_rates, flowlog_depths : array_like, optional
        Rates [m^3/d] at which logs are run and depths [m] of the readings.
    nondetect_limits : dict, optional
        Analyte -> detection limit [mg/L]; results below it become non-detects.
    depth_samples : list of (step, depth), optional
        Samples taken inside the well at a depth during a step (all analytes).
    seed : int, optional
    entrance_loss : array_like (n_zones,), optional
        True nonlinear entrance loss C_i [d^2/m^5] of each zone (P = 2) in the data; the
        project's zones carry none (a fit has to find it).
    """
    rng = np.random.default_rng(seed)
    n = len(conductance)
    names = zone_names or [f"Z{i + 1}" for i in range(n)]
    zones = [Zone(names[i], float(zone_top[i]), float(zone_bottom[i]), static_level=-float(static_head[i]),
                  conductance=float(conductance[i])) for i in range(n)]
    well = Well("Synthetic well", 0.15, float(intake_depth), well_loss=well_loss,
                static_level=None)
    project = Project("synthetic", well, zones, settings or Settings(conductance_model="given"))
    model = model_from_parameters(project, conductance, static_head, well_loss, entrance_loss)
    rates = np.asarray(step_rates, float)
    start = pd.Timestamp("2026-03-02 08:00")
    steps = []
    level = model.pumping_level_depth(rates)
    for k, q in enumerate(rates):
        t0 = start + pd.Timedelta(hours=step_hours * k)
        steps.append(dict(step=f"S{k + 1}", rate=q, start=t0, end=t0 + pd.Timedelta(hours=step_hours),
                          duration=step_hours / 24.0,
                          pumping_level=float(level[k] + level_noise * rng.standard_normal()),
                          recovered_before=False, source_row=k + 1))
    project.steps = pd.DataFrame(steps)
    weights = model.weights(rates)
    rows = []
    absolute_error = absolute_error or {}
    nondetect_limits = nondetect_limits or {}
    flows = model.state(rates).zone_flow
    for analyte, conc in concentrations.items():
        conc = np.asarray(conc, float)
        true = weights @ conc
        extra = []
        for step, depth in depth_samples or []:
            k = int(step[1:]) - 1
            comp = mixing.wellbore_composition(flows[k], model.geometry, [depth], conc)[0, 0]
            if not np.isfinite(comp):
                raise ModelError(f"depth sample at {depth:g} m during step {step}: the water "
                                 "there does not flow, so a sample would say nothing about "
                                 "the zones (choose a depth between flowing zones)")
            extra.append((k, depth, comp))
        all_rows = [(k, np.nan, true[k]) for k in range(len(rates))] + extra
        for k, depth, val in all_rows:
            sd = np.hypot(relative_error * val, absolute_error.get(analyte, 0.0))
            obs = val + sd * rng.standard_normal() if sd > 0 else val
            dl = nondetect_limits.get(analyte)
            nd = dl is not None and obs < dl
            rows.append(dict(sample_id=f"{analyte[:3].upper()}-{len(rows) + 1}", step=f"S{k + 1}",
                             analyte=analyte, value=np.nan if nd else max(obs, 0.0) if sd > 0 else obs,
                             nondetect=bool(nd), detection_limit=dl if dl is not None else np.nan,
                             uncertainty=sd if sd > 0 else np.nan, qualifier="U" if nd else "",
                             sampled_at=pd.NaT, analyzed_at=pd.NaT, duplicate_of="",
                             depth=depth, preservation="", reported_value=val,
                             reported_unit="mg/L", reported_basis="", source_row=len(rows) + 1))
    project.samples = pd.DataFrame(rows) if rows else empty_table("samples")
    if flowlog_rates is not None:
        logs = []
        depths = np.asarray(flowlog_depths, float)
        for j, q in enumerate(np.asarray(flowlog_rates, float)):
            st = model.state(np.array([q]))
            up = mixing.wellbore_flow(st.zone_flow[0], model.geometry, depths)
            for d, f in zip(depths, up, strict=False):
                noise = flowlog_noise * rng.standard_normal() * (abs(f) + 1.0)
                logs.append(dict(log=f"L{j}", step="", rate=q, depth=d, upward_flow=f + noise,
                                 source_row=len(logs) + 1))
        project.flowlogs = pd.DataFrame(logs)
    return project


def synthetic_history(model, t0, dates, rates, zones: dict[str, dict],
                      relative_error: float = 0.0, temporal_sd: dict[str, float] | None = None,
                      seed: int | None = None) -> pd.DataFrame:
    """A monitoring history whose results follow known zone time models (plus noise).

    Zone i's concentration is c_i(t) = c0_i + trend_i tau + amplitude_i sin(2 pi tau +
    phase_i) with tau = (t - t0) / 365.25 d; a result at rate Q is the blend
    sum_i a_i(Q) c_i(t), plus the water's variability (normal, sd ``temporal_sd``) and lab
    error (normal, sd ``relative_error`` times the blend, stated as the uncertainty).

    Parameters
    ----------
    model : WellModel
        The true well (its discharge weights give the blend).
    t0 : Timestamp
        tau = 0 (the step test).
    dates : sequence of Timestamp
    rates : array_like (n,)
        Rate at each date [m^3/d].
    zones : dict
        Analyte -> {"c0": (n_zones,) [mg/L], "trend": (n_zones,) [mg/L/a], "amplitude":
        (n_zones,) [mg/L], "phase": (n_zones,) [rad]}; absent keys are zero.
    relative_error : float
    temporal_sd : dict, optional
        Analyte -> sd of the water's variability [mg/L].
    seed : int, optional

    Returns
    -------
    DataFrame
        Columns of the ``history`` table (:data:`blendq.inputs.project.TABLE_COLUMNS`).
    """
    rng = np.random.default_rng(seed)
    dates = pd.to_datetime(pd.Series(list(dates)))
    rates = np.asarray(rates, float)
    tau = ((dates - pd.Timestamp(t0)) / pd.Timedelta(days=1)).to_numpy(float) / 365.25
    weights = model.weights(rates)
    temporal_sd = temporal_sd or {}
    rows = []
    for analyte, spec in zones.items():
        c0 = np.asarray(spec["c0"], float)
        zero = np.zeros_like(c0)
        trend = np.asarray(spec.get("trend", zero), float)
        amp = np.asarray(spec.get("amplitude", zero), float)
        phase = np.asarray(spec.get("phase", zero), float)
        conc = (c0[None, :] + trend[None, :] * tau[:, None]
                + amp[None, :] * np.sin(2 * np.pi * tau[:, None] + phase[None, :]))
        blend = np.sum(weights * conc, axis=1)
        sd_lab = relative_error * np.abs(blend)
        obs = (blend + temporal_sd.get(analyte, 0.0) * rng.standard_normal(len(blend))
               + sd_lab * rng.standard_normal(len(blend)))
        for j in range(len(blend)):
            rows.append([dates[j], "discharge", analyte, max(float(obs[j]), 0.0), False,
                         np.nan, float(sd_lab[j]) if relative_error > 0 else np.nan, "",
                         float(rates[j]), "history table", np.nan, len(rows) + 1])
    frame = pd.DataFrame(rows, columns=TABLE_COLUMNS["history"])
    frame["sampled_at"] = pd.to_datetime(frame["sampled_at"]).astype("datetime64[ns]")
    return frame.sort_values("sampled_at", kind="stable").reset_index(drop=True)
