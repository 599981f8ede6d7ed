"""Inputs: the project file, the tables, the loader into base units and the template project.

May import: ``blendq.units``, ``blendq.errors`` and ``blendq.chemistry``.
"""
