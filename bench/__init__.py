"""Benchmark scripts (run from the project root, e.g. `python -m bench.fit_ratio`); results in RESULTS.md."""
