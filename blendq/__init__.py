"""blendq: discharge quality against pumping rate for supply wells screened across several zones.

A planning aid, not a compliance determination. See ``docs/`` for methods and sources.

The public Python API (``blendq.analyse``, ``blendq.load_project``, ``blendq.demo_path`` ...;
see ``docs/api.md``) lives in :mod:`blendq.api` and is loaded on first use, so that
``import blendq`` and ``blendq --help`` stay fast (no numpy, pandas, scipy or matplotlib).
"""

__version__ = "0.1.0"

CAUTIONS = (
    "blendq is a planning aid, not a compliance determination.",
    "Compliance is judged on samples taken as the regulating agency requires.",
    "Lab results carry uncertainty; zone estimates carry more.",
    "A licensed hydrogeologist or engineer reviews any operating change; local codes and "
    "permits govern well work, sealing and pump changes.",
    "Pumping below the top of a screen or without intake submergence risks pump damage, air "
    "entrainment and faster well deterioration.",
)

#: names of :mod:`blendq.api` offered at the top of the package (loaded on first use, PEP 562)
_API_NAMES = (
    "ComparisonResult",
    "OperatingWindow",
    "Plots",
    "Result",
    "analyse",
    "build_scenarios",
    "check_report_folder",
    "demo_path",
    "load_project",
    "parse_rates",
    "plan_test",
    "pump_settings",
    "PumpPlan",
    "StepTestPlan",
    "WellfieldResult",
    "analyse_wellfield",
    "to_json",
)

__all__ = ["CAUTIONS", "__version__", *_API_NAMES]


def __getattr__(name: str):
    if name in _API_NAMES:
        from blendq import api

        return getattr(api, name)
    raise AttributeError(f"module 'blendq' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted({*globals(), *_API_NAMES})
