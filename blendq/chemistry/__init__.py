"""Chemistry: the analyte catalogue (reporting bases, molar masses, charges) and the limits.

May import: ``blendq.units`` and ``blendq.errors`` only.
"""
