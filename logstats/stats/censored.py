"""Log-normal maximum-likelihood fits per group, left-censored at detection limits (numpy + scipy).

Pure functions of 1-D values with integer group codes (``0 .. ngroups-1``; a negative code puts a row
in no group) or of :class:`~logstats.core.moments.LogMoments`; vectorised over groups (censored groups
advance together in one Newton iteration).

* :func:`fit_lognormal` -- the MLE, left-censored at per-row detection limits.
* :func:`closed_form_fit` -- the uncensored MLE from the log-moments (lazy for dask).
"""

from __future__ import annotations

import operator
from typing import Any

import numpy as np
from scipy import special

from logstats.core.moments import LogMoments, moments_by_codes
from logstats.core.transform import check_nonpositive, to_logs
from logstats.stats._common import _LOG_2PI, _count, _detection_limits, _group_codes, _values_1d

__all__ = ["FIT_STATUSES", "closed_form_fit", "fit_lognormal"]

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

_SQRT_2_OVER_PI = float(np.sqrt(2.0 / np.pi))
_DEEP_TAIL = -100.0  # below this, w = r(a + r) comes from its asymptotic series
_MAX_HALVINGS = 60


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


