"""Decide: rate sweep, operating window, level check, scenarios, analysis, wellfield blend plan.

May import: the packages above it (units, errors, chemistry, inputs, review, well, fit).
"""
