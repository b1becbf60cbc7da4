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


# --------------------------------------------------------------------------- any memory layout
# moments_along reads its input in memory order, block by block, with float32 and integers widened one
# block at a time. The reference "previous implementation" is the one-block corrected two-pass
# (`_moments_along` of `to_logs`, the path every small input took before), refined like the public one.

def one_block_reference(x, axes):
    """The previous one-block computation: all logs at once, the two-pass formula over ``axes``."""
    from logstats.core.moments import _moments_along, _refine_tight
    from logstats.core.transform import LoggedValues

    arr = np.asarray(x)
    m = _moments_along(to_logs(arr), axes)

    def of_logs(z):
        return _moments_along(LoggedValues(z, np.isnan(z), np.zeros(z.shape, dtype=bool)), axes)

    return _refine_tight(m, arr, of_logs, lambda p: np.expand_dims(p, axes))


def assert_same_moments(new, ref, x):
    """Counts equal; mean within a few ulps of the largest |log|; m2 within the rounding bound of the
    corrected two-pass formula, 2·eps·max|y|·sqrt(n·m2) (Higham 2002, §1.9, the deviations carry
    eps·|y| each), plus 1e-14 relative for the order of the sums."""
    for f in ("n", "n_missing", "n_nonpositive", "n_censored"):
        assert np.shape(getattr(new, f)) == np.shape(getattr(ref, f))
        np.testing.assert_array_equal(getattr(new, f), getattr(ref, f), err_msg=f)
    assert np.asarray(new.mean_log).dtype == np.float64
    np.testing.assert_array_equal(np.isnan(new.mean_log), np.isnan(ref.mean_log))
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.log(np.asarray(x, dtype=np.float64))
    big = float(np.max(np.abs(y[np.isfinite(y)]), initial=1.0))
    np.testing.assert_allclose(new.mean_log, ref.mean_log, rtol=1e-15, atol=8 * 2.2e-16 * big)
    n = np.asarray(ref.n, dtype=float)
    m2 = np.nan_to_num(np.asarray(ref.m2_log, dtype=float))
    bound = 8 * 2.2e-16 * big * np.sqrt(n * m2) + 1e-14 * m2 + 1e-300
    diff = np.abs(np.nan_to_num(np.asarray(new.m2_log, dtype=float)) - m2)
    assert np.all(diff <= bound), float(np.max(diff / bound))


@st.composite
def strided_arrays(draw):
    """A positive array of 1-4 dims (float64, float32 or int64), possibly with NaN / zero / negative
    entries, seen through a random transposition and random steps (a view: any memory order)."""
    nd = draw(st.integers(1, 4))
    shape = tuple(draw(st.lists(st.integers(1, 7), min_size=nd, max_size=nd)))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    dtype = draw(st.sampled_from(["float64", "float32", "int64"]))
    x = rng.lognormal(draw(st.floats(-20, 20)), draw(st.sampled_from([1e-6, 1e-2, 0.5, 3.0])), shape)
    x = np.ceil(x * 1000).astype(np.int64) if dtype == "int64" else x.astype(dtype)
    if draw(st.booleans()):
        flat = x.reshape(-1)
        k = draw(st.integers(0, flat.size))
        bad = [0, -3] if dtype == "int64" else [np.nan, 0.0, -1.0, -np.inf]
        flat[rng.choice(flat.size, k)] = rng.choice(bad, k)
    view = x.transpose(draw(st.permutations(range(nd))))
    steps = tuple(draw(st.lists(st.sampled_from([1, 1, -1, 2]), min_size=nd, max_size=nd)))
    view = view[tuple(slice(None, None, s) for s in steps)]
    axes = tuple(sorted(draw(st.sets(st.integers(0, nd - 1)))))
    return view, axes


@settings(max_examples=150, deadline=None)
@given(strided_arrays(), st.sampled_from([1, 3, 16, 100, 1 << 18]), st.sampled_from([1, 2, 3]))
def test_moments_along_any_layout_matches_one_block(case, chunk, threads):
    # Reference: the previous one-block implementation (above) on the same array; counts exactly equal.
    x, axes = case
    before = x.copy()
    new = moments_along(x, axis=axes, chunk_values=chunk, threads=threads)
    assert_same_moments(new, one_block_reference(x, axes), x)
    np.testing.assert_array_equal(x, before)  # never written


@pytest.mark.parametrize("dtype", [np.float64, np.float32, np.int64, np.uint16])
@pytest.mark.parametrize("memory", ["first", "middle", "last"])
def test_layouts_and_dtypes_blocked_and_threaded(dtype, memory):
    # Reference: numpy's mean and variance of np.log of the float64 values (common practice), and the
    # one-block computation; several blocks and two threads are forced by small chunk_values.
    rng = np.random.default_rng(11)
    raw = rng.lognormal(3.0, 0.7, (60, 5, 40))  # memory order (cell, channel, time)
    raw = raw if np.dtype(dtype).kind == "f" else np.ceil(raw)
    x = raw.astype(dtype)
    view = {"first": x.transpose(1, 2, 0),  # cell last, a strided view, as the adapters pass it
            "middle": np.ascontiguousarray(x.transpose(1, 0, 2)).transpose(0, 2, 1),
            "last": np.ascontiguousarray(x.transpose(1, 2, 0))}[memory]
    y = np.log(view.astype(np.float64))
    for chunk, threads in ((1 << 18, 1), (997, 1), (97, 2), (41, 3)):
        m = moments_along(view, axis=2, chunk_values=chunk, threads=threads)
        assert m.n.shape == (5, 40) and np.all(m.n == 60)
        np.testing.assert_allclose(m.mean_log, y.mean(axis=2), rtol=1e-14)
        np.testing.assert_allclose(m.m2_log, y.var(axis=2) * 60, rtol=1e-12)
        assert_same_moments(m, one_block_reference(view, (2,)), view)
    # reduced over two axes, one of them the fastest in memory
    m = moments_along(view, axis=(0, 2), chunk_values=50, threads=2)
    np.testing.assert_allclose(m.mean_log, y.mean(axis=(0, 2)), rtol=1e-14)


def test_float32_logs_are_taken_in_float64():
    # The logs of float32 values are those of their exact float64 widening (numpy float64 log, common
    # practice), not float32 logs (about 1e-7 off).
    rng = np.random.default_rng(12)
    x = rng.lognormal(0.0, 2.0, (300, 7)).astype(np.float32)
    m = moments_along(x.T, axis=1, chunk_values=64, threads=2)
    y = np.log(x.astype(np.float64))
    np.testing.assert_allclose(m.mean_log, y.mean(axis=0), rtol=1e-15, atol=1e-15)
    assert np.max(np.abs(np.log(x).mean(axis=0, dtype=np.float64) - m.mean_log)) > 1e-9


def test_int64_beyond_2_53_matches_mpmath():
    # Integers past 2**53 are read through float64 (one rounding, 2**-53 relative, i.e. ~1e-16 absolute
    # in the log, below the log's own rounding at ln(2**60) ~ 41.6). Reference: mpmath logs of the
    # exact integers at 50 digits.
    big = np.array([[2**60 + 1, 2**60 + 12345, 3 * 2**59 + 7], [2**62 - 1, 2**61 + 3, 2**55 + 1]],
                   dtype=np.int64)
    for view, axis in ((big, 1), (big.T, 0), (np.asfortranarray(big), 1)):
        m = moments_along(view, axis=axis, chunk_values=2, threads=2)
        rows = big.tolist()
        for r, row in enumerate(rows):
            logs = [mpmath.log(mpmath.mpf(v)) for v in row]
            mean = mpmath.fsum(logs) / len(logs)
            m2 = mpmath.fsum([(v - mean) ** 2 for v in logs])
            assert float(m.mean_log[r]) == pytest.approx(float(mean), rel=1e-15)
            assert float(m.m2_log[r]) == pytest.approx(float(m2), rel=1e-12)


@pytest.mark.parametrize("memory", ["first", "last"])
def test_numacc_tight_cluster_in_any_layout(memory):
    # NIST StRD NumAcc4 (x + 0.2, then 500 pairs x + 0.1, x + 0.3 with x = 1e7), three copies side by
    # side, reduced along the values whichever way they lie in memory; reference mpmath at 50 digits.
    data = numacc(1e7)
    mean_ref, m2_ref = mp_log_moments(data)
    stack = np.stack([data, data[::-1], np.roll(data, 17)], axis=1)  # (1001, 3): values first in memory
    view = stack.T if memory == "first" else np.ascontiguousarray(stack.T)  # reduced axis last either way
    for chunk, threads in ((1 << 18, 1), (128, 2)):
        m = moments_along(view, axis=1, chunk_values=chunk, threads=threads)
        np.testing.assert_allclose(m.mean_log, mean_ref, rtol=1e-15, atol=0)
        np.testing.assert_allclose(m.m2_log, m2_ref, rtol=1e-13, atol=0)


def test_blocked_bad_values_and_refusal():
    # Counts are those of the whole input whichever block holds them; +inf is refused with its total
    # count even when it sits in several blocks (the same message as to_logs).
    x = np.full((6, 50), 2.0)
    x[0, 3] = x[5, 49] = np.inf
    with pytest.raises(ValueError, match=r"holds 2 value\(s\) of \+inf"):
        moments_along(x.T, axis=0, chunk_values=10, threads=2)
    x[0, 3] = x[5, 49] = np.nan
    x[2, :] = 0.0  # one row with no valid value at all: n = 0, NaN moments
    x[3, 7] = -1.0
    m = moments_along(x.T, axis=0, chunk_values=7, threads=2)
    assert m.n.tolist() == [49, 50, 0, 49, 50, 49]
    assert m.n_missing.tolist() == [1, 0, 0, 0, 0, 1]
    assert m.n_nonpositive.tolist() == [0, 0, 50, 1, 0, 0]
    assert np.isnan(m.mean_log[2]) and np.isnan(m.m2_log[2])
    np.testing.assert_allclose(np.delete(m.mean_log, 2), np.log(2.0), rtol=1e-15)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # numpy's RuntimeWarnings never reach users
        moments_along(np.array([[0.0, -1.0], [np.nan, 3.0]]), axis=0, chunk_values=1, threads=2)


def test_threads_from_worker_thread_and_edge_shapes():
    # Reference: numpy mean of np.log (common practice). A call from a worker thread (dask's schedulers)
    # stays on it; length-1 and empty axes, 0-d input and no axes at all give numpy's shapes.
    import threading

    x = np.random.default_rng(13).lognormal(0.0, 1.0, (3, 1, 4))
    box = {}
    th = threading.Thread(target=lambda: box.update(m=moments_along(x, axis=(0, 2))))
    th.start()
    th.join()
    np.testing.assert_allclose(box["m"].mean_log, np.log(x).mean(axis=(0, 2)), rtol=1e-14)
    assert box["m"].n.shape == (1,)
    assert moments_along(x, axis=1).n.shape == (3, 4)
    assert moments_along(np.float32(2.0)).n == 1
    assert moments_along(np.ones((0, 3)), axis=0).n.tolist() == [0, 0, 0]
    assert moments_along(np.ones((2, 0)), axis=1).n.tolist() == [0, 0]
    assert moments_along(np.ones((1, 1)), axis=(0, 1)).n == 1
    np.testing.assert_array_equal(moments_along(x, axis=()).mean_log, np.log(x))


def test_float32_input_is_not_widened_whole():
    # The float32 input is widened one block at a time: the traced peak stays far below the float64
    # copy (2x the input) the previous implementation made (tracemalloc sees numpy's buffers).
    import tracemalloc

    x = np.random.default_rng(14).lognormal(0.0, 1.0, (2000, 1000)).astype(np.float32)
    for view, axis in ((x.T, 1), (x, 1), (x, 0)):
        moments_along(view, axis=axis)
        tracemalloc.start()
        try:
            moments_along(view, axis=axis)
            peak = tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
        assert peak < 0.5 * x.nbytes, (view.strides, axis, peak / x.nbytes)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
@pytest.mark.parametrize("backend", ["numpy", "dask"])
def test_xarray_layouts_match_numpy(dtype, backend):
    # Reference: numpy mean/var of np.log on the float64 values (common practice), through the xarray
    # accessor (which passes the reduced dim last, a strided view) in-memory and chunked with dask.
    xr = pytest.importorskip("xarray")
    rng = np.random.default_rng(15)
    dims = ("cell", "channel", "time")
    x = rng.lognormal(1.0, 0.5, (300, 3, 20)).astype(dtype)
    for order in (dims, ("channel", "cell", "time"), ("channel", "time", "cell")):
        da = xr.DataArray(np.ascontiguousarray(x.transpose([dims.index(d) for d in order])), dims=order)
        if backend == "dask":
            pytest.importorskip("dask.array")
            da = da.chunk({"cell": 70})
        res = da.logstats.summary("cell").compute()
        y = np.log(da.transpose("channel", "time", "cell").values.astype(np.float64))
        np.testing.assert_allclose(np.log(res["gmean"].transpose("channel", "time").values),
                                   y.mean(axis=-1), rtol=1e-13)
        np.testing.assert_allclose(np.log(res["gsd"].transpose("channel", "time").values),
                                   y.std(axis=-1, ddof=1), rtol=1e-10)
        assert np.all(res["n"].values == 300)
