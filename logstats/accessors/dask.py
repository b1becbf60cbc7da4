"""Dask back end: chunk-by-chunk log-moments, merged in a tree (imported only when dask data is seen).

Each block is reduced to its log-moments (core), then ``dask.array.reduction`` merges them pairwise
with the k-way Chan update (``reduce_moments``). The reduced dimension is never rechunked into one
block, and nothing computes until asked.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from logstats.accessors._api import install
from logstats.accessors._face import FigureMethods
from logstats.core.moments import FIELDS, LogMoments, moments_along, moments_by_codes, reduce_moments

__all__ = ["dask_stacked_moments"]

_NF = len(FIELDS)


def _block_moments(block: np.ndarray, *, nred: int, where: str, spread: bool = True) -> np.ndarray:
    axes = tuple(range(block.ndim - nred, block.ndim))
    st = moments_along(block, axis=axes, where=where, spread=spread).stack()
    return st.reshape(block.shape[: block.ndim - nred] + (1,) * nred + (_NF,))


def _block_moments_codes(block: np.ndarray, codes: np.ndarray, *, ngroups: int, where: str,
                         labels: Any = None, spread: bool = True) -> np.ndarray:
    try:
        st = moments_by_codes(block, codes.reshape(-1), ngroups, where=where, spread=spread).stack()
    except ValueError as exc:  # +inf: say in which groups, as the in-memory path does
        if "+inf" not in str(exc) or labels is None:
            raise
        from logstats.accessors._engine import inf_message

        hit = np.isposinf(np.asarray(block, dtype=np.float64))
        per_value = np.asarray(hit.reshape(-1, hit.shape[-1]).any(axis=0))
        raise ValueError(inf_message(where, per_value, codes.reshape(-1), labels)) from None
    return st.reshape(block.shape[:-1] + (1, ngroups, _NF))


def _merge(block: np.ndarray, axis: Any = None, keepdims: bool = True, **_: Any) -> np.ndarray:
    axes = axis if isinstance(axis, tuple) else (axis,)
    m = reduce_moments(LogMoments.unstack(block), axis=axes, keepdims=True)
    out = m.stack()
    if not keepdims:
        out = np.squeeze(out, axis=axes)
    return out


def dask_stacked_moments(data: Any, *, nred: int, codes: np.ndarray | None, ngroups: int | None,
                         where: str, labels: Any = None, spread: bool = True) -> Any:
    """Per-block log-moments merged in a tree. ``labels`` (the group labels, in code order) let a
    refusal of ``+inf`` name the groups that hold it."""
    import dask.array as da

    nd = data.ndim
    lead_chunks = data.chunks[: nd - nred]
    if codes is None:
        block_axes_chunks = tuple((1,) * len(c) for c in data.chunks[nd - nred:])
        per_block = data.map_blocks(
            _block_moments,
            nred=nred,
            where=where,
            spread=spread,
            chunks=lead_chunks + block_axes_chunks + ((_NF,),),
            new_axis=nd,
            dtype=np.float64,
            meta=np.empty((0,) * (nd + 1), dtype=np.float64),
        )
        red_axes = tuple(range(nd - nred, nd))
    else:
        if nred != 1:
            raise ValueError("grouped reductions take exactly one reduced axis")
        g = int(ngroups or 0)
        codes_da = da.from_array(np.asarray(codes, dtype=np.intp), chunks=(data.chunks[-1],))
        codes_da = codes_da.reshape((1,) * (nd - 1) + (-1,)) if nd > 1 else codes_da
        per_block = da.map_blocks(
            _block_moments_codes,
            data,
            codes_da,
            ngroups=g,
            where=where,
            spread=spread,
            labels=list(labels) if labels is not None else None,
            chunks=lead_chunks + ((1,) * len(data.chunks[-1]), (g,), (_NF,)),
            new_axis=[nd, nd + 1],
            dtype=np.float64,
            meta=np.empty((0,) * (nd + 2), dtype=np.float64),
        )
        red_axes = (nd - 1,)
    return da.reduction(
        per_block,
        chunk=_merge,
        combine=_merge,
        aggregate=_merge,
        axis=red_axes,
        keepdims=False,
        dtype=np.float64,
        concatenate=True,
        meta=np.empty((0,) * (per_block.ndim - len(red_axes)), dtype=np.float64),
    )


# =========================================================================== dask DataFrame
# ``ddf.logstats``: every pandas partition is reduced to its moments by the pandas accessor
# (``partition.logstats.moments(by=..., columns=...)``), the moment tables are merged in a tree with
# ``logstats.combine_moments`` (Chan et al. 1979), and the merged moments are finalised by the same
# engine finalizers as an in-memory DataFrame. Label handling only: no formula lives here.

#: Moment tables merged per task in the tree reduction (as ``split_every`` in dask's own reductions).
SPLIT_EVERY = 8

_UNKEYED_HINT = ("as pandas groupby does; pass dropna=False to keep them as a group of their own")


class _AfterImport:
    """A ``sys.meta_path`` finder that runs ``callback`` right after module ``name`` is first imported.

    It lets ``import logstats`` register the dask DataFrame accessor without importing dask: the
    accessor appears the moment the user imports ``dask.dataframe`` (or at once if it already is).
    """

    def __init__(self, name: str, callback: Any) -> None:
        self.name = name
        self.callback = callback
        self._busy = False

    def find_spec(self, fullname: str, path: Any = None, target: Any = None) -> Any:
        import importlib.util
        import sys

        if fullname != self.name or self._busy:
            return None
        self._busy = True
        try:
            spec = importlib.util.find_spec(fullname)
        finally:
            self._busy = False
        if spec is None or spec.loader is None or not hasattr(spec.loader, "exec_module"):
            return None
        run = spec.loader.exec_module
        finder = self

        def exec_module(module: Any) -> None:
            run(module)
            if finder in sys.meta_path:
                sys.meta_path.remove(finder)
            finder.callback()

        spec.loader.exec_module = exec_module  # type: ignore[method-assign]
        return spec


def register_when_imported() -> None:
    """Register the dask DataFrame accessor now if ``dask.dataframe`` is loaded, else when it is."""
    import sys

    if "dask.dataframe" in sys.modules:
        register_dask_dataframe()
        return
    if not any(isinstance(f, _AfterImport) for f in sys.meta_path):
        sys.meta_path.insert(0, _AfterImport("dask.dataframe", register_dask_dataframe))


def register_dask_dataframe() -> bool:
    """Register the ``.logstats`` accessor on ``dask.dataframe.DataFrame`` and ``Series``.

    Returns False (and does nothing) when ``dask.dataframe`` cannot be imported, so ``import
    logstats`` works without dask; calling it again is harmless.
    """
    try:
        import dask.dataframe as dd
        from dask.dataframe.extensions import register_dataframe_accessor, register_series_accessor
    except ImportError:
        return False
    if getattr(dd.DataFrame, "logstats", None) is not LogstatsDaskFrameAccessor:
        register_dataframe_accessor("logstats")(LogstatsDaskFrameAccessor)
    if getattr(dd.Series, "logstats", None) is not LogstatsDaskSeriesAccessor:
        register_series_accessor("logstats")(LogstatsDaskSeriesAccessor)
    return True


def _partition_moments(part: Any, *, by: list[Any] | None, columns: list[Any], observed: bool,
                       dropna: bool) -> tuple[Any, int]:
    """One pandas partition to its moment table, and the number of rows left out for missing keys.

    Rows whose key is missing are removed (and counted) here, so that the pandas accessor does not warn
    once per partition; the total is reported once, when the result is computed. Non-positive values
    are counted (``nonpositive="drop"``); the chosen policy is applied to the merged moments.
    """
    n_unkeyed = 0
    if by is not None and dropna and len(part):
        keyed = part[by].notna().all(axis=1)
        n_unkeyed = int(len(part) - int(keyed.sum()))
        if n_unkeyed:
            part = part[keyed]
    table = part.logstats.moments(by=by, columns=columns, nonpositive="drop", observed=observed,
                                  dropna=dropna, sort=True)
    return table, n_unkeyed


def _rows_of(table: Any, col: Any) -> Any:
    """The rows of value column ``col`` in a moment table whose last index level holds the columns,
    without that level. By position and level code, never by name: a key may itself be called
    ``variable``, and a label may be a tuple or a number."""
    idx = table.index
    level = idx.levels[-1]
    hit = [i for i, v in enumerate(level) if isinstance(v, tuple) == isinstance(col, tuple) and v == col]
    mask = np.isin(idx.codes[-1], hit)
    sub = table[mask]
    return sub.set_axis(sub.index.droplevel(-1), axis=0)


def _identity(obj: Any) -> Any:
    return obj


def _merge_partitions(*parts: tuple[Any, int]) -> tuple[Any, int]:
    """Merge moment tables exactly (``logstats.combine_moments``: aligned on the group index)."""
    from logstats.accessors.arrays import combine_moments

    if len(parts) == 1:
        return parts[0]
    return combine_moments([t for t, _ in parts]), sum(n for _, n in parts)


@dataclass(frozen=True)
class _Request:
    """Everything :func:`_finish` needs to shape the result exactly as the pandas accessor would."""

    kind: str  # the declared method's name
    by: list[Any] | None
    key_names: list[Any] | None
    columns: list[Any]
    series_name: Any
    is_series: bool
    skipna: bool
    nonpositive: str
    sort: bool
    params: dict[str, Any] | None


def _finish(merged: tuple[Any, int], req: _Request) -> Any:
    """Merged moments to the result: ``_engine.finalize`` per value column, shaped as in pandas."""
    import warnings

    import pandas as pd

    from logstats.accessors._engine import finalize_moments
    from logstats.accessors._labels import Groups
    from logstats.accessors.pandas import LogstatsFrameAccessor, LogstatsSeriesAccessor
    from logstats.core.transform import LogstatsWarning, describe_where
    from logstats.methods import METHODS, Policy

    table, n_unkeyed = merged
    if n_unkeyed:
        warnings.warn(
            f"{n_unkeyed} row(s) have a missing value in the group key(s) {req.key_names!r} and are left "
            f"out, {_UNKEYED_HINT}",
            LogstatsWarning,
            stacklevel=2,
        )
    several = req.by is not None and len(req.columns) > 1
    md = METHODS[req.kind]
    policy = Policy(skipna=req.skipna, nonpositive=req.nonpositive)
    results = []
    index = None
    for col in req.columns:
        if req.by is None:
            sub = table.loc[[col], list(FIELDS)]
            labels = None
        else:
            sub = table
            if several:  # this column's rows, without the ``variable`` level (also when empty)
                sub = _rows_of(table, col)
            if req.sort:
                sub = sub.sort_index()
            index = sub.index
            labels = index.tolist()
        m = LogMoments(**{f: sub[f].to_numpy(dtype=np.int64 if f.startswith("n") else np.float64)
                          for f in FIELDS})
        if req.by is None:
            m = m.take(0)
        out = finalize_moments(md, m, policy=policy, params=dict(req.params or {}),
                               where=describe_where(column=col), labels=labels)
        results.append((col, out))
    groups = None
    if index is not None:
        index = index.copy()
        index.names = list(req.key_names or index.names)
        groups = Groups(codes=np.empty(0, dtype=np.intp), ngroups=len(index), index=index,
                        names=list(index.names), n_unkeyed=n_unkeyed)
    if req.is_series:
        shaper: Any = LogstatsSeriesAccessor(pd.Series([], dtype=np.float64, name=req.series_name))
    else:
        shaper = LogstatsFrameAccessor(pd.DataFrame())
    res = shaper._single_shape(req.kind, results, groups) if md.shape == "single" else \
        shaper._tidy(results, groups)
    if groups is not None and hasattr(res, "attrs"):
        res.attrs["n_without_key"] = n_unkeyed  # rows left out for a missing key, as in pandas
    return res


def _lazy_reduce(ddf: Any, kind: str, by: Any, columns: Any, *, key_names: list[Any] | None,
                 series_name: Any, is_series: bool, skipna: bool, nonpositive: str, observed: bool,
                 dropna: bool, sort: bool, split_every: int | None, params: dict[str, Any] | None = None
                 ) -> Any:
    """Per-partition moments of ``ddf``, merged in a tree, finalised: a lazy dask result."""
    from dask import delayed

    from logstats.accessors._labels import resolve_keys, value_columns
    from logstats.core.transform import check_nonpositive

    check_nonpositive(nonpositive)
    meta = ddf._meta
    keys = None
    if by is not None:
        items = by if isinstance(by, list) else [by]
        for item in items:  # labels of any hashable type (a tuple is one MultiIndex column label)
            if not isinstance(item, (str, tuple)) and not np.isscalar(item):
                raise TypeError(f"by= on a dask DataFrame takes column names (labels), not "
                                f"{type(item).__name__}")
        resolve_keys(meta, items)  # a KeyError naming the columns, before anything is built
        keys = items
    cols = value_columns(meta, columns, exclude=keys or [])
    if not cols:  # columns=[]: nothing to reduce; the pandas accessor's empty result, lazily
        import dask.dataframe as dd

        empty = getattr(meta.logstats, kind)(by=keys, columns=[], **(params or {}))
        if np.isscalar(empty):
            return empty
        return dd.from_delayed([delayed(_identity, pure=True)(empty)], meta=empty, verify_meta=False)
    req = _Request(kind, by=keys, key_names=key_names or keys, columns=cols, series_name=series_name,
                   is_series=is_series, skipna=skipna, nonpositive=nonpositive, sort=sort, params=params)
    part_kw: dict[str, Any] = {"by": keys, "columns": cols, "observed": observed, "dropna": dropna}
    # the result's empty template: the same path on the empty meta frame (also checks the options)
    template = _finish(_partition_moments(meta, **part_kw), req)

    parts = [delayed(_partition_moments, pure=True)(p, **part_kw) for p in ddf.to_delayed()]
    k = max(int(split_every or SPLIT_EVERY), 2)
    while len(parts) > 1:
        parts = [delayed(_merge_partitions, pure=True)(*parts[i : i + k])
                 for i in range(0, len(parts), k)]
    result = delayed(_finish, pure=True)(parts[0], req)
    if np.isscalar(template):
        return result
    import dask.dataframe as dd

    return dd.from_delayed([result], meta=template, verify_meta=False)


@dataclass(frozen=True)
class _FoldRequest:
    by: Any
    reference: Any
    replicate: Any
    within: list[Any]
    columns: list[Any]
    options: dict[str, Any]


def _fold_finish(merged: tuple[Any, int], req: _FoldRequest) -> Any:
    """Merged moments per (within..., by[, replicate]) to the fold-change table of the pandas accessor."""
    import warnings

    import pandas as pd

    from logstats.accessors._engine import compare_from_moments, warn_if_empty
    from logstats.accessors.pandas import fold_change_frame
    from logstats.core.transform import LogstatsWarning, describe_where
    from logstats.methods import Policy

    table, n_unkeyed = merged
    keys = req.within + [req.by] + ([req.replicate] if req.replicate is not None else [])
    if n_unkeyed:
        warnings.warn(f"{n_unkeyed} row(s) have a missing value in the key(s) {keys!r} and are left out, "
                      f"{_UNKEYED_HINT}", LogstatsWarning, stacklevel=2)
    several = len(req.columns) > 1

    def column_table(col: Any) -> Any:
        if not several:
            return table
        return _rows_of(table, col)

    def key_values(idx: Any, name: Any) -> Any:
        return idx.get_level_values(name) if isinstance(idx, pd.MultiIndex) else idx

    _, level_labels = pd.factorize(key_values(column_table(req.columns[0]).index, req.by), sort=True)
    levels = list(level_labels)
    if req.reference not in levels:
        raise ValueError(f"reference={req.reference!r} is not a level of {req.by!r}; "
                         f"the levels are {levels!r}")
    results = []
    strata_index = None
    for col in req.columns:
        sub = column_table(col)
        idx = sub.index
        lcodes = level_labels.get_indexer(pd.Index(key_values(idx, req.by)))
        if req.within:
            strata = pd.MultiIndex.from_arrays([idx.get_level_values(w) for w in req.within])
            scodes, sidx = pd.factorize(strata, sort=True)
            strata_index = pd.MultiIndex.from_tuples(list(sidx), names=req.within) if len(req.within) > 1 \
                else pd.Index([t[0] for t in sidx], name=req.within[0])
            n_strata = len(sidx)
        else:
            scodes, n_strata = np.zeros(len(idx), dtype=np.intp), 1
        opts = dict(req.options)
        policy = Policy(skipna=opts.pop("skipna"), nonpositive=opts.pop("nonpositive"))
        layout: dict[str, Any] = {"n_strata": n_strata}
        if req.replicate is not None:
            rcodes, rlabels = pd.factorize(key_values(idx, req.replicate), sort=True)
            layout.update(replicate=rcodes, n_replicates=len(rlabels))
        m = LogMoments(**{f: sub[f].to_numpy() for f in FIELDS})
        stratum_level = np.asarray(scodes, dtype=np.intp) * len(levels) + lcodes
        ref = levels.index(req.reference)
        res = compare_from_moments(m, stratum_level, len(levels), ref, policy=policy, labels=levels,
                                   where=describe_where(column=col), params=opts, **layout)
        keep = [i for i in range(len(levels)) if i != ref]
        warn_if_empty(res["ratio"][:, keep], reference=req.reference, where=describe_where(column=col),
                      paired=bool(opts.get("paired")), n=res["n"][:, keep],
                      n_reference=res["n_reference"][:, keep], stacklevel=2)
        results.append((col, res))
    level_index = pd.Index(level_labels, name=req.by)
    return fold_change_frame(results, level_index, levels.index(req.reference), strata_index,
                             "replicate" if req.replicate is not None else "value")


class _DaskFrameBase(FigureMethods):
    """Shared by the dask DataFrame and Series accessors: build the lazy per-partition reduction.

    Every declared statistic is here (from :mod:`logstats.methods`). Moment statistics are reduced
    partition by partition and merged exactly; the others (order statistics, censoring, resampling)
    need every value of a group together: their result is still a lazy dask object, whose computation
    loads the data into one pandas frame (said in each method's docstring).
    """

    _obj: Any

    def _reduce(self, kind: str, by: Any, columns: Any, **kw: Any) -> Any:
        return _lazy_reduce(self._obj, kind, by, columns, key_names=None, series_name=None,
                            is_series=False, **kw)

    def _statistic(self, name: str, args: dict[str, Any]) -> Any:
        from logstats.methods import METHODS, Policy

        md = METHODS[name]
        limit = args.get("detection_limit")
        for key in ("detection_limit",) + md.row_params:
            if key in args and type(args[key]).__module__.startswith("dask"):
                raise TypeError(f"{name}(): {key}= on a dask DataFrame takes a number or a column label "
                                f"(or a pandas Series / array aligned with the computed frame), not a "
                                f"{type(args[key]).__name__}; assign it as a column first")
        params = {p.name: args[p.name] for p in md.params if p.name != "detection_limit"}
        listed = md.expand is not None and isinstance(params.get(md.expand), (list, tuple, np.ndarray))
        lazy_ok = (md.reduction == "moments" and limit is None and not params.get("linear") and not listed
                   and not md.needs_values(params, Policy(nonpositive="drop")))
        if not lazy_ok:
            return self._loaded(name, args)
        return self._reduce(name, args["by"], args["columns"], skipna=args["skipna"],
                            nonpositive=args["nonpositive"], observed=args["observed"], dropna=args["dropna"],
                            sort=args["sort"], split_every=args["split_every"],
                            params={k: v for k, v in params.items() if k != "linear"})

    def _pandas_call(self) -> tuple[Any, Any]:
        """(the frame to load, a function of the loaded pandas frame returning its accessor and keys)."""
        return self._obj, lambda pdf: (pdf.logstats, {})

    def _loaded(self, name: str, args: dict[str, Any], template: Any = None) -> Any:
        """A method that needs the values: lazily, the partitions are loaded into one pandas frame and the
        pandas accessor computes. The empty result template comes from the same call on the meta
        (unless given)."""
        import dask.dataframe as dd
        from dask import delayed

        args = dict(args)
        args.pop("split_every", None)
        frame, accessor = self._pandas_call()
        if template is None:
            shape_args = _without_row_arrays(name, args)
            template = _template(lambda pdf: _call_pandas(accessor, pdf, name, shape_args), frame)
        result = delayed(_load_and_call, pure=True)(accessor, name, args, *frame.to_delayed())
        if template is None or np.isscalar(template):
            return result
        return dd.from_delayed([result], meta=template, verify_meta=False)

    def _plot_source(self) -> Any:
        """Figures need every value: the dask frame is computed (loaded) first."""
        return self._obj.compute()

    def log(self, *, base: Any = "e", columns: Any = None, nonpositive: str = "raise") -> Any:
        """Same-shape log transform, partition by partition (lazy); see the pandas ``log``."""
        meta = self._obj._meta.logstats.log(base=base, columns=columns, nonpositive=nonpositive) \
            if columns is not None or not _is_series(self._obj) else \
            self._obj._meta.logstats.log(base=base, nonpositive=nonpositive)
        kw = {"base": base, "nonpositive": nonpositive}
        if not _is_series(self._obj):
            kw["columns"] = columns
        return self._obj.map_partitions(lambda p: p.logstats.log(**kw), meta=meta)

    def exp(self, *, base: Any = "e", columns: Any = None) -> Any:
        """Exact inverse of :meth:`log`, partition by partition (lazy)."""
        kw: dict[str, Any] = {"base": base}
        if not _is_series(self._obj):
            kw["columns"] = columns
        meta = self._obj._meta.logstats.exp(**kw)
        return self._obj.map_partitions(lambda p: p.logstats.exp(**kw), meta=meta)


install(_DaskFrameBase, "dask")


def _is_series(obj: Any) -> bool:
    import dask.dataframe as dd

    return isinstance(obj, dd.Series)


def _call_pandas(accessor: Any, pdf: Any, name: str, args: dict[str, Any]) -> Any:
    acc, extra = accessor(pdf)
    return getattr(acc, name)(**{**args, **extra})


def _load_and_call(accessor: Any, name: str, args: dict[str, Any], *parts: Any) -> Any:
    import pandas as pd

    pdf = pd.concat(parts) if len(parts) != 1 else parts[0]
    return _call_pandas(accessor, pdf, name, args)


def _without_row_arrays(name: str, args: dict[str, Any]) -> dict[str, Any]:
    """The call's arguments for the empty template: a per-row argument (``detection_limit=`` or a
    method's row keywords given as an array or Series) becomes one number of the same meaning, since
    the template frame has none of the data's rows; its length is checked against the real rows when
    the result is computed (the error then names the keyword and the true row count)."""
    from logstats.methods import METHODS

    rowwise = ("detection_limit",) + METHODS[name].row_params
    out = dict(args)
    for key in rowwise:
        v = out.get(key)
        if v is not None and not np.isscalar(v) and hasattr(v, "__len__"):
            out[key] = 1.0
    return out


def _template(fn: Any, frame: Any) -> Any:
    """The result's empty template: the call on the (empty) meta, else on dask's non-empty meta."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            out = fn(frame._meta)
        except (ValueError, TypeError, KeyError, IndexError):
            out = fn(frame._meta_nonempty)
    return out.iloc[:0] if hasattr(out, "iloc") and getattr(out, "ndim", 0) == 2 else out


def _fold_change_template(meta: Any, kwargs: dict[str, Any], columns: list[Any]) -> Any:
    """The empty fold-change table of a call: the pandas ``fold_change`` itself on a tiny invented
    frame with the call's key, value and limit columns (every key two levels of small integers, values
    1..8, the reference level 0), so its fields and dtypes are those of the real result whatever the
    options (the meta cannot serve: its reference level does not exist)."""
    import warnings

    import pandas as pd

    keys = [k for key in (kwargs["by"], kwargs["within"], kwargs["replicate"]) if key is not None
            for k in (key if isinstance(key, list) else [key])]
    tiny = pd.DataFrame(index=range(8))
    for col in columns:
        tiny[col] = np.linspace(1.0, 8.0, 8)
    for key in keys:
        tiny[key] = np.repeat([0, 1], 4) if key == kwargs["by"] else np.tile([0, 1], 4)
    dl = kwargs["detection_limit"]
    if isinstance(dl, (str, tuple)) and dl in meta.columns:
        tiny[dl] = 0.5
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return tiny.logstats.fold_change(**{**kwargs, "reference": 0, "columns": columns}).iloc[:0]


class LogstatsDaskFrameAccessor(_DaskFrameBase):
    """Log-scale statistics on a dask DataFrame, computed partition by partition and merged exactly.

    ``ddf.logstats.summary(by="condition")`` has the same methods, keywords and result layout as the
    pandas accessor, with ``by=`` a column name or a list of names. Results are **lazy**: a one-partition
    ``dask.dataframe.DataFrame`` (or ``Series``) whose ``.compute()`` gives the pandas result; a single
    number (``ddf["x"].logstats.gmean()``) comes back as a ``dask.delayed.Delayed``. Bad values are
    reported when the result is computed (the error names the column, groups and count), and a warning
    about rows with a missing key is issued once then. Groups come in sorted order (``sort=True``) or,
    with ``sort=False``, in order of first appearance across partitions. ``split_every`` sets how many
    partial tables are merged per task.

    Examples
    --------
    >>> import dask.dataframe as dd, pandas as pd, logstats
    >>> from logstats.accessors.dask import register_dask_dataframe
    >>> _ = register_dask_dataframe()
    >>> df = pd.DataFrame({"arm": ["a", "a", "b", "b"], "x": [1.0, 4.0, 2.0, 8.0]})
    >>> ddf = dd.from_pandas(df, npartitions=2)
    >>> ddf.logstats.gmean(by="arm").compute()["x"].tolist()
    [2.0, 4.0]
    """

    def __init__(self, obj: Any) -> None:
        import dask.dataframe as dd

        if not isinstance(obj, dd.DataFrame):
            raise AttributeError("the logstats dask DataFrame accessor needs a dask DataFrame")
        self._obj = obj

    def fold_change(self, by: Any, reference: Any, *, columns: Any = None, replicate: Any = None,
                    paired: bool = False, within: Any = None, equal_var: bool = False,
                    confidence_level: float = 0.95, adjust: str | None = "holm",
                    equivalence: tuple[float, float] | None = None, equivalence_alpha: float = 0.05,
                    detection_limit: Any = None, skipna: bool = True, nonpositive: str = "raise",
                    observed: bool = True, dropna: bool = True, split_every: int | None = None) -> Any:
        """The pandas ``fold_change`` on a dask DataFrame, from per-partition moments (lazy).

        Every partition is reduced to log-moments per (``within``..., ``by``[, ``replicate``]); the
        tables are merged exactly and the test runs on the merged moments
        (:func:`logstats.stats.compare.fold_change_moments`), so the result equals the pandas one on
        the same rows. Returns a lazy one-partition dask DataFrame, like every other method;
        ``.compute()`` gives the pandas table. Rows
        whose replicate label is missing are left out with the other missing keys (counted in the
        warning) rather than in ``n_no_replicate``.

        With ``detection_limit=`` (a number or a column label) or nested ``replicate=[outer, ...,
        inner]`` the values are **loaded**: the censored regression and the nested means need every
        value of a level at once, so the frame is computed into one pandas DataFrame (still lazily,
        when the result is computed) and the pandas ``fold_change`` runs on it.
        """
        from dask import delayed

        from logstats.accessors._labels import resolve_keys, value_columns
        from logstats.core.transform import check_nonpositive

        check_nonpositive(nonpositive)
        if paired and replicate is None:
            raise ValueError("paired=True needs replicate= (the label shared by paired replicates)")
        within_list = [] if within is None else (within if isinstance(within, list) else [within])
        for keyword, items in (("by", [by]), ("within", within_list),
                               ("replicate", [] if replicate is None else
                                replicate if isinstance(replicate, list) else [replicate])):
            for item in items:
                if not isinstance(item, str) and not np.isscalar(item) and not isinstance(item, tuple):
                    raise TypeError(f"{keyword}= on a dask DataFrame takes column labels, not "
                                    f"{type(item).__name__} (compute() the frame to pass aligned arrays)")
        if detection_limit is not None and not (isinstance(detection_limit, (str, tuple))
                                                or np.isscalar(detection_limit)):
            raise TypeError("detection_limit= on a dask DataFrame takes a number or a column label, not "
                            f"{type(detection_limit).__name__} (compute() the frame to pass aligned arrays)")
        kwargs = dict(by=by, reference=reference, columns=columns, replicate=replicate, paired=paired,
                      within=within, equal_var=equal_var, confidence_level=confidence_level, adjust=adjust,
                      equivalence=equivalence, equivalence_alpha=equivalence_alpha,
                      detection_limit=detection_limit, skipna=skipna, nonpositive=nonpositive,
                      observed=observed, dropna=dropna)
        meta = self._obj._meta
        replicates = [] if replicate is None else replicate if isinstance(replicate, list) else [replicate]
        for keyword, items in (("by", [by]), ("within", within_list), ("replicate", replicates)):
            if items:
                resolve_keys(meta, items, keyword=keyword)  # a KeyError naming the keyword and column
        limit_col = [detection_limit] if isinstance(detection_limit, (str, tuple)) and \
            detection_limit in meta.columns else []
        cols = value_columns(meta, columns, exclude=within_list + [by] + replicates + limit_col)
        template = _fold_change_template(meta, kwargs, cols)
        if detection_limit is not None or len(replicates) > 1:
            return self._loaded("fold_change", kwargs, template=template)  # needs every value of a level
        replicate = replicates[0] if replicates else None
        keys = within_list + [by] + ([replicate] if replicate is not None else [])
        req = _FoldRequest(by=by, reference=reference, replicate=replicate, within=within_list, columns=cols,
                           options=dict(paired=paired, equal_var=equal_var, confidence_level=confidence_level,
                                        adjust=adjust, equivalence=equivalence,
                                        equivalence_alpha=equivalence_alpha, skipna=skipna,
                                        nonpositive=nonpositive))
        part_kw: dict[str, Any] = {"by": keys, "columns": cols, "observed": observed, "dropna": dropna}
        import dask.dataframe as dd

        parts = [delayed(_partition_moments, pure=True)(p, **part_kw) for p in self._obj.to_delayed()]
        k = max(int(split_every or SPLIT_EVERY), 2)
        while len(parts) > 1:
            parts = [delayed(_merge_partitions, pure=True)(*parts[i : i + k])
                     for i in range(0, len(parts), k)]
        result = delayed(_fold_finish, pure=True)(parts[0], req)
        return dd.from_delayed([result], meta=template, verify_meta=False)


class LogstatsDaskSeriesAccessor(_DaskFrameBase):
    """Log-scale statistics on a dask Series (see :class:`LogstatsDaskFrameAccessor`).

    ``by=`` takes dask Series partitioned like this one (they are joined partition by partition) or a
    list of them. Without ``by`` a single statistic is a ``Delayed`` number and ``summary()`` a lazy
    one-partition Series of its fields.
    """

    def __init__(self, obj: Any) -> None:
        import dask.dataframe as dd

        if not isinstance(obj, dd.Series):
            raise AttributeError("the logstats dask Series accessor needs a dask Series")
        self._obj = obj

    def _with_keys(self, by: Any) -> tuple[Any, list[str], list[Any]]:
        import dask.dataframe as dd

        name = self._obj.name if self._obj.name is not None else "value"
        frame = self._obj.to_frame(name=name)
        key_cols: list[str] = []
        key_names: list[Any] = []
        for i, key in enumerate([] if by is None else by if isinstance(by, list) else [by]):
            if not isinstance(key, dd.Series):
                raise TypeError("by= on a dask Series takes dask Series (or a list of them) aligned "
                                f"with it, not {type(key).__name__}")
            col = f"__logstats_key_{i}"
            frame = frame.assign(**{col: key})
            key_cols.append(col)
            key_names.append(key.name)
        return frame, key_cols, key_names

    def _loaded(self, name: str, args: dict[str, Any], template: Any = None) -> Any:
        frame, key_cols, key_names = self._with_keys(args.get("by"))
        value = self._obj.name if self._obj.name is not None else "value"
        series_name = self._obj.name
        call_args = {k: v for k, v in args.items() if k not in ("by", "columns")}
        has_by = bool(key_cols)

        def accessor(pdf: Any) -> Any:
            s = pdf[value].rename(series_name)
            extra = {"by": [pdf[c].rename(n) for c, n in zip(key_cols, key_names)]} if has_by else {}
            return s.logstats, extra

        import dask.dataframe as dd
        from dask import delayed

        call_args.pop("split_every", None)
        if template is None:
            shape_args = _without_row_arrays(name, call_args)
            template = _template(lambda pdf: _call_pandas(accessor, pdf, name, shape_args), frame)
        result = delayed(_load_and_call, pure=True)(accessor, name, call_args, *frame.to_delayed())
        if template is None or np.isscalar(template):
            return result
        return dd.from_delayed([result], meta=template, verify_meta=False)

    def _reduce(self, kind: str, by: Any, columns: Any, **kw: Any) -> Any:
        import dask.dataframe as dd

        name = self._obj.name if self._obj.name is not None else "value"
        frame = self._obj.to_frame(name=name)
        key_cols = key_names = None
        if by is not None:
            key_cols, key_names = [], []
            for i, key in enumerate(by if isinstance(by, list) else [by]):
                if not isinstance(key, dd.Series):
                    raise TypeError("by= on a dask Series takes dask Series (or a list of them) aligned "
                                    f"with it, not {type(key).__name__}")
                col = f"__logstats_key_{i}"
                frame = frame.assign(**{col: key})
                key_cols.append(col)
                key_names.append(key.name)
        return _lazy_reduce(frame, kind, key_cols, [name], key_names=key_names, series_name=self._obj.name,
                            is_series=True, **kw)
