"""Dask back end: chunk-by-chunk log-moments, merged in a tree (imported only when dask data is seen).

Each block is reduced to its log-moments (core), then ``dask.array.reduction`` merges them pairwise
with the k-way Chan update (``reduce_moments``). The reduced dimension is never rechunked into one
block, and nothing computes until asked.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from logstats.core.moments import FIELDS, LogMoments, moments_along, moments_by_codes, reduce_moments

__all__ = ["dask_stacked_moments"]

_NF = len(FIELDS)


def _block_moments(block: np.ndarray, *, nred: int, where: str) -> np.ndarray:
    axes = tuple(range(block.ndim - nred, block.ndim))
    st = moments_along(block, axis=axes, where=where).stack()
    return st.reshape(block.shape[: block.ndim - nred] + (1,) * nred + (_NF,))


def _block_moments_codes(block: np.ndarray, codes: np.ndarray, *, ngroups: int, where: str) -> np.ndarray:
    st = moments_by_codes(block, codes.reshape(-1), ngroups, where=where).stack()
    return st.reshape(block.shape[:-1] + (1, ngroups, _NF))


def _merge(block: np.ndarray, axis: Any = None, keepdims: bool = True, **_: Any) -> np.ndarray:
    axes = axis if isinstance(axis, tuple) else (axis,)
    m = reduce_moments(LogMoments.unstack(block), axis=axes, keepdims=True)
    out = m.stack()
    if not keepdims:
        out = np.squeeze(out, axis=axes)
    return out


def dask_stacked_moments(data: Any, *, nred: int, codes: np.ndarray | None, ngroups: int | None,
                         where: str) -> Any:
    import dask.array as da

    nd = data.ndim
    lead_chunks = data.chunks[: nd - nred]
    if codes is None:
        block_axes_chunks = tuple((1,) * len(c) for c in data.chunks[nd - nred:])
        per_block = data.map_blocks(
            _block_moments,
            nred=nred,
            where=where,
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


def _merge_partitions(*parts: tuple[Any, int]) -> tuple[Any, int]:
    """Merge moment tables exactly (``logstats.combine_moments``: aligned on the group index)."""
    from logstats.accessors.arrays import combine_moments

    if len(parts) == 1:
        return parts[0]
    return combine_moments([t for t, _ in parts]), sum(n for _, n in parts)


@dataclass(frozen=True)
class _Request:
    """Everything :func:`_finish` needs to shape the result exactly as the pandas accessor would."""

    kind: str
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

    from logstats.accessors._engine import finalize
    from logstats.accessors._labels import Groups
    from logstats.accessors.pandas import LogstatsFrameAccessor, LogstatsSeriesAccessor
    from logstats.core.transform import LogstatsWarning, describe_where

    table, n_unkeyed = merged
    if n_unkeyed:
        warnings.warn(
            f"{n_unkeyed} row(s) have a missing value in the group key(s) {req.key_names!r} and are left "
            f"out, {_UNKEYED_HINT}",
            LogstatsWarning,
            stacklevel=2,
        )
    several = req.by is not None and len(req.columns) > 1
    results = []
    names: tuple[str, ...] = ()
    index = None
    for col in req.columns:
        if req.by is None:
            stacked = table.loc[col, list(FIELDS)].to_numpy(dtype=np.float64)
            labels = None
        else:
            sub = table
            if several:  # this column's rows, without the ``variable`` level (also when empty)
                sub = table[table.index.get_level_values("variable") == col]
                sub = sub.set_axis(sub.index.droplevel("variable"), axis=0)
            if req.sort:
                sub = sub.sort_index()
            index = sub.index
            stacked = sub[list(FIELDS)].to_numpy(dtype=np.float64)
            labels = index.tolist()
        where = describe_where(column=str(col))
        arr, names = finalize(stacked, kind=req.kind, skipna=req.skipna, nonpositive=req.nonpositive,
                              where=where, labels=labels, params=req.params)
        results.append((col, arr))
    groups = None
    if index is not None:
        index = index.copy()
        index.names = list(req.key_names or index.names)
        groups = Groups(codes=np.empty(0, dtype=np.intp), ngroups=len(index), index=index,
                        names=list(index.names), n_unkeyed=n_unkeyed)
    if req.kind in ("moments", "summary"):
        if req.is_series:
            shaper: Any = LogstatsSeriesAccessor(pd.Series([], dtype=np.float64, name=req.series_name))
        else:
            shaper = LogstatsFrameAccessor(pd.DataFrame())
        return shaper._stacked_to_tidy(results, names, groups)
    # gmean / gsd / gcv: the shapes of the pandas accessor's single-statistic methods
    if groups is None:
        values = {c: float(a[0]) for c, a in results}
        if req.is_series:
            return next(iter(values.values()))
        s = pd.Series(values, name=req.kind)
        s.index.name = "variable"
        return s
    if req.is_series:
        return pd.Series(results[0][1][:, 0], index=groups.index, name=req.series_name)
    out = pd.DataFrame({c: a[:, 0] for c, a in results}, index=groups.index)
    out.columns.name = None
    return out


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
        for item in items:
            if not isinstance(item, str) and not np.isscalar(item):
                raise TypeError(f"by= on a dask DataFrame takes column names, not {type(item).__name__}")
        resolve_keys(meta, items)  # a KeyError naming the columns, before anything is built
        keys = items
    cols = value_columns(meta, columns, exclude=keys or [])
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

    from logstats.accessors._engine import fold_change_from_moments
    from logstats.accessors.pandas import fold_change_frame
    from logstats.core.transform import LogstatsWarning, describe_where

    table, n_unkeyed = merged
    keys = req.within + [req.by] + ([req.replicate] if req.replicate is not None else [])
    if n_unkeyed:
        warnings.warn(f"{n_unkeyed} row(s) have a missing value in the key(s) {keys!r} and are left out, "
                      f"{_UNKEYED_HINT}", LogstatsWarning, stacklevel=2)
    several = len(req.columns) > 1

    def column_table(col: Any) -> Any:
        if not several:
            return table
        sub = table[table.index.get_level_values("variable") == col]
        return sub.set_axis(sub.index.droplevel("variable"), axis=0)

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
        kw = dict(req.options)
        if req.replicate is not None:
            rcodes, rlabels = pd.factorize(key_values(idx, req.replicate), sort=True)
            kw.update(replicate=rcodes, n_replicates=len(rlabels))
        m = LogMoments(**{f: sub[f].to_numpy() for f in FIELDS})
        cell = np.asarray(scodes, dtype=np.intp) * len(levels) + lcodes
        results.append((col, fold_change_from_moments(
            m, cell, len(levels), levels.index(req.reference), labels=levels,
            where=describe_where(column=str(col)), n_strata=n_strata, **kw)))
    level_index = pd.Index(level_labels, name=req.by)
    return fold_change_frame(results, level_index, levels.index(req.reference), strata_index,
                             "replicate" if req.replicate is not None else "value")


class _DaskFrameBase:
    """Shared by the dask DataFrame and Series accessors: build the lazy per-partition reduction."""

    _obj: Any

    def _reduce(self, kind: str, by: Any, columns: Any, **kw: Any) -> Any:
        return _lazy_reduce(self._obj, kind, by, columns, key_names=None, series_name=None,
                            is_series=False, **kw)

    # ------------------------------------------------------------------ public methods
    def gmean(self, by: Any = None, *, columns: Any = None, skipna: bool = True, nonpositive: str = "raise",
              observed: bool = True, dropna: bool = True, sort: bool = True,
              split_every: int | None = None) -> Any:
        """Geometric mean ``exp(mean(ln x))`` per column and group, lazily (see the class docstring)."""
        return self._reduce("gmean", by, columns, skipna=skipna, nonpositive=nonpositive, observed=observed,
                            dropna=dropna, sort=sort, split_every=split_every)

    def gsd(self, by: Any = None, *, columns: Any = None, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", observed: bool = True, dropna: bool = True, sort: bool = True,
            split_every: int | None = None) -> Any:
        """Geometric standard deviation ``exp(sd(ln x))`` with ``ddof=1`` (as ``scipy.stats.gstd``)."""
        return self._reduce("gsd", by, columns, skipna=skipna, nonpositive=nonpositive, observed=observed,
                            dropna=dropna, sort=sort, split_every=split_every, params={"ddof": ddof})

    def gcv(self, by: Any = None, *, columns: Any = None, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", observed: bool = True, dropna: bool = True, sort: bool = True,
            split_every: int | None = None) -> Any:
        """Geometric coefficient of variation ``sqrt(exp(s²) − 1)``, s the SD of ln x with ``ddof=1``."""
        return self._reduce("gcv", by, columns, skipna=skipna, nonpositive=nonpositive, observed=observed,
                            dropna=dropna, sort=sort, split_every=split_every, params={"ddof": ddof})

    def moments(self, by: Any = None, *, columns: Any = None, skipna: bool = True, nonpositive: str = "raise",
                observed: bool = True, dropna: bool = True, sort: bool = True,
                split_every: int | None = None) -> Any:
        """The merged sufficient statistics ``n, mean_log, m2_log, n_missing, n_nonpositive, n_censored``."""
        return self._reduce("moments", by, columns, skipna=skipna, nonpositive=nonpositive,
                            observed=observed, dropna=dropna, sort=sort, split_every=split_every)

    def summary(self, by: Any = None, *, columns: Any = None, confidence_level: float = 0.95,
                ddof: float = 1, skipna: bool = True, nonpositive: str = "raise", observed: bool = True,
                dropna: bool = True, sort: bool = True, split_every: int | None = None) -> Any:
        """Log-scale summary ``n, n_missing, n_nonpositive, gmean, gsd, gcv, ci_low, ci_high, ci_factor``.

        The t interval of the geometric mean and the spreads (``ddof``, default 1) come from the
        merged moments through the same finalizer as :meth:`pandas.DataFrame.logstats.summary`.
        """
        return self._reduce("summary", by, columns, skipna=skipna, nonpositive=nonpositive,
                            observed=observed, dropna=dropna, sort=sort, split_every=split_every,
                            params={"confidence_level": confidence_level, "ddof": ddof})


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
                    skipna: bool = True, nonpositive: str = "raise", observed: bool = True,
                    dropna: bool = True, split_every: int | None = None) -> Any:
        """The pandas ``fold_change`` on a dask DataFrame, from per-partition moments (lazy).

        Every partition is reduced to log-moments per (``within``..., ``by``[, ``replicate``]); the
        tables are merged exactly and the test runs on the merged moments
        (:func:`logstats.stats.compare.fold_change_moments`), so the result equals the pandas one on
        the same rows. Returns a ``dask.delayed.Delayed``; ``.compute()`` gives the pandas table. Rows
        whose replicate label is missing are left out with the other missing keys (counted in the
        warning) rather than in ``n_no_replicate``.
        """
        from dask import delayed

        from logstats.accessors._labels import resolve_keys, value_columns
        from logstats.core.transform import check_nonpositive

        check_nonpositive(nonpositive)
        if paired and replicate is None:
            raise ValueError("paired=True needs replicate= (the label shared by paired replicates)")
        within_list = [] if within is None else (within if isinstance(within, list) else [within])
        keys = within_list + [by] + ([replicate] if replicate is not None else [])
        meta = self._obj._meta
        resolve_keys(meta, keys)  # a KeyError naming the column, before anything is built
        cols = value_columns(meta, columns, exclude=keys)
        req = _FoldRequest(by=by, reference=reference, replicate=replicate, within=within_list, columns=cols,
                           options=dict(paired=paired, equal_var=equal_var, confidence_level=confidence_level,
                                        adjust=adjust, equivalence=equivalence,
                                        equivalence_alpha=equivalence_alpha, skipna=skipna,
                                        nonpositive=nonpositive))
        part_kw: dict[str, Any] = {"by": keys, "columns": cols, "observed": observed, "dropna": dropna}
        parts = [delayed(_partition_moments, pure=True)(p, **part_kw) for p in self._obj.to_delayed()]
        k = max(int(split_every or SPLIT_EVERY), 2)
        while len(parts) > 1:
            parts = [delayed(_merge_partitions, pure=True)(*parts[i : i + k])
                     for i in range(0, len(parts), k)]
        return delayed(_fold_finish, pure=True)(parts[0], req)


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
