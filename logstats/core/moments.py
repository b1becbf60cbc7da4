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

    @classmethod
    def from_values(cls, values: Any, axis: int | Sequence[int] | None = None) -> LogMoments:
        """Moments of ``values`` over ``axis`` (None = all); see :func:`moments_along`."""
        return moments_along(values, axis=axis)

    @classmethod
    def from_groups(cls, values: Any, codes: Any, ngroups: int) -> LogMoments:
        """Moments per group along the last axis; see :func:`moments_by_codes`."""
        return moments_by_codes(values, codes, ngroups)

    def combine(self, *others: LogMoments) -> LogMoments:
        """Merge with other moment sets of the same shape (Chan et al. 1979)."""
        return combine_moments([self, *others])

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


#: Values handled at once by :func:`moments_along` on large inputs (2 MiB of float64: the temporaries
#: of one block stay in the processor cache).
ALONG_CHUNK = 1 << 18


def moments_along(values: Any, axis: int | Sequence[int] | None = None, *, where: str = "the input",
                  chunk_values: int = ALONG_CHUNK) -> LogMoments:
    """Log-moments of ``values`` reduced over ``axis`` (an int, a tuple, or None for all).

    Uses numpy's pairwise summation and the corrected two-pass formula, so cancellation (values such
    as 1e7 ± 1e-1) costs no accuracy. When the reduced axes are the trailing ones (as the accessors
    arrange) and the input holds more than ``chunk_values`` values, it is taken in blocks: whole rows
    of the kept axes, or slices of the last axis whose moments are merged with :func:`merge_two`. The
    temporaries then stay small and in cache (about 3x faster on 2e7 values), and the result agrees
    with the one-block computation to rounding (closer to the exact value when the last axis is strided).
    """
    arr = np.asarray(values)
    axes = tuple(range(arr.ndim)) if axis is None else normalize_axes(axis, arr.ndim)
    m = _moments_along_blocks(arr, axes, where, chunk_values)

    def of_logs(z: np.ndarray) -> LogMoments:
        return _moments_along(LoggedValues(z, np.isnan(z), np.zeros(z.shape, dtype=bool)), axes)

    return _refine_tight(m, arr, of_logs, lambda p: np.expand_dims(p, axes))


def _moments_along_blocks(arr: np.ndarray, axes: tuple[int, ...], where: str,
                          chunk_values: int) -> LogMoments:
    nd = arr.ndim
    k = len(axes)
    if arr.size <= chunk_values or not axes or axes != tuple(range(nd - k, nd)):
        return _moments_along(to_logs(arr, where=where), axes, own_logs=True)
    if k == nd:
        return _moments_along_last(arr, axes, where, chunk_values)
    rows = arr.shape[0]  # a kept axis: blocks of whole rows, each reduced completely
    step = max(chunk_values // (arr.size // rows), 1)
    parts = [_moments_along_last(arr[s : s + step], axes, where, chunk_values) for s in range(0, rows, step)]
    if len(parts) == 1:
        return parts[0]
    return LogMoments(**{f: np.concatenate([getattr(p, f) for p in parts], axis=0) for f in FIELDS})


def _moments_along_last(arr: np.ndarray, axes: tuple[int, ...], where: str, chunk_values: int) -> LogMoments:
    """Slices of the last (reduced) axis, each about ``chunk_values`` values, merged in order."""
    last = arr.shape[-1]
    step = chunk_values // max(arr.size // max(last, 1), 1)
    if step < 64 or step >= last:  # thin slices would cost more than they save
        return _moments_along(to_logs(arr, where=where), axes, own_logs=True)
    out = None
    for start in range(0, last, step):
        part = _moments_along(to_logs(arr[..., start : start + step], where=where), axes, own_logs=True)
        out = part if out is None else merge_two(out, part)
    assert out is not None
    return out


def _moments_along(lv: LoggedValues, axes: tuple[int, ...], *, own_logs: bool = False) -> LogMoments:
    """Corrected two-pass moments over ``axes``; ``own_logs``: ``lv.y`` may be overwritten (it was made
    here), which saves one array per block: fewer fresh pages, a measurable cost in dask worker threads."""
    y = lv.y
    any_missing = not lv.clean and bool(np.any(lv.missing))
    any_nonpositive = not lv.clean and bool(np.any(lv.nonpositive))
    with np.errstate(divide="ignore", invalid="ignore"):
        if any_missing or any_nonpositive:
            valid = lv.valid
            n = valid.sum(axis=axes)
            mean = np.where(valid, y, 0.0).sum(axis=axes) / n
            d = np.where(valid, y - np.expand_dims(mean, axes), 0.0)
        else:  # every value counts: no masks, no copies beyond the deviations
            count = int(np.prod([y.shape[a] for a in axes], dtype=np.int64))
            n = np.full(tuple(s for i, s in enumerate(y.shape) if i not in axes), count, dtype=np.int64)
            mean = y.sum(axis=axes) / n
            d = np.subtract(y, np.expand_dims(mean, axes), out=y if own_logs else None)
        corr = d.sum(axis=axes)
        np.multiply(d, d, out=d)
        m2 = d.sum(axis=axes) - corr * corr / n
        mean = mean + corr / n
    m2 = np.maximum(m2, 0.0)
    mean, m2 = _empty_to_nan(n, mean, m2)

    def count_of(mask: np.ndarray, anywhere: bool) -> np.ndarray:
        if not anywhere:
            return np.zeros(np.shape(n), dtype=np.int64)
        return np.asarray(mask.sum(axis=axes), dtype=np.int64)

    return LogMoments(
        n=np.asarray(n, dtype=np.int64),
        mean_log=np.asarray(mean, dtype=np.float64),
        m2_log=np.asarray(m2, dtype=np.float64),
        n_missing=count_of(lv.missing, any_missing),
        n_nonpositive=count_of(lv.nonpositive, any_nonpositive),
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


#: Most values handled at once by :func:`moments_by_codes`; bounds its temporaries to a few times this
#: many floats (8 MiB each). The chunk actually used is :func:`chunk_size`.
CHUNK_ROWS = 1 << 20
#: Fewest values per chunk: below this the fixed cost per chunk (a few numpy calls) starts to show.
CHUNK_ROWS_MIN = 1 << 17


def chunk_size(rows: int, ngroups: int, *, most: int = CHUNK_ROWS) -> int:
    """Positions along the grouped axis taken at once by :func:`moments_by_codes`.

    Each chunk costs work in proportion to ``rows * ngroups`` (the per-group sums and their merge), so
    a chunk holds about 16 values per group, and never fewer than ``CHUNK_ROWS_MIN`` nor more than
    ``most`` values. Small chunks stay in the processor cache; on a 2-core machine this was about 1.5x
    faster than one fixed size of 2**20 for 100 or 1,000 groups (see ``benchmarks/``).
    """
    rows = max(int(rows), 1)
    values = min(max(16 * rows * max(int(ngroups), 1), CHUNK_ROWS_MIN), max(int(most), 1))
    return max(values // rows, 1)


def moments_by_codes(values: Any, codes: Any, ngroups: int, *, where: str = "the input",
                     chunk_rows: int | None = None) -> LogMoments:
    """Log-moments per group along the **last** axis of ``values``.

    ``codes`` (length = last axis) gives each position's group in ``0 .. ngroups-1``; negative codes
    (missing keys) belong to no group. The result has shape ``values.shape[:-1] + (ngroups,)``. One
    scatter-add pass per statistic over all groups at once: no Python loop over groups. Long inputs
    are taken ``chunk_rows`` positions at a time (default :func:`chunk_size`) and the pieces merged with
    :func:`merge_two`, which keeps the extra memory bounded whatever the length.
    """
    arr = np.asarray(values)
    codes = np.asarray(codes, dtype=np.intp)
    N = arr.shape[-1] if arr.ndim else 1
    if codes.shape != (N,):
        raise ValueError(f"codes have shape {codes.shape}, expected ({N},) to match the last axis")
    rows = int(np.prod(arr.shape[:-1])) if arr.ndim > 1 else 1
    if chunk_rows is None:
        chunk_rows = chunk_size(rows, ngroups)
    keyed_all = N == 0 or bool(codes.min() >= 0)
    if N <= chunk_rows:
        out = _grouped(to_logs(arr, where=where), codes, ngroups, keyed_all=keyed_all)
    else:
        work = np.empty(rows * chunk_rows)  # the deviations of every chunk, in one reused buffer
        out = None
        for start in range(0, N, chunk_rows):
            part = _grouped(to_logs(arr[..., start : start + chunk_rows], where=where),
                            codes[start : start + chunk_rows], ngroups, keyed_all=keyed_all, work=work)
            out = part if out is None else merge_two(out, part)
    assert out is not None
    return _refine_tight(out, arr, lambda z: log_moments_by_codes(z, codes, ngroups),
                         lambda p: np.take(p, codes, axis=-1))


#: Relative spread of the logs below which the rounding of ``np.log`` itself (about ``eps·|ln x|`` per
#: value) would dominate the deviations; such elements are recomputed from a pivot with ``log1p``.
TIGHT = 1e-3


def _pivot_logs(x: np.ndarray, p: np.ndarray) -> np.ndarray:
    """``ln x − ln p`` accurate to rounding of the *deviation*: ``log1p((x − p)/p)`` near the pivot
    (``x − p`` is exact there, Sterbenz), ``ln x − ln p`` elsewhere; NaN where ``x`` is not positive."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        r = (x - p) / p
        z = np.where(np.abs(r) < 0.5, np.log1p(r), np.log(x) - np.log(p))
    return np.where((x > 0) & np.isfinite(x), z, np.nan)


def _refine_tight(m: LogMoments, values: np.ndarray, moments_of: Any, spread: Any) -> LogMoments:
    """Recompute mean and m2 where the logs are tightly clustered (sd < ``TIGHT``·|mean|).

    There the deviations ``ln xᵢ − ȳ`` are ~1e-8 while ``np.log`` rounds each ``ln xᵢ`` by ~1e-15, so the
    sum of squares would carry that rounding (1e-7 relative on NIST StRD NumAcc4). Taking the logs
    relative to a pivot ``p = exp(ȳ)`` with ``log1p`` keeps every deviation to full precision. This is
    the rare path: ordinary data never take it.
    """
    n = np.asarray(m.n)
    with np.errstate(divide="ignore", invalid="ignore"):
        tight = (n > 1) & (np.sqrt(np.asarray(m.m2_log) / np.maximum(n, 1)) < TIGHT * np.abs(m.mean_log))
    if not tight.any():
        return m
    x = np.asarray(values, dtype=np.float64)
    pivot = np.exp(np.where(tight, m.mean_log, 0.0))
    z = _pivot_logs(x, spread(pivot))
    mz = moments_of(z)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(tight, np.log(pivot) + mz.mean_log, m.mean_log)
    return LogMoments(n=m.n, mean_log=mean, m2_log=np.where(tight, mz.m2_log, m.m2_log),
                      n_missing=m.n_missing, n_nonpositive=m.n_nonpositive, n_censored=m.n_censored)


def log_moments_by_codes(logs: Any, codes: Any, ngroups: int) -> LogMoments:
    """Like :func:`moments_by_codes` for numbers already on the log scale (e.g. replicate means of logs).

    NaN entries are counted as missing; nothing is logged again and nothing is non-positive.
    """
    y = np.asarray(logs, dtype=np.float64)
    lv = LoggedValues(y=y, missing=np.isnan(y), nonpositive=np.zeros(y.shape, dtype=bool))
    return _grouped(lv, np.asarray(codes), ngroups)


#: ``np.add.at`` has had a fast unbuffered loop since numpy 1.25 and with numpy 2 beats ``np.bincount``
#: (about 1.3x per pass, measured with numpy 2.4); both add in element order, so the sums are the same
#: bit for bit.
_FAST_ADD_AT = np.lib.NumpyVersion(np.__version__) >= "2.0.0"


def _scatter_sum(idx: np.ndarray, size: int, weights: np.ndarray | None = None) -> np.ndarray:
    """Per-index sums of ``weights`` (counts without), in element order; ``idx`` in ``0 .. size-1``."""
    if not _FAST_ADD_AT:
        return np.bincount(idx, weights=weights, minlength=size)
    if weights is None:
        out = np.zeros(size, dtype=np.intp)
        np.add.at(out, idx, 1)
    else:
        out = np.zeros(size, dtype=np.float64)
        np.add.at(out, idx, weights)
    return out


def _grouped(lv: LoggedValues, codes: Any, ngroups: int, *, keyed_all: bool | None = None,
             work: np.ndarray | None = None) -> LogMoments:
    """Corrected two-pass moments per group (``keyed_all``: no negative code; computed when None).

    ``work``, a float buffer of at least as many values, receives the deviations (reused across chunks).
    """
    y = lv.y
    codes = np.asarray(codes, dtype=np.intp)
    if y.ndim == 0:
        y = y.reshape(1)
    N = y.shape[-1]
    if codes.shape != (N,):
        raise ValueError(f"codes have shape {codes.shape}, expected ({N},) to match the last axis")
    if keyed_all is None:
        keyed_all = N == 0 or bool(codes.min() >= 0)
    lead = y.shape[:-1]
    rows = int(np.prod(lead)) if lead else 1
    size = rows * ngroups
    if rows == 1:
        idx = codes
    else:
        idx = codes[None, :] + (ngroups * np.arange(rows, dtype=np.intp))[:, None]
        if not keyed_all:
            idx = np.where(codes[None, :] >= 0, idx, -1)
        idx = idx.reshape(-1)
    yf = y.reshape(-1)
    missing = np.asarray(lv.missing).reshape(-1)
    nonpositive = np.asarray(lv.nonpositive).reshape(-1)
    any_missing = not lv.clean and bool(missing.any())
    any_nonpositive = not lv.clean and bool(nonpositive.any())

    if keyed_all and not (any_missing or any_nonpositive):
        ik, yk = idx, yf  # the common case: no copies
    else:
        valid = ~(missing | nonpositive)
        if not keyed_all:
            valid &= idx >= 0
        ik, yk = idx[valid], yf[valid]
    n = _scatter_sum(ik, size)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = _scatter_sum(ik, size, yk) / n
        if work is not None and work.size >= ik.size:
            d = np.take(mean, ik, out=work[: ik.size], mode="clip")  # ik is in range: no check needed
        else:
            d = np.take(mean, ik)
        np.subtract(yk, d, out=d)  # deviations from the first-pass group mean, in one buffer
        corr = _scatter_sum(ik, size, d)
        np.multiply(d, d, out=d)
        m2 = _scatter_sum(ik, size, d) - corr * corr / n
        mean = mean + corr / n
    m2 = np.maximum(m2, 0.0)
    mean, m2 = _empty_to_nan(n, mean, m2)

    def count(mask: np.ndarray, anywhere: bool) -> np.ndarray:
        if not anywhere:
            return np.zeros(size, dtype=np.int64)
        m = mask if keyed_all else mask & (idx >= 0)
        return _scatter_sum(idx[m], size)

    shape = lead + (ngroups,)
    return LogMoments(
        n=n.astype(np.int64).reshape(shape),
        mean_log=mean.reshape(shape),
        m2_log=m2.reshape(shape),
        n_missing=count(missing, any_missing).astype(np.int64).reshape(shape),
        n_nonpositive=count(nonpositive, any_nonpositive).astype(np.int64).reshape(shape),
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
