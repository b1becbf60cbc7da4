"""Core layer (numpy only): the log transform with its bad-value policy, and the log-moments."""

from logstats.core.moments import LogMoments, combine_moments, moments_along, moments_by_codes, reduce_moments
from logstats.core.transform import LogstatsWarning, exp_values, log_values, to_logs

__all__ = [
    "LogMoments",
    "LogstatsWarning",
    "combine_moments",
    "exp_values",
    "log_values",
    "moments_along",
    "moments_by_codes",
    "reduce_moments",
    "to_logs",
]
