"""Fold changes with values censored at detection limits: censored normal regression on the logs.

Within each stratum every level has its own location and all levels share one spread; values at or
below their limit contribute ``Φ((ln DL − mu_level)/sigma)``. The ratio of geometric means is
``exp(mu_level − mu_reference)``, its interval a Wald interval from the observed information and its
p-value a likelihood-ratio test. Pure numpy/scipy, vectorised over strata and comparisons: one
batched Newton iteration fits every stratum, a second fits every restricted model at once.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import special, stats

from logstats.core.groups import occurring_keys
from logstats.core.moments import moments_by_codes
from logstats.core.transform import check_nonpositive, to_logs
from logstats.stats._common import _LOG_2PI, _detection_limits, _values_1d
from logstats.stats.censored import _mills, _t_quantile
from logstats.stats.compare import _check_codes, _check_level, _check_method, adjust_p

__all__ = ["censored_fold_change"]

_LN2 = float(np.log(2.0))
_MAX_HALVINGS = 60


def _max_by(codes: np.ndarray, v: np.ndarray, size: int) -> np.ndarray:
    out = np.zeros(size)
    np.maximum.at(out, codes, v)
    return out


def _common_sigma_fit(
    cp: np.ndarray,
    k: np.ndarray,
    ybar: np.ndarray,
    M: np.ndarray,
    pc: np.ndarray,
    pv: np.ndarray,
    pw: np.ndarray,
    P: int,
    max_iter: int,
    tol: float,
) -> dict[str, np.ndarray]:
    """Censored normal ML with one location per cell and one sigma per problem, all problems at once.

    ``cp``: problem of each cell; ``k``, ``ybar``, ``M``: count (>= 1), mean and sum of squared
    deviations of the detected logs of each cell; ``pc``, ``pv``, ``pw``: cell, log limit and
    multiplicity of each censored term. Newton in Olsen's ``δ = mu/sigma``, ``γ = 1/sigma`` (globally
    concave; the Hessian is an arrow matrix, solved in closed form), with step halving per problem.
    """
    C = cp.size
    kf = k.astype(np.float64)
    pp = cp[pc]
    wsum = np.bincount(cp, weights=kf, minlength=P) + np.bincount(pp, weights=pw, minlength=P)
    with np.errstate(divide="ignore", invalid="ignore"):
        centre = (np.bincount(cp, weights=kf * ybar, minlength=P)
                  + np.bincount(pp, weights=pw * pv, minlength=P)) / wsum
        ss = (np.bincount(cp, weights=M + kf * (ybar - centre[cp]) ** 2, minlength=P)
              + np.bincount(pp, weights=pw * (pv - centre[pp]) ** 2, minlength=P))
        scale = np.sqrt(ss / wsum)
    scale = np.where((scale > 0) & np.isfinite(scale), scale, 1.0)
    centre = np.where(np.isfinite(centre), centre, 0.0)
    yb = (ybar - centre[cp]) / scale[cp]
    Ms = M / scale[cp] ** 2
    cs = (pv - centre[pp]) / scale[pp]
    ndet = np.bincount(cp, weights=kf, minlength=P)

    # start: substitution (each non-detect at its limit), pooled within-cell spread
    mc = np.bincount(pc, weights=pw, minlength=C)
    sub = (kf * yb + np.bincount(pc, weights=pw * cs, minlength=C)) / (kf + mc)
    ss0 = np.bincount(cp, weights=Ms + kf * (yb - sub) ** 2
                      + np.bincount(pc, weights=pw * (cs - sub[pc]) ** 2, minlength=C), minlength=P)
    with np.errstate(divide="ignore", invalid="ignore"):
        s0 = np.sqrt(ss0 / wsum)
    s0 = np.where((s0 > 0) & np.isfinite(s0), s0, 1.0)
    gamma = 1.0 / s0
    delta = gamma[cp] * sub

    def loglik(d: np.ndarray, g: np.ndarray) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            a = g[pp] * cs - d[pc]
            lc = np.bincount(pp, weights=pw * special.log_ndtr(a), minlength=P)
            e = g[cp] * yb - d
            out = np.bincount(cp, weights=kf * np.log(g[cp]) - 0.5 * (g[cp] ** 2 * Ms + kf * e * e),
                              minlength=P) + lc
        return np.where((g > 0) & np.isfinite(out), out, -np.inf)

    def pieces(d: np.ndarray, g: np.ndarray) -> tuple[np.ndarray, ...]:
        a = g[pp] * cs - d[pc]
        r, w = _mills(a)
        e = g[cp] * yb - d
        g_d = kf * e - np.bincount(pc, weights=pw * r, minlength=C)
        g_g = (np.bincount(cp, weights=kf / g[cp] - g[cp] * Ms - kf * e * yb, minlength=P)
               + np.bincount(pp, weights=pw * r * cs, minlength=P))
        D = -kf - np.bincount(pc, weights=pw * w, minlength=C)
        b = kf * yb + np.bincount(pc, weights=pw * w * cs, minlength=C)
        cc = (np.bincount(cp, weights=-kf / g[cp] ** 2 - Ms - kf * yb * yb, minlength=P)
              - np.bincount(pp, weights=pw * w * cs * cs, minlength=P))
        schur = cc - np.bincount(cp, weights=b * b / D, minlength=P)
        return g_d, g_g, D, b, schur

    active = np.ones(P, dtype=bool)
    converged = np.zeros(P, dtype=bool)
    n_iter = np.zeros(P, dtype=np.int64)
    slack = 64.0 * np.finfo(np.float64).eps
    for _ in range(max_iter):
        if not active.any():
            break
        g_d, g_g, D, b, schur = pieces(delta, gamma)
        with np.errstate(divide="ignore", invalid="ignore"):
            s_g = (-g_g + np.bincount(cp, weights=b * g_d / D, minlength=P)) / schur
            s_d = (-g_d - b * s_g[cp]) / D
            bad = ~(np.isfinite(s_g) & (schur < 0))
            s_g = np.where(bad, 0.0, s_g)
            s_d = np.where(bad[cp] | ~np.isfinite(s_d), g_d / np.abs(D), s_d)
            g_full = gamma + s_g
            dmu = _max_by(cp, np.abs((delta + s_d) / g_full[cp] - delta / gamma[cp]), P)
            dtau = np.abs(np.log(g_full / gamma))
        small = active & (dmu < tol) & (dtau < tol)
        l0 = loglik(delta, gamma)
        t = np.ones(P)
        pending = active.copy()
        for _h in range(_MAX_HALVINGS):
            nd = delta + t[cp] * s_d
            ng = gamma + t * s_g
            l1 = loglik(nd, ng)
            good = pending & (l1 >= l0 - slack * (1.0 + np.abs(l0)))
            delta = np.where(good[cp], nd, delta)
            gamma = np.where(good, ng, gamma)
            pending &= ~good
            if not pending.any():
                break
            t = np.where(pending, 0.5 * t, t)
        n_iter += active
        converged |= small
        active &= ~small & ~pending

    _, _, D, b, schur = pieces(delta, gamma)
    ll = loglik(delta, gamma) - ndet * (0.5 * _LOG_2PI + np.log(scale))
    return {
        "mu": centre[cp] + scale[cp] * delta / gamma[cp],
        "sigma": scale / gamma,
        "loglik": ll,
        "converged": converged,
        "n_iter": n_iter,
        "delta": delta,
        "gamma": gamma,
        "D": D,
        "b": b,
        "schur": schur,
        "scale": scale,
    }


def censored_fold_change(
    values: Any,
    level_codes: Any,
    n_levels: int,
    reference: int,
    *,
    detection_limit: Any,
    stratum_codes: Any = None,
    n_strata: int = 1,
    confidence_level: float = 0.95,
    adjust: str | None = "holm",
    skipna: bool = True,
    nonpositive: str = "drop",
    max_iter: int = 100,
    tol: float = 1e-10,
) -> dict[str, np.ndarray]:
    r"""Ratio of geometric means of every level against a reference, with values censored at limits.

    Parameters
    ----------
    values : array_like, 1-D
        Raw (linear-scale) values; a censored row holds its limit (or any value at or below it).
    level_codes : array_like of int, 1-D
        Level of each value, ``0 .. n_levels − 1``; negative = no level (ignored).
    n_levels : int
        Number of levels.
    reference : int
        Code of the reference level.
    detection_limit : None, float or array_like
        One limit, or one per row (NaN = no limit). A value **at or below** its limit is censored,
        zeros and negatives included.
    stratum_codes : array_like of int, optional
        Stratum of each value, ``0 .. n_strata − 1``; each stratum is a separate model (own sigma) and
        its own multiplicity family. Negative = ignored.
    n_strata : int
        Number of strata.
    confidence_level : float
        Two-sided level of the interval of the ratio.
    adjust : {"holm", "bh", None}
        Multiplicity adjustment of the likelihood-ratio p-values within each stratum
        (:func:`logstats.stats.compare.adjust_p` with ``families=`` the stratum).
    skipna : bool
        False makes a level with missing values NaN (the whole stratum when it is the reference).
    nonpositive : {"drop", "nan", "raise"}
        Rows without a limit whose value is ``<= 0``: ``"drop"`` (and ``"raise"``, left to the caller)
        excludes and counts them; ``"nan"`` makes the level NaN (the stratum when it is the reference).
    max_iter, tol
        Newton iterations and convergence threshold (standardized location and ``ln sigma``).

    Returns
    -------
    dict of str to ndarray, each of shape ``(n_strata, n_levels)``
        ``ratio`` (``exp(mu_level − mu_reference)``), ``ci_low``, ``ci_high``, ``p_value``,
        ``p_adjusted`` (absent when ``adjust=None``), ``n``, ``n_reference`` (detects plus non-detects),
        ``n_censored``, ``n_censored_reference``, ``n_missing``, ``n_nonpositive``, ``log2_ratio``,
        ``log_ratio``, ``statistic`` (the likelihood-ratio chi-squared), ``sigma`` (the stratum's common
        spread of the logs, MLE, ``ddof=0``), ``converged``. The reference column has ``ratio`` 1 (NaN
        when the reference is unusable), ``log2_ratio`` 0 and NaN interval and p-values.

    Notes
    -----
    *Model.* In stratum ``s``, ``ln x ~ N(mu_l, sigma²)`` for level ``l``; detects contribute the
    normal density of their log, non-detects ``Φ((ln DL − mu_l)/sigma)`` at their own limit. The MLE is
    found by Newton's method in Olsen's (1978) parameters ``δ_l = mu_l/sigma``, ``γ = 1/sigma``, where
    the log-likelihood is concave; the Hessian has the arrow form (diagonal in the ``δ_l`` plus one
    ``γ`` row), so each step is solved in closed form for all strata at once.

    *Interval.* ``Var(mu_l − mu_ref)`` comes from the inverse observed information at the MLE; with
    ``N`` values and ``p`` fitted levels in the stratum the interval is
    ``exp(d ± t(1−α/2, N−p)·sqrt(Var·N/(N−p)))``. Without censoring ``Var·N/(N−p)`` is the pooled
    variance ``s²(1/n_l + 1/n_ref)``, so the interval is exactly the ordinary-least-squares (Student,
    pooled over the stratum's levels) interval; with censoring it is a Wald interval with the same
    small-sample correction, approximate.

    *p-value.* Likelihood ratio, chi-squared with 1 df: the model is refitted with ``mu_l = mu_ref``
    (the other levels keep their own locations, sigma stays common), every restricted model of every
    stratum in one batched fit.

    *Levels that cannot be estimated.* A level whose values are all censored has no MLE (its location
    tends to −∞): its results are NaN and it is left out of the fit (its likelihood contribution
    tends to 1 there, so the other results are the limit of the full fit). A stratum whose sigma has
    no MLE (every fitted level a single repeated detect with no limit below it) is NaN.

    Results can feed clinical, regulatory or safety decisions: use validated tools, qualified review,
    local rules and licensed practice.

    References
    ----------
    Cohen, A. C. (1961). Tables for maximum likelihood estimates: singly truncated and singly censored
    samples. Technometrics 3:535-541. Tobin, J. (1958). Estimation of relationships for limited
    dependent variables. Econometrica 26:24-36 (censored normal regression). Olsen, R. J. (1978).
    Econometrica 46:1211-1215 (concavity; cited from memory). Helsel, D. R. (2012). Statistics for
    Censored Environmental Data Using Minitab and R, 2nd ed. Wiley (censored regression and
    likelihood-ratio tests for non-detects). Holm, S. (1979). Scand. J. Stat. 6:65-70.

    Examples
    --------
    Two invented levels, limit 1.0:

    >>> import numpy as np
    >>> x = np.array([1.0, 1.0, 1.4, 2.3, 3.3, 1.0, 2.8, 4.1, 6.0, 9.2])
    >>> lev = np.repeat([0, 1], 5)
    >>> out = censored_fold_change(x, lev, 2, 0, detection_limit=1.0, adjust=None)
    >>> out["n_censored"], np.round(out["ratio"], 3)
    (array([[2, 1]]), array([[1.   , 2.667]]))
    """
    check_nonpositive(nonpositive)
    adjust = _check_method(adjust, "adjust")
    cl = _check_level(confidence_level)
    L, S = int(n_levels), int(n_strata)
    if L < 1:
        raise ValueError(f"n_levels={n_levels!r} must be at least 1")
    if S < 1:
        raise ValueError(f"n_strata={n_strata!r} must be at least 1")
    ref = int(reference)
    if not 0 <= ref < L:
        raise ValueError(f"reference={reference!r} is not a level code in 0..{L - 1}")
    max_iter = int(max_iter)
    if max_iter < 1:
        raise ValueError(f"max_iter must be >= 1; got {max_iter}")
    x = _values_1d(values)
    N = x.size
    lc = _check_codes(level_codes, N, L, "level_codes", "n_levels")
    sc = np.zeros(N, dtype=np.int64) if stratum_codes is None else _check_codes(
        stratum_codes, N, S, "stratum_codes", "n_strata")
    SL = S * L
    keyed = (lc >= 0) & (sc >= 0)
    cell = np.where(keyed, sc * L + lc, -1)

    lv = to_logs(x, where="values")
    dl = _detection_limits(detection_limit, N)
    if dl is None:
        cens = np.zeros(N, dtype=bool)
    else:
        with np.errstate(invalid="ignore"):
            cens = ~lv.missing & ~np.isnan(dl) & (x <= dl)
    det = lv.valid & ~cens & keyed
    cens &= keyed
    nonpos = lv.nonpositive & ~cens & keyed

    def count(mask: np.ndarray) -> np.ndarray:
        return np.bincount(cell[mask], minlength=SL).astype(np.int64)

    n_missing = count(lv.missing & keyed)
    n_nonpos = count(nonpos)
    k = count(det)
    m = count(cens)
    bad = np.zeros(SL, dtype=bool)
    if not skipna:
        bad |= n_missing > 0
    if nonpositive == "nan":
        bad |= n_nonpos > 0
    bad2 = bad.reshape(S, L)
    bad2 = bad2 | bad2[:, ref:ref + 1]
    bad = bad2.ravel()

    dm = moments_by_codes(np.where(det, x, np.nan), np.where(det, cell, -1), SL, where="values")
    ybar = np.asarray(dm.mean_log, dtype=np.float64)
    M2 = np.asarray(dm.m2_log, dtype=np.float64)
    ymin = np.full(SL, np.inf)
    np.minimum.at(ymin, cell[det], lv.y[det])
    ymax = np.full(SL, -np.inf)
    np.maximum.at(ymax, cell[det], lv.y[det])

    # censored terms: distinct (cell, limit) with multiplicities
    with np.errstate(divide="ignore"):
        clog = np.log(dl[cens]) if dl is not None else np.zeros(0)
    ccell = cell[cens]
    o = np.lexsort((clog, ccell))
    ccell, clog = ccell[o], clog[o]
    first = np.ones(ccell.size, dtype=bool)
    first[1:] = (ccell[1:] != ccell[:-1]) | (clog[1:] != clog[:-1])
    starts = np.flatnonzero(first)
    cw = np.diff(np.append(starts, ccell.size)).astype(np.float64)
    ccell, clog = ccell[starts], clog[starts]
    cmin = np.full(SL, np.inf)
    np.minimum.at(cmin, ccell, clog)

    # cells in the fit: at least one detect and not made NaN by a policy
    incl = (k > 0) & ~bad
    spread = incl & ((ymax > ymin) | (cmin < ymin))
    strat_ok = np.bincount(np.flatnonzero(spread) // L, minlength=S) > 0
    incl &= strat_ok[np.arange(SL) // L]
    cells = np.flatnonzero(incl)
    cell_id = np.full(SL, -1, dtype=np.intp)
    cell_id[cells] = np.arange(cells.size)
    cstrat = cells // L
    keep_pairs = cell_id[ccell] >= 0
    pc, pv, pw = cell_id[ccell[keep_pairs]], clog[keep_pairs], cw[keep_pairs]

    ratio = np.full(SL, np.nan)
    log_ratio = np.full(SL, np.nan)
    low = np.full(SL, np.nan)
    high = np.full(SL, np.nan)
    p_value = np.full(SL, np.nan)
    stat = np.full(SL, np.nan)
    sigma = np.full(S, np.nan)
    conv = np.zeros(S, dtype=bool)

    if cells.size:
        full = _common_sigma_fit(cstrat, k[cells], ybar[cells], M2[cells], pc, pv, pw, S, max_iter, tol)
        conv = full["converged"] & strat_ok
        sigma = np.where(strat_ok, full["sigma"], np.nan)
        mu = np.full(SL, np.nan)
        mu[cells] = full["mu"]
        # comparisons: level cell and reference cell both fitted, stratum converged
        lev_of = cells % L
        tests = cells[(lev_of != ref) & incl[cstrat * L + ref] & conv[cstrat]]
        if tests.size:
            ts = tests // L
            ci_ = cell_id[tests]
            cr = cell_id[ts * L + ref]
            gam = full["gamma"][ts]
            dd = full["delta"][ci_] - full["delta"][cr]
            D, b = full["D"], full["b"]
            with np.errstate(divide="ignore", invalid="ignore"):
                quad = (1.0 / D[ci_] + 1.0 / D[cr]) / gam**2 + (
                    (b[ci_] / D[ci_] - b[cr] / D[cr]) / gam + dd / gam**2) ** 2 / full["schur"][ts]
                var = -quad * full["scale"][ts] ** 2
            d = mu[tests] - mu[ts * L + ref]
            n_tot = np.bincount(cstrat, weights=(k + m)[cells], minlength=S)
            n_par = np.bincount(cstrat, minlength=S).astype(np.float64)
            df = (n_tot - n_par)[ts]
            with np.errstate(divide="ignore", invalid="ignore"):
                half = _t_quantile(cl, df) * np.sqrt(var * n_tot[ts] / df)
            log_ratio[tests] = d
            low[tests] = d - half
            high[tests] = d + half

            # restricted fits (mu_l = mu_ref), all comparisons at once
            cnt = np.bincount(cstrat, minlength=S)
            cstart = np.concatenate([[0], np.cumsum(cnt)[:-1]])  # cells are sorted by stratum
            reps = cnt[ts]
            loc = np.arange(int(reps.sum())) - np.repeat(np.cumsum(reps) - reps, reps)
            idx = np.repeat(cstart[ts], reps) + loc  # fitted cells of each test's stratum
            tid = np.repeat(np.arange(tests.size), reps)
            lev = lev_of[idx]
            lev = np.where(lev == (tests % L)[tid], ref, lev)
            key = tid.astype(np.int64) * L + lev
            uniq, rc = np.unique(key, return_inverse=True)
            rc = rc.ravel()
            kk = k[cells][idx].astype(np.float64)
            yy = ybar[cells][idx]
            rn = np.bincount(rc, weights=kk, minlength=uniq.size)
            rmean = np.bincount(rc, weights=kk * yy, minlength=uniq.size) / rn
            rM = np.bincount(rc, weights=M2[cells][idx] + kk * (yy - rmean[rc]) ** 2, minlength=uniq.size)
            # censored terms of each test's stratum, relabelled
            pstrat = cstrat[pc]
            tcount = np.bincount(ts, minlength=S)
            order_t = np.argsort(ts, kind="stable")
            tstart = np.concatenate([[0], np.cumsum(tcount)[:-1]])
            preps = tcount[pstrat]
            ploc = np.arange(int(preps.sum())) - np.repeat(np.cumsum(preps) - preps, preps)
            ptest = order_t[np.repeat(tstart[pstrat], preps) + ploc]
            plev = np.repeat(lev_of[pc], preps)
            plev = np.where(plev == (tests % L)[ptest], ref, plev)
            prc = np.searchsorted(uniq, ptest.astype(np.int64) * L + plev)
            rfit = _common_sigma_fit((uniq // L).astype(np.intp), rn.astype(np.int64), rmean, rM, prc,
                                     np.repeat(pv, preps), np.repeat(pw, preps), tests.size, max_iter, tol)
            lr = np.maximum(2.0 * (full["loglik"][ts] - rfit["loglik"]), 0.0)
            lr = np.where(rfit["converged"], lr, np.nan)
            stat[tests] = lr
            p_value[tests] = stats.chi2.sf(lr, 1)

        refcells = np.arange(S) * L + ref
        ref_ok = incl[refcells] & conv
        log_ratio[refcells[ref_ok]] = 0.0
    with np.errstate(over="ignore", under="ignore"):
        ratio = np.exp(log_ratio)
        ci_low = np.exp(low)
        ci_high = np.exp(high)

    def grid(a: np.ndarray) -> np.ndarray:
        return a.reshape(S, L)

    nn = grid(k + m)
    mm = grid(m)
    out: dict[str, np.ndarray] = {
        "ratio": grid(ratio),
        "ci_low": grid(ci_low),
        "ci_high": grid(ci_high),
        "p_value": grid(p_value),
    }
    if adjust is not None:
        fam = np.repeat(np.arange(S), L).reshape(S, L)
        out["p_adjusted"] = adjust_p(out["p_value"], adjust, families=fam)
    out.update({
        "n": nn,
        "n_reference": np.repeat(nn[:, ref:ref + 1], L, axis=1),
        "n_censored": mm,
        "n_censored_reference": np.repeat(mm[:, ref:ref + 1], L, axis=1),
        "n_missing": grid(n_missing),
        "n_nonpositive": grid(n_nonpos),
        "log2_ratio": grid(log_ratio / _LN2),
        "log_ratio": grid(log_ratio),
        "statistic": grid(stat),
        "sigma": np.repeat(sigma[:, None], L, axis=1),
        "converged": np.repeat(conv[:, None], L, axis=1),
    })
    return out


def censored_replicate_fold_change(values: Any, level_codes: Any, n_levels: int, reference: int, *,
                                   detection_limit: Any, replicate_codes: Any, n_replicates: int,
                                   stratum_codes: Any = None, n_strata: int = 1, nonpositive: str = "drop",
                                   skipna: bool = True, where: str = "the input",
                                   **test: Any) -> dict[str, np.ndarray]:
    """Replicates as the unit with non-detects: each replicate's location is its censored log-normal
    MLE (``mu``; all replicates fitted together by :func:`logstats.stats.censored.fit_lognormal`), and
    the replicate locations are compared as :func:`logstats.stats.compare.fold_change_codes` compares
    replicate means of logs (Welch, Student or paired; ``test`` holds its options).

    Arrays of shape ``(n_strata, n_levels)``; counts per level and for the reference: ``n_cells``,
    ``n_missing``, ``n_nonpositive``, ``n_censored``, and ``n_unestimable`` (replicates whose values are
    all censored, which have no location).
    """
    from logstats.stats.censored import fit_lognormal
    from logstats.stats.compare import fold_change_codes

    x = _values_1d(values)
    lc = np.asarray(level_codes, dtype=np.int64)
    sc = np.zeros(x.shape[0], dtype=np.int64)
    if stratum_codes is not None:
        sc = np.asarray(stratum_codes, dtype=np.int64)
    rc = np.asarray(replicate_codes, dtype=np.int64)
    L, S, R = int(n_levels), int(n_strata), max(int(n_replicates), 1)
    limit = np.broadcast_to(np.asarray(detection_limit, dtype=np.float64), x.shape)
    keyed = (lc >= 0) & (sc >= 0) & (rc >= 0)
    uniq, unit = occurring_keys(((sc * L + lc) * R + rc)[keyed], S * L * R)
    fit = fit_lognormal(x[keyed], unit.ravel(), len(uniq), detection_limit=limit[keyed],
                        nonpositive=nonpositive, skipna=skipna)
    mu = np.asarray(fit["mu"], dtype=np.float64)
    cell = uniq // R
    with np.errstate(over="ignore"):
        unit_values = np.exp(mu)
    res = fold_change_codes(unit_values, (cell % L).astype(np.intp), L, reference,
                            stratum_codes=(cell // L).astype(np.intp), n_strata=S,
                            replicate_codes=(uniq % R).astype(np.intp), n_replicates=R, where=where,
                            nonpositive="drop", skipna=True, **test)

    def per_cell(w: Any) -> np.ndarray:
        return np.bincount(cell, weights=np.asarray(w, dtype=np.float64),
                           minlength=S * L).astype(np.int64).reshape(S, L)

    for name, counts in (("n_cells", fit["n"]), ("n_missing", fit["n_missing"]),
                         ("n_nonpositive", fit["n_nonpositive"]), ("n_censored", fit["n_censored"])):
        res[name] = per_cell(counts)
        res[f"{name}_reference"] = np.repeat(res[name][:, [reference]], L, axis=1)
    res["n_unestimable"] = per_cell(~np.isfinite(mu))
    return res
