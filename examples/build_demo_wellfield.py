"""Build the invented demo wellfield in ``examples/wellfield/`` from the package demo.

Four wells of an invented utility (the Tamsett Hollow Water Board of the package demo) feed two
entry points. TH-2 is the package demo as shipped (with its monitoring history); the three
others are variants made by the demo's own generator (``build_demo_data.py``: blendq's forward
model with seeded lab, flow-log and level noise) with other zone chemistry and hydraulics, so
the wells differ:

- TH-5, nitrate-rich: more nitrate in the upper zones, little arsenic;
- TH-7, arsenic-leaning: little nitrate, arsenic rising with depth to well above the limit;
- TH-9, clean and low-yield: little of either, tighter zones, tested at lower rates.

Every name and number is invented. Run from the repository root:
``python examples/build_demo_wellfield.py`` (it rewrites ``examples/wellfield/``).
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import build_demo_data as gen  # noqa: E402

from blendq.api import demo_path  # noqa: E402

OUT = Path(__file__).resolve().parent / "wellfield"

#: the variants: zone table (name, top, bottom, static level ft, T ft2/d, S, skin), nitrate
#: [mg/L as N] and arsenic [ug/L] per zone, step rates [gpm], the rate range and demand of the
#: project [gpm], and the sample-id prefix
VARIANTS = {
    "TH-5": dict(
        zones=[("Upper sand", 110, 150, 57.0, 2800.0, 2e-4, 0.0),
               ("Silty sand", 175, 205, 60.5, 900.0, 2e-4, 0.0),
               ("Gravel", 230, 255, 62.0, 3200.0, 2e-4, 2.0),
               ("Deep sand", 285, 320, 65.0, 1800.0, 2e-4, 0.0)],
        nitrate=[19.0, 9.0, 4.0, 0.6], arsenic=[1.0, 2.0, 3.0, 6.0],
        rates=[200, 350, 500, 650, 800], rate_range=(150, 900), demand=500, prefix="TH5"),
    "TH-7": dict(
        zones=[("Upper sand", 125, 160, 59.0, 1800.0, 2e-4, 0.0),
               ("Silty sand", 190, 220, 62.0, 1200.0, 2e-4, 0.0),
               ("Gravel", 245, 270, 64.0, 4000.0, 2e-4, 4.0),
               ("Deep sand", 295, 340, 67.0, 3000.0, 2e-4, 0.0)],
        nitrate=[4.0, 2.0, 1.0, 0.2], arsenic=[1.0, 5.0, 9.0, 18.0],
        rates=[200, 350, 500, 650, 800], rate_range=(150, 900), demand=500, prefix="TH7"),
    "TH-9": dict(
        zones=[("Upper sand", 120, 150, 58.0, 700.0, 2e-4, 0.0),
               ("Silty sand", 180, 205, 61.0, 250.0, 2e-4, 0.0),
               ("Gravel", 235, 255, 63.0, 900.0, 2e-4, 1.0),
               ("Deep sand", 285, 320, 66.0, 600.0, 2e-4, 0.0)],
        nitrate=[3.5, 2.0, 1.0, 0.3], arsenic=[1.0, 2.0, 3.0, 4.0],
        rates=[100, 175, 250, 325, 400], rate_range=(80, 450), demand=300, prefix="TH9"),
}

WELLFIELD_TOML = """\
# Demo wellfield of blendq -- an invented utility in an invented place. Every number here is
# made up for the demonstration; examples/build_demo_wellfield.py builds the well projects.

[wellfield]
name = "Tamsett Hollow well field (invented)"
display_units = "US"
margin = 0.9          # the blend at each entry point stays under 90 % of each limit
probability = 0.95    # with this probability over the wells' predictive draws
seed = 20261202

[[entry_points]]
name = "North plant"
demand = "650 gpm"

[[entry_points]]
name = "South plant"
demand = "700 gpm"

[[wells]]
name = "TH-2"
project = "TH-2"
entry_point = "North plant"
x = "0 ft"
y = "0 ft"

[[wells]]
name = "TH-5"
project = "TH-5"
entry_point = "North plant"
x = "1400 ft"
y = "300 ft"

[[wells]]
name = "TH-7"
project = "TH-7"
entry_point = "South plant"
x = "600 ft"
y = "-2100 ft"
rate_max = "850 gpm"   # the South plant's transmission main takes no more from TH-7

[[wells]]
name = "TH-9"
project = "TH-9"
entry_point = "South plant"
x = "2300 ft"
y = "-1800 ft"

# water bought from a neighbouring (invented) utility through an interconnection
[[sources]]
name = "Interconnection"
entry_point = "South plant"
max_rate = "200 gpm"
nitrate = "1.5 mg/L as N"
arsenic = "2 ug/L"

# aquifer properties for the wells' drawdown at one another (Theis, 180 days of pumping)
[interference]
transmissivity = "9000 ft2/d"
storativity = 2e-4
time = "180 d"
"""


def _project_toml(name: str, v: dict) -> str:
    """The demo's project file with the variant's well, zones and rates."""
    text = (demo_path() / "project.toml").read_text(encoding="utf-8")
    head, _, rest = text.partition("[[zones]]")
    _, _, tail = rest.partition("# The step test")
    head = head.replace('name = "TH-2 step-rate test, May 2026"',
                        f'name = "{name} step-rate test, May 2026"')
    head = head.replace('name = "TH-2"', f'name = "{name}"')
    lo, hi = v["rate_range"]
    head = head.replace('rate_min = "150 gpm"', f'rate_min = "{lo} gpm"')
    head = head.replace('rate_max = "900 gpm"', f'rate_max = "{hi} gpm"')
    head = head.replace('demand = "600 gpm"', f'demand = "{v["demand"]} gpm"')
    zones = []
    for zname, top, bottom, static, trans, stor, skin in v["zones"]:
        # priors a little off the truth, as planning values are
        prior = round(trans * 1.15, -1)
        zones.append(f'[[zones]]\nname = "{zname}"\ntop = "{top} ft"\nbottom = "{bottom} ft"\n'
                     f'static_level = "{static} ft"\ntransmissivity = "{prior:g} ft2/d"\n'
                     f"storativity = {stor:g}\n" + (f"skin = {skin:g}\n" if skin else "") + "\n")
    tail = tail.replace('history = "history.csv"        # ten years of monthly compliance '
                        'samples (invented)\n', "")
    tail = tail.replace('pumplog = "pumplog.csv"        # the pump\'s rate over those years '
                        "(invented)\n", "")
    tail = tail.replace("forecast_years = 10            # the years ahead forecast from the "
                        "monitoring history\n", "")
    tail = tail.partition("[[scenarios]]")[0].rstrip() + "\n"
    tail = tail.replace("TH-2", name)
    head = ("# A well of blendq's demo wellfield -- invented, like every number here;\n"
            "# examples/build_demo_wellfield.py builds it from the package demo.\n"
            + head.split("\n", 2)[2])
    grid = max(1000, int(1.25 * hi))
    tail = tail.replace('rate_grid_max = "1000 gpm"', f'rate_grid_max = "{grid} gpm"')
    return head + "".join(zones) + "# The step test" + tail


def build_variant(name: str, v: dict) -> None:
    folder = OUT / name
    folder.mkdir(parents=True, exist_ok=True)
    gen.OUT = folder
    gen.ZONES = v["zones"]
    gen.NITRATE_AS_N = np.asarray(v["nitrate"], float)
    gen.ARSENIC_UG = np.asarray(v["arsenic"], float)
    gen.RATES_GPM = v["rates"]
    gen.main()
    samples = folder / "samples.csv"
    samples.write_text(samples.read_text(encoding="utf-8").replace("TH2-", v["prefix"] + "-"),
                       encoding="utf-8")
    (folder / "project.toml").write_text(_project_toml(name, v), encoding="utf-8")


def main() -> None:
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir(parents=True)
    shutil.copytree(demo_path(), OUT / "TH-2")
    for name, v in VARIANTS.items():
        print(f"--- {name}")
        build_variant(name, v)
    (OUT / "wellfield.toml").write_text(WELLFIELD_TOML, encoding="utf-8")
    print(f"written: {OUT}")


if __name__ == "__main__":
    main()
