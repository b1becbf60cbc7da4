"""Larger than memory, test-sized: lazily generated log-normal stacks summarised along ``cell``.

The data are invented: per-cell intensities of three channels, drawn as ``exp(mu + sigma * z)`` with
``z`` standard normal, generated chunk by chunk by dask and never held whole. Checks:

* the result against the generating parameters, with tolerances of five standard errors (the standard
  error of a normal sample's mean is sigma/sqrt(n), of its SD about sigma/sqrt(2n): common practice);
* the result on a slice small enough to compute against scipy.stats.gmean / gstd on that slice;
* peak resident memory while summarising, loosely (Linux only: ``/proc/self/clear_refs``);
* the same computation on a ``dask.distributed`` cluster of two worker processes.

The benchmark-sized case (4 GB and more) is ``python -m benchmarks --only out_of_core``.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from scipy import stats

import logstats  # noqa: F401  (registers the accessors)

da = pytest.importorskip("dask.array")

from benchmarks.memory import reset_peak as _reset_peak_rss  # noqa: E402
from benchmarks.memory import status as _status  # noqa: E402
from tests._dask_helpers import raise_if_dask_computes  # noqa: E402

MU = np.array([0.5, 2.0, -1.0])
SIGMA = np.array([0.3, 0.8, 1.5])


def lazy_stack(n_cells: int, chunk: int, seed: int = 2024) -> xr.DataArray:
    """An invented (channel, cell) stack of log-normal intensities, generated lazily by dask."""
    z = da.random.default_rng(seed).standard_normal((len(MU), n_cells), chunks=(len(MU), chunk))
    values = np.exp(MU[:, None] + SIGMA[:, None] * z)
    return xr.DataArray(values, dims=("channel", "cell"), coords={"channel": ["dapi", "gfp", "rfp"]},
                        attrs={"units": "a.u."})


def _check_against_parameters(res: xr.Dataset, n_cells: int) -> None:
    n = res["n"].values
    assert (n == n_cells).all()
    mean_log = np.log(res["gmean"].values)
    sd_log = np.log(res["gsd"].values)
    se_mean = SIGMA / np.sqrt(n)  # standard error of the mean of a normal sample
    se_sd = SIGMA / np.sqrt(2.0 * (n - 1))  # large-sample standard error of its SD
    assert np.all(np.abs(mean_log - MU) < 5 * se_mean), (mean_log, MU)
    assert np.all(np.abs(sd_log - SIGMA) < 5 * se_sd), (sd_log, SIGMA)
    # the t interval of the geometric mean must contain the true exp(mu) at this n (5-SE width)
    assert np.all(res["ci_low"].values < np.exp(MU + 5 * se_mean))
    assert np.all(res["ci_high"].values > np.exp(MU - 5 * se_mean))


def test_lazy_stack_summary_matches_generating_parameters():
    n_cells = 4_000_000  # 96 MB of float64 generated 3 MB at a time
    stack = lazy_stack(n_cells, chunk=125_000)
    with raise_if_dask_computes():
        res = stack.logstats.summary("cell")
    assert all(isinstance(v.data, da.Array) for v in res.data_vars.values())
    assert res["gmean"].attrs["units"] == "a.u."
    with raise_if_dask_computes(max_computes=1):
        res = res.compute()
    _check_against_parameters(res, n_cells)


def test_computable_slice_matches_scipy():
    stack = lazy_stack(1_000_000, chunk=60_000)
    part = stack.isel(cell=slice(0, 300_000))  # 5 chunks of 60,000 and the start of a sixth
    got = part.logstats.summary("cell").compute()
    x = part.values
    # references: scipy.stats.gmean / scipy.stats.gstd (ddof=1) along the axis; t interval of the mean
    # log from scipy.stats.ttest_1samp(...).confidence_interval(), back-transformed
    np.testing.assert_allclose(got["gmean"].values, stats.gmean(x, axis=1), rtol=1e-12)
    np.testing.assert_allclose(got["gsd"].values, stats.gstd(x, axis=1), rtol=1e-12)
    ci = stats.ttest_1samp(np.log(x), 0.0, axis=1).confidence_interval(0.95)
    np.testing.assert_allclose(got["ci_low"].values, np.exp(ci.low), rtol=1e-10)
    np.testing.assert_allclose(got["ci_high"].values, np.exp(ci.high), rtol=1e-10)
    # the dask result equals the in-memory (numpy-backed) one on the same values
    mem = xr.DataArray(x, dims=part.dims, coords=part.coords).logstats.summary("cell")
    for name in ("n", "gmean", "gsd", "ci_low", "ci_high"):
        np.testing.assert_allclose(got[name].values, mem[name].values, rtol=1e-12)




def test_peak_memory_stays_far_below_the_array():
    n_cells = 8_000_000
    stack = lazy_stack(n_cells, chunk=250_000)  # 192 MB in all, 6 MB per chunk
    nbytes = stack.size * 8
    lazy_stack(500_000, chunk=250_000).logstats.summary("cell").compute()  # warm up: imports, pools
    before = _reset_peak_rss()
    if before is None:
        pytest.skip("peak RSS cannot be reset on this platform (/proc/self/clear_refs)")
    res = stack.logstats.summary("cell").compute()
    growth = _status("VmHWM") - before
    assert (res["n"].values == n_cells).all()
    # loose: a few chunks in flight per thread, never the array (measured about 0.1 of it)
    mib = 2**20
    assert growth < 0.5 * nbytes, f"peak RSS grew {growth / mib:.0f} MiB for a {nbytes / mib:.0f} MiB array"


def test_distributed_cluster_of_two_processes_gives_the_same_result():
    distributed = pytest.importorskip("distributed")
    n_cells = 2_000_000
    stack = lazy_stack(n_cells, chunk=100_000)
    expected = stack.logstats.summary("cell").compute(scheduler="threads")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster):
        got = stack.logstats.summary("cell").compute()
        import dask.dataframe as dd

        from logstats.accessors.dask import register_dask_dataframe

        register_dask_dataframe()
        frame = stack.isel(channel=1).to_dataset(name="gfp").to_dask_dataframe()
        gm = frame.logstats.gmean(columns="gfp").compute()
    for name in ("n", "gmean", "gsd", "ci_low", "ci_high"):
        np.testing.assert_allclose(got[name].values, expected[name].values, rtol=1e-12)
    _check_against_parameters(got, n_cells)
    assert isinstance(frame, dd.DataFrame)
    assert gm["gfp"] == pytest.approx(float(expected["gmean"].sel(channel="gfp")), rel=1e-12)
