"""Grouped log-moments take one of two paths: run by run (``np.add.reduceat``) when rows come sorted or
blocked by group, one scatter-add per sum otherwise. Both must give the numbers of the reference, pandas
``groupby`` on ``np.log(x)`` (count, mean, var with ddof=0 times n), whatever the layout of the rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

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
    monkeypatch.setattr(mom, "RUNS_MIN", 10**12)
    scatter = mom.moments_by_codes(x, codes, ngroups)
    for field in ("n", "mean_log", "m2_log", "n_missing"):
        np.testing.assert_allclose(np.asarray(getattr(runs, field)), np.asarray(getattr(scatter, field)),
                                   rtol=1e-12)
    for row in range(3):
        ref = _pandas_reference(x[row], codes, ngroups)
        np.testing.assert_allclose(np.asarray(runs.mean_log)[row], ref["mean"].to_numpy(), rtol=1e-12)


def test_runs_are_found_only_when_long():
    assert mom._runs(np.zeros(10, dtype=np.intp)) is None  # too short to be worth it
    sorted_codes = np.repeat(np.arange(100, dtype=np.intp), 100)
    starts, lengths = mom._runs(sorted_codes)
    np.testing.assert_array_equal(starts, np.arange(0, 10_000, 100))
    np.testing.assert_array_equal(lengths, np.full(100, 100))
    assert mom._runs(np.arange(10_000, dtype=np.intp) % 7) is None  # changes at every row


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 3000), size=st.integers(1, 50), ordered=st.booleans(), seed=st.integers(0, 2**31 - 1))
def test_group_sums_equal_bincount_and_take(n, size, ordered, seed):
    """The run-by-run sums of the order statistics (Shapiro-Wilk, Box-Cox) against numpy's own
    ``np.bincount(weights=)`` and ``v[slot]``, with groups left empty anywhere (first, last, between)."""
    from logstats.stats._common import GroupSums

    rng = np.random.default_rng(seed)
    slot = rng.integers(0, size, n)
    if ordered:
        slot = np.sort(slot)
    w = rng.normal(size=n)
    sums = GroupSums(slot, size)
    assert sums.runs == (ordered or bool((slot[1:] >= slot[:-1]).all()))
    np.testing.assert_allclose(sums.sum(w), np.bincount(slot, weights=w, minlength=size), rtol=1e-12,
                               atol=1e-12)
    np.testing.assert_array_equal(sums.counts, np.bincount(slot, minlength=size))
    v = rng.normal(size=size)
    np.testing.assert_array_equal(sums.spread(v), v[slot])
    np.testing.assert_array_equal(sums.spread(v, np.empty(n)), v[slot])
