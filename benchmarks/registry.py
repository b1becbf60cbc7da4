"""One table pairing each benchmarked public statistic with the implementations it is timed against.

Every :class:`Pairing` names a public method, the call that runs it (``ours``) and its references:
scipy applied per group through pandas ``groupby``, and the hand-written numpy/pandas idiom a user
would otherwise type. Each reference returns the fields it computes under our field names, so the
runner (``benchmarks/run.py``) both times every pair and reports how far the numbers agree. The
correctness tests use the per-array counterpart of this table, ``tests/references.py``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

import logstats  # noqa: F401  (registers the accessors)


@dataclass(frozen=True)
class Reference:
    """An implementation to time ours against, and where it comes from."""

    label: str
    run: Callable[..., Any]
    fields: tuple[str, ...]  # result fields it computes, compared with ours
    source: str


@dataclass(frozen=True)
class Pairing:
    """A public statistic, on one kind of container, with its references."""

    statistic: str
    container: str
    ours: Callable[..., Any]
    references: tuple[Reference, ...]
    #: ours' result under the field names (for the comparison only; not timed)
    as_fields: Callable[[Any, str], Any] = lambda result, column: result

    @property
    def key(self) -> str:
        return f"{self.container}.{self.statistic}"

    def reference(self, label: str) -> Reference:
        return next(r for r in self.references if r.label == label)


# --------------------------------------------------------------------------- pandas, grouped
# Signature: f(df, by, column) -> DataFrame indexed by group, columns named as our fields.

def _scipy_gmean_gsd(df: pd.DataFrame, by: str, column: str) -> pd.DataFrame:
    out = df.groupby(by)[column].agg([stats.gmean, stats.gstd])
    return out.rename(columns={"gmean": "gmean", "gstd": "gsd"})


def _scipy_gmean(df: pd.DataFrame, by: str, column: str) -> pd.DataFrame:
    return df.groupby(by)[column].agg(stats.gmean).to_frame("gmean")


def _scipy_gstd(df: pd.DataFrame, by: str, column: str) -> pd.DataFrame:
    return df.groupby(by)[column].agg(stats.gstd).to_frame("gsd")


def _idiom_gmean_gsd(df: pd.DataFrame, by: str, column: str) -> pd.DataFrame:
    logs = np.log(df[column])
    agg = logs.groupby(df[by]).agg(["mean", "std", "count"])
    return pd.DataFrame({"n": agg["count"], "gmean": np.exp(agg["mean"]), "gsd": np.exp(agg["std"])})


def _idiom_gmean(df: pd.DataFrame, by: str, column: str) -> pd.DataFrame:
    return np.exp(np.log(df[column]).groupby(df[by]).mean()).to_frame("gmean")


def _idiom_gsd(df: pd.DataFrame, by: str, column: str) -> pd.DataFrame:
    return np.exp(np.log(df[column]).groupby(df[by]).std()).to_frame("gsd")


def _scipy_censored_fit(df: pd.DataFrame, by: str, column: str, limit: str) -> pd.DataFrame:
    """scipy.stats.CensoredData + lognorm.fit(floc=0), one group at a time (mu = ln scale, sigma = s)."""
    rows = {}
    for key, sub in df.groupby(by):
        x = sub[column].to_numpy()
        dl = sub[limit].to_numpy()
        cens = x <= dl
        data = stats.CensoredData(uncensored=x[~cens], left=dl[cens])
        shape, _, scale = stats.lognorm.fit(data, floc=0)
        rows[key] = (np.log(scale), shape)
    out = pd.DataFrame.from_dict(rows, orient="index", columns=["mu", "sigma"])
    out.index.name = by
    return out


GROUPED = {
    p.statistic: p
    for p in (
        Pairing(
            "summary", "pandas",
            ours=lambda df, by, column: df.logstats.summary(by=by, columns=column),
            references=(
                Reference("scipy per group", _scipy_gmean_gsd, ("gmean", "gsd"),
                          "df.groupby(by)[col].agg([scipy.stats.gmean, scipy.stats.gstd])"),
                Reference("idiom", _idiom_gmean_gsd, ("n", "gmean", "gsd"),
                          "np.log + groupby mean/std/count + np.exp (gmean and gsd only)"),
            ),
        ),
        Pairing(
            "gmean", "pandas",
            ours=lambda df, by, column: df.logstats.gmean(by=by, columns=column),
            as_fields=lambda result, column: result.rename(columns={column: "gmean"}),
            references=(
                Reference("scipy per group", _scipy_gmean, ("gmean",),
                          "df.groupby(by)[col].agg(scipy.stats.gmean)"),
                Reference("idiom", _idiom_gmean, ("gmean",), "np.exp(np.log(x).groupby(g).mean())"),
            ),
        ),
        Pairing(
            "gsd", "pandas",
            ours=lambda df, by, column: df.logstats.gsd(by=by, columns=column),
            as_fields=lambda result, column: result.rename(columns={column: "gsd"}),
            references=(
                Reference("scipy per group", _scipy_gstd, ("gsd",),
                          "df.groupby(by)[col].agg(scipy.stats.gstd)  (ddof=1)"),
                Reference("idiom", _idiom_gsd, ("gsd",), "np.exp(np.log(x).groupby(g).std())  (ddof=1)"),
            ),
        ),
        Pairing(
            "fit", "pandas",
            ours=lambda df, by, column, limit: df.logstats.fit(by=by, columns=column, detection_limit=limit),
            references=(
                Reference("scipy per group", _scipy_censored_fit, ("mu", "sigma"),
                          "scipy.stats.CensoredData + scipy.stats.lognorm.fit(data, floc=0) per group"),
            ),
        ),
    )
}


# --------------------------------------------------------------------------- xarray, along a dim
# Signature: f(da, dim) -> Dataset with our field names (lazy for dask input; the runner computes).

def _idiom_xr_gmean(da: Any, dim: str) -> Any:
    return np.exp(np.log(da).mean(dim)).to_dataset(name="gmean")


def _idiom_xr_summary(da: Any, dim: str) -> Any:
    logs = np.log(da)
    return logs.count(dim).to_dataset(name="n").assign(
        gmean=np.exp(logs.mean(dim)), gsd=np.exp(logs.std(dim, ddof=1)))


ALONG = {
    p.statistic: p
    for p in (
        Pairing(
            "gmean", "xarray",
            ours=lambda da, dim: da.logstats.gmean(dim).to_dataset(name="gmean"),
            references=(
                Reference("idiom", _idiom_xr_gmean, ("gmean",), 'np.exp(np.log(da).mean("cell"))'),
            ),
        ),
        Pairing(
            "summary", "xarray",
            ours=lambda da, dim: da.logstats.summary(dim),
            references=(
                Reference("idiom", _idiom_xr_gmean, ("gmean",), 'np.exp(np.log(da).mean("cell"))'),
                Reference("idiom n+gmean+gsd", _idiom_xr_summary, ("n", "gmean", "gsd"),
                          'np.log, then .count/.mean/.std(ddof=1) along "cell", then np.exp'),
            ),
        ),
    )
}

REGISTRY: dict[str, Pairing] = {p.key: p for p in (*GROUPED.values(), *ALONG.values())}
