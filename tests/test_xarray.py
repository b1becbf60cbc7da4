"""The xarray accessor (numpy and dask back ends) against numpy/scipy references."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

import logstats
from tests.conftest import BACKENDS, no_dask_compute, requires_dask


def make_stack(backend: str = "numpy") -> xr.DataArray:
    rng = np.random.default_rng(9)
    x = rng.lognormal(4.0, 0.7, size=(600, 3, 4))
    da = xr.DataArray(
        x, dims=("cell", "channel", "time"),
        coords={"channel": ["gfp", "rfp", "dapi"], "time": [0, 1, 2, 3],
                "condition": ("cell", rng.choice(["vehicle", "drug"], 600))},
        attrs={"units": "AU", "long_name": "intensity"}, name="intensity")
    if backend == "dask":
        import dask.array

        # chunk the data only: the group coordinate stays in memory, as labels usually are
        da = da.copy(data=dask.array.from_array(x, chunks=(97, 2, 4)))
    return da


@pytest.mark.parametrize("backend", BACKENDS)
def test_summary_along_cell_matches_scipy(backend):
    da = make_stack(backend)
    out = da.logstats.summary(dim="cell")
    ref = make_stack().to_numpy()
    np.testing.assert_allclose(out["gmean"], stats.gmean(ref, axis=0), rtol=1e-12)  # scipy.stats.gmean
    np.testing.assert_allclose(out["gsd"], stats.gstd(ref, axis=0), rtol=1e-12)  # scipy.stats.gstd
    ci = stats.ttest_1samp(np.log(ref), 0.0, axis=0).confidence_interval()  # scipy t interval on logs
    np.testing.assert_allclose(out["ci_low"], np.exp(ci.low), rtol=1e-12)
    np.testing.assert_allclose(out["ci_high"], np.exp(ci.high), rtol=1e-12)
    assert out["n"].dtype == np.int64 and int(out["n"].max()) == 600
    assert out["gmean"].attrs["units"] == "AU" and "units" not in out["gsd"].attrs


@pytest.mark.parametrize("backend", BACKENDS)
def test_grouped_by_coordinate(backend):
    da = make_stack(backend)
    out = da.logstats.summary(dim="cell", by="condition")
    assert out["gmean"].dims == ("channel", "time", "condition")
    ref = make_stack()
    for cond in ["vehicle", "drug"]:
        sub = ref.where(ref.condition == cond, drop=True).to_numpy()
        np.testing.assert_allclose(out["gmean"].sel(condition=cond), stats.gmean(sub, axis=0), rtol=1e-12)


@requires_dask
def test_dask_results_stay_lazy_and_equal():
    da = make_stack("dask")
    with no_dask_compute():
        lazy = da.logstats.summary(dim="cell", by="condition")
        g = da.logstats.gmean(["cell", "time"])
    assert logstats.accessors.xarray.is_lazy(lazy)
    # the reduced dim is not rechunked into one block: the graph has one moments task per cell chunk
    assert len(da.chunks[0]) > 1
    eager = make_stack().logstats.summary(dim="cell", by="condition")
    xr.testing.assert_allclose(lazy.compute(), eager, rtol=1e-12)
    xr.testing.assert_allclose(g.compute(), make_stack().logstats.gmean(["cell", "time"]), rtol=1e-12)


def test_dataset_variables_share_the_path():
    da = make_stack()
    ds = xr.Dataset({"a": da, "b": da * 3.0, "flag": da > 50})
    g = ds.logstats.gmean("cell")
    assert set(g.data_vars) == {"a", "b"}  # non-numeric (boolean) variable skipped
    xr.testing.assert_allclose(g["b"], 3.0 * g["a"])
    s = ds.logstats.summary("cell")
    assert s["gmean"].dims[0] == "variable" and list(s["variable"].values) == ["a", "b"]
    one = xr.Dataset({"a": da}).logstats.summary("cell")
    xr.testing.assert_allclose(one, da.logstats.summary("cell"))


def test_dims_none_and_list():
    da = make_stack()
    assert da.logstats.gmean().item() == pytest.approx(stats.gmean(da.to_numpy().ravel()), rel=1e-12)
    two = da.logstats.gsd(["cell", "time"])
    assert two.dims == ("channel",)
    ref = stats.gstd(da.transpose("channel", "cell", "time").to_numpy().reshape(3, -1), axis=1)
    np.testing.assert_allclose(two, ref, rtol=1e-12)


def test_bad_arguments_and_policy():
    da = make_stack()
    with pytest.raises(ValueError, match="dim"):
        da.logstats.gmean("nope")
    with pytest.raises(KeyError, match="by="):
        da.logstats.summary("cell", by="nope")
    with pytest.raises(ValueError, match="lies along 'cell'"):
        da.logstats.summary("time", by="condition")
    bad = da.copy()
    bad[0, 0, 0] = 0.0
    with pytest.raises(ValueError, match=r"variable 'intensity'.*1 value\(s\).*nonpositive="):
        bad.logstats.summary("cell", by="condition")
    out = bad.logstats.summary("cell", nonpositive="drop")
    assert int(out["n_nonpositive"].sum()) == 1
    assert da.to_numpy().min() > 0  # the copy was changed, not the input


@pytest.mark.parametrize("base", ["e", 2, 10])
def test_log_exp_keep_units(base):
    da = make_stack()
    lg = da.logstats.log(base=base)
    assert lg.attrs["units"] == f"log_{base}(AU)"
    back = lg.logstats.exp(base=base)
    assert back.attrs["units"] == "AU"
    np.testing.assert_allclose(back, da, rtol=1e-13)


def test_pandas_and_xarray_agree():
    da = make_stack()
    df = da.sel(channel="gfp", time=0).to_dataframe().reset_index()
    p = df.logstats.summary(by="condition", columns="intensity")
    x = da.sel(channel="gfp", time=0).logstats.summary("cell", by="condition")
    np.testing.assert_allclose(p["gmean"].to_numpy(), x["gmean"].to_numpy(), rtol=1e-13)
    assert pd.Index(x["condition"].values).tolist() == p.index.tolist()
