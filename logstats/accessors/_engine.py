"""The one reduction path every container goes through (adapter layer: no formulas here).

Data arrive as a numpy or dask array whose reduced axes are last. The engine builds log-moments per
block (core), merges them (core), then *finalizes* them into the requested fields (statistics layer).
The same finalizer runs on numpy results directly and on dask results block by block, so a dask-backed
input gives lazy results equal to the in-memory ones.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from logstats.core.moments import FIELDS, LogMoments, moments_along, moments_by_codes
from logstats.core.transform import check_nonpositive, nonpositive_message
from logstats.stats import estimate

__all__ = ["FINALIZERS", "finalize", "is_dask", "stacked_moments"]


def is_dask(data: Any) -> bool:
    mod = type(data).__module__
    return mod.startswith("dask.") and hasattr(data, "chunks")


def stacked_moments(data: Any, *, nred: int, codes: np.ndarray | None = None, ngroups: int | None = None,
                    where: str = "the input") -> Any:
    """Moments of ``data`` over its last ``nred`` axes, stacked with a trailing field axis (``FIELDS``).

    Without ``codes`` the result has shape ``data.shape[:-nred] + (6,)``; with ``codes`` (one reduced
    axis) ``data.shape[:-1] + (ngroups, 6)``. Dask arrays stay lazy (see :mod:`logstats.accessors.dask`).
    """
    if is_dask(data):
        from logstats.accessors.dask import dask_stacked_moments

        return dask_stacked_moments(data, nred=nred, codes=codes, ngroups=ngroups, where=where)
    if codes is None:
        axes = tuple(range(np.ndim(data) - nred, np.ndim(data)))
        return moments_along(data, axis=axes, where=where).stack()
    if nred != 1:
        raise ValueError("grouped reductions take exactly one reduced axis")
    return moments_by_codes(data, codes, int(ngroups or 0), where=where).stack()


# --------------------------------------------------------------------------- finalizers
# Each maps policy-checked LogMoments to an ordered dict of float arrays.

def _fields_moments(m: LogMoments, **_: Any) -> dict[str, np.ndarray]:
    return m.to_dict()


def _fields_summary(m: LogMoments, *, confidence_level: float = 0.95, ddof: float = 1,
                    **_: Any) -> dict[str, np.ndarray]:
    return estimate.summary_fields(m, confidence_level=confidence_level, ddof=ddof)


def _fields_gmean(m: LogMoments, **_: Any) -> dict[str, np.ndarray]:
    return {"gmean": estimate.gmean(m)}


def _fields_gsd(m: LogMoments, *, ddof: float = 1, **_: Any) -> dict[str, np.ndarray]:
    return {"gsd": estimate.gsd(m, ddof)}


def _fields_gcv(m: LogMoments, *, ddof: float = 1, **_: Any) -> dict[str, np.ndarray]:
    return {"gcv": estimate.gcv(m, ddof)}


#: ``status`` of a closed-form fit, by the code the finalizer stores (strings cannot travel in the
#: float stack); the names are those of :data:`logstats.stats.censored.FIT_STATUSES`.
CLOSED_FIT_STATUS = ("closed_form", "degenerate", "empty", "missing", "nonpositive")


def _fields_fit(m: LogMoments, *, skipna: bool = True, nonpositive: str = "drop",
                **_: Any) -> dict[str, np.ndarray]:
    from logstats.stats.censored import closed_form_fit

    cf = closed_form_fit(m)
    n = np.asarray(m.n)
    mu, sigma, degenerate = cf["mu"], cf["sigma"], cf["degenerate"]
    status = np.where(n == 0, 2, np.where(degenerate, 1, 0))
    poisoned = np.isnan(mu) & (n > 0)
    if not skipna:
        status = np.where(poisoned & (np.asarray(m.n_missing) > 0), 3, status)
    status = np.where(poisoned & (status != 3), 4, status)
    ok = status == 0
    return {
        "mu": mu,
        "sigma": np.where(degenerate, 0.0, sigma),
        "n": n,
        "n_censored": np.asarray(m.n_censored),
        "loglik": np.where(degenerate, np.inf, cf["loglik"]),
        "converged": ok.astype(np.float64),
        "se_mu": np.where(ok, cf["se_mu"], np.nan),
        "se_sigma": np.where(ok, cf["se_sigma"], np.nan),
        "n_iter": np.zeros(n.shape),
        "n_missing": np.asarray(m.n_missing),
        "n_nonpositive": np.asarray(m.n_nonpositive),
        "status": status.astype(np.float64),
    }


def _fields_lognormal_mean(m: LogMoments, **kw: Any) -> dict[str, np.ndarray]:
    from logstats.stats.lnmean import lognormal_mean

    keep = {k: kw[k] for k in ("method", "confidence_level", "random_state", "n_draws") if k in kw}
    res = lognormal_mean(m, **keep)
    return {"estimate": res["estimate"], "ci_low": res["ci_low"], "ci_high": res["ci_high"],
            "n": np.asarray(m.n), "n_missing": np.asarray(m.n_missing),
            "n_nonpositive": np.asarray(m.n_nonpositive)}


FINALIZERS: dict[str, tuple[Callable[..., dict[str, np.ndarray]], tuple[str, ...]]] = {
    "moments": (_fields_moments, FIELDS),
    "summary": (
        _fields_summary,
        ("n", "n_missing", "n_nonpositive", "gmean", "gsd", "gcv", "ci_low", "ci_high", "ci_factor"),
    ),
    "gmean": (_fields_gmean, ("gmean",)),
    "gsd": (_fields_gsd, ("gsd",)),
    "gcv": (_fields_gcv, ("gcv",)),
    "fit": (_fields_fit, ("mu", "sigma", "n", "n_censored", "loglik", "converged", "se_mu", "se_sigma",
                          "n_iter", "n_missing", "n_nonpositive", "status")),
    "lognormal_mean": (_fields_lognormal_mean, ("estimate", "ci_low", "ci_high", "n", "n_missing",
                                                "n_nonpositive")),
}
#: Finalizers that must see all groups at once (Monte Carlo draws are laid out over every group, so a
#: dask result equals the in-memory one only if the small merged moments are finalized in one block).
WHOLE_BLOCK = frozenset({"lognormal_mean"})

INT_FIELDS = frozenset({"n", "n_missing", "n_nonpositive", "n_censored", "n_iter"})


def register_finalizer(kind: str, fn: Callable[..., dict[str, np.ndarray]], names: Sequence[str]) -> None:
    FINALIZERS[kind] = (fn, tuple(names))


def check_policy(m: LogMoments, *, nonpositive: str, where: str, labels: Sequence[Any] | None) -> None:
    """Raise for ``nonpositive="raise"``, naming the groups (last axis) and the count."""
    if nonpositive != "raise":
        return
    bad = np.asarray(m.n_nonpositive)
    total = int(bad.sum())
    if not total:
        return
    groups = None
    if labels is not None and bad.ndim >= 1:
        per_group = bad.reshape(-1, bad.shape[-1]).sum(axis=0)
        groups = [labels[int(i)] for i in np.flatnonzero(per_group)]
    raise ValueError(nonpositive_message(where, total, groups))


def finalize_numpy(stacked: np.ndarray, *, kind: str, skipna: bool, nonpositive: str, where: str,
                   labels: Sequence[Any] | None, params: dict[str, Any]) -> np.ndarray:
    fn, names = FINALIZERS[kind]
    m = LogMoments.unstack(np.asarray(stacked))
    check_policy(m, nonpositive=nonpositive, where=where, labels=labels)
    if kind != "moments":
        m = m.with_policy(skipna=skipna, nonpositive=nonpositive)
    out = fn(m, **params)
    return np.stack([np.asarray(out[k], dtype=np.float64) for k in names], axis=-1)


def finalize(stacked: Any, *, kind: str, skipna: bool = True, nonpositive: str = "raise",
             where: str = "the input", labels: Sequence[Any] | None = None,
             params: dict[str, Any] | None = None) -> tuple[Any, tuple[str, ...]]:
    """Turn stacked moments into stacked result fields; lazy for dask input.

    Returns ``(array with trailing field axis, field names)``.
    """
    check_nonpositive(nonpositive)
    if kind not in FINALIZERS:
        raise ValueError(f"unknown reduction {kind!r}")
    names = FINALIZERS[kind][1]
    kw: dict[str, Any] = dict(kind=kind, skipna=skipna, nonpositive=nonpositive, where=where,
                              labels=labels, params=params or {})
    if is_dask(stacked):
        if kind in WHOLE_BLOCK:
            stacked = stacked.rechunk(-1)  # the merged moments: small, one value set per group
        chunks = stacked.chunks[:-1] + ((len(names),),)
        return stacked.map_blocks(finalize_numpy, chunks=chunks, dtype=np.float64, **kw), names
    return finalize_numpy(stacked, **kw), names


# --------------------------------------------------------------------------- raw-value methods
# Fits, the scale check and the log-normal mean need more than moments (censoring, order
# statistics, resampling). They run on 1-D values with group codes; this applies the shared policy.

def raise_for_counts(counts: np.ndarray, *, nonpositive: str, where: str,
                     labels: Sequence[Any] | None) -> None:
    """The ``nonpositive="raise"`` refusal from per-group counts (last axis = groups)."""
    if nonpositive != "raise":
        return
    counts = np.asarray(counts)
    total = int(counts.sum())
    if total:
        per_group = counts.reshape(-1, counts.shape[-1]).sum(axis=0) if counts.ndim else counts
        groups = [labels[int(i)] for i in np.flatnonzero(per_group)] if labels is not None else None
        raise ValueError(nonpositive_message(where, total, groups))


def grouped_method(kind: str, values: np.ndarray, codes: np.ndarray, ngroups: int, *, where: str,
                   labels: Sequence[Any] | None = None, nonpositive: str = "raise", skipna: bool = True,
                   **kw: Any) -> dict[str, np.ndarray]:
    """Run ``fit``, ``scale_check`` or ``lognormal_mean`` for all groups at once."""
    from logstats.stats import censored, lnmean, scale

    check_nonpositive(nonpositive)
    policy = "drop" if nonpositive == "raise" else nonpositive
    if kind == "fit":
        # with a limit, values at or below it (zeros and negatives included) are censored, not refused
        limit = kw.pop("detection_limit", None)
        res = censored.fit_lognormal(values, codes, ngroups, detection_limit=limit, nonpositive=policy,
                                skipna=skipna, **kw)
    elif kind == "scale_check":
        res = scale.scale_check(values, codes, ngroups, nonpositive=policy, skipna=skipna)
    elif kind == "lognormal_mean":
        m = moments_by_codes(values, codes, ngroups, where=where)
        raise_for_counts(m.n_nonpositive, nonpositive=nonpositive, where=where, labels=labels)
        m = m.with_policy(skipna=skipna, nonpositive=policy)
        method = kw.get("method", "cox")
        if method == "bootstrap":
            kw = {**kw, "values": values, "codes": codes}
        res = lnmean.lognormal_mean(m, **kw)
        res = {**res, "n": m.n, "n_missing": m.n_missing, "n_nonpositive": m.n_nonpositive}
    else:
        raise ValueError(f"unknown method {kind!r}")
    raise_for_counts(res["n_nonpositive"], nonpositive=nonpositive, where=where, labels=labels)
    return res


def raw_reduce(kind: str, data: np.ndarray, *, codes: np.ndarray | None = None, ngroups: int | None = None,
               where: str = "the input", labels: Sequence[Any] | None = None, nonpositive: str = "raise",
               skipna: bool = True, detection_limit: Any = None, **kw: Any) -> dict[str, np.ndarray]:
    """A raw-value method over the **last** axis of ``data``, every leading position in one pass.

    Position ``r`` of the leading axes and group ``g`` become flat group ``r * G + g``, so the
    statistics layer sees one 1-D problem however many channels or time points there are. Results
    have shape ``data.shape[:-1]`` (plus ``(G,)`` with ``codes``). ``detection_limit``: a number or
    an array of ``data``'s shape.
    """
    data = np.asarray(data)
    if data.ndim == 0:
        data = data.reshape(1)
    lead = data.shape[:-1]
    rows = int(np.prod(lead)) if lead else 1
    width = data.shape[-1]
    if codes is None:
        g, base = 1, np.zeros(width, dtype=np.intp)
    else:
        g, base = int(ngroups or 0), np.asarray(codes, dtype=np.intp)
    full = np.where(base[None, :] >= 0, base[None, :] + g * np.arange(rows)[:, None], -1).ravel()
    if detection_limit is not None and np.ndim(detection_limit) > 0:
        detection_limit = np.broadcast_to(np.asarray(detection_limit, dtype=np.float64), data.shape).ravel()
    if detection_limit is not None:
        kw["detection_limit"] = detection_limit
    res = grouped_method(kind, data.reshape(-1), full, rows * g, where=where,
                         labels=(list(labels) * rows) if labels is not None else None,
                         nonpositive=nonpositive, skipna=skipna, **kw)
    shape = lead + ((g,) if codes is not None else ())
    return {k: np.asarray(v).reshape(shape) for k, v in res.items()}


def fold_change(values: np.ndarray, level_codes: np.ndarray, n_levels: int, reference: int, *,
                labels: Sequence[Any], where: str, nonpositive: str = "raise", skipna: bool = True,
                stratum_codes: np.ndarray | None = None, n_strata: int = 1,
                **kw: Any) -> dict[str, np.ndarray]:
    """Fold changes of every level against ``reference`` for all strata at once, with the shared
    policy (``nonpositive="raise"`` refuses, naming the levels); shapes ``(n_strata, n_levels)``."""
    from logstats.stats.compare import fold_change_codes

    check_nonpositive(nonpositive)
    res = fold_change_codes(values, level_codes, n_levels, reference, stratum_codes=stratum_codes,
                            n_strata=n_strata, nonpositive="drop" if nonpositive == "raise" else nonpositive,
                            skipna=skipna, where=where, **kw)
    raise_for_counts(res["n_nonpositive"], nonpositive=nonpositive, where=where, labels=labels)
    return res


def fold_change_from_moments(m: LogMoments, cell: np.ndarray, n_levels: int, reference: int, *,
                             labels: Sequence[Any], where: str, nonpositive: str = "raise",
                             skipna: bool = True, **kw: Any) -> dict[str, np.ndarray]:
    """:func:`fold_change` for moments already built per cell or per replicate (dask partitions)."""
    from logstats.stats.compare import fold_change_moments

    check_nonpositive(nonpositive)
    res = fold_change_moments(m, cell, n_levels, reference,
                              nonpositive="drop" if nonpositive == "raise" else nonpositive,
                              skipna=skipna, **kw)
    raise_for_counts(res["n_nonpositive"], nonpositive=nonpositive, where=where, labels=labels)
    return res
