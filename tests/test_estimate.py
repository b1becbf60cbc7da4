"""Estimates from moments against scipy, statsmodels and published check values."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

import logstats
from logstats.core.moments import LogMoments, moments_along
from logstats.stats import estimate
from tests.references import REFERENCE_TABLE


@pytest.mark.parametrize("name", sorted(REFERENCE_TABLE))
@pytest.mark.parametrize("n", [2, 3, 17, 1000])
def test_reference_table(name, n):
    ours, ref, source = REFERENCE_TABLE[name]
    x = np.random.default_rng(n).lognormal(1.3, 0.8, n)
    assert ours(x) == pytest.approx(ref(x), rel=1e-12), source


def test_scipy_gstd_docstring_value():
    # scipy.stats.gstd docstring: gstd(np.arange(1, 25)) = 2.2944076136018947 (ddof=1).
    assert logstats.gsd(np.arange(1, 25)) == pytest.approx(2.2944076136018947, rel=1e-15)


def test_standard_lognormal_mean_and_sd_from_nist_handbook():
    # NIST DATAPAC / e-Handbook: the standard log-normal has mean sqrt(e) = 1.64872127 and SD
    # 2.16119742. With mu=0, s=1 the formulas exp(mu+s^2/2) and sqrt(exp(2mu+s^2)(exp(s^2)-1)) give them;
    # our gcv is sqrt(exp(s^2)-1), so mean * gcv must equal that SD.
    m = LogMoments(n=np.array(3), mean_log=np.array(0.0), m2_log=np.array(2.0),
                   n_missing=np.array(0), n_nonpositive=np.array(0))
    mean = np.exp(0.0 + m.var_log(1) / 2)
    assert mean == pytest.approx(1.64872127, abs=1e-8)
    assert mean * estimate.gcv(m) == pytest.approx(2.16119742, abs=1e-8)


def test_dispersion_interval_coverage_limpert():
    # Limpert, Stahel & Abbt (2001): gmean x/ gsd covers 68.27 %, x/ gsd^2 covers 95.45 % of a
    # log-normal population (Phi(1)-Phi(-1) = 0.6826894921370859, Phi(2)-Phi(-2) = 0.9544997361036416).
    rng = np.random.default_rng(7)
    x = rng.lognormal(3.0, 1.1, 200_000)
    m = moments_along(x)
    for z, cover in [(1, 0.6826894921370859), (2, 0.9544997361036416)]:
        lo, hi = estimate.dispersion_interval(m, z=z)
        frac = np.mean((x >= lo) & (x <= hi))
        se = np.sqrt(cover * (1 - cover) / x.size)
        assert abs(frac - cover) < 5 * se + 2e-3  # binomial SE plus the estimation error of mu, s


def test_prediction_interval_matches_statsmodels_ols():
    # statsmodels OLS with only an intercept: obs_ci is ybar +/- t * s * sqrt(1 + 1/n).
    sm = pytest.importorskip("statsmodels.api")
    x = np.random.default_rng(11).lognormal(0.2, 0.6, 25)
    y = np.log(x)
    fit = sm.OLS(y, np.ones_like(y)).fit()
    frame = fit.get_prediction(np.ones((1, 1))).summary_frame(alpha=0.10)
    lo, hi = estimate.prediction_interval(moments_along(x), confidence_level=0.90)
    assert lo == pytest.approx(np.exp(frame["obs_ci_lower"].iloc[0]), rel=1e-12)
    assert hi == pytest.approx(np.exp(frame["obs_ci_upper"].iloc[0]), rel=1e-12)


def test_ci_factor_is_multiplicative_half_width():
    x = np.random.default_rng(5).lognormal(2.0, 0.5, 40)
    s = logstats.summary(x, confidence_level=0.9)
    res = stats.ttest_1samp(np.log(x), 0.0).confidence_interval(0.9)  # scipy reference
    assert s["ci_factor"] == pytest.approx(np.exp((res.high - res.low) / 2), rel=1e-12)
    assert s["gmean"] * s["ci_factor"] == pytest.approx(s["ci_high"], rel=1e-13)


def test_small_n_gives_nan_not_errors():
    one = logstats.summary(np.array([5.0]))
    assert one["n"] == 1 and one["gmean"] == pytest.approx(5.0)
    assert np.isnan(one["gsd"]) and np.isnan(one["ci_low"]) and np.isnan(one["ci_high"])
    empty = logstats.summary(np.array([]))
    assert empty["n"] == 0 and np.isnan(empty["gmean"])


def test_confidence_level_validated():
    with pytest.raises(ValueError, match="confidence_level"):
        logstats.summary(np.array([1.0, 2.0]), confidence_level=95)


def test_gcv_small_s_accurate():
    # For tiny s, sqrt(exp(s^2)-1) ~ s (Taylor expansion, common practice); expm1 keeps it exact.
    x = np.exp(np.array([0.0, 1e-9, -1e-9]))
    s = np.std(np.log(x), ddof=1)
    assert logstats.gcv(x) == pytest.approx(s, rel=1e-6, abs=0)
