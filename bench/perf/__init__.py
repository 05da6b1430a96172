"""Benchmarks (not tests): `python -m bench.perf.<name>`; each prints and writes results/perf/<name>.json."""
