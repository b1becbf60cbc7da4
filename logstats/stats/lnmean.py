"""The arithmetic mean implied by a log-normal fit, with confidence intervals (Cox, modified Cox,
generalized CI, BCa bootstrap, Land's exact interval); a pure function of
:class:`~logstats.core.moments.LogMoments`."""

from __future__ import annotations

import operator
from typing import Any

import numpy as np
from scipy import special
from scipy.optimize import elementwise

from logstats.core.moments import LogMoments
from logstats.core.transform import to_logs
from logstats.stats._common import _group_codes, _values_1d
from logstats.stats.estimate import _check_level, t_quantile

__all__ = ["LOGNORMAL_MEAN_METHODS", "lognormal_mean"]

#: Methods accepted by :func:`lognormal_mean`.
LOGNORMAL_MEAN_METHODS: tuple[str, ...] = ("cox", "modified_cox", "gci", "bootstrap", "land")
_DRAW_BUDGET = 1 << 21  # Monte Carlo numbers held in memory at once (16 MB per float64 array)


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
    method : {"cox", "modified_cox", "gci", "bootstrap", "land"}
        ``"cox"``: ``exp(ȳ + s²/2 ± z·sqrt(s²/n + s⁴/(2(n−1))))`` (Land 1972; Zhou & Gao 1997).
        ``"modified_cox"``: the same with ``t(1−α/2, n−1)`` in place of ``z`` (Armstrong 1992; Olsson
        2005). ``"gci"``: generalized confidence interval (Krishnamoorthy & Mathew 2003), Monte Carlo
        with ``n_draws`` draws per group. ``"bootstrap"``: BCa bootstrap (Efron 1987) with
        ``n_draws`` resamples per group; needs the raw ``values`` and ``codes``. ``"land"``: Land's
        (1971, 1975) exact interval, equal tails, computed numerically (no tables) for any ``n >= 2``
        and level; see Notes.
    confidence_level : float
        Two-sided level, strictly between 0 and 1.
    random_state : None, int, numpy.random.SeedSequence or numpy.random.Generator
        Seed for the Monte Carlo methods, passed to ``numpy.random.default_rng`` (a Generator is used,
        and advanced, as given). The same seed and the same input give identical results; numpy's
        global random state is never touched. A group's draws depend on its position in the input.
    n_draws : int
        Monte Carlo draws (``"gci"``) or bootstrap resamples (``"bootstrap"``) per group. Memory stays
        bounded whatever the group sizes: at most about 2**21 random numbers (16 MB) are held at once,
        also within one large group (resamples are drawn in batches), plus O(n) for the values and
        O(n_draws) per group being finished.
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

    *Land*: each bound is the one-sided uniformly most accurate unbiased bound of Land (1971) for
    ``θ = μ + σ²/2`` at level ``1 − α/2``, so the interval has equal tails; the limits are
    ``exp(ȳ + s²/2 + s·H/√(n−1))`` with Land's ``H_{α/2}`` and ``H_{1−α/2}``, which are computed here
    rather than read from his tables. For a trial value ``θ₀`` the test conditions on the statistic
    sufficient for ``σ²`` under ``θ = θ₀``, ``c = S² + n(ȳ − θ₀)²`` (``S²`` the sum of squared deviations
    of the logs). Given ``c``, ``v = √n(ȳ − θ₀)/√c`` has density proportional to
    ``exp(−a v)(1 − v²)^((n−3)/2)`` on ``(−1, 1)`` with ``a = √(n c)/2``, free of ``σ²`` (derived from
    the independence of ``ȳ`` and ``S²``; this is Land's conditional test). With ``v = −cos φ`` its
    distribution function is ``∫₀^φ e^{a cos t} sin^{n−2} t dt`` normalised, a smooth unimodal
    integrand evaluated by Gauss-Legendre rules (64 nodes on each side of ``φ``, over 30 Laplace
    widths around the mode). The bounds solve ``P(V ≤ v_obs | θ₀) = α/2`` (upper) and ``1 − α/2``
    (lower) by a bracketed root search over ``θ₀`` (Chandrupatla,
    ``scipy.optimize.elementwise.find_root``), all groups at once. Where all logs are equal
    (``S² = 0``) the interval collapses to the estimate.

    Caution: intervals for mean exposures or concentrations are used in regulatory and safety
    decisions; these results support, and do not replace, validated tools, qualified review, local
    rules and licensed practice.

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
    Land, C. E. (1971). Confidence intervals for linear functions of the normal mean and variance.
    Ann. Math. Stat. 42:1187-1205. Land, C. E. (1975). Tables of confidence limits for linear
    functions of the normal mean and variance. Selected Tables in Mathematical Statistics 3:385-419.
    Lehmann, E. L. & Romano, J. P. (2005). Testing Statistical Hypotheses, 3rd ed., section 4.4
    (unbiased tests in exponential families by conditioning).

    Examples
    --------
    Olsson's (2005) example, n = 40, ȳ = 5.127, s² = 1.010 (so m2 = s²·(n − 1)):

    >>> import numpy as np
    >>> m = LogMoments(n=np.array([40]), mean_log=np.array([5.127]), m2_log=np.array([1.010 * 39]),
    ...                n_missing=np.array([0]), n_nonpositive=np.array([0]))
    >>> out = lognormal_mean(m, method="cox")
    >>> np.round(out["ci_low"], 2), np.round(out["ci_high"], 2)
    (array([190.24]), array([409.82]))
    >>> out = lognormal_mean(m, method="land")
    >>> np.round(out["ci_low"], 2), np.round(out["ci_high"], 2)
    (array([198.32]), array([446.02]))
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
    elif method == "land":
        m2 = np.asarray(m.m2_log, dtype=np.float64).ravel()
        tl, th = land_bounds(n, ybar, m2, cl, ok)
        with np.errstate(over="ignore", invalid="ignore"):
            low, high = np.exp(tl), np.exp(th)
    else:
        low, high = _bootstrap_bca(m, values, codes, cl, random_state, _check_draws(n_draws), ok)

    return {
        "estimate": estimate.reshape(shape),
        "ci_low": low.reshape(shape),
        "ci_high": high.reshape(shape),
        "method": np.full(shape, method, dtype=object),
    }


_LAND_GL_X, _LAND_GL_W = np.polynomial.legendre.leggauss(64)
_LAND_WIDTHS = 30.0  # half-width of the integration window, in Laplace widths of the integrand
_LAND_TOL = {"xatol": 1e-11, "xrtol": 1e-11, "fatol": 0.0, "frtol": 0.0}


def _gl_log_integral(lo: np.ndarray, hi: np.ndarray, a: np.ndarray, k: np.ndarray,
                     phi_m: np.ndarray) -> np.ndarray:
    """``∫_lo^hi exp(h(t) − h(φ_m)) dt`` with ``h(t) = a cos t + k ln sin t`` (Gauss-Legendre, 64 nodes)."""
    half = 0.5 * (hi - lo)
    t = (lo + half)[..., None] + half[..., None] * _LAND_GL_X
    pm = phi_m[..., None]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        dcos = -2.0 * np.sin(0.5 * (t + pm)) * np.sin(0.5 * (t - pm))  # cos t − cos φ_m, no cancellation
        dlog = np.where(k[..., None] > 0, k[..., None] * (np.log(np.sin(t)) - np.log(np.sin(pm))), 0.0)
        h = a[..., None] * dcos + dlog
        return half * np.sum(_LAND_GL_W * np.exp(h), axis=-1)


def _land_cdf(theta0: np.ndarray, n: np.ndarray, ybar: np.ndarray, m2: np.ndarray) -> np.ndarray:
    """``P(V <= v_obs)`` of Land's conditional test at ``θ = θ₀`` (see :func:`lognormal_mean`)."""
    w = ybar - theta0
    rn = np.sqrt(n)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        c = m2 + n * w * w
        sc = np.sqrt(c)
        # 1 + v and 1 − v (times √c) without cancellation: their product is S² = m2
        pos = w >= 0
        big = sc + rn * np.abs(w)
        p = np.where(pos, big, m2 / big)
        q = np.where(pos, m2 / big, big)
        phi_v = 2.0 * np.arctan2(np.sqrt(p), np.sqrt(q))
        a = 0.5 * np.sqrt(n * c)
        k = n - 2.0
        root = np.sqrt(k * k + 4.0 * a * a)
        u = np.where(root > 0, 2.0 * a / (k + root), 0.0)  # cos of the mode of a cos t + k ln sin t
        phi_m = np.arccos(np.clip(u, -1.0, 1.0))
        one_m_u2 = (1.0 - u) * (1.0 + u)
        curv = a * u + np.where(k > 0, k / one_m_u2, 0.0)
        width = np.where(curv > 0, 1.0 / np.sqrt(curv), np.inf)
        lo = np.maximum(phi_m - _LAND_WIDTHS * width, 0.0)
        hi = np.minimum(phi_m + _LAND_WIDTHS * width, np.pi)
        cut = np.clip(phi_v, lo, hi)
        i1 = _gl_log_integral(lo, cut, a, k, phi_m)
        i2 = _gl_log_integral(cut, hi, a, k, phi_m)
        return i1 / (i1 + i2)


def land_bounds(n: np.ndarray, ybar: np.ndarray, m2: np.ndarray, confidence_level: float,
                ok: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Land's equal-tailed exact limits for ``θ = μ + σ²/2`` on the log scale (flat arrays).

    ``n``, ``ybar`` (mean of the logs) and ``m2`` (sum of squared deviations) per group; NaN outside
    ``ok``. See :func:`lognormal_mean` (``method="land"``) for the method.
    """
    cl = _check_level(confidence_level)
    low = np.full(n.shape, np.nan)
    high = np.full(n.shape, np.nan)
    sel = np.flatnonzero(ok & (m2 > 0))
    flat = np.flatnonzero(ok & (m2 == 0))
    low[flat] = high[flat] = ybar[flat]
    if sel.size == 0:
        return low, high
    nn, yb, mm = n[sel], ybar[sel], m2[sel]
    s2 = mm / (nn - 1.0)
    theta = yb + 0.5 * s2
    se = np.sqrt(s2 / nn + s2 * s2 / (2.0 * (nn - 1.0)))

    def f(t0: np.ndarray, n_: np.ndarray, y_: np.ndarray, m_: np.ndarray, target: np.ndarray) -> np.ndarray:
        return _land_cdf(t0, n_, y_, m_) - target

    for p, out in (((1.0 + cl) / 2.0, low), ((1.0 - cl) / 2.0, high)):
        target = np.full(sel.size, p)
        z = float(special.ndtri(p))
        guess = theta - z * se  # Cox-type start; the bracket grows until it holds the root
        step = 2.0 * se + 1e-3 * (np.abs(theta) + 1.0)
        lo, hi = guess - step, guess + step
        bad_lo = ~(f(lo, nn, yb, mm, target) >= 0)  # F decreases in θ₀
        bad_hi = ~(f(hi, nn, yb, mm, target) <= 0)
        for _ in range(200):  # widen only the ends that do not bracket yet, all groups together
            if not (bad_lo.any() or bad_hi.any()):
                break
            step = np.where(bad_lo | bad_hi, 2.0 * step, step)
            i = np.flatnonzero(bad_lo)
            lo[i] -= step[i]
            bad_lo[i] = ~(f(lo[i], nn[i], yb[i], mm[i], target[i]) >= 0)
            i = np.flatnonzero(bad_hi)
            hi[i] += step[i]
            bad_hi[i] = ~(f(hi[i], nn[i], yb[i], mm[i], target[i]) <= 0)
        res = elementwise.find_root(f, (lo, hi), args=(nn, yb, mm, target), tolerances=_LAND_TOL)
        out[sel] = np.where(res.success, res.x, np.nan)
    return low, high


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
        # resamples in batches, so that one large group also stays within _DRAW_BUDGET numbers; the
        # uniform draws come in the same order as one (B, rows) call, so results do not depend on it
        per_batch = max(1, _DRAW_BUDGET // max(rows.size, 1))
        s1 = np.empty((B, g.size))
        s2 = np.empty((B, g.size))
        for r0 in range(0, B, per_batch):
            r1 = min(B, r0 + per_batch)
            pick = col_start + np.minimum((rng.random((r1 - r0, rows.size)) * col_n).astype(np.intp),
                                          col_n - 1)
            dd = dloc[pick]
            s1[r0:r1] = np.add.reduceat(dd, loc_starts, axis=1)
            s2[r0:r1] = np.add.reduceat(dd * dd, loc_starts, axis=1)
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
