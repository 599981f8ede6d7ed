"""Write a commented template project for a new well.

:func:`write_template` writes ``project.toml`` and one CSV per table, each with its header row
and one or two example rows of invented values, so a user can replace the numbers with their
own. The template loads with :func:`blendq.inputs.loader.load_project` as written.
"""

from __future__ import annotations

from pathlib import Path

from blendq.errors import InputError

PROJECT_TOML = """\
# blendq project file. Every physical quantity is a string with its unit ("185 ft", "350 gpm",
# "1500 ft2/d"); plain numbers are only for dimensionless values (skin, storativity, margin).
# Depths are measured downward from the datum. `blendq docs input-files` prints the full
# format. All values below are invented examples: replace them with your own.

[project]
name = "Example well, step test"      # title used in the report
display_units = "US"                  # "US" (ft, gpm), "SI" (m, m3/d) or "SI-L/s" (m, L/s)

[well]
name = "Example well 1"
location = "Example well field"       # free text
datum = "top of casing"               # what depths are measured from
well_radius = "6 in"                  # effective screen radius
pump_intake_depth = "160 ft"          # depth of the pump intake during the test
# operating_intake_depth = "180 ft"   # intake for operation, if it differs from the test's
submergence = "10 ft"                 # water depth required above the intake
rate_min = "100 gpm"                  # the pump's usable range
rate_max = "500 gpm"
demand = "300 gpm"                    # rate the system would like (optional)
well_loss = "0 s2/ft5"                # Jacob's C (s = C Q^2), "0 s2/ft5" when unknown
keep_above_screen = true              # also keep the pumping level above the top zone
radius_of_influence = "1000 ft"       # R for steady (Thiem) conductances (optional)

# One [[zones]] table per screened zone or open interval (any order; blendq sorts them).
# Give transmissivity or conductivity (not both); storativity, skin, nonlinear_loss and
# conductance are optional. Entrance losses at a zone (optional): linear_loss = "0.5 s/ft**2"
# and nonlinear_loss = "2 s2/ft5" with loss_exponent = 2 (1 to 3.5; for another exponent P
# give the coefficient in time^P/length^(3P-1), e.g. "1e-6 d**2.5/m**6.5").
# keep_level_above = true makes the zone's top a hard limit on the pumping level.
[[zones]]
name = "Upper sand"
top = "170 ft"
bottom = "210 ft"
static_level = "82 ft"                # depth to the zone's static water level
transmissivity = "1200 ft2/d"
storativity = 1e-4
skin = 0

[[zones]]
name = "Lower gravel"
top = "240 ft"
bottom = "300 ft"
static_level = "86 ft"
conductivity = "25 ft/d"
storativity = 2e-4
skin = 1.5

# Tables (paths relative to this file). Only steps is required. An .xlsx workbook may name
# its worksheet: samples = { file = "lab.xlsx", sheet = "Results" }.
# The example steps.csv has only two steps: `blendq check` and `blendq window` warn that a
# window resting on fewer sampled steps than settings.min_window_steps is thin data.
[tables]
steps = "steps.csv"
samples = "samples.csv"
flowlogs = "flowlogs.csv"
levels = "levels.csv"
field = "field.csv"
# Optional, for the years ahead: routine monitoring results and the pump's rate log
# (`blendq docs input-files`, sections history and pumplog).
# history = "history.csv"
# pumplog = "pumplog.csv"

# How long the well stood idle before the first step, and before a compliance sample in
# operation (crossflow memory: water a thief zone takes in at rest comes back first).
# [test]
# idle_time_before = "12 h"
# idle_time_before_sample = "8 h"

[settings]
limit_sets = ["US-EPA"]               # any of "US-EPA", "WHO", "EU"
margin = 0.8                          # stay under 80 % of each limit, your own limits below
                                      # included (a utility's policy)
exceedance_probability = 0.05         # largest acceptable chance of exceeding margin x limit
interval = 0.9                        # central probability of reported intervals
horizon = "365 d"                     # operating time for transient conductances
draws = 1000                          # posterior draws
seed = 1                              # random seed (results repeat exactly)
conductance_model = "auto"            # "auto", "steady", "transient", "given" or "flowlog"
temporal_cv = 0.10                    # sample-to-sample variation of the water at a fixed
                                      # rate (common practice); estimate it from the well's
                                      # monitoring history, per analyte in [settings.temporal_cv]
min_window_steps = 3                  # fewest steps with lab results before check and window
                                      # warn of thin data (common practice)

[settings.qa]                         # options of the lab and field review (free table)

# Your own limits, in addition to the named sets (optional). The margin applies to them too:
# this 8 mg/L target is held below 0.8 x 8 = 6.4 mg/L as N (check and window say so). If 8 mg/L
# is already the level to operate below, give the value it was derived from (8 / 0.8 = 10).
[[limits]]
analyte = "nitrate"
value = "8 mg/L"
basis = "as N"
authority = "Example water system"
kind = "operating target"
compliance = "single sample"          # or "single sample with confirmation", "annual mean"

# Judge a named set's limit on another statistic (optional):
# [[limits]]
# analyte = "arsenic"
# authority = "US-EPA"
# compliance = "single sample"

# Options to compare (optional; `blendq docs scenarios` describes them); each needs a unique
# name:
# [[scenarios]]
# name = "Seal the lower gravel"
# seal = ["Lower gravel"]
#
# [[scenarios]]
# name = "Blend 100 gpm from the spring"
# blend = { rate = "100 gpm", nitrate = "1 mg/L as N", arsenic = "0.5 ug/L" }

# Plan the step test with `blendq plan` (optional; `blendq docs input-files`, section [plan]):
# unit costs, and each zone's prior ranges (read as +-2 sd).
# [plan]
# budget = 12000
# min_step_duration = "2 h"
#
# [[plan.zones]]
# zone = "Upper sand"
# transmissivity = ["800 ft2/d", "2000 ft2/d"]
# nitrate = ["2 mg/L as N", "8 mg/L as N"]
# arsenic = ["1 ug/L", "6 ug/L"]
#
# [[plan.zones]]
# zone = "Lower gravel"
# transmissivity = ["1000 ft2/d", "3000 ft2/d"]
# nitrate = ["0.5 mg/L as N", "3 mg/L as N"]
# arsenic = ["3 ug/L", "12 ug/L"]
"""

TABLES = {
    "steps.csv": """\
step,rate [gpm],start,duration [min],pumping_level [ft]
1,150,2025-06-02 08:00,120,101.5
2,300,2025-06-02 10:00,120,118.2
""",
    "samples.csv": """\
sample_id,step,analyte,value,unit,basis,detection_limit,uncertainty,sampled_at,analyzed_at,duplicate_of,depth [ft],preservation
EX-1,1,nitrate,23.2,mg/L,as NO3,0.1,5%,2025-06-02 09:55,2025-06-03 09:00,,,cooled
EX-1,1,arsenic,5.3,ug/L,,1,0.4,2025-06-02 09:55,2025-06-20,,,HNO3 pH<2
EX-2,2,nitrate,4.9,mg/L,as N,0.02,5%,2025-06-02 11:55,2025-06-03 09:00,,,cooled
EX-2,2,arsenic,5.5,ug/L,,1,0.4,2025-06-02 11:55,2025-06-20,,,HNO3 pH<2
""",
    "flowlogs.csv": """\
log,step,rate [gpm],depth [ft],upward_flow [gpm]
ambient,,0,225,-8
pumped,2,300,225,190
""",
    "levels.csv": """\
time,level [ft]
2025-06-02 07:55,84.0
2025-06-02 09:59,101.5
""",
    "field.csv": """\
step,time,temperature [degC],ph,specific_conductance [uS/cm],dissolved_oxygen [mg/L],turbidity [NTU]
1,2025-06-02 09:45,15.1,7.31,540,5.2,0.8
1,2025-06-02 09:55,15.1,7.30,538,5.2,0.6
""",
}


def write_template(folder: str | Path) -> list[Path]:
    """Write a template project into ``folder`` (created if missing).

    Parameters
    ----------
    folder : str or Path
        Where to write ``project.toml`` and the CSV tables.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    InputError
        If any of the files already exists (nothing is written then), or ``folder`` is a file.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{folder} is a file, not a folder", file=folder.name)
    contents = {"project.toml": PROJECT_TOML, **TABLES}
    for name in contents:
        if (folder / name).exists():
            raise InputError(f"already exists in {folder}; blendq will not overwrite it "
                             "(choose an empty folder)", file=name)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, text in contents.items():
        path = folder / name
        with path.open("x", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
        written.append(path)
    return written
