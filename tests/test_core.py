"""Core layer: the log transform and LogMoments, against NIST StRD data, mpmath and numpy."""

from __future__ import annotations

import warnings

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import logstats
from logstats.core.moments import (
    LogMoments,
    combine_moments,
    merge_two,
    moments_along,
    moments_by_codes,
    reduce_moments,
)
from logstats.core.transform import exp_values, log_values, to_logs

mpmath.mp.dps = 50


def mp_log_moments(values):
    """Reference: mean and sum of squared deviations of ln x at 50 significant digits (mpmath)."""
    logs = [mpmath.log(mpmath.mpf(float(v))) for v in values]
    n = len(logs)
    mean = mpmath.fsum(logs) / n
    m2 = mpmath.fsum([(y - mean) ** 2 for y in logs])
    return float(mean), float(m2)


def numacc(x0: float) -> np.ndarray:
    """NIST StRD NumAcc2/3/4 construction: x+0.2, then 500 pairs (x+0.1, x+0.3) (REFERENCES.md)."""
    vals = [x0 + 0.2]
    for _ in range(500):
        vals += [x0 + 0.1, x0 + 0.3]
    return np.array(vals)


# NIST StRD NumAcc1: 10000001, 10000003, 10000002 (certified mean 10000002, SD 1, exact).
NUMACC1 = np.array([10000001.0, 10000003.0, 10000002.0])


@pytest.mark.parametrize(
    "data",
    [NUMACC1, numacc(1.0), numacc(1e6), numacc(1e7)],
    ids=["NumAcc1", "NumAcc2", "NumAcc3", "NumAcc4"],
)
def test_numacc_log_moments_match_mpmath(data):
    # Reference: mpmath at 50 digits on the same doubles (REFERENCES.md: "mpmath at 50 digits").
    # Naive sum-of-squares loses every digit here (logs ~16.1 with spread ~1e-8).
    # The deviations of the logs are ~1e-8 here while np.log rounds each log by ~1e-15, so the sums
    # alone are not enough: tightly clustered logs are recomputed from a pivot with log1p.
    mean_ref, m2_ref = mp_log_moments(data)
    m = moments_along(data)
    assert m.n == len(data)
    assert m.mean_log == pytest.approx(mean_ref, rel=1e-15, abs=0)
    assert float(m.m2_log) == pytest.approx(m2_ref, rel=1e-13, abs=0)
    # the grouped path (scatter-add) must be as careful
    g = moments_by_codes(data, np.zeros(len(data), dtype=int), 1)
    assert float(g.mean_log[0]) == pytest.approx(mean_ref, rel=1e-15, abs=0)
    assert float(g.m2_log[0]) == pytest.approx(m2_ref, rel=1e-13, abs=0)
    # Chunked (dask) reductions merge per-chunk means stored as plain doubles: chunk means ~16.1 that
    # differ by ~1e-9 carry ~3.5e-15 of rounding each, so the between-chunk term limits the merged m2
    # to ~1e-10 relative here; REFERENCES.md asks rtol 1e-9 / 1e-8 of NumAcc3/4 for that reason.
    da = pytest.importorskip("dask.array")
    lazy = logstats.moments(da.from_array(data, chunks=97))
    assert float(lazy.m2_log.compute()) == pytest.approx(m2_ref, rel=1e-9, abs=0)


def test_numacc_naive_formula_would_fail():
    # The check above can fail: the textbook one-pass formula Σy² − (Σy)²/n misses NumAcc4 badly.
    y = np.log(numacc(1e7))
    naive = (y**2).sum() - y.sum() ** 2 / len(y)
    _, m2_ref = mp_log_moments(numacc(1e7))
    assert abs(naive - m2_ref) / m2_ref > 1e-3


def test_numacc1_exact_geometric_values():
    # NumAcc1 has certified linear-scale mean 10000002 and SD 1 (NIST StRD). On the log scale the
    # geometric mean is within 1e-7 relative of the mean (delta method, common practice).
    m = moments_along(NUMACC1)
    assert np.exp(m.mean_log) == pytest.approx(10000002.0, rel=1e-13)
    sd_log = np.sqrt(m.m2_log / 2)
    assert sd_log == pytest.approx(1.0 / 10000002.0, rel=1e-6)


def test_extreme_magnitudes_match_mpmath():
    # Values from 1e-300 to 1e300: the naive product overflows (np.prod gives inf or 0);
    # the log-domain result must match mpmath at 50 digits.
    x = np.array([1e-300, 3e-200, 1e-100, 1.0, 7e100, 2e200, 1e300, 5e299])
    mean_ref, m2_ref = mp_log_moments(x)
    m = moments_along(x)
    assert float(m.mean_log) == pytest.approx(mean_ref, rel=1e-14, abs=0)
    assert float(m.m2_log) == pytest.approx(m2_ref, rel=1e-13, abs=0)
    with np.errstate(over="ignore", under="ignore"):
        assert not np.isfinite(np.prod(x[4:])) or np.prod(x[:3]) == 0.0


def test_moments_along_axes_match_numpy():
    # Reference: numpy mean/var of np.log on the same array (common practice).
    rng = np.random.default_rng(1)
    x = rng.lognormal(2.0, 0.7, size=(4, 5, 6))
    for axis in [0, 1, 2, (0, 2), (1, 2), None]:
        m = moments_along(x, axis=axis)
        y = np.log(x)
        np.testing.assert_allclose(m.mean_log, y.mean(axis=axis), rtol=1e-14)
        n = y.size // np.size(m.n)
        np.testing.assert_allclose(m.m2_log, y.var(axis=axis) * n, rtol=1e-12)
        assert np.all(m.n == n)


def test_moments_by_codes_matches_per_group_numpy_and_multi_rows():
    rng = np.random.default_rng(2)
    x = rng.lognormal(0.0, 1.0, size=(3, 2000))
    codes = rng.integers(-1, 7, size=2000)  # -1: a row in no group
    m = moments_by_codes(x, codes, 8)
    assert m.n.shape == (3, 8)
    for r in range(3):
        for g in range(8):
            y = np.log(x[r, codes == g])
            assert m.n[r, g] == len(y)
            if len(y):
                assert m.mean_log[r, g] == pytest.approx(y.mean(), rel=1e-13)
                assert m.m2_log[r, g] == pytest.approx(((y - y.mean()) ** 2).sum(), rel=1e-11)
            else:
                assert np.isnan(m.mean_log[r, g]) and np.isnan(m.m2_log[r, g])


def test_chunked_by_codes_equals_one_pass():
    rng = np.random.default_rng(3)
    x = rng.lognormal(1.0, 0.5, 10_001)
    codes = rng.integers(0, 13, 10_001)
    whole = moments_by_codes(x, codes, 13, chunk_rows=1 << 30)
    chunked = moments_by_codes(x, codes, 13, chunk_rows=997)
    np.testing.assert_array_equal(whole.n, chunked.n)
    np.testing.assert_allclose(whole.mean_log, chunked.mean_log, rtol=1e-14)
    np.testing.assert_allclose(whole.m2_log, chunked.m2_log, rtol=1e-12)


def test_merge_matches_whole_and_handles_empty():
    rng = np.random.default_rng(4)
    x = rng.lognormal(0.5, 0.3, 1000)
    whole = moments_along(x)
    parts = [moments_along(p) for p in np.array_split(x, 7)] + [moments_along(np.array([]))]
    merged = combine_moments(parts)
    assert merged.n == whole.n
    assert float(merged.mean_log) == pytest.approx(float(whole.mean_log), rel=1e-14)
    assert float(merged.m2_log) == pytest.approx(float(whole.m2_log), rel=1e-12)
    kway = reduce_moments(LogMoments(**{k: np.stack([np.asarray(getattr(p, k)) for p in parts])
                                        for k in whole.to_dict()}), axis=0)
    assert float(kway.m2_log) == pytest.approx(float(whole.m2_log), rel=1e-12)
    empty = moments_along(np.array([]))
    assert merge_two(empty, empty).n == 0 and np.isnan(merge_two(empty, empty).mean_log)


def test_combine_refuses_mixed_shapes():
    a = moments_along(np.ones((2, 3)), axis=1)
    b = moments_along(np.ones((3, 3)), axis=1)
    with pytest.raises(ValueError, match="one shape"):
        combine_moments([a, b])
    with pytest.raises(ValueError, match="at least one"):
        combine_moments([])


def test_counts_and_policy_masks():
    x = np.array([1.0, np.nan, 0.0, -2.0, -np.inf, 4.0])
    lv = to_logs(x)
    assert lv.missing.tolist() == [False, True, False, False, False, False]
    assert lv.nonpositive.tolist() == [False, False, True, True, True, False]
    m = moments_along(x)
    assert (m.n, m.n_missing, m.n_nonpositive) == (2, 1, 3)
    assert float(m.mean_log) == pytest.approx(np.log(2.0))
    nan = m.with_policy(nonpositive="nan")
    assert np.isnan(nan.mean_log) and nan.n == 2
    assert np.isnan(m.with_policy(skipna=False).mean_log)


def test_plus_inf_refused_and_no_runtime_warnings():
    with pytest.raises(ValueError, match=r"\+inf"):
        to_logs(np.array([1.0, np.inf]), where="column 'gfp'")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        to_logs(np.array([0.0, -1.0, np.nan, 2.0]))
        moments_by_codes(np.array([0.0, -1.0]), np.array([0, 1]), 3)


@pytest.mark.parametrize("base", ["e", 2, 10])
def test_log_exp_round_trip(base):
    # numpy's log/log2/log10 and their inverses (common practice); exact to a few ulps.
    x = np.array([1e-300, 0.5, 1.0, 3.0, 1e300])
    y = log_values(x, base=base)
    ref = {"e": np.log, 2: np.log2, 10: np.log10}[base](x)
    np.testing.assert_array_equal(y, ref)
    np.testing.assert_allclose(exp_values(y, base=base), x, rtol=1e-13)


def test_log_policy():
    x = np.array([1.0, 0.0, -1.0, np.nan])
    with pytest.raises(ValueError, match=r"2 value\(s\) at or below zero.*nonpositive='drop'"):
        log_values(x, where="column 'gfp'")
    out = log_values(x, nonpositive="nan")
    assert out[0] == 0.0 and np.isnan(out[1:]).all()
    with pytest.raises(ValueError, match="nonpositive="):
        log_values(x, nonpositive="zero")
    with pytest.raises(ValueError, match="base"):
        log_values(x, base=3)


def test_inputs_not_mutated_and_types():
    x = np.array([3.0, 0.0, 5.0])
    before = x.copy()
    moments_along(x)
    log_values(x, nonpositive="nan")
    np.testing.assert_array_equal(x, before)
    with pytest.raises(TypeError, match="booleans"):
        to_logs(np.array([True, False]))
    with pytest.raises(TypeError, match="non-numeric"):
        to_logs(np.array(["a", 1.0], dtype=object))
    # float32 and int64 are computed in float64
    assert moments_along(np.array([1, 2, 4], dtype=np.int64)).mean_log == pytest.approx(np.log(2.0))
    m32 = moments_along(np.array([1.5, 2.5], dtype=np.float32))
    assert m32.mean_log.dtype == np.float64


@settings(max_examples=30, deadline=None)
@given(st.floats(min_value=1e-200, max_value=1e200),
       st.lists(st.integers(-900, 900), min_size=2, max_size=40),  # all values stay positive
       st.sampled_from([1e-12, 1e-9, 1e-6, 1e-3]))
def test_tightly_clustered_logs_match_mpmath(centre, steps, scale):
    # values c·(1 + k·scale): the log deviations are tiny next to |ln c| (mpmath at 50 digits reference)
    x = centre * (1.0 + np.array(steps, dtype=float) * scale)
    if np.ptp(x) == 0:
        return
    mean_ref, m2_ref = mp_log_moments(x)
    for m in (moments_along(x), moments_by_codes(x, np.zeros(len(x), dtype=int), 1)):
        # the mean is a sum of logs: its rounding is relative to the largest |ln x|, not to the mean
        tol = 4e-16 * float(np.max(np.abs(np.log(x))))
        assert float(np.ravel(m.mean_log)[0]) == pytest.approx(mean_ref, rel=1e-15, abs=tol)
        assert float(np.ravel(m.m2_log)[0]) == pytest.approx(m2_ref, rel=1e-11, abs=0)
