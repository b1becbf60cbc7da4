"""Every public method on every container against hostile input, and fuzzing with hypothesis.

The table runs each grouped method (moment-based and raw-value ones) on Series, DataFrame, DataArray,
Dataset and dask-backed DataArray, with zeros, NaN, +inf, empty and tiny groups. Expected results are
stated per case; inputs are compared before and after.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import logstats  # noqa: F401
from tests.conftest import HAS_DASK

GROUPED = ["summary", "moments", "fit", "scale_check", "lognormal_mean"]
CONTAINERS = ["series", "frame", "dataarray", "dataset"] + (["dask"] if HAS_DASK else [])


def wrap(values, groups, container):
    values = np.asarray(values, dtype=float)
    groups = np.asarray(groups, dtype=object)
    if container == "series":
        return pd.Series(values, name="x"), {"by": pd.Series(groups)}
    if container == "frame":
        return pd.DataFrame({"g": groups, "x": values}), {"by": "g"}
    da = xr.DataArray(values, dims="cell", coords={"g": ("cell", groups)}, name="x")
    if container == "dataset":
        return xr.Dataset({"x": da}), {"dim": "cell", "by": "g"}
    if container == "dask":
        da = da.copy(data=__import__("dask.array").array.from_array(values, chunks=max(1, len(values) // 2)))
    return da, {"dim": "cell", "by": "g"}


def call(obj, method, kw, **more):
    out = getattr(obj.logstats, method)(**kw, **more)
    if isinstance(out, (xr.Dataset, xr.DataArray)):
        out = out.compute()
        if isinstance(out, xr.Dataset):
            out = out.to_dataframe()
    return out


def field(out, name, group):
    return out.loc[group, name]


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("method", GROUPED)
def test_zeros_refused_by_default_and_counted_when_dropped(method, container):
    obj, kw = wrap([1.0, 0.0, 2.0, 3.0, 4.0, 5.0], ["a", "a", "a", "b", "b", "b"], container)
    before = obj.copy(deep=True)
    with pytest.raises(ValueError, match=r"'x'.*1 value\(s\) at or below zero.*'a'.*nonpositive='drop'"):
        call(obj, method, kw)
    out = call(obj, method, kw, nonpositive="drop")
    assert field(out, "n_nonpositive", "a") == 1 and field(out, "n_nonpositive", "b") == 0
    if method != "scale_check":
        assert field(out, "n", "a") == 2
    _same(obj, before)


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("method", GROUPED)
def test_missing_counted_and_plus_inf_refused(method, container):
    obj, kw = wrap([1.0, np.nan, 2.0, 3.0, 4.0, 5.0], ["a", "a", "a", "b", "b", "b"], container)
    out = call(obj, method, kw)
    assert field(out, "n_missing", "a") == 1
    bad, kw = wrap([1.0, np.inf, 2.0, 3.0], ["a", "a", "b", "b"], container)
    with pytest.raises(ValueError, match=r"\+inf"):
        call(bad, method, kw)


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("method", GROUPED)
def test_tiny_and_all_missing_groups_are_nan_not_errors(method, container):
    obj, kw = wrap([2.0, np.nan, np.nan, 3.0, 4.0, 5.0], ["one", "empty", "empty", "b", "b", "b"], container)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning may reach the user
        out = call(obj, method, kw)
    numeric = {"summary": "gsd", "moments": "m2_log", "fit": "mu", "scale_check": "aic_normal",
               "lognormal_mean": "ci_low"}[method]
    assert np.isnan(field(out, numeric, "empty"))
    if method in ("summary", "lognormal_mean", "scale_check"):
        assert np.isnan(field(out, numeric, "one"))
    assert np.isfinite(field(out, numeric, "b"))


@pytest.mark.parametrize("container", ["frame", "dataarray"])
def test_fold_change_hostile(container):
    obj, kw = wrap([1.0, 2.0, 0.0, 4.0, 8.0, np.nan], ["r", "r", "r", "t", "t", "t"], container)
    kw = {k: v for k, v in kw.items()}
    with pytest.raises(ValueError, match=r"at or below zero.*'r'"):
        call(obj, "fold_change", {**kw, "reference": "r"})
    out = call(obj, "fold_change", {**kw, "reference": "r"}, nonpositive="drop")
    assert out["n_reference"].iloc[0] == 2 and out["n"].iloc[0] == 2
    with pytest.raises(ValueError, match=r"reference='zz' is not a level.*'r'"):
        call(obj, "fold_change", {**kw, "reference": "zz"}, nonpositive="drop")


def _same(obj, before):
    if isinstance(obj, pd.Series):
        pd.testing.assert_series_equal(obj, before)
    elif isinstance(obj, pd.DataFrame):
        pd.testing.assert_frame_equal(obj, before)
    else:
        xr.testing.assert_identical(obj, before)


def test_multiindex_columns_and_duplicate_labels():
    cols = pd.MultiIndex.from_tuples([("gfp", "raw"), ("rfp", "raw")])
    df = pd.DataFrame(np.random.default_rng(0).lognormal(size=(20, 2)), columns=cols)
    out = df.logstats.gmean()
    assert list(out.index) == list(cols)
    dup = pd.DataFrame({"g": ["a", "a", "b"], "x": [1.0, 4.0, 9.0]}, index=[7, 7, 7])
    assert dup.logstats.gmean(by="g").loc["a", "x"] == pytest.approx(2.0)


# ------------------------------------------------------------------------------------------ fuzzing
values = st.one_of(
    st.floats(min_value=1e-300, max_value=1e300),
    st.sampled_from([0.0, -1.0, np.nan, -np.inf, 1e-300, 1e300]),
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(["a", "b", "c"]), values), min_size=0, max_size=40),
       st.sampled_from(["drop", "nan"]))
def test_fuzz_counts_add_up_and_pandas_equals_xarray(rows, policy):
    groups = [g for g, _ in rows]
    x = np.array([v for _, v in rows], dtype=float)
    df = pd.DataFrame({"g": pd.Series(groups, dtype=object), "x": x})
    da = xr.DataArray(x, dims="cell", coords={"g": ("cell", np.array(groups, dtype=object))}, name="x")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = df.logstats.summary(by="g", columns="x", nonpositive=policy)
        f = df.logstats.fit(by="g", columns="x", nonpositive=policy)
        c = df.logstats.scale_check(by="g", columns="x", nonpositive=policy)
        m = df.logstats.lognormal_mean(by="g", columns="x", nonpositive=policy, method="modified_cox")
    sizes = df.groupby("g").size()
    total = s["n"] + s["n_missing"] + s["n_nonpositive"]
    pd.testing.assert_series_equal(total, sizes, check_names=False, check_dtype=False)
    for res in (f, c, m):
        assert (res["n_missing"] == s["n_missing"]).all()
        assert (res["n_nonpositive"] == s["n_nonpositive"]).all()
    valid = (s["n"] >= 2) & ((s["n_nonpositive"] == 0) | (policy == "drop"))
    assert np.isfinite(s.loc[valid, "gmean"]).all()
    assert (s.loc[valid, "gsd"] >= 1).all()
    if len(x):
        xs = da.logstats.summary("cell", by="g", nonpositive=policy).to_dataframe()
        np.testing.assert_allclose(xs["gmean"].to_numpy(), s["gmean"].to_numpy(), rtol=1e-12)
