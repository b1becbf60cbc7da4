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


@settings(max_examples=60, deadline=None)
@given(n=st.integers(0, 400), ngroups=st.integers(1, 40), seed=st.integers(0, 2**31 - 1))
def test_group_sorted_values_equal_the_lexsort_order(n, ngroups, seed):
    """numpy's lexsort is the reference: the sorted values and codes are exactly ``x[o], g[o]``."""
    from logstats.stats._common import group_sorted_values

    rng = np.random.default_rng(seed)
    codes = rng.integers(0, ngroups, n)
    # group sizes of every size class, ties, NaN (which sort last within their group)
    values = np.round(rng.lognormal(0.0, 2.0, n), int(rng.integers(0, 4)))
    values[rng.random(n) < 0.05] = np.nan
    order = np.lexsort((values, codes))
    xs, cs = group_sorted_values(values, codes, ngroups)
    np.testing.assert_array_equal(xs, values[order])
    np.testing.assert_array_equal(cs, codes[order])


def test_group_sorted_values_with_one_large_group_and_many_small_ones():
    from logstats.stats._common import group_sorted_values

    rng = np.random.default_rng(5)
    codes = np.concatenate([np.zeros(50_000, dtype=np.int64), rng.integers(1, 70_000, 20_000)])
    rng.shuffle(codes)
    values = rng.lognormal(size=codes.size)
    order = np.lexsort((values, codes))
    xs, cs = group_sorted_values(values, codes, 70_000)
    np.testing.assert_array_equal(xs, values[order])
    np.testing.assert_array_equal(cs, codes[order])
