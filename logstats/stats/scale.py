"""Linear or log scale? Per-group and pooled scale evidence on the original scale.

* :func:`scale_check` -- per group: AIC of a normal and of a log-normal fitted to the same values
  (with a verdict that may be ``"undecided"``), normality tests on both scales, the Box-Cox power with
  its profile-likelihood interval; left-censored likelihoods when detection limits are given.
* :func:`scale_check_pooled` -- one verdict across groups that keep their own location (one-way layout),
  one common Box-Cox power, and the mean-spread law across groups.

The normality tests themselves are in :mod:`logstats.stats.normality`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import special

from logstats.core.groups import GroupSums
from logstats.core.moments import moments_by_codes
from logstats.core.transform import check_nonpositive, to_logs
from logstats.stats._common import (
    _LOG_2PI,
    _count,
    _detection_limits,
    _group_codes,
    _values_1d,
    group_sorted_values,
)
from logstats.stats.censored import _censored_newton, fit_lognormal
from logstats.stats.normality import (
    _SW_MAX_N,
    _central_moments,
    _dagostino_pearson,
    _skew,
    _sw_coefficients,
    _sw_pvalue,
    _sw_statistic,
)

__all__ = ["SCALE_VERDICTS", "scale_check", "scale_check_pooled"]

#: Values of ``preferred`` (None where ``delta_aic`` is undefined).
SCALE_VERDICTS: tuple[str, ...] = ("log", "linear", "undecided")

_TINY = 64.0 * np.finfo(np.float64).eps  # spreads at or below this (relative) are rounding residue
_COUNT_KEYS = ("n", "n_missing", "n_nonpositive", "n_censored")


def _check_margin(margin: Any) -> float:
    if isinstance(margin, bool) or not isinstance(margin, (int, float, np.integer, np.floating)):
        raise TypeError(f"margin must be a number (an AIC difference, e.g. 2); got {margin!r}")
    m = float(margin)
    if not m >= 0:  # also refuses NaN
        raise ValueError(f"margin must be >= 0 (the AIC difference a verdict needs); got {margin!r}")
    return m


def _check_level(confidence_level: Any) -> float:
    if isinstance(confidence_level, bool) or not isinstance(
        confidence_level, (int, float, np.integer, np.floating)
    ):
        raise TypeError(f"confidence_level must be a number in (0, 1); got {confidence_level!r}")
    c = float(confidence_level)
    if not 0.0 < c < 1.0:
        raise ValueError(f"confidence_level must lie strictly between 0 and 1; got {confidence_level!r}")
    return c


def _verdict(delta: np.ndarray, margin: float) -> np.ndarray:
    """``"log"`` if ``delta >= margin``, ``"linear"`` if ``delta <= −margin``, else ``"undecided"``.

    An exact tie (``delta == 0``) is ``"undecided"`` whatever the margin; NaN gives None.
    """
    delta = np.asarray(delta, dtype=np.float64)
    out = np.full(delta.shape, None, dtype=object)
    fin = ~np.isnan(delta)
    with np.errstate(invalid="ignore"):
        out[fin] = "undecided"
        out[fin & (delta > 0) & (delta >= margin)] = "log"
        out[fin & (delta < 0) & (delta <= -margin)] = "linear"
    return out


def scale_check(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    margin: float = 2.0,
    confidence_level: float = 0.95,
    nonpositive: str = "drop",
    skipna: bool = True,
    detection_limit: Any = None,
) -> dict[str, np.ndarray]:
    r"""Normal versus log-normal per group, compared on the original scale, with the Box-Cox power.

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
    margin : float
        AIC difference a scale needs to be preferred (default 2, the usual rule of thumb for AIC
        differences, Burnham & Anderson 2002); must be ``>= 0``.
    confidence_level : float
        Level of the profile-likelihood interval of the Box-Cox power.
    nonpositive : {"drop", "nan", "raise"}
        ``"drop"`` excludes values ``<= 0`` and counts them; ``"nan"`` makes the group's results NaN;
        ``"raise"`` is the caller's job (it knows the labels) and behaves as ``"drop"`` here.
    skipna : bool
        ``False`` makes a group with missing values NaN.
    detection_limit : None, float or array_like, optional
        None, one limit for all rows, or one per row (NaN = no limit). A value **at or below** its
        limit is censored (zeros and negatives included; ``nonpositive`` does not apply to them) and
        both AICs come from left-censored likelihoods (see Notes).

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        ``aic_normal``, ``aic_lognormal``
            ``AIC = 2k − 2 log L`` with ``k = 2``, both for the data on its original scale. NaN for
            fewer than 2 values; ``−inf`` when all values are equal (the likelihood is unbounded).
        ``preferred`` (object)
            ``"log"`` when ``delta_aic >= margin``, ``"linear"`` when ``delta_aic <= −margin``,
            ``"undecided"`` when ``|delta_aic| < margin`` (and at an exact tie), None when
            ``delta_aic`` is NaN.
        ``normality_p_linear``, ``normality_p_log``
            Normality test p-values of ``x`` and of ``ln x``: Shapiro-Wilk for ``3 <= n <= 5000``
            (Royston's AS R94 approximation, as ``scipy.stats.shapiro``), D'Agostino-Pearson K² for
            ``n > 5000`` (as ``scipy.stats.normaltest``). NaN for ``n < 3``, all values equal, or a
            group with censored values (the tests assume complete samples).
        ``mean``, ``gmean``
            Arithmetic and geometric mean of the positive values; for a group with censored values the
            censored MLEs: ``mean`` = the normal ``mu``, ``gmean`` = ``exp(mu)`` of the log-normal.
        ``mean_ratio``
            ``mean / gmean`` (at least 1 for complete data, by the AM-GM inequality).
        ``expected_ratio``
            ``exp(s²/2)``, what ``mean_ratio`` estimates if the data are log-normal; ``s²`` is the
            variance of ``ln x`` with ``ddof=1`` (NaN for ``n < 2``); with censored values the MLE
            ``sigma²`` (``ddof=0``).
        ``delta_aic``
            ``aic_normal − aic_lognormal``; positive favours the log scale. NaN when either model is
            undefined: fewer than 2 values, or all values equal up to rounding (relative spread of
            ``x`` or of ``ln x`` at most ``64·eps``), so rounding residue never yields a verdict.
        ``normality_test`` (object)
            ``"shapiro_wilk"``, ``"dagostino_pearson"`` or None (no test).
        ``skew_linear``, ``skew_log``
            Sample skewness ``m3/m2^1.5`` of ``x`` and of ``ln x`` (biased, i.e. not corrected;
            ``scipy.stats.skew`` with its default ``bias=True``); NaN with censored values.
        ``n``, ``n_missing``, ``n_nonpositive`` (int)
            Values used (censored ones included); values skipped as missing; values skipped as
            non-positive.
        ``boxcox_lambda``
            Maximum-likelihood Box-Cox power ``λ`` of ``(x^λ − 1)/λ`` (``ln x`` at 0): 0 supports the
            log scale, 1 the linear scale, 1/2 or 1/3 a power in between. Searched in ``[−5, 5]``: NaN
            when the maximum is not inside that range, for fewer than 3 values, all values equal, or a
            group with censored values (the censored profile is not computed).
        ``boxcox_ci_low``, ``boxcox_ci_high``
            Profile-likelihood interval: every ``λ`` whose profile log-likelihood is within
            ``χ²₁(confidence_level)/2`` of the maximum (as ``scipy.stats.boxcox(x, alpha=...)``). An
            end that lies beyond the search range ``[−5, 5]`` is NaN (the interval is open there).
        ``n_censored`` (int)
            Censored values used.

    Notes
    -----
    *Verdict.* AIC differences below about 2 are not evidence for either model (Burnham & Anderson
    2002, from memory); ``margin`` sets that threshold. With small ``n`` and a small coefficient of
    variation the two models are nearly the same and the verdict is mostly ``"undecided"``.

    *Box-Cox.* The profile log-likelihood of the Box-Cox model (Box & Cox 1964) is
    ``ℓ(λ) = (λ − 1)·Σ ln x − n/2·ln σ̂²(λ)`` with ``σ̂²(λ)`` the ``ddof=0`` variance of the transformed
    values. It is computed on logs centred at their mean (``x`` divided by its geometric mean), with
    ``(x^λ − 1)/λ`` as ``expm1(λ·z)/λ`` (a power series where ``|λz| < 0.05``) and rescaled by
    ``exp(−max λz)`` when that would overflow. All groups are solved together: a scan of ``λ`` on a grid
    of step 0.5 brackets the maximum and the interval ends, then safeguarded Newton steps (bisection
    when a step leaves its bracket) converge to about 1e-11 in ``λ``.

    *Censored values.* With a detection limit the log-normal log-likelihood is that of
    :func:`~logstats.stats.censored.fit_lognormal` (Jacobian included) and the normal one that of a
    left-censored normal fitted to ``x`` by the same globally convergent Newton method (Olsen 1978), both
    on the original scale: detects contribute densities, non-detects ``Φ`` at their limit. A group
    whose censored normal or log-normal MLE does not exist (all censored; one distinct detect and no
    limit below it) gets NaN AICs. Groups without censored values give exactly the uncensored results.

    All groups are handled at once: the values are sorted once by (group, value) and every sum is a
    ``np.bincount``. The Shapiro-Wilk coefficients depend only on ``n`` and the rank, so they are
    computed per row without a loop. The normal fit works on ``x / max(x)`` per group, so values up to
    1e300 (and down to 1e-300) neither overflow nor underflow.

    References
    ----------
    Akaike, H. (1974). A new look at the statistical model identification. IEEE Trans. Autom. Control
    19:716-723.
    Burnham, K. P. & Anderson, D. R. (2002). Model Selection and Multimodel Inference, 2nd ed.
    Springer (the rule of thumb for AIC differences; cited from memory).
    Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. J. R. Statist. Soc. B
    26:211-252.
    Shapiro, S. S. & Wilk, M. B. (1965). An analysis of variance test for normality (complete samples).
    Biometrika 52:591-611.
    Royston, P. (1995). Remark AS R94: A remark on algorithm AS 181: the W-test for normality. Applied
    Statistics 44:547-551.
    Beasley, J. D. & Springer, S. G. (1977). Algorithm AS 111: the percentage points of the normal
    distribution. Applied Statistics 26:118-121.
    D'Agostino, R. B. & Pearson, E. S. (1973). Tests for departure from normality. Biometrika
    60:613-622; Anscombe, F. J. & Glynn, W. J. (1983). Distribution of the kurtosis statistic b2 for
    normal samples. Biometrika 70:227-234.
    Olsen, R. J. (1978). Note on the uniqueness of the maximum likelihood estimator for the Tobit model.
    Econometrica 46:1211-1215 (cited from memory).

    Examples
    --------
    An invented log-normal sample of 200 values:

    >>> import numpy as np
    >>> x = np.random.default_rng(0).lognormal(0.0, 1.0, 200)
    >>> out = scale_check(x, np.zeros(200, dtype=int), 1)
    >>> out["preferred"], out["normality_test"], np.round(out["delta_aic"], 1)
    (array(['log'], dtype=object), array(['shapiro_wilk'], dtype=object), array([163.6]))
    >>> np.round([out["boxcox_lambda"][0], out["boxcox_ci_low"][0], out["boxcox_ci_high"][0]], 3)
    array([ 0.076, -0.053,  0.208])

    Ten invented values with a small spread cannot tell the scales apart:

    >>> y = np.random.default_rng(1).normal(100.0, 5.0, 10)
    >>> scale_check(y, np.zeros(10, dtype=int), 1)["preferred"]
    array(['undecided'], dtype=object)
    """
    check_nonpositive(nonpositive)
    margin = _check_margin(margin)
    level = _check_level(confidence_level)
    x = _values_1d(values)
    codes, G = _group_codes(codes, x.size, ngroups)
    dl = _detection_limits(detection_limit, x.size)
    if dl is None:
        out = _scale_uncensored(x, codes, G, margin, level)
        out["n_censored"] = np.zeros(G, dtype=np.int64)
    else:
        out = _scale_censored(x, codes, G, dl, margin, level, nonpositive, skipna)
    return _poison(out, skipna, nonpositive)


def _poison(out: dict[str, np.ndarray], skipna: bool, nonpositive: str) -> dict[str, np.ndarray]:
    """Apply ``skipna=False`` / ``nonpositive="nan"``: every statistic of such a group becomes NaN/None."""
    poisoned = np.zeros(out["n"].shape, dtype=bool)
    if not skipna:
        poisoned |= out["n_missing"] > 0
    if nonpositive == "nan":
        poisoned |= out["n_nonpositive"] > 0
    if poisoned.any():
        for key, arr in out.items():
            if key in _COUNT_KEYS:
                continue
            if arr.dtype == object:
                arr[poisoned] = None
            else:
                out[key] = np.where(poisoned, np.nan, arr)
    return out


def _sorted_groups(x: np.ndarray, codes: np.ndarray, G: int) -> dict[str, Any]:
    """Valid (positive, keyed) rows sorted by (group, value), with per-group moments on both scales."""
    lv = to_logs(x, where="values")
    mom = moments_by_codes(x, codes, G, where="values")
    n = np.asarray(mom.n, dtype=np.int64)
    nf = n.astype(np.float64)
    use = np.flatnonzero(lv.valid & (codes >= 0))
    xs, gs = group_sorted_values(x[use], codes[use], G)
    ys = np.log(xs)  # the same logs as lv.y, in sorted order
    starts = np.zeros(G, dtype=np.intp)
    np.cumsum(n[:-1], out=starts[1:])
    has = n > 0
    last = np.clip(starts + n - 1, 0, max(xs.size - 1, 0))
    first = np.clip(starts, 0, max(xs.size - 1, 0))
    xmax = np.where(has, xs[last], 1.0) if xs.size else np.ones(G)
    xmin = np.where(has, xs[first], 1.0) if xs.size else np.ones(G)
    u = xs / xmax[gs]
    mean_u, m2_u, m3_u, m4_u = _central_moments(u, gs, nf, G)
    mean_y, m2_y, m3_y, m4_y = _central_moments(ys, gs, nf, G)
    ymin, ymax = np.log(xmin), np.log(xmax)
    with np.errstate(invalid="ignore"):
        # all values equal, or equal up to rounding, on either scale (u <= 1, so m2_u is absolute)
        flat = has & ((xmin == xmax) | (np.sqrt(m2_u) <= _TINY)
                      | (np.sqrt(m2_y) <= _TINY * np.maximum(1.0, np.maximum(np.abs(ymin), np.abs(ymax)))))
    return dict(mom=mom, n=n, nf=nf, xs=xs, ys=ys, gs=gs, starts=starts, has=has, xmax=xmax, xmin=xmin,
                ymin=ymin, ymax=ymax, u=u, mean_u=mean_u, m2_u=m2_u, m3_u=m3_u, m4_u=m4_u, mean_y=mean_y,
                m2_y=m2_y, m3_y=m3_y, m4_y=m4_y, flat=flat, constant=has & (xmin == xmax))


def _scale_uncensored(x: np.ndarray, codes: np.ndarray, G: int, margin: float,
                      level: float) -> dict[str, np.ndarray]:
    s = _sorted_groups(x, codes, G)
    mom, n, nf, gs, xmax, xmin = s["mom"], s["n"], s["nf"], s["gs"], s["xmax"], s["xmin"]
    mean_u, m2_u, mean_y = s["mean_u"], s["m2_u"], s["mean_y"]
    has, constant, flat = s["has"], s["constant"], s["flat"]
    rank = np.arange(gs.size) - s["starts"][gs]
    nrow = n[gs]

    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # an overflow is honestly inf
        log_sd_x = 0.5 * np.log(m2_u) + np.log(xmax)
        log_sd_y = 0.5 * np.log(np.asarray(mom.m2_log) / nf)
        const = -0.5 * nf * (_LOG_2PI + 1.0)
        ll_norm = const - nf * log_sd_x
        ll_log = const - nf * log_sd_y - nf * np.asarray(mom.mean_log)
        two = n >= 2
        aic_normal = np.where(two, 4.0 - 2.0 * ll_norm, np.nan)
        aic_lognormal = np.where(two, 4.0 - 2.0 * ll_log, np.nan)
        aic_normal = np.where(two & constant, -np.inf, aic_normal)
        aic_lognormal = np.where(two & constant, -np.inf, aic_lognormal)
        delta = np.where(flat, np.nan, aic_normal - aic_lognormal)
        mean = mean_u * xmax
        mean_log = np.asarray(mom.mean_log, dtype=np.float64)
        gmean = np.exp(mean_log)
        mean_ratio = np.exp(np.log(mean_u) + np.log(xmax) - mean_log)
        expected_ratio = np.exp(0.5 * mom.var_log(1))

    # normality tests
    p_lin = np.full(G, np.nan)
    p_log = np.full(G, np.nan)
    test = np.full(G, None, dtype=object)
    sw = (n >= 3) & (n <= _SW_MAX_N)
    dp = n > _SW_MAX_N
    test[sw] = "shapiro_wilk"
    test[dp] = "dagostino_pearson"
    if sw.any():
        rsel = sw[gs]
        g_r, coef = gs[rsel], _sw_coefficients(rank[rsel], nrow[rsel], gs[rsel], G, n)
        w1x = _sw_statistic(s["u"][rsel], coef, g_r, G, nf, mean_u, 1.0 - xmin / xmax)
        w1y = _sw_statistic(s["ys"][rsel], coef, g_r, G, nf, mean_y, s["ymax"] - s["ymin"])
        _, px = _sw_pvalue(w1x, n)
        _, py = _sw_pvalue(w1y, n)
        p_lin = np.where(sw, px, p_lin)
        p_log = np.where(sw, py, p_log)
    if dp.any():
        p_lin = np.where(dp, _dagostino_pearson(m2_u, s["m3_u"], s["m4_u"], n), p_lin)
        p_log = np.where(dp, _dagostino_pearson(s["m2_y"], s["m3_y"], s["m4_y"], n), p_log)
    p_lin = np.where(constant, np.nan, p_lin)
    p_log = np.where(constant, np.nan, p_log)

    bc = _boxcox_groups(s["ys"], gs, mean_y, (n >= 3) & ~flat, G, level)
    return {
        "aic_normal": aic_normal,
        "aic_lognormal": aic_lognormal,
        "preferred": _verdict(delta, margin),
        "normality_p_linear": p_lin,
        "normality_p_log": p_log,
        "mean": np.where(has, mean, np.nan),
        "gmean": gmean,
        "mean_ratio": np.where(has, mean_ratio, np.nan),
        "expected_ratio": expected_ratio,
        "delta_aic": delta,
        "normality_test": test,
        "skew_linear": np.where(has, _skew(mean_u, m2_u, s["m3_u"]), np.nan),
        "skew_log": np.where(has, _skew(mean_y, s["m2_y"], s["m3_y"]), np.nan),
        "n": n,
        "n_missing": np.asarray(mom.n_missing, dtype=np.int64),
        "n_nonpositive": np.asarray(mom.n_nonpositive, dtype=np.int64),
        "boxcox_lambda": bc["lam"],
        "boxcox_ci_low": bc["ci_low"],
        "boxcox_ci_high": bc["ci_high"],
    }


def _boxcox_groups(ys: np.ndarray, gs: np.ndarray, mean_y: np.ndarray, eligible: np.ndarray, G: int,
                   level: float) -> dict[str, np.ndarray]:
    """Per-group Box-Cox lambda and interval for the ``eligible`` groups (NaN elsewhere)."""
    out = {key: np.full(G, np.nan) for key in ("lam", "ci_low", "ci_high")}
    if not eligible.any():
        return out
    rows = eligible[gs]
    comp = np.cumsum(eligible) - 1
    sel = np.flatnonzero(eligible)
    cell = comp[gs[rows]]
    z = ys[rows] - mean_y[gs[rows]]
    prob = _BoxCoxProblem(z, cell, np.arange(sel.size), sel.size)
    res = _boxcox_solve(prob, _chi2_1(level))
    for key in out:
        out[key][sel] = res[key]
    return out


def _chi2_1(level: float) -> float:
    """Quantile of chi-squared with 1 df at ``level``: ``Φ⁻¹((1 + level)/2)²``."""
    return float(special.ndtri(0.5 * (1.0 + level)) ** 2)


def _scale_censored(x: np.ndarray, codes: np.ndarray, G: int, dl: np.ndarray, margin: float, level: float,
                    nonpositive: str, skipna: bool) -> dict[str, np.ndarray]:
    """:func:`scale_check` with left-censoring: groups without censored values are exactly uncensored."""
    missing = np.isnan(x)
    with np.errstate(invalid="ignore"):
        cens = ~missing & ~np.isnan(dl) & (x <= dl)
    keyed = codes >= 0
    m = _count(cens, codes, G)
    # uncensored statistics of the detects alone (censored rows put in no group)
    out = _scale_uncensored(x, np.where(cens, -1, codes), G, margin, level)
    out["n_censored"] = m
    out["n"] = out["n"] + m
    cg_any = m > 0
    if not cg_any.any():
        return out

    fit = fit_lognormal(x, codes, G, detection_limit=dl, nonpositive=nonpositive, skipna=skipna)
    lv = to_logs(x, where="values")
    det = lv.valid & ~cens & keyed
    k = _count(det, codes, G)
    # censored normal on x, scaled per group by the largest |value| or limit
    scale = np.zeros(G)
    np.maximum.at(scale, codes[det], x[det])
    csel = cens & keyed
    np.maximum.at(scale, codes[csel], dl[csel])
    scale = np.where(scale > 0, scale, 1.0)
    u = x[det] / scale[codes[det]]
    gd = codes[det]
    kf = k.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        ubar0 = np.bincount(gd, weights=u, minlength=G) / kf
        du = u - ubar0[gd]
        ubar = ubar0 + np.bincount(gd, weights=du, minlength=G) / kf
        du = u - ubar[gd]
        m2 = np.bincount(gd, weights=du * du, minlength=G)
    umin = np.full(G, np.inf)
    umax = np.full(G, -np.inf)
    np.minimum.at(umin, gd, u)
    np.maximum.at(umax, gd, u)
    cc = dl[csel] / scale[codes[csel]]
    cmin = np.full(G, np.inf)
    np.minimum.at(cmin, codes[csel], cc)
    fits = cg_any & (k > 0) & ~((umin == umax) & ~(cmin < umin))
    ll_norm = np.full(G, np.nan)
    mu_norm = np.full(G, np.nan)
    if fits.any():
        res = _censored_newton(k, ubar, m2, codes[csel], cc, np.flatnonzero(fits), G, 100, 1e-10)
        idx = res["index"]
        # _censored_newton's log-likelihood includes the log-scale Jacobian −k·ȳ: remove it, then undo
        # the scaling by `scale` (a density in x is the density in u divided by scale)
        ll_u = res["loglik"] + kf[idx] * ubar[idx]
        ok = res["converged"]
        ll_norm[idx] = np.where(ok, ll_u - kf[idx] * np.log(scale[idx]), np.nan)
        mu_norm[idx] = np.where(ok, res["mu"] * scale[idx], np.nan)
    ll_log = np.where(fit["converged"] & np.isfinite(fit["loglik"]), fit["loglik"], np.nan)
    aic_n = 4.0 - 2.0 * ll_norm
    aic_l = 4.0 - 2.0 * ll_log
    delta = aic_n - aic_l
    c = cg_any
    out["aic_normal"] = np.where(c, aic_n, out["aic_normal"])
    out["aic_lognormal"] = np.where(c, aic_l, out["aic_lognormal"])
    out["delta_aic"] = np.where(c, delta, out["delta_aic"])
    out["preferred"] = np.where(c, _verdict(delta, margin), out["preferred"])
    with np.errstate(over="ignore", invalid="ignore"):
        gmean = np.exp(fit["mu"])
        out["mean"] = np.where(c, mu_norm, out["mean"])
        out["gmean"] = np.where(c, gmean, out["gmean"])
        out["mean_ratio"] = np.where(c, mu_norm / gmean, out["mean_ratio"])
        out["expected_ratio"] = np.where(c, np.exp(0.5 * fit["sigma"] ** 2), out["expected_ratio"])
    for key in ("normality_p_linear", "normality_p_log", "skew_linear", "skew_log", "boxcox_lambda",
                "boxcox_ci_low", "boxcox_ci_high"):
        out[key] = np.where(c, np.nan, out[key])
    test = out["normality_test"].copy()
    test[c] = None
    out["normality_test"] = test
    return out


def scale_check_pooled(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    margin: float = 2.0,
    confidence_level: float = 0.95,
    nonpositive: str = "drop",
    skipna: bool = True,
    detection_limit: Any = None,
) -> dict[str, Any]:
    r"""One scale verdict across groups that keep their own location, and the mean-spread law.

    The question of :func:`scale_check` asked of all groups together, as for a designed experiment
    with several conditions: each group has its own mean, all share one spread (the one-way layout).
    A normal model with group means and a common SD on ``x`` is compared by AIC with a log-normal model
    with group means and a common SD on ``ln x`` (its likelihood includes the Jacobian ``−Σ ln x``, so
    both refer to the same data on the original scale); one common Box-Cox power is fitted in the same
    layout. Across groups, the slope of ``ln SD`` on ``ln mean`` tells how the spread grows with the
    level.

    Parameters
    ----------
    values, codes, ngroups
        As for :func:`scale_check`; groups with fewer than 2 positive values are left out (and counted
        out of ``n_groups``).
    margin : float
        AIC difference a scale needs to be preferred (default 2); must be ``>= 0``.
    confidence_level : float
        Level of the Box-Cox interval and of the interval of ``spread_slope``.
    nonpositive : {"drop", "nan", "raise"}
        As for :func:`scale_check`; with ``"nan"`` a non-positive value in any group makes the whole
        (pooled) result NaN.
    skipna : bool
        ``False``: a missing value in any group makes the whole result NaN.
    detection_limit : None, float or array_like, optional
        As for :func:`scale_check`. The pooled censored fit is not computed: when any value is censored
        every statistic is NaN and ``note`` says so; with nothing censored the result is the uncensored
        one.

    Returns
    -------
    dict of str to 0-d ndarray
        ``aic_normal``, ``aic_lognormal``
            ``AIC = 2k − 2 log L`` with ``k = n_groups + 1`` (group means and one SD, ``ddof=0``
            maximum likelihood), on the original scale.
        ``delta_aic``, ``preferred``
            ``aic_normal − aic_lognormal`` and the verdict ``"log"`` / ``"linear"`` / ``"undecided"``
            by ``margin``, as in :func:`scale_check` (None where ``delta_aic`` is NaN).
        ``boxcox_lambda``, ``boxcox_ci_low``, ``boxcox_ci_high``
            The common Box-Cox power maximising the profile likelihood of the one-way model on the
            Box-Cox scale, ``ℓ(λ) = (λ − 1)·Σ ln x − N/2·ln(SSW(λ)/N)`` (SSW the within-group sum of
            squares of ``(x^λ − 1)/λ``), with its profile-likelihood interval (chi-squared, 1 df);
            searched in ``[−5, 5]``, NaN as in :func:`scale_check`.
        ``spread_slope``, ``spread_slope_ci_low``, ``spread_slope_ci_high``
            Ordinary least squares of ``ln SD`` on ``ln mean`` across groups (arithmetic mean and SD of
            each group's positive values, SD with ``ddof=1``), with the t interval on
            ``spread_n_groups − 2`` degrees of freedom. A slope near 1 means a spread proportional to
            the level (multiplicative noise: the log scale); near 0, additive noise (the linear scale);
            1/2, counting-like noise (a square root).
        ``implied_power``
            ``1 − spread_slope``: the power ``x^p`` that makes the spread constant (0 = log).
        ``spread_n_groups`` (int)
            Groups in the regression: at least 2 values and a positive SD.
        ``note`` (object)
            None, or why a statistic is NaN (fewer than 3 groups for the spread law, all group means
            equal, censored values).
        ``n_groups``, ``n`` (int)
            Groups used (at least 2 positive values) and the values in them.
        ``n_missing``, ``n_nonpositive``, ``n_censored`` (int)
            Totals over all groups.

    Notes
    -----
    The mean-spread law is the classical guide to a variance-stabilising power (Bartlett 1947): if the
    SD grows like ``mean^b`` then ``x^(1−b)`` (``ln x`` when ``b = 1``) has a constant spread. Both it and
    the common Box-Cox power assume the groups differ in level; with groups of nearly equal means the
    slope is poorly determined (a wide interval) and the AIC comparison carries the evidence.

    References
    ----------
    Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. J. R. Statist. Soc. B
    26:211-252 (the one-way layout is one of their examples).
    Bartlett, M. S. (1947). The use of transformations. Biometrics 3:39-52 (cited from memory).
    Akaike, H. (1974). A new look at the statistical model identification. IEEE Trans. Autom. Control
    19:716-723.

    Examples
    --------
    Four invented conditions whose spread is proportional to their level (multiplicative noise):

    >>> import numpy as np
    >>> rng = np.random.default_rng(2)
    >>> level = np.repeat([1.0, 5.0, 20.0, 100.0], 30)
    >>> x = level * rng.lognormal(0.0, 0.3, level.size)
    >>> out = scale_check_pooled(x, np.repeat(np.arange(4), 30), 4)
    >>> str(out["preferred"]), int(out["n_groups"])
    ('log', 4)
    >>> np.round([out["spread_slope"], out["boxcox_lambda"]], 2)
    array([1.01, 0.  ])
    """
    check_nonpositive(nonpositive)
    margin = _check_margin(margin)
    level = _check_level(confidence_level)
    x = _values_1d(values)
    codes, G = _group_codes(codes, x.size, ngroups)
    dl = _detection_limits(detection_limit, x.size)
    n_cens = 0
    if dl is not None:
        with np.errstate(invalid="ignore"):
            cens = ~np.isnan(x) & ~np.isnan(dl) & (x <= dl) & (codes >= 0)
        n_cens = int(cens.sum())
    lv = to_logs(x, where="values")
    mom = moments_by_codes(x, codes, G, where="values")
    n_g = np.asarray(mom.n, dtype=np.int64)
    n_missing = np.asarray(mom.n_missing, dtype=np.int64)
    n_nonpos = np.asarray(mom.n_nonpositive, dtype=np.int64)
    if n_cens:
        # censored rows are not missing and not counted as non-positive; count them apart
        n_g = n_g - _count(cens & lv.valid, codes, G)
        n_nonpos = n_nonpos - _count(cens & lv.nonpositive, codes, G)

    nan = np.float64(np.nan)
    out: dict[str, Any] = {key: np.array(nan) for key in (
        "aic_normal", "aic_lognormal", "delta_aic", "boxcox_lambda", "boxcox_ci_low", "boxcox_ci_high",
        "spread_slope", "spread_slope_ci_low", "spread_slope_ci_high", "implied_power")}
    out["preferred"] = np.array(None, dtype=object)
    out["spread_n_groups"] = np.array(0, dtype=np.int64)
    out["note"] = np.array(None, dtype=object)
    used = n_g >= 2
    out["n_groups"] = np.array(int(used.sum()), dtype=np.int64)
    out["n"] = np.array(int(n_g[used].sum()), dtype=np.int64)
    out["n_missing"] = np.array(int(n_missing.sum()), dtype=np.int64)
    out["n_nonpositive"] = np.array(int(n_nonpos.sum()), dtype=np.int64)
    out["n_censored"] = np.array(n_cens, dtype=np.int64)
    if n_cens:
        out["note"] = np.array(f"{n_cens} censored value(s): the pooled censored fit is not computed",
                               dtype=object)
        return out
    if (not skipna and n_missing.sum() > 0) or (nonpositive == "nan" and n_nonpos.sum() > 0):
        why = "missing values with skipna=False" if not skipna and n_missing.sum() > 0 else \
            'non-positive values with nonpositive="nan"'
        out["note"] = np.array(f"result undefined: {why}", dtype=object)
        return out
    if not used.any():
        out["note"] = np.array("no group with 2 or more positive values", dtype=object)
        return out

    s = _sorted_groups(x, np.where(used[np.maximum(codes, 0)] & (codes >= 0), codes, -1), G)
    nf, gs, xmax = s["nf"], s["gs"], s["xmax"]
    N = float(out["n"])
    K = int(out["n_groups"])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        # within-group sums of squares: x (scaled per group, summed in logs) and ln x
        lss_x = np.log(s["m2_u"] * nf) + 2.0 * np.log(xmax)
        lss_x = lss_x[used]
        top = np.max(lss_x)
        lssw_x = top + np.log(np.sum(np.exp(lss_x - top))) if np.isfinite(top) else top
        ssw_y = float(np.sum((s["m2_y"] * nf)[used]))
        sum_y = float(np.sum(s["ys"]))
        const = -0.5 * N * (_LOG_2PI + 1.0)
        ll_norm = const - 0.5 * N * (lssw_x - math.log(N))
        ll_log = const - 0.5 * N * np.log(ssw_y / N) - sum_y
        k_par = K + 1
        aic_n = 2.0 * k_par - 2.0 * ll_norm
        aic_l = 2.0 * k_par - 2.0 * ll_log
    ymax_abs = float(np.max(np.maximum(np.abs(s["ymin"]), np.abs(s["ymax"]))[used]))
    flat = (not np.isfinite(lssw_x)) or math.sqrt(ssw_y / N) <= _TINY * max(1.0, ymax_abs) \
        or float(np.max(s["m2_u"][used] * nf[used])) <= _TINY**2 * N
    if np.isneginf(lssw_x) or ssw_y == 0.0:
        aic_n = aic_l = -np.inf
    out["aic_normal"] = np.array(aic_n, dtype=np.float64)
    out["aic_lognormal"] = np.array(aic_l, dtype=np.float64)
    delta = np.array(np.nan if flat else aic_n - aic_l, dtype=np.float64)
    out["delta_aic"] = delta
    out["preferred"] = np.array(_verdict(delta.reshape(1), margin)[0], dtype=object)

    if not flat and N - K >= 2:
        cell_of_group = np.cumsum(used) - 1
        z = s["ys"] - sum_y / N
        prob = _BoxCoxProblem(z, cell_of_group[gs], np.zeros(K, dtype=np.intp), 1)
        res = _boxcox_solve(prob, _chi2_1(level))
        out["boxcox_lambda"] = np.array(res["lam"][0])
        out["boxcox_ci_low"] = np.array(res["ci_low"][0])
        out["boxcox_ci_high"] = np.array(res["ci_high"][0])

    # mean-spread law across groups
    with np.errstate(divide="ignore", invalid="ignore"):
        log_mean = np.log(s["mean_u"]) + np.log(xmax)
        log_sd = 0.5 * np.log(s["m2_u"] * nf / (nf - 1.0)) + np.log(xmax)
    reg = used & np.isfinite(log_sd) & np.isfinite(log_mean) & (s["m2_u"] > _TINY**2)
    ks = int(reg.sum())
    out["spread_n_groups"] = np.array(ks, dtype=np.int64)
    if ks < 3:
        out["note"] = np.array(f"spread law needs 3 or more groups with 2 or more values and a positive SD; "
                               f"got {ks}", dtype=object)
        return out
    lx, ly = log_mean[reg], log_sd[reg]
    mx, my = lx.mean(), ly.mean()
    sxx = float(np.sum((lx - mx) ** 2))
    if not sxx > (_TINY * max(1.0, float(np.max(np.abs(lx))))) ** 2 * ks:
        out["note"] = np.array("spread law undefined: the group means are all equal", dtype=object)
        return out
    slope = float(np.sum((lx - mx) * (ly - my)) / sxx)
    resid = ly - my - slope * (lx - mx)
    df = ks - 2
    se = math.sqrt(float(np.sum(resid**2)) / df / sxx)
    tq = float(special.stdtrit(df, 0.5 * (1.0 + level)))
    out["spread_slope"] = np.array(slope)
    out["spread_slope_ci_low"] = np.array(slope - tq * se)
    out["spread_slope_ci_high"] = np.array(slope + tq * se)
    out["implied_power"] = np.array(1.0 - slope)
    return out


# ------------------------------------------------------------------------------------------- Box-Cox

_BC_LO, _BC_HI = -5.0, 5.0  # search range of lambda
_BC_GRID = np.linspace(_BC_LO, _BC_HI, 21)  # coarse scan (step 0.5) that brackets the maximum
_BC_SHIFT = 30.0  # beyond exp(30) the transformed values are rescaled by exp(-max t) (no overflow)
_BC_SERIES = 0.05  # |t| below this: E_j from their power series (the closed forms cancel)
_BC_TERMS = 7
_BC_TOL = 1e-11
_BC_MAX_ITER = 100


class _BoxCoxProblem:
    """Box-Cox profile log-likelihoods of several independent problems, evaluated all at once.

    Each row belongs to a *cell* (a group with its own mean) and each cell to a *problem* (one lambda
    and one common variance). Per-group Box-Cox: one cell per problem; the pooled fit: many cells, one
    problem. ``z`` are logs centred by a per-problem constant ``ln GM``: since
    ``(x^λ − 1)/λ = GM^λ·(e^{λz} − 1)/λ + const``, the profile log-likelihood is, up to a constant,
    ``−N/2·h(λ)`` with ``h(λ) = ln(SSW(w_λ)/N)`` and ``w_λ = z·E₁(λz)`` where
    ``E_j(t) = ∫₀¹ s^{j−1} e^{ts} ds`` (``E₁(t) = expm1(t)/t``). Its derivatives use
    ``dw/dλ = z²E₂(λz)`` and ``d²w/dλ² = z³E₃(λz)``.
    """

    def __init__(self, z: np.ndarray, cell: np.ndarray, cell_prob: np.ndarray, nprob: int) -> None:
        self.z = z
        self.cell = cell
        self.ncell = cell_prob.size
        self.prow = cell_prob[cell]
        self.nprob = nprob
        self.cell_sums = GroupSums(cell, self.ncell)
        self.prob_sums = GroupSums(self.prow, nprob)
        self.cnt = self.cell_sums.counts.astype(np.float64)
        self.N = self.prob_sums.counts.astype(np.float64)
        zmax = np.full(nprob, -np.inf)
        zmin = np.full(nprob, np.inf)
        np.maximum.at(zmax, self.prow, z)
        np.minimum.at(zmin, self.prow, z)
        self.zmax, self.zmin = zmax, zmin
        self._buffers: dict[str, np.ndarray] = {}

    def _shift(self, lam: np.ndarray) -> np.ndarray:
        """Per-problem ``c = max λz`` when that exceeds the overflow guard, else 0."""
        c = np.where(lam > 0, lam * self.zmax, lam * self.zmin)
        return np.where(c > _BC_SHIFT, c, 0.0)

    def _buffer(self, name: str) -> np.ndarray:
        """A row-length work array kept between evaluations (fresh multi-megabyte temporaries at every
        evaluation cost more in page faults than the arithmetic done in them)."""
        buf = self._buffers.get(name)
        if buf is None:
            buf = self._buffers[name] = np.empty(self.z.size)
        return buf

    def _ss(self, w: np.ndarray, into: str) -> tuple[np.ndarray, np.ndarray]:
        """Deviations of ``w`` from its cell means (in buffer ``into``), and their sum of squares per
        problem."""
        d = self.cell_sums.spread(self.cell_sums.sum(w) / self.cnt, self._buffer(into))
        np.subtract(w, d, out=d)
        return d, self.prob_sums.sum(np.multiply(d, d, out=self._buffer("tmp")))

    def eval(self, lam: np.ndarray, order: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``h``, ``h'``, ``h''`` at per-problem ``lam`` (derivatives only up to ``order``, else NaN).

        ``w = expm1(λz)/λ`` is accurate for every ``λ ≠ 0``; its derivatives follow from
        ``w' = (z·e^{λz} − w)/λ`` and ``w'' = (z²·e^{λz} − 2w')/λ``, which cancel for small ``|λz|``: there
        the power series of ``E₂``, ``E₃`` are used instead. Problems where ``λz`` would overflow are
        computed on the ``exp(λz − c)`` scale, ``c = max λz`` (the factor cancels in ``h'`` and ``h''``);
        there ``w`` itself comes from the series of ``E₁`` for small ``|λz|`` (``e^{t−c} − e^{−c}`` cancels).
        """
        z = self.z
        ps = self.prob_sums
        buf = self._buffer
        nan = np.full(self.nprob, np.nan)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
            c = self._shift(lam)
            t = np.multiply(ps.spread(lam, buf("t")), z, out=buf("t"))
            inv = ps.spread(1.0 / lam, buf("inv"))
            shifted = bool((c > 0).any())
            e = buf("e")
            if shifted:
                cs = ps.spread(c, buf("tmp"))
                np.subtract(t, cs, out=e)
                np.exp(e, out=e)
                ec = np.exp(-cs)
                em1 = np.where(cs > 0, e - ec, np.expm1(t))
            else:
                em1 = np.expm1(t, out=e)
            w = np.multiply(em1, inv, out=buf("w"))
            zero = lam == 0.0
            if zero.any():
                np.copyto(w, z, where=ps.spread(zero.astype(np.float64), buf("tmp")) > 0)
            need_series = order >= 1 or shifted
            small = np.flatnonzero(np.abs(t) < _BC_SERIES) if need_series else np.zeros(0, dtype=np.intp)
            if small.size:
                s1, s2, s3 = _series(t[small], order, shifted)
                zs = z[small]
                scl = ec[small] if shifted else 1.0
                if shifted:
                    w[small] = zs * s1 * scl
            d, ss = self._ss(w, "d")
            h = np.log(ss / self.N) + 2.0 * c
            if order < 1:
                return h, nan, nan
            if not shifted:
                e += 1.0  # e^{λz}, from expm1
            ze = np.multiply(z, e, out=e)
            w1 = np.subtract(ze, w, out=buf("w1"))
            w1 *= inv
            if small.size:
                w1[small] = zs * zs * s2 * scl
            c01 = ps.sum(np.multiply(d, w1, out=buf("tmp")))
            h1 = 2.0 * c01 / ss
            if order < 2:
                return h, h1, nan
            w2 = np.multiply(z, ze, out=buf("w2"))
            w2 -= w1
            w2 -= w1
            w2 *= inv
            if small.size:
                w2[small] = zs * zs * zs * s3 * scl
            c02 = ps.sum(np.multiply(d, w2, out=buf("tmp")))
            _, s11 = self._ss(w1, "d1")
            h2 = 2.0 * (s11 + c02) / ss - h1 * h1
        return h, h1, h2


#: Coefficients of ``E_j(t) = Σ_k t^k / (k!·(k + j))`` (j = 1, 2, 3), for Horner's rule.
_BC_COEF = {j: np.array([1.0 / (math.factorial(k) * (k + j)) for k in range(_BC_TERMS)]) for j in (1, 2, 3)}


def _series(t: np.ndarray, order: int, with_e1: bool) -> tuple[Any, Any, Any]:
    """``E₁`` (only when ``with_e1``), ``E₂`` (order >= 1) and ``E₃`` (order >= 2) at small ``|t|``."""

    def horner(j: int) -> np.ndarray:
        coef = _BC_COEF[j]
        s = np.full_like(t, coef[-1])
        for ck in coef[-2::-1]:
            s *= t
            s += ck
        return s

    return (horner(1) if with_e1 else None, horner(2) if order >= 1 else None,
            horner(3) if order >= 2 else None)


def _boxcox_solve(prob: _BoxCoxProblem, q: float) -> dict[str, np.ndarray]:
    """Maximum-likelihood lambda and the profile-likelihood interval ``h(λ) <= h(λ̂) + q/N``.

    A coarse scan on :data:`_BC_GRID` brackets the maximum and both interval ends; each is then found
    by safeguarded Newton iteration (a Newton step that leaves the bracket is replaced by bisection,
    the bracket shrinks on the sign of the function), for all problems at once.
    """
    hg = np.stack([prob.eval(np.full(prob.nprob, g), 0)[0] for g in _BC_GRID], axis=1)  # (problems, grid)
    ok = np.isfinite(hg).all(axis=1)
    hg_safe = np.where(np.isfinite(hg), hg, np.inf)
    k = np.argmin(hg_safe, axis=1)
    last = _BC_GRID.size - 1
    a = _BC_GRID[np.maximum(k - 1, 0)]
    b = _BC_GRID[np.minimum(k + 1, last)]
    lam = _BC_GRID[k].copy()

    # maximum: root of h' in [a, b]
    active = ok.copy()
    for _ in range(_BC_MAX_ITER):
        if not active.any():
            break
        _, h1, h2 = prob.eval(lam, 2)
        with np.errstate(invalid="ignore"):
            a = np.where(active & (h1 < 0), lam, a)
            b = np.where(active & (h1 > 0), lam, b)
            with np.errstate(divide="ignore"):
                step = -h1 / h2
            newton = lam + step
            inside = (h2 > 0) & (newton > a) & (newton < b)
            nxt = np.where(inside, newton, 0.5 * (a + b))
        done = active & (((h2 > 0) & (np.abs(step) < _BC_TOL)) | (b - a < _BC_TOL) | (h1 == 0))
        lam = np.where(active & ~done, nxt, lam)
        active &= ~done
    hmin, h1, _ = prob.eval(lam, 1)
    edge = 1e-6
    interior = ok & (lam > _BC_LO + edge) & (lam < _BC_HI - edge)
    lam_out = np.where(interior, lam, np.nan)

    # interval ends: roots of h(λ) − target on either side, bracketed from the scan
    target = hmin + q / prob.N
    ends = []
    for side in (1, -1):
        above = hg_safe > target[:, None]
        grid = _BC_GRID[None, :]
        # first scan point beyond the maximum (on this side) where h exceeds the target
        beyond = above & ((grid > lam[:, None]) if side > 0 else (grid < lam[:, None]))
        found = beyond.any(axis=1)
        if side > 0:
            j = np.where(found, np.argmax(beyond, axis=1), last)
            inner = _BC_GRID[np.maximum(j - 1, 0)]
            lo_b = np.where(inner > lam, inner, lam)  # the previous scan point, if past the maximum
            hi_b = _BC_GRID[j]
        else:
            j = np.where(found, last - np.argmax(beyond[:, ::-1], axis=1), 0)
            inner = _BC_GRID[np.minimum(j + 1, last)]
            hi_b = np.where(inner < lam, inner, lam)
            lo_b = _BC_GRID[j]
        act = interior & found
        x = 0.5 * (lo_b + hi_b)
        for _ in range(_BC_MAX_ITER):
            if not act.any():
                break
            h, d1, _ = prob.eval(x, 1)
            g = h - target
            with np.errstate(invalid="ignore", divide="ignore"):
                # g > 0 beyond the end, g < 0 between the maximum and the end
                move_hi = (g > 0) if side > 0 else (g < 0)
                hi_b = np.where(act & move_hi, x, hi_b)
                lo_b = np.where(act & ~move_hi, x, lo_b)
                step = -g / d1
                newton = x + step
                inside = (newton > lo_b) & (newton < hi_b)
                nxt = np.where(inside, newton, 0.5 * (lo_b + hi_b))
            done = act & ((np.abs(step) < _BC_TOL) | (hi_b - lo_b < _BC_TOL) | (g == 0))
            x = np.where(act & ~done, nxt, x)
            act &= ~done
        ends.append(np.where(interior & found, x, np.nan))
    return {"lam": lam_out, "ci_high": ends[0], "ci_low": ends[1], "hmin": np.where(interior, hmin, np.nan)}
