"""Upper tails of log-normal data: percentiles, tolerance limits and exceedance of a limit (numpy + scipy).

Pure functions of :class:`~logstats.core.moments.LogMoments` (element-wise over any shape, i.e.
vectorised over groups) and, for the censored versions and the observed counts, of raw values with
integer group codes. Notation: ``y = ln x``, ``ȳ`` the mean of the logs, ``s`` their standard deviation
with ``ddof=1``, ``n`` the count, ``z_p`` the standard normal quantile.

* :func:`quantile` -- ``exp(ȳ + z_q s)`` with its exact interval (non-central t).
* :func:`tolerance_limit` -- one-sided (exact, non-central t) and two-sided (exact, numerical
  Odeh-Owen integral) tolerance limits.
* :func:`exceedance` -- share of the population above a limit, exact interval by inverting the
  non-central t in its non-centrality; :func:`count_exceed` counts observed values above it.
* :func:`quantile_censored`, :func:`tolerance_limit_censored`, :func:`exceedance_censored` -- the same
  from a censored maximum-likelihood fit (approximate intervals).

Caution: these results can feed regulatory and safety decisions (exceedance of limits, exposure
assessment, specification limits). They support, and do not replace, validated tools, qualified
statistical review, local rules and licensed practice.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import special, stats
from scipy.optimize import elementwise

from logstats.core.moments import LogMoments
from logstats.core.transform import as_float_array, check_nonpositive
from logstats.stats._common import _group_codes, _values_1d
from logstats.stats.censored import fit_lognormal

__all__ = [
    "TOLERANCE_SIDES",
    "count_exceed",
    "exceedance",
    "exceedance_censored",
    "quantile",
    "quantile_censored",
    "tolerance_factor",
    "tolerance_limit",
    "tolerance_limit_censored",
]

#: Values accepted by ``side=`` in :func:`tolerance_limit`.
TOLERANCE_SIDES: tuple[str, ...] = ("upper", "lower", "both")

_GL_Z, _GL_W = np.polynomial.legendre.leggauss(96)  # nodes on [-1, 1] for the two-sided integral
_Z_MAX = 10.0  # the two-sided integral runs over z in [0, 10]; phi(10) = 7.7e-23
_ROOT_TOL = {"xatol": 1e-12, "xrtol": 1e-12, "fatol": 0.0, "frtol": 0.0}


# ----------------------------------------------------------------------------------------------- checks

def _check_prob(value: Any, name: str) -> float:
    try:
        p = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a number strictly between 0 and 1; got {value!r}") from None
    if not 0.0 < p < 1.0:
        raise ValueError(f"{name}={value!r} must lie strictly between 0 and 1")
    return p


def _check_side(side: Any) -> str:
    if side not in TOLERANCE_SIDES:
        raise ValueError(f"side={side!r} is not one of {', '.join(map(repr, TOLERANCE_SIDES))}")
    return str(side)


def _check_moments(m: Any) -> LogMoments:
    if not isinstance(m, LogMoments):
        raise TypeError(f"m must be a LogMoments; got {type(m).__name__}")
    return m


def _parts(m: LogMoments) -> tuple[tuple[int, ...], np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Shape, and flat ``n``, ``ȳ``, ``s`` (ddof=1) and the mask of groups with ``n >= 2``."""
    shape = np.shape(m.n)
    n = np.asarray(m.n, dtype=np.float64).ravel()
    ybar = np.asarray(m.mean_log, dtype=np.float64).ravel()
    s = np.sqrt(np.asarray(m.var_log(1), dtype=np.float64).ravel())
    ok = (n >= 2) & np.isfinite(ybar) & np.isfinite(s)
    return shape, n, ybar, s, ok


def _exp(a: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore"):
        return np.exp(a)


# ----------------------------------------------------------------------------------------------- factors

def _nct_factor(p: float, z: float, n: np.ndarray) -> np.ndarray:
    """``t'_p(n−1, z·√n)/√n`` element-wise (NaN where ``n < 2``); one scipy call per distinct ``n``."""
    n = np.asarray(n, dtype=np.float64)
    out = np.full(n.shape, np.nan)
    ok = n >= 2
    if ok.any():
        uniq, inv = np.unique(n[ok], return_inverse=True)
        rn = np.sqrt(uniq)
        out[ok] = (stats.nct.ppf(p, uniq - 1.0, z * rn) / rn)[inv]
    return out


def _coverage_radius(x: np.ndarray, coverage: float) -> np.ndarray:
    """``r(x)`` with ``Φ(x + r) − Φ(x − r) = coverage`` for ``x >= 0`` (element-wise, bracketed root)."""
    lo = np.maximum(x + special.ndtri(coverage), 0.0)
    hi = x + special.ndtri(0.5 + coverage / 2.0)

    def f(r: np.ndarray, xx: np.ndarray) -> np.ndarray:
        return special.ndtr(xx + r) - special.ndtr(xx - r) - coverage

    res = elementwise.find_root(f, (lo, hi), args=(x,), tolerances=_ROOT_TOL)
    return np.asarray(res.x)


def _two_sided_factor(n: np.ndarray, coverage: float, confidence_level: float) -> np.ndarray:
    """Exact two-sided tolerance factor for each distinct ``n`` (see :func:`tolerance_factor`)."""
    nu = n - 1.0
    zn = 0.5 * _Z_MAX * (_GL_Z + 1.0)  # Gauss-Legendre nodes on [0, Z_MAX]
    wz = 0.5 * _Z_MAX * _GL_W * np.exp(-0.5 * zn * zn) / np.sqrt(2.0 * np.pi)
    r = _coverage_radius(zn[None, :] / np.sqrt(n)[:, None], coverage)  # (distinct n, nodes)
    r2 = nu[:, None] * r * r

    def conf(k: np.ndarray, row: np.ndarray) -> np.ndarray:
        # P(tolerance interval with factor k covers >= coverage) - confidence_level, both halves of z
        row = row.astype(np.intp)
        kk = k[..., None]
        with np.errstate(divide="ignore", over="ignore"):
            q = special.chdtrc(nu[row][..., None], r2[row] / (kk * kk))
        return 2.0 * np.sum(wz * q, axis=-1) - confidence_level

    # Howe's (1969) approximation starts the bracket, which is then widened until it holds the root
    howe = np.sqrt(nu * (1.0 + 1.0 / n) * special.ndtri(0.5 + coverage / 2.0) ** 2
                   / special.chdtri(nu, confidence_level))
    lo, hi = 0.5 * howe, 2.0 * howe
    rows = np.arange(n.size, dtype=np.float64)
    for _ in range(60):
        flo = conf(lo, rows)
        fhi = conf(hi, rows)
        bad_lo, bad_hi = flo > 0, fhi < 0
        if not (bad_lo.any() or bad_hi.any()):
            break
        lo = np.where(bad_lo, 0.5 * lo, lo)
        hi = np.where(bad_hi, 2.0 * hi, hi)
    res = elementwise.find_root(conf, (lo, hi), args=(rows,), tolerances=_ROOT_TOL)
    return np.asarray(res.x)


def tolerance_factor(
    n: Any,
    *,
    coverage: float = 0.95,
    confidence_level: float = 0.95,
    side: str = "upper",
) -> np.ndarray:
    r"""Normal tolerance factor ``k`` (limits ``ȳ ± k·s``, ``s`` with ``ddof=1``), element-wise over ``n``.

    Parameters
    ----------
    n : array_like of int
        Sample sizes; the result has their shape and is NaN where ``n < 2``.
    coverage : float
        Share of the population the interval should contain (``β``), strictly between 0 and 1.
    confidence_level : float
        Confidence ``γ`` that it does, strictly between 0 and 1.
    side : {"upper", "lower", "both"}
        ``"upper"`` and ``"lower"`` give the one-sided factor (the same number), ``"both"`` the
        two-sided factor.

    Returns
    -------
    ndarray of float

    Notes
    -----
    *One-sided* (exact): ``k = t'_γ(n−1, z_β·√n)/√n`` with ``t'`` the non-central t quantile
    (``scipy.stats.nct.ppf``), the classical result of Owen (1958) and the NIST/SEMATECH e-Handbook
    (section 7.2.6.3).

    *Two-sided* (exact, computed numerically): ``k`` solves

    .. math:: 2\int_0^\infty \phi(z)\,
              P\!\left(\chi^2_{n-1} \ge \frac{(n-1)\,r(z/\sqrt{n})^2}{k^2}\right) dz = \gamma,

    where ``r(x)`` solves ``Φ(x + r) − Φ(x − r) = β`` (Wald & Wolfowitz 1946; the computation behind the
    tables of Odeh & Owen 1980). The integral is a 96-point Gauss-Legendre rule on ``z ∈ [0, 10]``,
    ``r`` and ``k`` are bracketed roots (Chandrupatla, ``scipy.optimize.elementwise.find_root``), all
    distinct ``n`` at once. Howe's (1969) approximation only starts the bracket.

    References
    ----------
    Owen, D. B. (1958). Tables of factors for one-sided tolerance limits for a normal distribution.
    Sandia Corporation Monograph SCR-13.
    Wald, A. & Wolfowitz, J. (1946). Tolerance limits for a normal distribution. Ann. Math. Stat.
    17:208-215.
    Howe, W. G. (1969). Two-sided tolerance limits for normal populations -- some improvements. JASA
    64:610-620.
    Odeh, R. E. & Owen, D. B. (1980). Tables for Normal Tolerance Limits, Sampling Plans, and
    Screening. Marcel Dekker.
    NIST/SEMATECH e-Handbook of Statistical Methods, section 7.2.6.3, Tolerance intervals for a normal
    distribution.

    Examples
    --------
    >>> import numpy as np
    >>> np.round(tolerance_factor([10, 20], coverage=0.90, confidence_level=0.95), 3)
    array([2.355, 1.926])
    >>> np.round(tolerance_factor([10], coverage=0.90, confidence_level=0.95, side="both"), 3)
    array([2.856])
    """
    beta = _check_prob(coverage, "coverage")
    gamma = _check_prob(confidence_level, "confidence_level")
    side = _check_side(side)
    n = np.asarray(n, dtype=np.float64)
    if side != "both":
        return _nct_factor(gamma, float(special.ndtri(beta)), n)
    out = np.full(n.shape, np.nan)
    ok = n >= 2
    if ok.any():
        uniq, inv = np.unique(n[ok], return_inverse=True)
        out[ok] = _two_sided_factor(uniq, beta, gamma)[inv]
    return out


# ----------------------------------------------------------------------------------------------- quantile

def quantile(m: LogMoments, *, q: float = 0.95, confidence_level: float = 0.95) -> dict[str, np.ndarray]:
    r"""Log-normal percentile ``exp(ȳ + z_q·s)`` with its exact equal-tailed confidence interval.

    ``ȳ`` is the mean of the natural logs and ``s`` their standard deviation with ``ddof=1``.

    Parameters
    ----------
    m : LogMoments
        Log-moments of any shape (policy already applied); every result has that shape.
    q : float
        Probability of the percentile, strictly between 0 and 1 (0.95: the 95th percentile).
    confidence_level : float
        Two-sided level of the interval, strictly between 0 and 1.

    Returns
    -------
    dict of str to ndarray, each of the shape of ``m``
        ``q`` (the probability, repeated), ``estimate``, ``ci_low``, ``ci_high`` in data units. NaN
        where ``n < 2`` or the moments are NaN.

    Notes
    -----
    ``√n·(ξ_q − ȳ)/s`` follows the non-central t distribution with ``n − 1`` degrees of freedom and
    non-centrality ``z_q·√n`` (``ξ_q = μ + z_q σ`` the log-scale percentile), so the bounds

    ``exp(ȳ + s·t'_p(n−1, z_q√n)/√n)``,  ``p = α/2`` and ``1 − α/2``

    are exact (Owen 1968; Hahn & Meeker 1991, ch. 4). The upper bound at level ``1 − α`` is the
    one-sided upper tolerance limit with coverage ``q`` and confidence ``1 − α/2``. ``estimate`` is
    the plug-in (maximum-likelihood form with ``s`` at ``ddof=1``), not an unbiased estimator.

    Caution: percentiles of exposure or concentration data can feed regulatory and safety decisions;
    these results support, and do not replace, validated tools, qualified review, local rules and
    licensed practice.

    References
    ----------
    Owen, D. B. (1968). A survey of properties and applications of the noncentral t-distribution.
    Technometrics 10:445-478.
    Hahn, G. J. & Meeker, W. Q. (1991). Statistical Intervals: A Guide for Practitioners. Wiley.

    Examples
    --------
    An invented group of 10 concentrations with ``ȳ = 1`` and ``s = 0.5``:

    >>> import numpy as np
    >>> m = LogMoments(n=np.array([10]), mean_log=np.array([1.0]), m2_log=np.array([0.25 * 9]),
    ...                n_missing=np.array([0]), n_nonpositive=np.array([0]))
    >>> out = quantile(m, q=0.95)
    >>> np.round(out["estimate"], 4), np.round(out["ci_low"], 3), np.round(out["ci_high"], 3)
    (array([6.1869]), array([4.296]), array([13.867]))
    """
    qq = _check_prob(q, "q")
    cl = _check_prob(confidence_level, "confidence_level")
    shape, n, ybar, s, ok = _parts(_check_moments(m))
    return {k: v.reshape(shape) for k, v in _quantile_core(n, ybar, s, ok, qq, cl).items()}


def _quantile_core(n: np.ndarray, ybar: np.ndarray, s: np.ndarray, ok: np.ndarray, q: float,
                   cl: float) -> dict[str, np.ndarray]:
    z = float(special.ndtri(q))
    nn = np.where(ok, n, np.nan)
    lo_f = _nct_factor((1.0 - cl) / 2.0, z, nn)
    hi_f = _nct_factor((1.0 + cl) / 2.0, z, nn)
    with np.errstate(invalid="ignore"):
        est = np.where(ok, _exp(ybar + z * s), np.nan)
        low = np.where(ok, _exp(ybar + s * lo_f), np.nan)
        high = np.where(ok, _exp(ybar + s * hi_f), np.nan)
    return {"q": np.full(n.shape, q), "estimate": est, "ci_low": low, "ci_high": high}


# ----------------------------------------------------------------------------------------------- tolerance

def tolerance_limit(
    m: LogMoments,
    *,
    coverage: float = 0.95,
    confidence_level: float = 0.95,
    side: str = "upper",
) -> dict[str, np.ndarray]:
    r"""Log-normal tolerance limits ``exp(ȳ ± k·s)`` in data units.

    With confidence ``confidence_level`` at least ``coverage`` of the population lies below the upper
    limit (``side="upper"``), above the lower limit (``"lower"``), or between the two limits
    (``"both"``). ``ȳ`` and ``s`` are the mean and standard deviation (``ddof=1``) of the natural logs.

    Parameters
    ----------
    m : LogMoments
        Log-moments of any shape (policy already applied); every result has that shape.
    coverage : float
        Share of the population to be covered, strictly between 0 and 1.
    confidence_level : float
        Confidence of the statement, strictly between 0 and 1.
    side : {"upper", "lower", "both"}
        Which limit(s) to compute.

    Returns
    -------
    dict of str to ndarray, each of the shape of ``m``
        ``tolerance_low``, ``tolerance_high``; NaN on the side not asked, where ``n < 2`` and where
        the moments are NaN.

    Notes
    -----
    The factor ``k`` is :func:`tolerance_factor`: exact non-central t for one side (Owen 1958,
    NIST/SEMATECH e-Handbook 7.2.6.3); for two sides the exact factor is computed by numerical
    integration (Wald & Wolfowitz 1946; Odeh & Owen 1980), not Howe's (1969) approximation. The
    two-sided interval is symmetric on the log scale (``ȳ ± k·s``), which is what the published
    two-sided tables give; it controls the content between the limits, not each tail.

    Caution: tolerance limits are used for specification, exposure and compliance decisions; these
    results support, and do not replace, validated tools, qualified review, local rules and licensed
    practice.

    References
    ----------
    Owen, D. B. (1958). Tables of factors for one-sided tolerance limits for a normal distribution.
    Sandia Corporation Monograph SCR-13.
    Wald, A. & Wolfowitz, J. (1946). Tolerance limits for a normal distribution. Ann. Math. Stat.
    17:208-215.
    Odeh, R. E. & Owen, D. B. (1980). Tables for Normal Tolerance Limits, Sampling Plans, and
    Screening. Marcel Dekker.
    NIST/SEMATECH e-Handbook of Statistical Methods, section 7.2.6.3.

    Examples
    --------
    >>> import numpy as np
    >>> m = LogMoments(n=np.array([10]), mean_log=np.array([1.0]), m2_log=np.array([0.25 * 9]),
    ...                n_missing=np.array([0]), n_nonpositive=np.array([0]))
    >>> out = tolerance_limit(m, coverage=0.90, confidence_level=0.95)
    >>> out["tolerance_low"], np.round(out["tolerance_high"], 4)
    (array([nan]), array([8.8226]))
    """
    beta = _check_prob(coverage, "coverage")
    gamma = _check_prob(confidence_level, "confidence_level")
    side = _check_side(side)
    shape, n, ybar, s, ok = _parts(_check_moments(m))
    return {k: v.reshape(shape) for k, v in _tolerance_core(n, ybar, s, ok, beta, gamma, side).items()}


def _tolerance_core(n: np.ndarray, ybar: np.ndarray, s: np.ndarray, ok: np.ndarray, beta: float,
                    gamma: float, side: str) -> dict[str, np.ndarray]:
    k = tolerance_factor(np.where(ok, n, 0.0), coverage=beta, confidence_level=gamma, side=side)
    with np.errstate(invalid="ignore"):
        low = np.where(ok & (side != "upper"), _exp(ybar - k * s), np.nan)
        high = np.where(ok & (side != "lower"), _exp(ybar + k * s), np.nan)
    return {"tolerance_low": low, "tolerance_high": high}


# ----------------------------------------------------------------------------------------------- exceedance

def _check_limit(limit: Any, shape: tuple[int, ...]) -> np.ndarray:
    lim = as_float_array(limit, where="limit")
    try:
        lim = np.broadcast_to(lim, shape)
    except ValueError:
        raise ValueError(
            f"limit has shape {lim.shape}, which does not broadcast to the shape {shape} of the groups"
        ) from None
    with np.errstate(invalid="ignore"):
        bad = (lim <= 0) | np.isposinf(lim)
    if bad.any():
        raise ValueError(
            f"limit holds {int(bad.sum())} value(s) that are not positive and finite; a limit must be "
            "a positive number in data units (NaN gives a NaN result)"
        )
    return lim


def _nct_delta(t: np.ndarray, nu: np.ndarray, p: float) -> np.ndarray:
    """Non-centrality ``δ`` with ``nct.cdf(t, nu, δ) = p``, element-wise (decreasing in ``δ``)."""
    out = np.full(t.shape, np.nan)
    ok = np.isfinite(t) & (nu > 0)
    if not ok.any():
        return out
    t, nu = t[ok], nu[ok]
    zp = float(special.ndtri(p))
    # start: normal approximation of the non-central t, (T - δ)/sqrt(1 + T²/(2ν)) ~ N(0, 1)
    g = t - zp * np.sqrt(1.0 + t * t / (2.0 * nu))
    step = 1.0 + np.abs(g) * 0.1

    def f(d: np.ndarray, t_: np.ndarray, nu_: np.ndarray) -> np.ndarray:
        return stats.nct.cdf(t_, nu_, d) - p

    lo, hi = g - step, g + step
    bad_lo, bad_hi = ~(f(lo, t, nu) >= 0), ~(f(hi, t, nu) <= 0)
    for _ in range(200):  # widen only the ends that do not bracket yet, all groups together
        if not (bad_lo.any() or bad_hi.any()):
            break
        step = np.where(bad_lo | bad_hi, 2.0 * step, step)
        i = np.flatnonzero(bad_lo)
        lo[i] -= step[i]
        bad_lo[i] = ~(f(lo[i], t[i], nu[i]) >= 0)
        i = np.flatnonzero(bad_hi)
        hi[i] += step[i]
        bad_hi[i] = ~(f(hi[i], t[i], nu[i]) <= 0)
    res = elementwise.find_root(f, (lo, hi), args=(t, nu), tolerances=_ROOT_TOL)
    out[ok] = np.where(res.success, res.x, np.nan)
    return out


def exceedance(m: LogMoments, *, limit: Any, confidence_level: float = 0.95) -> dict[str, np.ndarray]:
    r"""Estimated share of a log-normal population above ``limit``, with its exact interval.

    Parameters
    ----------
    m : LogMoments
        Log-moments of any shape (policy already applied); every result has that shape.
    limit : float or array_like
        Limit in data units (positive), one number or an array broadcastable to the shape of ``m``
        (one limit per group). NaN gives NaN.
    confidence_level : float
        Two-sided level of the interval, strictly between 0 and 1.

    Returns
    -------
    dict of str to ndarray, each of the shape of ``m``
        ``limit``, ``fraction`` (``1 − Φ((ln L − ȳ)/s)``), ``ci_low``, ``ci_high``. NaN where
        ``n < 2`` or the moments are NaN. Where all logs are equal (``s = 0``) the fraction is 0 or
        1 (NaN when the values equal the limit) and the interval is NaN.

    Notes
    -----
    ``fraction`` is the plug-in estimate with ``s`` at ``ddof=1`` (not the minimum-variance unbiased
    estimator). The interval is exact: ``T = √n(ȳ − ln L)/s`` follows the non-central t distribution
    with ``n − 1`` degrees of freedom and non-centrality ``δ = √n·(μ − ln L)/σ``, and the true share
    above the limit is ``Φ(δ/√n)``. The bounds are ``Φ(δ/√n)`` at the ``δ`` solving
    ``nct.cdf(T, n−1, δ) = 1 − α/2`` (lower) and ``= α/2`` (upper), found for all groups at once by
    a bracketed root search (Chandrupatla, ``scipy.optimize.elementwise.find_root``). The upper bound
    is the familiar "upper confidence limit of the exceedance fraction" used in exposure assessment
    (at one-sided level ``1 − α/2``).

    Caution: exceedance of regulatory or exposure limits can drive compliance and safety decisions;
    these results support, and do not replace, validated tools, qualified review, local rules and
    licensed practice.

    References
    ----------
    Owen, D. B. (1968). A survey of properties and applications of the noncentral t-distribution.
    Technometrics 10:445-478.
    Hahn, G. J. & Meeker, W. Q. (1991). Statistical Intervals: A Guide for Practitioners. Wiley
    (confidence intervals for the proportion of a normal population below a limit).
    Lyles, R. H. & Kupper, L. L. (1996). On strategies for comparing occupational exposure data to
    limits. Am. Ind. Hyg. Assoc. J. 57:6-15 (cited from memory).

    Examples
    --------
    >>> import numpy as np
    >>> m = LogMoments(n=np.array([10]), mean_log=np.array([1.0]), m2_log=np.array([0.25 * 9]),
    ...                n_missing=np.array([0]), n_nonpositive=np.array([0]))
    >>> out = exceedance(m, limit=6.0)
    >>> np.round(out["fraction"], 4), np.round(out["ci_low"], 4), np.round(out["ci_high"], 4)
    (array([0.0567]), array([0.0059]), array([0.269]))
    """
    cl = _check_prob(confidence_level, "confidence_level")
    shape, n, ybar, s, ok = _parts(_check_moments(m))
    lim = _check_limit(limit, shape)
    return {k: v.reshape(shape) for k, v in _exceedance_core(n, ybar, s, ok, lim.ravel(), cl).items()}


def _exceedance_core(n: np.ndarray, ybar: np.ndarray, s: np.ndarray, ok: np.ndarray, lim: np.ndarray,
                     cl: float) -> dict[str, np.ndarray]:
    with np.errstate(divide="ignore", invalid="ignore"):
        ll = np.log(lim)
        frac = np.where(ok, special.ndtr((ybar - ll) / s), np.nan)
        t = np.where(ok & (s > 0), np.sqrt(n) * (ybar - ll) / s, np.nan)
    nu = np.where(ok, n - 1.0, np.nan)
    d_lo = _nct_delta(t, nu, (1.0 + cl) / 2.0)
    d_hi = _nct_delta(t, nu, (1.0 - cl) / 2.0)
    with np.errstate(invalid="ignore"):
        low = special.ndtr(d_lo / np.sqrt(n))
        high = special.ndtr(d_hi / np.sqrt(n))
    return {"limit": np.array(lim, dtype=np.float64, copy=True), "fraction": frac, "ci_low": low,
            "ci_high": high}


def count_exceed(values: Any, codes: Any, ngroups: int, limit: Any) -> np.ndarray:
    """Number of observed values strictly above ``limit`` in each group.

    Parameters
    ----------
    values : array_like, 1-D
        Raw values in data units; missing values (NaN) never count.
    codes : array_like of int, 1-D
        Group of each row, ``0 .. ngroups-1``; a negative code puts the row in no group.
    ngroups : int
        Number of groups (length of the result).
    limit : float or array_like
        One positive limit, or one per row (NaN: the row is not counted).

    Returns
    -------
    ndarray of int64, shape ``(ngroups,)``

    Examples
    --------
    >>> count_exceed([0.5, 2.0, 3.0, 1.0, 4.0], [0, 0, 0, 1, 1], 2, 1.0)
    array([2, 1])
    """
    x = _values_1d(values)
    c, G = _group_codes(codes, x.size, ngroups)
    lim = _check_limit(limit, x.shape)
    with np.errstate(invalid="ignore"):
        above = (x > lim) & (c >= 0)
    return np.bincount(c[above], minlength=G).astype(np.int64)


# ----------------------------------------------------------------------------------------------- censored

_CENSORED_NOTES = """Groups with no censored value are computed exactly as from their log-moments (``s`` at
    ``ddof=1``), so the result equals the uncensored function. For groups with censored values the
    interval is **approximate**: ``mu`` and ``sigma`` are the censored maximum-likelihood fit
    (:func:`~logstats.stats.censored.fit_lognormal`), and the exact non-central t formula is applied
    with an *effective sample size* ``n_eff = (sigma/se_mu)²`` taken from the observed information
    (for an uncensored sample ``n_eff = n``) and ``s = sigma·sqrt(n_eff/(n_eff − 1))`` (``sigma``
    rescaled from ``ddof=0`` to ``ddof=1`` on ``n_eff``). This carries the information lost to
    censoring into the degrees of freedom and the non-centrality, but ignores the correlation of
    ``mu`` and ``sigma`` under censoring; the simulated coverage in ``tests/test_tails_stats.py``
    (30 % censoring) shows how close to nominal it comes. NaN where the fit does not exist (see the
    ``status`` of ``fit_lognormal``) or ``n_eff <= 1``."""


def _censored_parts(values: Any, codes: Any, ngroups: int, detection_limit: Any, skipna: bool,
                    nonpositive: str) -> tuple[np.ndarray, ...]:
    """Flat ``n_eff``, ``mu``, ``s``, ``ok`` plus the fit's ``n`` and ``n_censored`` per group."""
    check_nonpositive(nonpositive)
    fit = fit_lognormal(values, codes, ngroups, detection_limit=detection_limit,
                        nonpositive="drop" if nonpositive == "raise" else nonpositive, skipna=skipna)
    if nonpositive == "raise":
        bad = np.asarray(fit["n_nonpositive"]) > 0
        if bad.any():
            raise ValueError(
                f"{int(np.asarray(fit['n_nonpositive']).sum())} value(s) at or below zero without a "
                f"detection limit in {int(bad.sum())} group(s) (first: group {int(np.flatnonzero(bad)[0])}); "
                "pass nonpositive='drop' or 'nan', or give those rows a detection_limit"
            )
    n = np.asarray(fit["n"], dtype=np.float64)
    mc = np.asarray(fit["n_censored"], dtype=np.int64)
    mu = np.asarray(fit["mu"], dtype=np.float64)
    sig = np.asarray(fit["sigma"], dtype=np.float64)
    se_mu = np.asarray(fit["se_mu"], dtype=np.float64)
    status = np.asarray(fit["status"])
    plain = (mc == 0) & np.isin(status, ("closed_form", "degenerate"))
    with np.errstate(divide="ignore", invalid="ignore"):
        # uncensored: exactly the moments' n and s (ddof=1), as the uncensored functions use
        s_plain = np.sqrt(sig * sig * n / (n - 1.0))
        n_eff = np.where(plain, n, (sig / se_mu) ** 2)
        s_cens = sig * np.sqrt(n_eff / (n_eff - 1.0))
    s = np.where(plain, s_plain, s_cens)
    fitted = plain | ((mc > 0) & np.isin(status, ("ok",)))
    ok = fitted & (n_eff > 1.0) & (n >= 2) & np.isfinite(mu) & np.isfinite(s)
    return n_eff, mu, s, ok, fit["n"].astype(np.int64), mc


def quantile_censored(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    detection_limit: Any,
    q: float = 0.95,
    confidence_level: float = 0.95,
    skipna: bool = True,
    nonpositive: str = "drop",
) -> dict[str, np.ndarray]:
    """Log-normal percentile per group from data left-censored at detection limits.

    Parameters
    ----------
    values, codes, ngroups
        Raw values (1-D), their group codes (``0 .. ngroups-1``; negative = no group) and the
        number of groups, as for :func:`~logstats.stats.censored.fit_lognormal`.
    detection_limit : float or array_like
        One limit, or one per row (NaN = no limit); values at or below it are censored.
    q, confidence_level
        As for :func:`quantile`.
    skipna, nonpositive
        Bad-value policy as for ``fit_lognormal``; ``nonpositive="raise"`` raises a ValueError when
        a value ``<= 0`` has no detection limit.

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        ``q``, ``estimate`` (``exp(mu + z_q·s)``), ``ci_low``, ``ci_high``, ``n``, ``n_censored``.

    Notes
    -----
    @CENSORED_NOTES@

    Caution: results for censored exposure or concentration data feed regulatory and safety
    decisions; they support, and do not replace, validated tools, qualified review, local rules and
    licensed practice.

    References
    ----------
    Cohen, A. C. (1959). Simplified estimators for the normal distribution when samples are singly
    censored or truncated. Technometrics 1:217-237.
    Owen, D. B. (1968). A survey of properties and applications of the noncentral t-distribution.
    Technometrics 10:445-478.
    Helsel, D. R. (2012). Statistics for Censored Environmental Data Using Minitab and R, 2nd ed.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([0.4, 1.3, 2.2, 3.1, 0.7, 5.0, 8.5, 0.2, 0.9, 1.8])
    >>> out = quantile_censored(x, np.zeros(10, dtype=int), 1, detection_limit=0.5)
    >>> out["n"], out["n_censored"], np.round(out["estimate"], 2)
    (array([10]), array([2]), array([9.7]))
    """
    qq = _check_prob(q, "q")
    cl = _check_prob(confidence_level, "confidence_level")
    n_eff, mu, s, ok, n, mc = _censored_parts(values, codes, ngroups, detection_limit, skipna, nonpositive)
    out = _quantile_core(n_eff, mu, s, ok, qq, cl)
    out.update(n=n, n_censored=mc)
    return out


def tolerance_limit_censored(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    detection_limit: Any,
    coverage: float = 0.95,
    confidence_level: float = 0.95,
    side: str = "upper",
    skipna: bool = True,
    nonpositive: str = "drop",
) -> dict[str, np.ndarray]:
    """Log-normal tolerance limits per group from data left-censored at detection limits.

    Parameters
    ----------
    values, codes, ngroups, detection_limit, skipna, nonpositive
        As for :func:`quantile_censored`.
    coverage, confidence_level, side
        As for :func:`tolerance_limit`.

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        ``tolerance_low``, ``tolerance_high``, ``n``, ``n_censored``.

    Notes
    -----
    @CENSORED_NOTES@
    The factor for ``n_eff`` comes from :func:`tolerance_factor` (non-integer sizes are allowed).

    Caution: tolerance limits drive specification, exposure and compliance decisions; these results
    support, and do not replace, validated tools, qualified review, local rules and licensed
    practice.

    References
    ----------
    Cohen, A. C. (1959). Technometrics 1:217-237. Owen, D. B. (1958). Sandia Corporation Monograph
    SCR-13. Odeh, R. E. & Owen, D. B. (1980). Tables for Normal Tolerance Limits, Sampling Plans, and
    Screening. Marcel Dekker.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([0.4, 1.3, 2.2, 3.1, 0.7, 5.0, 8.5, 0.2, 0.9, 1.8])
    >>> out = tolerance_limit_censored(x, np.zeros(10, dtype=int), 1, detection_limit=0.5)
    >>> np.round(out["tolerance_high"], 1)
    array([45.9])
    """
    beta = _check_prob(coverage, "coverage")
    gamma = _check_prob(confidence_level, "confidence_level")
    side = _check_side(side)
    n_eff, mu, s, ok, n, mc = _censored_parts(values, codes, ngroups, detection_limit, skipna, nonpositive)
    out = _tolerance_core(n_eff, mu, s, ok, beta, gamma, side)
    out.update(n=n, n_censored=mc)
    return out


def exceedance_censored(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    detection_limit: Any,
    limit: Any,
    confidence_level: float = 0.95,
    skipna: bool = True,
    nonpositive: str = "drop",
) -> dict[str, np.ndarray]:
    """Share of a log-normal population above ``limit``, per group, from left-censored data.

    Parameters
    ----------
    values, codes, ngroups, detection_limit, skipna, nonpositive
        As for :func:`quantile_censored`.
    limit : float or array_like
        One positive limit, or one per group (shape ``(ngroups,)``).
    confidence_level
        As for :func:`exceedance`.

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        ``limit``, ``fraction``, ``ci_low``, ``ci_high``, ``n``, ``n_censored``. (The observed count
        above the limit is :func:`count_exceed`.)

    Notes
    -----
    @CENSORED_NOTES@

    Caution: exceedance of regulatory or exposure limits drives compliance and safety decisions;
    these results support, and do not replace, validated tools, qualified review, local rules and
    licensed practice.

    References
    ----------
    Cohen, A. C. (1959). Technometrics 1:217-237. Owen, D. B. (1968). Technometrics 10:445-478.
    Helsel, D. R. (2012). Statistics for Censored Environmental Data Using Minitab and R, 2nd ed.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([0.4, 1.3, 2.2, 3.1, 0.7, 5.0, 8.5, 0.2, 0.9, 1.8])
    >>> out = exceedance_censored(x, np.zeros(10, dtype=int), 1, detection_limit=0.5, limit=5.0)
    >>> np.round(out["fraction"], 3)
    array([0.14])
    """
    cl = _check_prob(confidence_level, "confidence_level")
    n_eff, mu, s, ok, n, mc = _censored_parts(values, codes, ngroups, detection_limit, skipna, nonpositive)
    lim = _check_limit(limit, n_eff.shape)
    out = _exceedance_core(n_eff, mu, s, ok, lim.ravel(), cl)
    out.update(n=n, n_censored=mc)
    return out


for _f in (quantile_censored, tolerance_limit_censored, exceedance_censored):
    _f.__doc__ = (_f.__doc__ or "").replace("@CENSORED_NOTES@", _CENSORED_NOTES)
del _f
