"""``logstats.plan``: power of a replicate-level comparison over a grid of designs, as a DataFrame.

The computation is :func:`logstats.stats.nested.plan_power`; this adapter checks the inputs, builds the
grid and labels the result.
"""

from __future__ import annotations

import math
import numbers
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["plan"]

DEFAULT_REPLICATES = tuple(range(2, 21))
DEFAULT_PER_REPLICATE = (1, 2, 5, 10, 20, 50, 100, 200, 500)


def _real(value: Any, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"{name} must be a real number; got {value!r}")
    out = float(value)
    if not math.isfinite(out):
        raise ValueError(f"{name}={value!r} must be finite")
    return out


def _int_grid(values: Any, name: str, lowest: int) -> np.ndarray:
    arr = np.atleast_1d(np.asarray(values))
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-D list of integers; got shape {arr.shape}")
    if arr.dtype.kind == "f" and np.all(np.isfinite(arr)) and np.all(arr == np.round(arr)):
        arr = arr.astype(np.int64)
    if arr.dtype.kind not in "iu":
        raise TypeError(f"{name} must hold integers; got dtype {arr.dtype}")
    low = arr < lowest
    if low.any():
        raise ValueError(
            f"{name} holds {int(low.sum())} value(s) below {lowest}; every entry must be >= {lowest}"
        )
    return np.unique(arr.astype(np.int64))


def plan(
    ratio: float,
    *,
    var_between: float,
    var_within: float,
    alpha: float = 0.05,
    power: float = 0.8,
    replicates: Any = None,
    per_replicate: Any = None,
) -> pd.DataFrame:
    r"""Power to detect a fold change with replicates of several values each, over a grid of designs.

    Two conditions, each with ``replicates`` replicates (wells, days, animals) of ``per_replicate``
    values (cells) each, are compared by a two-sided two-sample t test on the replicate means of the
    natural logs (the replicate, not the cell, is the unit). The variance of a replicate mean is
    ``var_between + var_within / per_replicate``, so more cells per replicate stop helping once the
    between-replicate component dominates; ``power_limit`` shows that ceiling.

    Parameters
    ----------
    ratio : float
        Ratio of geometric means to detect (``> 0`` and ``!= 1``; 1.5 and 1/1.5 give the same power).
    var_between : float
        Variance of the natural logs between replicates (``>= 0``), e.g. ``var_well`` from
        ``variance_components`` (or the sum of the components above the cells).
    var_within : float
        Variance of the natural logs within a replicate (``>= 0``), e.g. ``var_within``.
    alpha : float
        Two-sided significance level, in (0, 1).
    power : float
        Target power, in (0, 1).
    replicates : sequence of int, optional
        Replicates per condition, each ``>= 2``; default ``2 .. 20``.
    per_replicate : sequence of int, optional
        Values per replicate, each ``>= 1``; default ``(1, 2, 5, 10, 20, 50, 100, 200, 500)``.

    Returns
    -------
    pandas.DataFrame
        One row per (replicates, per_replicate), sorted by both, with columns ``replicates``,
        ``per_replicate``, ``power``, ``meets_target`` (``power >= target``), ``var_replicate_mean``
        (``var_between + var_within / per_replicate``), ``values_per_condition``
        (``replicates * per_replicate``) and ``power_limit`` (the power with infinitely many values per
        replicate, i.e. ``var_replicate_mean = var_between``). ``df.attrs["smallest"]`` is the row (a
        dict) of the smallest design reaching the target (fewest replicates, then fewest values per
        replicate), or None; ``df.attrs`` also keeps the inputs.

    Notes
    -----
    Power is exact for normal replicate mean logs: the non-central t distribution with
    ``2 (replicates - 1)`` degrees of freedom and non-centrality ``ln(ratio) / sqrt(2 v / replicates)``,
    both rejection regions counted (see :func:`logstats.stats.nested.plan_power`). Components estimated
    from a pilot are uncertain; planning with the upper confidence limits is the cautious choice.

    Planning for clinical, regulatory or safety studies needs review by a qualified statistician,
    validated tools, and the applicable local rules and licensed practice.

    References
    ----------
    Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed. Erlbaum, ch. 2.

    Examples
    --------
    >>> from logstats.accessors.planning import plan
    >>> grid = plan(1.5, var_between=0.02, var_within=0.3, replicates=[3, 4, 5, 6],
    ...             per_replicate=[10, 50])
    >>> grid.attrs["smallest"]["replicates"], grid.attrs["smallest"]["per_replicate"]
    (4, 50)
    """
    from logstats.stats.nested import plan_power  # scipy loads on first use, not at import

    r = _real(ratio, "ratio")
    if r <= 0 or r == 1:
        raise ValueError(f"ratio={ratio!r} must be positive and different from 1 (the fold change to detect)")
    vb = _real(var_between, "var_between")
    vw = _real(var_within, "var_within")
    for name, v in (("var_between", vb), ("var_within", vw)):
        if v < 0:
            raise ValueError(f"{name}={v!r} must be >= 0 (a variance of natural logs)")
    if vb == 0 and vw == 0:
        raise ValueError("var_between and var_within are both 0; at least one must be positive")
    a = _real(alpha, "alpha")
    if not 0 < a < 1:
        raise ValueError(f"alpha={alpha!r} must lie strictly between 0 and 1")
    target = _real(power, "power")
    if not 0 < target < 1:
        raise ValueError(f"power={power!r} must lie strictly between 0 and 1 (the target power)")
    k = _int_grid(DEFAULT_REPLICATES if replicates is None else replicates, "replicates", 2)
    m = _int_grid(DEFAULT_PER_REPLICATE if per_replicate is None else per_replicate, "per_replicate", 1)

    kk, mm = np.meshgrid(k, m, indexing="ij")
    kk, mm = kk.ravel(), mm.ravel()
    pw = plan_power(r, vb, vw, kk, mm, a)
    limit = plan_power(r, vb, 0.0, k, np.ones_like(k), a) if vb > 0 else np.ones(k.size)
    df = pd.DataFrame({
        "replicates": kk,
        "per_replicate": mm,
        "power": pw,
        "meets_target": pw >= target,
        "var_replicate_mean": vb + vw / mm.astype(np.float64),
        "values_per_condition": kk * mm,
        "power_limit": np.repeat(limit, m.size),
    })
    hit = np.flatnonzero(df["meets_target"].to_numpy())
    smallest = None
    if hit.size:  # rows are sorted by replicates, then per_replicate: the first hit is the smallest
        row = df.iloc[int(hit[0])]
        smallest = {
            "replicates": int(row["replicates"]),
            "per_replicate": int(row["per_replicate"]),
            "power": float(row["power"]),
            "meets_target": True,
            "var_replicate_mean": float(row["var_replicate_mean"]),
            "values_per_condition": int(row["values_per_condition"]),
            "power_limit": float(row["power_limit"]),
        }
    df.attrs.update({"smallest": smallest, "ratio": r, "var_between": vb, "var_within": vw,
                     "alpha": a, "power": target})
    return df
