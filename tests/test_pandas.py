"""The pandas accessor: grouped results against scipy per group and pandas groupby semantics."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import logstats
from logstats import LogstatsWarning
from tests.references import REFERENCE_TABLE


@pytest.fixture
def cells():
    rng = np.random.default_rng(42)
    n = 3000
    return pd.DataFrame({
        "condition": rng.choice(["vehicle", "drug_a", "drug_b"], n),
        "well": rng.integers(1, 5, n),
        "gfp": rng.lognormal(5.0, 0.6, n),
        "rfp": rng.lognormal(3.0, 0.9, n),
        "label": "x",
    })


def test_grouped_summary_matches_scipy_per_group(cells):
    out = cells.logstats.summary(by=["condition", "well"], columns="gfp")
    assert list(out.columns[:7]) == ["n", "n_missing", "n_nonpositive", "gmean", "gsd", "gcv", "ci_low"]
    assert out.index.names == ["condition", "well"]
    for (cond, well), grp in cells.groupby(["condition", "well"]):
        row = out.loc[(cond, well)]
        x = grp["gfp"].to_numpy()
        assert row["n"] == len(x)
        for field in ["gmean", "gsd", "gcv", "ci_low", "ci_high"]:
            _, ref, source = REFERENCE_TABLE[field]
            assert row[field] == pytest.approx(ref(x), rel=1e-12), source


def test_gmean_shapes_follow_pandas(cells):
    # groupby-like shapes: DataFrame (groups x columns) with by; Series by column without.
    g = cells.logstats.gmean(by="condition")
    assert list(g.columns) == ["well", "gfp", "rfp"]  # numeric columns not used in by, as in pandas
    ref = cells.groupby("condition")["rfp"].agg(stats.gmean)  # scipy per group
    pd.testing.assert_series_equal(g["rfp"], ref, check_names=False, rtol=1e-12)
    s = cells.logstats.gsd(columns=["gfp", "rfp"])
    assert s.index.tolist() == ["gfp", "rfp"] and s.index.name == "variable"
    assert s["gfp"] == pytest.approx(stats.gstd(cells["gfp"]), rel=1e-12)  # scipy.stats.gstd
    assert cells["gfp"].logstats.gmean() == pytest.approx(stats.gmean(cells["gfp"]), rel=1e-13)
    by_series = cells["gfp"].logstats.gmean(by=cells["condition"])
    assert isinstance(by_series, pd.Series) and by_series.name == "gfp"


def test_text_columns_skipped_by_default_refused_when_named(cells):
    out = cells.logstats.summary(by="condition", columns=["gfp", "rfp"])
    assert "variable" in out.index.names
    default = cells.drop(columns="well").logstats.summary(by="condition")
    assert set(default.index.get_level_values("variable")) == {"gfp", "rfp"}
    with pytest.raises(TypeError, match="'label'.*not numeric"):
        cells.logstats.summary(by="condition", columns=["gfp", "label"])
    with pytest.raises(KeyError, match="nope"):
        cells.logstats.summary(by="nope")


def test_variable_level_is_last_and_rows_match(cells):
    out = cells.logstats.summary(by="condition", columns=["gfp", "rfp"])
    assert out.index.names == ["condition", "variable"]
    assert out.loc[("drug_a", "rfp"), "gmean"] == pytest.approx(
        stats.gmean(cells.loc[cells.condition == "drug_a", "rfp"]), rel=1e-12)


def test_no_by_summary_one_row_per_column(cells):
    out = cells.logstats.summary(columns=["gfp", "rfp"])
    assert out.index.name == "variable" and out.index.tolist() == ["gfp", "rfp"]
    s = cells["gfp"].logstats.summary()
    assert isinstance(s, pd.Series) and s["n"] == len(cells)


def test_categorical_unobserved_and_nan_keys_like_pandas():
    df = pd.DataFrame({
        "k": pd.Categorical(["a", "a", "b", None, "b"], categories=["a", "b", "c"]),
        "x": [1.0, 4.0, 2.0, 3.0, 8.0],
    })
    with pytest.warns(LogstatsWarning, match="1 row"):
        obs = df.logstats.summary(by="k")
    assert obs.index.tolist() == df.groupby("k", observed=True)["x"].size().index.tolist()
    with pytest.warns(LogstatsWarning):
        full = df.logstats.summary(by="k", observed=False)
    assert full.index.tolist() == ["a", "b", "c"]
    assert full.loc["c", "n"] == 0 and np.isnan(full.loc["c", "gmean"])
    keep = df.logstats.summary(by="k", dropna=False)
    assert keep["n"].sum() == 5 and keep.index.isna().sum() == 1


def test_multikey_observed_false_product_matches_pandas():
    df = pd.DataFrame({
        "a": pd.Categorical(["x", "y", "x"], categories=["x", "y", "z"]),
        "b": [1, 2, 2],
        "v": [1.0, 2.0, 3.0],
    })
    ours = df.logstats.summary(by=["a", "b"], columns="v", observed=False)
    ref = df.groupby(["a", "b"], observed=False)["v"].size()  # pandas groupby reference
    assert ours.index.tolist() == ref.index.tolist()
    assert ours["n"].tolist() == ref.tolist()


def test_nonpositive_policies_count_and_name(cells):
    df = cells.copy()
    df.loc[[0, 1, 2], "gfp"] = [0.0, -5.0, np.nan]
    bad_group = df.loc[0, "condition"]
    with pytest.raises(ValueError, match=r"column 'gfp'.*2 value\(s\).*" + bad_group + ".*nonpositive="):
        df.logstats.summary(by="condition", columns="gfp")
    out = df.logstats.summary(by="condition", columns="gfp", nonpositive="drop")
    assert out["n_nonpositive"].sum() == 2 and out["n_missing"].sum() == 1
    assert out["n"].sum() + 3 == len(df)  # nothing dropped without being counted
    nan = df.logstats.summary(by="condition", columns="gfp", nonpositive="nan")
    affected = set(df.loc[[0, 1], "condition"])
    assert nan.loc[list(affected), "gmean"].isna().all()
    skip = df.logstats.summary(by="condition", columns="gfp", nonpositive="drop", skipna=False)
    assert np.isnan(skip.loc[df.loc[2, "condition"], "gmean"])


def test_nullable_dtypes_and_ints():
    df = pd.DataFrame({"g": ["a", "a", "b"], "x": pd.array([1, pd.NA, 4], dtype="Int64"),
                       "f": pd.array([2.0, 8.0, pd.NA], dtype="Float64")})
    out = df.logstats.summary(by="g")
    assert out.loc[("a", "x"), "n_missing"] == 1 and out.loc[("b", "f"), "n_missing"] == 1
    assert out.loc[("a", "f"), "gmean"] == pytest.approx(4.0)


def test_inputs_not_mutated(cells):
    before = cells.copy(deep=True)
    cells.logstats.summary(by="condition", columns=["gfp", "rfp"], linear=True)
    cells.logstats.log(columns="gfp")
    pd.testing.assert_frame_equal(cells, before)


def test_linear_fields_match_pandas(cells):
    out = cells.logstats.summary(by="condition", columns="gfp", linear=True)
    ref = cells.groupby("condition")["gfp"].agg(["median", "mean", "std"])  # pandas reference
    np.testing.assert_allclose(out["median"], ref["median"], rtol=1e-14)
    np.testing.assert_allclose(out["mean"], ref["mean"], rtol=1e-12)
    np.testing.assert_allclose(out["sd"], ref["std"], rtol=1e-10)


def test_log_exp_round_trip_frame(cells):
    logged = cells.logstats.log(base=10, columns=["gfp"])
    np.testing.assert_allclose(logged["gfp"], np.log10(cells["gfp"]), rtol=1e-15)  # numpy reference
    back = logged.logstats.exp(base=10, columns=["gfp"])
    np.testing.assert_allclose(back["gfp"], cells["gfp"], rtol=1e-13)
    assert (back["rfp"] == cells["rfp"]).all()


def test_moments_combine_across_files(cells):
    half = len(cells) // 2
    m1 = cells.iloc[:half].logstats.moments(by="condition", columns="gfp")
    m2 = cells.iloc[half:].logstats.moments(by="condition", columns="gfp")
    merged = logstats.combine_moments([m1, m2])
    whole = cells.logstats.moments(by="condition", columns="gfp")
    pd.testing.assert_frame_equal(merged[whole.columns], whole, rtol=1e-12, check_dtype=False)


def test_no_runtime_warnings_on_zeros():
    df = pd.DataFrame({"g": [1, 1, 2], "x": [0.0, 1.0, 2.0]})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        df.logstats.summary(by="g", nonpositive="drop")
        df.logstats.gsd(by="g", nonpositive="nan")


@pytest.mark.parametrize("keys", [["b", "a", "b"], [2, 1, 2], [2.5, 1.5, 2.5]])
def test_group_index_matches_pandas_groupby_for_object_keys(keys):
    # pandas groupby infers the result index dtype of an object key column (str, int64, float64)
    df = pd.DataFrame({"g": pd.Series(keys, dtype=object), "x": [1.0, 2.0, 3.0]})
    ours = df.logstats.gmean(by="g")["x"]
    ref = df.groupby("g")["x"].agg(stats.gmean)  # scipy per group through pandas groupby
    pd.testing.assert_series_equal(ours, ref, check_names=False, rtol=1e-14)


def test_combine_series_and_dataset_moments():
    # Chan et al. (1979) merge against the one-pass moments of the whole (numpy reference via logstats)
    x = np.random.default_rng(6).lognormal(size=200)
    s = pd.Series(x, name="v")
    merged = logstats.combine_moments([s[:77].logstats.moments(), s[77:].logstats.moments()])
    whole = s.logstats.moments()
    assert merged["n"] == 200 and merged.name == "v"
    assert merged["m2_log"] == pytest.approx(whole["m2_log"], rel=1e-12)
    import xarray as xr

    da = xr.DataArray(x.reshape(100, 2), dims=("cell", "ch"))
    mds = logstats.combine_moments([da[:30].logstats.moments("cell"), da[30:].logstats.moments("cell")])
    xr.testing.assert_allclose(mds, da.logstats.moments("cell"), rtol=1e-12)


def test_missing_key_warning_once_with_linear_fields():
    # one warning per call: the keys are factorised once even when linear fields are added
    df = pd.DataFrame({"g": ["a", None, "a"], "x": [1.0, 2.0, 4.0]})
    with pytest.warns(LogstatsWarning) as record:
        out = df.logstats.summary(by="g", linear=True)
    assert len(record) == 1
    assert out.loc["a", "median"] == pytest.approx(2.5)  # pandas median of [1, 4]
