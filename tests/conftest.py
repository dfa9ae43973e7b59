"""Test-suite settings shared by every test module.

Property tests (hypothesis) are derandomized by default, so the suite is
repeatable: the same examples run on every machine and in CI. For a longer,
exploring run (e.g. before a release), choose another profile:

    HYPOTHESIS_PROFILE=explore .venv/bin/python -m pytest tests/

A failure found while exploring becomes an ``@example`` regression in its test.
"""

from __future__ import annotations

import os

from hypothesis import HealthCheck, settings

settings.register_profile(
    "repeatable", derandomize=True, suppress_health_check=[HealthCheck.too_slow], deadline=None
)
settings.register_profile(
    "explore", max_examples=2000, suppress_health_check=[HealthCheck.too_slow], deadline=None
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))
