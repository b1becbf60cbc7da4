"""fold_change on pandas and xarray containers, against scipy on hand-built replicate means."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

import logstats  # noqa: F401


@pytest.fixture
def screen():
    # invented screen: 3 treatments x 4 days (one well per treatment and day) x 300 cells
    rng = np.random.default_rng(21)
    rows = []
    for t, eff in [("vehicle", 0.0), ("cmpd_1", 0.35), ("cmpd_2", 0.05)]:
        for day in range(4):
            day_effect = [0.0, 0.2, -0.15, 0.1][day] + rng.normal(0, 0.1)
            x = rng.lognormal(5 + eff + day_effect, 0.8, 300)
            rows.append(pd.DataFrame({"treatment": t, "day": day, "well": f"{t}-{day}", "gfp": x}))
    return pd.concat(rows, ignore_index=True)


def test_per_value_matches_scipy_welch(screen):
    out = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp", adjust=None)
    assert "p_adjusted" not in out.columns
    y_ref = np.log(screen.loc[screen.treatment == "vehicle", "gfp"])
    for level in ["cmpd_1", "cmpd_2"]:
        y = np.log(screen.loc[screen.treatment == level, "gfp"])
        res = stats.ttest_ind(y, y_ref, equal_var=False)  # scipy Welch t on the logs
        ci = res.confidence_interval(0.95)
        row = out.loc[level]
        assert row["ratio"] == pytest.approx(np.exp(y.mean() - y_ref.mean()), rel=1e-12)
        assert row["p_value"] == pytest.approx(res.pvalue, rel=1e-9)
        assert row["ci_low"] == pytest.approx(np.exp(ci.low), rel=1e-12)
        assert row["ci_high"] == pytest.approx(np.exp(ci.high), rel=1e-12)
        assert row["n"] == len(y) and row["n_reference"] == len(y_ref)


def test_replicate_is_the_unit(screen):
    out = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp", replicate="well")
    # hand-built reference: mean of logs per well with pandas, then scipy Welch on those means
    means = screen.assign(y=np.log(screen.gfp)).groupby(["treatment", "well"])["y"].mean()
    res = stats.ttest_ind(means["cmpd_1"], means["vehicle"], equal_var=False)
    row = out.loc["cmpd_1"]
    assert row["n"] == 4 and row["n_reference"] == 4
    assert row["n_cells"] == 1200 and row["n_cells_reference"] == 1200
    assert row["p_value"] == pytest.approx(res.pvalue, rel=1e-9)
    assert row["ci_low"] == pytest.approx(np.exp(res.confidence_interval().low), rel=1e-12)
    # pseudo-replication makes the per-cell p-value far smaller than the replicate one
    per_cell = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp")
    assert per_cell.loc["cmpd_1", "p_value"] < row["p_value"]


def test_paired_days_match_ttest_rel(screen):
    out = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp",
                                      replicate="day", paired=True, adjust="bh")
    means = screen.assign(y=np.log(screen.gfp)).groupby(["treatment", "day"])["y"].mean()
    res = stats.ttest_rel(means["cmpd_2"], means["vehicle"])  # scipy paired t
    assert out.loc["cmpd_2", "p_value"] == pytest.approx(res.pvalue, rel=1e-9)
    assert out.loc["cmpd_2", "n_unpaired"] == 0
    # BH across the two levels (statsmodels multipletests fdr_bh as reference)
    from statsmodels.stats.multitest import multipletests

    ref = multipletests(out["p_value"].to_numpy(), method="fdr_bh")[1]
    np.testing.assert_allclose(out["p_adjusted"], ref, rtol=1e-12)


def test_equivalence_matches_statsmodels_tost(screen):
    from statsmodels.stats.weightstats import ttost_ind

    out = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp",
                                      replicate="well", equivalence=(0.8, 1.25))
    means = screen.assign(y=np.log(screen.gfp)).groupby(["treatment", "well"])["y"].mean()
    # statsmodels TOST on the replicate log-means with log-transformed bounds (FDA 2001 80-125 %)
    p, _, _ = ttost_ind(means["cmpd_2"].to_numpy(), means["vehicle"].to_numpy(), np.log(0.8), np.log(1.25),
                        usevar="unequal")
    assert out.loc["cmpd_2", "equivalence_p"] == pytest.approx(p, rel=1e-9)
    assert out["equivalent"].dtype == bool


def test_errors_name_levels_and_keywords(screen):
    with pytest.raises(ValueError, match=r"reference='placebo'.*'cmpd_1'"):
        screen.logstats.fold_change(by="treatment", reference="placebo")
    with pytest.raises(ValueError, match="replicate="):
        screen.logstats.fold_change(by="treatment", reference="vehicle", paired=True)
    bad = screen.copy()
    bad.loc[0, "gfp"] = 0.0
    with pytest.raises(ValueError, match=r"column 'gfp'.*1 value\(s\).*nonpositive="):
        bad.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp")
    dropped = bad.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp",
                                       nonpositive="drop")
    assert dropped["n_cells_reference"].iloc[0] == 1199


def test_single_replicate_gives_nan_not_error(screen):
    one = screen[(screen.day == 0) | (screen.treatment != "cmpd_1")]
    out = one.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp", replicate="well")
    assert out.loc["cmpd_1", "n"] == 1 and np.isnan(out.loc["cmpd_1", "p_value"])
    assert np.isfinite(out.loc["cmpd_1", "ratio"])


def test_swap_inverts_ratio_and_interval(screen):
    a = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp", replicate="well")
    b = screen.logstats.fold_change(by="treatment", reference="cmpd_1", columns="gfp", replicate="well")
    assert b.loc["vehicle", "ratio"] == pytest.approx(1 / a.loc["cmpd_1", "ratio"], rel=1e-12)
    assert b.loc["vehicle", "ci_low"] == pytest.approx(1 / a.loc["cmpd_1", "ci_high"], rel=1e-12)
    assert b.loc["vehicle", "p_value"] == pytest.approx(a.loc["cmpd_1", "p_value"], rel=1e-12)


def test_xarray_equals_pandas(screen):
    da = xr.DataArray(screen["gfp"].to_numpy(), dims="cell",
                      coords={"treatment": ("cell", screen["treatment"].to_numpy()),
                              "well": ("cell", screen["well"].to_numpy())}, name="gfp")
    x = da.logstats.fold_change("cell", by="treatment", reference="vehicle", replicate="well")
    p = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp", replicate="well")
    assert list(x["treatment"].values) == list(p.index)
    for k in ["ratio", "ci_low", "ci_high", "p_value", "p_adjusted", "n"]:
        np.testing.assert_allclose(x[k].to_numpy(), p[k].to_numpy(), rtol=1e-13)


def test_within_strata(screen):
    out = screen.logstats.fold_change(by="treatment", reference="vehicle", columns="gfp", within="day")
    assert out.index.names == ["day", "treatment"] and len(out) == 8
    sub = screen[screen.day == 2]
    y = np.log(sub.loc[sub.treatment == "cmpd_1", "gfp"])
    y0 = np.log(sub.loc[sub.treatment == "vehicle", "gfp"])
    assert out.loc[(2, "cmpd_1"), "p_value"] == pytest.approx(stats.ttest_ind(y, y0, equal_var=False).pvalue,
                                                             rel=1e-9)


def test_xarray_kept_dims_are_separate_families(screen):
    # a second channel: each channel is its own comparison (and its own Holm family), as if run alone
    rng = np.random.default_rng(3)
    gfp = screen["gfp"].to_numpy()
    two = np.stack([gfp, gfp * rng.lognormal(0, 0.3, len(screen))], 1)
    da = xr.DataArray(two, dims=("cell", "channel"), coords={
        "channel": ["gfp", "rfp"], "treatment": ("cell", screen["treatment"].to_numpy()),
        "well": ("cell", screen["well"].to_numpy())})
    both = da.logstats.fold_change("cell", by="treatment", reference="vehicle", replicate="well")
    assert both["ratio"].dims == ("channel", "treatment")
    for ch in ["gfp", "rfp"]:
        alone = da.sel(channel=ch).logstats.fold_change("cell", by="treatment", reference="vehicle",
                                                        replicate="well")
        for k in ["ratio", "ci_low", "p_value", "p_adjusted"]:
            np.testing.assert_allclose(both[k].sel(channel=ch), alone[k], rtol=1e-13)
