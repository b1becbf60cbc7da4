"""Hypothesis properties of the moment-based statistics against a naive numpy reference."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

import logstats
from logstats.core.moments import combine_moments, moments_along, moments_by_codes
from tests.conftest import requires_dask

positive = st.floats(min_value=1e-150, max_value=1e150, allow_nan=False, allow_infinity=False)
samples = arrays(np.float64, st.integers(2, 60), elements=positive)
scales = st.floats(min_value=1e-100, max_value=1e100)


@settings(max_examples=60, deadline=None)
@given(samples, scales)
def test_scale_equivariance(x, c):
    # gmean(c x) = c gmean(x); gsd(c x) = gsd(x) (definition, common practice)
    assert logstats.gmean(c * x) == pytest.approx(c * logstats.gmean(x), rel=1e-9, abs=0)
    assert logstats.gsd(c * x) == pytest.approx(logstats.gsd(x), rel=1e-6, abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(samples, st.randoms(use_true_random=False))
def test_permutation_invariance(x, rnd):
    perm = list(range(len(x)))
    rnd.shuffle(perm)
    a, b = moments_along(x), moments_along(x[perm])
    assert a.n == b.n
    assert float(a.mean_log) == pytest.approx(float(b.mean_log), rel=1e-12, abs=1e-12)
    assert float(a.m2_log) == pytest.approx(float(b.m2_log), rel=1e-9, abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(samples)
def test_matches_naive_numpy(x):
    # naive reference: numpy on np.log(x), which is fine for these magnitudes
    y = np.log(x)
    assert logstats.gmean(x) == pytest.approx(np.exp(y.mean()), rel=1e-12, abs=0)
    assert logstats.gsd(x) == pytest.approx(np.exp(y.std(ddof=1)), rel=1e-9)


@settings(max_examples=60, deadline=None)
@given(samples, st.sampled_from(["e", 2, 10]))
def test_log_exp_round_trip(x, base):
    y = logstats.log(x, base=base)
    np.testing.assert_allclose(logstats.exp(y, base=base), x, rtol=1e-12)


@settings(max_examples=60, deadline=None)
@given(samples, st.lists(st.integers(0, 60), min_size=0, max_size=4))
def test_combine_of_split_equals_whole(x, cuts):
    cuts = sorted(c % (len(x) + 1) for c in cuts)
    parts = [moments_along(p) for p in np.split(x, cuts)]
    whole = moments_along(x)
    merged = combine_moments(parts)
    assert merged.n == whole.n
    assert float(merged.mean_log) == pytest.approx(float(whole.mean_log), rel=1e-12, abs=1e-12)
    assert float(merged.m2_log) == pytest.approx(float(whole.m2_log), rel=1e-8, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(samples, samples, samples)
def test_merge_associativity(a, b, c):
    ma, mb, mc = moments_along(a), moments_along(b), moments_along(c)
    left = combine_moments([combine_moments([ma, mb]), mc])
    right = combine_moments([ma, combine_moments([mb, mc])])
    assert float(left.mean_log) == pytest.approx(float(right.mean_log), rel=1e-12, abs=1e-12)
    assert float(left.m2_log) == pytest.approx(float(right.m2_log), rel=1e-9, abs=1e-9)


@settings(max_examples=40, deadline=None)
@given(samples, st.integers(1, 5), st.randoms(use_true_random=False))
def test_grouped_equals_per_group(x, ngroups, rnd):
    codes = np.array([rnd.randrange(ngroups) for _ in range(len(x))])
    g = moments_by_codes(x, codes, ngroups)
    for k in range(ngroups):
        sub = moments_along(x[codes == k])
        assert g.n[k] == sub.n
        if sub.n:
            assert g.mean_log[k] == pytest.approx(float(sub.mean_log), rel=1e-12, abs=1e-12)


@requires_dask
@settings(max_examples=25, deadline=None)
@given(arrays(np.float64, st.tuples(st.integers(2, 40), st.integers(1, 4)), elements=positive),
       st.integers(1, 7))
def test_dask_equals_numpy(x, chunk):
    import dask.array as da

    lazy = logstats.summary(da.from_array(x, chunks=(chunk, 2)), axis=0)
    eager = logstats.summary(x, axis=0)
    for k in ["n", "gmean", "gsd", "ci_low", "ci_high"]:
        np.testing.assert_allclose(np.asarray(lazy[k]), eager[k], rtol=1e-9)


@settings(max_examples=30, deadline=None)
@given(samples)
def test_pandas_counts_add_up(x):
    x = x.copy()
    x[::3] = 0.0
    x[1::5] = np.nan
    df = pd.DataFrame({"g": np.arange(len(x)) % 3, "x": x})
    out = df.logstats.summary(by="g", columns="x", nonpositive="drop")
    assert (out["n"] + out["n_missing"] + out["n_nonpositive"]).sum() == len(x)
