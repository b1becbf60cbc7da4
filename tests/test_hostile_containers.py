"""Hostile input on every container (issue 12): the ten classes of the issue, each as a table of cases x
containers, and the counts identity as a hypothesis property for every declared method.

Containers: pandas Series, DataFrame, xarray DataArray, Dataset, dask-backed DataArray, dask DataFrame
(built by ``tests.test_contract._call`` wherever its fixed layout fits, from the data of
:func:`_frame`), and the array functions of ``logstats`` where a class applies to them. Where a class
does not apply to a container its own analogue is used, said beside the case (a DataArray has no
MultiIndex columns, but it has non-string dim names, tuple coordinate names and duplicated
coordinate values).

Every expected number is computed independently, the source named beside the check: pandas
``groupby(...).agg`` on the logs (the idiom DESIGN.md promises to mirror), numpy, scipy.stats.gmean /
gstd. The data are invented.
"""

from __future__ import annotations

import copy
import gzip
import tracemalloc
import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy import stats

import logstats
import tests.test_contract as contract
from logstats import LogstatsWarning
from logstats.methods import METHODS
from tests.conftest import requires_dask
from tests.test_contract import CALLS, CONTAINERS, _call, _tidy

XR = ["DataArray", "Dataset", pytest.param("dask DataArray", marks=requires_dask)]
TABLES = ["Series", "DataFrame", pytest.param("dask DataFrame", marks=requires_dask)]
STATISTICS = [n for n, m in METHODS.items() if m.reduction != "transform"]
RNG = np.random.default_rng(1212)


def _frame(x: np.ndarray, g: np.ndarray | None = None) -> pd.DataFrame:
    """Invented: values ``x`` in groups ``g`` (two halves "a", "b" by default), three days, two wells."""
    n = len(x)
    g = np.repeat(["a", "b"], [n // 2, n - n // 2]) if g is None else g
    well = np.where(np.arange(n) % 6 < 3, "A1", "A2")
    return pd.DataFrame({"g": g, "day": np.arange(n) % 3 + 1, "well": well,
                         "x": np.asarray(x, dtype=float)})


def _on(container: str, name: str, kw: dict, df: pd.DataFrame, monkeypatch) -> object:
    """``tests.test_contract._call`` (policy ``nonpositive="drop"``, ``by="g"``) on the frame ``df``."""
    monkeypatch.setattr(contract, "_data", lambda: df)
    res = _call(container, name, kw)
    if hasattr(res, "compute") and not isinstance(res, (xr.DataArray, xr.Dataset)):
        res = res.compute()
    return res


def _computed(res):
    return res.compute() if hasattr(res, "compute") else res


def _build(container: str, df: pd.DataFrame):
    """The same frame as each container, for calls whose policy or keywords ``_call`` fixes."""
    if container == "DataFrame":
        return df
    if container == "Series":
        return df.set_index("g")["x"]
    if container == "dask DataFrame":
        import dask.dataframe as dd

        return dd.from_pandas(df, npartitions=3)
    coords = {k: ("cell", df[k].to_numpy()) for k in df.columns if k != "x"}
    da = xr.DataArray(df["x"].to_numpy(), dims="cell", coords=coords, name="x")
    if container == "dask DataArray":
        da = da.chunk({"cell": 5})
    return da.to_dataset() if container == "Dataset" else da


def _stat(container: str, obj, name: str, **kw):
    """One statistic grouped by ``g`` on any container (the by= / dim= spelling of each family)."""
    if container in ("DataFrame", "dask DataFrame"):
        return _computed(getattr(obj.logstats, name)(by="g", columns="x", **kw))
    if container == "Series":
        return getattr(obj.logstats, name)(by=obj.index.to_series().rename("g"), **kw)
    return _computed(getattr(obj.logstats, name)("cell", by="g", **kw))


def _column(res, field: str) -> np.ndarray:
    """One field of a grouped result, as floats in group order (any container)."""
    if isinstance(res, xr.Dataset):
        field = field if field in res else "x"  # a single-field method: one variable per data variable
        return np.asarray(res[field].to_numpy(), dtype=float).reshape(-1)
    if isinstance(res, xr.DataArray):
        return np.asarray(res.to_numpy(), dtype=float).reshape(-1)
    if isinstance(res, pd.Series):
        return np.asarray(res.to_numpy(), dtype=float)
    col = res[field] if field in res.columns else res.iloc[:, 0]
    return np.asarray(col.to_numpy(), dtype=float).reshape(-1)


def _ref_gmean(values, keys) -> np.ndarray:
    """pandas groupby on the logs, back-transformed (dropna=True, sorted keys: pandas defaults)."""
    return np.exp(pd.Series(np.log(np.asarray(values, dtype=float))).groupby(np.asarray(keys, dtype=object))
                  .mean()).to_numpy()


X = RNG.lognormal(1.0, 0.6, 24)
DF = _frame(X)


# ============================================================== 1. labels of any hashable type
# pandas: the label cases of the issue; (label of the key, label of the value column, extra column)
PANDAS_LABELS = [
    ("int labels (header=None)", 0, 1, 2),
    ("tuple labels (MultiIndex columns)", ("k", "g"), ("m", "x"), ("m", "y")),
    ("names logstats uses itself", "variable", "gmean", "n"),
    ("result field names as keys", "n_missing", "ci_low", "status"),
]


@pytest.mark.parametrize("container", TABLES)
@pytest.mark.parametrize("case,key,value,extra", PANDAS_LABELS, ids=[c[0] for c in PANDAS_LABELS])
def test_1_table_labels_keep_the_right_numbers(container, case, key, value, extra):
    cols = [key, value, extra]
    df = pd.DataFrame({0: DF["g"], 1: DF["x"], 2: 2 * DF["x"]})
    df.columns = pd.MultiIndex.from_tuples(cols) if isinstance(key, tuple) else pd.Index(cols)
    ref = _ref_gmean(df[value], df[key])  # pandas groupby on the logs
    if container == "Series":  # a Series: its name is the label, the key an aligned Series named so
        s = df[value]
        out = s.logstats.summary(by=df[key])
        assert out.index.name == key
        np.testing.assert_allclose(out["gmean"].to_numpy(), ref, rtol=1e-12)
        return
    if container == "dask DataFrame":
        import dask.dataframe as dd

        df = dd.from_pandas(df, npartitions=3)
    out = _computed(df.logstats.summary(by=key))  # every value column: the label in the variable level
    labels = list(out.index.get_level_values(-1))
    assert value in labels and extra in labels
    sub = out[[v == value for v in labels]]
    np.testing.assert_allclose(sub["gmean"].to_numpy(), ref, rtol=1e-12)
    wide = _computed(df.logstats.gmean(by=key))  # groups x columns, labels as they are
    np.testing.assert_allclose(wide[value].to_numpy(), ref, rtol=1e-12)


# xarray analogue: dim and coordinate names that are not strings, variables named like result fields,
# duplicated coordinate values (DataArray / Dataset / dask-backed DataArray)
XR_LABELS = [
    ("int dim, int coordinate name", 0, 7),
    ("tuple dim, tuple coordinate name", ("t", 1), ("k", "g")),
    ("dim named like a field", "gmean", "n"),
]


@pytest.mark.parametrize("container", XR)
@pytest.mark.parametrize("case,dim,key", XR_LABELS, ids=[c[0] for c in XR_LABELS])
def test_1_xarray_names_of_any_hashable_type(container, case, dim, key):
    x = X.reshape(2, 12)
    keys = np.tile(["a", "b"], 6)
    da = xr.DataArray(x, dims=("ch", dim), name=("m", 2) if isinstance(dim, tuple) else 5)
    da = da.assign_coords({key: ((dim,), keys)})
    if container == "dask DataArray":
        da = da.chunk({dim: 5})
    obj = da.to_dataset() if container == "Dataset" else da
    out = _computed(obj.logstats.summary(dim, by=key))
    got = out["gmean"].transpose("ch", key).to_numpy() if "ch" in out["gmean"].dims else None
    for row in range(2):
        ref = _ref_gmean(x[row], keys)  # pandas groupby on the logs, per channel
        np.testing.assert_allclose(np.asarray(got[row], dtype=float), ref, rtol=1e-12)
    assert list(out[key].to_numpy()) == ["a", "b"]
    np.testing.assert_allclose(np.asarray(_computed(obj.logstats.gmean(dim)).to_array().to_numpy()
                                          if container == "Dataset" else _computed(obj.logstats.gmean(dim)),
                                          dtype=float).reshape(-1),
                               stats.gmean(x, axis=1), rtol=1e-12)  # scipy.stats.gmean along the dim


@pytest.mark.parametrize("container", XR)
def test_1_xarray_duplicated_coordinate_values_and_field_named_variables(container):
    """Duplicated values of the dim's own coordinate are groups (as ``DataArray.groupby``); Dataset
    variables named like result fields or ``variable`` keep their numbers."""
    cell = np.repeat(np.arange(12), 2)  # each label twice
    da = xr.DataArray(X, dims="cell", coords={"cell": cell}, name="x")
    if container == "dask DataArray":
        da = da.chunk({"cell": 5})
    obj = da.to_dataset() if container == "Dataset" else da
    out = _computed(obj.logstats.gmean("cell", by="cell"))
    got = out["x"] if isinstance(out, xr.Dataset) else out
    np.testing.assert_allclose(got.to_numpy(), _ref_gmean(X, cell), rtol=1e-12)  # pandas groupby
    ds = xr.Dataset({"gmean": ("cell", X), "n": ("cell", 2 * X), "variable": ("cell", 3 * X)})
    if container == "dask DataArray":
        ds = ds.chunk({"cell": 5})
    res = _computed(ds.logstats.summary("cell"))
    np.testing.assert_allclose(res["gmean"].sel(variable=["gmean", "n", "variable"]).to_numpy(),
                               stats.gmean(X) * np.array([1, 2, 3]), rtol=1e-12)  # scipy.stats.gmean


@pytest.mark.parametrize("axis", [0, 1, (0, 1), None])
def test_1_array_functions_any_axis_spelling(axis):
    """Arrays have no labels; their analogue is the axis spelling (int, tuple, None)."""
    x = X.reshape(4, 6)
    np.testing.assert_allclose(logstats.gmean(x, axis=axis), stats.gmean(x, axis=axis), rtol=1e-12)


# ============================================================== 2. by= from any source
def _keys_with_gaps():
    keys = np.asarray(DF["g"], dtype=object).copy()
    keys[[1, 14, 20]] = [None, np.nan, None]
    return keys


PANDAS_BY = ["key column", "list of keys", "aligned Series", "Series derived from the value column",
             "misaligned Series (warned)", "key column with None/NaN"]


@pytest.mark.parametrize("container", ["Series", "DataFrame"])
@pytest.mark.parametrize("case", PANDAS_BY)
def test_2_pandas_by_from_any_source_is_counted(container, case):
    df = DF.copy()
    n_gap = 0
    if case == "key column":
        by, keys = "g", df["g"]
    elif case == "list of keys":
        by, keys = ["g", "day"], df["g"] + df["day"].astype(str)
    elif case == "aligned Series":
        by = df["g"].iloc[::-1]  # another order: aligned on the index, as pandas groupby
        keys = df["g"]
    elif case == "Series derived from the value column":
        by = (df["x"] > df["x"].median()).rename("big")
        keys = by
    elif case == "misaligned Series (warned)":
        by = df["g"].iloc[:20]  # four rows have no key
        keys = df["g"].where(df.index < 20)
        n_gap = 4
    else:
        df["g"] = _keys_with_gaps()
        by, keys = "g", df["g"]
        n_gap = 3
    obj = df if container == "DataFrame" else df["x"]
    if container == "Series" and isinstance(by, (str, list)):
        by = [df[k] for k in by] if isinstance(by, list) else df[by]
    ctx = pytest.warns(LogstatsWarning, match=f"{n_gap} row") if n_gap else _nothing()
    with ctx:
        kw = {"columns": "x"} if container == "DataFrame" else {}
        out = obj.logstats.summary(by=by, **kw)
    ref = pd.Series(np.log(df["x"])).groupby(np.asarray(keys, dtype=object)).agg(["mean", "size"])  # pandas
    np.testing.assert_allclose(out["gmean"].to_numpy(), np.exp(ref["mean"].to_numpy()), rtol=1e-12)
    assert out["n"].tolist() == ref["size"].tolist()
    assert out.attrs["n_without_key"] == n_gap
    assert int(out["n"].sum()) + out.attrs["n_without_key"] == len(df)
    if case == "Series derived from the value column":  # it stays a value column, as in groupby
        assert "x" in DF.columns and "variable" not in out.index.names


def _nothing():
    import contextlib

    return contextlib.nullcontext()


# xarray analogue: the coordinate with None / NaN / NaT, the dim coordinate itself, a non-string name
XR_BY = ["object coordinate with None and NaN", "datetime coordinate with NaT", "float coordinate with NaN",
         "integer coordinate named 0"]


@pytest.mark.parametrize("container", XR)
@pytest.mark.parametrize("case", XR_BY)
def test_2_xarray_coordinates_with_gaps_are_counted_in_the_result(container, case):
    key_name = "g"
    if case == "object coordinate with None and NaN":
        keys = _keys_with_gaps()
    elif case == "datetime coordinate with NaT":
        keys = np.where(DF["g"] == "a", np.datetime64("2024-01-01"), np.datetime64("2024-02-01"))
        keys[[1, 14, 20]] = np.datetime64("NaT")
    elif case == "float coordinate with NaN":
        keys = np.where(DF["g"] == "a", 1.5, 2.5)
        keys[[1, 14, 20]] = np.nan
    else:
        keys, key_name = np.where(DF["g"] == "a", 10, 20), 0
    n_gap = 0 if case == "integer coordinate named 0" else 3
    da = xr.DataArray(X, dims="cell", coords={key_name: ("cell", keys)}, name="x")
    if container == "dask DataArray":
        da = da.chunk({"cell": 5})
    obj = da.to_dataset() if container == "Dataset" else da
    before = obj.copy(deep=True)
    out = _computed(obj.logstats.summary("cell", by=key_name))
    ref = pd.Series(np.log(X)).groupby(pd.Series(keys)).agg(["mean", "size"])  # pandas groupby, dropna
    np.testing.assert_allclose(out["gmean"].to_numpy(), np.exp(ref["mean"].to_numpy()), rtol=1e-12)
    assert out["n"].to_numpy().tolist() == ref["size"].tolist()
    assert out.attrs["n_without_key"] == n_gap
    assert int(out["n"].sum()) + out.attrs["n_without_key"] == X.size
    xr.testing.assert_identical(obj, before)


@requires_dask
@pytest.mark.parametrize("case", ["key column", "list of keys", "key column with None/NaN"])
def test_2_dask_dataframe_keys_are_counted_in_the_result(case):
    import dask.dataframe as dd

    df = DF.copy()
    n_gap = 0
    by: object = "g"
    if case == "list of keys":
        by = ["g", "day"]
    elif case == "key column with None/NaN":
        df["g"] = _keys_with_gaps()
        n_gap = 3
    ddf = dd.from_pandas(df, npartitions=3)
    for method in ("summary", "scale_check"):  # merged moments, and the loaded path
        ctx = pytest.warns(LogstatsWarning, match=f"{n_gap} row") if n_gap else _nothing()
        with ctx:
            out = getattr(ddf.logstats, method)(by=by, columns="x").compute()
        keys = [df[k] for k in by] if isinstance(by, list) else df[by]
        ref = pd.Series(np.log(df["x"])).groupby(keys).size()  # pandas groupby, dropna
        assert out["n"].tolist() == ref.tolist(), method
        assert out.attrs["n_without_key"] == n_gap, method


# ============================================================== 3. aligned arguments
LIMIT = float(np.quantile(X, 0.3))


def _limit_for(container: str, kind: str):
    """A per-value detection limit as each container takes it (Series / array / DataArray)."""
    lim = np.where(np.arange(X.size) % 2 == 0, LIMIT, np.nan)  # NaN: not censored
    if kind == "number":
        return LIMIT
    if container == "Series" and kind == "Series in another order":  # its index repeats the keys: the
        return pd.Series(lim, index=DF["g"].to_numpy())  # same index (a duplicated one cannot be reordered)
    if container in ("Series", "DataFrame", "dask DataFrame"):
        if kind == "Series in another order":
            return pd.Series(lim, index=DF.index).iloc[::-1]
        return lim
    if kind == "Series in another order":  # the xarray analogue: a DataArray with reversed labels
        da = xr.DataArray(lim, dims="cell", coords={"cell": np.arange(X.size)})
        return da.isel(cell=slice(None, None, -1))
    return lim


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("kind", ["number", "array", "Series in another order"])
@pytest.mark.parametrize("name", ["summary", "fit", "quantile", "exceedance"])
def test_3_detection_limits_are_aligned_like_the_data(container, kind, name):
    if container == "dask DataFrame" and kind != "number":
        pytest.skip("a dask DataFrame aligns per-row limits given as columns (tested in the error table)")
    obj = _build(container, DF)
    if isinstance(obj, (xr.DataArray, xr.Dataset)):  # labels along the dim, for the reversed DataArray
        obj = obj.assign_coords(cell=np.arange(len(DF)))
    kw = {"limit": 4.0} if name == "exceedance" else {}
    res = _stat(container, obj, name, detection_limit=_limit_for(container, kind), **kw)
    lim = np.where(np.arange(X.size) % 2 == 0, LIMIT, np.nan) if kind != "number" else np.full(X.size, LIMIT)
    with np.errstate(invalid="ignore"):
        censored = X <= lim  # numpy: a value at or below its own limit; NaN limit = not censored
    ref = pd.Series(censored).groupby(DF["g"].to_numpy()).sum().to_numpy()
    np.testing.assert_array_equal(_column(res, "n_censored"), ref)


MISALIGNED = [
    ("array of the wrong length", lambda c: np.ones(5), r"detection_limit=.*(shape|length)"),
    ("Series lacking rows", lambda c: pd.Series(np.ones(5), index=np.arange(5)), "detection_limit="),
    ("DataArray lacking labels", lambda c: xr.DataArray(np.ones(5), dims="cell",
                                                         coords={"cell": np.arange(5)}), "detection_limit="),
    ("name that is not a column", lambda c: "nope", "detection_limit='nope'"),
]


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("case,make,error", MISALIGNED, ids=[c[0] for c in MISALIGNED])
def test_3_misaligned_arguments_are_errors_naming_the_keyword(container, case, make, error):
    table = container in ("Series", "DataFrame", "dask DataFrame")
    if table and case == "DataArray lacking labels" or not table and case == "Series lacking rows":
        pytest.skip("the other family's aligned type")
    obj = _build(container, DF)
    if not table:
        obj = obj.assign_coords(cell=np.arange(X.size))
    with pytest.raises((ValueError, KeyError, TypeError), match=error):
        _stat(container, obj, "summary", detection_limit=make(container))


@pytest.mark.parametrize("case,kw,error", [
    ("replicate array of the wrong length", {"replicate": np.ones(3)}, r"replicate= array has length 3"),
    ("replicate Series lacking rows", {"replicate": pd.Series([1, 2], index=[0, 1])}, r"replicate= Series"),
    ("replicate name that is not a column", {"replicate": "nope"}, r"replicate='nope'"),
    ("paired without replicate", {"paired": True}, r"paired=True needs replicate="),
    ("paired that is not a bool", {"paired": "yes", "replicate": "day"}, r"paired= must be True or False"),
    ("within Series lacking rows", {"within": pd.Series([1], index=[3])}, r"within= Series"),
])
@pytest.mark.parametrize("container", ["Series", "DataFrame"])
def test_3_pandas_replicate_and_paired_errors_name_the_keyword(container, case, kw, error):
    if container == "Series" and isinstance(kw.get("replicate"), str):
        kw = {**kw, "replicate": DF["day"] if kw["replicate"] == "day" else kw["replicate"]}
    obj = DF if container == "DataFrame" else DF["x"]
    with pytest.raises((ValueError, KeyError, TypeError), match=error):
        if container == "DataFrame":
            obj.logstats.fold_change(by="g", reference="a", columns="x", **kw)
        else:
            obj.logstats.fold_change(by=DF["g"], reference="a", **kw)


@pytest.mark.parametrize("container", CONTAINERS)
def test_3_replicate_and_paired_give_the_replicate_level_test(container):
    """replicate= makes the day the unit: ``scipy.stats.ttest_ind`` / ``ttest_rel`` on the per-day
    means of the logs are the reference (pandas groupby for the means)."""
    df = DF.copy()
    means = pd.Series(np.log(df["x"])).groupby([df["g"], df["day"]]).mean().unstack()
    for paired, ref in ((False, stats.ttest_ind(means.loc["b"], means.loc["a"], equal_var=False)),
                        (True, stats.ttest_rel(means.loc["b"], means.loc["a"]))):
        obj = _build(container, df)
        if container == "DataFrame":
            res = obj.logstats.fold_change(by="g", reference="a", columns="x", replicate="day", paired=paired)
        elif container == "Series":
            res = obj.logstats.fold_change(by=obj.index.to_series().rename("g"), reference="a",
                                           replicate=pd.Series(df["day"].to_numpy(), index=obj.index),
                                           paired=paired)
        elif container == "dask DataFrame":
            res = obj.logstats.fold_change(by="g", reference="a", columns="x", replicate="day",
                                           paired=paired).compute()
        else:
            res = obj.logstats.fold_change("cell", by="g", reference="a", replicate="day", paired=paired)
        np.testing.assert_allclose(_column(res, "p_value"), [ref.pvalue], rtol=1e-10)
        assert _column(res, "n").tolist() == [3.0]


@pytest.mark.parametrize("container", XR)
@pytest.mark.parametrize("kw,error", [
    ({"replicate": "nope"}, r"replicate='nope' must be a coordinate"),
    ({"paired": True}, r"paired=True needs replicate="),
    ({"detection_limit": np.ones(3)}, r"detection_limit= array has shape \(3,\)"),
])
def test_3_xarray_fold_change_argument_errors_name_the_keyword(container, kw, error):
    obj = _build(container, DF)
    with pytest.raises((ValueError, KeyError), match=error):
        obj.logstats.fold_change("cell", by="g", reference="a", **kw)


@pytest.mark.parametrize("name,kw,error", [
    ("summary", {"detection_limit": np.ones(3)}, r"detection_limit= has shape \(3,\)"),
    ("fit", {"detection_limit": np.ones((2, 2))}, r"detection_limit= has shape \(2, 2\)"),
    ("exceedance", {"limit": np.ones(4)}, r"limit= has shape \(4,\)"),
])
def test_3_array_functions_refuse_limits_of_another_shape(name, kw, error):
    with pytest.raises(ValueError, match=error):
        getattr(logstats, name)(X, **kw)


@requires_dask
@pytest.mark.parametrize("kw,error", [
    ({"replicate": np.ones(3)}, "replicate= on a dask DataFrame takes column labels"),
    ({"replicate": "nope"}, "replicate='nope' is not a column"),
    ({"within": "nope"}, "within='nope' is not a column"),
])
def test_3_dask_dataframe_fold_change_keys_name_the_keyword(kw, error):
    import dask.dataframe as dd

    with pytest.raises((TypeError, KeyError), match=error):
        dd.from_pandas(DF, npartitions=3).logstats.fold_change(by="g", reference="a", columns="x", **kw)


@requires_dask
def test_3_dask_dataframe_wrong_length_limit_names_the_true_row_count():
    import dask.dataframe as dd

    ddf = dd.from_pandas(DF, npartitions=3)
    with pytest.raises(ValueError, match=rf"detection_limit= array has shape \(3,\); the data has {len(DF)}"):
        ddf.logstats.summary(by="g", columns="x", detection_limit=np.ones(3)).compute()
    with pytest.raises(TypeError, match="detection_limit= on a dask DataFrame"):
        ddf.logstats.summary(by="g", columns="x", detection_limit=ddf["x"] * 0 + 1)
    lim = np.full(len(DF), LIMIT)  # the right length: aligned with the computed frame's rows
    out = ddf.logstats.summary(by="g", columns="x", detection_limit=lim).compute()
    assert out["n_censored"].tolist() == pd.Series(X <= LIMIT).groupby(DF["g"]).sum().tolist()  # numpy


# ============================================================== 4. dtypes
DTYPES = [
    # (case, values, error or None); the reference for accepted values is scipy.stats.gmean on float64
    ("complex", X + 1j, r"complex"),
    ("bool", X > 2, r"bool"),
    ("float16", X.astype(np.float16), None),
    ("float32", X.astype(np.float32), None),
    ("int64", np.arange(1, X.size + 1), None),
    ("datetime", pd.date_range("2024", periods=X.size).to_numpy(), r"datetime64"),
    ("timedelta", (X * 1e9).astype("timedelta64[ns]"), r"timedelta64"),
    ("numeric text (object)", X.astype(str).astype(object), r"pd.to_numeric"),
]


def _typed_values(container: str, values: np.ndarray):
    df = DF.assign(x=values)
    if container in ("DataArray", "Dataset", "dask DataArray"):
        da = xr.DataArray(values, dims="cell", coords={"g": ("cell", DF["g"].to_numpy())}, name="x")
        if container == "dask DataArray":
            da = da.chunk({"cell": 5})
        return da.to_dataset() if container == "Dataset" else da
    return _build(container, df)


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("case,values,error", DTYPES, ids=[c[0] for c in DTYPES])
def test_4_dtypes_on_every_container(container, case, values, error):
    obj = _typed_values(container, values)
    if error is None:
        res = _stat(container, obj, "gmean")
        ref = _ref_gmean(values.astype(np.float64), DF["g"])  # pandas groupby on float64 logs
        np.testing.assert_allclose(_column(res, "gmean"), ref, rtol=1e-12)
        return
    with pytest.raises(TypeError, match=error) as info:
        _stat(container, obj, "summary")
    assert "'x'" in str(info.value)  # names the column / variable
    if case == "complex":
        assert ".real" in str(info.value)  # never the real part silently


@pytest.mark.parametrize("case,values,error", [
    ("complex", X + 1j, "complex"), ("bool", X > 2, "booleans"), ("datetime", DTYPES[5][1], "not numeric"),
    ("numeric text", X.astype(str), "holds text"), ("numeric text (object)", X.astype(str).astype(object),
                                                     "pd.to_numeric"),
])
def test_4_array_functions_refuse_what_has_no_logarithm(case, values, error):
    with pytest.raises(TypeError, match=error):
        logstats.gmean(values)
    half = X.astype(np.float16)
    np.testing.assert_allclose(logstats.gmean(half), stats.gmean(half.astype(float)), rtol=1e-12)


@pytest.mark.parametrize("dtype", ["Float64", "Int64", "double[pyarrow]"])
@pytest.mark.parametrize("container", ["Series", "DataFrame", pytest.param("dask DataFrame",
                                                                         marks=requires_dask)])
def test_4_pandas_extension_dtypes(container, dtype):
    """Extension dtypes are pandas-only; xarray's analogue is float16/float32 above."""
    vals = np.round(X * 10) if dtype == "Int64" else X
    df = DF.assign(x=pd.array(vals, dtype=dtype))
    res = _stat(container, _build(container, df), "gmean")
    np.testing.assert_allclose(_column(res, "gmean"), _ref_gmean(vals, DF["g"]), rtol=1e-12)  # pandas


# ============================================================== 5. shapes
@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("name", STATISTICS)
def test_5_zero_length_data_gives_empty_or_undefined_results(container, name, monkeypatch):
    kw = dict(CALLS[name][0])
    if name == "exceedance":
        kw["limit"] = 1.0
    if name == "fold_change":
        pytest.skip("fold_change needs the reference level to exist (an error naming it; tested below)")
    res = _on(container, name, kw, _frame(np.array([]), g=np.array([], dtype=object)), monkeypatch)
    frame = _tidy(res, name)
    # groupby of an empty frame has no group (pandas); every count that remains is zero
    assert len(frame) == 0 or all(frame[c].fillna(0).eq(0).all() for c in frame.columns if c.startswith("n"))


def test_5_fold_change_on_no_rows_names_the_missing_reference():
    with pytest.raises(ValueError, match=r"reference='a' is not a level"):
        DF.iloc[:0].logstats.fold_change(by="g", reference="a", columns="x")


@pytest.mark.parametrize("container", CONTAINERS)
def test_5_empty_selections(container):
    """``columns=[]`` on tables (as ``groupby(...)[[]]``: no value, no row); the xarray analogue is a
    zero-length kept dim, which keeps its (empty) dim in the result."""
    if container in ("DataFrame", "dask DataFrame"):
        obj = _build(container, DF)
        assert len(_computed(obj.logstats.summary(by="g", columns=[]))) == 0
        assert len(_computed(obj.logstats.summary(columns=[]))) == 0
        return
    if container == "Series":
        assert DF["x"].iloc[:0].logstats.summary()["n"] == 0
        return
    da = xr.DataArray(np.empty((X.size, 0)), dims=("cell", "ch"), coords={"g": ("cell", DF["g"].to_numpy())},
                      name="x")
    if container == "dask DataArray":
        da = da.chunk({"cell": 5})
    obj = da.to_dataset() if container == "Dataset" else da
    out = _computed(obj.logstats.summary("cell", by="g"))
    assert dict(out.sizes) == {"ch": 0, "g": 2}


@pytest.mark.parametrize("container", ["Dataset", pytest.param("dask Dataset", marks=requires_dask)])
def test_5_dataset_variable_without_the_reduced_dim_is_left_out_and_said(container):
    ds = xr.Dataset({"a": (("cell", "ch"), X.reshape(12, 2)), "b": (("ch",), np.ones(2))})
    if container == "dask Dataset":
        ds = ds.chunk({"cell": 5})
    with pytest.warns(LogstatsWarning, match=r"\['b'\] lack the dim"):
        out = _computed(ds.logstats.summary("cell"))
    np.testing.assert_allclose(out["gmean"].to_numpy(), stats.gmean(X.reshape(12, 2), axis=0), rtol=1e-12)


@pytest.mark.parametrize("container", ["DataFrame", "DataArray"])
def test_5_wide_tables_equal_the_same_numbers_as_an_array(container):
    """Thousands of value columns: the one-pass result equals scipy.stats.gmean per column (the speed
    half of the issue is a benchmark, not a test: no timing assertions here)."""
    wide = RNG.lognormal(size=(10, 2000))
    if container == "DataFrame":
        out = pd.DataFrame(wide).logstats.gmean().to_numpy()
    else:
        out = xr.DataArray(wide, dims=("cell", "ch")).logstats.gmean("cell").to_numpy()
    np.testing.assert_allclose(out, stats.gmean(wide, axis=0), rtol=1e-12)


# ============================================================== 6. degenerate data
CONSTANT = [(2, 3.3), (3, 0.1), (10, 3.3), (1000, 0.1)]  # n per group, the constant value


def _constant_checks(name: str, kw: dict, frame: pd.DataFrame, c: float) -> None:
    """What constant data must give (formulas at s = 0: gmean = c, gsd = 1, gcv = 0, every interval
    collapses to c; scipy.stats.shapiro is undefined for a range of zero, so normality p is NaN; with
    no spread there is no evidence for either scale, so no verdict; a t test has no statistic)."""
    close = dict(rtol=1e-12, atol=0)
    col = frame.get
    if name in ("gmean",):
        np.testing.assert_allclose(frame.iloc[:, 0], c, **close)
    elif name == "gsd":
        np.testing.assert_allclose(frame.iloc[:, 0], 1.0, **close)
    elif name == "gcv":
        np.testing.assert_allclose(frame.iloc[:, 0].astype(float), 0.0, atol=1e-7)
    elif name == "moments":
        np.testing.assert_allclose(frame["m2_log"].astype(float), 0.0, atol=1e-24)
    elif name == "summary":
        for f in ("gmean", "ci_low", "ci_high"):
            np.testing.assert_allclose(frame[f], c, **close)
        np.testing.assert_allclose(frame["gsd"], 1.0, **close)
    elif name == "fit":
        np.testing.assert_allclose(frame["sigma"].astype(float), 0.0, atol=1e-7)
        np.testing.assert_allclose(frame["gmean"], c, **close)
    elif name == "scale_check":
        assert not set(frame["preferred"].dropna()) & {"log", "linear"}, frame["preferred"].tolist()
        for f in ("normality_p_linear", "normality_p_log", "boxcox_lambda"):
            if col(f) is not None:
                assert frame[f].isna().all(), (f, frame[f].tolist())
    elif name in ("lognormal_mean", "quantile"):
        np.testing.assert_allclose(frame["estimate"], c, **close)
    elif name == "tolerance_limit":
        side = "both" if kw.get("side") == "both" else "upper"
        np.testing.assert_allclose(frame["tolerance_high"], c, **close)
        if side == "both":
            np.testing.assert_allclose(frame["tolerance_low"], c, **close)
    elif name == "exceedance":  # the limit lies above every value
        np.testing.assert_allclose(frame["fraction"], 0.0, atol=1e-12)
        assert (frame["n_exceed"] == 0).all()
    elif name == "fold_change":
        np.testing.assert_allclose(frame["ratio"], 1.0, **close)
        assert frame["p_value"].isna().all(), "no test verdict from rounding residue"
    elif name == "variance_components":
        for f in [f for f in frame.columns if f.startswith("var_") and "_ci_" not in f]:
            v = frame[f].astype(float)  # zero, or undefined (NaN) when a level has one unit per group
            assert (v.isna() | (v.abs() <= 1e-24)).all(), (f, v.tolist())


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("n,c", CONSTANT)
@pytest.mark.parametrize("name,kw", [(n, kw) for n, calls in CALLS.items() for kw in calls])
def test_6_constant_values_give_no_verdict_from_rounding_residue(container, n, c, name, kw, monkeypatch):
    kw = dict(kw)
    if name == "exceedance":
        kw["limit"] = 10 * c
    if name == "lognormal_mean" and n > 10:
        kw = {**kw, "n_draws": 200} if kw.get("method") == "gci" else kw
    res = _on(container, name, kw, _frame(np.full(2 * n, c)), monkeypatch)
    _constant_checks(name, kw, _tidy(res, name), c)


CENSORABLE = ["summary", "fit", "scale_check", "quantile", "tolerance_limit", "exceedance", "lognormal_mean"]


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("name", CENSORABLE)
def test_6_one_value_groups_and_all_censored_groups(container, name, monkeypatch):
    """Group "a" holds one value, group "b" four; a limit above every value censors everything:
    undefined results are NaN (never an exception), every value is counted."""
    df = _frame(np.array([2.0, 1.0, 1.5, 3.0, 4.0]), g=np.array(["a", "b", "b", "b", "b"]))
    kw = {"limit": 2.5} if name == "exceedance" else {}
    one = _tidy(_on(container, name, kw, df, monkeypatch), name)
    assert one["n"].tolist() == [1, 4]  # pandas groupby size
    if name in ("summary", "quantile", "lognormal_mean"):
        assert np.isnan(one.iloc[0]["ci_low"])  # a t interval needs two values
    allc = _tidy(_on(container, name, {**kw, "detection_limit": 10.0}, df, monkeypatch), name)
    assert allc["n_censored"].tolist() == [1, 4]
    value = {"summary": "gmean", "fit": "mu", "scale_check": "aic_lognormal", "quantile": "estimate",
             "tolerance_limit": "tolerance_high", "exceedance": "fraction",
             "lognormal_mean": "estimate"}[name]
    assert allc[value].isna().all(), (name, allc[value].tolist())
    if name == "fit":
        assert set(allc["status"]) == {"all_censored"}


@pytest.mark.parametrize("container", CONTAINERS)
def test_6_exceedance_limit_above_every_value(container, monkeypatch):
    res = _tidy(_on(container, "exceedance", {"limit": 1e6}, DF, monkeypatch), "exceedance")
    assert (res["n_exceed"] == 0).all()  # numpy: (x > 1e6).sum() == 0
    assert (res["fraction"] < 1e-6).all()


# ============================================================== 7. resource bounds
@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("kw", [{"method": "bootstrap", "n_draws": 300},
                                {"method": "gci", "n_draws": 40_000}])
def test_7_monte_carlo_on_one_large_group_stays_bounded(container, kw, monkeypatch):
    """One group of 20 000 values: held at once the bootstrap draws alone would take 48 MB; the bound
    of logstats.stats.lnmean (2**21 numbers per batch, 16 MB per float64 array) keeps the peak far
    below (tracemalloc; the exact batching equality is in test_resources.py)."""
    df = _frame(RNG.lognormal(0.0, 0.5, 20_000), g=np.full(20_000, "a", dtype=object))
    tracemalloc.start()
    try:
        res = _on(container, "lognormal_mean", {**kw, "random_state": 1}, df, monkeypatch)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 110e6, f"{peak / 1e6:.0f} MB"
    frame = _tidy(res, "lognormal_mean")
    # the arithmetic mean of LN(0, 0.5) is exp(0.125) (log-normal moment formula)
    assert frame["ci_low"].iloc[0] < np.exp(0.125) * 1.02 and frame["ci_high"].iloc[0] > np.exp(0.125) * 0.98


# ============================================================== 8. messages
ZERO = DF.assign(x=np.r_[X[:15], 0.0, X[16:]])  # one zero, in group "b"
INF = DF.assign(x=np.r_[X[:15], np.inf, X[16:]])  # one +inf, in group "b"


def _raw(container: str, df: pd.DataFrame, name: str, *, obj=None, **kw):
    """A call with the default policy (``nonpositive="raise"``), which ``_call`` does not make."""
    obj = _build(container, df) if obj is None else obj
    kw = dict(kw)
    if name == "exceedance":
        kw.setdefault("limit", 3.0)
    if name == "fold_change":
        if container in ("DataFrame", "dask DataFrame"):
            return _computed(obj.logstats.fold_change(by="g", reference="a", columns="x", **kw))
        if container == "Series":
            return obj.logstats.fold_change(by=obj.index.to_series().rename("g"), reference="a", **kw)
        return obj.logstats.fold_change("cell", by="g", reference="a", **kw)
    if name == "variance_components":
        kw["nested"] = ["day", "well"]
        if container == "Series":
            pytest.skip("a Series carries no nesting columns")
    return _stat(container, obj, name, **kw)


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("name", STATISTICS)
def test_8_refusals_name_column_group_count_and_keyword(container, name):
    where = "variable" if container in ("DataArray", "Dataset", "dask DataArray") else "column"
    with pytest.raises(ValueError, match=rf"{where} 'x' holds 1 value\(s\) at or below zero "
                                         rf"\(in group\(s\) 'b'\).*nonpositive='drop'") as info:
        _raw(container, ZERO, name)
    assert "np.int64" not in str(info.value) and "np.str_" not in str(info.value)


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("name", STATISTICS)
def test_8_plus_inf_is_refused_naming_group_and_count_in_every_method(container, name):
    # dask-backed DataArrays: the refusal is raised inside a dask block, which is given the labels
    with pytest.raises(ValueError, match=r"1 value\(s\) of \+inf \(in group\(s\) 'b'\).*NaN") as info:
        _raw(container, INF, name)
    assert "np.int64" not in str(info.value)


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("kw,error", [
    ({"ddof": "1"}, r"ddof= must be a number; got '1'"),
    ({"skipna": 1}, r"skipna= must be True or False"),
    ({"confidence_level": "95%"}, r"confidence_level= must be a number"),
])
def test_8_option_type_errors_name_the_option(container, kw, error):
    name = "summary"
    with pytest.raises(TypeError, match=error):
        _raw(container, DF, name, **kw)


@pytest.mark.parametrize("container", CONTAINERS)
def test_8_fold_change_option_types(container):
    with pytest.raises(TypeError, match="equal_var= must be True or False"):
        _raw(container, DF, "fold_change", equal_var="no")


# ============================================================== 9. command line
# The command line reads files into a DataFrame (one container); its hostile files (corrupt or
# truncated gzip, binary files, commas and quotes in names) are the table of test_cli_hostile.py.
@pytest.mark.parametrize("header", ['"a,b"', '"say ""hi"""', "0"])
def test_9_column_names_with_commas_quotes_or_digits(tmp_path, capsys, header):
    from logstats.cli import main

    text = f"g,{header}\n" + "".join(f"{'ab'[i % 2]},{float(v)!r}\n" for i, v in enumerate(X))
    path = tmp_path / "t.csv.gz"
    path.write_bytes(gzip.compress(text.encode()))
    name = pd.read_csv(path).columns[1]
    code = main(["summary", str(path), "--value", name, "--by", "g"])
    out = capsys.readouterr().out
    assert code == 0
    assert f"{stats.gmean(X[0::2]):.3g}" in out  # scipy.stats.gmean of group a, 3 significant digits


# ============================================================== 10. warnings at extreme magnitudes
@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("scale", [1e-300, 1e300])
@pytest.mark.parametrize("name,kw", [(n, kw) for n, calls in CALLS.items() for kw in calls])
def test_10_no_runtime_warning_at_extreme_magnitudes(container, scale, name, kw, monkeypatch):
    """pytest turns every warning into an error (pyproject filterwarnings), so a RuntimeWarning of any
    method on any container fails here; gmean scales exactly (gmean(c x) = c gmean(x), a property of
    the log transform), checked against scipy.stats.gmean on the rescaled values."""
    kw = dict(kw)
    if name == "exceedance":
        kw["limit"] = 4.0 * scale
    res = _on(container, name, kw, DF.assign(x=X * scale), monkeypatch)
    frame = _tidy(res, name)
    if name == "gmean":
        ref = np.array([stats.gmean(X[:12]), stats.gmean(X[12:])]) * scale
        np.testing.assert_allclose(frame.iloc[:, 0].to_numpy(), ref, rtol=1e-12)


def test_10_array_functions_at_extreme_magnitudes():
    for scale in (1e-300, 1e300):
        for name in ("gmean", "gsd", "summary", "fit", "scale_check", "quantile", "tolerance_limit"):
            getattr(logstats, name)(X * scale)
        logstats.exceedance(X * scale, limit=3.0 * scale)
        assert logstats.gmean(X * scale) == pytest.approx(stats.gmean(X) * scale, rel=1e-12)


# ============================================================== the counts identity (property)
#: keywords each method needs in the property (a small table like CALLS in test_contract.py)
PROPERTY_CALLS: dict[str, dict] = {
    "fold_change": {"reference": "a"},
    "exceedance": {"limit": 3.0},
    "variance_components": {"nested": ["day", "well"]},
    "lognormal_mean": {"method": "cox"},
    "scale_check": {},
}
COUNTED = [n for n in STATISTICS if {"n", "n_missing", "n_nonpositive"} <= set(METHODS[n].field_names)]

values_st = st.lists(st.one_of(st.floats(0.01, 1e4), st.just(0.0), st.just(-2.0), st.just(np.nan)),
                     min_size=1, max_size=30)
keys_st = st.lists(st.one_of(st.sampled_from(["a", "b", "c"]), st.none()), min_size=30, max_size=30)
label_st = st.one_of(st.integers(-3, 3), st.sampled_from(["x", "gmean", "variable", "n"]),
                     st.tuples(st.sampled_from(["m", "k"]), st.integers(0, 2)))


def _identity(name: str, out: pd.DataFrame, keys: pd.Series, n_without_key: int, rows: int) -> None:
    """Per group and in total: n + n_missing + n_nonpositive = rows of the group, and the groups plus
    the rows without a key are all the rows. (``n`` counts censored values too, as DESIGN.md defines it
    for ``fit``; ``n_censored`` <= ``n``; so the issue's sum, which adds n_censored again, holds only
    with nothing censored.) The reference is pandas ``groupby(...).size()``."""
    size = keys.groupby(keys, dropna=True).size()
    if name == "fold_change":
        ref_rows = int(size.get("a", 0))
        used = out["n_cells"] if "n_cells" in out else out["n"]
        got = used + out["n_missing"] + out["n_nonpositive"]
        levels = [lv for lv in out.index]
        assert got.tolist() == [int(size[lv]) for lv in levels]
        ref_used = out["n_cells_reference"] if "n_cells_reference" in out else out["n_reference"]
        assert (ref_used + out["n_missing_reference"] + out["n_nonpositive_reference"]).eq(ref_rows).all()
        return
    got = out["n"] + out["n_missing"] + out["n_nonpositive"]
    if METHODS[name].pools_groups or len(out) == 1 and out.index.name == "variable":
        assert int(got.sum()) + n_without_key == rows
        return
    assert got.tolist() == size.reindex(out.index).tolist()
    if "n_censored" in out:
        assert (out["n_censored"] <= out["n"]).all()
    assert int(got.sum()) + n_without_key == rows


def _example_frame(values, keys, label, censor):
    n = len(values)
    df = pd.DataFrame({"g": pd.Series(keys[:n], dtype=object), "day": np.arange(n) % 3,
                       "well": np.arange(n) % 2, "v": values})
    df.columns = pd.Index(["g", "day", "well", label], tupleize_cols=False)
    lim = 1.0 if censor else None
    return df, lim


def _kwargs(name, lim):
    kw = dict(PROPERTY_CALLS.get(name, {}))
    if lim is not None and (METHODS[name].accepts_detection_limit or name == "fold_change"):
        kw["detection_limit"] = lim
    return kw


@pytest.mark.parametrize("name", COUNTED)
@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(values=values_st, keys=keys_st, label=label_st, censor=st.booleans())
def test_counts_identity_pandas(name, values, keys, label, censor):
    df, lim = _example_frame(values, keys, label, censor)
    keyset = set(df["g"].dropna())
    assume(name != "fold_change" or ("a" in keyset and len(keyset) >= 2))  # a reference and a level
    before = copy.deepcopy(df)
    kw = _kwargs(name, lim)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogstatsWarning)
        out = getattr(df.logstats, name)(by="g", columns=[label], nonpositive="drop", **kw)
    pd.testing.assert_frame_equal(df, before)  # the input is never mutated
    _identity(name, out, df["g"], out.attrs["n_without_key"], len(df))


@pytest.mark.parametrize("name", COUNTED)
@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(values=values_st, keys=keys_st, censor=st.booleans(), dim=st.sampled_from(["cell", 0, ("c", 1)]))
def test_counts_identity_xarray(name, values, keys, censor, dim):
    n = len(values)
    g = np.array(keys[:n], dtype=object)
    coords = {"g": ((dim,), g), "day": ((dim,), np.arange(n) % 3), "well": ((dim,), np.arange(n) % 2)}
    da = xr.DataArray(np.asarray(values, dtype=float), dims=(dim,), coords=coords, name="x")
    keyset = set(pd.Series(g).dropna())
    assume(name != "fold_change" or ("a" in keyset and len(keyset) >= 2))
    before = da.copy(deep=True)
    kw = _kwargs(name, 1.0 if censor else None)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogstatsWarning)
        if name == "fold_change":
            res = da.logstats.fold_change(dim, by="g", nonpositive="drop", **kw)
        else:
            res = getattr(da.logstats, name)(dim, by="g", nonpositive="drop", **kw)
    xr.testing.assert_identical(da, before)  # the input is never mutated
    if name == "fold_change":
        out = res.to_dataframe()[[k for k in res.data_vars]]
    elif METHODS[name].pools_groups or "g" not in res.dims:
        out = pd.DataFrame({k: [v.item()] for k, v in res.data_vars.items()}, index=pd.Index(["x"],
                                                                                             name="variable"))
    else:
        out = res.to_dataframe()[[k for k in res.data_vars]]
    _identity(name, out, pd.Series(g), res.attrs["n_without_key"], n)


@requires_dask
@pytest.mark.parametrize("name", ["summary", "fit", "quantile", "scale_check", "exceedance"])
@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(values=values_st, keys=keys_st)
def test_counts_identity_dask_dataframe(name, values, keys):
    import dask.dataframe as dd

    df, _ = _example_frame(values, keys, "x", False)
    before = df.copy(deep=True)
    ddf = dd.from_pandas(df, npartitions=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LogstatsWarning)
        out = getattr(ddf.logstats, name)(by="g", columns="x", nonpositive="drop",
                                          **PROPERTY_CALLS.get(name, {})).compute()
    pd.testing.assert_frame_equal(df, before)
    _identity(name, out, df["g"], out.attrs["n_without_key"], len(df))


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("name,kw", [(n, kw) for n, calls in CALLS.items() for kw in calls[:1]])
def test_inputs_are_never_mutated_on_any_container(container, name, kw):
    """Every method, every container, bad values in it: the input equals its deep copy afterwards."""
    df = DF.assign(x=np.r_[X[:3], np.nan, 0.0, -1.0, X[6:]])
    obj = _build(container, df)
    before = copy.deepcopy(obj) if container != "dask DataFrame" else obj.compute()
    kw = {k: v for k, v in kw.items()}
    if name == "exceedance":
        kw["limit"] = 3.0
    _raw(container, df, name, obj=obj, nonpositive="drop",
         **{k: v for k, v in kw.items() if k not in ("reference", "nested")})
    after = obj.compute() if container == "dask DataFrame" else obj
    if isinstance(before, (xr.DataArray, xr.Dataset)):
        xr.testing.assert_identical(after, before)
    elif isinstance(before, pd.Series):
        pd.testing.assert_series_equal(after, before)
    else:
        pd.testing.assert_frame_equal(after, before)
