"""Input checks shared by the statistics modules: 1-D values, group codes, per-row detection limits."""

from __future__ import annotations

import operator
from collections.abc import Iterator
from typing import Any

import numpy as np

from logstats.core.transform import as_float_array

__all__: list[str] = []

_LOG_2PI = float(np.log(2.0 * np.pi))


def _values_1d(values: Any, name: str = "values") -> np.ndarray:
    x = as_float_array(values, where=name)
    if x.ndim != 1:
        raise ValueError(f"{name} must be 1-D; got an array of shape {x.shape}")
    return x


def _group_codes(codes: Any, size: int, ngroups: Any) -> tuple[np.ndarray, int]:
    try:
        g = operator.index(ngroups)
    except TypeError:
        raise TypeError(f"ngroups must be an integer; got {ngroups!r}") from None
    if g < 0:
        raise ValueError(f"ngroups must be >= 0; got {g}")
    c = np.asarray(codes)
    if c.size and c.dtype.kind not in "iu":
        raise TypeError(f"codes must be integers (group numbers 0 .. ngroups-1); got dtype {c.dtype}")
    c = c.astype(np.intp, copy=False)
    if c.shape != (size,):
        raise ValueError(f"codes have shape {c.shape}; expected ({size},) to match values")
    too_big = c >= g
    if too_big.any():
        raise ValueError(f"codes hold {int(too_big.sum())} value(s) >= ngroups={g}")
    return c, g


def _count(mask: np.ndarray, codes: np.ndarray, ngroups: int) -> np.ndarray:
    sel = mask & (codes >= 0)
    return np.bincount(codes[sel], minlength=ngroups).astype(np.int64)


def _detection_limits(detection_limit: Any, size: int) -> np.ndarray | None:
    """Per-row detection limits as float64 (NaN = no limit), or None when there are none."""
    if detection_limit is None:
        return None
    dl = as_float_array(detection_limit, where="detection_limit")
    if dl.ndim == 0:
        dl = np.broadcast_to(dl, (size,))
    elif dl.shape != (size,):
        raise ValueError(f"detection_limit has shape {dl.shape}; expected a scalar or shape ({size},)")
    low = dl <= 0  # NaN compares False; -inf is <= 0
    if low.any():
        raise ValueError(
            f"detection_limit holds {int(low.sum())} value(s) at or below zero; a detection limit must be "
            "positive and finite (use NaN for rows without a limit)"
        )
    high = np.isposinf(dl)
    if high.any():
        raise ValueError(
            f"detection_limit holds {int(high.sum())} value(s) of +inf; a detection limit must be positive "
            "and finite (use NaN for rows without a limit)"
        )
    if np.isnan(dl).all():
        return None
    return dl



def group_value_order(values: np.ndarray, codes: np.ndarray, ngroups: int) -> np.ndarray:
    """The permutation that sorts rows by (group, value): ``np.lexsort((values, codes))``, faster.

    The values are sorted first (one float argsort), then the group codes with a stable radix sort
    (:func:`stable_code_order`), which keeps the
    value order within each group: about 3x faster than ``lexsort`` for 1e6 rows and 1,000 groups.
    NaN values sort last within their group, as in ``lexsort``.
    """
    v = np.asarray(values)
    c = np.asarray(codes)
    if v.size < 2:
        return np.arange(v.size)
    order = np.argsort(v)  # ties in value need no order: equal values are interchangeable
    c = c[order]
    low = int(c.min())
    shifted = c - low if low < 0 else c  # negative codes sort first, as in lexsort
    return order[stable_code_order(shifted, max(int(ngroups), int(shifted.max()) + 1))]


def stable_code_order(codes: np.ndarray, ngroups: int) -> np.ndarray:
    """``np.argsort(codes, kind="stable")`` for non-negative codes below ``ngroups``, by radix sorts.

    numpy radix-sorts keys of 16 bits or fewer; codes up to 2**32 are sorted as two 16-bit digits
    (low digit first, then a stable sort by the high digit), about 3x faster than numpy's stable
    sort of 32- or 64-bit keys (timsort) for 1e6 rows and 100,000 groups.
    """
    c = np.asarray(codes)
    if ngroups <= 2**16:
        return np.argsort(c.astype(np.uint16, copy=False), kind="stable")
    if ngroups > 2**32:
        return np.argsort(c, kind="stable")
    order = np.argsort((c & 0xFFFF).astype(np.uint16), kind="stable")
    return order[np.argsort((c[order] >> 16).astype(np.uint16), kind="stable")]


def padded_blocks(values: np.ndarray, codes: np.ndarray, ngroups: int, *, centred: bool = False
                  ) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Each group's values as a row of a padded 2-D block: yields ``(groups, sizes, block, inside, lead)``.

    Row ``i`` of ``block`` holds the ``sizes[i]`` values of group ``groups[i]`` (in row order) at
    columns ``lead[i]`` to ``lead[i] + sizes[i] - 1``; ``inside`` marks them. Without ``centred`` the
    values start at column 0 and NaN pads the row. With ``centred``, ``-inf`` pads the left and
    ``+inf`` the right so that every row's lower median sits in one column, ``(width - 1) // 2``: one
    ``np.partition`` at that column finds the median of every group. Rows are put in group order by
    one stable sort of the codes (:func:`stable_code_order`); the groups come in blocks, one per
    power-of-two class of group sizes (a loop over at most 64 classes, never over groups), so padding
    at most doubles the rows of a block. Codes must be non-negative.
    """
    v = np.asarray(values)
    c = np.asarray(codes)
    if v.size == 0:
        return
    m = max(int(ngroups), int(c.max()) + 1)
    ordered = np.empty(v.size + 2, dtype=np.result_type(v.dtype, np.float16))
    np.take(v, stable_code_order(c, m), out=ordered[:-2])
    ordered[-2:] = (-np.inf, np.inf) if centred else (np.nan, np.nan)
    n = np.bincount(c, minlength=m)
    start = np.zeros(m, dtype=np.intp)
    np.cumsum(n[:-1], out=start[1:])
    has = n > 0
    size_class = np.zeros(m, dtype=np.int64)
    size_class[has] = np.frexp(np.maximum(n[has] - 1, 0).astype(np.float64))[1]  # ceil(log2(n))
    for k in np.unique(size_class[has]):
        groups = np.flatnonzero(has & (size_class == k))
        sizes = n[groups]
        width = int(sizes.max())
        cols = np.arange(width)
        lead = ((width - 1) // 2 - (sizes - 1) // 2) if centred else np.zeros(groups.size, dtype=np.intp)
        at = cols - lead[:, None]
        inside = (at >= 0) & (at < sizes[:, None])
        index = np.where(inside, start[groups][:, None] + at, v.size + 1)  # the right-hand pad
        if centred:
            index[at < 0] = v.size  # the left-hand pad
        yield groups, sizes, ordered[index], inside, lead


def sorted_blocks(values: np.ndarray, codes: np.ndarray,
                  ngroups: int) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Each group's values sorted, as rows of padded 2-D blocks: yields ``(groups, sizes, block, inside)``.

    ``block[i]`` holds the ``sizes[i]`` values of group ``groups[i]`` in ascending order, then NaN
    padding (``inside`` marks the values; NaN values of the input sort last among them). One
    ``np.sort(axis=1)`` per block of :func:`padded_blocks`: sorting many short rows costs a fraction
    of one sort of the whole column.
    """
    for groups, sizes, block, inside, _ in padded_blocks(values, codes, ngroups):
        block.sort(axis=1)
        yield groups, sizes, block, inside


def group_sorted_values(values: np.ndarray, codes: np.ndarray, ngroups: int) -> tuple[np.ndarray, np.ndarray]:
    """The values sorted by (group, value) and their codes: ``values[o], codes[o]`` for
    ``o = np.lexsort((values, codes))``, from :func:`sorted_blocks` (no sort of the whole column:
    about 3-4x faster than :func:`group_value_order` for 1e6 rows and 100-100,000 groups).
    """
    v = np.asarray(values)
    c = np.asarray(codes)
    xs = np.empty(v.shape, dtype=v.dtype)
    cs = np.empty(c.shape, dtype=c.dtype)
    n = np.bincount(c, minlength=ngroups) if c.size else np.zeros(ngroups, dtype=np.intp)
    start = np.zeros(n.size, dtype=np.intp)
    np.cumsum(n[:-1], out=start[1:])
    for groups, _, block, inside in sorted_blocks(v, c, ngroups):
        target = (start[groups][:, None] + np.arange(block.shape[1]))[inside]
        xs[target] = block[inside]
        cs[target] = np.broadcast_to(groups[:, None], block.shape)[inside]
    return xs, cs

