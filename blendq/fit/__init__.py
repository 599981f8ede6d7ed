"""Fit: zone hydraulics and zone water quality from the test data, with their uncertainty.

May import: the packages above it (units, errors, chemistry, inputs, review, well).
"""
