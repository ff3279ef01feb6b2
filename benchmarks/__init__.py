"""Benchmarks run by `make bench`. Figures are ratios measured in one run, never bare seconds."""
