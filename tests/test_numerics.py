"""Numerics at the edges: a 1e8-value merge, float32 inputs, tiny n quantiles."""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
from scipy import stats

import logstats
from logstats.core.moments import combine_moments, moments_along

mpmath.mp.dps = 50


def test_hundred_million_values_merged_match_mpmath():
    # 10,000 chunks of 10,000 values: chunk k is the base sample times 2**(k % 8) (exact in binary), so
    # the 50-digit reference follows from the base sample alone: ln(x 2^j) = ln x + j ln 2 (mpmath).
    base = np.random.default_rng(0).lognormal(3.0, 0.01, 10_000)  # small spread: cancellation matters
    js = np.arange(10_000) % 8
    parts = [moments_along(base * 2.0 ** j) for j in range(8)]
    merged = combine_moments([parts[j] for j in js])
    logs = [mpmath.log(mpmath.mpf(float(v))) for v in base]
    n = len(logs)
    mb = mpmath.fsum(logs) / n
    m2b = mpmath.fsum([(y - mb) ** 2 for y in logs])
    ln2 = mpmath.log(2)
    total_mean = mb + mpmath.fsum([mpmath.mpf(int(j)) for j in js]) * ln2 / len(js)
    total_m2 = len(js) * m2b + n * mpmath.fsum([(mb + int(j) * ln2 - total_mean) ** 2 for j in js])
    assert int(merged.n) == 100_000_000
    assert float(merged.mean_log) == pytest.approx(float(total_mean), rel=1e-14)
    assert float(merged.m2_log) == pytest.approx(float(total_m2), rel=1e-11)


def test_float32_is_computed_in_float64():
    x32 = np.random.default_rng(1).lognormal(2.0, 0.5, 1000).astype(np.float32)
    # reference: scipy on the same values promoted to float64 (documented: float32 input, float64 math)
    assert logstats.gmean(x32) == pytest.approx(stats.gmean(x32.astype(np.float64)), rel=1e-14)
    assert isinstance(logstats.gmean(x32), float)


@pytest.mark.parametrize("n", [2, 3])
def test_tiny_n_t_quantiles(n):
    # scipy.stats.t.ppf with n-1 degrees of freedom (t(0.975, 1) = 12.706..., from memory, checked by scipy)
    x = np.array([1.0, 3.0, 9.0][:n])
    s = logstats.summary(x)
    res = stats.ttest_1samp(np.log(x), 0.0).confidence_interval()
    assert s["ci_low"] == pytest.approx(np.exp(res.low), rel=1e-12)
    assert s["ci_high"] == pytest.approx(np.exp(res.high), rel=1e-12)
    if n == 2:
        assert stats.t.ppf(0.975, 1) == pytest.approx(12.706, abs=1e-3)
