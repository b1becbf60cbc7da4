"""Sufficient statistics of the logs, built per axis or per group and merged exactly (numpy only).

For log-normal data ``(n, mean of logs, sum of squared deviations of logs)`` is sufficient. A
:class:`LogMoments` holds that triple, plus the counts of what was excluded, as arrays of any shape.
Building uses a corrected two-pass algorithm; merging uses the parallel update of Chan, Golub & LeVeque
(1979), so chunked, grouped and streamed reductions give the same numbers as one pass over all data.

References
----------
Chan, T. F., Golub, G. H. & LeVeque, R. J. (1979). Updating formulae and a pairwise algorithm for
computing sample variances. Stanford CS report STAN-CS-79-773.
Björck, Å. (1996) and Higham, N. J. (2002), *Accuracy and Stability of Numerical Algorithms*, §1.9:
the corrected two-pass formula ``m2 = Σd² − (Σd)²/n``.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np

from logstats.core.transform import LoggedValues, to_logs

__all__ = [
    "FIELDS",
    "LogMoments",
    "combine_moments",
    "log_moments_by_codes",
    "moments_along",
    "moments_by_codes",
    "normalize_axes",
    "reduce_moments",
]

#: Field order used when moments are stacked into one float array (the dask intermediate).
FIELDS = ("n", "mean_log", "m2_log", "n_missing", "n_nonpositive", "n_censored")
_COUNTS = ("n", "n_missing", "n_nonpositive", "n_censored")


@dataclass(frozen=True)
class LogMoments:
    """Sufficient statistics of the natural logs, element-wise over an array of any shape.

    Attributes
    ----------
    n : int64 array
        Number of valid (positive, finite, non-censored) values.
    mean_log : float64 array
        Mean of their natural logs (NaN where ``n == 0``).
    m2_log : float64 array
        Sum of squared deviations of the logs from ``mean_log`` (NaN where ``n == 0``).
    n_missing, n_nonpositive, n_censored : int64 arrays
        Values skipped because missing, because at or below zero, or because censored.
    """

    n: np.ndarray
    mean_log: np.ndarray
    m2_log: np.ndarray
    n_missing: np.ndarray
    n_nonpositive: np.ndarray
    n_censored: np.ndarray = field(default=None)  # type: ignore[assignment,arg-type]

    def __post_init__(self) -> None:
        if self.n_censored is None:
            object.__setattr__(self, "n_censored", np.zeros_like(np.asarray(self.n)))

    @property
    def shape(self) -> tuple[int, ...]:
        return np.shape(self.n)

    def var_log(self, ddof: float = 1) -> np.ndarray:
        """Variance of the logs with ``n - ddof`` in the denominator (NaN where ``n <= ddof``)."""
        dof = np.asarray(self.n, dtype=np.float64) - ddof
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(dof > 0, np.asarray(self.m2_log) / np.where(dof > 0, dof, 1.0), np.nan)

    def to_dict(self) -> dict[str, np.ndarray]:
        return {f.name: getattr(self, f.name) for f in fields(self)}

    def stack(self) -> np.ndarray:
        """All fields as one float64 array with a trailing axis of length 6 (see ``FIELDS``)."""
        return np.stack([np.asarray(getattr(self, f), dtype=np.float64) for f in FIELDS], axis=-1)

    @classmethod
    def unstack(cls, arr: np.ndarray) -> LogMoments:
        """Inverse of :meth:`stack`."""
        parts = {}
        for i, name in enumerate(FIELDS):
            v = arr[..., i]
            parts[name] = v.astype(np.int64) if name in _COUNTS else v
        return cls(**parts)

    def take(self, index: Any) -> LogMoments:
        return LogMoments(**{k: np.asarray(v)[index] for k, v in self.to_dict().items()})

    def with_policy(self, *, skipna: bool = True, nonpositive: str = "drop") -> LogMoments:
        """Moments with NaN mean and m2 wherever the policy makes the result undefined.

        ``skipna=False`` poisons elements with missing values; ``nonpositive="nan"`` poisons elements
        with non-positive values. (``"raise"`` is checked by the caller, which knows the labels.)
        """
        bad = np.zeros(self.shape, dtype=bool)
        if not skipna:
            bad |= np.asarray(self.n_missing) > 0
        if nonpositive == "nan":
            bad |= np.asarray(self.n_nonpositive) > 0
        if not bad.any():
            return self
        return LogMoments(
            n=self.n,
            mean_log=np.where(bad, np.nan, self.mean_log),
            m2_log=np.where(bad, np.nan, self.m2_log),
            n_missing=self.n_missing,
            n_nonpositive=self.n_nonpositive,
            n_censored=self.n_censored,
        )


def _empty_to_nan(n: np.ndarray, *arrs: np.ndarray) -> list[np.ndarray]:
    return [np.where(n > 0, a, np.nan) for a in arrs]


def moments_along(values: Any, axis: int | Sequence[int] | None = None, *, where: str = "the input",
                  logged: LoggedValues | None = None) -> LogMoments:
    """Log-moments of ``values`` reduced over ``axis`` (an int, a tuple, or None for all).

    Uses numpy's pairwise summation and the corrected two-pass formula, so cancellation (values such
    as 1e7 ± 1e-1) costs no accuracy.
    """
    lv = logged if logged is not None else to_logs(values, where=where)
    y = lv.y
    if axis is None:
        axes = tuple(range(y.ndim))
    else:
        axes = normalize_axes(axis, y.ndim)
    valid = lv.valid
    n = valid.sum(axis=axes)
    yz = np.where(valid, y, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = yz.sum(axis=axes) / n
        d = np.where(valid, y - np.expand_dims(mean, axes), 0.0)
        corr = d.sum(axis=axes)
        m2 = (d * d).sum(axis=axes) - corr * corr / n
        mean = mean + corr / n
    m2 = np.maximum(m2, 0.0)
    mean, m2 = _empty_to_nan(n, mean, m2)
    return LogMoments(
        n=np.asarray(n, dtype=np.int64),
        mean_log=np.asarray(mean, dtype=np.float64),
        m2_log=np.asarray(m2, dtype=np.float64),
        n_missing=np.asarray(lv.missing.sum(axis=axes), dtype=np.int64),
        n_nonpositive=np.asarray(lv.nonpositive.sum(axis=axes), dtype=np.int64),
    )


def normalize_axes(axis: int | Sequence[int], ndim: int) -> tuple[int, ...]:
    """Sorted non-negative axes from an int or a sequence; ValueError when out of range or repeated."""
    seq: tuple[Any, ...] = (axis,) if isinstance(axis, (int, np.integer)) else tuple(axis)
    out = []
    for a in seq:
        a = int(a)
        if not -ndim <= a < ndim:
            raise ValueError(f"axis {a} is out of bounds for an array of {ndim} dimension(s)")
        out.append(a % ndim)
    if len(set(out)) != len(out):
        raise ValueError(f"repeated axis in {axis!r}")
    return tuple(sorted(out))


#: Rows handled at once by :func:`moments_by_codes`; bounds the temporaries to a few times this many floats.
CHUNK_ROWS = 1 << 20


def moments_by_codes(values: Any, codes: Any, ngroups: int, *, where: str = "the input",
                     chunk_rows: int = CHUNK_ROWS) -> LogMoments:
    """Log-moments per group along the **last** axis of ``values``.

    ``codes`` (length = last axis) gives each position's group in ``0 .. ngroups-1``; negative codes
    (missing keys) belong to no group. The result has shape ``values.shape[:-1] + (ngroups,)``. One
    ``np.bincount`` pass per statistic over all groups at once: no Python loop over groups. Long inputs
    are taken ``chunk_rows`` positions at a time and the pieces merged with :func:`merge_two`, which keeps
    the extra memory bounded whatever the length.
    """
    arr = np.asarray(values)
    codes = np.asarray(codes)
    N = arr.shape[-1] if arr.ndim else 1
    if N <= chunk_rows:
        return _moments_by_codes(arr, codes, ngroups, where=where)
    out = None
    for start in range(0, N, chunk_rows):
        part = _moments_by_codes(
            arr[..., start : start + chunk_rows], codes[start : start + chunk_rows], ngroups, where=where
        )
        out = part if out is None else merge_two(out, part)
    assert out is not None
    return out


def log_moments_by_codes(logs: Any, codes: Any, ngroups: int) -> LogMoments:
    """Like :func:`moments_by_codes` for numbers already on the log scale (e.g. replicate means of logs).

    NaN entries are counted as missing; nothing is logged again and nothing is non-positive.
    """
    y = np.asarray(logs, dtype=np.float64)
    lv = LoggedValues(y=y, missing=np.isnan(y), nonpositive=np.zeros(y.shape, dtype=bool))
    return _grouped(lv, np.asarray(codes), ngroups)


def _moments_by_codes(values: Any, codes: Any, ngroups: int, *, where: str) -> LogMoments:
    return _grouped(to_logs(values, where=where), codes, ngroups)


def _grouped(lv: LoggedValues, codes: Any, ngroups: int) -> LogMoments:
    y = lv.y
    codes = np.asarray(codes, dtype=np.intp)
    if y.ndim == 0:
        y = y.reshape(1)
    N = y.shape[-1]
    if codes.shape != (N,):
        raise ValueError(f"codes have shape {codes.shape}, expected ({N},) to match the last axis")
    lead = y.shape[:-1]
    rows = int(np.prod(lead)) if lead else 1
    size = rows * ngroups
    y2 = y.reshape(rows, N)
    if rows == 1:
        idx = np.broadcast_to(codes, (1, N))
    else:
        idx = codes[None, :] + (ngroups * np.arange(rows, dtype=np.intp))[:, None]
        idx = np.where(codes[None, :] >= 0, idx, -1)
    keyed = codes >= 0
    valid = lv.valid.reshape(rows, N) & keyed[None, :]

    if valid.all():
        ik, yk = idx.ravel(), y2.ravel()
    else:
        ik, yk = idx[valid], y2[valid]
    n = np.bincount(ik, minlength=size)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.bincount(ik, weights=yk, minlength=size) / n
        d = yk - mean[ik]
        corr = np.bincount(ik, weights=d, minlength=size)
        m2 = np.bincount(ik, weights=d * d, minlength=size) - corr * corr / n
        mean = mean + corr / n
    m2 = np.maximum(m2, 0.0)
    mean, m2 = _empty_to_nan(n, mean, m2)

    def count(mask: np.ndarray) -> np.ndarray:
        m = mask.reshape(rows, N) & keyed[None, :]
        if not m.any():
            return np.zeros(size, dtype=np.int64)
        return np.bincount(idx[m], minlength=size)

    shape = lead + (ngroups,)
    return LogMoments(
        n=n.astype(np.int64).reshape(shape),
        mean_log=mean.reshape(shape),
        m2_log=m2.reshape(shape),
        n_missing=count(lv.missing).astype(np.int64).reshape(shape),
        n_nonpositive=count(lv.nonpositive).astype(np.int64).reshape(shape),
    )


def reduce_moments(m: LogMoments, axis: int | Sequence[int], *, keepdims: bool = False) -> LogMoments:
    """Merge moments over ``axis`` at once (the k-way form of Chan's update, with a correction pass).

    ``mean = Σ nᵢ mᵢ / N`` then ``m2 = Σ m2ᵢ + Σ nᵢ (mᵢ − mean)²``, with the rounding error of the
    weighted mean removed by a second pass, so the result is independent of how the data were split
    up to rounding.
    """
    axes = normalize_axes(axis, np.ndim(m.n))
    n_i = np.asarray(m.n, dtype=np.float64)
    has = n_i > 0
    mi = np.where(has, m.mean_log, 0.0)
    m2i = np.where(has, m.m2_log, 0.0)
    # poisoned (NaN) elements with n > 0 stay poisoned
    n = n_i.sum(axis=axes, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean0 = (n_i * mi).sum(axis=axes, keepdims=True) / n
        dev = np.where(has, mi - mean0, 0.0)
        corr = (n_i * dev).sum(axis=axes, keepdims=True) / n
        spread = (n_i * dev * dev).sum(axis=axes, keepdims=True)
        m2 = m2i.sum(axis=axes, keepdims=True) + spread - n * corr * corr
        mean = mean0 + corr
    m2 = np.maximum(m2, 0.0)
    mean, m2 = _empty_to_nan(n, mean, m2)

    def total(name: str) -> np.ndarray:
        return np.asarray(getattr(m, name)).sum(axis=axes, keepdims=True)

    out = LogMoments(
        n=n.astype(np.int64),
        mean_log=mean,
        m2_log=m2,
        n_missing=total("n_missing"),
        n_nonpositive=total("n_nonpositive"),
        n_censored=total("n_censored"),
    )
    if keepdims:
        return out
    return LogMoments(**{k: np.squeeze(v, axis=axes) for k, v in out.to_dict().items()})


def merge_two(a: LogMoments, b: LogMoments) -> LogMoments:
    """Chan et al. (1979) pairwise update of two moment sets of the same shape."""
    na = np.asarray(a.n, dtype=np.float64)
    nb = np.asarray(b.n, dtype=np.float64)
    n = na + nb
    with np.errstate(divide="ignore", invalid="ignore"):
        delta = np.asarray(b.mean_log) - np.asarray(a.mean_log)
        mean = np.where(na == 0, b.mean_log, np.where(nb == 0, a.mean_log, a.mean_log + delta * (nb / n)))
        m2 = np.where(
            na == 0,
            b.m2_log,
            np.where(nb == 0, a.m2_log, np.asarray(a.m2_log) + b.m2_log + delta * delta * (na * nb / n)),
        )
    return LogMoments(
        n=np.asarray(a.n + b.n, dtype=np.int64),
        mean_log=np.asarray(mean, dtype=np.float64),
        m2_log=np.asarray(m2, dtype=np.float64),
        n_missing=np.asarray(a.n_missing + b.n_missing, dtype=np.int64),
        n_nonpositive=np.asarray(a.n_nonpositive + b.n_nonpositive, dtype=np.int64),
        n_censored=np.asarray(a.n_censored + b.n_censored, dtype=np.int64),
    )


def combine_moments(parts: Iterable[LogMoments]) -> LogMoments:
    """Merge moment sets of the same shape exactly (Chan et al. 1979 pairwise update, tree order)."""
    items = list(parts)
    if not items:
        raise ValueError("combine_moments needs at least one set of moments")
    shapes = {np.shape(p.n) for p in items}
    if len(shapes) != 1:
        raise ValueError(f"combine_moments needs moments of one shape; got shapes {sorted(shapes)}")
    while len(items) > 1:
        nxt = [merge_two(items[i], items[i + 1]) for i in range(0, len(items) - 1, 2)]
        if len(items) % 2:
            nxt.append(items[-1])
        items = nxt
    return items[0]
