"""Test-suite wide settings."""

# Benchmarks under tests/perf are run by hand (python tests/perf/bench_core.py), never by pytest.
collect_ignore = ["perf"]
