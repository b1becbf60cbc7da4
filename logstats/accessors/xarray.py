"""The ``.logstats`` accessor on ``xarray.DataArray`` and ``xarray.Dataset``.

One implementation: a DataArray goes through the same per-variable path as each data variable of a
Dataset. Reduced dims are moved last, the data (numpy or dask) go to the shared engine, and results
are rewrapped with the remaining coords. Dask-backed variables stay lazy.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Hashable, Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from logstats.accessors._engine import (
    CLOSED_FIT_STATUS,
    INT_FIELDS,
    finalize,
    is_dask,
    raw_reduce,
    stacked_moments,
)
from logstats.accessors._engine import (
    fold_change as engine_fold_change,
)
from logstats.accessors._face import FigureMethods
from logstats.core.transform import check_nonpositive, describe_where, exp_values, log_values

__all__ = ["LogstatsArrayAccessor", "LogstatsDatasetAccessor"]

#: Result fields that carry the data's units (the others are counts or dimensionless).
UNIT_FIELDS = frozenset({"gmean", "ci_low", "ci_high", "median", "mean", "sd", "estimate"})
_LOG_UNITS = re.compile(r"^log(?:_(?P<b>e|2|10))?\((?P<u>.*)\)$")


def _where(name: Hashable) -> str:
    return describe_where(column=str(name)).replace("column", "variable")


def _is_value(da: xr.DataArray) -> bool:
    return da.dtype.kind in "fiu"


def _check_value(da: xr.DataArray, name: Hashable) -> None:
    if not _is_value(da):
        raise TypeError(
            f"variable {name!r} has dtype {da.dtype}, which is not numeric; logstats needs positive numbers"
        )


class Plan:
    """Which dims are reduced and, with ``by``, the group codes along the one reduced dim."""

    def __init__(self, da: xr.DataArray, dim: Any, by: Hashable | None) -> None:
        if by is not None:
            if by not in da.coords:
                raise KeyError(f"by={by!r} is not a coordinate; there are {list(da.coords)!r}")
            coord = da.coords[by]
            if coord.ndim != 1:
                raise ValueError(f"by={by!r} must be a 1-D coordinate along one dim; it has {coord.dims}")
            cdim = coord.dims[0]
            if dim is None:
                dim = cdim
            dims = [dim] if isinstance(dim, str) else list(dim)
            if dims != [cdim]:
                raise ValueError(f"by={by!r} lies along {cdim!r}; pass dim={cdim!r} (got dim={dim!r})")
            # group labels must be known to lay out the result: a dask-backed coordinate is loaded here
            # (it is one label per position, small next to the data, which stay lazy)
            codes, uniques = pd.factorize(coord.to_numpy(), sort=True, use_na_sentinel=True)
            self.codes: np.ndarray | None = np.asarray(codes, dtype=np.intp)
            self.labels: list[Any] | None = list(uniques)
            self.group_index: pd.Index | None = pd.Index(uniques, name=by)
            self.n_unkeyed = int((codes < 0).sum())
        else:
            if dim is None:
                dims = list(da.dims)
            else:
                dims = [dim] if isinstance(dim, str) else list(dim)
            missing = [d for d in dims if d not in da.dims]
            if missing:
                raise ValueError(f"dim {missing!r} not found; the data has dims {list(da.dims)!r}")
            self.codes = None
            self.labels = None
            self.group_index = None
            self.n_unkeyed = 0
        self.by = by
        self.reduced = dims
        self.kept = [d for d in da.dims if d not in dims]

    def out_dims(self) -> list[Hashable]:
        return self.kept + ([self.by] if self.by is not None else [])

    def coords(self, da: xr.DataArray) -> dict[Hashable, Any]:
        out: dict[Hashable, Any] = {}
        for name, c in da.coords.items():
            if all(d in self.kept for d in c.dims) and name != self.by:
                out[name] = c
        if self.by is not None:
            out[self.by] = self.group_index
        return out


def _reduce_array(da: xr.DataArray, name: Hashable, kind: str, dim: Any, by: Hashable | None, *,
                  skipna: bool, nonpositive: str, keep_attrs: bool, params: dict[str, Any] | None
                  ) -> xr.Dataset:
    """One variable through the engine: a Dataset with one variable per result field."""
    _check_value(da, name)
    check_nonpositive(nonpositive)
    plan = Plan(da, dim, by)
    data = da.transpose(*plan.kept, *plan.reduced).data
    st = stacked_moments(data, nred=len(plan.reduced), codes=plan.codes,
                         ngroups=len(plan.labels) if plan.labels is not None else None, where=_where(name))
    arr, names = finalize(st, kind=kind, skipna=skipna, nonpositive=nonpositive, where=_where(name),
                          labels=plan.labels, params=params)
    return _wrap(arr, names, plan, da, keep_attrs)


def _wrap(arr: Any, names: Sequence[str], plan: Plan, da: xr.DataArray, keep_attrs: bool) -> xr.Dataset:
    coords = plan.coords(da)
    dims = plan.out_dims()
    out = {}
    for i, k in enumerate(names):
        v = arr[..., i]
        if k in INT_FIELDS:
            v = v.astype(np.int64)
        attrs: dict[Any, Any] = {}
        if keep_attrs and k in UNIT_FIELDS:
            attrs = dict(da.attrs)
        out[k] = xr.DataArray(v, dims=dims, coords=coords, attrs=attrs)
    if "converged" in out:
        out["converged"] = out["converged"].astype(bool)
    if "status" in out:
        out["status"] = xr.apply_ufunc(_status_names, out["status"], dask="parallelized",
                                       output_dtypes=[object])
    return xr.Dataset(out)


def _status_names(codes: np.ndarray) -> np.ndarray:
    return np.asarray(CLOSED_FIT_STATUS, dtype=object)[np.asarray(codes).astype(np.intp)]


def _raw_array(kind: str, da: xr.DataArray, name: Hashable, dim: Any, by: Hashable | None, *,
               skipna: bool, nonpositive: str, **kw: Any) -> xr.Dataset:
    """Raw-value methods along ``dim`` (the data are loaded): the engine's one flat pass, rewrapped."""
    _check_value(da, name)
    plan = Plan(da, dim, by)
    data = np.asarray(da.transpose(*plan.kept, *plan.reduced).to_numpy(), dtype=np.float64)
    data = data.reshape(data.shape[: len(plan.kept)] + (-1,))
    limit = kw.pop("detection_limit", None)
    if isinstance(limit, xr.DataArray):
        limit = np.asarray(limit.transpose(*plan.kept, *plan.reduced).to_numpy(), dtype=np.float64)
        limit = limit.reshape(data.shape)
    ngroups = len(plan.labels) if plan.labels is not None else None
    res = raw_reduce(kind, data, codes=plan.codes, ngroups=ngroups,
                     where=_where(name), labels=plan.labels, nonpositive=nonpositive, skipna=skipna,
                     detection_limit=limit, **kw)
    coords = plan.coords(da)
    out = {}
    for k, arr in res.items():
        attrs = dict(da.attrs) if k in UNIT_FIELDS else {}
        out[k] = xr.DataArray(arr, dims=plan.out_dims(), coords=coords, attrs=attrs)
    return xr.Dataset(out)


class _XarrayBase(FigureMethods):
    _obj: Any

    def _variables(self) -> list[tuple[Hashable, xr.DataArray]]:
        raise NotImplementedError

    def _is_array(self) -> bool:
        return isinstance(self._obj, xr.DataArray)

    def _each(self, fn: Callable[[xr.DataArray, Hashable], xr.Dataset]) -> list[tuple[Hashable, xr.Dataset]]:
        return [(name, fn(da, name)) for name, da in self._variables()]

    def _tidy(self, parts: list[tuple[Hashable, xr.Dataset]]) -> xr.Dataset:
        if len(parts) == 1:
            return parts[0][1]
        variable = pd.Index([n for n, _ in parts], name="variable", dtype=object)
        return xr.concat([p for _, p in parts], dim=variable,
                         coords="minimal", compat="override", join="outer")

    def _single(self, kind: str, dim: Any, by: Any, keep_attrs: bool, **kw: Any) -> Any:
        parts = self._each(lambda da, name: _reduce_array(da, name, kind, dim, by, keep_attrs=keep_attrs,
                                                          **kw))
        if self._is_array():
            out = parts[0][1][kind]
            out.name = self._obj.name
            return out
        return xr.Dataset({name: ds[kind] for name, ds in parts})

    def _fields(self, kind: str, dim: Any, by: Any, keep_attrs: bool, **kw: Any) -> xr.Dataset:
        return self._tidy(self._each(
            lambda da, name: _reduce_array(da, name, kind, dim, by, keep_attrs=keep_attrs, **kw)))

    # ------------------------------------------------------------------ public methods
    def gmean(self, dim: Any = None, *, by: Hashable | None = None, skipna: bool = True,
              nonpositive: str = "raise", keep_attrs: bool = True) -> Any:
        """Geometric mean along ``dim`` (name, list, or None for all), per group of coordinate ``by``.

        Keeps ``attrs`` (units) with ``keep_attrs=True``. Lazy for dask-backed data.

        Examples
        --------
        >>> import xarray as xr, logstats
        >>> xr.DataArray([1.0, 10.0, 100.0], dims="cell").logstats.gmean("cell").item()
        10.000000000000002
        """
        return self._single("gmean", dim, by, keep_attrs, skipna=skipna, nonpositive=nonpositive,
                            params=None)

    def gsd(self, dim: Any = None, *, by: Hashable | None = None, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", keep_attrs: bool = True) -> Any:
        """Geometric standard deviation ``exp(sd(ln x))`` along ``dim``, ``ddof=1``; dimensionless."""
        return self._single("gsd", dim, by, keep_attrs, skipna=skipna, nonpositive=nonpositive,
                            params={"ddof": ddof})

    def gcv(self, dim: Any = None, *, by: Hashable | None = None, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", keep_attrs: bool = True) -> Any:
        """Geometric coefficient of variation ``sqrt(exp(s²) − 1)`` along ``dim``, ``ddof=1``."""
        return self._single("gcv", dim, by, keep_attrs, skipna=skipna, nonpositive=nonpositive,
                            params={"ddof": ddof})

    def moments(self, dim: Any = None, *, by: Hashable | None = None, skipna: bool = True,
                nonpositive: str = "raise") -> xr.Dataset:
        """Sufficient statistics of the logs along ``dim`` (``n, mean_log, m2_log`` and the counts)."""
        return self._fields("moments", dim, by, False, skipna=skipna, nonpositive=nonpositive, params=None)

    def summary(self, dim: Any = None, *, by: Hashable | None = None, confidence_level: float = 0.95,
                ddof: float = 1, skipna: bool = True, nonpositive: str = "raise",
                keep_attrs: bool = True) -> xr.Dataset:
        """Log-scale summary along ``dim``: ``n, n_missing, n_nonpositive, gmean, gsd, gcv, ci_low,
        ci_high, ci_factor`` (t interval of the geometric mean; ``ddof=1`` for the spreads).

        A Dataset with several numeric variables gains a ``variable`` dim. Lazy for dask-backed data;
        chunks along ``dim`` are reduced separately and merged, never rechunked.
        """
        return self._fields("summary", dim, by, keep_attrs, skipna=skipna, nonpositive=nonpositive,
                            params={"confidence_level": confidence_level, "ddof": ddof})

    def fit(self, dim: Any = None, *, by: Hashable | None = None, detection_limit: Any = None,
            skipna: bool = True, nonpositive: str = "raise", max_iter: int = 100,
            tol: float = 1e-10) -> xr.Dataset:
        """Log-normal MLE (``mu``, ``sigma`` with ddof=0, ``n``, ``n_censored``, ``loglik``,
        ``converged``, ...) along ``dim``, per group of coordinate ``by``, as the pandas ``fit``.

        ``detection_limit`` is a number or the name of a coordinate (DataArray) or variable (Dataset)
        broadcastable against the data. Every position of the other dims is fitted in the same
        vectorised pass. Without a detection limit the fit is the closed form from the log-moments,
        so dask-backed data stay lazy; with one, dask-backed data are loaded (the censored likelihood
        needs every value).
        """
        if detection_limit is None:
            return self._fields("fit", dim, by, False, skipna=skipna, nonpositive=nonpositive,
                                params={"skipna": skipna, "nonpositive": nonpositive})

        def one(da: xr.DataArray, name: Hashable) -> xr.Dataset:
            limit: Any = detection_limit
            if isinstance(detection_limit, str):
                source = self._obj
                if detection_limit not in source.coords and not (
                        isinstance(source, xr.Dataset) and detection_limit in source.data_vars):
                    raise KeyError(f"detection_limit={detection_limit!r} is not a coordinate or variable")
                limit = xr.broadcast(source[detection_limit], da)[0]
            return _raw_array("fit", da, name, dim, by, skipna=skipna, nonpositive=nonpositive,
                              detection_limit=limit, max_iter=max_iter, tol=tol)

        return self._tidy(self._each(one))

    def scale_check(self, dim: Any = None, *, by: Hashable | None = None, skipna: bool = True,
                    nonpositive: str = "raise") -> xr.Dataset:
        """Normal versus log-normal on the original scale along ``dim`` (columns as the pandas
        ``scale_check``). Dask-backed data are loaded (Shapiro–Wilk needs sorted groups)."""
        return self._tidy(self._each(lambda da, name: _raw_array(
            "scale_check", da, name, dim, by, skipna=skipna, nonpositive=nonpositive)))

    def lognormal_mean(self, dim: Any = None, *, by: Hashable | None = None, method: str = "cox",
                       confidence_level: float = 0.95, random_state: Any = None, n_draws: int = 10000,
                       skipna: bool = True, nonpositive: str = "raise") -> xr.Dataset:
        """Arithmetic mean implied by a log-normal along ``dim`` with a CI (``"cox"``,
        ``"modified_cox"``, ``"gci"``, ``"bootstrap"``; see the pandas ``lognormal_mean``).

        All but ``"bootstrap"`` need only the log-moments, so dask-backed data stay lazy (the GCI
        draws are made for all groups at once, from the merged moments, so a dask result equals the
        in-memory one for the same ``random_state``); the bootstrap loads the data.
        """
        if method != "bootstrap":
            out = self._fields("lognormal_mean", dim, by, True, skipna=skipna, nonpositive=nonpositive,
                               params={"method": method, "confidence_level": confidence_level,
                                       "random_state": random_state, "n_draws": n_draws})
            return out.assign(method=method)
        return self._tidy(self._each(lambda da, name: _raw_array(
            "lognormal_mean", da, name, dim, by, skipna=skipna, nonpositive=nonpositive, method=method,
            confidence_level=confidence_level, random_state=random_state, n_draws=n_draws)))

    def fold_change(self, dim: Any = None, *, by: Hashable, reference: Any, replicate: Hashable | None = None,
                    paired: bool = False, equal_var: bool = False, confidence_level: float = 0.95,
                    adjust: str | None = "holm", equivalence: tuple[float, float] | None = None,
                    equivalence_alpha: float = 0.05, skipna: bool = True,
                    nonpositive: str = "raise") -> xr.Dataset:
        """Ratio of geometric means of each level of coordinate ``by`` against ``reference`` along ``dim``.

        The same statistics and columns as the pandas ``fold_change`` (Welch's t on the logs,
        replicate means with ``replicate=`` a coordinate along ``dim``, paired replicates, Holm/BH,
        two one-sided tests), computed separately at every position of the other dims, which are
        kept; the result has a dim named ``by`` holding the non-reference levels. Dask-backed data
        are loaded one variable at a time (the test needs every value of a group together).
        """
        check_nonpositive(nonpositive)

        def one(da: xr.DataArray, name: Hashable) -> xr.Dataset:
            _check_value(da, name)
            plan = Plan(da, dim, by)
            assert plan.labels is not None and plan.codes is not None and plan.group_index is not None
            if reference not in plan.labels:
                raise ValueError(f"reference={reference!r} is not a level of {by!r}; "
                                 f"the levels are {plan.labels!r}")
            ref = plan.labels.index(reference)
            rep_codes = n_rep = None
            if replicate is not None:
                if replicate not in da.coords or da.coords[replicate].dims != (plan.reduced[0],):
                    along = plan.reduced[0]
                    raise ValueError(f"replicate={replicate!r} must be a coordinate along {along!r}")
                rc, ru = pd.factorize(da.coords[replicate].to_numpy(), sort=True)
                rep_codes, n_rep = np.asarray(rc, dtype=np.intp), len(ru)
            elif paired:
                raise ValueError("paired=True needs replicate= (the coordinate shared by paired replicates)")
            data = np.asarray(da.transpose(*plan.kept, *plan.reduced).to_numpy())
            rows, width = int(np.prod(data.shape[:-1])), data.shape[-1]
            keep = [i for i in range(len(plan.labels)) if i != ref]
            # every position of the kept dims is a stratum of its own: one vectorised call for all
            rep_tiled = None if rep_codes is None else np.tile(rep_codes, rows)
            res = engine_fold_change(
                data.reshape(-1), np.tile(plan.codes, rows), len(plan.labels), ref, labels=plan.labels,
                where=_where(name), nonpositive=nonpositive, skipna=skipna,
                stratum_codes=np.repeat(np.arange(rows, dtype=np.intp), width), n_strata=rows,
                replicate_codes=rep_tiled, n_replicates=n_rep, paired=paired, equal_var=equal_var,
                confidence_level=confidence_level, adjust=adjust, equivalence=equivalence,
                equivalence_alpha=equivalence_alpha)
            shape = data.shape[:-1] + (len(keep),)
            coords = plan.coords(da)
            coords[by] = plan.group_index.take(keep)
            out = {}
            for k in res:
                if k == "log_ratio":
                    continue
                v = np.asarray(res[k])[:, keep].reshape(shape)
                out[k] = xr.DataArray(v, dims=plan.out_dims(), coords=coords)
            return xr.Dataset(out)

        return self._tidy(self._each(one))

    def log(self, *, base: Any = "e", nonpositive: str = "raise", keep_attrs: bool = True) -> Any:
        """Same-shape log transform (base ``"e"``, 2 or 10); ``units`` become ``log_<base>(units)``."""
        check_nonpositive(nonpositive)

        def one(da: xr.DataArray, name: Hashable) -> xr.DataArray:
            _check_value(da, name)
            out = xr.apply_ufunc(log_values, da, kwargs={"base": base, "nonpositive": nonpositive,
                                                         "where": _where(name)},
                                 dask="parallelized", output_dtypes=[np.float64], keep_attrs=keep_attrs)
            if keep_attrs and "units" in da.attrs:
                out.attrs["units"] = f"log_{base}({da.attrs['units']})"
            return out

        return self._map(one)

    def exp(self, *, base: Any = "e", keep_attrs: bool = True) -> Any:
        """Exact inverse of :meth:`log`; ``units`` of the form ``log_<base>(u)`` become ``u`` again."""

        def one(da: xr.DataArray, name: Hashable) -> xr.DataArray:
            _check_value(da, name)
            out = xr.apply_ufunc(exp_values, da, kwargs={"base": base, "where": _where(name)},
                                 dask="parallelized", output_dtypes=[np.float64], keep_attrs=keep_attrs)
            units = da.attrs.get("units")
            if keep_attrs and isinstance(units, str):
                m = _LOG_UNITS.match(units)
                if m and (m.group("b") or "e") == str(base):
                    out.attrs["units"] = m.group("u")
            return out

        return self._map(one)

    def _map(self, fn: Callable[[xr.DataArray, Hashable], xr.DataArray]) -> Any:
        if self._is_array():
            return fn(self._obj, self._obj.name if self._obj.name is not None else "value")
        ds = self._obj.copy()
        for name, da in self._variables():
            ds[name] = fn(da, name)
        return ds


@xr.register_dataarray_accessor("logstats")
class LogstatsArrayAccessor(_XarrayBase):
    """Log-scale statistics on a DataArray: ``da.logstats.summary(dim="cell")``."""

    def __init__(self, obj: xr.DataArray) -> None:
        self._obj = obj

    def _variables(self) -> list[tuple[Hashable, xr.DataArray]]:
        name = self._obj.name if self._obj.name is not None else "value"
        return [(name, self._obj)]


@xr.register_dataset_accessor("logstats")
class LogstatsDatasetAccessor(_XarrayBase):
    """Log-scale statistics on every numeric data variable of a Dataset."""

    def __init__(self, obj: xr.Dataset) -> None:
        self._obj = obj

    def _variables(self) -> list[tuple[Hashable, xr.DataArray]]:
        out = [(k, v) for k, v in self._obj.data_vars.items() if _is_value(v)]
        if not out:
            names = list(self._obj.data_vars)
            raise TypeError(f"the Dataset has no numeric data variables (it has {names!r})")
        return out


def is_lazy(obj: xr.Dataset | xr.DataArray) -> bool:
    """True when any variable is dask-backed (used by tests and the command line)."""
    if isinstance(obj, xr.DataArray):
        return is_dask(obj.data)
    return any(is_dask(v.data) for v in obj.data_vars.values())
