"""Shared review parts: the median of the other samples used by the suspect-basis rule."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from blendq.review.rules import _median_without


@settings(max_examples=200, deadline=None)
@given(st.lists(st.sampled_from([0.5, 1.0, 2.0, 2.0, 3.5, 7.0, 11.0]), min_size=3, max_size=30),
       st.data())
def test_median_without_equals_numpy_median_of_what_is_left(values, data):
    """Reference: numpy.median of the array with the removed entries deleted (ties included)."""
    ordered = np.sort(np.array(values))
    k = data.draw(st.integers(0, len(values) - 2))
    removed_at = data.draw(st.lists(st.integers(0, len(values) - 1), min_size=k, max_size=k,
                                    unique=True))
    removed = ordered[removed_at]
    expected = np.median(np.delete(ordered, removed_at))
    np.testing.assert_allclose(_median_without(ordered, removed), expected, rtol=0, atol=1e-12)
