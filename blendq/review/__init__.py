"""Review: the lab and field checks of a project's samples and each sample's use in the fit.

May import: ``blendq.units``, ``blendq.errors``, ``blendq.chemistry`` and ``blendq.inputs``.
"""
