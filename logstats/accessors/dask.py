"""Dask back end: chunk-by-chunk log-moments, merged in a tree (imported only when dask data is seen).

Each block is reduced to its log-moments (core), then ``dask.array.reduction`` merges them pairwise
with the k-way Chan update (``reduce_moments``). The reduced dimension is never rechunked into one
block, and nothing computes until asked.
"""

from __future__ import annotations

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
