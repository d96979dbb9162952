"""Benchmarks, run side by side with a naive baseline: ``make bench``."""
