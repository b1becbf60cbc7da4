"""Normal versus log-normal per group on the original scale (AIC), with normality tests on both scales.

The normality tests themselves are in :mod:`logstats.stats.normality`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from logstats.core.moments import moments_by_codes
from logstats.core.transform import check_nonpositive, to_logs
from logstats.stats._common import _LOG_2PI, _group_codes, _values_1d
from logstats.stats.normality import (
    _SW_MAX_N,
    _central_moments,
    _dagostino_pearson,
    _skew,
    _sw_coefficients,
    _sw_pvalue,
    _sw_statistic,
)

__all__ = ["scale_check"]


def scale_check(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    nonpositive: str = "drop",
    skipna: bool = True,
) -> dict[str, np.ndarray]:
    r"""Normal versus log-normal per group, compared on the original scale.

    Both models are fitted by maximum likelihood (``ddof=0``) to the **positive** values of each group
    (non-positive values cannot enter a log-normal likelihood, so they are left out of both models and
    of every other statistic here, and counted in ``n_nonpositive``). The log-normal log-likelihood
    includes the Jacobian ``−Σ ln x``, so both AICs refer to the same data on the same scale.

    Parameters
    ----------
    values : array_like, 1-D
        Raw values. NaN is missing; ``+inf`` is refused.
    codes : array_like of int, 1-D
        Group of each row (``0 .. ngroups-1``; negative = no group).
    ngroups : int
        Number of groups.
    nonpositive : {"drop", "nan", "raise"}
        ``"drop"`` excludes values ``<= 0`` and counts them; ``"nan"`` makes the group's results NaN;
        ``"raise"`` is the caller's job (it knows the labels) and behaves as ``"drop"`` here.
    skipna : bool
        ``False`` makes a group with missing values NaN.

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        ``aic_normal``, ``aic_lognormal``
            ``AIC = 2k − 2 log L`` with ``k = 2``, both for the data on its original scale. NaN for
            fewer than 2 values; ``−inf`` when all values are equal (the likelihood is unbounded).
        ``preferred`` (object)
            ``"log"`` when ``delta_aic > 0``, ``"linear"`` when ``delta_aic <= 0`` (an exact tie keeps
            the untransformed scale), None when ``delta_aic`` is NaN.
        ``normality_p_linear``, ``normality_p_log``
            Normality test p-values of ``x`` and of ``ln x``: Shapiro-Wilk for ``3 <= n <= 5000``
            (Royston's AS R94 approximation, as ``scipy.stats.shapiro``), D'Agostino-Pearson K² for
            ``n > 5000`` (as ``scipy.stats.normaltest``). NaN for ``n < 3`` or all values equal.
        ``mean``, ``gmean``
            Arithmetic and geometric mean of the positive values.
        ``mean_ratio``
            ``mean / gmean`` (at least 1, by the AM-GM inequality).
        ``expected_ratio``
            ``exp(s²/2)``, what ``mean_ratio`` estimates if the data are log-normal; ``s²`` is the
            variance of ``ln x`` with ``ddof=1`` (NaN for ``n < 2``).
        ``delta_aic``
            ``aic_normal − aic_lognormal``; positive favours the log scale.
        ``normality_test`` (object)
            ``"shapiro_wilk"``, ``"dagostino_pearson"`` or None (no test: ``n < 3``).
        ``skew_linear``, ``skew_log``
            Sample skewness ``m3/m2^1.5`` of ``x`` and of ``ln x`` (biased, i.e. not corrected;
            ``scipy.stats.skew`` with its default ``bias=True``).
        ``n``, ``n_missing``, ``n_nonpositive`` (int)
            Positive values used; values skipped as missing; values skipped as non-positive.

    Notes
    -----
    All groups are handled at once: the values are sorted once by (group, value) and every sum is a
    ``np.bincount``. The Shapiro-Wilk coefficients depend only on ``n`` and the rank, so they are
    computed per row without a loop. The normal fit works on ``x / max(x)`` per group, so values up to
    1e300 (and down to 1e-300) neither overflow nor underflow.

    References
    ----------
    Akaike, H. (1974). A new look at the statistical model identification. IEEE Trans. Autom. Control
    19:716-723.
    Shapiro, S. S. & Wilk, M. B. (1965). An analysis of variance test for normality (complete samples).
    Biometrika 52:591-611.
    Royston, P. (1995). Remark AS R94: A remark on algorithm AS 181: the W-test for normality. Applied
    Statistics 44:547-551.
    Beasley, J. D. & Springer, S. G. (1977). Algorithm AS 111: the percentage points of the normal
    distribution. Applied Statistics 26:118-121.
    D'Agostino, R. B. & Pearson, E. S. (1973). Tests for departure from normality. Biometrika
    60:613-622; Anscombe, F. J. & Glynn, W. J. (1983). Distribution of the kurtosis statistic b2 for
    normal samples. Biometrika 70:227-234.

    Examples
    --------
    An invented log-normal sample of 200 values:

    >>> import numpy as np
    >>> x = np.random.default_rng(0).lognormal(0.0, 1.0, 200)
    >>> out = scale_check(x, np.zeros(200, dtype=int), 1)
    >>> out["preferred"], out["normality_test"], np.round(out["delta_aic"], 1)
    (array(['log'], dtype=object), array(['shapiro_wilk'], dtype=object), array([163.6]))
    """
    check_nonpositive(nonpositive)
    x = _values_1d(values)
    codes, G = _group_codes(codes, x.size, ngroups)
    lv = to_logs(x, where="values")
    mom = moments_by_codes(x, codes, G, where="values")
    n = np.asarray(mom.n, dtype=np.int64)
    nf = n.astype(np.float64)
    n_missing = np.asarray(mom.n_missing, dtype=np.int64)
    n_nonpos = np.asarray(mom.n_nonpositive, dtype=np.int64)

    use = np.flatnonzero(lv.valid & (codes >= 0))
    order = use[np.lexsort((x[use], codes[use]))]
    xs, ys, gs = x[order], lv.y[order], codes[order]
    starts = np.zeros(G, dtype=np.intp)
    np.cumsum(n[:-1], out=starts[1:])
    rank = np.arange(xs.size) - starts[gs]
    nrow = n[gs]
    has = n > 0
    last = np.clip(starts + n - 1, 0, max(xs.size - 1, 0))
    first = np.clip(starts, 0, max(xs.size - 1, 0))
    xmax = np.where(has, xs[last], 1.0) if xs.size else np.ones(G)
    xmin = np.where(has, xs[first], 1.0) if xs.size else np.ones(G)
    ymin, ymax = np.log(xmin), np.log(xmax)

    # normal fit on x scaled by its group maximum; log-normal fit from the log-moments
    u = xs / xmax[gs]
    mean_u, m2_u, m3_u, m4_u = _central_moments(u, gs, nf, G)
    mean_y, m2_y, m3_y, m4_y = _central_moments(ys, gs, nf, G)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # an overflow is honestly inf
        log_sd_x = 0.5 * np.log(m2_u) + np.log(xmax)
        log_sd_y = 0.5 * np.log(np.asarray(mom.m2_log) / nf)
        const = -0.5 * nf * (_LOG_2PI + 1.0)
        ll_norm = const - nf * log_sd_x
        ll_log = const - nf * log_sd_y - nf * np.asarray(mom.mean_log)
        two = n >= 2
        aic_normal = np.where(two, 4.0 - 2.0 * ll_norm, np.nan)
        aic_lognormal = np.where(two, 4.0 - 2.0 * ll_log, np.nan)
        delta = aic_normal - aic_lognormal
        mean = mean_u * xmax
        mean_log = np.asarray(mom.mean_log, dtype=np.float64)
        gmean = np.exp(mean_log)
        mean_ratio = np.exp(np.log(mean_u) + np.log(xmax) - mean_log)
        expected_ratio = np.exp(0.5 * mom.var_log(1))
    preferred = np.full(G, None, dtype=object)
    preferred[delta > 0] = "log"
    preferred[delta <= 0] = "linear"

    # normality tests
    p_lin = np.full(G, np.nan)
    p_log = np.full(G, np.nan)
    test = np.full(G, None, dtype=object)
    sw = (n >= 3) & (n <= _SW_MAX_N)
    dp = n > _SW_MAX_N
    test[sw] = "shapiro_wilk"
    test[dp] = "dagostino_pearson"
    constant = has & (xmin == xmax)
    if sw.any():
        rsel = sw[gs]
        g_r, coef = gs[rsel], _sw_coefficients(rank[rsel], nrow[rsel], gs[rsel], G, n)
        w1x = _sw_statistic(u[rsel], coef, g_r, G, nf, mean_u, 1.0 - xmin / xmax)
        w1y = _sw_statistic(ys[rsel], coef, g_r, G, nf, mean_y, ymax - ymin)
        _, px = _sw_pvalue(w1x, n)
        _, py = _sw_pvalue(w1y, n)
        p_lin = np.where(sw, px, p_lin)
        p_log = np.where(sw, py, p_log)
    if dp.any():
        p_lin = np.where(dp, _dagostino_pearson(m2_u, m3_u, m4_u, n), p_lin)
        p_log = np.where(dp, _dagostino_pearson(m2_y, m3_y, m4_y, n), p_log)
    p_lin = np.where(constant, np.nan, p_lin)
    p_log = np.where(constant, np.nan, p_log)

    out = {
        "aic_normal": aic_normal,
        "aic_lognormal": aic_lognormal,
        "preferred": preferred,
        "normality_p_linear": p_lin,
        "normality_p_log": p_log,
        "mean": np.where(has, mean, np.nan),
        "gmean": gmean,
        "mean_ratio": np.where(has, mean_ratio, np.nan),
        "expected_ratio": expected_ratio,
        "delta_aic": delta,
        "normality_test": test,
        "skew_linear": np.where(has, _skew(mean_u, m2_u, m3_u), np.nan),
        "skew_log": np.where(has, _skew(mean_y, m2_y, m3_y), np.nan),
        "n": n,
        "n_missing": n_missing,
        "n_nonpositive": n_nonpos,
    }
    poisoned = np.zeros(G, dtype=bool)
    if not skipna:
        poisoned |= n_missing > 0
    if nonpositive == "nan":
        poisoned |= n_nonpos > 0
    if poisoned.any():
        for key, arr in out.items():
            if key in ("n", "n_missing", "n_nonpositive"):
                continue
            if arr.dtype == object:
                arr[poisoned] = None
            else:
                out[key] = np.where(poisoned, np.nan, arr)
    return out


