"""Well physics: zone hydraulics, wellbore mixing, the well model, flow logs, step drawdown.

May import: ``blendq.units``, ``blendq.errors``, ``blendq.chemistry`` and ``blendq.inputs``.
"""
