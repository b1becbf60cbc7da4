"""The ``.logstats`` accessor on ``xarray.DataArray`` and ``xarray.Dataset``.

One implementation: a DataArray goes through the same per-variable path as each data variable of a
Dataset. Reduced dims are moved last, the data (numpy or dask) go to the shared engine, and results
are rewrapped with the remaining coords. Dask-backed variables stay lazy.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Hashable
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from logstats.accessors._api import install
from logstats.accessors._engine import compare, compare_nested, compute, is_dask, warn_if_empty
from logstats.accessors._face import FigureMethods
from logstats.accessors._labels import nested_codes, nested_levels
from logstats.core.transform import check_nonpositive, describe_where, exp_values, log_values
from logstats.methods import METHODS, Method, Policy, resolve

__all__ = ["LogstatsArrayAccessor", "LogstatsDatasetAccessor"]

_LOG_UNITS = re.compile(r"^log(?:_(?P<b>e|2|10))?\((?P<u>.*)\)$")


def _where(name: Hashable) -> str:
    return describe_where(column=name).replace("column", "variable")


def _is_value(da: xr.DataArray) -> bool:
    return da.dtype.kind in "fiu"


def _check_value(da: xr.DataArray, name: Hashable) -> None:
    if not _is_value(da):
        raise TypeError(
            f"variable {name!r} has dtype {da.dtype}, which is not numeric; logstats needs positive numbers."
            f"{_dtype_hint(da.dtype, name)}"
        )


def _dtype_hint(dtype: np.dtype, name: Hashable) -> str:
    """What to do with a non-numeric variable (the same advice as for a pandas column)."""
    kind = dtype.kind
    if kind == "c":
        return f" {name!r} holds complex numbers: take .real or abs() explicitly if that is meant."
    if kind == "b":
        return f" {name!r} holds booleans: cast explicitly (.astype(float)) if they are numbers."
    if kind in "mM":
        return (f" {name!r} holds {dtype} values, which have no logarithm: convert them to a number of "
                "units first.")
    if kind in "OUS":
        return (f" {name!r} holds objects or text: convert it explicitly (pd.to_numeric, or .astype(float)); "
                "entries such as '<0.5' are non-detects for logstats.split_censored.")
    return ""


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
            dims = [dim] if _one_dim(dim, da) else list(dim)
            if dims != [cdim]:
                raise ValueError(f"by={by!r} lies along {cdim!r}; pass dim={cdim!r} (got dim={dim!r})")
            # group labels must be known to lay out the result: a dask-backed coordinate is loaded here
            # (it is one label per position, small next to the data, which stay lazy)
            codes, uniques = pd.factorize(coord.to_numpy(), sort=True, use_na_sentinel=True)
            self.codes: np.ndarray | None = np.asarray(codes, dtype=np.intp)
            self.labels: list[Any] | None = pd.Index(uniques).tolist()  # Python scalars, as pandas gives
            self.group_index: pd.Index | None = pd.Index(uniques, name=by)
            self.n_unkeyed = int((codes < 0).sum())
        else:
            if dim is None:
                dims = list(da.dims)
            else:
                dims = [dim] if _one_dim(dim, da) else list(dim)
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
        if isinstance(self.by, str):
            out[self.by] = self.group_index
        return out

    def label(self, ds: Any, index: pd.Index | None = None) -> Any:
        """Attach the group labels along the ``by`` dim. xarray cannot index a dim whose name is not a
        string (it reads a tuple as several dims, and fails on a number), so for such a name the labels
        are a coordinate without an index (selection by label then goes through ``.where``)."""
        if self.by is None or isinstance(self.by, str):
            return ds
        labels = self.group_index if index is None else index
        assert labels is not None
        var = xr.Variable((self.by,), np.asarray(labels.tolist() if labels.dtype == object else labels))
        return ds.assign_coords(xr.Coordinates({self.by: var}, indexes={}))


def _one_dim(dim: Any, da: xr.DataArray) -> bool:
    """``dim`` names one dimension (a string, or any hashable that is a dim: dims need not be strings)."""
    if isinstance(dim, str):
        return True
    try:
        return dim in da.dims or not isinstance(dim, (list, tuple, set))
    except TypeError:
        return False


def _limit_for(source: Any, da: xr.DataArray, detection_limit: Any, plan: Plan,
               keyword: str = "detection_limit") -> Any:
    """``detection_limit=`` laid out like the data the engine sees (kept dims, then reduced dims)."""
    if detection_limit is None:
        return None
    if isinstance(detection_limit, (int, float, np.integer, np.floating)) and not isinstance(
            detection_limit, (bool, np.bool_)) and (isinstance(detection_limit, (float, np.floating))
                                                    or not _names_variable(source, detection_limit)):
        return float(detection_limit)  # a float is always a number (never the variable named 1)
    if _names_variable(source, detection_limit):
        limit = source[detection_limit]
    elif isinstance(detection_limit, xr.DataArray):
        limit = detection_limit
    elif isinstance(detection_limit, (np.ndarray, list, tuple)):
        arr = np.asarray(detection_limit)
        if arr.shape != da.shape:
            raise ValueError(f"{keyword}= array has shape {arr.shape}; the data has "
                             f"{da.shape} (dims {da.dims}); pass a DataArray to broadcast by dim name")
        limit = xr.DataArray(arr, dims=da.dims)
    elif isinstance(detection_limit, Hashable) and not isinstance(detection_limit, pd.Series):
        raise KeyError(f"{keyword}={detection_limit!r} is not a coordinate or variable; there are "
                       f"{list(source.coords) + list(getattr(source, 'data_vars', []))!r}")
    else:
        raise TypeError(f"{keyword}= takes a number, a coordinate or variable name, a DataArray or an array "
                        f"of the data's shape, not {type(detection_limit).__name__}")
    return np.asarray(_aligned_like(limit, da, keyword).transpose(*plan.kept, *plan.reduced).to_numpy(),
                      dtype=np.float64)


def _aligned_like(limit: xr.DataArray, da: xr.DataArray, keyword: str) -> xr.DataArray:
    """An aligned argument (a DataArray) laid out like ``da``: aligned on the shared dims' labels as
    xarray would (another order, extra labels), broadcast over the dims it lacks. A dim the data lacks, a
    label of the data it lacks, or a conflicting length is a ValueError naming the keyword."""
    extra = [d for d in limit.dims if d not in da.dims]
    if extra:
        raise ValueError(f"{keyword}= has dim(s) {extra!r} that the data lacks (the data has dims "
                         f"{list(da.dims)!r})")
    for d in limit.dims:
        if d in limit.indexes and d in da.indexes:
            have, want = limit.indexes[d], da.indexes[d]
            if not have.equals(want):
                lacking = int((~want.isin(have)).sum())
                if lacking:
                    raise ValueError(f"{keyword}= is not aligned with the data along {d!r}: {lacking} of "
                                     f"{len(want)} label(s) of the data have no entry; pass one value per "
                                     f"position (or .reindex_like(data) it yourself to mean 'no value')")
                if not have.is_unique:
                    raise ValueError(f"{keyword}= has duplicated labels along {d!r}; it cannot be aligned")
                limit = limit.reindex({d: want})
        elif limit.sizes[d] != da.sizes[d]:
            raise ValueError(f"{keyword}= has {limit.sizes[d]} position(s) along {d!r}; the data has "
                             f"{da.sizes[d]}")
    return limit.drop_vars(list(limit.coords)).transpose(*[d for d in da.dims if d in limit.dims]) \
        .broadcast_like(da.drop_vars(list(da.coords)))


def _names_variable(source: Any, key: Any) -> bool:
    try:
        return key in source.coords or (isinstance(source, xr.Dataset) and key in source.data_vars)
    except TypeError:
        return False


def _wrap(out: dict[str, Any], method: Method, plan: Plan, da: xr.DataArray, keep_attrs: bool,
          pooled: bool = False) -> xr.Dataset:
    coords = plan.coords(da)
    dims = plan.out_dims()
    if pooled:  # one result for all groups of ``by`` together
        dims = list(plan.kept)
        coords = {k: v for k, v in coords.items() if k != plan.by}
    res = {}
    unit_fields = method.unit_fields
    for k, v in out.items():
        attrs = dict(da.attrs) if keep_attrs and k in unit_fields else {}
        res[k] = xr.DataArray(v, dims=dims, coords=coords, attrs=attrs)
    ds = xr.Dataset(res)
    return ds if pooled else plan.label(ds)


def _count_unkeyed(res: Any, plan: Plan | None) -> Any:
    """Positions left out for a missing ``by`` label (NaN, NaT, None in the coordinate), as pandas
    groupby's dropna leaves them out: counted in ``attrs["n_without_key"]`` of the result (no warning
    here: a coordinate with gaps is common in arrays, and the count travels with the result)."""
    if plan is None or plan.by is None:
        return res
    res.attrs["n_without_key"] = plan.n_unkeyed
    return res


class _XarrayBase(FigureMethods):
    _obj: Any

    def _variables(self) -> list[tuple[Hashable, xr.DataArray]]:
        raise NotImplementedError

    def _is_array(self) -> bool:
        return isinstance(self._obj, xr.DataArray)

    def _usable(self, dim: Any, by: Any) -> list[tuple[Hashable, xr.DataArray]]:
        """The variables to reduce: in a Dataset, those lacking the reduced dim (or the ``by``
        coordinate) are left out, as ``Dataset.reduce`` leaves them unreduced, and a LogstatsWarning
        names them."""
        variables = self._variables()
        if self._is_array() or (dim is None and by is None):
            return variables
        if by is not None and by in self._obj.coords:
            wanted = set(self._obj.coords[by].dims)
        else:
            wanted = {dim} if _one_dim(dim, self._obj) else set(dim)
        keep = [(k, v) for k, v in variables if wanted <= set(v.dims)]
        skipped = [k for k, v in variables if not wanted <= set(v.dims)]
        if skipped:
            import warnings

            from logstats.core.transform import LogstatsWarning

            warnings.warn(f"variable(s) {skipped!r} lack the dim {sorted(map(str, wanted))} and are left out",
                          LogstatsWarning, stacklevel=4)
        if not keep:
            have = {k: list(v.dims) for k, v in variables}
            raise ValueError(f"no data variable has the dim(s) {sorted(map(str, wanted))}; the variables "
                             f"have {have}")
        return keep

    def _each(self, fn: Callable[[xr.DataArray, Hashable], xr.Dataset]) -> list[tuple[Hashable, xr.Dataset]]:
        return [(name, fn(da, name)) for name, da in self._variables()]

    def _tidy(self, parts: list[tuple[Hashable, xr.Dataset]]) -> xr.Dataset:
        if len(parts) == 1:
            return parts[0][1]
        variable = pd.Index([n for n, _ in parts], name="variable", dtype=object)
        return xr.concat([p for _, p in parts], dim=variable,
                         coords="minimal", compat="override", join="outer")

    def _statistic(self, name: str, args: dict[str, Any]) -> Any:
        """Every declared statistic: each variable through the engine along ``dim``, rewrapped."""
        md = METHODS[name]
        if md.expand is not None and isinstance(args.get(md.expand), (list, tuple, np.ndarray, pd.Index)):
            items = list(args[md.expand])
            if not items:
                raise ValueError(f"{md.expand}= is an empty list")
            parts = [self._statistic(name, {**args, md.expand: item}) for item in items]
            parts = [p.drop_vars(md.expand, errors="ignore") for p in parts]
            return xr.concat(parts, dim=pd.Index(items, name=md.expand)).transpose(..., md.expand)
        limit = args.pop("detection_limit", None)
        skipna, nonpositive = args.pop("skipna"), args.pop("nonpositive")
        dim, by, keep_attrs = args.pop("dim"), args.pop("by"), args.pop("keep_attrs")
        check_nonpositive(nonpositive)
        parts = []
        plan: Plan | None = None
        for vname, da in self._usable(dim, by):
            _check_value(da, vname)
            plan = Plan(da, dim, by)
            policy = Policy(skipna=skipna, nonpositive=nonpositive,
                            detection_limit=_limit_for(self._obj, da, limit, plan))
            call = dict(args)
            nested = call.pop("nested", None) if "nested" in call else None
            for p in md.row_params:
                if p == "nested_codes":
                    levels = nested_levels(nested)
                    along = plan.reduced[0] if len(plan.reduced) == 1 else None
                    bad = [k for k in levels if k not in da.coords or da.coords[k].dims != (along,)]
                    if bad:
                        raise ValueError(f"nested={bad!r} must be 1-D coordinates along the reduced dim "
                                         f"{along!r}")
                    frame = pd.DataFrame({i: da.coords[k].to_numpy() for i, k in enumerate(levels)})
                    call[p] = nested_codes(frame)
                    call["names"] = [str(k) for k in levels]
                else:
                    call[p] = _limit_for(self._obj, da, args.get(p), plan, keyword=p)
            data = da.transpose(*plan.kept, *plan.reduced).data
            out = compute(md, data, nred=len(plan.reduced), codes=plan.codes,
                          ngroups=len(plan.labels) if plan.labels is not None else None, policy=policy,
                          params=call, where=_where(vname), labels=plan.labels)
            ds = _wrap(out, md, plan, da, keep_attrs, pooled=resolve(md, args).pools_groups)
            for f in md.fields:
                if f.constant and f.name in ds and f.name in args:  # echoes a keyword: one scalar
                    ds[f.name] = xr.DataArray(np.asarray(args[f.name],
                                                         dtype=object if f.dtype == "str" else None))
            parts.append((vname, ds))
        if md.shape == "single":
            if self._is_array():
                res = parts[0][1][name]
                res.name = self._obj.name
                return _count_unkeyed(res, plan)
            return _count_unkeyed(xr.Dataset({vname: ds[name] for vname, ds in parts}), plan)
        return _count_unkeyed(self._tidy(parts), plan)

    def fold_change(self, dim: Any = None, *, by: Hashable, reference: Any, replicate: Any = None,
                    paired: bool = False, equal_var: bool = False, confidence_level: float = 0.95,
                    adjust: str | None = "holm", equivalence: tuple[float, float] | None = None,
                    equivalence_alpha: float = 0.05, detection_limit: Any = None, skipna: bool = True,
                    nonpositive: str = "raise") -> xr.Dataset:
        """Ratio of geometric means of each level of coordinate ``by`` against ``reference`` along ``dim``.

        The same statistics and columns as the pandas ``fold_change`` (Welch's t on the logs,
        replicate means with ``replicate=`` a coordinate along ``dim``, paired replicates, Holm/BH,
        two one-sided tests), computed separately at every position of the other dims, which are
        kept; the result has a dim named ``by`` holding the non-reference levels. Dask-backed data
        are loaded one variable at a time (the test needs every value of a group together).
        ``detection_limit`` (a number, coordinate or variable name, or DataArray) makes it the censored
        regression of the pandas ``fold_change``.
        """
        check_nonpositive(nonpositive)
        params = dict(paired=paired, equal_var=equal_var, confidence_level=confidence_level, adjust=adjust,
                      equivalence=equivalence, equivalence_alpha=equivalence_alpha)

        plans: list[Plan] = []

        def one(da: xr.DataArray, name: Hashable) -> xr.Dataset:
            _check_value(da, name)
            plan = Plan(da, dim, by)
            plans.append(plan)
            assert plan.labels is not None and plan.codes is not None and plan.group_index is not None
            if reference not in plan.labels:
                raise ValueError(f"reference={reference!r} is not a level of {by!r}; "
                                 f"the levels are {plan.labels!r}")
            ref = plan.labels.index(reference)
            rep_codes = n_rep = None
            nested = None
            if isinstance(replicate, (list, tuple)) and len(replicate) > 1:  # cells in wells in days
                along = plan.reduced[0]
                bad = [k for k in replicate if k not in da.coords or da.coords[k].dims != (along,)]
                if bad:
                    raise ValueError(f"replicate={bad!r} must be coordinates along {along!r}")
                frame = pd.DataFrame({i: da.coords[k].to_numpy() for i, k in enumerate(replicate)})
                nested = nested_codes(frame)
                nested[0] = np.asarray(pd.factorize(frame[0], sort=True)[0], dtype=np.intp)
            elif replicate is not None:
                if isinstance(replicate, (list, tuple)):
                    replicate_one = replicate[0]
                else:
                    replicate_one = replicate
                if replicate_one not in da.coords or da.coords[replicate_one].dims != (plan.reduced[0],):
                    along = plan.reduced[0]
                    raise ValueError(f"replicate={replicate!r} must be a coordinate along {along!r}")
                rc, ru = pd.factorize(da.coords[replicate_one].to_numpy(), sort=True)
                rep_codes, n_rep = np.asarray(rc, dtype=np.intp), len(ru)
            elif paired:
                raise ValueError("paired=True needs replicate= (the coordinate shared by paired replicates)")
            data = np.asarray(da.transpose(*plan.kept, *plan.reduced).to_numpy())
            rows, width = int(np.prod(data.shape[:-1])), data.shape[-1]
            keep = [i for i in range(len(plan.labels)) if i != ref]
            # every position of the kept dims is a stratum of its own: one vectorised call for all
            rep_tiled = None if rep_codes is None else np.tile(rep_codes, rows)
            lim = _limit_for(self._obj, da, detection_limit, plan)
            policy = Policy(skipna=skipna, nonpositive=nonpositive,
                            detection_limit=np.reshape(lim, -1) if np.ndim(lim) else lim)
            strata = np.repeat(np.arange(rows, dtype=np.intp), width)
            if nested is not None:
                res = compare_nested(data.reshape(-1), np.tile(plan.codes, rows), len(plan.labels), ref,
                                     policy=policy, labels=plan.labels, where=_where(name),
                                     nested=[np.tile(c, rows) for c in nested],
                                     names=[str(k) for k in replicate], stratum_codes=strata, n_strata=rows,
                                     params=params)
            else:
                res = compare(data.reshape(-1), np.tile(plan.codes, rows), len(plan.labels), ref,
                              policy=policy, labels=plan.labels, where=_where(name), stratum_codes=strata,
                              n_strata=rows, replicate_codes=rep_tiled, n_replicates=n_rep, params=params)
            warn_if_empty(np.asarray(res["ratio"])[:, keep], reference=reference, where=_where(name),
                          paired=paired, n=np.asarray(res["n"])[:, keep],
                          n_reference=np.asarray(res["n_reference"])[:, keep], stacklevel=4)
            shape = data.shape[:-1] + (len(keep),)
            coords = plan.coords(da)
            if isinstance(by, str):
                coords[by] = plan.group_index.take(keep)
            out = {}
            for k in res:
                if k == "log_ratio":
                    continue
                v = np.asarray(res[k])[:, keep].reshape(shape)
                if k == "equivalent":
                    v = v.astype(bool)
                out[k] = xr.DataArray(v, dims=plan.out_dims(), coords=coords)
            out["unit"] = xr.DataArray(np.full(shape, "replicate" if replicate is not None else "value",
                                               dtype=object), dims=plan.out_dims(), coords=coords)
            return plan.label(xr.Dataset(out), plan.group_index.take(keep))

        res = self._tidy(self._each(one))
        return _count_unkeyed(res, plans[0] if plans else None)

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


install(_XarrayBase, "xarray")


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
            kinds = ", ".join(f"{k!r} ({v.dtype})" for k, v in self._obj.data_vars.items())
            hints = "".join(_dtype_hint(v.dtype, k) for k, v in self._obj.data_vars.items())
            raise TypeError(f"the Dataset has no numeric data variables (it has {kinds or 'none'}); logstats "
                            f"needs positive real numbers.{hints}")
        return out


def is_lazy(obj: xr.Dataset | xr.DataArray) -> bool:
    """True when any variable is dask-backed (used by tests and the command line)."""
    if isinstance(obj, xr.DataArray):
        return is_dask(obj.data)
    return any(is_dask(v.data) for v in obj.data_vars.values())
