"""Non-detects through the accessors: every statistic with detection_limit=, on every container.

References: a direct maximisation of the left-censored normal likelihood of the logs with
scipy.optimize (Nelder-Mead, tight tolerances; REFERENCES.md, "Left-censored log-normal") for each
replicate's location, then scipy.stats.ttest_ind (Welch) on those locations — the replicate as the
unit (Lord et al. 2020); with nothing censored every result must equal the uncensored one (DESIGN.md).
The data are invented.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.optimize as so
import xarray as xr
from scipy import stats

import logstats  # noqa: F401


def _wells(seed: int = 3) -> pd.DataFrame:
    """Invented: an assay in two arms of 6 wells x 40 values, detection limit 1.5 (about 10-20 % below)."""
    rng = np.random.default_rng(seed)
    rows = []
    for arm, eff in (("ctl", 0.0), ("trt", 0.5)):
        for w in range(6):
            mu = 1 + eff + rng.normal(0, 0.2)
            x = np.exp(mu + rng.normal(0, 0.6, 40))
            rows.append(pd.DataFrame({"arm": arm, "well": f"{arm}{w}", "x": x}))
    return pd.concat(rows, ignore_index=True).assign(dl=1.5)


def _censored_mu(x: np.ndarray, dl: float) -> float:
    c = x <= dl

    def nll(p):
        m, log_s = p
        s = np.exp(log_s)
        detected = stats.norm.logpdf(np.log(x[~c]), m, s).sum()
        return -(detected + c.sum() * stats.norm.logcdf((np.log(dl) - m) / s))

    start = [np.log(x).mean(), np.log(np.log(x).std())]
    return so.minimize(nll, start, method="Nelder-Mead",
                       options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 5000}).x[0]


def test_fold_change_with_replicates_and_non_detects_equals_welch_on_censored_replicate_locations():
    df = _wells()
    fc = df.logstats.fold_change(by="arm", reference="ctl", replicate="well", detection_limit="dl")
    mus = df.groupby("well")["x"].apply(lambda s: _censored_mu(s.to_numpy(), 1.5))
    trt = mus[[w.startswith("trt") for w in mus.index]].to_numpy()
    ctl = mus[[w.startswith("ctl") for w in mus.index]].to_numpy()
    ref = stats.ttest_ind(trt, ctl, equal_var=False)
    row = fc.loc["trt"]
    np.testing.assert_allclose(row["ratio"], np.exp(trt.mean() - ctl.mean()), rtol=1e-7)
    np.testing.assert_allclose(row["p_value"], ref.pvalue, rtol=1e-5)
    assert (row["n"], row["n_reference"]) == (6, 6)
    assert row["n_censored"] + row["n_censored_reference"] == int((df["x"] <= 1.5).sum())
    assert row["n_cells"] == 240 and row["unit"] == "replicate"


def test_nothing_censored_gives_the_uncensored_answer_on_every_container():
    df = _wells().assign(dl=1e-9)  # a limit below every value: nothing is censored
    plain = df.logstats.summary(by="arm", columns="x")
    cens = df.logstats.summary(by="arm", columns="x", detection_limit="dl")
    for k in ("gmean", "gsd", "ci_low", "ci_high"):
        np.testing.assert_allclose(cens[k].to_numpy(), plain[k].to_numpy(), rtol=1e-10)
    assert (cens["n_censored"] == 0).all()
    fc0 = df.logstats.fold_change(by="arm", reference="ctl", replicate="well", columns="x")
    fc1 = df.logstats.fold_change(by="arm", reference="ctl", replicate="well", columns="x",
                                  detection_limit="dl")
    np.testing.assert_allclose(fc1["ratio"].to_numpy(), fc0["ratio"].to_numpy(), rtol=1e-10)
    np.testing.assert_allclose(fc1["p_value"].to_numpy(), fc0["p_value"].to_numpy(), rtol=1e-8)
    da = xr.DataArray(df["x"].to_numpy(), dims="cell", coords={"arm": ("cell", df["arm"].to_numpy())})
    for method, kw in (("summary", {}), ("quantile", {"q": 0.9}), ("tolerance_limit", {}),
                       ("lognormal_mean", {}), ("fit", {})):
        a = getattr(da.logstats, method)("cell", by="arm", detection_limit=1e-9, **kw)
        b = getattr(df.logstats, method)(by="arm", columns="x", **kw)
        field = {"summary": "gmean", "quantile": "estimate", "tolerance_limit": "tolerance_high",
                 "lognormal_mean": "estimate", "fit": "mu"}[method]
        np.testing.assert_allclose(a[field].to_numpy(), b[field].to_numpy(), rtol=1e-9, err_msg=method)


def test_split_censored_feeds_every_statistic():
    raw = pd.Series(["2.1", "<0.5", "3.3", "ND", "1.7", "< 0.5", "4.0", "0.9"], name="conc")
    parts = logstats.split_censored(raw, nd_limit=0.5)
    assert parts.attrs["n_censored"] == 3 and list(parts.columns) == ["value", "detection_limit"]
    out = parts.logstats.summary(columns="value", detection_limit="detection_limit")
    assert out.loc["value", "n_censored"] == 3 and out.loc["value", "n"] == 8
    with pytest.raises(ValueError, match="nd_limit"):
        logstats.split_censored(raw)
