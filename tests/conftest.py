"""Shared pytest set-up: hypothesis profiles (JIT compiles are slow, so no deadlines, few examples)."""

import os

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
