"""Array-level public functions (numpy or dask arrays, with ``axis=``) and ``combine_moments``.

These are the adapter for plain arrays: the same engine as the accessors, without labels.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import numpy as np

from logstats.accessors._engine import compute, is_dask
from logstats.core import moments as _core_moments
from logstats.core.moments import FIELDS, LogMoments, normalize_axes
from logstats.core.transform import exp_values, log_values
from logstats.methods import Policy

__all__ = ["combine_moments", "exceedance", "exp", "fit", "gcv", "gmean", "gsd", "lognormal_mean", "log",
           "moments", "quantile", "scale_check", "summary", "tolerance_limit"]


def _prepare(x: Any, axis: Any) -> tuple[Any, int]:
    """Move the reduced axes last (a view for numpy, lazy for dask); 0-d input becomes 1-d."""
    if not is_dask(x):
        x = np.asarray(x)
        _refuse_text(x)
    if x.ndim == 0:
        x = x.reshape(1)
    axes = tuple(range(x.ndim)) if axis is None else normalize_axes(axis, x.ndim)
    keep = [i for i in range(x.ndim) if i not in axes]
    return x.transpose(keep + list(axes)), len(axes)


def _refuse_text(x: np.ndarray) -> None:
    """Text is refused, never parsed (as for table columns): numbers written as strings are converted
    explicitly by the caller (``pd.to_numeric``, ``.astype(float)``)."""
    if x.dtype.kind in "US" or (x.dtype == object and any(isinstance(v, (str, bytes)) for v in x.flat)):
        raise TypeError("the input holds text; logstats needs positive real numbers. Convert it explicitly "
                        "(pd.to_numeric, or np.asarray(x, dtype=float)); entries such as '<0.5' are "
                        "non-detects for logstats.split_censored")


def _aligned(value: Any, x: Any, keyword: str) -> np.ndarray:
    """A per-value argument laid out like ``x`` (numpy broadcasting), or a ValueError naming it."""
    arr = np.asarray(value, dtype=np.float64)
    try:
        return np.broadcast_to(arr, np.shape(x))
    except ValueError:
        raise ValueError(f"{keyword}= has shape {arr.shape}, which does not broadcast to the data's "
                         f"{np.shape(x)}; pass a number or an array of the data's shape") from None


def _run(name: str, x: Any, axis: Any, *, skipna: bool = True, nonpositive: str = "raise",
         detection_limit: Any = None, **params: Any) -> dict[str, Any]:
    data, nred = _prepare(x, axis)
    limit = detection_limit
    if limit is not None and np.ndim(limit) > 0:
        limit, _ = _prepare(_aligned(limit, x, "detection_limit"), axis)
    for key in ("limit",):  # per-value keywords of a method (exceedance): checked the same way
        if params.get(key) is not None and np.ndim(params[key]) > 0:
            params[key], _ = _prepare(_aligned(params[key], x, key), axis)
    policy = Policy(skipna=skipna, nonpositive=nonpositive, detection_limit=limit)
    return compute(name, data, nred=nred, policy=policy, params=params, where="the input")


def _scalar(a: Any) -> Any:
    if is_dask(a):
        return a
    if np.ndim(a) == 0:
        v = np.asarray(a).item()
        return v
    return a


def _fields(out: dict[str, Any]) -> dict[str, Any]:
    return {k: _scalar(v) for k, v in out.items()}


def gmean(x: Any, *, axis: Any = None, skipna: bool = True, nonpositive: str = "raise") -> Any:
    """Geometric mean ``exp(mean(ln x))`` over ``axis`` (None = all). Same as ``scipy.stats.gmean``
    for positive data, without overflow for values near 1e±300.

    Examples
    --------
    >>> import logstats
    >>> round(logstats.gmean([1e300, 1e-300, 1.0]), 12)
    1.0
    """
    return _scalar(_run("gmean", x, axis, skipna=skipna, nonpositive=nonpositive)["gmean"])


def gsd(x: Any, *, axis: Any = None, ddof: float = 1, skipna: bool = True, nonpositive: str = "raise") -> Any:
    """Geometric standard deviation ``exp(sd(ln x))`` with ``ddof=1`` (``scipy.stats.gstd``'s default)."""
    return _scalar(_run("gsd", x, axis, skipna=skipna, nonpositive=nonpositive, ddof=ddof)["gsd"])


def gcv(x: Any, *, axis: Any = None, ddof: float = 1, skipna: bool = True, nonpositive: str = "raise") -> Any:
    """Geometric coefficient of variation ``sqrt(exp(s²) − 1)``, s with ``ddof=1``."""
    return _scalar(_run("gcv", x, axis, skipna=skipna, nonpositive=nonpositive, ddof=ddof)["gcv"])


def moments(x: Any, *, axis: Any = None) -> LogMoments:
    """The :class:`LogMoments` of ``x`` over ``axis`` (dask input: fields are lazy dask arrays)."""
    out = _run("moments", x, axis, nonpositive="drop")
    return LogMoments(**{k: out[k] for k in FIELDS})


def summary(x: Any, *, axis: Any = None, confidence_level: float = 0.95, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", detection_limit: Any = None, censored_method: str = "mle",
            linear: bool = False) -> dict[str, Any]:
    """The ``summary()`` fields over ``axis`` as a dict of arrays (or numbers)."""
    return _fields(_run("summary", x, axis, skipna=skipna, nonpositive=nonpositive, ddof=ddof,
                        confidence_level=confidence_level, detection_limit=detection_limit,
                        censored_method=censored_method, linear=linear))


def fit(x: Any, *, axis: Any = None, detection_limit: Any = None, skipna: bool = True,
        nonpositive: str = "raise", max_iter: int = 100, tol: float = 1e-10) -> dict[str, Any]:
    """Log-normal MLE over ``axis`` (``mu``, ``sigma`` with ddof=0, ``n``, ``n_censored``, ``loglik``,
    ``converged``, ...), left-censored at ``detection_limit`` (a number or an array of ``x``'s shape).

    Examples
    --------
    >>> import numpy as np, logstats
    >>> res = logstats.fit(np.array([0.0, 1.0, 2.0, 4.0, 8.0]), detection_limit=0.5)
    >>> res["n_censored"], res["converged"]
    (1, True)
    """
    return _fields(_run("fit", x, axis, detection_limit=detection_limit, skipna=skipna,
                        nonpositive=nonpositive, max_iter=max_iter, tol=tol))


def scale_check(x: Any, *, axis: Any = None, skipna: bool = True,
                nonpositive: str = "raise", **params: Any) -> dict[str, Any]:
    """Normal versus log-normal over ``axis`` on the original scale (AIC, normality p-values, ratios)."""
    return _fields(_run("scale_check", _loaded(x), axis, skipna=skipna, nonpositive=nonpositive, **params))


def lognormal_mean(x: Any, *, axis: Any = None, method: str = "cox", confidence_level: float = 0.95,
                   random_state: Any = None, n_draws: int = 10000, skipna: bool = True,
                   nonpositive: str = "raise", detection_limit: Any = None) -> dict[str, Any]:
    """Arithmetic mean implied by a log-normal, ``exp(ȳ + s²/2)``, with a CI over ``axis``."""
    return _fields(_run("lognormal_mean", x, axis, method=method, confidence_level=confidence_level,
                        random_state=random_state, n_draws=n_draws, skipna=skipna, nonpositive=nonpositive,
                        detection_limit=detection_limit))


def quantile(x: Any, *, axis: Any = None, q: float = 0.95, confidence_level: float = 0.95,
             skipna: bool = True, nonpositive: str = "raise", detection_limit: Any = None) -> dict[str, Any]:
    """Log-normal percentile ``exp(ȳ + z_q·s)`` over ``axis`` with its exact (non-central t) interval.

    Examples
    --------
    >>> import numpy as np, logstats
    >>> res = logstats.quantile(np.exp([0.0, 0.5, 1.0, 1.5, 2.0]), q=0.5)
    >>> round(res["estimate"], 6)
    2.718282
    """
    return _fields(_run("quantile", x, axis, q=q, confidence_level=confidence_level, skipna=skipna,
                        nonpositive=nonpositive, detection_limit=detection_limit))


def tolerance_limit(x: Any, *, axis: Any = None, coverage: float = 0.95, side: str = "upper",
                    confidence_level: float = 0.95, skipna: bool = True, nonpositive: str = "raise",
                    detection_limit: Any = None) -> dict[str, Any]:
    """Log-normal tolerance limits over ``axis`` (exact one-sided factors; two-sided Odeh-Owen)."""
    return _fields(_run("tolerance_limit", x, axis, coverage=coverage, side=side,
                        confidence_level=confidence_level, skipna=skipna, nonpositive=nonpositive,
                        detection_limit=detection_limit))


def exceedance(x: Any, *, limit: Any, axis: Any = None, confidence_level: float = 0.95, skipna: bool = True,
               nonpositive: str = "raise", detection_limit: Any = None) -> dict[str, Any]:
    """Estimated share above ``limit`` over ``axis`` with its exact interval, and the observed count."""
    return _fields(_run("exceedance", _loaded(x), axis, limit=limit, confidence_level=confidence_level,
                        skipna=skipna, nonpositive=nonpositive, detection_limit=detection_limit))


def _loaded(x: Any) -> Any:
    return np.asarray(x) if is_dask(x) else x


def log(x: Any, *, base: Any = "e", nonpositive: str = "raise") -> np.ndarray:
    """Same-shape log transform with the bad-value policy (``"drop"``/``"nan"`` put NaN in place)."""
    return log_values(x, base=base, nonpositive=nonpositive)


def exp(x: Any, *, base: Any = "e") -> np.ndarray:
    """Exact inverse of :func:`log`."""
    return exp_values(x, base=base)


def combine_moments(parts: Iterable[Any]) -> Any:
    """Merge moment sets exactly (Chan et al. 1979): ``LogMoments``, ``moments()`` DataFrames or Datasets.

    DataFrames are aligned on their index (groups missing from a part count as empty), Datasets on
    their coords, so summaries of separate files or plates can be merged afterwards.
    """
    items = list(parts)
    if not items:
        raise ValueError("combine_moments needs at least one set of moments")
    first = items[0]
    if isinstance(first, LogMoments):
        return _core_moments.combine_moments(items)
    mod = type(first).__module__
    if mod.startswith("pandas"):
        import pandas as pd

        if isinstance(first, pd.Series):  # a Series accessor's moments(): one set of fields
            merged = combine_moments([p.to_frame().T for p in items])
            out = merged.iloc[0]
            out.name = first.name
            return out

        index = items[0].index
        for p in items[1:]:
            index = index.union(p.index, sort=False)
        sets = []
        for p in items:
            missing = [f for f in FIELDS if f not in p.columns and f != "n_censored"]
            if missing:
                raise ValueError(f"combine_moments needs moments() results; columns {missing} are missing")
            q = p.reindex(index)
            sets.append(_moments_from_columns({f: q[f].to_numpy() if f in q else None for f in FIELDS}))
        merged = _core_moments.combine_moments(sets)
        return pd.DataFrame(merged.to_dict(), index=index)
    if mod.startswith("xarray"):
        import xarray as xr

        aligned = xr.align(*items, join="outer")
        sets = [_moments_from_columns({f: ds[f].to_numpy() if f in ds else None for f in FIELDS})
                for ds in aligned]
        merged = _core_moments.combine_moments(sets)
        template = aligned[0]
        return xr.Dataset({k: (template["n"].dims, v) for k, v in merged.to_dict().items()},
                          coords=template.coords)
    raise TypeError(f"combine_moments takes LogMoments, DataFrames or Datasets, not {type(first).__name__}")


def _moments_from_columns(cols: dict[str, Any]) -> LogMoments:
    n = cols["n"]
    shape = np.shape(n)
    out = {}
    for f in FIELDS:
        v = cols.get(f)
        if v is None:
            v = np.zeros(shape)
        v = np.asarray(v, dtype=np.float64)
        if f in ("n", "n_missing", "n_nonpositive", "n_censored"):
            out[f] = np.nan_to_num(v, nan=0.0).astype(np.int64)
        else:
            out[f] = v
    return LogMoments(**out)
