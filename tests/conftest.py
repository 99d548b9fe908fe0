"""Test-suite settings."""

from __future__ import annotations

import os

import pytest
from hypothesis import settings

# The shared checks in helpers.py assert; rewrite them as pytest rewrites test modules,
# so that a failure there reports the compared values.
pytest.register_assert_rewrite("helpers")

# In CI the property tests draw a fixed, reproducible set of examples: a submission
# must not pass or fail by chance. Locally they explore new examples on every run.
settings.register_profile("ci", derandomize=True, deadline=None)
if os.environ.get("CI"):
    settings.load_profile("ci")
