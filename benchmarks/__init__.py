"""Benchmarks that print figures from the code users run (`olibra bench ...`); never timed tests."""
