"""Issue 13, statistics layer: reading non-detect notation, censored summaries (MLE, ROS, KM), censored
fold changes and the censored log-normal mean.

Outside references, named beside each check: scipy (CensoredData + lognorm.fit with a tight optimizer,
ecdf on right-censored data, optimize for a direct censored likelihood, t and norm), statsmodels (OLS and
its likelihood-ratio test), Cohen's (1961) λ table as printed in Berthouex & Brown (2002) (via
/work/shared/REFERENCES.md), Helsel's (2012) formulas for ROS worked by hand, and simulated coverage
against the nominal level. All data are invented (seeded random draws or hand-made numbers).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.optimize as so
import statsmodels.api as sm
from scipy import stats

from logstats.core.moments import moments_by_codes
from logstats.core.notation import parse_censored
from logstats.stats.censored import censored_lognormal_mean, censored_summary
from logstats.stats.censored_compare import censored_fold_change
from logstats.stats.estimate import summary_fields
from logstats.stats.lnmean import lognormal_mean

SUMMARY_FIELDS = ["n", "n_missing", "n_nonpositive", "n_censored", "gmean", "gsd", "gcv", "ci_low", "ci_high",
                  "ci_factor", "mean_log", "sd_log"]
FOLD_FIELDS = ["ratio", "ci_low", "ci_high", "p_value", "p_adjusted", "n", "n_reference", "n_censored",
               "n_censored_reference", "n_missing", "n_nonpositive", "log2_ratio"]


def tight_fmin(func, x0, args=(), disp=0):
    """scipy.optimize.fmin with tight tolerances (REFERENCES.md: the default stops near 1e-4)."""
    return so.fmin(func, x0, args=args, xtol=1e-10, ftol=1e-12, maxiter=20000, maxfun=40000, disp=0)


def scipy_censored_fit(x, dl):
    """Reference MLE: scipy.stats.CensoredData.left_censored + lognorm.fit(floc=0), tight optimizer."""
    cens = x <= dl
    data = stats.CensoredData.left_censored(np.where(cens, dl, x), cens)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scipy's optimizer may warn while exploring; not our code
        s, _, scale = stats.lognorm.fit(data, floc=0, optimizer=tight_fmin)
    return np.log(scale), s


# ----------------------------------------------------------------------------------------------------
# parse_censored: table of entries, expected value / limit, or the error expected

NAN = np.nan
PARSE_TABLE = [
    # entries, nd_limit, value, limit, error (exception type, words the message must contain)
    (["<0.5"], None, [0.5], [0.5], None),
    (["< 0.5"], None, [0.5], [0.5], None),
    (["  <=2 "], None, [2.0], [2.0], None),
    (["3.25", "1e-3", "-0.4"], None, [3.25, 1e-3, -0.4], [NAN, NAN, NAN], None),
    (["ND", "n.d.", "<LOD", "<loq", " bdl ", "< LOD"], 0.2, [0.2] * 6, [0.2] * 6, None),
    (["ND", "1.0", "nd"], [0.1, 9.0, 0.3], [0.1, 1.0, 0.3], [0.1, NAN, 0.3], None),
    (["", None, "NA", "nan"], None, [NAN] * 4, [NAN] * 4, None),
    (["0,5", "<0,25", "12,5", "0,125"], None, [0.5, 0.25, 12.5, 0.125], [NAN, 0.25, NAN, NAN], None),
    ([1.5, "<2", None, np.nan, 7], None, [1.5, 2.0, NAN, NAN, 7.0], [NAN, 2.0, NAN, NAN, NAN], None),
    (["1,234"], None, None, None, (ValueError, ["1 entry", "position 0", "'1,234'"])),
    (["1", "abc", "2", "x y", "abc"], None, None, None, (ValueError, ["3 entries", "position 1", "'x y'"])),
    (["ND", "2"], None, None, None, (ValueError, ["nd_limit", "position 0", "'ND'", "1 non-detect"])),
    (["ND", "ND"], [0.5, NAN], None, None, (ValueError, ["nd_limit", "position 1"])),
    (["<0"], None, None, None, (ValueError, ["positive", "position 0"])),
    (["ND"], -1.0, None, None, (ValueError, ["positive", "nd_limit"])),
    ([True, "1"], None, None, None, (TypeError, ["neither numbers nor text", "position 0"])),
]


@pytest.mark.parametrize("entries, nd_limit, value, limit, error", PARSE_TABLE)
def test_parse_censored_table(entries, nd_limit, value, limit, error):
    arr = np.array(entries, dtype=object)
    before = arr.copy()
    if error is not None:
        exc, words = error
        with pytest.raises(exc) as info:
            parse_censored(arr, nd_limit=nd_limit)
        for w in words:
            assert w in str(info.value), (w, str(info.value))
        return
    out = parse_censored(arr, nd_limit=nd_limit)
    np.testing.assert_array_equal(out.value, np.array(value, dtype=float))
    np.testing.assert_array_equal(out.limit, np.array(limit, dtype=float))
    assert all(a is b or a == b or (a != a and b != b) for a, b in zip(arr, before))  # never mutated
    assert out.n_censored == int(np.sum(~np.isnan(out.limit)))


def test_parse_censored_counts_and_numeric_paths():
    out = parse_censored(np.array(["<0.5", "<1", "<0.5", "2.0", "ND", ""], dtype=object), nd_limit=0.5)
    assert out.n_censored == 4 and out.n_keyword == 1 and out.n_missing == 1
    np.testing.assert_array_equal(out.limits, [0.5, 1.0])
    value, limit, flags = out  # unpacks as a triple
    np.testing.assert_array_equal(flags, [1, 1, 1, 0, 2, 3])
    # plain float and str arrays take the same path
    f = parse_censored(np.array([1.0, np.nan, 3.0]))
    np.testing.assert_array_equal(f.flags, [0, 3, 0])
    s = parse_censored(np.array(["1", "<2"]))
    np.testing.assert_array_equal(s.limit, [NAN, 2.0])
    # many rows, few distinct entries: parsed once per distinct entry, the result per row
    big = np.array(["<0.5", "1.5", "ND"] * 20000, dtype=object)
    b = parse_censored(big, nd_limit=0.25)
    assert b.n_censored == 40000 and b.value.shape == (60000,)


# ----------------------------------------------------------------------------------------------------
# censored_summary


def test_nothing_censored_equals_uncensored_summary_every_method():
    # reference: the uncensored summary (exp(ȳ ± t s/√n), scipy.stats.ttest_1samp on the logs)
    rng = np.random.default_rng(1)
    x = np.exp(rng.normal(1.0, 0.8, size=90))
    codes = np.repeat(np.arange(3), 30)
    m = moments_by_codes(x, codes, 3)
    ref = summary_fields(m, 0.95)
    ci = stats.ttest_1samp(np.log(x[:30]), 0.0).confidence_interval()
    for limit in (None, np.full(90, np.nan), 0.001):  # no limit, NaN limits, a limit below every value
        for method in ("mle", "ros", "km"):
            out = censored_summary(x, codes, 3, detection_limit=limit, method=method)
            assert list(out) == SUMMARY_FIELDS
            for f in ("gmean", "gsd", "gcv", "ci_low", "ci_high", "ci_factor"):
                np.testing.assert_allclose(out[f], ref[f], rtol=1e-12)
            np.testing.assert_allclose([out["ci_low"][0], out["ci_high"][0]], np.exp(ci), rtol=1e-12)
            assert (out["n_censored"] == 0).all()


def test_ros_and_km_kernels_reduce_to_the_uncensored_statistics():
    # the kernels themselves (not the routing of uncensored groups): the sample mean and ddof=1 SD
    # (common practice), and for KM the Greenwood-type SE of the mean equals s/√n (Kaplan & Meier 1958)
    from logstats.stats.censored import _Censored, _km_part, _ros_part

    rng = np.random.default_rng(3)
    x = np.exp(rng.normal(size=25))
    y = np.log(x)
    cd = _Censored(x, np.zeros(25, dtype=np.intp), 1, None, "drop", True)
    half = stats.t.ppf(0.975, 24) * y.std(ddof=1) / 5.0
    for part in (_km_part, _ros_part):
        o = part(cd, 0.95, np.array([0]))
        np.testing.assert_allclose(o["mean_log"], y.mean(), rtol=1e-13)
        np.testing.assert_allclose(o["sd_log"], y.std(ddof=1), rtol=1e-13)
        np.testing.assert_allclose(np.log(o["ci_factor"]), half, rtol=1e-12)


@pytest.mark.parametrize("frac", [0.1, 0.3, 0.6])
def test_mle_summary_equals_scipy_censored_fit(frac):
    # reference: scipy.stats.CensoredData.left_censored + lognorm.fit(floc=0), fmin xtol=1e-10
    rng = np.random.default_rng(int(frac * 100))
    x = np.exp(rng.normal(0.3, 1.1, size=80))
    dl = float(np.quantile(x, frac))
    mu, s = scipy_censored_fit(x, dl)
    out = censored_summary(x, np.zeros(80, dtype=np.intp), 1, detection_limit=dl)
    n = 80
    np.testing.assert_allclose(out["mean_log"][0], mu, rtol=1e-7, atol=1e-8)
    np.testing.assert_allclose(out["sd_log"][0], s * np.sqrt(n / (n - 1)), rtol=1e-7)
    np.testing.assert_allclose(out["gmean"][0], np.exp(mu), rtol=1e-7)
    assert out["n_censored"][0] == np.sum(x <= dl)


# Cohen (1961) λ table, as printed in Berthouex & Brown (2002) Table 15.4 (REFERENCES.md): μ̂ = ȳ − λ(ȳ − y_c)
# with h = n_censored/n, γ = s²/(ȳ − y_c)² (s² with denominator k). Detects at ȳ ± s, one limit y_c = 0.
COHEN = [(0.2, 0.1, "0.12469"), (0.2, 0.3, "0.4422"), (0.2, 0.5, "0.9012"),
         (0.3, 0.1, "0.13059"), (0.3, 0.3, "0.4595"), (0.3, 0.5, "0.9300")]


@pytest.mark.parametrize("gamma, h, lam", COHEN)
def test_mle_summary_reproduces_cohen_lambda_table(gamma, h, lam):
    n, ybar = 100, 1.0
    m = round(h * n)
    k = n - m
    y = np.r_[np.full(k // 2, ybar - np.sqrt(gamma)), np.full(k - k // 2, ybar + np.sqrt(gamma))]
    x = np.r_[np.exp(y), np.full(m, 0.5)]
    out = censored_summary(x, np.zeros(n, dtype=np.intp), 1, detection_limit=1.0)
    half_unit = 0.5 * 10.0 ** -(len(lam) - 2)  # the table is rounded to its printed digits
    lam_mu = (ybar - out["mean_log"][0]) / ybar
    sigma2 = out["sd_log"][0] ** 2 * (n - 1) / n  # back to the MLE (ddof=0)
    assert abs(lam_mu - float(lam)) <= half_unit + 1e-9
    assert abs((sigma2 - np.var(y)) / ybar**2 - float(lam)) <= half_unit + 1e-9


def _ros_by_hand(y, cens_limit):
    """Helsel (2012) ROS written out literally (loops over limits and values, one group):
    A_j, B_j, C_j, pe_j = pe_{j+1} + A_j/(A_j+B_j)(1 − pe_{j+1}), positions, OLS of logs on normal scores."""
    det = np.isnan(cens_limit)
    yd = y[det]
    cl = cens_limit[~det]
    limits = sorted(set(cl.tolist()))
    if yd.min() < limits[0]:
        limits = [-np.inf] + limits
    J = len(limits)
    A = [np.sum((yd >= limits[j]) & (yd < (limits[j + 1] if j + 1 < J else np.inf))) for j in range(J)]
    B = [np.sum(yd < limits[j]) + np.sum(cl <= limits[j]) for j in range(J)]
    pe = [0.0] * (J + 1)
    for j in range(J - 1, -1, -1):
        pe[j] = pe[j + 1] + A[j] / (A[j] + B[j]) * (1 - pe[j + 1])
    zd, yds, zc = [], [], []
    for j in range(J):
        hi = limits[j + 1] if j + 1 < J else np.inf
        vals = np.sort(yd[(yd >= limits[j]) & (yd < hi)])
        for r, v in enumerate(vals, 1):
            zd.append(stats.norm.ppf((1 - pe[j]) + (pe[j] - pe[j + 1]) * r / (A[j] + 1)))
            yds.append(v)
        Cj = int(np.sum(cl == limits[j]))
        for r in range(1, Cj + 1):
            zc.append(stats.norm.ppf((1 - pe[j]) * r / (Cj + 1)))
    slope, icpt = np.polyfit(zd, yds, 1)
    comb = np.r_[yds, icpt + slope * np.array(zc)]
    return comb.mean(), comb.std(ddof=1)


def test_ros_single_limit_hand_worked():
    # Hand-worked (Helsel 2012 formulas): detects 2, 3, 5 and two non-detects <1, n = 5. pe = 3/5;
    # detects at 0.4 + 0.6·r/4 = 0.55, 0.70, 0.85; non-detects at 0.4·r/3 = 0.1333, 0.2667.
    x = np.array([2.0, 3.0, 5.0, 1.0, 1.0])
    dl = np.array([np.nan, np.nan, np.nan, 1.0, 1.0])
    zd = stats.norm.ppf([0.55, 0.70, 0.85])
    zc = stats.norm.ppf([0.4 / 3, 0.8 / 3])
    slope, icpt = np.polyfit(zd, np.log([2.0, 3.0, 5.0]), 1)
    comb = np.r_[np.log([2.0, 3.0, 5.0]), icpt + slope * zc]
    out = censored_summary(x, np.zeros(5, dtype=np.intp), 1, detection_limit=dl, method="ros")
    np.testing.assert_allclose(out["mean_log"][0], comb.mean(), rtol=1e-13)
    np.testing.assert_allclose(out["sd_log"][0], comb.std(ddof=1), rtol=1e-13)


def test_ros_multiple_limits_match_literal_formulas_per_group():
    # several limits per group, detects below, between and at limits; reference: _ros_by_hand (Helsel 2012)
    rng = np.random.default_rng(7)
    G, n = 6, 30
    x = np.exp(rng.normal(0.0, 1.0, size=G * n))
    dl = np.where(rng.random(G * n) < 0.6, rng.choice([0.4, 0.8, 1.5], size=G * n), np.nan)
    x[3] = 0.8  # a detect equal to another row's limit
    dl[3] = np.nan
    codes = np.repeat(np.arange(G), n)
    out = censored_summary(x, codes, G, detection_limit=dl, method="ros")
    for g in range(G):
        s = slice(g * n, (g + 1) * n)
        xs, ds = x[s], dl[s]
        cens = ~np.isnan(ds) & (xs <= ds)
        mean, sd = _ros_by_hand(np.log(np.where(cens, ds, xs)), np.where(cens, np.log(ds), np.nan))
        np.testing.assert_allclose(out["mean_log"][g], mean, rtol=1e-11, atol=1e-12)
        np.testing.assert_allclose(out["sd_log"][g], sd, rtol=1e-11)


def _km_mean_scipy(x, dl):
    """Mean of the logs from scipy.stats.ecdf on the flipped logs, right-censored (remaining mass at the
    largest flipped time, i.e. the smallest limit)."""
    cens = ~np.isnan(dl) & (x <= dl)
    t = -np.log(np.where(cens, dl, x))
    res = stats.ecdf(stats.CensoredData.right_censored(t, cens))
    q, s = res.sf.quantiles, res.sf.probabilities
    p = np.r_[1.0, s[:-1]] - s
    return -((p * q).sum() + s[-1] * t.max())


def test_km_equals_scipy_ecdf_on_flipped_data():
    rng = np.random.default_rng(4)
    G, n = 5, 40
    x = np.exp(rng.normal(size=G * n))
    dl = np.where(rng.random(G * n) < 0.5, rng.choice([0.5, 1.0, 2.0], size=G * n), np.nan)
    codes = np.repeat(np.arange(G), n)
    out = censored_summary(x, codes, G, detection_limit=dl, method="km")
    for g in range(G):
        s = slice(g * n, (g + 1) * n)
        ref = _km_mean_scipy(x[s], dl[s])  # scipy.stats.ecdf on CensoredData.right_censored
        np.testing.assert_allclose(out["mean_log"][g], ref, rtol=1e-12, atol=1e-13)


def test_km_hand_worked():
    # Hand computation: logs (detects) 2, 1, 0 and one non-detect at log-limit 0.5, flipped: KM on
    # t = −y. Descending: u=2: r=4, d=1 -> S=3/4; u=1: r=3 (1, 0.5-limit, 0), d=1 -> S=1/2;
    # u=0: r=1 (only 0 lies at or below 0; the limit 0.5 is above), d=1 -> S=0.
    # Masses 1/4, 1/4, 1/2 at 2, 1, 0: mean 0.75; variance 0.25·1.5625+0.25·0.0625+0.5·0.5625 = 0.6875.
    # Greenwood-type SE² of the mean: A(2)=S(2)(2−1)+S(1)(1−0)=0.75+0.5=1.25 -> 1.25²/(4·3);
    # A(1)=0.5 -> 0.25/(3·2); A(0)=0 -> total 0.13020833 + 0.04166667 = 0.171875, times k/(k−1)=1.5.
    x = np.exp(np.array([2.0, 1.0, 0.0, 0.5]))
    dl = np.array([np.nan, np.nan, np.nan, np.exp(0.5)])
    out = censored_summary(x, np.zeros(4, dtype=np.intp), 1, detection_limit=dl, method="km")
    np.testing.assert_allclose(out["mean_log"][0], 0.75, rtol=1e-14)
    np.testing.assert_allclose(out["sd_log"][0], np.sqrt(0.6875 * 4 / 3), rtol=1e-14)
    half = stats.t.ppf(0.975, 2) * np.sqrt(0.171875 * 1.5)
    np.testing.assert_allclose(np.log(out["ci_factor"][0]), half, rtol=1e-13)


def test_grouped_equals_one_group_at_a_time_and_edge_groups():
    rng = np.random.default_rng(9)
    x = np.exp(rng.normal(size=60))
    dl = np.where(rng.random(60) < 0.4, 0.8, np.nan)
    x[50:59] = 0.5  # group 5: all censored (row 59 is in no group)
    dl[50:59] = 0.8
    x[40] = 0.0  # a zero at or below its limit: censored, not non-positive
    dl[40] = 0.8
    x[41] = -1.0  # a negative without a limit: non-positive
    dl[41] = np.nan
    x[42] = np.nan
    codes = np.repeat(np.arange(6), 10)
    codes[59] = -1  # a row in no group
    for method in ("mle", "ros", "km"):
        out = censored_summary(x, codes, 7, detection_limit=dl, method=method)
        for g in range(5):
            sel = codes == g
            one = censored_summary(x[sel], np.zeros(sel.sum(), dtype=np.intp), 1, detection_limit=dl[sel],
                                   method=method)
            for f in SUMMARY_FIELDS:
                np.testing.assert_allclose(out[f][g], one[f][0], rtol=1e-10, err_msg=f"{method} {f}")
        assert np.isnan(out["gmean"][5]) and out["n_censored"][5] == 9  # every value censored: NaN
        assert np.isnan(out["gmean"][6]) and out["n"][6] == 0  # empty group: NaN, no exception
        assert out["n_nonpositive"][4] == 1 and out["n_missing"][4] == 1 and out["n_censored"][4] >= 1
        nan = censored_summary(x, codes, 7, detection_limit=dl, method=method, nonpositive="nan")
        assert np.isnan(nan["gmean"][4]) and np.isfinite(nan["gmean"][0])
        skip = censored_summary(x, codes, 7, detection_limit=dl, method=method, skipna=False)
        assert np.isnan(skip["gmean"][4])


def test_bad_options_raise_with_the_keyword():
    x = np.ones(3)
    c = np.zeros(3, dtype=np.intp)
    with pytest.raises(ValueError, match="method="):
        censored_summary(x, c, 1, detection_limit=0.5, method="subst")
    with pytest.raises(ValueError, match="confidence_level"):
        censored_summary(x, c, 1, detection_limit=0.5, confidence_level=95)
    with pytest.raises(ValueError, match="detection_limit holds 1"):
        censored_summary(x, c, 1, detection_limit=np.array([0.5, -1.0, np.nan]))
    with pytest.raises(ValueError, match="reference"):
        censored_fold_change(x, c, 1, 3, detection_limit=0.5)
    with pytest.raises(ValueError, match="method="):
        censored_lognormal_mean(x, c, 1, detection_limit=0.5, method="gci")


# ----------------------------------------------------------------------------------------------------
# simulated coverage (true geometric mean 1, σ = 1, one limit at the censored fraction's quantile)

def _coverage(method, n, frac, R=1500, seed=0):
    rng = np.random.default_rng(seed)
    x = np.exp(rng.normal(size=R * n))
    codes = np.repeat(np.arange(R), n)
    dl = float(np.exp(stats.norm.ppf(frac))) if frac > 0 else None
    out = censored_summary(x, codes, R, detection_limit=dl, method=method)
    ok = np.isfinite(out["ci_low"])
    return float(np.mean((out["ci_low"][ok] <= 1) & (out["ci_high"][ok] >= 1))), float(
        np.mean(out["mean_log"][ok]))


# measured (R = 1500, n = 20, seed 0; printed by -s): coverage of a nominal 95 % interval
#   censored   mle    ros    km
#      0 %    0.95   0.95   0.95
#     30 %    0.96   0.92   0.89
#     60 %    0.95   0.75   0.01
COVERAGE_BOUNDS = {("mle", 0.0): (0.935, 0.965), ("mle", 0.3): (0.935, 0.975), ("mle", 0.6): (0.93, 0.975),
                   ("ros", 0.0): (0.935, 0.965), ("ros", 0.3): (0.89, 0.95), ("ros", 0.6): (0.70, 0.81),
                   ("km", 0.0): (0.935, 0.965), ("km", 0.3): (0.84, 0.93), ("km", 0.6): (0.0, 0.05)}


@pytest.mark.parametrize("method", ["mle", "ros", "km"])
def test_simulated_coverage_table(method):
    for frac in (0.0, 0.3, 0.6):
        cov, bias = _coverage(method, 20, frac)
        print(f"{method} {frac:.0%} coverage {cov:.3f} bias {bias:+.3f}")
        lo, hi = COVERAGE_BOUNDS[(method, frac)]
        assert lo <= cov <= hi, (method, frac, cov)


def test_mle_stays_near_nominal_where_substitution_does_not():
    # 80 % censored, n = 50: substitution of DL/2 (common practice, the thing to replace) vs the MLE
    R, n = 1000, 50
    rng = np.random.default_rng(12)
    y = rng.normal(size=(R, n))
    dl = float(np.exp(stats.norm.ppf(0.8)))
    x = np.exp(y).ravel()
    out = censored_summary(x, np.repeat(np.arange(R), n), R, detection_limit=dl)
    cov_mle = np.mean((out["ci_low"] <= 1) & (out["ci_high"] >= 1))
    ys = np.log(np.where(x <= dl, dl / 2, x)).reshape(R, n)
    half = stats.t.ppf(0.975, n - 1) * ys.std(axis=1, ddof=1) / np.sqrt(n)
    cov_sub = np.mean(np.abs(ys.mean(axis=1)) <= half)
    assert 0.89 <= cov_mle <= 0.96 and cov_sub < 0.05


# ----------------------------------------------------------------------------------------------------
# censored_fold_change


def test_fold_change_without_censoring_equals_statsmodels_ols():
    # reference: statsmodels OLS on the logs with level dummies (coefficients, conf_int) and
    # OLSResults.compare_lr_test for the likelihood-ratio p of each level against the reference
    rng = np.random.default_rng(5)
    n = [8, 10, 12]
    lev = np.repeat(np.arange(3), n)
    y = rng.normal(size=lev.size) + np.array([0.0, 0.5, -0.3])[lev]
    out = censored_fold_change(np.exp(y), lev, 3, 0, detection_limit=None)
    assert list(out)[:len(FOLD_FIELDS)] == FOLD_FIELDS
    X = np.column_stack([np.ones(lev.size), lev == 1, lev == 2]).astype(float)
    fit = sm.OLS(y, X).fit()
    np.testing.assert_allclose(np.log(out["ratio"][0, 1:]), fit.params[1:], rtol=1e-12)
    np.testing.assert_allclose(np.log(out["ci_low"][0, 1:]), fit.conf_int()[1:, 0], rtol=1e-10)
    np.testing.assert_allclose(np.log(out["ci_high"][0, 1:]), fit.conf_int()[1:, 1], rtol=1e-10)
    for lv in (1, 2):
        lr = fit.compare_lr_test(sm.OLS(y, np.delete(X, lv, axis=1)).fit())
        np.testing.assert_allclose(out["statistic"][0, lv], lr[0], rtol=1e-9)
        np.testing.assert_allclose(out["p_value"][0, lv], lr[1], rtol=1e-9)
    assert out["ratio"][0, 0] == 1.0 and np.isnan(out["p_value"][0, 0])
    # the ratio is exactly exp(mean difference of the logs)
    np.testing.assert_allclose(out["log2_ratio"][0, 1] * np.log(2), y[lev == 1].mean() - y[lev == 0].mean(),
                               rtol=1e-12)


def _direct_censored_fit(y, cens, lev, L, restrict=None):
    """Direct maximisation of the censored normal likelihood with scipy.optimize (fmin xtol=1e-10, then
    BFGS gtol=1e-10); ``restrict`` = level whose location is tied to level 0's."""
    def nll(th):
        mu = np.array(th[:L])
        if restrict is not None:
            mu[restrict] = mu[0]
        s = np.exp(th[L])
        mm = mu[lev]
        return -(stats.norm.logpdf(y[~cens], mm[~cens], s).sum()
                 + stats.norm.logcdf(y[cens], mm[cens], s).sum())
    th = tight_fmin(nll, np.r_[np.zeros(L), 0.0])
    th = so.minimize(nll, th, method="BFGS", options=dict(gtol=1e-10)).x
    return th, nll


def test_fold_change_with_censoring_equals_direct_likelihood_maximisation():
    rng = np.random.default_rng(6)
    L, n = 3, [15, 12, 18]
    lev = np.repeat(np.arange(L), n)
    x = np.exp(rng.normal(size=lev.size) + np.array([0.0, 0.6, -0.4])[lev])
    dl = np.where(rng.random(lev.size) < 0.6, rng.choice([0.6, 1.0], size=lev.size), np.nan)
    cens = ~np.isnan(dl) & (x <= dl)
    y = np.log(np.where(cens, dl, x))
    out = censored_fold_change(x, lev, L, 0, detection_limit=dl, adjust="holm")
    th, nll = _direct_censored_fit(y, cens, lev, L)
    np.testing.assert_allclose(np.log(out["ratio"][0, 1:]), th[1:L] - th[0], atol=1e-6)
    np.testing.assert_allclose(out["sigma"][0, 0], np.exp(th[L]), rtol=1e-6)
    for lv in (1, 2):
        thr, nllr = _direct_censored_fit(y, cens, lev, L, restrict=lv)
        np.testing.assert_allclose(out["statistic"][0, lv], 2 * (nllr(thr) - nll(th)), rtol=1e-6, atol=1e-8)
    # Wald variance: inverse of a finite-difference Hessian of the direct likelihood in (mu, sigma)
    def nll_ms(p):
        mu, s = p[:L], p[L]
        mm = mu[lev]
        return -(stats.norm.logpdf(y[~cens], mm[~cens], s).sum()
                 + stats.norm.logcdf(y[cens], mm[cens], s).sum())
    p0 = np.r_[th[:L], np.exp(th[L])]
    h = 1e-4
    H = np.zeros((L + 1, L + 1))
    for i in range(L + 1):
        for j in range(L + 1):
            e_i, e_j = np.eye(L + 1)[i] * h, np.eye(L + 1)[j] * h
            H[i, j] = (nll_ms(p0 + e_i + e_j) - nll_ms(p0 + e_i - e_j) - nll_ms(p0 - e_i + e_j)
                       + nll_ms(p0 - e_i - e_j)) / (4 * h * h)
    cov = np.linalg.inv(H)
    N, p = lev.size, L
    for lv in (1, 2):
        a = np.zeros(L + 1)
        a[lv], a[0] = 1.0, -1.0
        half = stats.t.ppf(0.975, N - p) * np.sqrt(a @ cov @ a * N / (N - p))
        np.testing.assert_allclose(np.log(out["ci_high"][0, lv] / out["ratio"][0, lv]), half, rtol=1e-5)
    assert out["n_censored"][0].tolist() == [int(cens[lev == i].sum()) for i in range(L)]
    assert (out["n_censored_reference"][0] == cens[lev == 0].sum()).all()
    assert np.all(out["p_adjusted"][0, 1:] >= out["p_value"][0, 1:])


def test_fold_change_strata_equal_separate_calls_and_edge_levels():
    rng = np.random.default_rng(8)
    S, L, n = 4, 3, 12
    lev = np.tile(np.repeat(np.arange(L), n), S)
    st = np.repeat(np.arange(S), L * n)
    x = np.exp(rng.normal(size=lev.size))
    dl = np.where(rng.random(lev.size) < 0.4, 0.7, np.nan)
    sel3 = (st == 3) & (lev == 2)
    x[sel3], dl[sel3] = 0.1, 0.7  # stratum 3, level 2: every value censored -> NaN, others unaffected
    out = censored_fold_change(x, lev, L, 0, detection_limit=dl, stratum_codes=st, n_strata=S)
    for s in range(S - 1):
        one = censored_fold_change(x[st == s], lev[st == s], L, 0, detection_limit=dl[st == s])
        for f in ("ratio", "ci_low", "ci_high", "p_value", "p_adjusted"):
            np.testing.assert_allclose(out[f][s], one[f][0], rtol=1e-9, err_msg=f)
    assert np.isnan(out["ratio"][3, 2]) and np.isfinite(out["ratio"][3, 1])
    keep = ~sel3  # dropping the all-censored level is the limit of the full fit (documented)
    one = censored_fold_change(x[keep & (st == 3)], lev[keep & (st == 3)], L, 0,
                               detection_limit=dl[keep & (st == 3)])
    np.testing.assert_allclose(out["ratio"][3, 1], one["ratio"][0, 1], rtol=1e-9)


def test_fold_change_simulated_coverage_and_size():
    # measured (R = 1500 strata of two levels, n = 15 each, true ratio 1): coverage / size at 0 %, 30 %, 60 %
    # censoring about 0.95 / 0.05, 0.95 / 0.06, 0.96 / 0.05 (nominal 0.95 / 0.05)
    R, n = 1500, 15
    rng = np.random.default_rng(21)
    lev = np.tile(np.repeat([0, 1], n), R)
    st = np.repeat(np.arange(R), 2 * n)
    for frac in (0.0, 0.3, 0.6):
        x = np.exp(rng.normal(size=lev.size))
        dl = float(np.exp(stats.norm.ppf(frac))) if frac else None
        out = censored_fold_change(x, lev, 2, 0, detection_limit=dl, stratum_codes=st, n_strata=R,
                                   adjust=None)
        lo, hi, p = out["ci_low"][:, 1], out["ci_high"][:, 1], out["p_value"][:, 1]
        ok = np.isfinite(lo)
        cov, size = np.mean((lo[ok] <= 1) & (hi[ok] >= 1)), np.mean(p[ok] < 0.05)
        print(f"fold change {frac:.0%}: coverage {cov:.3f} size {size:.3f}")
        assert 0.93 <= cov <= 0.975 and 0.03 <= size <= 0.075


# ----------------------------------------------------------------------------------------------------
# censored_lognormal_mean


def test_lognormal_mean_without_censoring_is_cox():
    # reference: logstats.stats.lnmean.lognormal_mean(method="cox"), itself checked against Olsson (2005)
    rng = np.random.default_rng(2)
    x = np.exp(rng.normal(1.0, 0.9, size=60))
    codes = np.repeat(np.arange(3), 20)
    ref = lognormal_mean(moments_by_codes(x, codes, 3), method="cox")
    out = censored_lognormal_mean(x, codes, 3, detection_limit=0.001)
    for f in ("estimate", "ci_low", "ci_high"):
        np.testing.assert_allclose(out[f], ref[f], rtol=1e-13)
    assert list(out) == ["estimate", "ci_low", "ci_high", "n", "n_censored", "method"]


def test_lognormal_mean_censored_delta_method_and_coverage():
    # point estimate from the scipy CensoredData MLE (tight fmin); coverage by simulation
    rng = np.random.default_rng(13)
    x = np.exp(rng.normal(0.2, 0.8, size=70))
    dl = float(np.quantile(x, 0.4))
    mu, s = scipy_censored_fit(x, dl)
    out = censored_lognormal_mean(x, np.zeros(70, dtype=np.intp), 1, detection_limit=dl)
    np.testing.assert_allclose(out["estimate"][0], np.exp(mu + 0.5 * s * s * 70 / 69), rtol=1e-7)
    # measured (R = 1500, n = 30, σ = 1): coverage about 0.94 at 0 % and 0.94 at 50 % censoring
    R, n = 1500, 30
    truth = np.exp(0.5)
    for frac in (0.0, 0.5):
        xs = np.exp(rng.normal(size=R * n))
        lim = float(np.exp(stats.norm.ppf(frac))) if frac else None
        o = censored_lognormal_mean(xs, np.repeat(np.arange(R), n), R, detection_limit=lim)
        cov = np.mean((o["ci_low"] <= truth) & (o["ci_high"] >= truth))
        print(f"log-normal mean {frac:.0%}: coverage {cov:.3f}")
        assert 0.91 <= cov <= 0.97
