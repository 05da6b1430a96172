"""Benchmarks (not tests): `python -m lapbench.perf.<name>`; each prints and writes results/perf/<name>.json."""
