"""Benchmarks that print figures (run through `olibra bench ...`); never timed assertions in tests."""
