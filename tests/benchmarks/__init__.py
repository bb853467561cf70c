"""Benchmarks: each figure is a ratio to a baseline measured in the same run (see harness.py)."""
