"""One table pairing each public moment-based statistic with its outside reference.

Each entry: (our function of a 1-D positive array, the reference function, the source). The table
drives ``tests/test_estimate.py`` (array level) and ``tests/test_pandas.py`` (grouped, per group).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

import logstats


def _ci(x, confidence_level=0.95):
    res = stats.ttest_1samp(np.log(x), 0.0).confidence_interval(confidence_level)
    return np.exp(res.low), np.exp(res.high)


REFERENCE_TABLE = {
    "gmean": (
        lambda x: logstats.gmean(x),
        lambda x: stats.gmean(x),
        "scipy.stats.gmean",
    ),
    "gsd": (
        lambda x: logstats.gsd(x),
        lambda x: stats.gstd(x),  # ddof=1 by default in scipy
        "scipy.stats.gstd (ddof=1)",
    ),
    "gcv": (
        lambda x: logstats.gcv(x),
        lambda x: np.sqrt(np.exp(np.var(np.log(x), ddof=1)) - 1.0),
        "Kirkwood (1979) formula sqrt(exp(s^2)-1) (cited in REFERENCES.md, not read)",
    ),
    "ci_low": (
        lambda x: logstats.summary(x)["ci_low"],
        lambda x: _ci(x)[0],
        "scipy.stats.ttest_1samp(ln x).confidence_interval(), back-transformed",
    ),
    "ci_high": (
        lambda x: logstats.summary(x)["ci_high"],
        lambda x: _ci(x)[1],
        "scipy.stats.ttest_1samp(ln x).confidence_interval(), back-transformed",
    ),
}


# The outside reference of every declared statistic, as methods.py states it (the same text the
# generated docstrings and the benchmarks show); tests/test_contract.py checks none is missing.
from logstats.methods import METHODS  # noqa: E402

DECLARED_REFERENCES = {name: m.reference for name, m in METHODS.items() if m.reduction != "transform"}
