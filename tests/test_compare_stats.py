"""Statistics layer of fold changes (logstats.stats.compare) against outside references.

References used below, named beside each check:
- scipy.stats.ttest_ind (Welch 1947 / Student) and ttest_rel, with ``.confidence_interval()``;
- statsmodels.stats.multitest.multipletests (holm, fdr_bh) and scipy.stats.false_discovery_control;
- statsmodels.stats.weightstats.ttost_ind / ttost_paired (Schuirmann 1987 TOST). With ``transform=np.log``
  statsmodels logs the data *and* the bounds (read in its source: ``low = transform(low)``), so bounds are
  passed on the ratio scale, exactly like our ``equivalence=(low, high)``;
- Benjamini & Hochberg (1995), the 15 p-values of their worked example (4 rejections at 0.05);
- Holm (1979) step-down formula, Schuirmann (1987) "TOST at 5 % = 90 % interval inside the limits";
- FDA (2001) average bioequivalence limits 80.00-125.00 %, symmetric on the log scale;
- Armitage, Berry & Matthews, Statistical Methods in Medical Research, 4th ed., p. 311 (summary values as
  quoted in the project's REFERENCES.md; group sizes not given there, so only the ratio is checked);
- Lord et al. (2020), J. Cell Biol.: the replicate mean, not the cell, as the unit (hand computation).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.stats as st
from hypothesis import given, settings
from hypothesis import strategies as hs
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.weightstats import ttost_ind, ttost_paired

from logstats.core.moments import LogMoments, moments_along, moments_by_codes
from logstats.stats.compare import adjust_p, compare_moments, fold_change_codes, paired_moments

RTOL = 1e-10


def _m(x: np.ndarray) -> LogMoments:
    return moments_along(np.asarray(x, dtype=float))


def _close(a, b, rtol=RTOL, atol=0.0):
    np.testing.assert_allclose(np.asarray(a, dtype=float), np.asarray(b, dtype=float), rtol=rtol, atol=atol,
                               equal_nan=True)


# ------------------------------------------------------------------------------------------------ adjust_p

BH1995 = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
                   0.4262, 0.5719, 0.6528, 0.7590, 1.000])


def test_bh_1995_worked_example_four_rejections():
    # Benjamini & Hochberg (1995) worked example: 15 p-values, 4 rejections at q = 0.05
    adj = adjust_p(BH1995, "bh")
    assert int((adj <= 0.05).sum()) == 4
    # reference: statsmodels multipletests(method="fdr_bh") and scipy.stats.false_discovery_control
    _close(adj, multipletests(BH1995, method="fdr_bh")[1], rtol=1e-14)
    _close(adj, st.false_discovery_control(BH1995, method="bh"), rtol=1e-14)
    # Holm (1979) on the same values, reference: statsmodels multipletests(method="holm")
    _close(adjust_p(BH1995, "holm"), multipletests(BH1995, method="holm")[1], rtol=1e-14)


def test_holm_by_hand():
    # Holm (1979) step-down: sorted p (0.01, 0.03, 0.04) times (3, 2, 1) = (0.03, 0.06, 0.04), then
    # running maximum = (0.03, 0.06, 0.06)
    _close(adjust_p(np.array([0.01, 0.04, 0.03]), "holm"), [0.03, 0.06, 0.06], rtol=1e-15)


@pytest.mark.parametrize("method,sm", [("holm", "holm"), ("bh", "fdr_bh")])
def test_adjust_random_with_ties_matches_statsmodels(method, sm):
    rng = np.random.default_rng(7)
    p = np.round(rng.uniform(0, 1, 200) ** 3, 3)  # many ties, many small values
    # reference: statsmodels multipletests
    _close(adjust_p(p, method), multipletests(p, method=sm)[1], rtol=1e-13)
    if method == "bh":
        # reference: scipy.stats.false_discovery_control
        _close(adjust_p(p, method), st.false_discovery_control(p), rtol=1e-13)


@pytest.mark.parametrize("method,sm", [("holm", "holm"), ("bh", "fdr_bh")])
def test_adjust_nan_not_counted_and_families(method, sm):
    rng = np.random.default_rng(3)
    p = rng.uniform(0, 0.2, (4, 9))
    p[rng.uniform(size=p.shape) < 0.25] = np.nan
    fam = np.repeat(np.array([2, -1, 5, 2]), 9).reshape(4, 9)  # family 2 spans two rows
    out = adjust_p(p, method, families=fam)
    assert out.shape == p.shape
    assert np.array_equal(np.isnan(out), np.isnan(p))
    for f in np.unique(fam):
        sel = (fam == f) & ~np.isnan(p)
        # reference: statsmodels multipletests on the non-NaN members of each family alone
        _close(out[sel], multipletests(p[sel], method=sm)[1], rtol=1e-13)
    # one family without codes: NaN entries do not add to m (statsmodels on the valid subset)
    whole = adjust_p(p, method)
    ok = ~np.isnan(p)
    _close(whole[ok], multipletests(p[ok], method=sm)[1], rtol=1e-13)


def test_adjust_tiny_p_in_late_families_keep_precision():
    # exactness of the per-family running max (no offsetting of values): Holm of a single p is p itself
    # (Holm 1979 with m = 1), however many families come before it
    p = np.full(1000, 1e-300)
    fam = np.arange(1000)
    _close(adjust_p(p, "holm", families=fam), p, rtol=0)
    _close(adjust_p(p, "bh", families=fam), p, rtol=0)


def test_adjust_none_copy_and_errors():
    p = np.array([0.2, np.nan, 0.01])
    out = adjust_p(p, None)
    _close(out, p, rtol=0)
    out[0] = 0.9
    assert p[0] == 0.2  # a copy, input untouched
    with pytest.raises(ValueError, match=r"'holm', 'bh', None"):
        adjust_p(p, "bonferroni")
    with pytest.raises(ValueError, match="outside"):
        adjust_p([0.5, 1.5], "holm")
    with pytest.raises(ValueError, match="shape"):
        adjust_p(p, "holm", families=np.zeros(2, dtype=int))
    with pytest.raises(TypeError, match="integer"):
        adjust_p(p, "holm", families=np.zeros(3))
    _close(adjust_p([np.nan, np.nan], "bh"), [np.nan, np.nan])


@settings(max_examples=60, deadline=None)
@given(hs.lists(hs.floats(0, 1), min_size=1, max_size=30), hs.randoms(use_true_random=False))
def test_adjust_properties(ps, rnd):
    # invariants of both procedures (Holm 1979; BH 1995): p <= adjusted <= 1, BH <= Holm, and the
    # result does not depend on the order of the input
    p = np.array(ps)
    holm, bh = adjust_p(p, "holm"), adjust_p(p, "bh")
    assert np.all(holm >= p) and np.all(holm <= 1) and np.all(bh >= p) and np.all(bh <= holm + 1e-15)
    perm = np.array(rnd.sample(range(p.size), p.size))
    _close(adjust_p(p[perm], "holm"), holm[perm], rtol=0)
    _close(adjust_p(p[perm], "bh"), bh[perm], rtol=0)


# ----------------------------------------------------------------------------------------- compare_moments


def _samples(seed: int, k: int = 12):
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(k):
        n1, n2 = rng.integers(2, 30, 2)
        out.append((rng.lognormal(rng.normal(), rng.uniform(0.1, 2), n1),
                    rng.lognormal(rng.normal(), rng.uniform(0.1, 2), n2)))
    return out


@pytest.mark.parametrize("equal_var", [False, True])
@pytest.mark.parametrize("cl", [0.95, 0.9])
def test_compare_matches_scipy_ttest_ind(equal_var, cl):
    pairs = _samples(11)
    # all comparisons at once, as one array of moments (built with one bincount pass)
    vals = np.concatenate([np.concatenate(p) for p in pairs])
    codes = np.concatenate([np.r_[np.full(len(a), 2 * i), np.full(len(b), 2 * i + 1)]
                            for i, (a, b) in enumerate(pairs)])
    mom = moments_by_codes(vals, codes, 2 * len(pairs))
    res = compare_moments(mom.take(slice(0, None, 2)), mom.take(slice(1, None, 2)), equal_var=equal_var,
                          confidence_level=cl)
    for i, (a, b) in enumerate(pairs):
        # reference: scipy.stats.ttest_ind on the natural logs (Welch, or Student with equal_var=True)
        ref = st.ttest_ind(np.log(a), np.log(b), equal_var=equal_var)
        ci = ref.confidence_interval(cl)
        _close(res["statistic"][i], ref.statistic, rtol=1e-9)
        _close(res["p_value"][i], ref.pvalue, rtol=1e-8)
        _close(res["df"][i], ref.df, rtol=1e-10)
        _close(res["ci_low"][i], np.exp(ci.low), rtol=1e-10)
        _close(res["ci_high"][i], np.exp(ci.high), rtol=1e-10)
        # ratio of geometric means = exp(ȳ1 − ȳ2) (REFERENCES: comparing groups); scipy.stats.gmean
        _close(res["ratio"][i], st.gmean(a) / st.gmean(b), rtol=1e-10)
        _close(res["log2_ratio"][i], np.log2(st.gmean(a) / st.gmean(b)), rtol=1e-9, atol=1e-12)
        assert res["n"][i] == len(a) and res["n_reference"][i] == len(b)


@pytest.mark.parametrize("usevar,equal_var", [("unequal", False), ("pooled", True)])
def test_tost_matches_statsmodels(usevar, equal_var):
    for a, b in _samples(5, 8) + [(np.exp(np.linspace(0, 0.3, 40)), np.exp(np.linspace(0.02, 0.31, 35)))]:
        res = compare_moments(_m(a), _m(b), equal_var=equal_var, equivalence=(0.8, 1.25))
        # reference: statsmodels ttost_ind(x1, x2, low, upp, usevar, transform=np.log); statsmodels logs
        # the bounds too, so (0.8, 1.25) are ratio limits in both
        ref_p = ttost_ind(a, b, 0.8, 1.25, usevar=usevar, transform=np.log)[0]
        _close(res["equivalence_p"], ref_p, rtol=1e-8)
        assert bool(res["equivalent"]) == (ref_p < 0.05)


def test_tost_is_90_percent_interval_inside_limits():
    # FDA (2001) limits 80.00-125.00 %: symmetric on the log scale, ln 1.25 = −ln 0.8 (exact arithmetic)
    assert np.log(1.25) == pytest.approx(-np.log(0.8), rel=1e-15)
    # Schuirmann (1987): a 5 % TOST declares equivalence exactly when the 90 % interval lies inside
    rng = np.random.default_rng(1)
    shown = 0
    for _ in range(200):
        a = rng.lognormal(rng.normal(0, 0.15), 0.3, rng.integers(3, 40))
        b = rng.lognormal(0, 0.3, rng.integers(3, 40))
        r = compare_moments(_m(a), _m(b), equivalence=(0.8, 1.25), equivalence_alpha=0.05,
                            confidence_level=0.90)
        inside = (r["ci_low"] > 0.8) and (r["ci_high"] < 1.25)
        assert bool(r["equivalent"]) == bool(inside)
        shown += inside
    assert 0 < shown < 200  # both outcomes occurred, so the check has teeth


def test_armitage_berry_matthews_ratio():
    # Armitage, Berry & Matthews 4th ed. p. 311 (as quoted in REFERENCES.md): log10 means 0.225 and 0.268,
    # geometric means 1.68 and 1.85, ratio 0.91 (0.60 to 1.38). Group sizes are not given, so t, P and the
    # interval cannot be reproduced honestly; only the ratio (independent of n) is checked. n = 10 is a
    # placeholder that does not enter the ratio.
    ln10 = np.log(10.0)
    one = np.array(10)
    lev = LogMoments(one, np.array(0.225 * ln10), np.array(9 * (0.414 * ln10) ** 2), one * 0, one * 0)
    ref = LogMoments(one, np.array(0.268 * ln10), np.array(9 * (0.478 * ln10) ** 2), one * 0, one * 0)
    r = compare_moments(lev, ref)
    assert round(float(np.exp(0.225 * ln10)), 2) == 1.68 and round(float(np.exp(0.268 * ln10)), 2) == 1.85
    assert round(float(r["ratio"]), 2) == 0.91
    _close(r["ratio"], 10 ** (0.225 - 0.268), rtol=1e-13)
    # the book's interval is symmetric about the ratio on the log scale, as ours is by construction
    assert np.sqrt(0.60 * 1.38) == pytest.approx(0.91, abs=0.005)
    _close(r["ci_low"] * r["ci_high"], r["ratio"] ** 2, rtol=1e-12)


def test_small_groups_nan_no_exception():
    # fewer than two values on a side: interval and p undefined (t needs a variance on each side);
    # the ratio exp(ȳ1 − ȳ2) still exists with one value each (REFERENCES: comparing groups)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = compare_moments(_m([2.0]), _m([1.0, 3.0, 5.0]), equivalence=(0.8, 1.25))
        _close(r["ratio"], 2.0 / st.gmean([1.0, 3.0, 5.0]))
        for k in ("ci_low", "ci_high", "statistic", "df", "p_value", "equivalence_p"):
            assert np.isnan(r[k]), k
        assert not r["equivalent"]
        for eq_var in (False, True):
            r0 = compare_moments(_m([]), _m([1.0, 3.0]), equal_var=eq_var)
            assert np.isnan(r0["ratio"]) and np.isnan(r0["p_value"]) and r0["n"] == 0
        p = paired_moments(_m([1.5]))
        assert p["ratio"] == pytest.approx(1.5) and np.isnan(p["p_value"]) and np.isnan(p["ci_low"])


@pytest.mark.parametrize("equal_var", [False, True])
def test_zero_variance_follows_scipy(equal_var):
    a, b = np.full(3, 2.0), np.full(4, 5.0)
    r = compare_moments(_m(a), _m(b), equal_var=equal_var)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # reference: scipy.stats.ttest_ind on constant groups (t = −inf, p = 0, Welch df 1 for 0/0)
        ref = st.ttest_ind(np.log(a), np.log(b), equal_var=equal_var)
        same = st.ttest_ind(np.log(a), np.log(a), equal_var=equal_var)
    assert r["statistic"] == ref.statistic == -np.inf and r["p_value"] == ref.pvalue == 0.0
    _close(r["df"], ref.df, rtol=0)
    _close(r["ci_low"], 0.4)  # the interval collapses to the ratio 2/5, as scipy's does on the logs
    _close(r["ci_high"], 0.4)
    _close(np.exp([ref.confidence_interval().low, ref.confidence_interval().high]), [0.4, 0.4])
    r2 = compare_moments(_m(a), _m(a), equal_var=equal_var)
    assert np.isnan(r2["statistic"]) and np.isnan(same.statistic) and np.isnan(r2["p_value"])


def test_extreme_magnitudes_in_log_domain():
    # values near 1e±300: the log ratio is finite and exact, the t test agrees with scipy on the logs
    rng = np.random.default_rng(2)
    a = 1e300 * rng.lognormal(0, 0.5, 20)
    a = a[np.isfinite(a)]
    b = 1e-300 * rng.lognormal(0, 0.5, 15)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = compare_moments(_m(a), _m(b))
    ref = st.ttest_ind(np.log(a), np.log(b), equal_var=False)  # reference: scipy on the logs
    _close(r["log_ratio"], np.mean(np.log(a)) - np.mean(np.log(b)), rtol=1e-13)
    _close(r["statistic"], ref.statistic, rtol=1e-9)
    _close(r["log2_ratio"], r["log_ratio"] / np.log(2), rtol=1e-15)
    assert r["ratio"] == np.inf  # 1e600 is beyond float64; the log columns carry it


def test_broadcasting_and_validation():
    rng = np.random.default_rng(4)
    vals = rng.lognormal(0, 1, 300)
    mom = moments_by_codes(vals, rng.integers(0, 12, 300), 12)
    grid = LogMoments(*(np.asarray(v).reshape(3, 4) for v in (mom.n, mom.mean_log, mom.m2_log,
                                                                mom.n_missing, mom.n_nonpositive)))
    ref = grid.take((slice(None), slice(0, 1)))
    r = compare_moments(grid, ref)
    assert r["ratio"].shape == (3, 4)
    _close(r["ratio"][:, 0], 1.0, rtol=1e-15)
    with pytest.raises(ValueError, match="equivalence"):
        compare_moments(grid, ref, equivalence=(1.25, 0.8))
    with pytest.raises(ValueError, match="equivalence"):
        compare_moments(grid, ref, equivalence=(0.0, 1.25))
    with pytest.raises(ValueError, match="equivalence"):
        compare_moments(grid, ref, equivalence=0.8)
    with pytest.raises(ValueError, match="equivalence_alpha"):
        compare_moments(grid, ref, equivalence=(0.8, 1.25), equivalence_alpha=0.0)
    with pytest.raises(ValueError, match="confidence_level"):
        compare_moments(grid, ref, confidence_level=95)


logs = hs.lists(hs.floats(-6, 6, allow_nan=False), min_size=0, max_size=8)


@settings(max_examples=80, deadline=None)
@given(logs, logs, hs.booleans())
def test_swap_inverts_ratio_and_interval(ya, yb, equal_var):
    # property of the t interval on logs: exchanging level and reference negates the log ratio, so the
    # ratio inverts, ci_low ↔ 1/ci_high, and the two-sided p (and the TOST p with inverted limits) stays
    a, b = _m(np.exp(ya)), _m(np.exp(yb))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ab = compare_moments(a, b, equal_var=equal_var, equivalence=(0.8, 1.25))
        ba = compare_moments(b, a, equal_var=equal_var, equivalence=(0.8, 1.25))
    _close(ab["ratio"], 1 / ba["ratio"], rtol=1e-12)
    _close(ab["ci_low"], 1 / ba["ci_high"], rtol=1e-9)
    _close(ab["ci_high"], 1 / ba["ci_low"], rtol=1e-9)
    _close(ab["p_value"], ba["p_value"], rtol=1e-7, atol=1e-300)
    _close(ab["df"], ba["df"], rtol=1e-9)
    _close(ab["statistic"], -ba["statistic"], rtol=1e-9)
    # 1/1.25 = 0.8: the FDA (2001) limits are their own inverse
    _close(ab["equivalence_p"], ba["equivalence_p"], rtol=1e-7, atol=1e-300)


# ------------------------------------------------------------------------------------------ paired_moments


def test_paired_matches_scipy_ttest_rel_and_statsmodels_tost():
    rng = np.random.default_rng(8)
    for k in (2, 3, 8, 25):
        b = rng.lognormal(0, 1, k)
        a = b * rng.lognormal(0.05, 0.1, k)
        r = paired_moments(_m(a / b), confidence_level=0.9, equivalence=(0.8, 1.25))
        ref = st.ttest_rel(np.log(a), np.log(b))  # reference: scipy.stats.ttest_rel on the logs
        ci = ref.confidence_interval(0.9)
        _close(r["statistic"], ref.statistic, rtol=1e-9)
        _close(r["p_value"], ref.pvalue, rtol=1e-8)
        _close(r["df"], ref.df, rtol=0)
        _close(r["ci_low"], np.exp(ci.low), rtol=1e-10)
        _close(r["ci_high"], np.exp(ci.high), rtol=1e-10)
        assert r["n"] == k == r["n_reference"]
        # reference: statsmodels ttost_paired(..., transform=np.log) (bounds on the ratio scale)
        _close(r["equivalence_p"], ttost_paired(a, b, 0.8, 1.25, transform=np.log)[0], rtol=1e-8)


# ---------------------------------------------------------------------------------------- fold_change_codes


def _cells(seed=0, n=900, levels=4, reps=6, strata=1):
    rng = np.random.default_rng(seed)
    lc = rng.integers(0, levels, n)
    rc = rng.integers(0, reps, n)
    sc = rng.integers(0, strata, n)
    rep_effect = rng.normal(0, 0.2, (strata, levels, reps))
    lvl_effect = np.linspace(0, 0.5, levels)
    x = np.exp(lvl_effect[lc] + rep_effect[sc, lc, rc] + rng.normal(0, 0.6, n))
    return x, lc, rc, sc


@pytest.mark.parametrize("equal_var", [False, True])
def test_per_cell_matches_scipy_and_statsmodels(equal_var):
    x, lc, _, sc = _cells(1, strata=2)
    ref_level = 2
    out = fold_change_codes(x, lc, 4, ref_level, stratum_codes=sc, n_strata=2, equal_var=equal_var,
                            adjust="holm", equivalence=(0.8, 1.25))
    assert out["ratio"].shape == (2, 4)
    for s in range(2):
        pv = []
        for lev in range(4):
            xa, xb = x[(sc == s) & (lc == lev)], x[(sc == s) & (lc == ref_level)]
            if lev == ref_level:
                assert out["ratio"][s, lev] == 1.0 and np.isnan(out["p_value"][s, lev])
                assert np.isnan(out["p_adjusted"][s, lev]) and out["n"][s, lev] == len(xb)
                continue
            # reference: scipy.stats.ttest_ind on the logs of the cells of the level and the reference
            ref = st.ttest_ind(np.log(xa), np.log(xb), equal_var=equal_var)
            ci = ref.confidence_interval()
            _close(out["p_value"][s, lev], ref.pvalue, rtol=1e-8)
            _close(out["ci_low"][s, lev], np.exp(ci.low), rtol=1e-10)
            _close(out["ci_high"][s, lev], np.exp(ci.high), rtol=1e-10)
            # reference: statsmodels ttost_ind with transform=np.log
            usevar = "pooled" if equal_var else "unequal"
            _close(out["equivalence_p"][s, lev], ttost_ind(xa, xb, 0.8, 1.25, usevar=usevar,
                                                           transform=np.log)[0], rtol=1e-8)
            assert out["n"][s, lev] == out["n_cells"][s, lev] == len(xa)
            assert out["n_reference"][s, lev] == out["n_cells_reference"][s, lev] == len(xb)
            pv.append(out["p_value"][s, lev])
        # reference: statsmodels multipletests(method="holm") within the stratum, reference level excluded
        keep = np.arange(4) != ref_level
        _close(out["p_adjusted"][s, keep], multipletests(pv, method="holm")[1], rtol=1e-12)


def test_replicate_means_by_hand_and_bh():
    x, lc, rc, _ = _cells(2, n=1200, levels=5, reps=7)
    rc = np.where(lc == 3, rc % 2, rc)  # level 3: only two replicates
    out = fold_change_codes(x, lc, 5, 0, replicate_codes=rc, n_replicates=7, adjust="bh")
    y = np.log(x)

    def rep_means(lev):  # plain numpy: the mean of the logs of every replicate of the level
        return np.array([y[(lc == lev) & (rc == r)].mean() for r in np.unique(rc[lc == lev])])

    pv = []
    for lev in range(1, 5):
        a, b = rep_means(lev), rep_means(0)
        # Lord et al. (2020): the replicate mean is the unit; reference: scipy.stats.ttest_ind on those means
        ref = st.ttest_ind(a, b, equal_var=False)
        ci = ref.confidence_interval()
        _close(out["statistic"][0, lev], ref.statistic, rtol=1e-9)
        _close(out["p_value"][0, lev], ref.pvalue, rtol=1e-8)
        _close(out["ci_low"][0, lev], np.exp(ci.low), rtol=1e-10)
        _close(out["ci_high"][0, lev], np.exp(ci.high), rtol=1e-10)
        _close(out["ratio"][0, lev], np.exp(a.mean() - b.mean()), rtol=1e-12)
        assert out["n"][0, lev] == len(a) and out["n_reference"][0, lev] == len(b)
        assert out["n_cells"][0, lev] == int((lc == lev).sum())
        assert out["n_cells_reference"][0, lev] == int((lc == 0).sum())
        pv.append(ref.pvalue)
    assert out["n"][0, 3] == 2
    # reference: statsmodels multipletests(method="fdr_bh") across the non-reference levels
    _close(out["p_adjusted"][0, 1:], multipletests(pv, method="fdr_bh")[1], rtol=1e-8)


def test_paired_replicates_and_unmatched_counted():
    x, lc, rc, _ = _cells(3, n=1500, levels=3, reps=8)
    keep = ~((lc == 1) & (rc == 7)) & ~((lc == 0) & (rc == 6)) & ~((lc == 2) & (rc >= 5))
    x, lc, rc = x[keep], lc[keep], rc[keep]
    # level 1 lacks replicate 7, the reference lacks replicate 6, level 2 lacks 5, 6, 7
    out = fold_change_codes(x, lc, 3, 0, replicate_codes=rc, n_replicates=8, paired=True,
                            equivalence=(0.5, 2.0))
    y = np.log(x)

    def mean(lev, r):
        return y[(lc == lev) & (rc == r)].mean()

    for lev, shared, unpaired in ((1, [0, 1, 2, 3, 4, 5], 2), (2, [0, 1, 2, 3, 4], 2)):
        a = np.array([mean(lev, r) for r in shared])
        b = np.array([mean(0, r) for r in shared])
        ref = st.ttest_rel(a, b)  # reference: scipy.stats.ttest_rel on the matched replicate means
        _close(out["p_value"][0, lev], ref.pvalue, rtol=1e-8)
        _close(out["ci_low"][0, lev], np.exp(ref.confidence_interval().low), rtol=1e-10)
        assert out["df"][0, lev] == len(shared) - 1 and out["n"][0, lev] == len(shared)
        # counted, not silently dropped: level 1: its replicate 6 and the reference's 7 have no partner;
        # level 2 (replicates 0-4, all matched): the reference's 5 and 7 have no partner
        assert out["n_unpaired"][0, lev] == unpaired
        # reference: statsmodels ttost_paired on exp of the matched means (bounds on the ratio scale)
        _close(out["equivalence_p"][0, lev], ttost_paired(np.exp(a), np.exp(b), 0.5, 2.0,
                                                           transform=np.log)[0], rtol=1e-8)
    assert out["n_unpaired"][0, 0] == 0


def test_fewer_than_two_replicates_nan_no_exception():
    x = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0])
    lc = np.array([0, 0, 0, 1, 1, 1, 2])
    rc = np.array([0, 1, 2, 0, 0, 0, 1])  # level 1: one replicate; level 2: one value
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for paired in (False, True):
            out = fold_change_codes(x, lc, 4, 0, replicate_codes=rc, n_replicates=3, paired=paired)
            assert np.all(np.isnan(out["p_value"])) and np.all(np.isnan(out["ci_low"]))
            # level 3 has no values at all
            assert np.isnan(out["ratio"][0, 3]) and out["n"][0, 3] == 0 and out["n_cells"][0, 3] == 0
            if not paired:  # one replicate mean each: the ratio of those means is still reported
                _close(out["ratio"][0, 1], np.exp(np.log([4, 5, 6]).mean() - np.log([1, 2, 3]).mean()))
                assert out["n"][0, 1] == 1 and out["n_cells"][0, 1] == 3
        empty = fold_change_codes(np.array([]), np.array([], dtype=int), 2, 0)
        assert empty["ratio"].shape == (1, 2) and np.all(np.isnan(empty["ratio"]))


def test_nonpositive_and_missing_policies():
    x, lc, rc, _ = _cells(4, n=400, levels=3, reps=4)
    x = x.copy()
    i_np = np.flatnonzero(lc == 1)[:2]
    i_na = np.flatnonzero(lc == 2)[:2]
    x[i_np] = [0.0, -1.0]  # non-positive values in level 1
    x[i_na] = np.nan  # missing values in level 2
    rc = rc.copy()
    rc[np.flatnonzero(lc == 2)[2:4]] = -1  # two values without a replicate label
    lev_np, lev_na = {1}, {2}
    for kw in ({}, {"replicate_codes": rc, "n_replicates": 4}):
        drop = fold_change_codes(x, lc, 3, 0, nonpositive="drop", **kw)
        rais = fold_change_codes(x, lc, 3, 0, nonpositive="raise", **kw)
        for k in drop:
            _close(drop[k], rais[k], rtol=0)
        # dropping = computing on the positive values only (the definition of the policy)
        good = ~(x <= 0)
        clean = fold_change_codes(x[good], lc[good], 3, 0, **{k: v[good] for k, v in kw.items()
                                                              if k == "replicate_codes"},
                                  **{k: v for k, v in kw.items() if k == "n_replicates"})
        _close(drop["p_value"], clean["p_value"], rtol=1e-12)
        # nothing dropped without being counted: every value with a level is in exactly one count
        total = drop["n_cells"] + drop["n_missing"] + drop["n_nonpositive"] + drop.get("n_no_replicate", 0)
        assert np.array_equal(total[0], np.bincount(lc, minlength=3))
        assert drop["n_nonpositive"].sum() == 2 and drop["n_missing"].sum() == 2
        nan = fold_change_codes(x, lc, 3, 0, nonpositive="nan", **kw)
        for lev in range(3):
            affected = lev in lev_np or 0 in lev_np
            assert np.isnan(nan["ratio"][0, lev]) == affected, lev
        nomiss = fold_change_codes(x, lc, 3, 0, skipna=False, **kw)
        for lev in range(1, 3):
            assert np.isnan(nomiss["p_value"][0, lev]) == (lev in lev_na), lev
        if kw:
            assert drop["n_no_replicate"][0, 2] == 2 and drop["n_no_replicate"].sum() == 2


def test_reference_affected_poisons_stratum():
    x = np.array([1.0, 2.0, 3.0, 0.0, 2.0, 5.0, 6.0, 3.0, 5.0])
    lc = np.array([0, 0, 0, 0, 1, 1, 1, 2, 2])
    out = fold_change_codes(x, lc, 3, 0, nonpositive="nan")
    assert np.all(np.isnan(out["ratio"])) and np.all(np.isnan(out["p_value"]))
    assert out["n_nonpositive"][0, 0] == 1
    # paired: the differences are formed per replicate, the reference's policy still reaches every level
    rc = np.array([0, 1, 2, 2, 0, 1, 2, 0, 1])
    out = fold_change_codes(x, lc, 3, 0, replicate_codes=rc, n_replicates=3, paired=True, nonpositive="nan")
    assert np.all(np.isnan(out["ratio"])) and np.all(np.isnan(out["p_value"]))
    out = fold_change_codes(x, lc, 3, 0, replicate_codes=rc, n_replicates=3, paired=True, nonpositive="drop")
    # reference: scipy.stats.ttest_rel on the replicate means of the logs (replicate 2 of the reference
    # keeps the single positive value 3)
    _close(out["p_value"][0, 1], st.ttest_rel(np.log([2, 5, 6]), np.log([1, 2, 3])).pvalue, rtol=1e-8)
    assert out["n_unpaired"][0, 2] == 1  # level 2 has replicates 0 and 1 only
    out = fold_change_codes(x, lc, 3, 0, nonpositive="drop", adjust=None)
    assert "p_adjusted" not in out
    # reference: scipy.stats.ttest_ind on the logs of the positive values
    _close(out["p_value"][0, 1], st.ttest_ind(np.log([2, 5, 6]), np.log([1, 2, 3]), equal_var=False).pvalue,
           rtol=1e-8)


def test_inputs_not_mutated_and_read_only_ok():
    x, lc, rc, sc = _cells(5, n=300, levels=3, reps=4, strata=2)
    x[0] = np.nan
    arrays = [x, lc, rc, sc]
    before = [a.copy() for a in arrays]
    for a in arrays:
        a.flags.writeable = False
    fold_change_codes(x, lc, 3, 1, replicate_codes=rc, n_replicates=4, paired=True, stratum_codes=sc,
                      n_strata=2, adjust="bh", equivalence=(0.8, 1.25))
    for a, b in zip(arrays, before):
        np.testing.assert_array_equal(a, b)
    p = np.array([0.3, 0.01, np.nan])
    p.flags.writeable = False
    adjust_p(p, "holm")


def test_fold_change_errors():
    x = np.array([1.0, 2.0, 3.0])
    lc = np.array([0, 1, 1])
    with pytest.raises(ValueError, match="replicate_codes"):
        fold_change_codes(x, lc, 2, 0, paired=True)
    with pytest.raises(ValueError, match="n_levels"):
        fold_change_codes(x, np.array([0, 1, 2]), 2, 0)
    with pytest.raises(TypeError, match="level_codes"):
        fold_change_codes(x, lc.astype(float), 2, 0)
    with pytest.raises(ValueError, match="reference"):
        fold_change_codes(x, lc, 2, 5)
    with pytest.raises(ValueError, match="shape"):
        fold_change_codes(x, lc[:2], 2, 0)
    with pytest.raises(ValueError, match="n_replicates"):
        fold_change_codes(x, lc, 2, 0, replicate_codes=np.array([0, 0, 1]))
    with pytest.raises(ValueError, match="n_replicates"):
        fold_change_codes(x, lc, 2, 0, replicate_codes=np.array([0, 0, 3]), n_replicates=2)
    with pytest.raises(ValueError, match="adjust"):
        fold_change_codes(x, lc, 2, 0, adjust="bonferroni")
    with pytest.raises(ValueError, match="nonpositive"):
        fold_change_codes(x, lc, 2, 0, nonpositive="zero")
    with pytest.raises(ValueError, match=r"\+inf"):
        fold_change_codes(np.array([1.0, np.inf, 2.0]), lc, 2, 0, where="column 'gfp'")
    with pytest.raises(ValueError, match="equal_var"):
        fold_change_codes(x, lc, 2, 0, replicate_codes=np.array([0, 0, 1]), n_replicates=2, paired=True,
                          equal_var=True)
