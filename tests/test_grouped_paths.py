"""Grouped log-moments take one of two paths: run by run (``np.add.reduceat``) when rows come sorted or
blocked by group, one scatter-add per sum otherwise. Both must give the numbers of the reference, pandas
``groupby`` on ``np.log(x)`` (count, mean, var with ddof=0 times n), whatever the layout of the rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from logstats.core import groups
from logstats.core import moments as mom


def _codes(layout: str, n: int, ngroups: int, rng: np.random.Generator) -> np.ndarray:
    codes = rng.integers(0, ngroups, n)
    if layout == "sorted":
        return np.sort(codes)
    if layout == "blocked":  # plate after plate: each group's rows in a few long stretches
        block = np.repeat(rng.integers(0, ngroups, max(n // 50, 1)), 50)[:n]
        return np.concatenate([block, codes[: n - block.size]])
    return codes


def _pandas_reference(x: np.ndarray, codes: np.ndarray, ngroups: int) -> pd.DataFrame:
    use = (codes >= 0) & (x > 0)
    y = pd.Series(np.log(x[use]))
    out = y.groupby(codes[use]).agg(["count", "mean", "var"]).reindex(range(ngroups))
    out["m2"] = out["var"] * (out["count"] - 1)
    out.loc[out["count"] == 1, "m2"] = 0.0
    return out


@settings(max_examples=40, deadline=None)
@given(layout=st.sampled_from(["sorted", "blocked", "shuffled"]), n=st.integers(0, 30_000),
       ngroups=st.sampled_from([1, 7, 300]), bad=st.booleans(), seed=st.integers(0, 2**31 - 1))
def test_both_paths_equal_pandas_groupby(layout, n, ngroups, bad, seed):
    rng = np.random.default_rng(seed)
    codes = _codes(layout, n, ngroups, rng)
    x = rng.lognormal(3.0, 1.5, n)
    if bad and n:
        x[rng.random(n) < 0.05] = np.nan
        x[rng.random(n) < 0.02] = -1.0
        codes = np.where(rng.random(n) < 0.03, -1, codes)  # rows without a key
    ref = _pandas_reference(x, codes, ngroups)
    got = mom.moments_by_codes(x, codes, ngroups, where="x")
    np.testing.assert_array_equal(np.asarray(got.n), ref["count"].fillna(0).to_numpy())
    np.testing.assert_allclose(np.asarray(got.mean_log), ref["mean"].to_numpy(), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(np.asarray(got.m2_log), ref["m2"].to_numpy(), rtol=1e-10, atol=1e-10)
    assert int(np.asarray(got.n_missing).sum()) == int(np.count_nonzero(np.isnan(x) & (codes >= 0)))
    assert int(np.asarray(got.n_nonpositive).sum()) == int(np.count_nonzero((x <= 0) & (codes >= 0)))


@pytest.mark.parametrize("layout", ["sorted", "blocked", "shuffled"])
def test_run_path_and_scatter_path_agree_with_leading_axes(layout, monkeypatch):
    """A (3, N) block (channels x cells) by cell groups: the run path, forced off, gives the same
    numbers to rounding; the reference for both is pandas on each channel."""
    rng = np.random.default_rng(5)
    n, ngroups = 20_000, 40
    codes = _codes(layout, n, ngroups, rng)
    x = rng.lognormal(0.0, 1.0, (3, n))
    x[1, ::97] = np.nan
    runs = mom.moments_by_codes(x, codes, ngroups)
    monkeypatch.setattr(groups, "RUNS_MIN", 10**12)
    scatter = mom.moments_by_codes(x, codes, ngroups)
    for field in ("n", "mean_log", "m2_log", "n_missing"):
        np.testing.assert_allclose(np.asarray(getattr(runs, field)), np.asarray(getattr(scatter, field)),
                                   rtol=1e-12)
    for row in range(3):
        ref = _pandas_reference(x[row], codes, ngroups)
        np.testing.assert_allclose(np.asarray(runs.mean_log)[row], ref["mean"].to_numpy(), rtol=1e-12)


def test_runs_are_found_only_when_long():
    assert groups.find_runs(np.zeros(10, dtype=np.intp)) is None  # too short to be worth it
    sorted_codes = np.repeat(np.arange(100, dtype=np.intp), 100)
    starts, lengths = groups.find_runs(sorted_codes)
    np.testing.assert_array_equal(starts, np.arange(0, 10_000, 100))
    np.testing.assert_array_equal(lengths, np.full(100, 100))
    assert groups.find_runs(np.arange(10_000, dtype=np.intp) % 7) is None  # changes at every row


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 3000), size=st.integers(1, 50), ordered=st.booleans(), seed=st.integers(0, 2**31 - 1))
def test_group_sums_equal_bincount_and_take(n, size, ordered, seed):
    """Both paths of the grouped sums (run by run, and one scatter per value) against numpy's own
    ``np.bincount(weights=)`` and ``v[slot]``, with groups left empty anywhere (first, last, between);
    each path is forced in turn through the module's thresholds."""
    from logstats.core.groups import GroupSums

    rng = np.random.default_rng(seed)
    slot = rng.integers(0, size, n)
    if ordered:
        slot = np.sort(slot)
    w = rng.normal(size=n)
    v = rng.normal(size=size)
    saved = groups.RUNS_MIN, groups.RUN_LENGTH_MIN
    try:
        for runs_min, run_length, path in ((0, 1, True), (10**12, 4, False)):
            groups.RUNS_MIN, groups.RUN_LENGTH_MIN = runs_min, run_length
            sums = GroupSums(slot, size)
            assert sums.runs == path
            np.testing.assert_allclose(sums.sum(w), np.bincount(slot, weights=w, minlength=size),
                                       rtol=1e-12, atol=1e-12)
            np.testing.assert_array_equal(sums.counts, np.bincount(slot, minlength=size))
            np.testing.assert_array_equal(sums.spread(v), v[slot])
            np.testing.assert_array_equal(sums.spread(v, np.empty(n)), v[slot])
    finally:
        groups.RUNS_MIN, groups.RUN_LENGTH_MIN = saved


@settings(max_examples=40, deadline=None)
@given(n=st.integers(0, 2000), widths=st.lists(st.integers(1, 40), min_size=1, max_size=3),
       seed=st.integers(0, 2**31 - 1))
def test_occurring_keys_and_unique_rows_equal_numpy_unique(n, widths, seed):
    """Replicate and nesting keys are found by marking which occur; numpy's np.unique (sorting) is the
    reference, for flat keys and for rows (np.unique(axis=0))."""
    from logstats.core.groups import occurring_keys, unique_rows

    rng = np.random.default_rng(seed)
    rows = np.stack([rng.integers(0, w, n) for w in widths], axis=1).astype(np.int64)
    space = int(np.prod(widths))
    key = rows[:, 0] if rows.shape[1] == 1 else np.ravel_multi_index(rows.T, widths).astype(np.int64)
    uniq, inv = occurring_keys(key, space)
    ref_u, ref_inv = np.unique(key, return_inverse=True)
    np.testing.assert_array_equal(uniq, ref_u)
    np.testing.assert_array_equal(inv, ref_inv.ravel())
    uniq_r, inv_r = unique_rows(rows)
    ref_r, ref_rinv = np.unique(rows, axis=0, return_inverse=True)
    np.testing.assert_array_equal(uniq_r, ref_r)
    np.testing.assert_array_equal(inv_r, ref_rinv.ravel())
    # keys outside the stated space, or negative, fall back to the sort
    if n:
        bad = key.copy()
        bad[0] = -5
        np.testing.assert_array_equal(occurring_keys(bad, space)[0], np.unique(bad))


@pytest.mark.parametrize("layout", ["sorted", "shuffled"])
def test_location_only_moments_equal_the_full_pass(layout):
    """``spread=False`` (the geometric mean's one-pass moments) gives the counts and means of the full
    two-pass moments, along axes and by groups, with bad values; m2 is left undefined. The geometric
    mean itself is checked against scipy.stats.gmean (the reference library)."""
    from scipy import stats

    rng = np.random.default_rng(8)
    x = rng.lognormal(1.0, 1.0, (4, 30_000))
    x[2, ::50] = np.nan
    x[3, ::70] = 0.0
    codes = _codes(layout, x.shape[1], 25, rng)
    for full, one in [(mom.moments_by_codes(x, codes, 25), mom.moments_by_codes(x, codes, 25, spread=False)),
                      (mom.moments_along(x, axis=1), mom.moments_along(x, axis=1, spread=False)),
                      (mom.moments_along(x.T, axis=0), mom.moments_along(x.T, axis=0, spread=False))]:
        for field in ("n", "n_missing", "n_nonpositive"):
            np.testing.assert_array_equal(np.asarray(getattr(one, field)), np.asarray(getattr(full, field)))
        np.testing.assert_allclose(np.asarray(one.mean_log), np.asarray(full.mean_log), rtol=1e-13)
        assert np.isnan(np.asarray(one.m2_log)).all()
    along = mom.moments_along(x[:2], axis=1, spread=False)
    np.testing.assert_allclose(np.exp(np.asarray(along.mean_log)), stats.gmean(x[:2], axis=1), rtol=1e-13)


@pytest.mark.parametrize("bad", [np.nan, 0.0, -2.0, -np.inf, np.inf, None])
def test_logs_taken_block_by_block_find_bad_values_in_any_block(bad):
    """Long input is logged a block at a time with the blocks' sums telling clean input; a bad value in
    the last block must still be found (numpy's np.log and masks are the reference)."""
    from logstats.core import transform

    x = np.random.default_rng(9).lognormal(size=3 * transform.LOG_BLOCK + 17)
    if bad is not None:
        x[-3] = bad
    if bad == np.inf:
        with pytest.raises(ValueError, match=r"\+inf"):
            transform.to_logs(x, where="column 'x'")
        return
    lv = transform.to_logs(x)
    valid = np.isfinite(x) & (x > 0)
    np.testing.assert_array_equal(lv.y[valid], np.log(x[valid]))
    assert np.isnan(lv.y[~valid]).all()
    assert lv.clean == (bad is None)
    assert int(lv.nonpositive.sum()) == int(np.count_nonzero(x <= 0))
    assert int(lv.missing.sum()) == int(np.count_nonzero(np.isnan(x)))
