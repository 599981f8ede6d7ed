"""Shared test settings and fixtures."""

from __future__ import annotations

import os

from hypothesis import settings

# No per-example deadline (a first call may pay for imports or compilation). Under CI the
# examples are derandomised so that a run can be repeated exactly.
settings.register_profile("blendq", deadline=None)
settings.register_profile("blendq-ci", deadline=None, derandomize=True)
settings.load_profile("blendq-ci" if os.environ.get("CI") else "blendq")

# Reports carry the date of the run and the PDF its real creation time unless SOURCE_DATE_EPOCH
# asks for a reproducible build (https://reproducible-builds.org/specs/source-date-epoch/).
# The tests that compare two runs byte for byte need that, so the suite sets it (the tests of
# the real date remove it with monkeypatch).
os.environ.setdefault("SOURCE_DATE_EPOCH", "1779840000")  # 2026-05-27 00:00 UTC
