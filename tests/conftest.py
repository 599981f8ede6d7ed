"""Shared test settings and fixtures."""

from __future__ import annotations

import os

from hypothesis import settings

# No per-example deadline (a first call may pay for imports or compilation). Under CI the
# examples are derandomised so that a run can be repeated exactly.
settings.register_profile("blendq", deadline=None)
settings.register_profile("blendq-ci", deadline=None, derandomize=True)
settings.load_profile("blendq-ci" if os.environ.get("CI") else "blendq")
