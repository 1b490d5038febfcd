"""Benchmarks of olibra: commands that print figures (`olibra bench ...`), never timed tests.

They run the code users run: the real job runner into a real catalogue, the real index and
fingerprint code, a real web server. Loaded only by `olibra bench`, never by the core.
"""
