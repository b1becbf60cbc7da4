"""The contract: every declared method on every container gives the same fields, dtypes, layout and values.

For the same invented data (two groups of log-normal values with a missing value and a zero, so the
counts are exercised) each statistic of :data:`logstats.methods.METHODS` is computed on a pandas
Series, a DataFrame, a DataArray, a Dataset, a dask-backed DataArray and a dask DataFrame. Results are
brought to one tidy pandas layout (groups as the index) and compared: field names and order, the kind
of each dtype (float / int / bool / text), and values to 1e-12. The pandas DataFrame is the reference
layout; the values themselves are checked against scipy and statsmodels in the other test files (see
``tests/references.py``). Methods with Monte Carlo draws use one ``random_state`` everywhere.
"""

from __future__ import annotations

import doctest
import inspect

import numpy as np
import pandas as pd
import pytest
import xarray as xr

import logstats
from logstats.accessors._api import FAMILIES, docstring
from logstats.methods import METHODS
from tests.conftest import requires_dask

#: keyword sets each method is called with (beyond the policy); lists several calls where they differ
CALLS: dict[str, list[dict]] = {
    "gmean": [{}],
    "gsd": [{}],
    "gcv": [{}],
    "moments": [{}],
    "summary": [{}, {"confidence_level": 0.9, "ddof": 0}],
    "fit": [{}],
    "scale_check": [{}, {"margin": 0.5, "pooled": True}],
    "lognormal_mean": [{"method": "cox"}, {"method": "gci", "random_state": 3, "n_draws": 500}],
    "fold_change": [{"reference": "a"}, {"reference": "a", "equal_var": True, "adjust": None}],
    "quantile": [{"q": 0.9}, {"q": 0.5, "confidence_level": 0.8}],
    "tolerance_limit": [{}, {"side": "both", "coverage": 0.9}],
    "exceedance": [{"limit": 6.0}],
    "variance_components": [{"nested": ["day", "well"]}],
}
CONTAINERS = ["Series", "DataFrame", "DataArray", "Dataset",
              pytest.param("dask DataArray", marks=requires_dask),
              pytest.param("dask DataFrame", marks=requires_dask)]


def _data() -> pd.DataFrame:
    """Invented: a marker in two arms of 30 cells, one value missing and one zero."""
    rng = np.random.default_rng(17)
    x = np.concatenate([rng.lognormal(1.0, 0.5, 30), rng.lognormal(1.4, 0.7, 30)])
    x[4], x[40] = np.nan, 0.0
    day = np.tile(np.repeat([1, 2, 3], 10), 2)
    well = np.tile(np.repeat(["A1", "A2"], 5), 6)  # A1 on day 1 and A1 on day 2 are two wells
    return pd.DataFrame({"g": np.repeat(["a", "b"], 30), "day": day, "well": well, "x": x})


def _kind(dtype) -> str:
    if pd.api.types.is_bool_dtype(dtype):
        return "bool"
    if pd.api.types.is_integer_dtype(dtype):
        return "int"
    if pd.api.types.is_float_dtype(dtype):
        return "float"
    return "text"


def _call(container: str, name: str, kw: dict):
    df = _data()
    policy = {"nonpositive": "drop"}
    if container in ("Series", "DataFrame", "dask DataFrame"):
        obj = df
        if container == "Series":
            obj = df.set_index("g")["x"]
            if name == "variance_components":  # the nesting labels travel as a frame's columns
                pytest.skip("a Series carries no nesting columns")
        elif container == "dask DataFrame":
            import dask.dataframe as dd

            obj = dd.from_pandas(df, npartitions=3)
        if container != "Series":
            kw = {**kw, "columns": "x"}
        if name == "fold_change":
            by = pd.Series(obj.index, index=obj.index, name="g") if container == "Series" else "g"
            return getattr(obj.logstats, name)(by=by, **kw, **policy)
        by = obj.index.to_series().rename("g") if container == "Series" else "g"
        if container == "dask DataFrame":
            return getattr(obj.logstats, name)(by="g", **kw, **policy)
        return getattr(obj.logstats, name)(by=by, **kw, **policy)
    coords = {k: ("cell", df[k].to_numpy()) for k in ("g", "day", "well")}
    da = xr.DataArray(df["x"].to_numpy(), dims="cell", coords=coords, name="x")
    if container == "dask DataArray":
        da = da.chunk({"cell": 7})
    obj = da.to_dataset() if container == "Dataset" else da
    return getattr(obj.logstats, name)("cell", by="g", **kw, **policy)


def _tidy(res, name: str) -> pd.DataFrame:
    if hasattr(res, "compute") and not isinstance(res, (xr.DataArray, xr.Dataset)):
        res = res.compute()
    if isinstance(res, xr.Dataset):
        if "x" in res.data_vars and METHODS[name].shape == "single":
            res = res["x"]
        else:
            res = res.compute()
            if all(v.ndim == 0 for v in res.data_vars.values()):  # one row (pooled over groups)
                return pd.DataFrame({k: [v.item()] for k, v in res.data_vars.items()},
                                    index=pd.Index(["x"], name="variable"))
            frame = res.to_dataframe()
            return frame[[k for k in res.data_vars]]
    if isinstance(res, xr.DataArray):
        return res.compute().to_series().rename(name).to_frame()
    if isinstance(res, pd.Series) and METHODS[name].shape != "single" and res.index.name != "g":
        # one set of fields (a Series accessor's result pooled over groups): one row
        return pd.DataFrame([res.to_dict()], index=pd.Index(["x"], name="variable"))
    if isinstance(res, pd.Series):
        return res.rename(name).to_frame()
    if METHODS[name].shape == "single" and "x" in res.columns:
        return res[["x"]].rename(columns={"x": name})
    return res


@pytest.mark.parametrize("container", CONTAINERS)
@pytest.mark.parametrize("name,kw", [(n, kw) for n, calls in CALLS.items() for kw in calls])
def test_every_container_agrees_with_the_dataframe(container, name, kw):
    ref = _tidy(_call("DataFrame", name, kw), name)
    got = _tidy(_call(container, name, kw), name)
    assert list(got.columns) == list(ref.columns), container
    assert [_kind(t) for t in got.dtypes] == [_kind(t) for t in ref.dtypes], container
    assert [str(v) for v in got.index] == [str(v) for v in ref.index]
    for col in ref.columns:
        a, b = ref[col].to_numpy(), got[col].to_numpy()
        if _kind(ref[col].dtype) == "float":
            np.testing.assert_allclose(b.astype(float), a.astype(float), rtol=1e-12, atol=0, equal_nan=True,
                                       err_msg=f"{container}: {col}")
        else:
            assert [str(v) for v in b] == [str(v) for v in a], f"{container}: {col}"


def test_every_declared_statistic_is_tested_here_and_on_every_family():
    declared = {m.name for m in METHODS.values() if m.reduction not in ("transform",)}
    assert declared <= set(CALLS) | NEW_METHODS, declared - set(CALLS)
    for cls in (pd.DataFrame, pd.Series, xr.DataArray, xr.Dataset):
        acc = cls.logstats
        for name in declared:
            assert callable(getattr(acc, name)), (cls, name)


#: methods declared beside these tests whose container checks live in their own test files
NEW_METHODS: set[str] = set()


@pytest.mark.parametrize("name", sorted(METHODS))
def test_generated_methods_have_real_signatures_and_numpydoc(name):
    md = METHODS[name]
    if md.reduction in ("compare", "transform"):
        pytest.skip("written by hand in each adapter")
    for family, cls in (("pandas", pd.DataFrame), ("xarray", xr.DataArray)):
        method = getattr(cls.logstats, name)
        sig = inspect.signature(method)
        for p in md.params:
            assert p.name in sig.parameters and sig.parameters[p.name].default == p.default
        doc = method.__doc__
        for section in ("Parameters", "Returns"):
            assert f"{section}\n" in doc
        assert doc == docstring(md, FAMILIES[family])
        with pytest.raises(TypeError, match="unexpected keyword"):
            method(pd.DataFrame({"x": [1.0]}).logstats if family == "pandas" else None, nonsense=1)


@pytest.mark.parametrize("name", [n for n, m in METHODS.items() if m.example])
def test_examples_in_declarations_run(name):
    """The shared docstring examples run as doctests (generated methods are not in any module)."""
    md = METHODS[name]
    parser = doctest.DocTestParser()
    test = parser.get_doctest(md.example, {"logstats": logstats}, name, None, 0)
    runner = doctest.DocTestRunner(optionflags=doctest.NORMALIZE_WHITESPACE)
    runner.run(test)
    assert runner.failures == 0


def test_import_loads_neither_dask_nor_matplotlib():
    import subprocess
    import sys

    code = ("import sys, logstats; bad = [m for m in ('dask', 'matplotlib', 'scipy.stats', 'statsmodels') "
            "if m in sys.modules]; print(','.join(bad))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_every_statistic_names_its_outside_reference():
    from tests.references import DECLARED_REFERENCES

    assert all(DECLARED_REFERENCES.values()), [k for k, v in DECLARED_REFERENCES.items() if not v]
