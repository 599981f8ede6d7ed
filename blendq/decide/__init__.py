"""Decide: the rate sweep, the operating window, the level check, the scenarios, the analysis,
the wellfield batch, table, blending plan and the well modifications that would open one.

May import: the packages above it (units, errors, chemistry, inputs, review, well, fit).
"""
