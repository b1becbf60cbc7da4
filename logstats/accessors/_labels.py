"""Label handling shared by the pandas adapters: group keys to integer codes, value columns to arrays."""

from __future__ import annotations

import warnings
from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from logstats.core.groups import GroupSums, occurring_keys
from logstats.core.transform import LogstatsWarning

__all__ = ["Groups", "column_values", "factorize_keys", "is_label_of", "is_limit_label", "resolve_keys",
           "resolve_limit", "value_columns", "value_items"]


@dataclass(frozen=True)
class Groups:
    codes: np.ndarray  # intp, -1 = row in no group
    ngroups: int
    index: pd.Index  # one entry per group, in code order
    names: list[Hashable]
    n_unkeyed: int  # rows left out because a key is missing

    @property
    def labels(self) -> list[Any]:
        return self.index.tolist()  # the same Python scalars / tuples as list(index), faster


def resolve_keys(obj: pd.DataFrame | pd.Series, by: Any, keyword: str = "by") -> list[pd.Series]:
    """``by`` as a list of key Series aligned to ``obj`` (column names, index level names, Series, arrays).

    ``keyword`` names the argument in messages. For ``by=`` a Series with another index is aligned on
    the index as pandas groupby does (rows it lacks have no key: warned and counted); for any other
    keyword (``replicate=``, ``within=``: arguments aligned like the data) a Series must hold a label
    for every row of the data, else a ValueError names the keyword and how many rows lack one.
    """
    items = by if isinstance(by, list) else [by]
    if not items:
        raise ValueError(f"{keyword}= is an empty list; pass a column name, a list of names, or an aligned "
                         "Series")
    keys: list[pd.Series] = []
    for item in items:
        if isinstance(item, pd.Series):
            key = item
            if not key.index.equals(obj.index):
                if len(key) == len(obj) and not key.index.is_unique:
                    raise ValueError(f"{keyword}= Series {key.name!r} has an index that does not match the "
                                     "data's")
                if keyword != "by":
                    _check_covers(key.index, obj.index, keyword)
                key = key.reindex(obj.index)
            keys.append(key)
        elif isinstance(item, (np.ndarray, pd.Index, pd.Categorical)):
            if len(item) != len(obj):
                raise ValueError(f"{keyword}= array has length {len(item)}, the data has {len(obj)} rows")
            keys.append(pd.Series(item, index=obj.index, name=getattr(item, "name", None)))
        elif isinstance(obj, pd.DataFrame) and is_label_of(obj, item):
            col = obj[item]
            if isinstance(col, pd.DataFrame):
                raise ValueError(f"{keyword}={item!r} names {col.shape[1]} columns (the label is "
                                 "duplicated); rename them or pass the key as a Series")
            keys.append(col)
        elif _is_level_name(obj, item):
            keys.append(pd.Series(obj.index.get_level_values(item), index=obj.index, name=item))
        else:
            where = list(obj.columns) if isinstance(obj, pd.DataFrame) else list(obj.index.names)
            raise KeyError(f"{keyword}={item!r} is not a column or index level; there are {where!r}")
    return keys


def _is_level_name(obj: pd.DataFrame | pd.Series, item: Any) -> bool:
    if item is None:
        return False
    try:
        return item in (obj.index.names or [])
    except TypeError:  # unhashable
        return False


def _check_covers(given: pd.Index, data: pd.Index, keyword: str) -> None:
    """An aligned argument (a Series) must have a label for every row of the data (a permutation or a
    superset of the data's index is aligned silently, as pandas would)."""
    lacking = int((~data.isin(given)).sum())
    if lacking:
        raise ValueError(
            f"{keyword}= Series is not aligned with the data: {lacking} of {len(data)} row(s) have no entry "
            f"in its index; pass one Series per row of the data (or a plain array of {len(data)} values), "
            f"or .reindex(data.index) it yourself to mean 'no value' there"
        )


def _int_codes(key: pd.Series, sort: bool) -> tuple[np.ndarray, pd.Index] | None:
    """Sorted codes and levels of a plain integer key by counting: O(n), no hash table, no sort.

    The same result as ``pd.factorize(key, sort=True)`` (levels keep the key's dtype), in about half
    the time and with one codes array of extra memory instead of two. None when it does not apply
    (unsorted, nullable or unsigned 64-bit keys, or values spread over far more than ``len(key)``).
    """
    dtype = key.dtype
    if not sort or not isinstance(dtype, np.dtype) or dtype.kind not in "iu" or dtype == np.uint64:
        return None
    a = key.to_numpy()
    n = a.size
    if n == 0:
        return None
    lo, hi = int(a.min()), int(a.max())
    span = hi - lo + 1
    if span > max(2 * n, 1 << 16):
        return None
    if lo == 0 and a.dtype == np.intp:
        codes = a  # the key itself is its codes if every value occurs (read-only below: never written)
    else:
        codes = np.empty(n, dtype=np.intp)
        np.subtract(a, lo, out=codes, dtype=np.intp, casting="unsafe")  # exact: span fits in intp
    present = GroupSums(codes, span).counts > 0  # run by run for keys written group by group
    occurs = np.flatnonzero(present)
    if len(occurs) < span:
        lookup = np.cumsum(present, dtype=np.intp) - 1
        if codes is a:
            codes = np.take(lookup, a)
        else:
            step = 1 << 20
            for start in range(0, n, step):  # remap in place, a block at a time: no second codes array
                block = codes[start : start + step]
                np.take(lookup, block, out=block)
    if codes is a:
        codes = a.view()
        codes.flags.writeable = False
    return codes, pd.Index((occurs + lo).astype(dtype))


def factorize_keys(keys: Sequence[pd.Series], *, observed: bool = True, dropna: bool = True,
                   sort: bool = True) -> Groups:
    """Integer group codes for one or several keys, grouped as ``DataFrame.groupby`` would.

    Categorical keys keep unobserved levels only with ``observed=False`` (then, as in pandas, groups
    are the product of the keys' levels); NaN keys are left out with ``dropna=True`` (counted, and a
    LogstatsWarning says how many rows) or form their own group with ``dropna=False``.

    One linear pass per key: integer keys are counted (:func:`_int_codes`), other keys hashed by
    ``pd.factorize``; which key combinations occur is marked in a table of all combinations (no sort
    of the rows, :func:`logstats.core.groups.occurring_keys`), falling back to ``np.unique`` only when
    that table would be far longer than the data.
    """
    codes_list, levels_list = [], []
    any_cat = False
    all_levels_occur = True  # pd.factorize reports only values that occur; categories need not
    for key in keys:
        if isinstance(key.dtype, pd.CategoricalDtype):
            any_cat = True
            all_levels_occur = False
            cat = key.array
            codes = np.asarray(cat.codes, dtype=np.intp)
            levels = pd.Index(cat.categories)
        else:
            counted = _int_codes(key, sort)
            if counted is not None:
                codes, levels = counted
            else:
                codes, levels = pd.factorize(key, sort=sort, use_na_sentinel=True)
                codes = np.asarray(codes, dtype=np.intp)
                levels = pd.Index(levels)
                if levels.dtype == object:
                    levels = levels.infer_objects()  # as groupby does: object strings -> str, ints -> int64
        if not dropna and (codes < 0).any():
            codes = np.where(codes < 0, len(levels), codes)
            levels = levels.append(pd.Index([np.nan]))
        codes_list.append(codes)
        levels_list.append(levels)
    n = len(codes_list[0])
    if len(codes_list) == 1:
        keyed = codes_list[0] >= 0
    else:
        keyed = np.ones(n, dtype=bool)
        for c in codes_list:
            keyed &= c >= 0
    n_unkeyed = int(n - np.count_nonzero(keyed))
    dims = tuple(len(lv) for lv in levels_list)
    if len(codes_list) == 1:
        flat = codes_list[0]
    else:
        flat = np.full(n, -1, dtype=np.intp)
        if n_unkeyed < n:
            flat[keyed] = np.ravel_multi_index(tuple(c[keyed] for c in codes_list), dims)
    total = int(np.prod(dims)) if dims else 0
    if not observed and any_cat:
        uniq = np.arange(total, dtype=np.intp)
        out_codes = flat
    else:
        # ascending codes: sorted key order (first-seen order if sort=False)
        if len(codes_list) == 1 and all_levels_occur:
            uniq = inv = np.arange(total, dtype=np.intp)
        else:
            uniq, inv = occurring_keys(flat[keyed] if n_unkeyed else flat, total)
        if len(uniq) == total:
            out_codes = flat  # every combination observed: the codes are already final
        elif n_unkeyed:
            out_codes = np.full(n, -1, dtype=np.intp)
            out_codes[keyed] = inv
        else:
            out_codes = inv
    names = [k.name for k in keys]
    if len(codes_list) == 1:
        index = levels_list[0].take(uniq)
        index.names = [names[0]]  # (a tuple label is one name, not one per level)
    else:
        parts = np.unravel_index(uniq, dims)
        index = pd.MultiIndex.from_arrays([lv.take(p) for lv, p in zip(levels_list, parts)], names=names)
    if n_unkeyed and dropna:
        warnings.warn(
            f"{n_unkeyed} row(s) have a missing value in the group key(s) {names!r} and are left out, "
            "as pandas groupby does; pass dropna=False to keep them as a group of their own",
            LogstatsWarning,
            stacklevel=4,
        )
    return Groups(codes=np.asarray(out_codes, dtype=np.intp), ngroups=len(uniq), index=index,
                  names=names, n_unkeyed=n_unkeyed)


def _is_value_dtype(dtype: Any) -> bool:
    return pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype) and \
        not pd.api.types.is_complex_dtype(dtype)


#: Integer columns whose name marks them as identifiers are left out of the default value columns: a
#: name whose last word (words split at ``_``, ``-``, ``.`` or a space; case-insensitive) is one of
#: these, e.g. ``cell_id``, ``ID``, ``index``, ``sample_no``, or an integer column named ``cell`` (in
#: one-row-per-cell tables that is the cell's number). Name such a column in ``columns=`` to summarise
#: it anyway. Float columns and other names (``well``, ``plate``) stay values.
IDENTIFIER_WORDS = ("id", "idx", "index", "no", "nr", "number", "code", "uid", "key", "cell")


def looks_like_identifier(label: Hashable, dtype: Any) -> bool:
    if not pd.api.types.is_integer_dtype(dtype) or not isinstance(label, str):
        return False
    words = label.strip().lower().replace("-", "_").replace(".", "_").replace(" ", "_").split("_")
    return bool(words) and words[-1] in IDENTIFIER_WORDS


def value_items(df: pd.DataFrame, columns: Any,
                exclude: Sequence[Hashable] = ()) -> list[tuple[Hashable, int]]:
    """``(label, position)`` of each value column, in column order; duplicated labels give one item per
    position (as ``groupby(...).agg`` would). Default: numeric, non-boolean columns that are neither
    keys nor limits nor identifier-like integer columns (:data:`IDENTIFIER_WORDS`)."""
    labels = list(df.columns)
    dtypes = list(df.dtypes)  # once: df.dtypes is rebuilt on every access
    if columns is None:
        skip = [k for k in exclude]
        items = []
        for i, c in enumerate(labels):
            if skip and any(_same_label(c, k) for k in skip):
                continue
            dt = dtypes[i]
            if _is_value_dtype(dt) and not looks_like_identifier(c, dt):
                items.append((c, i))
        if not items:
            raise TypeError(
                f"no numeric value columns to summarise (columns: {labels!r}; group keys: "
                f"{list(exclude)!r}); pass columns= to name them"
            )
        return items
    if is_label_of(df, columns):
        wanted: list[Hashable] = [columns]
    elif isinstance(columns, (list, tuple, pd.Index)):
        wanted = list(columns)
    else:
        wanted = [columns]
    missing = [c for c in wanted if not is_label_of(df, c)]
    if missing:
        raise KeyError(f"columns {missing!r} are not in the data; there are {labels!r}")
    items = []
    for c in wanted:
        items += [(c, int(i)) for i in np.flatnonzero([_same_label(c, x) for x in labels])]
    bad = [(c, i) for c, i in items if not _is_value_dtype(dtypes[i])]
    if bad:
        kinds = ", ".join(f"{c!r} ({dtypes[i]})" for c, i in bad)
        raise TypeError(
            f"column(s) {kinds} are not numeric; logstats needs positive real numbers. Convert them "
            f"(e.g. pd.to_numeric) or leave them out of columns=.{_why_not_numeric(df, bad)}"
        )
    return items


def _why_not_numeric(df: pd.DataFrame, bad: list[tuple[Hashable, int]]) -> str:
    """A hint for the commonest non-numeric value columns (non-detects, complex, datetimes)."""
    hints = []
    for c, i in bad:
        col = df.iloc[:, i]
        dt = col.dtype
        if pd.api.types.is_complex_dtype(dt):
            hints.append(f" {c!r} holds complex numbers: take .real or abs() explicitly if that is meant.")
        elif pd.api.types.is_bool_dtype(dt):
            hints.append(f" {c!r} holds booleans: cast explicitly if they are numbers.")
        elif pd.api.types.is_datetime64_any_dtype(dt) or pd.api.types.is_timedelta64_dtype(dt):
            hints.append(f" {c!r} holds {dt} values, which have no logarithm: convert them to a number of "
                         "units (e.g. .dt.total_seconds()).")
        elif pd.api.types.is_object_dtype(dt) or pd.api.types.is_string_dtype(dt):
            text = col.dropna().astype(str).str.strip()
            if text.str.startswith("<").any() or text.str.upper().isin(["ND", "N.D.", "BDL"]).any():
                hints.append(f" {c!r} holds entries such as '<0.5' or 'ND' (non-detects): "
                             "logstats.split_censored(column) turns them into a value and a detection_limit.")
    return "".join(hints)


def _same_label(a: Any, b: Any) -> bool:
    if isinstance(a, tuple) != isinstance(b, tuple):
        return False
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False


def value_columns(df: pd.DataFrame, columns: Any, exclude: Sequence[Hashable] = ()) -> list[Hashable]:
    """The value columns' labels (see :func:`value_items`)."""
    return [c for c, _ in value_items(df, columns, exclude)]


def column_values(s: pd.Series, name: Hashable) -> np.ndarray:
    """A numeric column as float64 (a view when it already is one); pd.NA becomes NaN.

    Anything else (text, objects, booleans, complex, datetimes) is a TypeError naming the column, its
    dtype and what to do (non-detect entries such as ``"<0.5"`` point to :func:`logstats.split_censored`).
    """
    if not _is_value_dtype(s.dtype):
        hint = _why_not_numeric(s.to_frame(), [(name, 0)])
        raise TypeError(f"column {name!r} ({s.dtype}) is not numeric; logstats needs positive real numbers. "
                        f"Convert it (e.g. pd.to_numeric).{hint}")
    if s.dtype == np.float64:
        return s.to_numpy(copy=False)
    return s.to_numpy(dtype=np.float64, na_value=np.nan)


def is_label_of(df: pd.DataFrame, key: Any) -> bool:
    """True when ``key`` is (hashable and) a column label of ``df``: labels of any type are data."""
    if key is None or isinstance(key, (pd.Series, np.ndarray, list, pd.Index)):
        return False
    try:
        return key in df.columns
    except TypeError:  # unhashable
        return False


def is_limit_label(df: pd.DataFrame, value: Any) -> bool:
    """True when a limit keyword names a column. A float is always a number: ``detection_limit=1.0``
    on a table read with ``header=None`` must not become column ``1`` (``1.0 == 1`` in a label lookup),
    which would silently censor the values at themselves; integers and text are labels first."""
    if isinstance(value, (float, np.floating)):
        return False
    return is_label_of(df, value)


def resolve_limit(df: pd.DataFrame, detection_limit: Any, keyword: str = "detection_limit") -> Any:
    """``detection_limit=`` as None, one number, or float64 per-row limits aligned with ``df``.

    A column label of ``df`` takes precedence (labels may be integers; a float is always a number:
    :func:`is_limit_label`); then a real number; then a
    Series, aligned on the index like pandas (in another order, or with extra labels); a Series
    lacking a label of the data is an error naming the keyword (a NaN entry means "no limit": reindex it
    yourself to say so); then an array of the data's length. Anything else is a TypeError naming the keyword.
    """
    if detection_limit is None:
        return None
    if is_limit_label(df, detection_limit):
        return column_values(df[detection_limit], detection_limit)
    if isinstance(detection_limit, (int, float, np.integer, np.floating)) and not isinstance(
            detection_limit, (bool, np.bool_)):
        return float(detection_limit)
    if isinstance(detection_limit, pd.Series):
        s = detection_limit
        if not s.index.equals(df.index):
            if not s.index.is_unique:
                raise ValueError(f"{keyword}= Series has a duplicated index that does not match the "
                                 "data's; pass one aligned on the data's index (or a plain array)")
            _check_covers(s.index, df.index, keyword)
            s = s.reindex(df.index)
        return column_values(s, keyword)
    if isinstance(detection_limit, (np.ndarray, list, tuple, pd.Index)):
        arr = np.asarray(detection_limit)
        if arr.ndim != 1 or len(arr) != len(df):
            raise ValueError(f"{keyword}= array has shape {arr.shape}; the data has {len(df)} rows "
                             "(pass one value per row, a number, or a column label)")
        return column_values(pd.Series(arr), keyword)
    if isinstance(detection_limit, str):
        raise KeyError(f"{keyword}={detection_limit!r} is not a column; there are {list(df.columns)!r}")
    raise TypeError(f"{keyword}= takes a number, a column label or an aligned array, not "
                    f"{type(detection_limit).__name__}")


def nested_codes(keys: pd.DataFrame) -> list[np.ndarray]:
    """Codes of each nesting level (columns outermost first), every level read within its outer ones:
    well ``A1`` on day 1 and ``A1`` on day 2 are two wells. A row with a missing label at a level (or
    an outer one) gets -1 there; the statistics layer counts such rows."""
    out = []
    missing = np.zeros(len(keys), dtype=bool)
    cols = list(keys.columns)
    for i in range(len(cols)):
        missing = missing | keys.iloc[:, i].isna().to_numpy()
        codes = keys.groupby(cols[: i + 1], sort=False, dropna=False, observed=True).ngroup().to_numpy()
        out.append(np.where(missing, -1, codes).astype(np.intp))
    return out


def nested_levels(nested: Any, keyword: str = "nested") -> list[Hashable]:
    if nested is None:
        raise ValueError(f"variance_components needs {keyword}= (the nesting levels, outermost first, e.g. "
                         "nested=['day', 'well'])")
    levels = list(nested) if isinstance(nested, (list, tuple)) else [nested]
    if not levels:
        raise ValueError(f"{keyword}= is empty; name at least one nesting level")
    if len(set(map(repr, levels))) != len(levels):
        raise ValueError(f"{keyword}={levels!r} names a level twice")
    return levels
