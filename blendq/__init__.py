"""blendq: discharge quality against pumping rate for supply wells screened across several zones.

A planning aid, not a compliance determination. See ``docs/`` for methods and sources.
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
