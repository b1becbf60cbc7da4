"""Normality tests vectorised over groups: Shapiro-Wilk (Royston's AS R94) and D'Agostino-Pearson K².

Group rows arrive sorted by group (and by value within a group, for Shapiro-Wilk); every function
works on all groups at once.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from logstats.core.groups import GroupSums

__all__: list[str] = []

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
    summ2 = 2.0 * GroupSums(gs[lower], G).sum(m_row[lower] ** 2)
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
    sums = GroupSums(gs, G)
    with np.errstate(divide="ignore", invalid="ignore"):
        sa = sums.sum(coef) / nf
        asa = coef - sa[gs]
        xsx = (v - mean[gs]) / rng_[gs]
        ssa = sums.sum(asa * asa)
        ssx = sums.sum(xsx * xsx)
        sax = sums.sum(asa * xsx)
        ssassx = np.sqrt(ssa * ssx)
        return (ssassx - sax) * (ssassx + sax) / (ssa * ssx)


def _sw_pvalue(w1: np.ndarray, n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """W and its p-value from ``w1 = 1 − W`` (Royston 1995, AS R94; exact for n = 3)."""
    nf = n.astype(np.float64)
    w = 1.0 - w1
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # branches not taken may overflow
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
    sums = GroupSums(gs, G)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean0 = sums.sum(v) / nf
        d = v - mean0[gs]
        mean = mean0 + sums.sum(d) / nf
        d = v - mean[gs]
        d2 = d * d
        m2 = sums.sum(d2) / nf
        m3 = sums.sum(d2 * d) / nf
        m4 = sums.sum(d2 * d2) / nf
    return mean, m2, m3, m4


def _skew(mean: np.ndarray, m2: np.ndarray, m3: np.ndarray) -> np.ndarray:
    """Biased sample skewness ``m3/m2^1.5``; NaN for (numerically) constant data, as scipy.stats.skew."""
    with np.errstate(divide="ignore", invalid="ignore"):
        zero = m2 <= (np.finfo(np.float64).eps * mean) ** 2
        return np.where(zero, np.nan, m3 / m2**1.5)


