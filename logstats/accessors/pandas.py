"""The ``.logstats`` accessor on ``pandas.Series`` and ``pandas.DataFrame``.

Thin by design: arguments are normalised, value columns become float arrays and group keys integer
codes (``_labels``), the shared engine or a statistics function computes, and the result is rewrapped
with the group labels. A Series is handled as a one-column frame, so both share one implementation.
"""

from __future__ import annotations

from collections.abc import Hashable
from typing import Any

import numpy as np
import pandas as pd

from logstats.accessors._api import install
from logstats.accessors._engine import compare, compare_nested, compute, compute_columns, warn_if_empty
from logstats.accessors._face import FigureMethods, ReportMethods
from logstats.accessors._labels import (
    Groups,
    column_values,
    factorize_keys,
    is_label_of,
    is_limit_label,
    nested_codes,
    nested_levels,
    resolve_keys,
    resolve_limit,
    value_columns,
    value_items,
)
from logstats.core.transform import check_nonpositive, describe_where, exp_values, log_values
from logstats.methods import INT_FIELDS, METHODS, Policy, resolve

__all__ = ["LogstatsFrameAccessor", "LogstatsSeriesAccessor"]

_DEFAULT_NAME = "value"


def _where(col: Hashable) -> str:
    return describe_where(column=col)


def tidy_frame(fields: dict[str, np.ndarray], index: pd.Index) -> pd.DataFrame:
    out = {}
    for k, v in fields.items():
        arr = np.asarray(v)
        if k in INT_FIELDS and arr.dtype.kind == "f" and np.isfinite(arr).all():
            arr = arr.astype(np.int64)
        out[k] = arr
    return pd.DataFrame(out, index=index)


class _PandasBase(FigureMethods, ReportMethods):
    _obj: Any

    # ------------------------------------------------------------------ plumbing
    def _frame(self) -> pd.DataFrame:
        raise NotImplementedError

    def _is_series(self) -> bool:
        return isinstance(self._obj, pd.Series)

    def _setup(self, by: Any, columns: Any, observed: bool, dropna: bool, sort: bool,
               other_keys: tuple[Any, ...] = ()
               ) -> tuple[pd.DataFrame, list[tuple[Hashable, int]], Groups | None]:
        """The frame, its value columns as ``(label, position)`` and the groups of ``by``.

        Keys and limits given as column labels are left out of the default value columns; a key given
        as a Series (even one derived from a value column) is not, as in pandas groupby.
        """
        df = self._frame()
        others = [k for k in other_keys if is_label_of(df, k)]
        if self._is_series() and columns is None:
            columns = [df.columns[0]]  # the Series itself is the value, whatever its dtype
        if by is None:
            return df, value_items(df, columns, exclude=others), None
        keys = resolve_keys(self._obj, by)
        named = [item for item in (by if isinstance(by, list) else [by]) if is_label_of(df, item)]
        exclude = [] if self._is_series() else named + others
        items = value_items(df, columns, exclude=exclude)
        groups = factorize_keys(keys, observed=observed, dropna=dropna, sort=sort)
        return df, items, groups

    def _tidy(self, results: list[tuple[Hashable, dict[str, np.ndarray]]], groups: Groups | None
              ) -> pd.DataFrame | pd.Series:
        if groups is None:
            index = pd.Index([c for c, _ in results], name="variable", tupleize_cols=False)
            names = list(results[0][1]) if results else []
            out = pd.DataFrame({k: [np.asarray(f[k]).reshape(-1)[0] for _, f in results] for k in names},
                               index=index)
            for k in out.columns:
                if k in INT_FIELDS:
                    out[k] = _maybe_int(out[k])
            if self._is_series():
                s = out.iloc[0]
                s.name = self._obj.name
                return s
            return out
        frames = [tidy_frame(f, groups.index) for _, f in results]
        if not frames:  # columns=[]: no value column, so no row (as groupby(...)[[]] has no cell)
            index = pd.MultiIndex.from_arrays([[] for _ in range(groups.index.nlevels + 1)],
                                              names=list(groups.index.names) + ["variable"])
            return pd.DataFrame(index=index)
        if len(frames) == 1:
            return frames[0]
        return stack_variables(frames, [c for c, _ in results])

    # ------------------------------------------------------------------ the declared statistics
    def _statistic(self, name: str, args: dict[str, Any]) -> Any:
        """Every declared statistic: keys to codes, each value column through the engine, rewrap."""
        md = METHODS[name]
        if md.expand is not None and isinstance(args.get(md.expand), (list, tuple, np.ndarray, pd.Index)):
            items = list(args[md.expand])
            if not items:
                raise ValueError(f"{md.expand}= is an empty list")
            parts = [self._statistic(name, {**args, md.expand: item}) for item in items]
            if isinstance(parts[0], pd.Series):  # a Series accessor without by: one row per item
                out = pd.DataFrame(parts, index=pd.Index(items, name=md.expand))
                for k in out.columns:
                    if k in INT_FIELDS:
                        out[k] = _maybe_int(out[k])
                return out
            out = pd.concat(parts, keys=items, names=[md.expand])
            if out.index.nlevels == 1:
                return out
            rows = len(parts[0])  # each group's rows together, the items inside (as in groupby.quantile)
            order = np.arange(rows * len(items)).reshape(len(items), rows).T.ravel()
            return out.reorder_levels(list(range(1, out.index.nlevels)) + [0]).iloc[order]
        limit = args.pop("detection_limit", None)
        policy_kw = {"skipna": args.pop("skipna"), "nonpositive": args.pop("nonpositive")}
        by, columns = args.pop("by"), args.pop("columns")
        observed, dropna, sort = args.pop("observed"), args.pop("dropna"), args.pop("sort")
        frame = self._frame()
        nested = None
        if "nested" in args:  # nesting levels: label handling here, codes to the engine
            nested = nested_levels(args.pop("nested"))
            missing = [k for k in nested if not is_label_of(frame, k)]
            if missing:
                raise KeyError(f"nested={missing!r} are not columns; there are {list(frame.columns)!r}")
        aligned = [limit] + [args.get(p) for p in md.row_params]
        keys = tuple(k for k in aligned if is_limit_label(frame, k)) + tuple(nested or [])
        df, cols, groups = self._setup(by, columns, observed, dropna, sort, other_keys=keys)
        policy = Policy(detection_limit=resolve_limit(df, limit), **policy_kw)
        for p in md.row_params:
            if p == "nested_codes":
                args[p] = nested_codes(df[nested]) if nested is not None else None
                args["names"] = [str(k) for k in (nested or [])]
            else:
                args[p] = resolve_limit(df, args.get(p), keyword=p)
        results = []
        every = {**md.defaults(), **args}
        if (len(cols) > 1 and md.reduction == "moments" and not every.get("linear")
                and not md.needs_values(every, policy)):
            # many value columns of a moment statistic: one pass over all of them, as for a DataArray
            block = df.iloc[:, [pos for _, pos in cols]].to_numpy(dtype=np.float64, na_value=np.nan)
            outs = compute_columns(md, np.ascontiguousarray(block.T), wheres=[_where(c) for c, _ in cols],
                                   codes=groups.codes if groups is not None else None,
                                   ngroups=groups.ngroups if groups is not None else None, policy=policy,
                                   params=args, labels=groups.labels if groups is not None else None)
            res = self._columns_shape(name, md.shape, outs, [c for c, _ in cols], groups)
            if groups is not None:
                res.attrs["n_without_key"] = groups.n_unkeyed
            return res
        for col, pos in cols:
            out = compute(md, column_values(df.iloc[:, pos], col), nred=1,
                          codes=groups.codes if groups is not None else None,
                          ngroups=groups.ngroups if groups is not None else None, policy=policy,
                          params=args, where=_where(col),
                          labels=groups.labels if groups is not None else None)
            results.append((col, out))
        if md.shape == "single":
            res = self._single_shape(name, results, groups)
        elif resolve(md, args).pools_groups:  # one row for all groups together
            res = self._tidy(results, None)
        else:
            res = self._tidy(results, groups)
        if groups is not None and hasattr(res, "attrs"):
            res.attrs["n_without_key"] = groups.n_unkeyed  # rows left out for a missing key
        return res

    def _columns_shape(self, name: str, shape: str, outs: dict[str, np.ndarray], labels: list[Hashable],
                       groups: Groups | None) -> Any:
        """Fields of shape ``(columns[, groups])`` into the layout the per-column path gives, in one go."""
        variable = pd.Index(labels, tupleize_cols=False, name="variable")  # as the per-column path
        if shape == "single":
            v = np.asarray(outs[name])
            if groups is None:
                return pd.Series(v, index=variable, name=name, dtype=np.float64)
            out = pd.DataFrame(v.T, index=groups.index)
            out.columns = pd.Index(labels, tupleize_cols=False)
            return out
        if groups is None:
            return pd.DataFrame({k: np.asarray(v) for k, v in outs.items()}, index=variable)
        k, g = len(labels), groups.ngroups
        idx = groups.index
        arrays = [_level_values(idx, i).take(np.tile(np.arange(g), k)) for i in range(idx.nlevels)]
        arrays.append(pd.Index(labels, tupleize_cols=False, dtype=object).repeat(g))
        index = pd.MultiIndex.from_arrays(arrays, names=list(idx.names) + ["variable"])
        return pd.DataFrame({f: np.asarray(v).reshape(k * g) for f, v in outs.items()}, index=index)

    def _single_shape(self, name: str, results: list[tuple[Hashable, dict[str, np.ndarray]]],
                      groups: Groups | None) -> Any:
        if groups is None:
            values = [float(np.asarray(f[name]).reshape(-1)[0]) for _, f in results]
            if self._is_series():
                return values[0]
            index = pd.Index([c for c, _ in results], name="variable", tupleize_cols=False)
            return pd.Series(values, index=index, name=name, dtype=np.float64)
        data = [np.asarray(f[name]) for _, f in results]
        if self._is_series():
            return pd.Series(data[0], index=groups.index, name=self._obj.name)
        out = pd.DataFrame(dict(enumerate(data)), index=groups.index)
        out.columns = pd.Index([c for c, _ in results], tupleize_cols=False)
        return out

    def fold_change(self, by: Any, reference: Any, *, columns: Any = None, replicate: Any = None,
                    paired: bool = False, within: Any = None, equal_var: bool = False,
                    confidence_level: float = 0.95, adjust: str | None = "holm",
                    equivalence: tuple[float, float] | None = None, equivalence_alpha: float = 0.05,
                    detection_limit: Any = None, skipna: bool = True, nonpositive: str = "raise",
                    observed: bool = True, dropna: bool = True) -> pd.DataFrame:
        """Ratio of geometric means of every level of ``by`` against ``reference``, with t interval.

        One row per (``within`` stratum, level other than the reference[, value column]): ``ratio``
        (level / reference), ``ci_low``, ``ci_high`` (Welch's t on the logs, Student's with
        ``equal_var=True``), ``p_value``, ``p_adjusted`` (``adjust="holm"`` or ``"bh"`` across the
        levels within each column and stratum; absent with ``adjust=None``), ``n``, ``n_reference``,
        then ``log2_ratio``, ``statistic``, ``df``, the cell counts and, with ``equivalence=(low,
        high)``, ``equivalence_p`` and ``equivalent`` (two one-sided tests at ``equivalence_alpha``).

        Without ``replicate`` every value (cell) is a unit, which treats cells as independent and
        overstates the evidence when cells share a well, plate or day. With ``replicate=`` (a column
        or aligned Series) each replicate contributes one value, the mean of its logs; ``n`` and
        ``n_reference`` then count replicates and ``n_cells``/``n_cells_reference`` the values
        (Lord et al. 2020). ``replicate=[outer, ..., inner]`` (e.g. ``["day", "well"]``) averages the
        logs up the nesting (cells to wells, wells to days; an inner label is read within its outer
        one) and makes the outermost level the unit; ``n_<inner>`` counts the inner units.
        ``paired=True`` pairs a level's replicate with the reference replicate of the same label and
        tests the differences (unmatched ones are counted in ``n_unpaired``).
        Values left out are counted for the level (``n_missing``, ``n_nonpositive``) and for the
        reference (``n_missing_reference``, ``n_nonpositive_reference``). ``unit`` says what a unit is.

        With ``detection_limit`` (a number, a column label or an aligned array) the logs are fitted by
        a censored normal regression with one location per level and a common spread: ``ratio`` is
        exp(level effect), the interval a Wald interval and ``p_value`` a likelihood-ratio test.

        A comparison that gives no number at all says why in a :class:`logstats.LogstatsWarning`.

        Examples
        --------
        >>> import pandas as pd, logstats
        >>> df = pd.DataFrame({"arm": ["ctl"] * 3 + ["trt"] * 3, "x": [1.0, 2.0, 4.0, 2.0, 4.0, 8.0]})
        >>> df.logstats.fold_change(by="arm", reference="ctl")["ratio"].round(6).tolist()
        [2.0]
        """
        check_nonpositive(nonpositive)
        if by is None:
            raise ValueError("fold_change needs by= (the column whose levels are compared)")
        others = tuple(k for key in (replicate, within) if key is not None
                       for k in (key if isinstance(key, list) else [key]))
        if is_limit_label(self._frame(), detection_limit):
            others += (detection_limit,)
        df, cols, groups = self._setup(by, columns, observed, dropna, sort=True, other_keys=others)
        policy = Policy(skipna=skipna, nonpositive=nonpositive,
                        detection_limit=resolve_limit(df, detection_limit))
        assert groups is not None
        if len(groups.names) != 1:
            raise ValueError("fold_change takes one by= key; use within= for further stratification")
        levels = groups.labels
        if reference not in levels:
            raise ValueError(f"reference={reference!r} is not a level of {groups.names[0]!r}; "
                             f"the levels are {levels!r}")
        ref = levels.index(reference)
        rep_codes = n_rep = None
        nested = None
        if isinstance(replicate, list) and len(replicate) > 1:  # cells in wells in days: nested units
            keys = resolve_keys(self._obj, replicate, keyword="replicate")
            frame = pd.DataFrame({i: k.to_numpy() for i, k in enumerate(keys)}, index=df.index)
            nested = nested_codes(frame)
            outer_codes, _ = pd.factorize(frame[0], sort=True)  # the outermost label itself, shared
            nested[0] = np.asarray(outer_codes, dtype=np.intp)
            nested_names = [str(k.name) for k in keys]
        elif replicate is not None:
            rk = resolve_keys(self._obj, replicate, keyword="replicate")
            rg = factorize_keys(rk, dropna=True, sort=True)
            rep_codes, n_rep = rg.codes, rg.ngroups
        elif paired:
            raise ValueError("paired=True needs replicate= (the label shared by paired replicates)")
        strat_codes, n_strata, strata_index = None, 1, None
        if within is not None:
            sg = factorize_keys(resolve_keys(self._obj, within, keyword="within"), observed=observed,
                                dropna=dropna, sort=True)
            strat_codes, n_strata, strata_index = sg.codes, sg.ngroups, sg.index
        params = dict(paired=paired, equal_var=equal_var, confidence_level=confidence_level, adjust=adjust,
                      equivalence=equivalence, equivalence_alpha=equivalence_alpha)
        results = []
        for col, pos in cols:
            if nested is not None:
                res = compare_nested(column_values(df.iloc[:, pos], col), groups.codes, groups.ngroups, ref,
                                     policy=policy, labels=levels, where=_where(col), nested=nested,
                                     names=nested_names, stratum_codes=strat_codes, n_strata=n_strata,
                                     params=params)
            else:
                res = compare(column_values(df.iloc[:, pos], col), groups.codes, groups.ngroups, ref,
                              policy=policy, labels=levels, where=_where(col), stratum_codes=strat_codes,
                              n_strata=n_strata, replicate_codes=rep_codes, n_replicates=n_rep,
                              params=params)
            keep = [i for i in range(groups.ngroups) if i != ref]
            warn_if_empty(res["ratio"][:, keep], reference=reference, where=_where(col), paired=paired,
                          n=res["n"][:, keep], n_reference=res["n_reference"][:, keep], stacklevel=3)
            results.append((col, res))
        out = fold_change_frame(results, groups.index, ref, strata_index,
                                "replicate" if replicate is not None else "value")
        out.attrs["n_without_key"] = groups.n_unkeyed  # rows left out for a missing by= key
        return out

    def log(self, *, base: Any = "e", columns: Any = None, nonpositive: str = "raise") -> Any:
        """Same-shape log transform (base ``"e"``, 2 or 10); other columns pass through unchanged.

        ``nonpositive="drop"`` or ``"nan"`` put NaN in place of zeros and negatives; ``"raise"``
        refuses them, naming the column and the count. The input is never modified.
        """
        check_nonpositive(nonpositive)
        if self._is_series():
            name = self._obj.name if self._obj.name is not None else _DEFAULT_NAME
            y = log_values(column_values(self._obj, name), base=base, nonpositive=nonpositive,
                           where=_where(name))
            return pd.Series(y, index=self._obj.index, name=self._obj.name)
        df = self._obj
        out = _copy_sharing(df)
        for col in value_columns(df, columns):
            y = log_values(column_values(df[col], col), base=base, nonpositive=nonpositive, where=_where(col))
            out[col] = pd.Series(y, index=out.index, copy=False)  # a new array of ours: no second copy
        return out

    def exp(self, *, base: Any = "e", columns: Any = None) -> Any:
        """Exact inverse of :meth:`log`: ``base ** x`` for the chosen columns."""
        if self._is_series():
            name = self._obj.name if self._obj.name is not None else _DEFAULT_NAME
            return pd.Series(exp_values(column_values(self._obj, name), base=base, where=_where(name)),
                             index=self._obj.index, name=self._obj.name)
        df = self._obj
        out = _copy_sharing(df)
        for col in value_columns(df, columns):
            y = exp_values(column_values(df[col], col), base=base, where=_where(col))
            out[col] = pd.Series(y, index=out.index, copy=False)
        return out


def _copy_sharing(df: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``df`` whose columns are replaced one by one: under copy-on-write (pandas 3, or the
    option set in pandas 2) the columns left alone share the input's memory, as pandas' own methods do;
    otherwise a deep copy, so that the input can never be modified through the result."""
    cow = int(pd.__version__.split(".")[0]) >= 3 or pd.get_option("mode.copy_on_write") is True
    return df.copy(deep=not cow)


def fold_change_frame(results: list[tuple[Hashable, dict[str, np.ndarray]]], level_index: pd.Index, ref: int,
                      strata_index: pd.Index | None, unit: str) -> pd.DataFrame:
    """Shape fold-change arrays ``(n_strata, n_levels)`` per value column into the tidy result: one row
    per (stratum, level other than the reference[, variable])."""
    keep = [i for i in range(len(level_index)) if i != ref]
    kept = level_index.take(keep)
    n_strata = 1 if strata_index is None else len(strata_index)
    if strata_index is None:
        index: pd.Index = kept
    else:
        parts = [strata_index.get_level_values(i).repeat(len(keep)) for i in range(strata_index.nlevels)]
        index = pd.MultiIndex.from_arrays(parts + [np.tile(np.asarray(kept, dtype=object), n_strata)],
                                          names=list(strata_index.names) + [level_index.name])
    out = []
    for _, res in results:
        fields = {k: np.asarray(v)[:, keep].reshape(-1) for k, v in res.items() if k != "log_ratio"}
        fields["unit"] = np.full(len(keep) * n_strata, unit)
        frame = tidy_frame(fields, index)
        if "equivalent" in frame:
            frame["equivalent"] = frame["equivalent"].astype(bool)
        out.append(frame)
    if len(out) == 1:
        return out[0]
    return stack_variables(out, [c for c, _ in results])


def _level_values(idx: pd.Index, i: int) -> pd.Index:
    """Level ``i`` of an index by position (level names may be integers, so never by name)."""
    if not isinstance(idx, pd.MultiIndex):
        return idx
    return idx.levels[i].take(idx.codes[i], allow_fill=True, fill_value=None)


def stack_variables(frames: list[pd.DataFrame], labels: list[Hashable]) -> pd.DataFrame:
    """Frames of one value column each, stacked with a last index level ``variable`` holding the column
    labels as they are (ints, tuples, duplicates: one label per frame, never split into levels)."""
    out = pd.concat(frames)
    var = pd.Index(labels, tupleize_cols=False, dtype=object).repeat([len(f) for f in frames])
    idx = out.index
    n = idx.nlevels
    arrays = [_level_values(idx, i) for i in range(n)] + [var]
    names = list(idx.names) + ["variable"]
    out.index = pd.MultiIndex.from_arrays(arrays, names=names)
    return out


def _maybe_int(s: pd.Series) -> pd.Series:
    vals = s.to_numpy(dtype=np.float64)
    return s.astype(np.int64) if np.isfinite(vals).all() else s


install(_PandasBase, "pandas")


@pd.api.extensions.register_dataframe_accessor("logstats")
class LogstatsFrameAccessor(_PandasBase):
    """Log-scale statistics on a DataFrame: ``df.logstats.summary(by="condition")``."""

    def __init__(self, obj: pd.DataFrame) -> None:
        if not isinstance(obj, pd.DataFrame):
            raise AttributeError("the logstats DataFrame accessor needs a DataFrame")
        self._obj = obj

    def _frame(self) -> pd.DataFrame:
        return self._obj


@pd.api.extensions.register_series_accessor("logstats")
class LogstatsSeriesAccessor(_PandasBase):
    """Log-scale statistics on a Series: ``s.logstats.gmean()``, ``s.logstats.summary(by=keys)``."""

    def __init__(self, obj: pd.Series) -> None:
        if not isinstance(obj, pd.Series):
            raise AttributeError("the logstats Series accessor needs a Series")
        self._obj = obj

    def _frame(self) -> pd.DataFrame:
        name = self._obj.name if self._obj.name is not None else _DEFAULT_NAME
        return pd.DataFrame({name: self._obj}, index=self._obj.index)
