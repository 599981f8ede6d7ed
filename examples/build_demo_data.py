"""Regenerate the invented demo data shipped in ``blendq/data/demo/``.

The demo well, place and utility are invented ("Tamsett Hollow Water Board", well TH-2). The
"true" zone hydraulics and chemistry below are invented too; the script runs them through the
blendq forward model (Cooper-Jacob conductances at the end of the test, common wellbore head,
wellbore mixing), adds seeded lab, flow-log and level noise, and writes the tables the demo
project reads. Run it from the repository root: ``python examples/build_demo_data.py``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from blendq.units import from_base, to_base
from blendq.well import hydraulics, mixing

OUT = Path(__file__).resolve().parents[1] / "blendq" / "data" / "demo"
FT = to_base(1, "ft", "length")
GPM = to_base(1, "gpm", "rate")

# invented truth, US units (depths below top of casing)
ZONES = [  # name, top ft, bottom ft, static level ft, T ft2/d, S, skin
    ("Upper sand", 120, 160, 58.0, 3000.0, 2e-4, 0.0),
    ("Silty sand", 185, 215, 61.5, 800.0, 2e-4, 0.0),
    ("Gravel (clogged)", 240, 265, 63.0, 3500.0, 2e-4, 12.0),
    ("Deep sand", 290, 330, 66.0, 2200.0, 2e-4, 0.0),
]
NITRATE_AS_N = np.array([13.0, 6.0, 3.0, 0.3])  # mg/L as N
ARSENIC_UG = np.array([1.0, 5.0, 9.0, 20.0])  # ug/L
MAJOR = {  # mg/L, zone values (for the ion balance of the step samples)
    "calcium": [62, 48, 40, 30], "magnesium": [14, 12, 10, 8], "sodium": [18, 28, 36, 52],
    "potassium": [3.0, 3.5, 4.0, 4.5], "chloride": [22, 18, 16, 14],
    "sulfate": [38, 34, 30, 26], "alkalinity": [170, 180, 185, 195],
}
RATES_GPM = [200, 350, 500, 650, 800]
STEP_MIN = 180
WELL_RADIUS_FT = 8 / 12
INTAKE_FT = 115.0
WELL_LOSS_S2FT5 = 1.5


def main() -> None:
    rng = np.random.default_rng(20261202)
    top = np.array([z[1] for z in ZONES]) * FT
    bot = np.array([z[2] for z in ZONES]) * FT
    h0 = -np.array([z[3] for z in ZONES]) * FT
    t_test = len(RATES_GPM) * STEP_MIN / 1440.0
    trans = np.array([to_base(z[4], "ft**2/d", "transmissivity") for z in ZONES])
    g = hydraulics.cooper_jacob_conductance(trans, np.array([z[5] for z in ZONES]), t_test,
                                            WELL_RADIUS_FT * FT, np.array([z[6] for z in ZONES]))
    geo = mixing.WellGeometry(top, bot, INTAKE_FT * FT)
    c_well = to_base(WELL_LOSS_S2FT5, "s**2/ft**5", "well_loss")
    rates = np.array(RATES_GPM) * GPM
    st = hydraulics.solve_wellbore_head(rates, g, h0)
    w = mixing.discharge_weights(st.zone_flow, geo)
    pwl = -hydraulics.pumping_level_head(st.wellbore_head, rates, c_well)
    start = pd.Timestamp("2026-05-12 07:00")
    steps, samples, field = [], [], []
    for k, q in enumerate(RATES_GPM):
        t0 = start + pd.Timedelta(minutes=STEP_MIN * k)
        level_ft = from_base(pwl[k], "length", "ft") + rng.normal(0, 0.1)
        steps.append([f"S{k + 1}", q, t0.strftime("%Y-%m-%d %H:%M"), STEP_MIN, round(level_ft, 2), "no"])
        t_sample = t0 + pd.Timedelta(minutes=STEP_MIN - 10)
        nitrate = float(w[k] @ NITRATE_AS_N) * (1 + rng.normal(0, 0.04))
        arsenic = float(w[k] @ ARSENIC_UG) * (1 + rng.normal(0, 0.06))
        sid = f"TH2-{k + 1}"
        ts = t_sample.strftime("%Y-%m-%d %H:%M")
        lab_n = (t_sample + pd.Timedelta(hours=26 if k != 4 else 61)).strftime("%Y-%m-%d %H:%M")
        lab_as = (t_sample + pd.Timedelta(days=9)).strftime("%Y-%m-%d")
        samples.append([sid, f"S{k + 1}", "nitrate", round(nitrate, 2), "mg/L", "as N", "", 0.05,
                        "4%", "", ts, lab_n, "", "", "cooled 4 C"])
        if arsenic < 3.0:
            samples.append([sid, f"S{k + 1}", "arsenic", "<3", "ug/L", "", "", 3.0, "", "U", ts,
                            lab_as, "", "", "HNO3 pH<2"])
        else:
            samples.append([sid, f"S{k + 1}", "arsenic", round(arsenic, 1), "ug/L", "", "", 1.0,
                            "6%", "", ts, lab_as, "", "", "HNO3 pH<2"])
        samples.append([sid, f"S{k + 1}", "nitrite", "<0.05", "mg/L", "as N", "", 0.05, "",
                        "U", ts, lab_n, "", "", "cooled 4 C"])
        if k == 2:  # field duplicate, lab reports nitrate as the ion
            dn = float(w[k] @ NITRATE_AS_N) * (1 + rng.normal(0, 0.04)) * 4.4266
            da = float(w[k] @ ARSENIC_UG) * (1 + rng.normal(0, 0.06))
            samples.append([sid + "D", f"S{k + 1}", "nitrate", round(dn, 1), "mg/L", "as NO3",
                            "", 0.2, "4%", "", ts, lab_n, sid, "", "cooled 4 C"])
            samples.append([sid + "D", f"S{k + 1}", "arsenic", round(da, 1), "ug/L", "", "",
                            1.0, "6%", "", ts, lab_as, sid, "", "HNO3 pH<2"])
            for ion, vals in MAJOR.items():
                v = float(w[k] @ np.array(vals)) * (1 + rng.normal(0, 0.02))
                basis = "as CaCO3" if ion == "alkalinity" else ""
                samples.append([sid, f"S{k + 1}", ion, round(v, 1), "mg/L", basis, "", "", "",
                                "", ts, lab_as, "", "", "cooled 4 C"])
        # field readings every 5 minutes before the sample; step 1 still settling
        for r in range(5):
            tt = t_sample - pd.Timedelta(minutes=5 * (4 - r))
            drift = (4 - r) if k == 0 else 0
            field.append([f"S{k + 1}", tt.strftime("%Y-%m-%d %H:%M"),
                          round(15.1 + 0.02 * rng.standard_normal() + 0.1 * drift, 2),
                          round(7.35 + 0.01 * rng.standard_normal(), 2),
                          round(540 + 20 * k + 2 * rng.standard_normal() + 12 * drift),
                          round(4.2 - 0.3 * k + 0.03 * rng.standard_normal(), 2),
                          round(0.6 + 0.05 * rng.standard_normal() + 0.8 * drift, 2)])
    # depth-dependent samples inside the well during step 3, just above the deep sand
    depth_ft = 280.0
    comp = mixing.wellbore_composition(st.zone_flow[2], geo, [depth_ft * FT],
                                       np.column_stack([NITRATE_AS_N, ARSENIC_UG]))[0]
    ts = (start + pd.Timedelta(minutes=STEP_MIN * 2 + 150)).strftime("%Y-%m-%d %H:%M")
    # the deep-sand water is below the detection limit of the diluted depth sample (0.5 mg/L)
    nd = comp[0] < 0.5
    samples.append(["TH2-3Z", "S3", "nitrate",
                    "<0.5" if nd else round(comp[0] * (1 + rng.normal(0, 0.04)), 2),
                    "mg/L", "as N", "", 0.5, "" if nd else "4%", "U" if nd else "", ts,
                    (start + pd.Timedelta(hours=30)).strftime("%Y-%m-%d %H:%M"), "", depth_ft,
                    "cooled 4 C"])
    samples.append(["TH2-3Z", "S3", "arsenic", round(comp[1] * (1 + rng.normal(0, 0.06)), 1),
                    "ug/L", "", "", 1.0, "6%", "", ts, "2026-05-21", "", depth_ft, "HNO3 pH<2"])
    # flow logs: ambient and during step 3 (upward flow, gpm)
    log_depths_ft = [117, 170, 225, 275, 340]
    logs = []
    for name, q_gpm, step in (("ambient", 0, ""), ("pumped", RATES_GPM[2], "S3")):
        s = hydraulics.solve_wellbore_head(np.array([q_gpm * GPM]), g, h0)
        up = mixing.wellbore_flow(s.zone_flow[0], geo, np.array(log_depths_ft) * FT)
        for d, f in zip(log_depths_ft, up, strict=True):
            f_gpm = from_base(f, "rate", "gpm")
            noise = rng.normal(0, 0.03 * abs(f_gpm) + 0.3) if d != 340 else 0.0
            logs.append([name, step, q_gpm if step == "" else "", d, round(f_gpm + noise, 1)])
    OUT.mkdir(parents=True, exist_ok=True)
    pd.DataFrame(steps, columns=["step", "rate [gpm]", "start", "duration [min]",
                                 "pumping_level [ft]", "recovered_before"]).to_csv(OUT / "steps.csv", index=False)
    pd.DataFrame(samples, columns=["sample_id", "step", "analyte", "value", "unit", "basis",
                                   "nondetect", "detection_limit", "uncertainty", "qualifier",
                                   "sampled_at", "analyzed_at", "duplicate_of", "depth [ft]",
                                   "preservation"]).to_csv(OUT / "samples.csv", index=False)
    pd.DataFrame(field, columns=["step", "time", "temperature [degC]", "ph",
                                 "specific_conductance [uS/cm]", "dissolved_oxygen [mg/L]",
                                 "turbidity [NTU]"]).to_csv(OUT / "field.csv", index=False)
    pd.DataFrame(logs, columns=["log", "step", "rate [gpm]", "depth [ft]",
                                "upward_flow [gpm]"]).to_csv(OUT / "flowlogs.csv", index=False)
    print("shares at steps:\n", np.round(w, 3))
    print("pumping levels ft:", np.round(from_base(pwl, "length", "ft"), 1))
    print("nitrate:", np.round(w @ NITRATE_AS_N, 2), "arsenic:", np.round(w @ ARSENIC_UG, 2))
    print("flows gpm at steps:\n", np.round(from_base(st.zone_flow, "rate", "gpm"), 1))


if __name__ == "__main__":
    main()
