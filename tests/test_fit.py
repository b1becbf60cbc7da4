"""fit, scale_check and lognormal_mean through the pandas and xarray accessors."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import optimize, stats

import logstats  # noqa: F401
from tests.conftest import requires_dask


def _tight(func, x0, args=(), disp=0):
    # REFERENCES.md: scipy's default optimizer stops near 1e-4; a tight fmin compares at 1e-7
    return optimize.fmin(func, x0, args=args, xtol=1e-10, ftol=1e-12, disp=disp, maxiter=20000, maxfun=40000)


@pytest.fixture
def assay():
    # invented: a marker channel measured against a per-plate detection limit, zeros for non-detects
    rng = np.random.default_rng(5)
    n = 900
    plate = rng.choice(["p1", "p2", "p3"], n)
    limit = np.select([plate == "p1", plate == "p2"], [8.0, 10.0], 12.0)
    x = rng.lognormal(2.5, 0.7, n)
    reported = np.where(x <= limit, 0.0, x)  # non-detects written as 0 by the instrument
    return pd.DataFrame({"arm": rng.choice(["ctl", "trt"], n), "plate": plate, "dl": limit,
                         "marker": reported})


def test_censored_fit_matches_scipy_censored_data(assay):
    out = assay.logstats.fit(by="arm", columns="marker", detection_limit="dl")
    for arm, grp in assay.groupby("arm"):
        x, dl = grp["marker"].to_numpy(), grp["dl"].to_numpy()
        cens = x <= dl
        data = stats.CensoredData(uncensored=x[~cens], left=dl[cens])  # scipy reference
        s, _, scale = stats.lognorm.fit(data, floc=0, optimizer=_tight)
        row = out.loc[arm]
        assert row["mu"] == pytest.approx(np.log(scale), rel=1e-6)
        assert row["sigma"] == pytest.approx(s, rel=1e-6)
        assert row["n_censored"] == cens.sum() and row["n"] == len(x) and row["converged"]
        ll = stats.lognorm.logpdf(x[~cens], s, scale=scale).sum() + stats.lognorm.logcdf(dl[cens], s,
                                                                                        scale=scale).sum()
        assert row["loglik"] == pytest.approx(ll, rel=1e-8)


def test_zeros_need_a_limit_or_a_policy(assay):
    with pytest.raises(ValueError, match=r"column 'marker'.*at or below zero.*detection_limit="):
        assay.logstats.fit(by="arm", columns="marker")
    dropped = assay.logstats.fit(by="arm", columns="marker", nonpositive="drop")
    assert (dropped["n_nonpositive"] > 0).all() and (dropped["n_censored"] == 0).all()


def test_plain_fit_is_scipy_lognorm_fit():
    x = np.random.default_rng(2).lognormal(1.1, 0.4, 500)
    row = pd.Series(x, name="v").logstats.fit()
    s, _, scale = stats.lognorm.fit(x, floc=0)  # scipy reference (closed form with floc=0)
    assert row["mu"] == pytest.approx(np.log(scale), rel=1e-9)
    assert row["sigma"] == pytest.approx(s, rel=1e-7)
    assert row["status"] == "closed_form"


def test_wholly_censored_group_is_nan_with_status():
    df = pd.DataFrame({"g": ["a"] * 5 + ["b"] * 5, "x": [0.1] * 5 + [1.0, 2.0, 3.0, 0.1, 5.0]})
    out = df.logstats.fit(by="g", detection_limit=0.5)
    assert np.isnan(out.loc["a", "mu"]) and not out.loc["a", "converged"]
    assert out.loc["a", "status"] == "all_censored"
    assert out.loc["b", "converged"]


def test_scale_check_verdicts_and_aic():
    rng = np.random.default_rng(8)
    df = pd.DataFrame({"kind": np.repeat(["skewed", "symmetric"], 400),
                       "x": np.concatenate([rng.lognormal(3, 0.9, 400), rng.normal(100, 5, 400)])})
    # margin=0: the verdict from the sign of the AIC difference alone (before DESIGN.md's margin rule,
    # default 2, under which a normal sample with a CV of 5 % is rightly "undecided")
    out = df.logstats.scale_check(by="kind", margin=0)
    assert out.loc["skewed", "preferred"] == "log" and out.loc["symmetric", "preferred"] == "linear"
    x = df.loc[df.kind == "skewed", "x"].to_numpy()
    # AIC = 2k - 2 log L with scipy's logpdf sums at the MLE (REFERENCES.md, model choice)
    ll_norm = stats.norm.logpdf(x, x.mean(), x.std()).sum()
    s, _, scale = stats.lognorm.fit(x, floc=0)
    ll_lognorm = stats.lognorm.logpdf(x, s, scale=scale).sum()
    assert out.loc["skewed", "aic_normal"] == pytest.approx(4 - 2 * ll_norm, rel=1e-10)
    assert out.loc["skewed", "aic_lognormal"] == pytest.approx(4 - 2 * ll_lognorm, rel=1e-8)
    assert out.loc["skewed", "normality_p_log"] == pytest.approx(stats.shapiro(np.log(x)).pvalue, rel=1e-6)
    assert out.loc["skewed", "expected_ratio"] == pytest.approx(np.exp(np.var(np.log(x), ddof=1) / 2))


def test_lognormal_mean_cox_formula_and_reproducible():
    x = np.random.default_rng(4).lognormal(2.0, 0.8, 60)
    row = pd.Series(x).logstats.lognormal_mean(method="cox")
    y = np.log(x)
    m, s2, n = y.mean(), y.var(ddof=1), len(y)
    half = stats.norm.ppf(0.975) * np.sqrt(s2 / n + s2**2 / (2 * (n - 1)))  # Zhou & Gao (1997)
    assert row["estimate"] == pytest.approx(np.exp(m + s2 / 2), rel=1e-12)
    assert row["ci_low"] == pytest.approx(np.exp(m + s2 / 2 - half), rel=1e-12)
    a = pd.Series(x).logstats.lognormal_mean(method="gci", random_state=3)
    b = pd.Series(x).logstats.lognormal_mean(method="gci", random_state=3)
    assert a["ci_low"] == b["ci_low"] and a["ci_high"] == b["ci_high"]


@requires_dask
def test_xarray_fit_equals_pandas_and_dask_equals_numpy(assay):
    da = xr.DataArray(assay["marker"].to_numpy(), dims="cell", name="marker",
                      coords={"arm": ("cell", assay["arm"].to_numpy()),
                              "dl": ("cell", assay["dl"].to_numpy())})
    x = da.logstats.fit("cell", by="arm", detection_limit="dl")
    p = assay.logstats.fit(by="arm", columns="marker", detection_limit="dl")
    np.testing.assert_allclose(x["mu"].to_numpy(), p["mu"].to_numpy(), rtol=1e-12)
    import dask.array

    lazy = da.copy(data=dask.array.from_array(da.to_numpy(), chunks=200))  # data chunked, labels in memory
    g1 = lazy.logstats.lognormal_mean("cell", by="arm", method="gci", random_state=9, nonpositive="drop")
    g2 = da.logstats.lognormal_mean("cell", by="arm", method="gci", random_state=9, nonpositive="drop")
    # same draws for the same seed; the chunked moments are merged in another order, so equal to rounding
    xr.testing.assert_allclose(g1, g2, rtol=1e-12)
    assert g1["method"].item() == "gci"
    # closed-form fit and moment-based intervals stay lazy on dask
    from tests.conftest import no_dask_compute

    with no_dask_compute():
        lazy_fit = lazy.logstats.fit("cell", by="arm", nonpositive="drop")
        lazy_cox = lazy.logstats.lognormal_mean("cell", by="arm", nonpositive="drop")
    eager_fit = assay.logstats.fit(by="arm", columns="marker", nonpositive="drop")
    np.testing.assert_allclose(lazy_fit["mu"].compute().to_numpy(), eager_fit["mu"].to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(lazy_fit["loglik"].compute().to_numpy(), eager_fit["loglik"].to_numpy(),
                               rtol=1e-12)
    assert list(lazy_fit["status"].compute().to_numpy()) == list(eager_fit["status"])
    np.testing.assert_allclose(lazy_cox["ci_low"].compute().to_numpy(),
                               assay.logstats.lognormal_mean(by="arm", columns="marker",
                                                             nonpositive="drop")["ci_low"].to_numpy(),
                               rtol=1e-12)
