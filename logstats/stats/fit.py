"""Likelihood fits and scale diagnostics per group (numpy + scipy).

Everything here is a pure function of 1-D numpy arrays with integer group codes (``0 .. ngroups-1``;
a negative code means the row belongs to no group) or of a :class:`~logstats.core.moments.LogMoments`.
Work is vectorised over groups: per-group sums come from ``np.bincount`` / ``np.add.reduceat`` on rows
sorted once, and iterative fits advance all groups together. Results are ``dict[str, np.ndarray]`` with
one entry per output column, each of shape ``(ngroups,)`` (or the shape of the moments).

* :func:`fit_lognormal` -- maximum-likelihood log-normal fit, left-censored at detection limits.
* :func:`scale_check` -- normal versus log-normal on the original scale (AIC), normality tests on both
  scales, arithmetic versus geometric mean.
* :func:`lognormal_mean` -- the arithmetic mean implied by a log-normal fit, with confidence intervals
  (Cox, modified Cox, generalized CI, bootstrap).
"""

from __future__ import annotations

import operator
from typing import Any

import numpy as np
from scipy import special

from logstats.core.moments import LogMoments, moments_by_codes
from logstats.core.transform import as_float_array, check_nonpositive, to_logs
from logstats.stats.estimate import _check_level, t_quantile

__all__ = [
    "FIT_STATUSES",
    "LOGNORMAL_MEAN_METHODS",
    "closed_form_fit",
    "fit_lognormal",
    "lognormal_mean",
    "scale_check",
]

#: Values of the ``status`` column of :func:`fit_lognormal`.
FIT_STATUSES: tuple[str, ...] = (
    "ok",
    "closed_form",
    "degenerate",
    "all_censored",
    "too_few_detects",
    "not_converged",
    "empty",
    "missing",
    "nonpositive",
)
#: Methods accepted by :func:`lognormal_mean`.
LOGNORMAL_MEAN_METHODS: tuple[str, ...] = ("cox", "modified_cox", "gci", "bootstrap")

_LOG_2PI = float(np.log(2.0 * np.pi))
_SQRT_2_OVER_PI = float(np.sqrt(2.0 / np.pi))
_DEEP_TAIL = -100.0  # below this, w = r(a + r) comes from its asymptotic series
_MAX_HALVINGS = 60
_DRAW_BUDGET = 1 << 21  # Monte Carlo numbers held in memory at once (16 MB per float64 array)


# ----------------------------------------------------------------------------------------------------
# input helpers


def _values_1d(values: Any, name: str = "values") -> np.ndarray:
    x = as_float_array(values, where=name)
    if x.ndim != 1:
        raise ValueError(f"{name} must be 1-D; got an array of shape {x.shape}")
    return x


def _group_codes(codes: Any, size: int, ngroups: Any) -> tuple[np.ndarray, int]:
    try:
        g = operator.index(ngroups)
    except TypeError:
        raise TypeError(f"ngroups must be an integer; got {ngroups!r}") from None
    if g < 0:
        raise ValueError(f"ngroups must be >= 0; got {g}")
    c = np.asarray(codes)
    if c.size and c.dtype.kind not in "iu":
        raise TypeError(f"codes must be integers (group numbers 0 .. ngroups-1); got dtype {c.dtype}")
    c = c.astype(np.intp, copy=False)
    if c.shape != (size,):
        raise ValueError(f"codes have shape {c.shape}; expected ({size},) to match values")
    too_big = c >= g
    if too_big.any():
        raise ValueError(f"codes hold {int(too_big.sum())} value(s) >= ngroups={g}")
    return c, g


def _count(mask: np.ndarray, codes: np.ndarray, ngroups: int) -> np.ndarray:
    sel = mask & (codes >= 0)
    return np.bincount(codes[sel], minlength=ngroups).astype(np.int64)


def _detection_limits(detection_limit: Any, size: int) -> np.ndarray | None:
    """Per-row detection limits as float64 (NaN = no limit), or None when there are none."""
    if detection_limit is None:
        return None
    dl = as_float_array(detection_limit, where="detection_limit")
    if dl.ndim == 0:
        dl = np.broadcast_to(dl, (size,))
    elif dl.shape != (size,):
        raise ValueError(f"detection_limit has shape {dl.shape}; expected a scalar or shape ({size},)")
    low = dl <= 0  # NaN compares False; -inf is <= 0
    if low.any():
        raise ValueError(
            f"detection_limit holds {int(low.sum())} value(s) at or below zero; a detection limit must be "
            "positive and finite (use NaN for rows without a limit)"
        )
    high = np.isposinf(dl)
    if high.any():
        raise ValueError(
            f"detection_limit holds {int(high.sum())} value(s) of +inf; a detection limit must be positive "
            "and finite (use NaN for rows without a limit)"
        )
    if np.isnan(dl).all():
        return None
    return dl


def _mills(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``r = φ(a)/Φ(a)`` and ``w = r·(a + r) = −d r/da`` for the standard normal, stable in both tails.

    ``r = sqrt(2/π) / erfcx(−a/√2)`` has full relative accuracy for every ``a`` (it tends to ``−a``
    as ``a → −∞`` and to 0 as ``a → +∞``). ``w`` lies in (0, 1); for ``a < −100`` it is taken from its
    asymptotic series ``1 − a⁻² + 6a⁻⁴ − 50a⁻⁶`` (error below 1e-13) to avoid cancellation in ``a + r``.
    """
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        r = _SQRT_2_OVER_PI / special.erfcx(-a / np.sqrt(2.0))
        w = r * (a + r)
        deep = a < _DEEP_TAIL
        if deep.any():
            t = 1.0 / (a[deep] * a[deep])
            w[deep] = 1.0 - t * (1.0 - t * (6.0 - 50.0 * t))
    return r, np.clip(w, 0.0, 1.0)


# ----------------------------------------------------------------------------------------------------
# fit_lognormal


def fit_lognormal(
    values: Any,
    codes: Any,
    ngroups: int,
    *,
    detection_limit: Any = None,
    nonpositive: str = "drop",
    skipna: bool = True,
    max_iter: int = 100,
    tol: float = 1e-10,
) -> dict[str, np.ndarray]:
    r"""Maximum-likelihood log-normal fit per group, left-censored at detection limits.

    For every group the parameters ``mu`` and ``sigma`` of ``ln x ~ N(mu, sigma²)`` are estimated by
    maximum likelihood (so ``sigma`` has ``ddof=0``). Values at or below their detection limit are
    left-censored: they contribute ``Φ((ln DL − mu)/sigma)`` instead of a density.

    Parameters
    ----------
    values : array_like, 1-D
        Raw (linear-scale) values. NaN is missing; ``+inf`` is refused with a ValueError.
    codes : array_like of int, 1-D
        Group of each row, ``0 .. ngroups-1``; a negative code puts the row in no group.
    ngroups : int
        Number of groups (length of every output).
    detection_limit : None, float or array_like, optional
        None (no censoring), one limit for all rows, or one limit per row (NaN = that row has no
        limit). Limits must be positive and finite. A value **at or below** its limit is censored,
        zeros and negatives included (the ``nonpositive`` policy does not apply to them).
    nonpositive : {"drop", "nan", "raise"}
        Rows without a limit whose value is ``<= 0`` (or ``-inf``): ``"drop"`` excludes them and counts
        them in ``n_nonpositive``; ``"nan"`` makes the group's result NaN (still counted); ``"raise"``
        is left to the caller, which knows the labels, and behaves as ``"drop"`` here.
    skipna : bool
        Missing values are skipped and counted in ``n_missing``; ``False`` makes a group with missing
        values NaN.
    max_iter : int
        Maximum number of Newton iterations for censored groups.
    tol : float
        Convergence threshold: the full Newton step must be below ``tol`` both in the standardized
        location ``(mu − centre)/scale`` and in ``ln sigma`` (``centre`` and ``scale`` are the mean and
        SD of the group's detected logs and censored log-limits, so the test is scale free).

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        ``mu``, ``sigma``
            MLE on the natural-log scale (``sigma`` with ``ddof=0``).
        ``n``
            Detected plus censored values used in the fit.
        ``n_censored``
            Censored values used in the fit.
        ``loglik``
            Maximised log-likelihood on the **original** scale: detected values contribute
            ``log φ((ln x − mu)/sigma) − ln sigma − ln x``, censored ones ``log Φ((ln DL − mu)/sigma)``.
            This is the sum of ``scipy.stats.lognorm.logpdf`` / ``logcdf`` with ``s=sigma``,
            ``scale=exp(mu)``.
        ``converged`` (bool)
            True for closed-form fits and for Newton fits that met ``tol``.
        ``se_mu``, ``se_sigma``
            Standard errors from the inverse observed information at the MLE (for an uncensored group
            ``sigma/sqrt(n)`` and ``sigma/sqrt(2n)``); NaN when unavailable.
        ``n_iter`` (int)
            Newton iterations used (0 for closed-form fits).
        ``n_missing``, ``n_nonpositive`` (int)
            Rows skipped as missing, and rows without a limit skipped as non-positive.
        ``status`` (object)
            One of :data:`FIT_STATUSES`:

            ``"closed_form"``  no censored values: ``mu = mean of logs``, ``sigma = sqrt(m2/n)``;
            ``"ok"``           censored group, Newton converged;
            ``"not_converged"`` censored group, ``max_iter`` reached or no ascent step found; ``mu``
            and ``sigma`` hold the last iterate and ``converged`` is False;
            ``"degenerate"``   no censored values and all values equal (including a single value): the
            likelihood grows without bound as sigma → 0; ``mu`` is the common log value, ``sigma`` is
            0, ``loglik`` is ``+inf``, ``converged`` is False;
            ``"all_censored"`` every value censored: no MLE exists (the likelihood increases as
            ``mu → −∞``), so ``mu``, ``sigma``, ``loglik`` are NaN;
            ``"too_few_detects"`` censored values present but the detected values are all equal (in
            practice: a single detect) and no limit lies strictly below them, so the likelihood is
            unbounded as sigma → 0 and no MLE exists: NaN;
            ``"empty"``        nothing to fit: NaN;
            ``"missing"`` / ``"nonpositive"`` the ``skipna=False`` / ``nonpositive="nan"`` policy made
            the group NaN.

    Notes
    -----
    *Existence.* With at least one censored value the MLE exists (and is unique) exactly when there is
    at least one detect and either the detects are not all equal or some censoring limit lies strictly
    below them; one detect plus a limit below it is enough. Otherwise the status says why it is NaN.

    *Algorithm.* Uncensored groups use the closed form from the log-moments
    (:func:`~logstats.core.moments.moments_by_codes`). Censored groups are fitted all at once by
    Newton's method with analytic gradient and Hessian and per-group step halving (a step is halved
    until the log-likelihood does not decrease). Newton runs in Olsen's (1978) parameters
    ``δ = mu/sigma``, ``γ = 1/sigma`` of the standardized logs, in which the censored-normal
    log-likelihood is globally concave: the Hessian is negative definite everywhere, so every Newton
    direction is an ascent direction and the maximum is unique. Convergence is tested on
    ``(mu, ln sigma)`` as described under ``tol``. The start is the substitution estimate (each
    non-detect at its limit), i.e. ``δ = 0, γ = 1`` in standardized units. The detected values enter
    only through their count, mean and sum of squared deviations; censored rows sharing a group and a
    limit are merged, so a single limit costs one term per group. ``log Φ`` is
    ``scipy.special.log_ndtr`` and the inverse Mills ratio ``φ/Φ`` is ``sqrt(2/π)/erfcx(−a/√2)``, both
    accurate deep in the tails.

    References
    ----------
    Cohen, A. C. (1959). Simplified estimators for the normal distribution when samples are singly
    censored or truncated. Technometrics 1:217-237; Cohen, A. C. (1961). Tables for maximum likelihood
    estimates: singly truncated and singly censored samples. Technometrics 3:535-541.
    Olsen, R. J. (1978). Note on the uniqueness of the maximum likelihood estimator for the Tobit model.
    Econometrica 46:1211-1215 (cited from memory).
    Helsel, D. R. (2012). Statistics for Censored Environmental Data Using Minitab and R, 2nd ed. Wiley.

    Examples
    --------
    Two invented groups of concentrations with a detection limit of 1.0:

    >>> import numpy as np
    >>> x = np.array([0.4, 1.3, 2.2, 3.1, 0.7, 5.0, 8.5, 0.2, 0.9])
    >>> codes = np.array([0, 0, 0, 0, 1, 1, 1, 1, 1])
    >>> out = fit_lognormal(x, codes, 2, detection_limit=1.0)
    >>> out["status"], out["n_censored"]
    (array(['ok', 'ok'], dtype=object), array([1, 3]))
    >>> np.round(out["mu"], 4), np.round(out["sigma"], 4)
    (array([ 0.4665, -0.2879]), array([0.5635, 2.031 ]))
    """
    check_nonpositive(nonpositive)
    max_iter = operator.index(max_iter)
    if max_iter < 1:
        raise ValueError(f"max_iter must be >= 1; got {max_iter}")
    tol = float(tol)
    if not tol > 0:
        raise ValueError(f"tol must be positive; got {tol}")
    x = _values_1d(values)
    codes, G = _group_codes(codes, x.size, ngroups)
    lv = to_logs(x, where="values")
    dl = _detection_limits(detection_limit, x.size)

    missing = lv.missing
    if dl is None:
        cens = np.zeros(x.size, dtype=bool)
    else:
        with np.errstate(invalid="ignore"):
            cens = ~missing & ~np.isnan(dl) & (x <= dl)
    nonpos = lv.nonpositive & ~cens
    det = lv.valid & ~cens
    keyed = codes >= 0

    n_missing = _count(missing, codes, G)
    n_nonpos = _count(nonpos, codes, G)
    m = _count(cens, codes, G)

    # detected values: count, mean and m2 of the logs, plus exact minimum and maximum
    dm = moments_by_codes(np.where(det, x, np.nan), codes, G, where="values")
    k = np.asarray(dm.n, dtype=np.int64)
    ybar = np.asarray(dm.mean_log, dtype=np.float64)
    m2 = np.asarray(dm.m2_log, dtype=np.float64)
    dsel = det & keyed
    ymin = np.full(G, np.inf)
    ymax = np.full(G, -np.inf)
    np.minimum.at(ymin, codes[dsel], lv.y[dsel])
    np.maximum.at(ymax, codes[dsel], lv.y[dsel])

    csel = cens & keyed
    cg = codes[csel]
    with np.errstate(divide="ignore"):
        cc = np.log(dl[csel]) if dl is not None else np.zeros(0)
    cmin = np.full(G, np.inf)
    np.minimum.at(cmin, cg, cc)

    n = k + m
    ties = ymin == ymax
    poisoned = np.zeros(G, dtype=bool)
    status = np.full(G, "empty", dtype=object)
    if not skipna:
        poisoned |= n_missing > 0
    if nonpositive == "nan":
        poisoned |= n_nonpos > 0

    cf = closed_form_fit(dm)
    uncens = (m == 0) & (k > 0) & ~poisoned
    degenerate = uncens & cf["degenerate"]
    closed = uncens & ~cf["degenerate"]
    all_cens = (m > 0) & (k == 0) & ~poisoned
    too_few = (m > 0) & (k > 0) & ties & ~(cmin < ymin) & ~poisoned
    newton = (m > 0) & (k > 0) & ~too_few & ~poisoned

    mu = np.full(G, np.nan)
    sigma = np.full(G, np.nan)
    loglik = np.full(G, np.nan)
    se_mu = np.full(G, np.nan)
    se_sigma = np.full(G, np.nan)
    converged = np.zeros(G, dtype=bool)
    n_iter = np.zeros(G, dtype=np.int64)

    # closed form (no censoring)
    mu[uncens] = ybar[uncens]
    sigma[closed] = cf["sigma"][closed]
    sigma[degenerate] = 0.0
    loglik[closed] = cf["loglik"][closed]
    loglik[degenerate] = np.inf
    se_mu[closed] = cf["se_mu"][closed]
    se_sigma[closed] = cf["se_sigma"][closed]
    converged[closed] = True
    status[closed] = "closed_form"
    status[degenerate] = "degenerate"
    status[all_cens] = "all_censored"
    status[too_few] = "too_few_detects"

    if newton.any():
        res = _censored_newton(k, ybar, m2, cg, cc, np.flatnonzero(newton), G, max_iter, tol)
        idx = res.pop("index")
        for name, arr in (("mu", mu), ("sigma", sigma), ("loglik", loglik), ("se_mu", se_mu),
                          ("se_sigma", se_sigma), ("converged", converged), ("n_iter", n_iter)):
            arr[idx] = res[name]
        status[idx] = np.where(res["converged"], "ok", "not_converged")

    if not skipna:
        status[poisoned & (n_missing > 0)] = "missing"
    status[poisoned & (status != "missing")] = "nonpositive"
    return {
        "mu": mu,
        "sigma": sigma,
        "n": n.astype(np.int64),
        "n_censored": m,
        "loglik": loglik,
        "converged": converged,
        "se_mu": se_mu,
        "se_sigma": se_sigma,
        "n_iter": n_iter,
        "n_missing": n_missing,
        "n_nonpositive": n_nonpos,
        "status": status,
    }


def closed_form_fit(m: LogMoments) -> dict[str, np.ndarray]:
    r"""The uncensored log-normal MLE from log-moments alone (any shape; NaN where ``n == 0``).

    ``mu = ȳ``, ``sigma = sqrt(m2 / n)`` (ddof=0), ``loglik = −n/2·(ln 2π + 1) − n ln sigma − n ȳ`` on the
    original scale (the last term is the Jacobian −Σ ln x), and the observed-information standard
    errors ``se_mu = sigma/√n``, ``se_sigma = sigma/√(2n)``. Because it needs only moments, chunked
    (dask) data can be fitted without loading: see the xarray ``fit``. ``degenerate`` marks groups whose
    logs are all equal (sigma zero up to the rounding of the mean), where the MLE does not exist.
    """
    kf = np.asarray(m.n, dtype=np.float64)
    ybar = np.asarray(m.mean_log, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        s_ml = np.sqrt(np.asarray(m.m2_log, dtype=np.float64) / kf)
        loglik = -0.5 * kf * (_LOG_2PI + 1.0) - kf * np.log(s_ml) - kf * ybar
        degenerate = (kf > 0) & (s_ml <= 16 * np.finfo(np.float64).eps * np.maximum(1.0, np.abs(ybar)))
        return {
            "mu": ybar,
            "sigma": s_ml,
            "degenerate": degenerate,
            "loglik": loglik,
            "se_mu": s_ml / np.sqrt(kf),
            "se_sigma": s_ml / np.sqrt(2.0 * kf),
        }


def _censored_newton(
    k_all: np.ndarray,
    ybar_all: np.ndarray,
    m2_all: np.ndarray,
    cg: np.ndarray,
    cc: np.ndarray,
    groups: np.ndarray,
    G: int,
    max_iter: int,
    tol: float,
) -> dict[str, np.ndarray]:
    """Vectorised Newton fit of the left-censored normal for ``groups`` (see :func:`fit_lognormal`)."""
    Gi = groups.size
    comp = np.full(G, -1, dtype=np.intp)
    comp[groups] = np.arange(Gi)
    k = k_all[groups].astype(np.float64)
    ybar = ybar_all[groups]
    m2 = m2_all[groups]

    # censored rows of these groups, merged into distinct (group, limit) pairs with multiplicities
    keep = comp[cg] >= 0
    rg, rc = comp[cg[keep]], cc[keep]
    order = np.lexsort((rc, rg))
    rg, rc = rg[order], rc[order]
    first = np.ones(rg.size, dtype=bool)
    first[1:] = (rg[1:] != rg[:-1]) | (rc[1:] != rc[:-1])
    starts = np.flatnonzero(first)
    rw = np.diff(np.append(starts, rg.size)).astype(np.float64)
    rg, rc = rg[starts], rc[starts]

    # standardize each group by the mean and SD of detected logs and censored log-limits (Chan merge)
    mc = np.bincount(rg, weights=rw, minlength=Gi)
    cbar0 = np.bincount(rg, weights=rw * rc, minlength=Gi) / mc
    dcc = rc - cbar0[rg]
    ccorr = np.bincount(rg, weights=rw * dcc, minlength=Gi) / mc
    cbar = cbar0 + ccorr
    dcc = rc - cbar[rg]
    m2c = np.bincount(rg, weights=rw * dcc * dcc, minlength=Gi)
    ntot = k + mc
    centre = ybar + (cbar - ybar) * (mc / ntot)
    scale = np.sqrt((m2 + m2c + (ybar - cbar) ** 2 * (k * mc / ntot)) / ntot)
    yb = (ybar - centre) / scale  # standardized mean of detected logs
    M = m2 / (scale * scale)  # standardized sum of squared deviations of detected logs
    c = (rc - centre[rg]) / scale[rg]

    def loglik(d: np.ndarray, g: np.ndarray, sel: np.ndarray) -> np.ndarray:
        """Standardized log-likelihood (constants dropped) at (δ, γ) for groups in ``sel``."""
        rows = sel[rg]
        with np.errstate(divide="ignore", invalid="ignore"):
            a = g[rg[rows]] * c[rows] - d[rg[rows]]
            lc = np.bincount(rg[rows], weights=rw[rows] * special.log_ndtr(a), minlength=Gi)
            e = g * yb - d
            out = k * np.log(g) - 0.5 * (g * g * M + k * e * e) + lc
        return np.where(sel & (g > 0) & np.isfinite(out), out, -np.inf)

    delta = np.zeros(Gi)
    gamma = np.ones(Gi)
    active = np.ones(Gi, dtype=bool)
    converged = np.zeros(Gi, dtype=bool)
    n_iter = np.zeros(Gi, dtype=np.int64)
    accept_slack = 64.0 * np.finfo(np.float64).eps
    for _ in range(max_iter):
        if not active.any():
            break
        rows = active[rg]
        gr, cr, wr = rg[rows], c[rows], rw[rows]
        a = gamma[gr] * cr - delta[gr]
        r, w = _mills(a)
        s_r = np.bincount(gr, weights=wr * r, minlength=Gi)
        s_rc = np.bincount(gr, weights=wr * r * cr, minlength=Gi)
        s_w = np.bincount(gr, weights=wr * w, minlength=Gi)
        s_wc = np.bincount(gr, weights=wr * w * cr, minlength=Gi)
        s_wcc = np.bincount(gr, weights=wr * w * cr * cr, minlength=Gi)
        e = gamma * yb - delta
        g_d = k * e - s_r
        g_g = k / gamma - gamma * M - k * e * yb + s_rc
        h_dd = -k - s_w
        h_dg = k * yb + s_wc
        h_gg = -k / (gamma * gamma) - M - k * yb * yb - s_wcc
        with np.errstate(divide="ignore", invalid="ignore"):
            det = h_dd * h_gg - h_dg * h_dg
            step_d = -(h_gg * g_d - h_dg * g_g) / det
            step_g = -(h_dd * g_g - h_dg * g_d) / det
        bad = ~(np.isfinite(step_d) & np.isfinite(step_g) & (det > 0))
        if bad.any():  # cannot happen for a concave likelihood; keep a safe ascent direction anyway
            step_d = np.where(bad, g_d / np.abs(h_dd), step_d)
            step_g = np.where(bad, g_g / np.abs(h_gg), step_g)
        # size of the full Newton step in (standardized mu, ln sigma)
        with np.errstate(divide="ignore", invalid="ignore"):
            g_full = gamma + step_g
            dmu = np.abs((delta + step_d) / g_full - delta / gamma)
            dtau = np.abs(np.log(g_full / gamma))
        small = active & (dmu < tol) & (dtau < tol)

        l0 = loglik(delta, gamma, active)
        t = np.ones(Gi)
        pending = active.copy()
        for _h in range(_MAX_HALVINGS):
            nd = delta + t * step_d
            ng = gamma + t * step_g
            l1 = loglik(nd, ng, pending)
            good = pending & (l1 >= l0 - accept_slack * (1.0 + np.abs(l0)))
            delta = np.where(good, nd, delta)
            gamma = np.where(good, ng, gamma)
            pending &= ~good
            if not pending.any():
                break
            t = np.where(pending, 0.5 * t, t)
        n_iter += active
        converged |= small
        active &= ~small & ~pending  # a group with no ascent step left stops, unconverged

    # final quantities in (mu, ln sigma), standardized units
    mu_s = delta / gamma
    sig_s = 1.0 / gamma
    a = gamma[rg] * c - delta[rg]
    r, w = _mills(a)
    e = gamma * yb - delta
    lc = np.bincount(rg, weights=rw * special.log_ndtr(a), minlength=Gi)
    ll_std = k * np.log(gamma) - 0.5 * (gamma * gamma * M + k * e * e) + lc
    ll = ll_std - 0.5 * k * _LOG_2PI - k * np.log(scale) - k * ybar

    # observed information in (mu, tau = ln sigma); z = (c - mu)/sigma = a
    S = M + k * (yb - mu_s) ** 2
    s_w = np.bincount(rg, weights=rw * w, minlength=Gi)
    s_rwz = np.bincount(rg, weights=rw * (r - w * a), minlength=Gi)
    s_rz = np.bincount(rg, weights=rw * (r * a - w * a * a), minlength=Gi)
    i_mm = (k + s_w) / sig_s**2
    i_mt = 2.0 * k * (yb - mu_s) / sig_s**2 - s_rwz / sig_s
    i_tt = 2.0 * S / sig_s**2 - s_rz
    with np.errstate(divide="ignore", invalid="ignore"):
        det = i_mm * i_tt - i_mt * i_mt
        ok = (det > 0) & (i_mm > 0)
        se_mu_s = np.where(ok, np.sqrt(i_tt / det), np.nan)
        se_tau = np.where(ok, np.sqrt(i_mm / det), np.nan)
    sigma = scale * sig_s
    return {
        "index": groups,
        "mu": centre + scale * mu_s,
        "sigma": sigma,
        "loglik": ll,
        "se_mu": scale * se_mu_s,
        "se_sigma": sigma * se_tau,
        "converged": converged,
        "n_iter": n_iter,
    }


# ----------------------------------------------------------------------------------------------------
# scale_check

# Royston (1995) AS R94 constants
_SW_C1 = (0.0, 0.221157, -0.147981, -2.07119, 4.434685, -2.706056)
_SW_C2 = (0.0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633)
_SW_C3 = (0.5440, -0.39978, 0.025054, -0.6714e-3)
_SW_C4 = (1.3822, -0.77857, 0.062767, -0.20322e-2)
_SW_C5 = (-1.5861, -0.31082, -0.083751, 0.38915e-2)
_SW_C6 = (-0.4803, -0.082676, 0.30302e-2)
_SW_G = (-2.273, 0.459)
_SW_SMALL = 1e-19
_SW_MAX_N = 5000


def _poly(coef: tuple[float, ...], x: np.ndarray) -> np.ndarray:
    """``coef[0] + coef[1]·x + coef[2]·x² + …`` (Horner)."""
    out = np.zeros_like(x, dtype=np.float64) + coef[-1]
    for cf in coef[-2::-1]:
        out = out * x + cf
    return out


def _ppnd(p: np.ndarray) -> np.ndarray:
    """Normal quantile by Beasley & Springer (1977), AS 111, the routine AS R94 specifies.

    Accurate to about 1e-7 (used only for the Shapiro-Wilk coefficients, where R94 uses it).
    """
    q = p - 0.5
    r = q * q
    central = q * (((-25.44106049637 * r + 41.39119773534) * r - 18.61500062529) * r + 2.50662823884)
    central /= (((3.13082909833 * r - 21.06224101826) * r + 23.08336743743) * r - 8.47351093090) * r + 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        rr = np.sqrt(-np.log(np.where(q > 0, 1.0 - p, p)))
        tail = (((2.32121276858 * rr + 4.85014127135) * rr - 2.29796479134) * rr - 2.78718931138)
        tail /= (1.63706781897 * rr + 3.54388924762) * rr + 1.0
    return np.where(np.abs(q) <= 0.42, central, np.where(q < 0, -tail, tail))


def _sw_coefficients(rank: np.ndarray, nrow: np.ndarray, gs: np.ndarray, G: int,
                     n: np.ndarray) -> np.ndarray:
    """Shapiro-Wilk coefficient of every row (sorted within its group), Royston (1995) AS R94.

    Row ``i`` of a group of size ``n`` gets ``−a_l`` in the lower half, ``+a_l`` in the upper half and
    0 at the middle of an odd group, with ``l = min(i, n−1−i)``. Only ``a_0`` and ``a_1`` depend on a
    group-level polynomial; the rest are ``−m_l/fac`` with ``m_l = Φ⁻¹((l + 1 − 3/8)/(n + 1/4))``.
    """
    nf = nrow.astype(np.float64)
    lo = np.minimum(rank, nrow - 1 - rank)
    half = nrow // 2
    inner = lo < half
    m_row = np.where(inner, _ppnd((lo + 1 - 0.375) / (nf + 0.25)), 0.0)
    lower = inner & (rank < nrow - 1 - rank)
    summ2 = 2.0 * np.bincount(gs[lower], weights=m_row[lower] ** 2, minlength=G)
    ng = n.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        ssumm2 = np.sqrt(summ2)
        m0 = _ppnd((1 - 0.375) / (ng + 0.25))
        m1 = _ppnd((2 - 0.375) / (ng + 0.25))
        rsn = 1.0 / np.sqrt(ng)
        a1 = _poly(_SW_C1, rsn) - m0 / ssumm2
        a2 = -m1 / ssumm2 + _poly(_SW_C2, rsn)
        big = ng > 5
        fac = np.where(
            big,
            np.sqrt((summ2 - 2 * m0**2 - 2 * m1**2) / (1 - 2 * a1**2 - 2 * a2**2)),
            np.sqrt((summ2 - 2 * m0**2) / (1 - 2 * a1**2)),
        )
        coef = -m_row / fac[gs]
    coef = np.where(lo == 0, a1[gs], coef)
    coef = np.where((lo == 1) & big[gs], a2[gs], coef)
    coef = np.where(nrow == 3, np.where(lo == 0, np.sqrt(0.5), 0.0), coef)
    coef = np.where(inner, coef, 0.0)
    sign = np.where(rank < nrow - 1 - rank, -1.0, 1.0)
    return sign * coef


def _sw_statistic(v: np.ndarray, coef: np.ndarray, gs: np.ndarray, G: int, nf: np.ndarray,
                  mean: np.ndarray, rng_: np.ndarray) -> np.ndarray:
    """``1 − W`` per group from sorted values ``v`` and row coefficients (AS R94 formulation)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        sa = np.bincount(gs, weights=coef, minlength=G) / nf
        asa = coef - sa[gs]
        xsx = (v - mean[gs]) / rng_[gs]
        ssa = np.bincount(gs, weights=asa * asa, minlength=G)
        ssx = np.bincount(gs, weights=xsx * xsx, minlength=G)
        sax = np.bincount(gs, weights=asa * xsx, minlength=G)
        ssassx = np.sqrt(ssa * ssx)
        return (ssassx - sax) * (ssassx + sax) / (ssa * ssx)


def _sw_pvalue(w1: np.ndarray, n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """W and its p-value from ``w1 = 1 − W`` (Royston 1995, AS R94; exact for n = 3)."""
    nf = n.astype(np.float64)
    w = 1.0 - w1
    with np.errstate(divide="ignore", invalid="ignore"):
        # n == 3: exact distribution; W >= 3/4 in theory, clamp rounding below it
        p3 = 1.0 - (6.0 / np.pi) * np.arccos(np.sqrt(np.maximum(w, 0.75)))
        p3 = np.where(w < 0.75, 0.0, p3)
        w3 = np.maximum(w, 0.75)
        y = np.log(w1)
        lx = np.log(nf)
        gam = _poly(_SW_G, nf)
        y_small = -np.log(gam - y)
        z_small = (y_small - _poly(_SW_C3, nf)) / np.exp(_poly(_SW_C4, nf))
        p_small = np.where(y >= gam, _SW_SMALL, special.ndtr(-z_small))
        z_big = (y - _poly(_SW_C5, lx)) / np.exp(_poly(_SW_C6, lx))
        p_big = special.ndtr(-z_big)
    p = np.where(n == 3, p3, np.where(n <= 11, p_small, p_big))
    return np.where(n == 3, w3, w), p


def _dagostino_pearson(m2: np.ndarray, m3: np.ndarray, m4: np.ndarray, n: np.ndarray) -> np.ndarray:
    """p-value of the D'Agostino-Pearson K² test from biased central moments (n >= 8).

    Skewness z by D'Agostino (1970), kurtosis z by Anscombe & Glynn (1983), K² = z₁² + z₂² against
    χ²(2) (D'Agostino & Pearson 1973); the same formulas as ``scipy.stats.normaltest``.
    """
    nf = n.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        b1 = m3 / m2**1.5
        b2 = m4 / (m2 * m2)
        y = b1 * np.sqrt(((nf + 1) * (nf + 3)) / (6.0 * (nf - 2)))
        beta2 = (3.0 * (nf**2 + 27 * nf - 70) * (nf + 1) * (nf + 3)
                 / ((nf - 2) * (nf + 5) * (nf + 7) * (nf + 9)))
        w2 = -1 + np.sqrt(2 * (beta2 - 1))
        dlt = 1 / np.sqrt(0.5 * np.log(w2))
        alpha = np.sqrt(2.0 / (w2 - 1))
        y = np.where(y == 0, 1.0, y)
        z1 = dlt * np.log(y / alpha + np.sqrt((y / alpha) ** 2 + 1))
        e = 3.0 * (nf - 1) / (nf + 1)
        varb2 = 24.0 * nf * (nf - 2) * (nf - 3) / ((nf + 1) * (nf + 1) * (nf + 3) * (nf + 5))
        xk = (b2 - e) / np.sqrt(varb2)
        sb1 = 6.0 * (nf * nf - 5 * nf + 2) / ((nf + 7) * (nf + 9)) * np.sqrt(
            (6.0 * (nf + 3) * (nf + 5)) / (nf * (nf - 2) * (nf - 3))
        )
        A = 6.0 + 8.0 / sb1 * (2.0 / sb1 + np.sqrt(1 + 4.0 / (sb1**2)))
        term1 = 1 - 2 / (9.0 * A)
        denom = 1 + xk * np.sqrt(2 / (A - 4.0))
        term2 = np.sign(denom) * np.where(denom == 0.0, np.nan, ((1 - 2.0 / A) / np.abs(denom)) ** (1 / 3))
        z2 = (term1 - term2) / np.sqrt(2 / (9.0 * A))
        return special.chdtrc(2.0, z1 * z1 + z2 * z2)


def _central_moments(v: np.ndarray, gs: np.ndarray, nf: np.ndarray, G: int) -> tuple[np.ndarray, ...]:
    """Per-group mean and biased central moments m2, m3, m4 (corrected two-pass)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        mean0 = np.bincount(gs, weights=v, minlength=G) / nf
        d = v - mean0[gs]
        mean = mean0 + np.bincount(gs, weights=d, minlength=G) / nf
        d = v - mean[gs]
        d2 = d * d
        m2 = np.bincount(gs, weights=d2, minlength=G) / nf
        m3 = np.bincount(gs, weights=d2 * d, minlength=G) / nf
        m4 = np.bincount(gs, weights=d2 * d2, minlength=G) / nf
    return mean, m2, m3, m4


def _skew(mean: np.ndarray, m2: np.ndarray, m3: np.ndarray) -> np.ndarray:
    """Biased sample skewness ``m3/m2^1.5``; NaN for (numerically) constant data, as scipy.stats.skew."""
    with np.errstate(divide="ignore", invalid="ignore"):
        zero = m2 <= (np.finfo(np.float64).eps * mean) ** 2
        return np.where(zero, np.nan, m3 / m2**1.5)


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


# ----------------------------------------------------------------------------------------------------
# lognormal_mean


def lognormal_mean(
    m: LogMoments,
    *,
    method: str = "cox",
    confidence_level: float = 0.95,
    random_state: Any = None,
    n_draws: int = 10000,
    values: Any = None,
    codes: Any = None,
) -> dict[str, np.ndarray]:
    r"""Arithmetic mean implied by a log-normal fit, ``exp(ȳ + s²/2)``, with a confidence interval.

    ``ȳ`` is the mean of the natural logs and ``s²`` their variance with ``ddof=1``.

    Parameters
    ----------
    m : LogMoments
        Log-moments of any shape; every result has that shape.
    method : {"cox", "modified_cox", "gci", "bootstrap"}
        ``"cox"``: ``exp(ȳ + s²/2 ± z·sqrt(s²/n + s⁴/(2(n−1))))`` (Land 1972; Zhou & Gao 1997).
        ``"modified_cox"``: the same with ``t(1−α/2, n−1)`` in place of ``z`` (Armstrong 1992; Olsson
        2005). ``"gci"``: generalized confidence interval (Krishnamoorthy & Mathew 2003), Monte Carlo
        with ``n_draws`` draws per group. ``"bootstrap"``: BCa bootstrap (Efron 1987) with
        ``n_draws`` resamples per group; needs the raw ``values`` and ``codes``.
    confidence_level : float
        Two-sided level, strictly between 0 and 1.
    random_state : None, int, numpy.random.SeedSequence or numpy.random.Generator
        Seed for the Monte Carlo methods, passed to ``numpy.random.default_rng`` (a Generator is used,
        and advanced, as given). The same seed and the same input give identical results; numpy's
        global random state is never touched. A group's draws depend on its position in the input.
    n_draws : int
        Monte Carlo draws (``"gci"``) or bootstrap resamples (``"bootstrap"``) per group.
    values, codes : array_like, 1-D, optional
        Only for ``"bootstrap"``: the raw values and their group codes from which ``m`` was built
        (``m`` must then be 1-D with one element per group). Values that are missing or ``<= 0`` are
        left out, as in the moments; the per-group counts must equal ``m.n``.

    Returns
    -------
    dict of str to ndarray, each of the shape of ``m``
        ``estimate``, ``ci_low``, ``ci_high`` (float) and ``method`` (object, the method's name).
        ``estimate`` is NaN for ``n < 2`` (``s²`` is undefined). The interval is NaN for ``n < 2``
        (for ``"bootstrap"``, ``n < 3``, where the jackknife acceleration is undefined) and wherever
        the moments are NaN.

    Notes
    -----
    *GCI*: for each group ``Z ~ N(0, 1)`` and ``U ~ χ²(n−1)`` are drawn and
    ``T = ȳ − Z·(s/√n)/sqrt(U/(n−1)) + (s²/2)/(U/(n−1))``; the interval is ``exp`` of the ``α/2`` and
    ``1−α/2`` sample quantiles of ``T`` (linear interpolation). Groups are processed in chunks so that
    at most about two million draws are held at once.

    *Bootstrap*: resampling is vectorised (all groups of a chunk at once, no loop per group). The
    statistic is ``ȳ* + s*²/2`` on the log scale (the BCa interval is transformation respecting, and
    this avoids overflow); bias correction ``z0`` uses the mid-rank of the estimate among the
    resampled statistics, acceleration the closed-form jackknife, and quantiles linear interpolation,
    as ``scipy.stats.bootstrap(method="BCa")``. The random streams differ from scipy's, so results
    agree with it only to Monte Carlo error.

    References
    ----------
    Land, C. E. (1972). An evaluation of approximate confidence interval estimation methods for
    lognormal means. Technometrics 14:145-158.
    Zhou, X.-H. & Gao, S. (1997). Confidence intervals for the log-normal mean. Statistics in Medicine
    16:783-790.
    Armstrong, B. G. (1992). Confidence intervals for arithmetic means of lognormally distributed
    exposures. American Industrial Hygiene Association Journal 53:481-485.
    Olsson, U. (2005). Confidence intervals for the mean of a log-normal distribution. Journal of
    Statistics Education 13(1).
    Krishnamoorthy, K. & Mathew, T. (2003). Inferences on the means of lognormal distributions using
    generalized p-values and generalized confidence intervals. J. Statistical Planning and Inference
    115:103-121.
    Efron, B. (1987). Better bootstrap confidence intervals. JASA 82:171-185; Efron, B. & Tibshirani,
    R. J. (1993). An Introduction to the Bootstrap, ch. 14.

    Examples
    --------
    Olsson's (2005) example, n = 40, ȳ = 5.127, s² = 1.010 (so m2 = s²·(n − 1)):

    >>> import numpy as np
    >>> m = LogMoments(n=np.array([40]), mean_log=np.array([5.127]), m2_log=np.array([1.010 * 39]),
    ...                n_missing=np.array([0]), n_nonpositive=np.array([0]))
    >>> out = lognormal_mean(m, method="cox")
    >>> np.round(out["ci_low"], 2), np.round(out["ci_high"], 2)
    (array([190.24]), array([409.82]))
    """
    if method not in LOGNORMAL_MEAN_METHODS:
        raise ValueError(
            f"method={method!r} is not one of {', '.join(map(repr, LOGNORMAL_MEAN_METHODS))}"
        )
    cl = _check_level(confidence_level)
    if not isinstance(m, LogMoments):
        raise TypeError(f"m must be a LogMoments; got {type(m).__name__}")
    shape = np.shape(m.n)
    n = np.asarray(m.n, dtype=np.float64).ravel()
    ybar = np.asarray(m.mean_log, dtype=np.float64).ravel()
    s2 = np.asarray(m.var_log(1), dtype=np.float64).ravel()
    with np.errstate(over="ignore", invalid="ignore"):
        centre = ybar + 0.5 * s2
        estimate = np.exp(centre)
    ok = (n >= 2) & np.isfinite(centre)
    low = np.full(n.shape, np.nan)
    high = np.full(n.shape, np.nan)

    if method in ("cox", "modified_cox"):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            half = np.sqrt(s2 / n + s2 * s2 / (2.0 * (n - 1.0)))
            q: np.ndarray | float
            if method == "cox":
                q = float(special.ndtri(0.5 + cl / 2.0))
            else:
                q = t_quantile(cl, n - 1.0)
            low = np.where(ok, np.exp(centre - q * half), np.nan)
            high = np.where(ok, np.exp(centre + q * half), np.nan)
    elif method == "gci":
        B = _check_draws(n_draws)
        rng = np.random.default_rng(random_state)
        idx = np.flatnonzero(ok)
        chunk = max(1, _DRAW_BUDGET // B)
        qs = np.array([(1.0 - cl) / 2.0, (1.0 + cl) / 2.0])
        for s in range(0, idx.size, chunk):
            g = idx[s:s + chunk]
            df = n[g] - 1.0
            z = rng.standard_normal((g.size, B))
            v = rng.chisquare(df[:, None], size=(g.size, B)) / df[:, None]
            sd = np.sqrt(s2[g] / n[g])[:, None]
            t_ = ybar[g][:, None] - z * sd / np.sqrt(v) + (0.5 * s2[g])[:, None] / v
            ql, qh = np.quantile(t_, qs, axis=1)
            with np.errstate(over="ignore"):
                low[g], high[g] = np.exp(ql), np.exp(qh)
    else:
        low, high = _bootstrap_bca(m, values, codes, cl, random_state, _check_draws(n_draws), ok)

    return {
        "estimate": estimate.reshape(shape),
        "ci_low": low.reshape(shape),
        "ci_high": high.reshape(shape),
        "method": np.full(shape, method, dtype=object),
    }


def _check_draws(n_draws: Any) -> int:
    B = operator.index(n_draws)
    if B < 2:
        raise ValueError(f"n_draws must be at least 2; got {B}")
    return B


def _bootstrap_bca(m: LogMoments, values: Any, codes: Any, cl: float, random_state: Any, B: int,
                   ok: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised BCa bootstrap of ``ȳ + s²/2`` per group; see :func:`lognormal_mean`."""
    if values is None or codes is None:
        raise ValueError("method='bootstrap' needs the raw values= and codes= the moments were built from")
    if np.ndim(m.n) != 1:
        raise ValueError(
            f"method='bootstrap' needs 1-D moments (one per group); got shape {np.shape(m.n)}"
        )
    G = int(np.shape(m.n)[0])
    x = _values_1d(values)
    codes, G = _group_codes(codes, x.size, G)
    lv = to_logs(x, where="values")
    use = np.flatnonzero(lv.valid & (codes >= 0))
    use = use[np.argsort(codes[use], kind="stable")]
    ys, gs = lv.y[use], codes[use]
    cnt = np.bincount(gs, minlength=G)
    mn = np.asarray(m.n, dtype=np.int64)
    if not np.array_equal(cnt, mn):
        bad = np.flatnonzero(cnt != mn)
        raise ValueError(
            f"values/codes do not match the moments: {bad.size} group(s) (first: group {int(bad[0])}) have "
            f"{int(cnt[bad[0]])} positive value(s) in values but n={int(mn[bad[0]])} in the moments"
        )
    starts = np.zeros(G, dtype=np.intp)
    np.cumsum(cnt[:-1], out=starts[1:])
    ybar = np.asarray(m.mean_log, dtype=np.float64)
    nf = cnt.astype(np.float64)
    d = ys - ybar[gs]  # centred logs: resampled sums of d and d² give mean and variance stably
    low = np.full(G, np.nan)
    high = np.full(G, np.nan)
    sel = np.flatnonzero(ok & (cnt >= 3))
    if sel.size == 0:
        return low, high
    rng = np.random.default_rng(random_state)
    z_lo = float(special.ndtri((1.0 - cl) / 2.0))
    z_hi = -z_lo

    # chunks of consecutive selected groups holding about _DRAW_BUDGET resampled values
    rows_per_chunk = max(1, _DRAW_BUDGET // B)
    csum = np.cumsum(cnt[sel])
    bounds = [0]
    while bounds[-1] < sel.size:
        base = csum[bounds[-1] - 1] if bounds[-1] else 0
        nxt = int(np.searchsorted(csum, base + rows_per_chunk, side="right"))
        bounds.append(max(nxt, bounds[-1] + 1))
    for b0, b1 in zip(bounds[:-1], bounds[1:]):
        g = sel[b0:b1]
        ng = nf[g]
        loc_starts = np.cumsum(np.append(0, cnt[g][:-1]))
        col_start = np.repeat(loc_starts, cnt[g])
        rows = np.repeat(starts[g], cnt[g]) + (np.arange(col_start.size) - col_start)
        dloc = d[rows]
        col_n = np.repeat(cnt[g], cnt[g])
        pick = col_start + np.minimum((rng.random((B, rows.size)) * col_n).astype(np.intp), col_n - 1)
        dd = dloc[pick]
        s1 = np.add.reduceat(dd, loc_starts, axis=1)
        s2 = np.add.reduceat(dd * dd, loc_starts, axis=1)
        stat_b = (ybar[g] + s1 / ng + 0.5 * (s2 - s1 * s1 / ng) / (ng - 1.0)).T  # (groups, B)
        # estimate on the log scale, and leave-one-out (jackknife) values in closed form
        t1 = np.add.reduceat(dloc, loc_starts)
        t2 = np.add.reduceat(dloc * dloc, loc_starts)
        theta = ybar[g] + t1 / ng + 0.5 * (t2 - t1 * t1 / ng) / (ng - 1.0)
        gl = np.repeat(np.arange(g.size), cnt[g])
        nj = ng[gl] - 1.0
        j1 = t1[gl] - dloc
        j2 = t2[gl] - dloc * dloc
        theta_j = ybar[g][gl] + j1 / nj + 0.5 * (j2 - j1 * j1 / nj) / (nj - 1.0)
        jbar = np.add.reduceat(theta_j, loc_starts) / ng
        uj = jbar[gl] - theta_j
        with np.errstate(divide="ignore", invalid="ignore"):
            acc = np.add.reduceat(uj**3, loc_starts) / (6.0 * np.add.reduceat(uj * uj, loc_starts) ** 1.5)
            below = (stat_b < theta[:, None]).sum(axis=1) + (stat_b <= theta[:, None]).sum(axis=1)
            z0 = special.ndtri(below / (2.0 * B))
            num1 = z0 + z_lo
            num2 = z0 + z_hi
            a1 = special.ndtr(z0 + num1 / (1.0 - acc * num1))
            a2 = special.ndtr(z0 + num2 / (1.0 - acc * num2))
        stat_b.sort(axis=1)
        ql = _quantile_rows(stat_b, a1)
        qh = _quantile_rows(stat_b, a2)
        with np.errstate(over="ignore"):
            low[g], high[g] = np.exp(ql), np.exp(qh)
    return low, high


def _quantile_rows(sorted_rows: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Row-wise quantile ``q[i]`` of row ``i`` (rows sorted), numpy's default linear interpolation."""
    B = sorted_rows.shape[1]
    fin = np.isfinite(q)
    h = np.where(fin, q, 0.0) * (B - 1)
    lo = np.clip(np.floor(h).astype(np.intp), 0, B - 1)
    hi = np.minimum(lo + 1, B - 1)
    r = np.arange(sorted_rows.shape[0])
    vlo, vhi = sorted_rows[r, lo], sorted_rows[r, hi]
    out = vlo + (h - lo) * (vhi - vlo)
    return np.where(fin, out, np.nan)
