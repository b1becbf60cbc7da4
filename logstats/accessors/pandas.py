"""The ``.logstats`` accessor on ``pandas.Series`` and ``pandas.DataFrame``.

Thin by design: arguments are normalised, value columns become float arrays and group keys integer
codes (``_labels``), the shared engine or a statistics function computes, and the result is rewrapped
with the group labels. A Series is handled as a one-column frame, so both share one implementation.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Hashable
from typing import Any

import numpy as np
import pandas as pd

from logstats.accessors._engine import INT_FIELDS, finalize, grouped_method, stacked_moments
from logstats.accessors._engine import fold_change as engine_fold_change
from logstats.accessors._face import FigureMethods
from logstats.accessors._labels import Groups, column_values, factorize_keys, resolve_keys, value_columns
from logstats.core.transform import check_nonpositive, describe_where, exp_values, log_values

__all__ = ["LogstatsFrameAccessor", "LogstatsSeriesAccessor"]

_DEFAULT_NAME = "value"


def _where(col: Hashable) -> str:
    return describe_where(column=str(col))


def tidy_frame(fields: dict[str, np.ndarray], index: pd.Index) -> pd.DataFrame:
    out = {}
    for k, v in fields.items():
        arr = np.asarray(v)
        if k in INT_FIELDS and arr.dtype.kind == "f" and np.isfinite(arr).all():
            arr = arr.astype(np.int64)
        out[k] = arr
    return pd.DataFrame(out, index=index)


class _PandasBase(FigureMethods):
    _obj: Any

    # ------------------------------------------------------------------ plumbing
    def _frame(self) -> pd.DataFrame:
        raise NotImplementedError

    def _is_series(self) -> bool:
        return isinstance(self._obj, pd.Series)

    def _setup(self, by: Any, columns: Any, observed: bool, dropna: bool, sort: bool,
               other_keys: tuple[Any, ...] = ()) -> tuple[pd.DataFrame, list[Hashable], Groups | None]:
        df = self._frame()
        others = [k for k in other_keys if isinstance(k, str) and k in df.columns]
        if by is None:
            cols = value_columns(df, columns, exclude=others)
            return df, cols, None
        keys = resolve_keys(self._obj, by)
        exclude = [] if self._is_series() else [k.name for k in keys if k.name in df.columns] + others
        cols = value_columns(df, columns, exclude=exclude)
        groups = factorize_keys(keys, observed=observed, dropna=dropna, sort=sort)
        return df, cols, groups

    def _moment_reduce(self, kind: str, by: Any, columns: Any, *, skipna: bool, nonpositive: str,
                       observed: bool, dropna: bool, sort: bool, params: dict[str, Any] | None = None,
                       setup: tuple[pd.DataFrame, list[Hashable], Groups | None] | None = None
                       ) -> tuple[list[tuple[Hashable, np.ndarray]], tuple[str, ...], Groups | None]:
        check_nonpositive(nonpositive)
        df, cols, groups = setup if setup is not None else self._setup(by, columns, observed, dropna, sort)
        results = []
        names: tuple[str, ...] = ()
        for col in cols:
            x = column_values(df[col], col)
            if groups is None:
                st = stacked_moments(x, nred=1, where=_where(col))
                labels = None
            else:
                st = stacked_moments(x, nred=1, codes=groups.codes, ngroups=groups.ngroups,
                                     where=_where(col))
                labels = groups.labels
            arr, names = finalize(st, kind=kind, skipna=skipna, nonpositive=nonpositive,
                                  where=_where(col), labels=labels, params=params)
            results.append((col, arr))
        return results, names, groups

    def _per_column(self, fn: Callable[..., dict[str, np.ndarray]], df: pd.DataFrame, cols: list[Hashable],
                    groups: Groups | None, **kw: Any) -> pd.DataFrame | pd.Series:
        """Run ``fn(values, codes, ngroups, where=, labels=, **kw)`` column by column; tidy result."""
        codes = groups.codes if groups is not None else np.zeros(len(df), dtype=np.intp)
        ngroups = groups.ngroups if groups is not None else 1
        labels = groups.labels if groups is not None else None
        results = [(col, fn(column_values(df[col], col), codes, ngroups, where=_where(col), labels=labels,
                            **kw)) for col in cols]
        return self._tidy(results, groups)

    def _tidy(self, results: list[tuple[Hashable, dict[str, np.ndarray]]], groups: Groups | None
              ) -> pd.DataFrame | pd.Series:
        if groups is None:
            rows = {col: {k: np.asarray(v).reshape(-1)[0] for k, v in f.items()} for col, f in results}
            out = pd.DataFrame.from_dict(rows, orient="index")
            out.index.name = "variable"
            for k in out.columns:
                if k in INT_FIELDS:
                    out[k] = _maybe_int(out[k])
            if self._is_series():
                s = out.iloc[0]
                s.name = self._obj.name
                return s
            return out
        frames = [tidy_frame(f, groups.index) for _, f in results]
        if len(frames) == 1:
            return frames[0]
        return pd.concat(frames, keys=[c for c, _ in results], names=["variable"]).pipe(_variable_last)

    def _stacked_to_tidy(self, results: list[tuple[Hashable, np.ndarray]], names: tuple[str, ...],
                         groups: Groups | None) -> pd.DataFrame | pd.Series:
        return self._tidy([(c, {k: a[..., i] for i, k in enumerate(names)}) for c, a in results], groups)

    def _single(self, kind: str, by: Any, columns: Any, **kw: Any) -> Any:
        results, names, groups = self._moment_reduce(kind, by, columns, **kw)
        if groups is None:
            values = {c: float(a[0]) for c, a in results}
            if self._is_series():
                return next(iter(values.values()))
            s = pd.Series(values, name=kind)
            s.index.name = "variable"
            return s
        data = {c: a[:, 0] for c, a in results}
        if self._is_series():
            return pd.Series(next(iter(data.values())), index=groups.index, name=self._obj.name)
        out = pd.DataFrame(data, index=groups.index)
        out.columns.name = None
        return out

    # ------------------------------------------------------------------ public methods
    def gmean(self, by: Any = None, *, columns: Any = None, skipna: bool = True,
              nonpositive: str = "raise", observed: bool = True, dropna: bool = True,
              sort: bool = True) -> Any:
        """Geometric mean ``exp(mean(ln x))``, per column and per group of ``by``.

        Parameters
        ----------
        by : column name, list of names, or aligned Series, optional
            Group keys, as in ``DataFrame.groupby`` (``observed``, ``dropna``, ``sort`` likewise).
        columns : name or list, optional
            Value columns; default all numeric, non-boolean columns not used in ``by``.
        skipna : bool, default True
            Skip missing values (counted in ``summary()``); False makes a group with any NaN.
        nonpositive : {"raise", "drop", "nan"}
            Zeros, negatives and ``-inf``: refuse, exclude (counted), or make the group's result NaN.

        Returns
        -------
        float (Series without ``by``), Series (DataFrame without ``by``, or Series with ``by``),
        or DataFrame (groups x columns).

        Examples
        --------
        >>> import pandas as pd, logstats
        >>> pd.Series([1.0, 10.0, 100.0]).logstats.gmean()
        10.000000000000002
        """
        return self._single("gmean", by, columns, skipna=skipna, nonpositive=nonpositive,
                            observed=observed, dropna=dropna, sort=sort)

    def gsd(self, by: Any = None, *, columns: Any = None, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", observed: bool = True, dropna: bool = True,
            sort: bool = True) -> Any:
        """Geometric standard deviation ``exp(sd(ln x))`` with ``ddof=1`` (as ``scipy.stats.gstd``).

        Same arguments and shapes as :meth:`gmean`; dimensionless, at least 1.
        """
        return self._single("gsd", by, columns, skipna=skipna, nonpositive=nonpositive,
                            observed=observed, dropna=dropna, sort=sort, params={"ddof": ddof})

    def gcv(self, by: Any = None, *, columns: Any = None, ddof: float = 1, skipna: bool = True,
            nonpositive: str = "raise", observed: bool = True, dropna: bool = True,
            sort: bool = True) -> Any:
        """Geometric coefficient of variation ``sqrt(exp(s²) − 1)``, s the SD of ln x with ``ddof=1``."""
        return self._single("gcv", by, columns, skipna=skipna, nonpositive=nonpositive,
                            observed=observed, dropna=dropna, sort=sort, params={"ddof": ddof})

    def moments(self, by: Any = None, *, columns: Any = None, skipna: bool = True,
                nonpositive: str = "raise", observed: bool = True, dropna: bool = True,
                sort: bool = True) -> Any:
        """Sufficient statistics of the logs: ``n, mean_log, m2_log, n_missing, n_nonpositive, n_censored``.

        ``m2_log`` is the sum of squared deviations of ln x. Results of the same shape merge exactly
        with :func:`logstats.combine_moments` (e.g. tables of several plates summarised separately).
        """
        results, names, groups = self._moment_reduce(
            "moments", by, columns, skipna=skipna, nonpositive=nonpositive, observed=observed,
            dropna=dropna, sort=sort)
        return self._stacked_to_tidy(results, names, groups)

    def summary(self, by: Any = None, *, columns: Any = None, confidence_level: float = 0.95,
                ddof: float = 1, skipna: bool = True, nonpositive: str = "raise", linear: bool = False,
                observed: bool = True, dropna: bool = True, sort: bool = True) -> Any:
        """Log-scale summary: ``n, n_missing, n_nonpositive, gmean, gsd, gcv, ci_low, ci_high, ci_factor``.

        ``ci_low``/``ci_high`` is the t interval of the geometric mean, ``exp(ȳ ± t·s/√n)``, and
        ``ci_factor`` its ×/÷ half-width; ``gsd``/``gcv`` use ``ddof`` (default 1). With
        ``linear=True`` the linear-scale ``median``, ``mean`` and ``sd`` (ddof) of the same values are
        added (the median costs a sort, so it is off by default).

        Examples
        --------
        >>> import pandas as pd, logstats
        >>> df = pd.DataFrame({"arm": ["a", "a", "b", "b"], "x": [1.0, 4.0, 2.0, 8.0]})
        >>> df.logstats.summary(by="arm")[["n", "gmean", "gsd"]].round(3)
             n  gmean    gsd
        arm
        a    2    2.0  2.665
        b    2    4.0  2.665
        """
        setup = self._setup(by, columns, observed, dropna, sort)  # keys factorised once for both parts
        results, names, groups = self._moment_reduce(
            "summary", by, columns, skipna=skipna, nonpositive=nonpositive, observed=observed,
            dropna=dropna, sort=sort, params={"confidence_level": confidence_level, "ddof": ddof},
            setup=setup)
        out = self._stacked_to_tidy(results, names, groups)
        if linear:
            from logstats.stats.estimate import linear_fields

            lin = self._per_column(linear_fields, *setup, ddof=ddof, skipna=skipna, nonpositive=nonpositive)
            if isinstance(out, pd.Series):
                out = pd.concat([out, lin])
            else:
                out = out.join(lin)
        return out

    def fit(self, by: Any = None, *, columns: Any = None, detection_limit: Any = None,
            skipna: bool = True, nonpositive: str = "raise", max_iter: int = 100, tol: float = 1e-10,
            observed: bool = True, dropna: bool = True, sort: bool = True) -> Any:
        """Log-normal maximum-likelihood fit per group, left-censored at a detection limit.

        Columns ``mu``, ``sigma`` (MLE of the mean and SD of ln x, so ``ddof=0``), ``n`` (values in the
        fit, censored included), ``n_censored``, ``loglik`` (on the original scale), ``converged``,
        then ``se_mu``, ``se_sigma``, ``n_iter``, ``n_missing``, ``n_nonpositive`` and ``status``
        (``"closed_form"``, ``"ok"``, ``"all_censored"``, ``"too_few_detects"``, ...).

        ``detection_limit`` is a number or the name of a column (or an aligned Series) holding each
        row's limit; a value **at or below** its limit is censored, zeros and negatives included (the
        ``nonpositive`` policy then does not apply to them). Censored groups are fitted all at once by
        Newton's method with step halving (see :func:`logstats.stats.censored.fit_lognormal`); a wholly
        censored group gets NaN with its status, never a number.
        """
        limit_col = detection_limit if isinstance(detection_limit, str) else None
        df, cols, groups = self._setup(by, columns, observed, dropna, sort,
                                       other_keys=(limit_col,) if limit_col else ())
        if limit_col is not None:
            if limit_col not in df.columns:
                raise KeyError(f"detection_limit={limit_col!r} is not a column; "
                               f"there are {list(df.columns)!r}")
            limit: Any = column_values(df[limit_col], limit_col)
        elif isinstance(detection_limit, pd.Series):
            limit = column_values(detection_limit.reindex(df.index), detection_limit.name)
        else:
            limit = detection_limit
        return self._raw_method("fit", df, cols, groups, skipna=skipna, nonpositive=nonpositive,
                                detection_limit=limit, max_iter=max_iter, tol=tol)

    def scale_check(self, by: Any = None, *, columns: Any = None, skipna: bool = True,
                    nonpositive: str = "raise", observed: bool = True, dropna: bool = True,
                    sort: bool = True) -> Any:
        """Linear or log scale? Normal and log-normal fitted to the same values, per group.

        ``aic_normal`` and ``aic_lognormal`` are both for the data on the original scale (the
        log-normal likelihood includes the Jacobian −Σ ln x), ``preferred`` is ``"log"`` when the
        log-normal has the lower AIC; ``normality_p_linear`` / ``normality_p_log`` are Shapiro–Wilk
        p-values (D'Agostino–Pearson beyond 5000 values, named in ``normality_test``); ``mean``,
        ``gmean``, ``mean_ratio`` = mean / gmean and ``expected_ratio`` = exp(s²/2) (s with ddof=1),
        the ratio log-normality predicts; plus skewness on both scales.
        """
        df, cols, groups = self._setup(by, columns, observed, dropna, sort)
        return self._raw_method("scale_check", df, cols, groups, skipna=skipna, nonpositive=nonpositive)

    def lognormal_mean(self, by: Any = None, *, columns: Any = None, method: str = "cox",
                       confidence_level: float = 0.95, random_state: Any = None, n_draws: int = 10000,
                       skipna: bool = True, nonpositive: str = "raise", observed: bool = True,
                       dropna: bool = True, sort: bool = True) -> Any:
        """Arithmetic mean implied by a log-normal, ``exp(ȳ + s²/2)`` (s with ddof=1), with a CI.

        ``method``: ``"cox"`` (Land 1972; Zhou & Gao 1997), ``"modified_cox"`` (t quantile;
        Armstrong 1992, Olsson 2005), ``"gci"`` (generalized CI, Krishnamoorthy & Mathew 2003; Monte
        Carlo with ``n_draws``) or ``"bootstrap"`` (BCa). The Monte Carlo methods are reproducible for a
        given ``random_state`` and never touch numpy's global random state. Columns ``estimate``,
        ``ci_low``, ``ci_high``, ``method``, ``n``, ``n_missing``, ``n_nonpositive``.
        """
        df, cols, groups = self._setup(by, columns, observed, dropna, sort)
        return self._raw_method("lognormal_mean", df, cols, groups, skipna=skipna, nonpositive=nonpositive,
                                method=method, confidence_level=confidence_level, random_state=random_state,
                                n_draws=n_draws)

    def _raw_method(self, kind: str, df: pd.DataFrame, cols: list[Hashable], groups: Groups | None,
                    **kw: Any) -> Any:
        return self._per_column(functools.partial(grouped_method, kind), df, cols, groups, **kw)

    def fold_change(self, by: Any, reference: Any, *, columns: Any = None, replicate: Any = None,
                    paired: bool = False, within: Any = None, equal_var: bool = False,
                    confidence_level: float = 0.95, adjust: str | None = "holm",
                    equivalence: tuple[float, float] | None = None, equivalence_alpha: float = 0.05,
                    skipna: bool = True, nonpositive: str = "raise", observed: bool = True,
                    dropna: bool = True) -> pd.DataFrame:
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
        (Lord et al. 2020). ``paired=True`` pairs a level's replicate with the reference replicate of
        the same label and tests the differences (unmatched ones are counted in ``n_unpaired``).

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
        df, cols, groups = self._setup(by, columns, observed, dropna, sort=True, other_keys=others)
        assert groups is not None
        if len(groups.names) != 1:
            raise ValueError("fold_change takes one by= key; use within= for further stratification")
        levels = groups.labels
        if reference not in levels:
            raise ValueError(f"reference={reference!r} is not a level of {groups.names[0]!r}; "
                             f"the levels are {levels!r}")
        ref = levels.index(reference)
        rep_codes = n_rep = None
        if replicate is not None:
            rk = resolve_keys(self._obj, replicate)
            rg = factorize_keys(rk, dropna=True, sort=True)
            rep_codes, n_rep = rg.codes, rg.ngroups
        elif paired:
            raise ValueError("paired=True needs replicate= (the label shared by paired replicates)")
        strat_codes, n_strata, strata_index = None, 1, None
        if within is not None:
            sg = factorize_keys(resolve_keys(self._obj, within), observed=observed, dropna=dropna,
                                sort=True)
            strat_codes, n_strata, strata_index = sg.codes, sg.ngroups, sg.index
        results = []
        for col in cols:
            results.append((col, engine_fold_change(
                column_values(df[col], col), groups.codes, groups.ngroups, ref, labels=levels,
                where=_where(col), nonpositive=nonpositive, skipna=skipna, stratum_codes=strat_codes,
                n_strata=n_strata, replicate_codes=rep_codes, n_replicates=n_rep, paired=paired,
                equal_var=equal_var, confidence_level=confidence_level, adjust=adjust,
                equivalence=equivalence, equivalence_alpha=equivalence_alpha)))
        return fold_change_frame(results, groups.index, ref, strata_index,
                                 "replicate" if replicate is not None else "value")

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
        out = df.copy()
        for col in value_columns(df, columns):
            out[col] = log_values(column_values(df[col], col), base=base, nonpositive=nonpositive,
                                  where=_where(col))
        return out

    def exp(self, *, base: Any = "e", columns: Any = None) -> Any:
        """Exact inverse of :meth:`log`: ``base ** x`` for the chosen columns."""
        if self._is_series():
            name = self._obj.name if self._obj.name is not None else _DEFAULT_NAME
            return pd.Series(exp_values(column_values(self._obj, name), base=base, where=_where(name)),
                             index=self._obj.index, name=self._obj.name)
        df = self._obj
        out = df.copy()
        for col in value_columns(df, columns):
            out[col] = exp_values(column_values(df[col], col), base=base, where=_where(col))
        return out

    def report(self, *args: Any, **kwargs: Any) -> str:
        """A self-contained HTML report of the whole analysis; see :func:`logstats.report.build_report`."""
        from logstats import report

        return report.build_report(self._obj, *args, **kwargs)


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
    return pd.concat(out, keys=[c for c, _ in results], names=["variable"]).pipe(_variable_last)


def _maybe_int(s: pd.Series) -> pd.Series:
    vals = s.to_numpy(dtype=np.float64)
    return s.astype(np.int64) if np.isfinite(vals).all() else s


def _variable_last(df: pd.DataFrame) -> pd.DataFrame:
    n = df.index.nlevels
    return df.reorder_levels(list(range(1, n)) + [0])


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
