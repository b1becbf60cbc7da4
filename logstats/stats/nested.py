"""Variance components of the logs for nested (hierarchical) designs, and power for planning them.

Cells within wells within days: :func:`variance_components` splits the variance of the natural logs of
each group into one component per nesting level plus the within-innermost level, with ANOVA (method of
moments) estimators that are valid for unbalanced nesting, computed for all groups at once.
:func:`plan_power` gives the power of a two-sample comparison at the replicate level for a grid of
(replicates, values per replicate).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy import stats

from logstats.core.groups import occurring_keys, unique_rows
from logstats.core.transform import check_nonpositive, to_logs
from logstats.stats._common import _count, _group_codes, _values_1d
from logstats.stats.estimate import _check_level

__all__ = ["plan_power", "variance_components"]

_COUNT_KEYS = ("n", "n_missing", "n_nonpositive", "n_unlabelled")


def _check_names(names: Any, nlevels: int) -> list[str]:
    if isinstance(names, str):
        names = [names]
    try:
        out = list(names)
    except TypeError:
        raise TypeError(f"names must be a sequence of level names (strings); got {names!r}") from None
    if len(out) != nlevels:
        raise ValueError(f"names has {len(out)} entries but nested_codes has {nlevels} level(s)")
    for nm in out:
        if not isinstance(nm, str) or not nm:
            raise TypeError(f"names must be non-empty strings; got {nm!r}")
    if len(set(out)) != len(out):
        raise ValueError(f"names must be distinct; got {out!r}")
    if "within" in out:
        raise ValueError("names may not contain 'within': that name is kept for the innermost level")
    return out


def _nested_codes(nested_codes: Any, size: int) -> list[np.ndarray]:
    if isinstance(nested_codes, np.ndarray) and nested_codes.ndim == 1:
        nested_codes = [nested_codes]
    try:
        levels = list(nested_codes)
    except TypeError:
        raise TypeError("nested_codes must be a sequence of 1-D integer arrays, outermost first") from None
    if not levels:
        raise ValueError("nested_codes is empty; give at least one nesting level (e.g. the well)")
    out = []
    for i, c in enumerate(levels):
        a = np.asarray(c)
        if a.size and a.dtype.kind not in "iu":
            raise TypeError(f"nested_codes[{i}] must hold integers (unit codes); got dtype {a.dtype}")
        a = a.astype(np.int64, copy=False)
        if a.shape != (size,):
            raise ValueError(f"nested_codes[{i}] has shape {a.shape}; expected ({size},) to match values")
        out.append(a)
    return out


def _refine(parent: np.ndarray, child: np.ndarray, nparent: int) -> tuple[np.ndarray, int]:
    """Codes ``0 .. N-1`` of the distinct (parent, child) pairs: a child label is read within its parent."""
    if parent.size == 0:
        return np.zeros(0, dtype=np.intp), 0
    width = int(child.max()) + 1
    if nparent * width < 2**62:
        key = parent.astype(np.int64) * width + child
        _, inv = occurring_keys(key, nparent * width)
    else:  # codes too large to pack into one int64 key
        _, inv = np.unique(np.stack([parent, child], axis=1), axis=0, return_inverse=True)
    inv = inv.reshape(-1).astype(np.intp)
    return inv, int(inv.max()) + 1


def _mls_bounds(s1: np.ndarray, df1: np.ndarray, s2: np.ndarray, df2: np.ndarray, c: np.ndarray,
                alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """Modified large-sample interval for ``theta = c (S1 - S2)`` (Ting et al. 1990; Graybill & Wang 1980).

    ``S1``, ``S2`` are independent mean squares, ``S_i df_i / E(S_i)`` chi-squared on ``df_i``; each
    tail has probability ``alpha``. ``F_{d: a, b}`` below is the upper-``d`` point of the F distribution.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        f_a1 = stats.chi2.isf(alpha, df1) / df1  # F_{alpha: df1, inf}
        f_b1 = stats.chi2.ppf(alpha, df1) / df1  # F_{1-alpha: df1, inf}
        f_a2 = stats.chi2.isf(alpha, df2) / df2
        f_b2 = stats.chi2.ppf(alpha, df2) / df2
        f_a12 = stats.f.isf(alpha, df1, df2)  # F_{alpha: df1, df2}
        f_b12 = stats.f.ppf(alpha, df1, df2)  # F_{1-alpha: df1, df2}
        g1, h1 = 1.0 - 1.0 / f_a1, 1.0 / f_b1 - 1.0
        g2, h2 = 1.0 - 1.0 / f_a2, 1.0 / f_b2 - 1.0
        g12 = ((f_a12 - 1.0) ** 2 - g1**2 * f_a12**2 - h2**2) / f_a12
        h12 = ((1.0 - f_b12) ** 2 - h1**2 * f_b12**2 - g2**2) / f_b12
        only1 = s2 <= 0  # no second mean square: the chi-squared interval of S1 alone
        vl = g1**2 * s1**2 + np.where(only1, 0.0, h2**2 * s2**2 + g12 * s1 * s2)
        vu = h1**2 * s1**2 + np.where(only1, 0.0, g2**2 * s2**2 + h12 * s1 * s2)
        s2c = np.where(only1, 0.0, s2)
        low = c * (s1 - s2c - np.sqrt(np.maximum(vl, 0.0)))
        high = c * (s1 - s2c + np.sqrt(np.maximum(vu, 0.0)))
    return np.maximum(low, 0.0), np.maximum(high, 0.0)


def variance_components(
    values: Any,
    codes: Any,
    ngroups: int,
    nested_codes: Sequence[Any],
    *,
    names: Sequence[str],
    skipna: bool = True,
    nonpositive: str = "drop",
    confidence_level: float = 0.95,
) -> dict[str, np.ndarray]:
    r"""Variance components of the natural logs per group for a nested design, balanced or not.

    The model for the log ``y`` of a value in group ``g`` is the random nested classification
    ``y = mu_g + a_1 + a_2 + ... + a_L + e``: one random effect per nesting level (outermost first,
    e.g. day, then well) and ``e`` within the innermost unit (cells within a well), all independent with
    variances ``var_1 .. var_L`` and ``var_within``. The components are estimated per group by the
    analysis-of-variance (method of moments) estimators of the unbalanced nested classification.

    Parameters
    ----------
    values : array_like, 1-D
        Raw (linear-scale) values; the components are of their natural logs. NaN is missing; ``+inf``
        is refused.
    codes : array_like of int, 1-D
        Group of each row (``0 .. ngroups-1``; negative = no group, the row is ignored and not counted).
    ngroups : int
        Number of groups.
    nested_codes : sequence of 1-D int arrays
        One array per nesting level, outermost first, each the unit of each row at that level
        (non-negative integers; negative = missing label). A code is read within its outer units and
        within its group, so equal codes under different outer units are different units.
    names : sequence of str
        The level names, outermost first (used in the result keys; ``"within"`` is reserved).
    skipna : bool
        Missing values are skipped and counted in ``n_missing``; ``False`` makes the results of a group
        with missing values NaN (counts are kept).
    nonpositive : {"drop", "nan", "raise"}
        ``"drop"`` excludes values ``<= 0`` and counts them in ``n_nonpositive``; ``"nan"`` makes the
        group's results NaN; ``"raise"`` is the caller's job (it knows the labels) and acts as ``"drop"``.
    confidence_level : float
        Confidence level of the intervals (two-sided, equal tails).

    Returns
    -------
    dict of str to ndarray, each of shape ``(ngroups,)``
        For each level name ``L`` and for ``within``:

        ``var_L``
            ANOVA estimate of the variance of the logs due to level ``L`` (truncated at 0).
        ``gsd_L``
            ``exp(sqrt(var_L))``, the component as a geometric standard deviation (×/÷ factor).
        ``frac_L``
            ``var_L`` / total variance (sum of all components): the intraclass correlation of the
            level. NaN when the total is 0.
        ``n_L`` (int)
            Number of units at level ``L`` (``n_within`` is not given: it is ``n``).
        ``var_L_ci_low``, ``var_L_ci_high``
            Confidence interval of the component (see Notes), clipped at 0.

        And:

        ``n``, ``n_missing``, ``n_nonpositive``, ``n_unlabelled`` (int)
            Values used; values skipped as missing; values skipped as ``<= 0``; valid values skipped
            because a nesting label is missing. Every row of a group is in exactly one of these.
        ``n_truncated`` (int)
            Number of components whose ANOVA estimate was negative and set to 0.
        ``design_effect``
            ``1 + sum_L (m_L - 1) frac_L`` with ``m_L = sum_u n_u**2 / n`` over the units ``u`` of level
            ``L`` (see Notes); for one level, ``1 + (m - 1) ICC``.
        ``n_effective``
            ``n / design_effect``.

    Notes
    -----
    *Estimator.* With ``T_l = sum_u n_u ybar_u**2`` over the units of level ``l`` (level 0 the whole
    group, level ``L+1`` the single values), the sums of squares are ``SS_l = T_l - T_{l-1}`` (computed
    as ``sum_u n_u (ybar_u - ybar_parent(u))**2``, free of cancellation) on ``N_l - N_{l-1}`` degrees of
    freedom. Their expectations in the unbalanced random model are
    ``E(SS_l) = sum_{j>=l} (K_{l,j} - K_{l-1,j}) var_j + (N_l - N_{l-1}) var_within`` with
    ``K_{l,j} = sum_{u in level l} (sum_{v in u at level j} n_v**2) / n_u`` (Searle, Casella &
    McCulloch 1992, ch. 4 for balanced and ch. 5 for unbalanced nested classifications, from memory of
    the section layout; the coefficients of Sokal & Rohlf's
    unequal-sample-size nested ANOVA are the same numbers divided by the degrees of freedom). The
    triangular system of expected mean squares is solved from the inside out; estimates below zero
    are then set to 0 and counted in ``n_truncated`` (the other components are not re-estimated).
    For balanced data these are the usual balanced ANOVA estimators, which equal REML whenever none is
    negative. A level whose degrees of freedom are 0 in a group (e.g. one well per day everywhere) is
    not estimable there: that component and those outside it are NaN. All sums are ``np.bincount`` over
    the rows, for all groups together; logs are centred on their group mean first.

    *Intervals.* ``var_within``: the exact chi-squared interval ``SS_w / chi2`` on ``n - N_L`` degrees of
    freedom. A nesting level: the estimate is ``(MS_l - M_l') / k_l`` with ``M_l'`` the synthesised mean
    square (a linear combination of the inner mean squares with the expectation of the rest of
    ``E(MS_l)``); the interval is the modified large-sample (MLS) interval for a difference of two mean
    squares (Graybill & Wang 1980; Ting, Burdick, Graybill, Jeyaratnam & Lu 1990), with Satterthwaite's
    (1946) degrees of freedom for ``M_l'``. For balanced designs ``M_l'`` is the next inner mean square
    and this is the standard MLS interval of Burdick & Graybill (1992; balanced nested designs,
    chapter from memory); for unbalanced designs
    the mean squares are only approximately scaled chi-squared and the interval is approximate (the
    tests measure its coverage by simulation). Both bounds are clipped at 0.

    *Design effect.* For the mean of all ``n`` logs of a group the model gives
    ``Var(ybar) = (sum_L m_L var_L + var_within) / n``, so ``n Var(ybar) / total`` is
    ``1 + sum_L (m_L - 1) frac_L`` with the size-weighted mean cluster size ``m_L = sum_u n_u**2 / n``
    (Kish 1965, the design effect of cluster sampling, ``1 + (m - 1) rho``; with unequal clusters the
    weighted ``m`` makes it exact for the unweighted mean, common practice). For balanced data ``m_L``
    is the number of values per unit. It uses the truncated components.

    References
    ----------
    Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components. Wiley, ch. 4-5.
    Sokal, R. R. & Rohlf, F. J. (1995). Biometry, 3rd ed. Freeman, ch. 10 (nested anova, unequal n).
    Satterthwaite, F. E. (1946). An approximate distribution of estimates of variance components.
    Biometrics Bulletin 2:110-114.
    Graybill, F. A. & Wang, C.-M. (1980). Confidence intervals on nonnegative linear combinations of
    variances. JASA 75:869-873.
    Ting, N., Burdick, R. K., Graybill, F. A., Jeyaratnam, S. & Lu, T.-F. C. (1990). Confidence
    intervals on linear combinations of variance components that are unrestricted in sign. J. Statist.
    Comput. Simul. 35:135-143.
    Burdick, R. K. & Graybill, F. A. (1992). Confidence Intervals on Variance Components. Dekker.
    Kish, L. (1965). Survey Sampling. Wiley, section 5.4.

    Examples
    --------
    Invented data: 4 wells of 3 cells in one group, the wells differing by a factor:

    >>> import numpy as np
    >>> x = np.exp([0.0, 0.1, -0.1, 1.0, 1.1, 0.9, 0.5, 0.6, 0.4, -0.5, -0.4, -0.6])
    >>> well = np.repeat([0, 1, 2, 3], 3)
    >>> out = variance_components(x, np.zeros(12, dtype=int), 1, [well], names=["well"])
    >>> np.round(out["var_well"], 4), np.round(out["var_within"], 4), out["n_well"]
    (array([0.4133]), array([0.01]), array([4]))
    """
    check_nonpositive(nonpositive)
    cl = _check_level(confidence_level)
    x = _values_1d(values)
    codes, G = _group_codes(codes, x.size, ngroups)
    levels = _nested_codes(nested_codes, x.size)
    names = _check_names(names, len(levels))
    L = len(levels)
    lv = to_logs(x, where="values")
    grouped = codes >= 0
    labelled = np.ones(x.size, dtype=bool)
    for c in levels:
        labelled &= c >= 0
    valid = lv.valid & grouped
    n_missing = _count(lv.missing, codes, G)
    n_nonpos = _count(lv.nonpositive, codes, G)
    n_unlab = _count(lv.valid & ~labelled, codes, G)
    use = np.flatnonzero(valid & labelled)
    g = codes[use]
    y = lv.y[use]
    n = np.bincount(g, minlength=G).astype(np.int64)
    nf = n.astype(np.float64)

    with np.errstate(divide="ignore", invalid="ignore"):
        # centre on the group mean (two passes: the second removes the rounding of the first)
        m0 = np.bincount(g, y, minlength=G) / nf
        yc = y - m0[g]
        yc -= (np.bincount(g, yc, minlength=G) / nf)[g]
        # units of every level: ids, their sizes, means, parent unit and group
        unit = [g.astype(np.intp)]
        nunits = [G]
        for c in levels:
            u, nu = _refine(unit[-1], c[use], nunits[-1])
            unit.append(u)
            nunits.append(nu)
        size = [np.bincount(u, minlength=nu).astype(np.float64) for u, nu in zip(unit, nunits)]
        mean = [np.bincount(u, yc, minlength=nu) / s for u, nu, s in zip(unit, nunits, size)]
        group_of: list[np.ndarray] = [np.arange(G)]
        parent: list[np.ndarray] = [np.arange(G)]
        for lev in range(1, L + 1):
            gof = np.zeros(nunits[lev], dtype=np.intp)
            gof[unit[lev]] = g
            par = np.zeros(nunits[lev], dtype=np.intp)
            par[unit[lev]] = unit[lev - 1]
            group_of.append(gof)
            parent.append(par)
        count = [np.where(n > 0, 1, 0).astype(np.float64)]
        count += [np.bincount(group_of[lev], minlength=G).astype(np.float64) for lev in range(1, L + 1)]
        count.append(nf)  # level L+1: the single values

        # sums of squares and degrees of freedom, levels 1..L+1 (index L+1 = within)
        ss: list[np.ndarray] = [np.zeros(G)]
        for lev in range(1, L + 1):
            dev = mean[lev] - mean[lev - 1][parent[lev]]
            ss.append(np.bincount(group_of[lev], size[lev] * dev**2, minlength=G))
        ss.append(np.bincount(g, (yc - mean[L][unit[L]]) ** 2, minlength=G))
        df = [np.zeros(G)] + [count[lev] - count[lev - 1] for lev in range(1, L + 2)]  # [0] unused
        ms = [np.where(df[lev] > 0, ss[lev] / df[lev], np.nan) for lev in range(L + 2)]

        # K[l][j] = sum over units u of level l of (sum of n_v**2 over units v of level j inside u) / n_u
        K: dict[tuple[int, int], np.ndarray] = {}
        for j in range(1, L + 1):
            sq = size[j] ** 2
            for lev in range(0, j):
                anc = np.zeros(nunits[j], dtype=np.intp)
                anc[unit[j]] = unit[lev]
                s = np.bincount(anc, sq, minlength=nunits[lev])
                K[lev, j] = np.bincount(group_of[lev], s / np.where(size[lev] > 0, size[lev], 1.0),
                                        minlength=G)
            K[j, j] = nf
        # coefficients of E(MS_l): k[l][j] for j >= l (var_within has coefficient 1)
        k = {(lev, j): (K[lev, j] - K[lev - 1, j]) / df[lev]
             for j in range(1, L + 1) for lev in range(1, j + 1)}

        # solve from the inside out; coef[l] = the estimate as a combination of MS_l .. MS_within
        nms = L + 2
        coef: dict[int, np.ndarray] = {}
        e_w = np.zeros((nms, G))
        e_w[L + 1] = 1.0
        coef[L + 1] = e_w
        raw: dict[int, np.ndarray] = {L + 1: ms[L + 1]}
        for lev in range(L, 0, -1):
            c = np.zeros((nms, G))
            c[lev] = 1.0
            c -= coef[L + 1]
            for j in range(lev + 1, L + 1):
                c -= k[lev, j] * coef[j]
            c /= k[lev, lev]
            coef[lev] = c
            raw[lev] = np.nansum(c[lev:] * np.stack(ms[lev:]), axis=0)
            raw[lev] = np.where(np.isnan(c[lev:]).any(axis=0) | np.isnan(np.stack(ms[lev:])).any(axis=0),
                                np.nan, raw[lev])
        est = {lev: np.maximum(raw[lev], 0.0) for lev in raw}  # NaN stays NaN
        n_trunc = np.sum([raw[lev] < 0 for lev in range(1, L + 1)], axis=0).astype(np.int64)
        total = sum(est[lev] for lev in range(1, L + 2))
        frac = {lev: np.where(total > 0, est[lev] / total, np.nan) for lev in est}

        # intervals
        alpha = (1.0 - cl) / 2.0
        lo_w = ss[L + 1] / stats.chi2.isf(alpha, df[L + 1])
        hi_w = ss[L + 1] / stats.chi2.ppf(alpha, df[L + 1])
        ci = {L + 1: (np.where(df[L + 1] > 0, lo_w, np.nan), np.where(df[L + 1] > 0, hi_w, np.nan))}
        msa = np.stack(ms)
        dfa = np.stack(df)
        for lev in range(1, L + 1):
            kl = k[lev, lev]
            # the rest of E(MS_l), synthesised from the inner mean squares: M' = MS_l - k_l * estimate
            w = -kl * coef[lev][lev + 1:]
            terms = w * msa[lev + 1:]
            synth = terms.sum(axis=0)
            nu = synth**2 / np.sum(terms**2 / dfa[lev + 1:], axis=0)  # Satterthwaite (1946)
            low, high = _mls_bounds(ms[lev], df[lev], synth, nu, 1.0 / kl, alpha)
            bad = np.isnan(raw[lev])
            ci[lev] = (np.where(bad, np.nan, low), np.where(bad, np.nan, high))

        m_tilde = {j: K[0, j] for j in range(1, L + 1)}  # sum_v n_v**2 / n
        deff = 1.0 + sum((m_tilde[j] - 1.0) * frac[j] for j in range(1, L + 1))
        n_eff = nf / deff

    out: dict[str, np.ndarray] = {}
    keys = [*names, "within"]
    for lev, nm in enumerate(keys, start=1):
        out[f"var_{nm}"] = est[lev]
        with np.errstate(over="ignore"):
            out[f"gsd_{nm}"] = np.exp(np.sqrt(est[lev]))
        out[f"frac_{nm}"] = frac[lev]
        if lev <= L:
            out[f"n_{nm}"] = count[lev].astype(np.int64)
        out[f"var_{nm}_ci_low"], out[f"var_{nm}_ci_high"] = ci[lev]
    out["n"] = n
    out["n_missing"] = n_missing
    out["n_nonpositive"] = n_nonpos
    out["n_unlabelled"] = n_unlab
    out["n_truncated"] = n_trunc
    out["design_effect"] = np.where(n > 0, deff, np.nan)
    out["n_effective"] = np.where(n > 0, n_eff, np.nan)

    poisoned = np.zeros(G, dtype=bool)
    if not skipna:
        poisoned |= n_missing > 0
    if nonpositive == "nan":
        poisoned |= n_nonpos > 0
    if poisoned.any():
        for key, arr in out.items():
            if key in _COUNT_KEYS or (key.startswith("n_") and key[2:] in names):
                continue
            if key == "n_truncated":
                out[key] = np.where(poisoned, 0, arr)
            else:
                out[key] = np.where(poisoned, np.nan, arr)
    return out


def plan_power(
    ratio: float,
    var_between: float,
    var_within: float,
    replicates: Any,
    per_replicate: Any,
    alpha: float = 0.05,
) -> np.ndarray:
    r"""Power of the two-sided two-sample t test on replicate means of the logs.

    Each of two conditions has ``k`` replicates (wells, days, animals) of ``m`` values each; the test
    compares the mean logs of the replicates, so each replicate mean has variance
    ``v = var_between + var_within / m`` (natural logs) and the test has ``2 (k - 1)`` degrees of freedom.

    Parameters
    ----------
    ratio : float
        True ratio of geometric means to detect (``> 0``, ``!= 1``).
    var_between, var_within : float
        Variance of the natural logs between replicates and within a replicate (``>= 0``, not both 0).
    replicates, per_replicate : array_like of int
        ``k >= 2`` and ``m >= 1``; broadcast against each other (e.g. ``k[:, None]`` and ``m[None, :]``
        for a grid).
    alpha : float
        Two-sided significance level.

    Returns
    -------
    ndarray
        ``P(|T| > t_{1-alpha/2, df})`` with ``T`` non-central t on ``df = 2 (k - 1)`` and
        non-centrality ``ln(ratio) / sqrt(2 v / k)``: both rejection regions are counted (exact power of
        the equal-variance two-sample t test under normality of the replicate mean logs).

    Notes
    -----
    The non-central t power of the two-sample t test is textbook (e.g. Cohen 1988, ch. 2; it is what
    ``statsmodels.stats.power.TTestIndPower`` computes). A design with ``v = 0`` (no spread at all)
    has power 1.

    Planning for clinical or regulatory studies needs review by a qualified statistician, validated
    tools, and the applicable local rules; this function is an aid for laboratory planning.

    References
    ----------
    Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed. Erlbaum, ch. 2.

    Examples
    --------
    >>> import numpy as np
    >>> np.round(plan_power(1.5, 0.02, 0.3, np.array([3, 6]), np.array([20, 20])), 4)
    array([0.5219, 0.9215])
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        k = np.asarray(replicates, dtype=np.float64)
        m = np.asarray(per_replicate, dtype=np.float64)
        v = var_between + var_within / m
        dfree = 2.0 * (k - 1.0)
        nc = np.log(ratio) / np.sqrt(2.0 * v / k)
        tcrit = stats.t.isf(alpha / 2.0, dfree)
        power = stats.nct.sf(tcrit, dfree, nc) + stats.nct.cdf(-tcrit, dfree, nc)
        power = np.where(np.isinf(nc), 1.0, power)
    return np.clip(power, 0.0, 1.0)


def _reference_column(v: np.ndarray, reference: int) -> np.ndarray:
    return np.repeat(v[:, [reference]], v.shape[1], axis=1)


def nested_fold_change(values: Any, level_codes: Any, n_levels: int, reference: int, *,
                       nested_codes: Sequence[Any], names: Sequence[str], stratum_codes: Any = None,
                       n_strata: int = 1, nonpositive: str = "drop", skipna: bool = True,
                       where: str = "the input", **test: Any) -> dict[str, np.ndarray]:
    """Fold changes with nested replicates (cells in wells in days): the logs are averaged up the
    nesting (cells to wells, wells to days) and the outermost unit is the replicate of the test.

    ``nested_codes`` holds one code array per level, outermost first; the outermost code is the label
    shared across levels (what ``paired=True`` pairs); every inner level is read within its outer units
    and within the level and stratum. Each unit counts once whatever its number of values (Lord et al.
    2020). The test is :func:`logstats.stats.compare.fold_change_codes` on the units just inside the
    outermost, with the outermost as ``replicate_codes`` (``test`` holds its options). Arrays of shape
    ``(n_strata, n_levels)``: its fields, plus ``n_cells`` (values), ``n_<inner>`` for each inner level
    and the ``_reference`` counts; ``nonpositive="raise"`` is the caller's (it acts as ``"drop"``).
    """
    from logstats.core.moments import log_moments_by_codes
    from logstats.stats.compare import fold_change_codes

    check_nonpositive(nonpositive)
    lv = to_logs(values, where=where)
    N = lv.y.shape[0]
    lc = np.asarray(level_codes, dtype=np.int64)
    sc = np.zeros(N, dtype=np.int64) if stratum_codes is None else np.asarray(stratum_codes, dtype=np.int64)
    S, L = int(n_strata), int(n_levels)
    SL = S * L
    keyed = (lc >= 0) & (sc >= 0)
    cell = np.where(keyed, sc * L + lc, -1)
    n_missing = np.bincount(cell[keyed & lv.missing], minlength=SL).astype(np.int64)
    n_nonpos = np.bincount(cell[keyed & lv.nonpositive], minlength=SL).astype(np.int64)
    labelled = np.ones(N, dtype=bool)
    for c in nested_codes:
        labelled &= np.asarray(c) >= 0
    n_no_rep = np.bincount(cell[keyed & ~labelled], minlength=SL).astype(np.int64)
    use = keyed & labelled & lv.valid
    outer = np.asarray(nested_codes[0], dtype=np.int64)
    path = np.stack([cell] + [np.asarray(c, dtype=np.int64) for c in nested_codes], axis=1)[use]
    unit_y = lv.y[use]
    counts: dict[str, np.ndarray] = {}
    for depth in range(len(nested_codes) - 1, 0, -1):  # deepest level first, up to just inside the top
        uniq, codes = unique_rows(path[:, : depth + 2])
        unit_y = np.asarray(log_moments_by_codes(unit_y, codes.ravel(), len(uniq)).mean_log)
        counts[f"n_{names[depth]}"] = np.bincount(uniq[:, 0], minlength=SL).astype(np.int64)
        path = uniq[:, : depth + 1]
    unit_cell, unit_outer = path[:, 0], path[:, 1]
    with np.errstate(over="ignore"):
        unit_values = np.exp(unit_y)
    res = fold_change_codes(unit_values, (unit_cell % L).astype(np.intp), L, reference,
                            stratum_codes=(unit_cell // L).astype(np.intp), n_strata=S,
                            replicate_codes=unit_outer.astype(np.intp),
                            n_replicates=int(outer.max(initial=-1)) + 1, where=where, **test)
    shape = (S, L)
    bad = np.zeros(shape, dtype=bool)
    if not skipna:
        bad |= n_missing.reshape(shape) > 0
    if nonpositive == "nan":
        bad |= n_nonpos.reshape(shape) > 0
    bad = bad | bad[:, [reference]]
    for k, v in res.items():
        if np.asarray(v).dtype.kind == "f" and not k.startswith("n_"):
            res[k] = np.where(bad, np.nan, v)
    res["n_cells"] = np.bincount(cell[use], minlength=SL).astype(np.int64).reshape(shape)
    res["n_cells_reference"] = _reference_column(res["n_cells"], reference)
    for k, v in counts.items():
        res[k] = v.reshape(shape)
        res[f"{k}_reference"] = _reference_column(res[k], reference)
    res["n_missing"] = n_missing.reshape(shape)
    res["n_nonpositive"] = n_nonpos.reshape(shape)
    res["n_missing_reference"] = _reference_column(res["n_missing"], reference)
    res["n_nonpositive_reference"] = _reference_column(res["n_nonpositive"], reference)
    res["n_no_replicate"] = n_no_rep.reshape(shape)
    return res
