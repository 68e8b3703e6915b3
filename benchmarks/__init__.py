"""Benchmarks of sweep (not part of the installed package): ``python benchmarks/run.py --json``."""
