"""Fold changes: ratios of geometric means with t intervals, equivalence tests and multiplicity control.

Everything here works on the natural logs. The ratio of two geometric means is ``exp(ȳ₁ − ȳ₂)``; its
interval and p-value come from Welch's (or Student's) t on the logs, or from the one-sample t on
paired differences of log means. Functions are pure numpy/scipy and vectorised over comparisons: the
moments of every group come from one ``np.bincount`` pass (:func:`~logstats.core.moments.moments_by_codes`)
and every comparison is one element of an array.

Conventions shared by all functions
-----------------------------------
- Variances of the logs use ``ddof=1`` (the unbiased sample variance), as in the t tests.
- A side with fewer than two values gives NaN for the interval, statistic, df and p-value (the ratio
  itself is still given when both sides have at least one value). Nothing raises for small groups.
- Zero variance on both sides (every log identical within each group) follows scipy's
  ``ttest_ind``/``ttest_rel``: the standard error is 0, so ``statistic`` is ±inf with ``p_value`` 0
  when the means differ and NaN when they are equal; Welch's degrees of freedom, 0/0 there, are set
  to 1 as scipy does; the interval collapses to the ratio itself.

References
----------
Welch, B. L. (1947). The generalization of "Student's" problem when several different population
variances are involved. Biometrika 34:28-35.
Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the power approach
for assessing the equivalence of average bioavailability. J. Pharmacokinet. Biopharm. 15:657-680.
Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scand. J. Stat. 6:65-70.
Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a practical and powerful
approach to multiple testing. J. R. Stat. Soc. B 57:289-300.
Lord, S. J., Velle, K. B., Mullins, R. D. & Fritz-Laylin, L. K. (2020). SuperPlots: communicating
reproducibility and variability in cell biology. J. Cell Biol. 219:e202001064.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import stats

from logstats.core.groups import occurring_keys
from logstats.core.moments import LogMoments, log_moments_by_codes, moments_by_codes
from logstats.core.transform import check_nonpositive
from logstats.stats.estimate import t_quantile

__all__ = [
    "ADJUST_METHODS",
    "adjust_p",
    "compare_moments",
    "fold_change_codes",
    "paired_moments",
]

#: Accepted values of ``adjust`` / ``method``.
ADJUST_METHODS: tuple[str | None, ...] = ("holm", "bh", None)

_LN2 = float(np.log(2.0))


# --------------------------------------------------------------------------------------------------
# validation helpers


def _check_level(confidence_level: float) -> float:
    cl = float(confidence_level)
    if not 0.0 < cl < 1.0:
        raise ValueError(f"confidence_level={confidence_level!r} must lie strictly between 0 and 1")
    return cl


def _check_method(method: Any, keyword: str = "method") -> str | None:
    if method is None or (isinstance(method, str) and method in ("holm", "bh")):
        return method
    raise ValueError(f"{keyword}={method!r} is not one of 'holm', 'bh', None")


def _check_equivalence(equivalence: Any, equivalence_alpha: float) -> tuple[float, float] | None:
    alpha = float(equivalence_alpha)
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"equivalence_alpha={equivalence_alpha!r} must lie strictly between 0 and 1")
    if equivalence is None:
        return None
    try:
        low, high = (float(v) for v in equivalence)
    except (TypeError, ValueError):
        raise ValueError(
            f"equivalence={equivalence!r} must be a pair (low, high) of ratios, e.g. (0.8, 1.25)"
        ) from None
    if not (np.isfinite(low) and np.isfinite(high) and 0.0 < low < high):
        raise ValueError(
            f"equivalence={equivalence!r} must satisfy 0 < low < high (finite ratios of geometric "
            "means, e.g. (0.8, 1.25))"
        )
    return low, high


def _check_codes(codes: Any, size: int, ngroups: int, keyword: str, count_keyword: str) -> np.ndarray:
    arr = np.asarray(codes)
    if arr.dtype.kind not in "iu":
        raise TypeError(f"{keyword} must be integer group codes, got dtype {arr.dtype}")
    if arr.shape != (size,):
        raise ValueError(f"{keyword} has shape {arr.shape}, expected ({size},) to match values")
    arr = arr.astype(np.int64, copy=False)
    if size and int(arr.max()) >= ngroups:
        nbad = int((arr >= ngroups).sum())
        raise ValueError(
            f"{keyword} holds {nbad} code(s) >= {count_keyword}={ngroups}; codes must lie in "
            f"0..{ngroups - 1} (negative codes mean 'no group')"
        )
    return arr


# --------------------------------------------------------------------------------------------------
# multiplicity


def _segmented_cummax(v: np.ndarray, seg: np.ndarray) -> np.ndarray:
    """Running maximum of ``v`` restarted at every change of the non-decreasing integer ``seg``.

    Exact: the values are replaced by their dense ranks, ``seg * n_unique`` is added so that every
    segment lies above all earlier ones, and one ``np.maximum.accumulate`` runs over integers.
    """
    uniq, inv = np.unique(v, return_inverse=True)
    width = np.int64(uniq.size)
    offset = seg.astype(np.int64) * width
    key = np.maximum.accumulate(inv.astype(np.int64) + offset)
    return uniq[key - offset]


def adjust_p(p: Any, method: str | None = "holm", *, families: Any = None) -> np.ndarray:
    """Adjust p-values for multiple comparisons (Holm step-down or Benjamini–Hochberg step-up).

    Parameters
    ----------
    p : array_like of float
        p-values in [0, 1], any shape. NaN entries stay NaN and do not count toward the family size.
    method : {"holm", "bh", None}, default "holm"
        ``"holm"`` controls the family-wise error rate (Holm 1979): with the m valid p-values sorted,
        ``p̃₍ᵢ₎ = max_{j ≤ i} min(1, (m − j + 1) p₍ⱼ₎)``. ``"bh"`` controls the false discovery rate
        (Benjamini & Hochberg 1995): ``p̃₍ᵢ₎ = min_{j ≥ i} min(1, m p₍ⱼ₎ / j)``. ``None`` returns a copy
        of ``p`` unchanged.
    families : array_like of int, optional
        Family codes of the same shape as ``p``; each family is adjusted separately (its own m).
        Default: all p-values form one family.

    Returns
    -------
    numpy.ndarray
        float64 array of the shape of ``p``, in [0, 1]. Reject at level α where ``p̃ <= α``.

    Raises
    ------
    ValueError
        For an unknown ``method``, p-values outside [0, 1], or ``families`` of another shape.
    TypeError
        For non-integer ``families``.

    Notes
    -----
    Vectorised over families: one ``lexsort`` by (family, p), then a running maximum (Holm) or a
    running minimum from the largest p (BH) restarted at each family boundary.

    Examples
    --------
    >>> adjust_p([0.01, 0.04, 0.03], "holm")
    array([0.03, 0.06, 0.06])
    >>> adjust_p([0.01, 0.04, 0.03, float("nan")], "bh")
    array([0.03, 0.04, 0.04,  nan])

    References
    ----------
    Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scand. J. Stat. 6:65-70.
    Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a practical and
    powerful approach to multiple testing. J. R. Stat. Soc. B 57:289-300.
    """
    method = _check_method(method)
    arr = np.asarray(p, dtype=np.float64)
    out = np.array(arr, dtype=np.float64, copy=True)
    if method is None:
        return out
    flat = arr.ravel()
    valid = ~np.isnan(flat)
    nbad = int(((flat[valid] < 0) | (flat[valid] > 1)).sum())
    if nbad:
        raise ValueError(f"p holds {nbad} value(s) outside [0, 1]; p-values must lie in [0, 1] (or be NaN)")
    if families is None:
        fam = np.zeros(flat.shape, dtype=np.int64)
    else:
        fam_arr = np.asarray(families)
        if fam_arr.dtype.kind not in "iu":
            raise TypeError(f"families must be integer codes, got dtype {fam_arr.dtype}")
        if fam_arr.shape != arr.shape:
            raise ValueError(f"families has shape {fam_arr.shape}, expected {arr.shape} (the shape of p)")
        fam = fam_arr.astype(np.int64, copy=False).ravel()
    idx = np.flatnonzero(valid)
    if idx.size == 0:
        return out
    pv, fv = flat[idx], fam[idx]
    order = np.lexsort((pv, fv))
    ps, fs = pv[order], fv[order]
    start = np.empty(ps.size, dtype=bool)
    start[0] = True
    start[1:] = fs[1:] != fs[:-1]
    seg = np.cumsum(start) - 1
    starts = np.flatnonzero(start)
    sizes = np.diff(np.append(starts, ps.size))
    m = sizes[seg].astype(np.float64)
    rank = (np.arange(ps.size) - starts[seg]).astype(np.float64)  # 0-based rank within the family
    if method == "holm":
        adj = _segmented_cummax(np.minimum(1.0, (m - rank) * ps), seg)
    else:  # "bh": running minimum from the largest p of each family
        v = np.minimum(1.0, ps / ((rank + 1.0) / m))  # divide by i/m (exactly 1 for the largest p)
        seg_rev = (seg[-1] - seg)[::-1]
        adj = -_segmented_cummax(-v[::-1], seg_rev)[::-1]
    out.reshape(-1)[idx[order]] = np.clip(adj, 0.0, 1.0)
    return out


# --------------------------------------------------------------------------------------------------
# t statistics from moments


def _t_columns(
    d: np.ndarray,
    se: np.ndarray,
    df: np.ndarray,
    cl: float,
    eq: tuple[float, float] | None,
    alpha: float,
) -> dict[str, np.ndarray]:
    """Ratio, interval, t, p (and TOST) from a log difference, its standard error and df."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        t = d / se
        dfa = np.where(df > 0, df, np.nan)
        p = np.minimum(1.0, 2.0 * stats.t.sf(np.abs(t), dfa))
        half = t_quantile(cl, df) * se
        out = {
            "log_ratio": d,
            "ratio": np.exp(d),
            "log2_ratio": d / _LN2,
            "ci_low": np.exp(d - half),
            "ci_high": np.exp(d + half),
            "statistic": t,
            "df": dfa,
            "p_value": p,
        }
        if eq is not None:
            ln_low, ln_high = np.log(eq[0]), np.log(eq[1])
            p_low = stats.t.sf((d - ln_low) / se, dfa)  # H0: log ratio <= ln(low)
            p_high = stats.t.cdf((d - ln_high) / se, dfa)  # H0: log ratio >= ln(high)
            ep = np.asarray(np.maximum(p_low, p_high), dtype=np.float64)  # NaN propagates
            out["equivalence_p"] = ep
            out["equivalent"] = np.asarray(ep < alpha)  # NaN compares False
    # fresh, writable arrays (0-d inputs give 0-d arrays, not numpy scalars)
    return {k: np.array(v, dtype=bool if k == "equivalent" else np.float64) for k, v in out.items()}


def compare_moments(
    level: LogMoments,
    reference: LogMoments,
    *,
    equal_var: bool = False,
    confidence_level: float = 0.95,
    equivalence: tuple[float, float] | None = None,
    equivalence_alpha: float = 0.05,
) -> dict[str, np.ndarray]:
    """Ratio of geometric means ``level / reference`` with Welch's (or Student's) t on the logs.

    Parameters
    ----------
    level, reference : LogMoments
        Moments of the natural logs of the two samples; shapes broadcast against each other and every
        element is one comparison.
    equal_var : bool, default False
        False: Welch's t with Welch–Satterthwaite degrees of freedom (Welch 1947). True: Student's t
        with the pooled variance and ``df = n + n_reference − 2``.
    confidence_level : float, default 0.95
        Coverage of the two-sided interval of the ratio.
    equivalence : (low, high), optional
        Equivalence limits on the ratio scale, ``0 < low < high`` (e.g. ``(0.8, 1.25)``). Adds the two
        one-sided tests of Schuirmann (1987) on the log ratio against ``ln low`` and ``ln high``.
    equivalence_alpha : float, default 0.05
        Level of each one-sided test: ``equivalent`` is True when ``equivalence_p < equivalence_alpha``,
        which is the same as the ``1 − 2·equivalence_alpha`` interval lying inside the limits.

    Returns
    -------
    dict of str to numpy.ndarray
        Arrays of the broadcast shape:

        - ``log_ratio``: ``ȳ_level − ȳ_reference`` (natural logs); ``log2_ratio``: the same in log2.
        - ``ratio``: ``exp(log_ratio)``, the ratio of geometric means (given whenever both n >= 1).
        - ``ci_low``, ``ci_high``: ``exp(log_ratio ∓ t(1 − α/2, df)·se)``, the back-transformed t interval
          (``scipy.stats.ttest_ind(...).confidence_interval()`` on the logs, exponentiated).
        - ``statistic``: t = log_ratio / se, with ``se² = s₁²/n₁ + s₂²/n₂`` (Welch) or
          ``s_p²(1/n₁ + 1/n₂)``, ``s_p² = (m2₁ + m2₂)/(n₁ + n₂ − 2)`` (Student); variances with ddof=1.
        - ``df``: ``(a + b)² / (a²/(n₁−1) + b²/(n₂−1))`` with ``a = s₁²/n₁``, ``b = s₂²/n₂`` (Welch), or
          ``n₁ + n₂ − 2``.
        - ``p_value``: two-sided, ``2·P(T_df > |t|)``.
        - ``n``, ``n_reference``: the sample sizes (int64).
        - with ``equivalence``: ``equivalence_p`` = the larger of the two one-sided p-values,
          ``equivalent`` (bool; False where ``equivalence_p`` is NaN).

        Interval, statistic, df and p-values are NaN where either side has fewer than two values (also
        for Student's t, where scipy would use a pooled variance from the larger side alone). Zero
        variance on both sides: t is ±inf (p = 0) or NaN when the means are equal, Welch's df is 1
        and the interval collapses to the ratio, as in scipy.

    References
    ----------
    Welch, B. L. (1947). The generalization of "Student's" problem when several different population
    variances are involved. Biometrika 34:28-35.
    Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the power approach
    for assessing the equivalence of average bioavailability. J. Pharmacokinet. Biopharm. 15:657-680.
    """
    cl = _check_level(confidence_level)
    eq = _check_equivalence(equivalence, equivalence_alpha)
    n1, n2, mu1, mu2, ss1, ss2 = np.broadcast_arrays(
        np.asarray(level.n, dtype=np.float64),
        np.asarray(reference.n, dtype=np.float64),
        np.asarray(level.mean_log, dtype=np.float64),
        np.asarray(reference.mean_log, dtype=np.float64),
        np.asarray(level.m2_log, dtype=np.float64),
        np.asarray(reference.m2_log, dtype=np.float64),
    )
    ok = (n1 >= 2) & (n2 >= 2)
    d = np.where((n1 >= 1) & (n2 >= 1), mu1 - mu2, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        if equal_var:
            df = np.where(ok, n1 + n2 - 2.0, np.nan)
            se2 = (ss1 + ss2) / df * (1.0 / n1 + 1.0 / n2)
        else:
            a = ss1 / (n1 - 1.0) / n1
            b = ss2 / (n2 - 1.0) / n2
            se2 = a + b
            # written with w = a/(a+b) so that tiny or huge variances neither under- nor overflow
            w = a / se2
            df = 1.0 / (w * w / (n1 - 1.0) + (1.0 - w) * (1.0 - w) / (n2 - 1.0))
            df = np.where(se2 == 0.0, 1.0, df)  # 0/0: scipy's convention
            df = np.where(ok, df, np.nan)
        se = np.where(ok, np.sqrt(se2), np.nan)
    out = _t_columns(d, se, df, cl, eq, float(equivalence_alpha))
    out["n"] = np.array(n1, dtype=np.int64)
    out["n_reference"] = np.array(n2, dtype=np.int64)
    return out


def paired_moments(
    diff: LogMoments,
    *,
    confidence_level: float = 0.95,
    equivalence: tuple[float, float] | None = None,
    equivalence_alpha: float = 0.05,
) -> dict[str, np.ndarray]:
    """Ratio of geometric means from paired data: the one-sample t on per-pair log differences.

    Parameters
    ----------
    diff : LogMoments
        Moments of the per-pair differences ``ln x_level − ln x_reference`` (or of differences of
        per-replicate log means); every element is one comparison. ``diff.n`` is the number of pairs.
    confidence_level : float, default 0.95
        Coverage of the two-sided interval of the ratio.
    equivalence : (low, high), optional
        Equivalence limits on the ratio scale (``0 < low < high``); adds the two one-sided tests
        (Schuirmann 1987) on the mean log difference.
    equivalence_alpha : float, default 0.05
        Level of each one-sided test.

    Returns
    -------
    dict of str to numpy.ndarray
        The columns of :func:`compare_moments`: ``log_ratio`` = mean difference d̄, ``ratio`` =
        exp(d̄), ``log2_ratio``, ``ci_low``/``ci_high`` = ``exp(d̄ ∓ t(1 − α/2, n − 1)·s_d/√n)``,
        ``statistic`` = ``d̄ / (s_d/√n)`` (s_d with ddof=1), ``df = n − 1``, two-sided ``p_value``,
        ``n`` = ``n_reference`` = number of pairs; with ``equivalence``: ``equivalence_p``,
        ``equivalent``. This is ``scipy.stats.ttest_rel`` on the logs. Fewer than two pairs: NaN
        interval and p-values. All differences equal: t = ±inf (p = 0) or NaN when they are all 0.

    References
    ----------
    Student (1908). The probable error of a mean. Biometrika 6:1-25 (the one-sample t).
    Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the power approach
    for assessing the equivalence of average bioavailability. J. Pharmacokinet. Biopharm. 15:657-680.
    """
    cl = _check_level(confidence_level)
    eq = _check_equivalence(equivalence, equivalence_alpha)
    n = np.asarray(diff.n, dtype=np.float64)
    d = np.where(n >= 1, np.asarray(diff.mean_log, dtype=np.float64), np.nan)
    ok = n >= 2
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.where(ok, np.sqrt(np.asarray(diff.m2_log, dtype=np.float64) / (n - 1.0) / n), np.nan)
    df = np.where(ok, n - 1.0, np.nan)
    out = _t_columns(d, se, df, cl, eq, float(equivalence_alpha))
    out["n"] = np.array(diff.n, dtype=np.int64)
    out["n_reference"] = np.array(diff.n, dtype=np.int64)
    return out


# --------------------------------------------------------------------------------------------------
# the whole job on coded 1-D arrays


def _moments_of_logs(y: np.ndarray, use: np.ndarray, codes: np.ndarray, ngroups: int) -> LogMoments:
    """Moments of numbers already on the log scale (replicate means, their differences), ``y[use]``."""
    return log_moments_by_codes(np.where(use, y, np.nan), np.where(use, codes, -1), ngroups)


def fold_change_codes(
    values: Any,
    level_codes: Any,
    n_levels: int,
    reference: int,
    *,
    replicate_codes: Any = None,
    n_replicates: int | None = None,
    paired: bool = False,
    stratum_codes: Any = None,
    n_strata: int = 1,
    equal_var: bool = False,
    confidence_level: float = 0.95,
    adjust: str | None = "holm",
    equivalence: tuple[float, float] | None = None,
    equivalence_alpha: float = 0.05,
    nonpositive: str = "drop",
    skipna: bool = True,
    where: str = "the input",
) -> dict[str, np.ndarray]:
    """Fold change of every level against a reference level, per stratum, from raw values and codes.

    Parameters
    ----------
    values : array_like, 1-D
        Raw values on the linear scale (not logged). Never modified.
    level_codes : array_like of int, 1-D
        Level of each value in ``0 .. n_levels − 1``; negative means no level (the value is ignored
        here; the caller counts missing keys).
    n_levels : int
        Number of levels.
    reference : int
        Code of the reference level.
    replicate_codes : array_like of int, optional
        Replicate label of each value (well, plate, day …) in ``0 .. n_replicates − 1``. When given,
        each (stratum, level, replicate) contributes one unit, the mean of its logs, and the test runs
        on these replicate means (Lord et al. 2020). Values with a level but a negative replicate code
        are counted in ``n_no_replicate`` and not used.
    n_replicates : int, optional
        Number of replicate labels (required with ``replicate_codes``).
    paired : bool, default False
        Requires ``replicate_codes``. Pair each replicate mean of a level with the reference replicate
        of the same label in the same stratum and run the one-sample t on the differences
        (:func:`paired_moments`); replicates without a partner are counted in ``n_unpaired``.
    stratum_codes : array_like of int, optional
        Stratum of each value in ``0 .. n_strata − 1`` (e.g. channel or time point); comparisons and
        the multiplicity adjustment run within each stratum. Negative means no stratum (ignored).
    n_strata : int, default 1
        Number of strata.
    equal_var : bool, default False
        Student's pooled t instead of Welch's (unpaired only).
    confidence_level : float, default 0.95
        Coverage of the interval of the ratio.
    adjust : {"holm", "bh", None}, default "holm"
        Multiplicity adjustment across the non-reference levels of each stratum (:func:`adjust_p`);
        levels with an undefined p-value do not count toward the family.
    equivalence : (low, high), optional
        Equivalence limits on the ratio scale, e.g. ``(0.8, 1.25)``; adds the two one-sided tests.
    equivalence_alpha : float, default 0.05
        Level of each one-sided test.
    nonpositive : {"drop", "nan", "raise"}, default "drop"
        ``"drop"``: zeros, negatives and ``-inf`` are excluded and counted in ``n_nonpositive``.
        ``"nan"``: every result of an affected level is NaN, and of all levels of the stratum when the
        reference is affected. ``"raise"`` is handled as ``"drop"`` here; the caller raises from the
        ``n_nonpositive`` counts, which knows the labels.
    skipna : bool, default True
        False makes the results of a level with missing values NaN (and of all levels of the stratum
        when the reference has missing values). Missing values are always counted in ``n_missing``.
    where : str, default "the input"
        Phrase naming the data in error messages (e.g. ``"column 'gfp'"``).

    Returns
    -------
    dict of str to numpy.ndarray
        Arrays of shape ``(n_strata, n_levels)``; the reference column is included with ``ratio`` 1
        (NaN when the reference has no usable value), ``log_ratio``/``log2_ratio`` 0 and NaN statistics,
        so the caller can drop it. Columns, in order:

        - ``ratio``, ``ci_low``, ``ci_high``, ``p_value``, ``p_adjusted`` (absent when ``adjust=None``),
          ``n``, ``n_reference``: as in :func:`compare_moments` / :func:`paired_moments`. ``n`` and
          ``n_reference`` count units: values, replicates (with ``replicate_codes``) or pairs (paired).
        - ``log_ratio``, ``log2_ratio``, ``statistic``, ``df``.
        - ``n_cells``, ``n_cells_reference``: usable values of the level and of the reference.
        - ``n_missing``, ``n_nonpositive``: values of the level that were missing or non-positive.
        - ``n_no_replicate`` (with ``replicate_codes``): values of the level without a replicate label.
          Every value with a level and stratum is in exactly one of ``n_cells``, ``n_missing``,
          ``n_nonpositive`` and ``n_no_replicate``.
        - ``n_unpaired`` (paired only): replicates of the level plus replicates of the reference that
          have no partner (0 in the reference column).
        - ``equivalence_p``, ``equivalent`` (with ``equivalence``).

    Raises
    ------
    ValueError
        For codes out of range, mismatched lengths, ``paired=True`` without ``replicate_codes``,
        ``paired=True`` with ``equal_var=True``, bad options, or ``+inf`` in ``values``.
    TypeError
        For non-integer codes or non-numeric values.

    Notes
    -----
    One ``np.bincount``-based :func:`~logstats.core.moments.moments_by_codes` pass computes the moments
    of every (stratum, level) or (stratum, level, replicate); with replicates only the combinations
    that occur are materialised (``np.unique`` of a combined int64 key), so memory scales with the
    data, not with ``n_strata · n_levels · n_replicates``. A second pass over the replicate means gives
    the unit moments. No Python loop over groups.

    References
    ----------
    Welch, B. L. (1947). Biometrika 34:28-35 (unequal-variance t and its degrees of freedom).
    Schuirmann, D. J. (1987). J. Pharmacokinet. Biopharm. 15:657-680 (two one-sided tests).
    Holm, S. (1979). Scand. J. Stat. 6:65-70; Benjamini, Y. & Hochberg, Y. (1995). J. R. Stat. Soc. B
    57:289-300 (multiplicity).
    Lord, S. J., Velle, K. B., Mullins, R. D. & Fritz-Laylin, L. K. (2020). SuperPlots: communicating
    reproducibility and variability in cell biology. J. Cell Biol. 219:e202001064 (the replicate,
    not the cell, as the experimental unit).
    """
    check_nonpositive(nonpositive)
    adjust = _check_method(adjust, "adjust")
    cl = _check_level(confidence_level)
    _check_equivalence(equivalence, equivalence_alpha)
    L, S = int(n_levels), int(n_strata)
    if L < 1:
        raise ValueError(f"n_levels={n_levels!r} must be at least 1")
    if S < 1:
        raise ValueError(f"n_strata={n_strata!r} must be at least 1")
    ref = int(reference)
    if not 0 <= ref < L:
        raise ValueError(f"reference={reference!r} is not a level code in 0..{L - 1}")
    if paired and replicate_codes is None:
        raise ValueError(
            "paired=True needs replicate_codes (the replicate label whose values pair a level with "
            "the reference); pass replicate_codes= or paired=False"
        )
    if paired and equal_var:
        raise ValueError("equal_var=True has no meaning with paired=True (the paired t uses the differences)")

    vals = np.asarray(values)
    if vals.ndim != 1:
        raise ValueError(f"{where} must be 1-D, got shape {vals.shape}")
    N = vals.shape[0]
    lc = _check_codes(level_codes, N, L, "level_codes", "n_levels")
    if stratum_codes is None:
        sc = np.zeros(N, dtype=np.int64)
    else:
        sc = _check_codes(stratum_codes, N, S, "stratum_codes", "n_strata")
    keyed = (lc >= 0) & (sc >= 0)
    base = np.where(keyed, sc * L + lc, -1)  # flat (stratum, level) index
    SL = S * L

    common: dict[str, Any] = dict(paired=paired, equal_var=equal_var, confidence_level=cl, adjust=adjust,
                  equivalence=equivalence, equivalence_alpha=equivalence_alpha, nonpositive=nonpositive,
                  skipna=skipna)
    if replicate_codes is None:
        cells = moments_by_codes(vals, base, SL, where=where)
        return fold_change_moments(cells, np.arange(SL), L, ref, n_strata=S, **common)
    else:
        if n_replicates is None:
            raise ValueError("replicate_codes needs n_replicates (the number of replicate labels)")
        R = int(n_replicates)
        if R < 1:
            raise ValueError(f"n_replicates={n_replicates!r} must be at least 1")
        if SL * R >= 2**62:
            raise ValueError(
                f"n_strata * n_levels * n_replicates = {SL * R} is too large for int64 group keys"
            )
        rc = _check_codes(replicate_codes, N, R, "replicate_codes", "n_replicates")
        has_rep = keyed & (rc >= 0)
        key = base[has_rep] * np.int64(R) + rc[has_rep]
        uniq, inv = occurring_keys(key, SL * R)
        K = uniq.size
        codes = np.full(N, -1, dtype=np.intp)
        codes[has_rep] = inv
        rep = moments_by_codes(vals, codes, K, where=where)  # one pass: every (stratum, level, replicate)
        n_no_rep = np.bincount(base[keyed & (rc < 0)], minlength=SL).astype(np.int64)
        return fold_change_moments(rep, (uniq // R).astype(np.intp), L, ref, n_strata=S,
                                   replicate=uniq % R, n_replicates=R, n_no_replicate=n_no_rep, **common)


def fold_change_moments(
    m: LogMoments,
    cell: Any,
    n_levels: int,
    reference: int,
    *,
    n_strata: int = 1,
    replicate: Any = None,
    n_replicates: int | None = None,
    n_no_replicate: Any = None,
    paired: bool = False,
    equal_var: bool = False,
    confidence_level: float = 0.95,
    adjust: str | None = "holm",
    equivalence: tuple[float, float] | None = None,
    equivalence_alpha: float = 0.05,
    nonpositive: str = "drop",
    skipna: bool = True,
) -> dict[str, np.ndarray]:
    """The test stage of :func:`fold_change_codes`, from log-moments of cells or replicates.

    ``m`` holds one set of moments per row; ``cell`` gives each row's flat (stratum, level) index
    ``stratum * n_levels + level``. Without ``replicate`` the rows are the values of each cell (every
    value is a unit); with ``replicate`` (each row's replicate code in ``0 .. n_replicates − 1``) every
    row is one replicate, its unit value the mean of its logs. Because only moments enter, moments
    built chunk by chunk (dask partitions merged with Chan's update) give the same test as raw values.
    Same outputs as :func:`fold_change_codes`.
    """
    check_nonpositive(nonpositive)
    adjust = _check_method(adjust, "adjust")
    cl = _check_level(confidence_level)
    _check_equivalence(equivalence, equivalence_alpha)
    L, S = int(n_levels), int(n_strata)
    ref = int(reference)
    if L < 1 or S < 1 or not 0 <= ref < L:
        raise ValueError(f"need n_levels >= 1, n_strata >= 1 and 0 <= reference < n_levels; "
                         f"got {L}, {S}, {ref}")
    if paired and replicate is None:
        raise ValueError("paired=True needs replicate= (each row's replicate code)")
    SL = S * L
    sl = np.asarray(cell, dtype=np.intp).ravel()
    extra: dict[str, np.ndarray] = {}
    if replicate is None:
        # rows may cover only the cells that occur (merged partitions): lay them out over all cells
        def full(v: Any, fill: float) -> np.ndarray:
            out = np.full(SL, fill)
            out[sl] = np.asarray(v, dtype=np.float64).ravel()
            return out

        n_cells = full(m.n, 0).astype(np.int64)
        n_missing = full(m.n_missing, 0).astype(np.int64)
        n_nonpos = full(m.n_nonpositive, 0).astype(np.int64)
        unit_n, unit_mean, unit_m2 = n_cells, full(m.mean_log, np.nan), full(m.m2_log, np.nan)
    else:
        R = int(n_replicates or 0)
        rr = np.asarray(replicate, dtype=np.int64).ravel()
        uniq = sl.astype(np.int64) * np.int64(R) + rr
        order = np.argsort(uniq, kind="stable")  # the partner search below needs sorted keys
        uniq, sl, rr = uniq[order], sl[order], rr[order]
        rep = m.take(order)
        K = uniq.size
        extra["n_no_replicate"] = (np.zeros(SL, dtype=np.int64) if n_no_replicate is None
                                   else np.asarray(n_no_replicate, dtype=np.int64).reshape(SL))

        def per_level(a: np.ndarray) -> np.ndarray:
            return np.bincount(sl, weights=np.asarray(a, dtype=np.float64), minlength=SL).astype(np.int64)

        n_cells = per_level(rep.n)
        n_missing = per_level(rep.n_missing)
        n_nonpos = per_level(rep.n_nonpositive)
        present = np.asarray(rep.n) > 0
        rep_mean = np.asarray(rep.mean_log, dtype=np.float64)
        if not paired:
            units = _moments_of_logs(rep_mean, present, sl, SL)
            unit_n, unit_mean, unit_m2 = units.n, units.mean_log, units.m2_log
        else:
            lev = sl % L
            strat = sl // L
            partner_key = (strat * L + ref) * np.int64(R) + rr
            pos = np.minimum(np.searchsorted(uniq, partner_key), max(K - 1, 0))
            found = (uniq[pos] == partner_key) & present[pos] if K else np.zeros(0, dtype=bool)
            pair = present & found & (lev != ref)
            dvals = rep_mean - rep_mean[pos] if K else rep_mean
            dm = _moments_of_logs(dvals, pair, sl, SL)
            unit_n, unit_mean, unit_m2 = dm.n, dm.mean_log, dm.m2_log
            n_present = np.bincount(sl[present], minlength=SL).reshape(S, L)
            n_pairs = np.asarray(dm.n, dtype=np.int64).reshape(S, L)
            unpaired = (n_present - n_pairs) + (n_present[:, ref][:, None] - n_pairs)
            unpaired[:, ref] = 0
            extra["n_unpaired"] = unpaired.astype(np.int64)

    shape = (S, L)
    n_cells = n_cells.reshape(shape)
    n_missing = n_missing.reshape(shape)
    n_nonpos = n_nonpos.reshape(shape)
    if "n_no_replicate" in extra:
        extra["n_no_replicate"] = extra["n_no_replicate"].reshape(shape)

    # the policies act on whole levels, and through the reference on whole strata
    bad = np.zeros(shape, dtype=bool)
    if not skipna:
        bad |= n_missing > 0
    if nonpositive == "nan":
        bad |= n_nonpos > 0
    bad_ref = bad[:, ref]
    bad_all = bad | bad_ref[:, None]

    unit_n = np.asarray(unit_n, dtype=np.int64).reshape(shape)
    unit_mean = np.where(bad_all, np.nan, np.asarray(unit_mean, dtype=np.float64).reshape(shape))
    unit_m2 = np.where(bad_all, np.nan, np.asarray(unit_m2, dtype=np.float64).reshape(shape))
    zeros = np.zeros(shape, dtype=np.int64)

    if paired:
        res = paired_moments(
            LogMoments(unit_n, unit_mean, unit_m2, zeros, zeros),
            confidence_level=cl,
            equivalence=equivalence,
            equivalence_alpha=equivalence_alpha,
        )
        # the reference column: its own replicate count, usable when it is not poisoned
        ref_units = np.asarray(n_present[:, ref], dtype=np.int64)
        ref_usable = (ref_units > 0) & ~bad_ref
    else:
        lvl = LogMoments(unit_n, unit_mean, unit_m2, zeros, zeros)
        refm = LogMoments(unit_n[:, ref:ref + 1], unit_mean[:, ref:ref + 1], unit_m2[:, ref:ref + 1],
                          zeros[:, :1], zeros[:, :1])
        res = compare_moments(
            lvl,
            refm,
            equal_var=equal_var,
            confidence_level=cl,
            equivalence=equivalence,
            equivalence_alpha=equivalence_alpha,
        )
        ref_units = unit_n[:, ref]
        ref_usable = np.isfinite(unit_mean[:, ref]) & (ref_units > 0)

    # fill the reference column: ratio 1 (NaN if unusable), NaN statistics
    one = np.where(ref_usable, 1.0, np.nan)
    for k in ("ci_low", "ci_high", "statistic", "df", "p_value", "equivalence_p"):
        if k in res:
            res[k][:, ref] = np.nan
    res["ratio"][:, ref] = one
    res["log_ratio"][:, ref] = one * 0.0
    res["log2_ratio"][:, ref] = one * 0.0
    if "equivalent" in res:
        res["equivalent"][:, ref] = False
    res["n"][:, ref] = ref_units
    res["n_reference"][:, ref] = ref_units

    out: dict[str, np.ndarray] = {
        "ratio": res["ratio"],
        "ci_low": res["ci_low"],
        "ci_high": res["ci_high"],
        "p_value": res["p_value"],
    }
    if adjust is not None:
        fam = np.broadcast_to(np.arange(S, dtype=np.int64)[:, None], shape)
        out["p_adjusted"] = adjust_p(res["p_value"], adjust, families=fam)
    out["n"] = res["n"]
    out["n_reference"] = res["n_reference"]
    for k in ("log_ratio", "log2_ratio", "statistic", "df"):
        out[k] = res[k]
    out["n_cells"] = n_cells
    out["n_cells_reference"] = np.repeat(n_cells[:, ref:ref + 1], L, axis=1)
    out["n_missing"] = n_missing
    out["n_nonpositive"] = n_nonpos
    # what the reference level left out, beside every comparison that uses it
    out["n_missing_reference"] = np.repeat(n_missing[:, ref:ref + 1], L, axis=1)
    out["n_nonpositive_reference"] = np.repeat(n_nonpos[:, ref:ref + 1], L, axis=1)
    out.update(extra)
    if equivalence is not None:
        out["equivalence_p"] = res["equivalence_p"]
        out["equivalent"] = res["equivalent"]
    return out
