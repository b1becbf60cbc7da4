"""The ``.logstats`` accessor on dask DataFrames and Series: per-partition moments merged exactly.

References: scipy.stats.gmean / scipy.stats.gstd (ddof=1) applied per group, and the pandas accessor on
the same rows (itself checked against scipy in tests/test_pandas.py). Laziness is checked with
``raise_if_dask_computes`` (tests/_dask_helpers.py).
"""

from __future__ import annotations

import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats

import logstats
from logstats.core.transform import LogstatsWarning

dd = pytest.importorskip("dask.dataframe")

from logstats.accessors.dask import register_dask_dataframe  # noqa: E402
from tests._dask_helpers import DaskComputed, raise_if_dask_computes  # noqa: E402

RTOL = 1e-12


@pytest.fixture(scope="module", autouse=True)
def _registered() -> None:
    assert register_dask_dataframe()


def _frame(n: int = 3000, seed: int = 0) -> pd.DataFrame:
    """Invented data: a fluorescence-like log-normal value per cell, for plates and wells."""
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "plate": rng.integers(1, 5, n),
        "well": rng.choice(["A1", "B2", "C3"], n),
        "gfp": rng.lognormal(3.0, 0.6, n),
        "rfp": rng.lognormal(1.0, 1.1, n),
    })


def _pair(npartitions: int = 7, **kw):
    ddf = dd.from_pandas(_frame(**kw), npartitions=npartitions)
    return ddf, ddf.compute()  # the pandas frame exactly as dask holds it (string dtypes included)


def _assert_same(got, expected) -> None:
    if isinstance(expected, pd.DataFrame):
        pd.testing.assert_frame_equal(got, expected, check_exact=False, rtol=RTOL)
    elif isinstance(expected, pd.Series):
        pd.testing.assert_series_equal(got, expected, check_exact=False, rtol=RTOL)
    else:
        assert got == pytest.approx(expected, rel=RTOL)


@pytest.mark.parametrize("kind", ["gmean", "gsd", "gcv", "moments", "summary"])
@pytest.mark.parametrize("by", [None, "plate", ["plate", "well"]])
@pytest.mark.parametrize("columns", ["gfp", ["gfp", "rfp"]])
def test_equals_pandas_accessor_on_the_same_rows(kind, by, columns):
    ddf, df = _pair()
    with raise_if_dask_computes():
        lazy = getattr(ddf.logstats, kind)(by=by, columns=columns)
    assert isinstance(lazy, (dd.DataFrame, dd.Series))
    with raise_if_dask_computes(max_computes=1):
        got = lazy.compute()
    _assert_same(got, getattr(df.logstats, kind)(by=by, columns=columns))


def test_grouped_summary_against_scipy_per_group():
    ddf, df = _pair(npartitions=5)
    got = ddf.logstats.summary(by="plate", columns="gfp").compute()
    # reference: scipy.stats.gmean and scipy.stats.gstd (ddof=1) per group; t interval of the mean log
    # from scipy.stats.ttest_1samp(...).confidence_interval(), back-transformed
    for plate, x in df.groupby("plate")["gfp"]:
        row = got.loc[plate]
        assert row["n"] == len(x)
        assert row["gmean"] == pytest.approx(stats.gmean(x), rel=RTOL)
        assert row["gsd"] == pytest.approx(stats.gstd(x), rel=RTOL)
        ci = stats.ttest_1samp(np.log(x), 0.0).confidence_interval(0.95)
        assert row["ci_low"] == pytest.approx(np.exp(ci.low), rel=1e-10)
        assert row["ci_high"] == pytest.approx(np.exp(ci.high), rel=1e-10)


def test_default_columns_leave_out_the_keys_and_text():
    ddf, df = _pair()
    got = ddf.logstats.gmean(by="well").compute()
    assert list(got.columns) == ["plate", "gfp", "rfp"]  # numeric, not the key, as in pandas
    _assert_same(got, df.logstats.gmean(by="well"))


@pytest.mark.parametrize("npartitions", [1, 2, 9, 40])
@pytest.mark.parametrize("split_every", [2, 3, None])
def test_partitioning_and_merge_tree_do_not_change_the_result(npartitions, split_every):
    df = _frame(n=2000, seed=3)
    expected = df.logstats.moments(by="plate", columns="rfp")
    ddf = dd.from_pandas(df, npartitions=npartitions)
    got = ddf.logstats.moments(by="plate", columns="rfp", split_every=split_every).compute()
    _assert_same(got, expected)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    values=st.lists(st.floats(min_value=1e-6, max_value=1e6), min_size=1, max_size=60),
    nparts=st.integers(min_value=1, max_value=6),
    ngroups=st.integers(min_value=1, max_value=4),
)
def test_property_any_partitioning_matches_one_pass(values, nparts, ngroups):
    x = np.asarray(values)
    g = np.arange(len(x)) % ngroups
    df = pd.DataFrame({"g": g, "x": x})
    got = dd.from_pandas(df, npartitions=nparts).logstats.moments(by="g", columns="x").compute()
    # naive reference: numpy per group, two-pass on the logs
    for key, sub in df.groupby("g")["x"]:
        y = np.log(sub.to_numpy())
        assert got.loc[key, "n"] == len(y)
        assert got.loc[key, "mean_log"] == pytest.approx(y.mean(), rel=1e-12, abs=1e-12)
        assert got.loc[key, "m2_log"] == pytest.approx(((y - y.mean()) ** 2).sum(), rel=1e-9, abs=1e-12)


def test_series_accessor_scalar_is_delayed_and_matches_scipy():
    ddf, df = _pair()
    with raise_if_dask_computes():
        lazy = ddf["gfp"].logstats.gmean()
    assert hasattr(lazy, "compute") and not isinstance(lazy, (dd.DataFrame, dd.Series))
    assert lazy.compute() == pytest.approx(stats.gmean(df["gfp"]), rel=RTOL)  # scipy.stats.gmean
    summary = ddf["gfp"].logstats.summary().compute()
    _assert_same(summary, df["gfp"].logstats.summary())


def test_series_accessor_grouped_by_another_dask_series():
    ddf, df = _pair()
    got = ddf["rfp"].logstats.gsd(by=ddf["plate"]).compute()
    _assert_same(got, df["rfp"].logstats.gsd(by=df["plate"]))
    tidy = ddf["rfp"].logstats.summary(by=[ddf["plate"], ddf["well"]]).compute()
    _assert_same(tidy, df["rfp"].logstats.summary(by=[df["plate"], df["well"]]))


def test_missing_values_and_missing_keys_are_counted_and_warned_once():
    df = _frame(n=600, seed=5)
    df.loc[::10, "gfp"] = np.nan
    df["plate"] = df["plate"].astype(float)
    df.loc[::25, "plate"] = np.nan
    ddf = dd.from_pandas(df, npartitions=4)
    df = ddf.compute()
    with raise_if_dask_computes():
        lazy = ddf.logstats.summary(by="plate", columns="gfp")
    with pytest.warns(LogstatsWarning, match=r"^24 row\(s\) have a missing value") as record:
        got = lazy.compute()
    assert len([w for w in record if issubclass(w.category, LogstatsWarning)]) == 1
    with pytest.warns(LogstatsWarning, match="24 row"):
        expected = df.logstats.summary(by="plate", columns="gfp")
    _assert_same(got, expected)
    assert got["n_missing"].sum() == int(df.loc[df["plate"].notna(), "gfp"].isna().sum())
    kept = ddf.logstats.moments(by="plate", columns="gfp", dropna=False).compute()
    assert kept["n"].sum() + kept["n_missing"].sum() == len(df)  # nothing dropped uncounted


def test_nonpositive_values_raise_at_compute_naming_column_groups_and_count():
    df = _frame(n=400, seed=7)
    df.loc[[3, 150], "gfp"] = [0.0, -2.0]
    ddf = dd.from_pandas(df, npartitions=3)
    with raise_if_dask_computes():
        lazy = ddf.logstats.gmean(by="plate", columns="gfp")  # lazy: the values are not looked at yet
    groups = sorted(df.loc[[3, 150], "plate"].unique())
    with pytest.raises(ValueError, match=r"column 'gfp' holds 2 value\(s\) at or below zero") as err:
        lazy.compute()
    assert "nonpositive='drop'" in str(err.value)
    assert all(repr(int(g)) in str(err.value) for g in groups)
    dropped = ddf.logstats.summary(by="plate", columns="gfp", nonpositive="drop").compute()
    assert dropped["n_nonpositive"].sum() == 2
    as_nan = ddf.logstats.gmean(by="plate", columns="gfp", nonpositive="nan").compute()["gfp"]
    assert as_nan.isna().sum() == len(groups) and as_nan.notna().sum() == 4 - len(groups)


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"by": "nope"}, KeyError, "nope"),
        ({"by": "plate", "columns": "well"}, TypeError, "well"),
        ({"by": "plate", "columns": "absent"}, KeyError, "absent"),
        ({"by": "plate", "nonpositive": "ignore"}, ValueError, "nonpositive='ignore'"),
        ({"by": "plate", "confidence_level": 1.5}, ValueError, "confidence_level"),
        ({"by": np.arange(3)}, TypeError, "column names"),
    ],
)
def test_bad_arguments_are_refused_before_anything_is_computed(kwargs, error, match):
    ddf, _ = _pair()
    with raise_if_dask_computes(), pytest.raises(error, match=match):
        ddf.logstats.summary(**kwargs)


def test_empty_partitions_and_empty_groups():
    ddf, df = _pair(npartitions=6)
    few = ddf[ddf["plate"] == 2]  # most partitions keep rows of one plate only; some may be empty
    _assert_same(few.logstats.summary(by="well", columns="gfp").compute(),
                 df[df["plate"] == 2].logstats.summary(by="well", columns="gfp"))
    none = ddf[ddf["gfp"] < 0]
    out = none.logstats.summary(by="plate", columns="gfp").compute()
    assert len(out) == 0 and "gmean" in out.columns


def test_counting_scheduler_catches_a_compute():
    ddf, _ = _pair()
    with pytest.raises(DaskComputed):
        with raise_if_dask_computes():
            ddf.logstats.gmean(by="plate", columns="gfp").compute()


def test_registration_is_idempotent_and_optional(monkeypatch):
    assert register_dask_dataframe() is True
    assert register_dask_dataframe() is True  # a second call neither warns nor re-registers
    monkeypatch.setitem(sys.modules, "dask.dataframe", None)  # as if dask were not installed
    assert register_dask_dataframe() is False
    assert logstats.gmean([1.0, 100.0]) == pytest.approx(10.0)  # the rest keeps working


@pytest.mark.parametrize("kw", [
    {},
    {"replicate": "well"},
    {"replicate": "day", "paired": True, "adjust": "bh"},
    {"within": "line", "equivalence": (0.8, 1.25)},
    # the loading paths (the censored regression and the nested means need every value of a level)
    {"detection_limit": 4.0},
    {"detection_limit": "dl", "within": "line"},
    {"replicate": ["day", "well"]},
    {"replicate": "well", "detection_limit": "dl"},
])
def test_fold_change_equals_pandas(kw):
    # reference: the pandas accessor on the same rows (itself checked against scipy in test_fold_change)
    rng = np.random.default_rng(12)
    n = 4000
    df = pd.DataFrame({
        "arm": rng.choice(["ctl", "a", "b"], n), "day": rng.integers(0, 4, n),
        "line": rng.choice(["L1", "L2"], n),
        "x": rng.lognormal(2.0, 0.7, n), "y": rng.lognormal(1.0, 0.3, n)})
    df["well"] = df["arm"] + "-" + df["day"].astype(str)
    df["dl"] = np.where(df["day"] < 2, 4.0, 6.0)  # two detection limits, by day
    ddf = dd.from_pandas(df, npartitions=6)
    with raise_if_dask_computes():
        lazy = ddf.logstats.fold_change(by="arm", reference="ctl", columns=["x", "y"], **kw)
    got = lazy.compute()
    want = df.logstats.fold_change(by="arm", reference="ctl", columns=["x", "y"], **kw)
    pd.testing.assert_frame_equal(got, want, rtol=1e-11, check_index_type=False)
    assert list(lazy.columns) == list(want.columns)  # the lazy frame's template has the real fields


def test_fold_change_detection_limit_refuses_aligned_arrays():
    ddf = dd.from_pandas(pd.DataFrame({"arm": ["a", "b"] * 10, "x": np.arange(1.0, 21.0)}), npartitions=2)
    with pytest.raises(TypeError, match="detection_limit= on a dask DataFrame takes a number or a column"):
        ddf.logstats.fold_change(by="arm", reference="a", detection_limit=np.ones(20))
