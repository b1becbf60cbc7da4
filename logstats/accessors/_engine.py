"""The one path every container goes through: a declared method, one policy, one kernel (no formulas here).

Adapters hand the engine an array (numpy or dask) whose reduced axes are last, optional group codes
along the one reduced axis, a :class:`~logstats.methods.Policy` and the method's keywords. The engine

* builds log-moments (core) and finalizes them with the method's moment kernel, or, for methods that
  need the values (order statistics, censoring, resampling), counts and removes what the policy leaves
  out and calls the values kernel once for every group and every kept position together;
* applies the policy around every kernel: ``nonpositive="raise"`` refuses (naming the groups and the
  count), ``"nan"`` and ``skipna=False`` make the affected groups undefined, and every value left out
  is counted in the result (``n_missing``, ``n_nonpositive``);
* returns ``dict[str, array]`` in the declared field order and dtypes: numpy arrays for numpy input
  (no round trip through floats), lazy dask arrays for dask input where the method merges moments.
"""

from __future__ import annotations

import functools
import inspect
import warnings
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from logstats.core.moments import FIELDS, LogMoments, moments_along, moments_by_codes
from logstats.core.transform import LogstatsWarning, as_float_array, nonpositive_message, posinf_message
from logstats.methods import METHODS, Field, Method, Policy, kernel, resolve

__all__ = ["compare", "compute", "is_dask", "raise_for_counts"]

_COUNT_FIELDS = ("n", "n_missing", "n_nonpositive", "n_censored")


def is_dask(data: Any) -> bool:
    mod = type(data).__module__
    return mod.startswith("dask.") and hasattr(data, "chunks")


# --------------------------------------------------------------------------------------------- policy

def raise_for_counts(counts: Any, *, policy: Policy, where: str, labels: Sequence[Any] | None) -> None:
    """The ``nonpositive="raise"`` refusal from per-group counts (last axis = groups)."""
    if policy.nonpositive != "raise":
        return
    counts = np.asarray(counts)
    total = int(counts.sum())
    if total:
        per_group = counts.reshape(-1, counts.shape[-1]).sum(axis=0) if counts.ndim else counts.reshape(1)
        groups = [_plain(labels[int(i)]) for i in np.flatnonzero(per_group)] if labels is not None else None
        raise ValueError(nonpositive_message(where, total, groups))


def _plain(label: Any) -> Any:
    """A label as it prints in Python (``'b'``, ``3``), not as a numpy scalar (``np.str_('b')``)."""
    if isinstance(label, np.generic):
        return label.item()
    if isinstance(label, tuple):
        return tuple(_plain(v) for v in label)
    return label


def inf_message(where: str, posinf: np.ndarray, codes: np.ndarray | None,
                labels: Sequence[Any] | None) -> str:
    """The ``+inf`` refusal (core wording), naming the groups that hold it."""
    groups = None
    if codes is not None and labels is not None:
        hit = np.unique(np.asarray(codes)[posinf & (np.asarray(codes) >= 0)])
        groups = [_plain(labels[int(i)]) for i in hit]
    return posinf_message(where, int(posinf.sum()), groups)


def _undefined(policy: Policy, n_missing: Any, n_nonpositive: Any) -> tuple[np.ndarray, np.ndarray]:
    """Groups the policy makes undefined: (because of missing values, because of non-positive ones)."""
    by_missing = (np.asarray(n_missing) > 0) if not policy.skipna else np.zeros(np.shape(n_missing), bool)
    by_nonpos = (np.asarray(n_nonpositive) > 0) if policy.nonpositive == "nan" else \
        np.zeros(np.shape(n_nonpositive), bool)
    return by_missing, by_nonpos & ~by_missing


def _poison(method: Method, out: dict[str, Any], by_missing: np.ndarray, by_nonpos: np.ndarray) -> None:
    """Make every non-count field of the undefined groups undefined (in place)."""
    bad = by_missing | by_nonpos
    if not bad.any():
        return
    for name, v in out.items():
        f = method.field(name)
        v = np.asarray(v)
        if f.dtype == "float" or (f.dtype == "int" and name not in _COUNT_FIELDS and v.dtype.kind == "f"):
            out[name] = np.where(bad, np.nan, v)
        elif f.dtype == "bool":
            out[name] = np.where(bad, False, v)
        elif f.dtype == "str":
            if f.when_poisoned == "reason":
                reason = np.where(by_missing, "missing", np.where(by_nonpos, "nonpositive", v))
                out[name] = reason.astype(object)
            elif f.when_poisoned == "none":
                blank = v.astype(object)
                blank[bad] = None
                out[name] = blank


def _typed(method: Method, out: dict[str, Any], shape: tuple[int, ...]) -> dict[str, np.ndarray]:
    """Declared fields in declared order with declared dtypes (extra kernel fields kept after them,
    with their own dtype; a count a kernel returns as float becomes an integer)."""
    res: dict[str, np.ndarray] = {}
    declared = [f.name for f in method.fields + method.censored_fields]
    names = [n for n in declared if n in out] + [k for k in out if k not in declared]
    for name in names:
        f = method.field(name)
        v = np.asarray(out[name])
        if v.ndim == 0:
            v = np.broadcast_to(v, shape)
        if f.dtype == "int" and v.dtype.kind != "i":
            v = v.astype(np.int64) if (v.dtype.kind in "ub" or np.isfinite(v).all()) else v
        elif name in declared and f.dtype == "bool" and v.dtype.kind != "b":
            v = v.astype(bool)
        elif name in declared and f.dtype == "float" and v.dtype.kind != "f":
            v = v.astype(np.float64)
        res[name] = v
    return res


# --------------------------------------------------------------------------------------------- kernels

@functools.cache
def _accepted(path: str) -> frozenset[str] | None:
    """Keywords a kernel accepts (None: it takes ``**kwargs``)."""
    params = inspect.signature(kernel(path)).parameters.values()
    if any(p.kind is p.VAR_KEYWORD for p in params):
        return None
    return frozenset(p.name for p in params)


def _call(path: str, *args: Any, params: dict[str, Any], rename: dict[str, str] | None = None) -> Any:
    kw = {(rename or {}).get(k, k): v for k, v in params.items()}
    ok = _accepted(path)
    if ok is not None:
        kw = {k: v for k, v in kw.items() if k in ok}
    return kernel(path)(*args, **kw)


# --------------------------------------------------------------------------------------------- moments

def finalize_moments(method: Method, m: LogMoments, *, policy: Policy, params: dict[str, Any], where: str,
                     labels: Sequence[Any] | None) -> dict[str, np.ndarray]:
    """Policy-checked moments through the method's moment kernel; declared fields and dtypes."""
    raise_for_counts(m.n_nonpositive, policy=policy, where=where, labels=labels)
    by_missing, by_nonpos = _undefined(policy, m.n_missing, m.n_nonpositive)
    use = m if method.name == "moments" else m.with_policy(skipna=policy.skipna,
                                                          nonpositive=policy.kernel_nonpositive)
    out = dict(_call(method.kernel, use, params=params))
    for name in _COUNT_FIELDS:
        if name not in out and name in method.field_names:
            out[name] = getattr(m, name)
    if method.name != "moments":
        _poison(method, out, by_missing, by_nonpos)
    return _typed(method, out, m.shape)


def _moments(data: np.ndarray, nred: int, codes: np.ndarray | None, ngroups: int | None,
             where: str, spread: bool = True) -> LogMoments:
    if codes is None:
        axes = tuple(range(np.ndim(data) - nred, np.ndim(data)))
        return moments_along(data, axis=axes, where=where, spread=spread)
    if nred != 1:
        raise ValueError("grouped reductions take exactly one reduced axis")
    return moments_by_codes(data, codes, int(ngroups or 0), where=where, spread=spread)


def _encode(method: Method, out: dict[str, np.ndarray], names: Sequence[str]) -> np.ndarray:
    """Fields as one float stack (the dask block layout): str fields as codes of their choices."""
    cols = []
    for name in names:
        f = method.field(name)
        v = out[name]
        if f.dtype == "str":
            lookup = {c: float(i) for i, c in enumerate(f.choices)}
            v = np.vectorize(lambda s, lk=lookup: lk.get(s, np.nan), otypes=[np.float64])(v) if v.size \
                else np.zeros(v.shape)
        cols.append(np.asarray(v, dtype=np.float64))
    return np.stack(cols, axis=-1)


def _finalize_block(block: np.ndarray, *, method: str, policy: Policy, params: dict[str, Any], where: str,
                    labels: Sequence[Any] | None, names: tuple[str, ...]) -> np.ndarray:
    md = METHODS[method]
    out = finalize_moments(md, LogMoments.unstack(np.asarray(block)), policy=policy, params=params,
                           where=where, labels=labels)
    return _encode(md, out, names)


def _decode(method: Method, name: str, column: Any) -> Any:
    f = method.field(name)
    if f.dtype == "int":
        return column.astype(np.int64)
    if f.dtype == "bool":
        return column.astype(bool)
    if f.dtype == "str":
        choices = np.asarray(list(f.choices) + [None], dtype=object)

        def names_of(codes: np.ndarray) -> np.ndarray:
            c = np.where(np.isfinite(codes), codes, len(choices) - 1).astype(np.intp)
            return choices[c]

        return column.map_blocks(names_of, dtype=object)
    return column


def _lazy_moments(method: Method, data: Any, *, nred: int, codes: np.ndarray | None, ngroups: int | None,
                  policy: Policy, params: dict[str, Any], where: str,
                  labels: Sequence[Any] | None) -> dict[str, Any]:
    from logstats.accessors.dask import dask_stacked_moments

    st = dask_stacked_moments(data, nred=nred, codes=codes, ngroups=ngroups, where=where, labels=labels,
                              spread=method.spread)
    if method.dask == "whole":
        st = st.rechunk(-1)  # the merged moments: small, one value set per group
    names = method.field_names
    arr = st.map_blocks(_finalize_block, method=method.name, policy=policy, params=params, where=where,
                        labels=labels, names=names, chunks=st.chunks[:-1] + ((len(names),),),
                        dtype=np.float64)
    return {name: _decode(method, name, arr[..., i]) for i, name in enumerate(names)}


# --------------------------------------------------------------------------------------------- values

def finalize_values(method: Method, path: str, data: np.ndarray, *, codes: np.ndarray | None,
                    ngroups: int | None, policy: Policy, params: dict[str, Any], where: str,
                    labels: Sequence[Any] | None) -> dict[str, np.ndarray]:
    """A values kernel over the **last** axis of ``data``, every leading position in one call.

    Position ``r`` of the leading axes and group ``g`` become flat group ``r * G + g``, so the kernel
    sees one 1-D problem however many channels or time points there are. The policy is applied here:
    missing values and (outside censoring) values at or below zero are counted per group and removed
    before the kernel runs; a value at or below its own detection limit is censored and kept.
    """
    x = as_float_array(data, where=where)
    if x.ndim == 0:
        x = x.reshape(1)
    lead = x.shape[:-1]
    rows = int(np.prod(lead)) if lead else 1
    width = x.shape[-1]
    if codes is None:
        g, base = 1, np.zeros(width, dtype=np.intp)
    else:
        g, base = int(ngroups or 0), np.asarray(codes, dtype=np.intp)
    full = np.where(base[None, :] >= 0, base[None, :] + g * np.arange(rows)[:, None], -1).ravel()
    flat = x.reshape(-1)
    posinf = np.isposinf(flat)
    if posinf.any():
        raise ValueError(inf_message(where, posinf, full % g if codes is not None else None, labels))
    missing = np.isnan(flat)
    limit = policy.detection_limit
    censored = np.zeros(flat.shape, dtype=bool)
    if limit is not None:
        if np.ndim(limit) > 0:
            limit = np.broadcast_to(as_float_array(limit, where="detection_limit"), x.shape).reshape(-1)
        with np.errstate(invalid="ignore"):
            censored = ~missing & (flat <= limit)
    with np.errstate(invalid="ignore"):
        nonpos = (flat <= 0) & ~censored
    keyed = full >= 0
    G = rows * g
    n_missing = np.bincount(full[missing & keyed], minlength=G).astype(np.int64)
    n_nonpos = np.bincount(full[nonpos & keyed], minlength=G).astype(np.int64)
    raise_for_counts(n_nonpos, policy=policy,
                     where=where, labels=(list(labels) * rows) if labels is not None else None)
    keep = keyed & ~missing & ~nonpos
    kw = dict(params)
    if limit is not None and path == method.censored:
        kw["detection_limit"] = limit[keep] if np.ndim(limit) > 0 else limit
    for name in method.row_params:
        if isinstance(kw.get(name), list):
            kw[name] = [np.asarray(a).reshape(-1)[keep] for a in kw[name]]
        elif kw.get(name) is not None and np.ndim(kw[name]) > 0:
            kw[name] = np.asarray(kw[name]).reshape(-1)[keep]
    everything = bool(keep.all())
    if method.pools_groups:
        return _pooled(method, path, flat[keep], full[keep], rows, g, kw, n_missing, n_nonpos, policy, lead)
    out = dict(_call(path, flat if everything else flat[keep], full if everything else full[keep], G,
                     params=kw, rename=_RENAME.get(path)))
    out["n_missing"], out["n_nonpositive"] = n_missing, n_nonpos
    by_missing, by_nonpos = _undefined(policy, n_missing, n_nonpos)
    _poison(method, out, by_missing, by_nonpos)
    shape = lead + ((g,) if codes is not None else ())
    return {k: np.asarray(v).reshape(shape) for k, v in _typed(method, out, (G,)).items()}


def _pooled(method: Method, path: str, x: np.ndarray, flat_codes: np.ndarray, rows: int, g: int,
            kw: dict[str, Any], n_missing: np.ndarray, n_nonpos: np.ndarray, policy: Policy,
            lead: tuple[int, ...]) -> dict[str, np.ndarray]:
    """A method pooled over the groups of ``by``: one call per kept position (not per group)."""
    pos = flat_codes // max(g, 1)
    per_row: list[dict[str, np.ndarray]] = []
    for r in range(rows):
        sel = pos == r
        call = {k: (v[sel] if isinstance(v, np.ndarray) and v.shape == x.shape else v) for k, v in kw.items()}
        out = dict(_call(path, x[sel], flat_codes[sel] - r * g, g, params=call, rename=_RENAME.get(path)))
        nm = n_missing.reshape(rows, g)[r].sum()
        nn = n_nonpos.reshape(rows, g)[r].sum()
        out["n_missing"], out["n_nonpositive"] = np.array(nm), np.array(nn)
        by_missing, by_nonpos = _undefined(policy, np.array(nm), np.array(nn))
        _poison(method, out, by_missing, by_nonpos)
        per_row.append(_typed(method, out, ()))
    names = list(per_row[0]) if per_row else list(method.field_names)
    return {k: np.array([np.asarray(p[k]).item() if np.ndim(p[k]) == 0 else p[k] for p in per_row],
                        dtype=per_row[0][k].dtype if per_row else np.float64).reshape(lead)
            for k in names}


#: Keyword renames between a method's keywords and its censored kernel's.
_RENAME: dict[str, dict[str, str]] = {
    "logstats.stats.censored:censored_summary": {"censored_method": "method"},
}


# --------------------------------------------------------------------------------------------- entry

def compute(method: Method | str, data: Any, *, nred: int = 1, codes: np.ndarray | None = None,
            ngroups: int | None = None, policy: Policy, params: dict[str, Any] | None = None,
            where: str = "the input", labels: Sequence[Any] | None = None) -> dict[str, Any]:
    """Run a declared method over the last ``nred`` axes of ``data`` (grouped by ``codes`` along one).

    Results have shape ``data.shape[:-nred]`` (plus ``(ngroups,)`` with ``codes``). Moment methods on
    dask input stay lazy; methods that need the values load them (their declaration says so).
    """
    md = METHODS[method] if isinstance(method, str) else method
    params = {**md.defaults(), **(params or {})}
    if md.variant is not None:
        switch = params.pop(md.variant[0], None)
        md = resolve(md, {md.variant[0]: switch})
        params = {k: v for k, v in params.items() if k in md.defaults() or k == "detection_limit"}
    params.pop("detection_limit", None)  # carried by the policy
    if policy.censoring and md.censored is None:
        raise TypeError(f"{md.name}() takes no detection_limit= (it has no censored form)")
    addons = [(p, a) for p, a in ADDONS.get(md.name, ()) if params.get(p)]
    for p, _ in ADDONS.get(md.name, ()):
        params.pop(p, None)
    if md.needs_values(params, policy):
        arr = np.asarray(data)
        arr = arr.reshape(arr.shape[: arr.ndim - nred] + (-1,)) if arr.ndim else arr.reshape(1)
        if policy.censoring and np.ndim(policy.detection_limit) > 0:
            lim = np.broadcast_to(np.asarray(policy.detection_limit, dtype=np.float64), np.shape(data))
            policy = Policy(policy.skipna, policy.nonpositive, lim.reshape(arr.shape))
        for name in md.row_params:  # one value per data value: laid out like the data
            v = params.get(name)
            if isinstance(v, list):  # several aligned arrays (one per nesting level)
                params[name] = [np.broadcast_to(np.asarray(a), np.shape(data)).reshape(arr.shape) for a in v]
            elif v is not None and np.ndim(v) > 0:
                v = np.broadcast_to(as_float_array(v, where=f"{name}="), np.shape(data))
                params[name] = v.reshape(arr.shape)
        out = finalize_values(md, md.kernel_for(params, policy), arr, codes=codes, ngroups=ngroups,
                              policy=policy, params=params, where=where, labels=labels)
    elif is_dask(data):
        out = _lazy_moments(md, data, nred=nred, codes=codes, ngroups=ngroups, policy=policy, params=params,
                            where=where, labels=labels)
    else:
        arr = np.asarray(data)
        try:
            m = _moments(arr, nred, codes, ngroups, where, md.spread)
        except ValueError as exc:  # +inf: say in which groups
            if "+inf" not in str(exc) or codes is None:
                raise
            hit = np.asarray(np.isposinf(as_float_array(arr, where=where)))
            per_value = np.asarray(hit.reshape(-1, hit.shape[-1]).any(axis=0))
            raise ValueError(inf_message(where, per_value, codes, labels)) from None
        out = finalize_moments(md, m, policy=policy, params=params, where=where, labels=labels)
    for _p, addon in addons:
        more = compute(addon, data, nred=nred, codes=codes, ngroups=ngroups, policy=policy,
                       params={k: v for k, v in params.items() if k in addon.defaults()}, where=where,
                       labels=labels)
        out.update({k: v for k, v in more.items() if k not in out})
    return out


def compute_columns(method: Method, data: np.ndarray, *, wheres: Sequence[str], codes: np.ndarray | None,
                    ngroups: int | None, policy: Policy, params: dict[str, Any],
                    labels: Sequence[Any] | None) -> dict[str, np.ndarray]:
    """A moment method for many value columns at once: ``data`` is ``(columns, values)``, one pass over
    all of them (no per-column Python work), refusals naming the first column at fault. Fields have
    shape ``(columns,)`` (plus ``(ngroups,)`` with ``codes``)."""
    params = {**method.defaults(), **params}
    params.pop("detection_limit", None)
    try:
        m = _moments(data, 1, codes, ngroups, "the input", method.spread)
    except ValueError as exc:
        if "+inf" not in str(exc):
            raise
        hit = np.isposinf(data)
        i = int(np.flatnonzero(hit.any(axis=1))[0])
        raise ValueError(inf_message(wheres[i], hit[i], codes, labels)) from None
    if policy.nonpositive == "raise":
        bad = np.asarray(m.n_nonpositive).reshape(len(wheres), -1)
        hit_cols = np.flatnonzero(bad.sum(axis=1))
        if hit_cols.size:
            i = int(hit_cols[0])
            raise_for_counts(bad[i], policy=policy, where=wheres[i], labels=labels)
    return finalize_moments(method, m, policy=policy, params=params, where=wheres[0], labels=labels)


def _addons() -> dict[str, tuple[tuple[str, Method], ...]]:
    from logstats.methods import LINEAR

    return {"summary": (("linear", LINEAR),)}


ADDONS = _addons()


# --------------------------------------------------------------------------------------------- compare

def compare(values: np.ndarray, level_codes: np.ndarray, n_levels: int, reference: int, *, policy: Policy,
            labels: Sequence[Any], where: str, stratum_codes: np.ndarray | None = None, n_strata: int = 1,
            replicate_codes: np.ndarray | None = None, n_replicates: int | None = None,
            params: dict[str, Any]) -> dict[str, np.ndarray]:
    """Fold changes of every level against ``reference`` for all strata at once, with the shared
    policy; every field has shape ``(n_strata, n_levels)``, the reference column included."""
    md = METHODS["fold_change"]
    _check_compare_options(params)
    _refuse_posinf(values, level_codes, labels, where)
    kw = {**{k: v for k, v in params.items() if k not in ("replicate", "within")},
          "nonpositive": policy.kernel_nonpositive, "skipna": policy.skipna}
    if policy.censoring:
        from logstats.stats.censored_compare import censored_fold_change

        lim = np.broadcast_to(np.asarray(policy.detection_limit, dtype=np.float64), np.shape(values))
        keep = {k: kw[k] for k in ("confidence_level", "adjust", "skipna", "nonpositive")}
        if replicate_codes is not None:
            from logstats.stats.censored_compare import censored_replicate_fold_change

            test = {k: v for k, v in kw.items() if k not in ("nonpositive", "skipna")}
            res = censored_replicate_fold_change(
                values, level_codes, n_levels, reference, detection_limit=lim,
                replicate_codes=replicate_codes, n_replicates=int(n_replicates or 0),
                stratum_codes=stratum_codes, n_strata=n_strata,
                nonpositive=policy.kernel_nonpositive, skipna=policy.skipna, where=where, **test)
        elif params.get("paired") or params.get("equivalence") is not None:
            raise ValueError("detection_limit= in fold_change with every value as a unit does not combine "
                             "with paired=True or equivalence= (pass replicate= to compare replicates)")
        else:
            res = censored_fold_change(values, level_codes, n_levels, reference, detection_limit=lim,
                                       stratum_codes=stratum_codes, n_strata=n_strata, **keep)
        res = _reference_counts(res, reference)
    else:
        res = kernel(md.kernel)(values, level_codes, n_levels, reference, stratum_codes=stratum_codes,
                                n_strata=n_strata, replicate_codes=replicate_codes,
                                n_replicates=n_replicates, where=where, **kw)
    raise_for_counts(res["n_nonpositive"], policy=policy, where=where, labels=labels)
    return res


def compare_nested(values: np.ndarray, level_codes: np.ndarray, n_levels: int, reference: int, *,
                   policy: Policy, labels: Sequence[Any], where: str, nested: Sequence[np.ndarray],
                   names: Sequence[str], stratum_codes: np.ndarray | None = None, n_strata: int = 1,
                   params: dict[str, Any]) -> dict[str, np.ndarray]:
    """:func:`compare` with nested replicates (:func:`logstats.stats.nested.nested_fold_change`), with
    the shared policy; shapes ``(n_strata, n_levels)``."""
    from logstats.stats.nested import nested_fold_change

    _check_compare_options(params)
    _refuse_posinf(values, level_codes, labels, where)
    if policy.censoring:
        raise ValueError("detection_limit= in fold_change does not combine with nested replicate= yet")
    res = nested_fold_change(values, level_codes, n_levels, reference, nested_codes=list(nested),
                             names=list(names), stratum_codes=stratum_codes, n_strata=n_strata,
                             nonpositive=policy.kernel_nonpositive, skipna=policy.skipna, where=where,
                             **params)
    raise_for_counts(res["n_nonpositive"], policy=policy, where=where, labels=labels)
    return res


def compare_from_moments(m: LogMoments, stratum_level: np.ndarray, n_levels: int, reference: int, *,
                         policy: Policy, labels: Sequence[Any], where: str, params: dict[str, Any],
                         **layout: Any) -> dict[str, np.ndarray]:
    """:func:`compare` for moments already built per (stratum, level) or per replicate (dask partitions);
    ``stratum_level`` is each row's flat index ``stratum * n_levels + level``."""
    from logstats.stats.compare import fold_change_moments

    _check_compare_options(params)
    if policy.censoring:
        raise ValueError("detection_limit= in fold_change needs the values: compute the dask DataFrame "
                         "first (the censored regression cannot be merged from moments)")
    res = fold_change_moments(m, stratum_level, n_levels, reference, nonpositive=policy.kernel_nonpositive,
                              skipna=policy.skipna, **params, **layout)
    raise_for_counts(res["n_nonpositive"], policy=policy, where=where, labels=labels)
    return res


def _check_compare_options(params: dict[str, Any]) -> None:
    """Option type errors name the option (``paired="yes"`` is not silently true)."""
    for key in ("paired", "equal_var"):
        if key in params and not isinstance(params[key], (bool, np.bool_)):
            raise TypeError(f"fold_change(): {key}= must be True or False; got {params[key]!r}")
    level = params.get("confidence_level", 0.95)
    if not isinstance(level, (int, float, np.integer, np.floating)) or isinstance(level, (bool, np.bool_)):
        raise TypeError(f"fold_change(): confidence_level= must be a number; got {level!r}")


def _refuse_posinf(values: np.ndarray, level_codes: np.ndarray, labels: Sequence[Any] | None,
                   where: str) -> None:
    """``+inf`` is refused before any kernel runs, naming the levels that hold it (as every method)."""
    x = np.asarray(values)
    if x.dtype.kind != "f":
        return
    posinf = np.isposinf(x).reshape(-1)
    if posinf.any():
        codes = np.broadcast_to(np.asarray(level_codes), x.shape).reshape(-1)
        raise ValueError(inf_message(where, posinf, codes, labels))


def _reference_counts(res: dict[str, np.ndarray], reference: int) -> dict[str, np.ndarray]:
    """The reference level's own counts of values left out, beside each level's (every fold-change
    kernel reports them, so every unit is counted somewhere; the censored kernel reports per level only)."""
    res = dict(res)
    for name in ("n_missing", "n_nonpositive"):
        ref_name = f"{name}_reference"
        if name in res and ref_name not in res:
            v = np.asarray(res[name])
            res[ref_name] = np.broadcast_to(v[..., reference : reference + 1], v.shape).copy()
    return res


def warn_if_empty(ratio: np.ndarray, *, reference: Any, where: str, paired: bool, n: np.ndarray,
                  n_reference: np.ndarray, stacklevel: int = 3) -> None:
    """Say why a comparison gave no number at all (a LogstatsWarning), instead of an empty table."""
    r = np.asarray(ratio, dtype=np.float64)
    if r.size == 0 or np.isfinite(r).any():
        return
    if paired and int(np.asarray(n).sum()) == 0:
        why = ("no replicate label of any level is shared with the reference level, so nothing could be "
               "paired; check replicate= or pass paired=False")
    elif int(np.asarray(n_reference).sum()) == 0:
        why = f"the reference level {reference!r} has no usable value"
    else:
        why = "every level has fewer than two usable units, or the policy made every group undefined"
    warnings.warn(f"fold_change on {where}: no comparison could be computed: {why}", LogstatsWarning,
                  stacklevel=stacklevel)


def field_of(method: str, name: str) -> Field:
    return METHODS[method].field(name)


def names_of(method: str) -> tuple[str, ...]:
    return METHODS[method].field_names


_ = (Callable, FIELDS)
