"""Shared pytest set-up: hypothesis profiles (JIT compiles are slow, so no deadlines, few examples), long checks."""

import os

import pytest
from hypothesis import HealthCheck, settings

# "ci" (default): small and deterministic enough for the full suite to stay fast.
settings.register_profile(
    "ci",
    max_examples=15,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
# "dev": more examples for local bug hunting (HYPOTHESIS_PROFILE=dev).
settings.register_profile("dev", max_examples=200, deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))


def pytest_collection_modifyitems(config, items):
    """Skip the checks marked ``long`` (a minute or more each) unless INSTANTONKIT_LONG is set."""
    if os.environ.get("INSTANTONKIT_LONG"):
        return
    skip = pytest.mark.skip(reason="set INSTANTONKIT_LONG=1 (minutes)")
    for item in items:
        if "long" in item.keywords:
            item.add_marker(skip)
