"""Resource bounds of the Monte Carlo methods: one large group keeps memory bounded (issue 12, item 7).

The reference is the same computation with the whole draw held at once (batching must not change a
single number: numpy's Generator fills a (B, n) request row after row, so batches of rows draw the same
numbers, a property of numpy.random documented for C-order output) and tracemalloc for the memory.
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest

from logstats.core.moments import moments_by_codes
from logstats.stats import lnmean


def test_bootstrap_batches_within_one_group_give_the_same_interval(monkeypatch):
    x = np.random.default_rng(3).lognormal(1.0, 0.7, 3000)
    codes = np.zeros(x.size, dtype=np.intp)
    m = moments_by_codes(x, codes, 1)
    whole = lnmean.lognormal_mean(m, method="bootstrap", n_draws=400, random_state=5, values=x, codes=codes)
    monkeypatch.setattr(lnmean, "_DRAW_BUDGET", 7000)  # about two resamples per batch
    batched = lnmean.lognormal_mean(m, method="bootstrap", n_draws=400, random_state=5, values=x,
                                    codes=codes)
    np.testing.assert_array_equal(batched["ci_low"], whole["ci_low"])
    np.testing.assert_array_equal(batched["ci_high"], whole["ci_high"])


def test_bootstrap_of_one_large_group_stays_within_its_memory_bound():
    n, draws = 100_000, 1_000  # held at once this would be 0.8 GB of float64 draws
    x = np.random.default_rng(4).lognormal(0.0, 0.5, n)
    codes = np.zeros(n, dtype=np.intp)
    m = moments_by_codes(x, codes, 1)
    tracemalloc.start()
    try:
        res = lnmean.lognormal_mean(m, method="bootstrap", n_draws=draws, random_state=1, values=x,
                                    codes=codes)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 120e6, f"peak {peak / 1e6:.0f} MB"
    # the log-normal mean of LN(0, 0.5) is exp(0.125) (NIST/SEMATECH e-Handbook formula)
    assert res["ci_low"][0] < np.exp(0.125) * 1.01 and res["ci_high"][0] > np.exp(0.125) * 0.99


@pytest.mark.parametrize("method", ["gci"])
def test_gci_of_one_group_with_many_draws_is_bounded(method):
    m = moments_by_codes(np.random.default_rng(2).lognormal(size=50), np.zeros(50, dtype=np.intp), 1)
    tracemalloc.start()
    try:
        lnmean.lognormal_mean(m, method=method, n_draws=2_000_000, random_state=0)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 400e6, f"peak {peak / 1e6:.0f} MB"
