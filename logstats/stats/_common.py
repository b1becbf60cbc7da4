"""Input checks shared by the statistics modules: 1-D values, group codes, per-row detection limits."""

from __future__ import annotations

import operator
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

    The values are sorted first (one float argsort), then the group codes with a stable sort in the
    smallest integer type that holds them (numpy uses a radix sort for 16-bit keys), which keeps the
    value order within each group: about 3x faster than ``lexsort`` for 1e6 rows and 1,000 groups.
    NaN values sort last within their group, as in ``lexsort``.
    """
    v = np.asarray(values)
    c = np.asarray(codes)
    if v.size < 2:
        return np.arange(v.size)
    order = np.argsort(v)  # ties in value need no order: equal values are interchangeable
    small: type = np.int64
    if c.size and c.min() >= 0:
        small = np.uint16 if ngroups < 2**16 else np.uint32 if ngroups < 2**32 else np.int64
    elif ngroups < 2**15:
        small = np.int16
    elif ngroups < 2**31:
        small = np.int32
    return order[np.argsort(c[order].astype(small), kind="stable")]
