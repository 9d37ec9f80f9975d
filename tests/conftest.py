"""Test-suite wide settings."""

import os

from hypothesis import HealthCheck, settings

# Benchmarks under tests/perf are run by hand (python tests/perf/bench_core.py), never by pytest.
collect_ignore = ["perf"]

# Property tests: a quick profile by default; PLUMBLINE_HYPOTHESIS=thorough searches longer.
settings.register_profile(
    "default", max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
settings.register_profile(
    "thorough", max_examples=2000, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
settings.load_profile(os.environ.get("PLUMBLINE_HYPOTHESIS", "default"))
