"""Nested designs through the accessors: variance components on every container and fold changes with
nested replicates (cells in wells in days).

References: the two-stage means computed by hand with pandas groupby and compared with
scipy.stats.ttest_ind (Welch) / ttest_rel — the replicate as the unit is the practice of Lord et al.
(2020, J. Cell Biol. 219:e202001064); statsmodels MixedLM (REML) for the components of a balanced
design, where the ANOVA estimates equal REML when no component is negative (a textbook fact, Searle,
Casella & McCulloch 1992, from memory). The data are invented.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

import logstats  # noqa: F401
from tests.conftest import requires_dask


def _plates(seed: int = 2, balanced: bool = False) -> pd.DataFrame:
    """Invented: a marker per cell, two conditions x 4 days x 3 wells, 5-30 cells per well."""
    rng = np.random.default_rng(seed)
    rows = []
    for cond, eff in (("ctl", 0.0), ("trt", 0.4)):
        for day in range(4):
            d = rng.normal(0, 0.3)
            for w in ("A1", "A2", "A3"):
                n = 12 if balanced else int(rng.integers(5, 30))
                x = np.exp(1 + eff + d + rng.normal(0, 0.2) + rng.normal(0, 0.5, n))
                rows.append(pd.DataFrame({"cond": cond, "day": day, "well": w, "x": x}))
    return pd.concat(rows, ignore_index=True)


def _day_means(df: pd.DataFrame) -> pd.Series:
    y = np.log(df["x"])
    wells = y.groupby([df["cond"], df["day"], df["well"]]).mean()
    return wells.groupby(level=[0, 1]).mean()


def test_fold_change_nested_replicates_equal_two_stage_means_and_welch():
    df = _plates()
    fc = df.logstats.fold_change(by="cond", reference="ctl", replicate=["day", "well"])
    dm = _day_means(df)
    ref = stats.ttest_ind(dm["trt"], dm["ctl"], equal_var=False)  # scipy: Welch on the day means
    ci = ref.confidence_interval()
    row = fc.loc["trt"]
    np.testing.assert_allclose(row["ratio"], np.exp(dm["trt"].mean() - dm["ctl"].mean()), rtol=1e-12)
    np.testing.assert_allclose(row["p_value"], ref.pvalue, rtol=1e-10)
    np.testing.assert_allclose([row["ci_low"], row["ci_high"]], np.exp([ci.low, ci.high]), rtol=1e-10)
    assert (row["n"], row["n_reference"]) == (4, 4)  # days
    assert (row["n_well"], row["n_well_reference"]) == (12, 12)  # A1 of day 1 and of day 2: two wells
    assert row["n_cells"] == (df["cond"] == "trt").sum()
    assert row["unit"] == "replicate"


def test_fold_change_nested_paired_on_the_outer_level_equals_ttest_rel():
    df = _plates(seed=5)
    fc = df.logstats.fold_change(by="cond", reference="ctl", replicate=["day", "well"], paired=True)
    dm = _day_means(df)
    ref = stats.ttest_rel(dm["trt"], dm["ctl"])  # scipy: paired t on the day means
    np.testing.assert_allclose(fc.loc["trt", "p_value"], ref.pvalue, rtol=1e-10)


def test_nested_counts_what_is_left_out():
    df = _plates(seed=7)
    df.loc[[0, 1], "x"] = [np.nan, 0.0]
    df.loc[5, "well"] = None
    fc = df.logstats.fold_change(by="cond", reference="trt", replicate=["day", "well"], nonpositive="drop")
    row = fc.loc["ctl"]
    assert (row["n_missing"], row["n_nonpositive"], row["n_no_replicate"]) == (1, 1, 1)
    with pytest.raises(ValueError, match="at or below zero"):
        df.logstats.fold_change(by="cond", reference="trt", replicate=["day", "well"])


def test_variance_components_accessors_equal_the_checked_kernel_and_agree_across_containers():
    """The kernel itself is checked against statsmodels MixedLM (REML) and the ANOVA quadratic forms in
    tests/test_nested_stats.py; here the accessors must hand it the right codes (wells within days)."""
    from logstats.stats.nested import variance_components

    df = _plates(seed=11, balanced=True)
    vc = df.logstats.variance_components(by="cond", nested=["day", "well"], columns="x")
    codes = pd.factorize(df["cond"], sort=True)[0]
    day = pd.factorize(df["day"])[0]
    well = pd.factorize(df["day"].astype(str) + "/" + df["well"])[0]
    ref = variance_components(df["x"].to_numpy(), codes, 2, [day, well], names=["day", "well"])
    for k in ("var_day", "var_well", "var_within", "n_day", "n_well"):
        np.testing.assert_allclose(vc[k].to_numpy(), ref[k], rtol=1e-12)
    got = vc.loc["ctl"]
    assert got["n_day"] == 4 and got["n_well"] == 12
    da = xr.DataArray(df["x"].to_numpy(), dims="cell",
                      coords={k: ("cell", df[k].to_numpy()) for k in ("cond", "day", "well")})
    x = da.logstats.variance_components("cell", by="cond", nested=["day", "well"])
    for k in ("var_day", "var_well", "var_within", "design_effect", "n_effective"):
        np.testing.assert_allclose(x[k].to_numpy(), vc[k].to_numpy(), rtol=1e-12)


@requires_dask
def test_variance_components_on_a_dask_dataframe_loads_and_equals_pandas():
    import dask.dataframe as dd

    df = _plates(seed=3)
    lazy = dd.from_pandas(df, npartitions=4).logstats.variance_components(by="cond", nested=["day", "well"],
                                                                         columns="x")
    pd.testing.assert_frame_equal(lazy.compute(), df.logstats.variance_components(
        by="cond", nested=["day", "well"], columns="x"), check_index_type=False)


def test_plan_is_public_and_more_cells_stop_helping():
    res = logstats.plan(1.5, var_between=0.05, var_within=0.25, replicates=[3, 6], per_replicate=[100, 1000])
    p = res.set_index(["replicates", "per_replicate"])["power"]
    # with the between-replicate component fixed, 100x more cells barely raise the power
    assert p[(6, 1000)] - p[(6, 100)] < 0.02
    assert res.attrs["smallest"] is None or res.attrs["smallest"]["power"] >= 0.8


def test_variance_components_needs_nested_and_names_bad_levels():
    df = _plates()
    with pytest.raises(ValueError, match="nested="):
        df.logstats.variance_components(by="cond", columns="x")
    with pytest.raises(KeyError, match="plate"):
        df.logstats.variance_components(by="cond", nested=["plate"], columns="x")


def test_xarray_nested_replicates_equal_pandas():
    df = _plates(seed=9)
    fc = df.logstats.fold_change(by="cond", reference="ctl", replicate=["day", "well"])
    da = xr.DataArray(df["x"].to_numpy(), dims="cell",
                      coords={k: ("cell", df[k].to_numpy()) for k in ("cond", "day", "well")})
    x = da.logstats.fold_change("cell", by="cond", reference="ctl", replicate=["day", "well"])
    for k in ("ratio", "ci_low", "ci_high", "p_value", "n", "n_well", "n_cells"):
        np.testing.assert_allclose(x[k].to_numpy(), fc[k].to_numpy(), rtol=1e-12, err_msg=k)
