"""The shared (group, value) sort used by medians and Shapiro-Wilk equals numpy.lexsort's order of values
(the reference: ``np.lexsort((values, codes))``; ties among equal values may come in any order)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from logstats.stats._common import group_value_order


@settings(max_examples=60, deadline=None)
@given(n=st.integers(0, 300), ngroups=st.sampled_from([1, 3, 40, 70_000]), seed=st.integers(0, 2**31))
def test_group_value_order_sorts_like_lexsort(n, ngroups, seed):
    rng = np.random.default_rng(seed)
    codes = rng.integers(-1, ngroups, n)
    values = rng.choice([0.5, 1.0, 2.0, np.nan], n) if seed % 2 else rng.lognormal(size=n)
    ours = group_value_order(values, codes, ngroups)
    ref = np.lexsort((values, codes))
    np.testing.assert_array_equal(codes[ours], codes[ref])
    np.testing.assert_array_equal(values[ours], values[ref])
