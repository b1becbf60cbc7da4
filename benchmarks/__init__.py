"""Benchmarks of logstats against scipy per group and hand-written idioms (not tests; see README.md)."""
