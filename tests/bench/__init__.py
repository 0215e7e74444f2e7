"""Benchmarks (`make bench`): medians and ratios measured in one run; never part of `make test`."""
