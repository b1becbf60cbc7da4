"""Point estimates and intervals that depend only on the log-moments.

Every function here takes a :class:`~logstats.core.moments.LogMoments` (arrays of any shape) and
returns float64 arrays of that shape. Undefined results (``n`` too small) are NaN, never an error.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import stats

from logstats.core.moments import LogMoments
from logstats.core.transform import as_float_array, to_logs
from logstats.stats._common import padded_blocks

__all__ = [
    "ci_gmean",
    "dispersion_interval",
    "gcv",
    "gmean",
    "gsd",
    "linear_fields",
    "prediction_interval",
    "sd_log",
    "summary_fields",
    "t_quantile",
]


def _exp(a: np.ndarray) -> np.ndarray:
    """exp without RuntimeWarnings: a bound beyond the float range is honestly inf (or 0)."""
    with np.errstate(over="ignore", under="ignore"):
        return np.exp(a)


def _check_level(confidence_level: float) -> float:
    cl = float(confidence_level)
    if not 0.0 < cl < 1.0:
        raise ValueError(f"confidence_level={confidence_level!r} must lie strictly between 0 and 1")
    return cl


def t_quantile(confidence_level: float, df: np.ndarray) -> np.ndarray:
    """Two-sided Student t quantile ``t(1 − α/2, df)``; NaN where ``df <= 0``."""
    cl = _check_level(confidence_level)
    df = np.asarray(df, dtype=np.float64)
    out = np.full(df.shape, np.nan)
    ok = df > 0
    if ok.any():
        # groups share few distinct sizes: one scipy call per distinct df, not per group
        uniq, inv = np.unique(df[ok], return_inverse=True)
        out[ok] = stats.t.ppf(0.5 + cl / 2.0, uniq)[inv]
    return out


def gmean(m: LogMoments) -> np.ndarray:
    """Geometric mean ``exp(mean of ln x)``; NaN for an empty group."""
    return _exp(np.asarray(m.mean_log, dtype=np.float64))


def sd_log(m: LogMoments, ddof: float = 1) -> np.ndarray:
    """Standard deviation of the natural logs with ``n − ddof`` in the denominator (default ddof=1)."""
    return np.sqrt(m.var_log(ddof))


def gsd(m: LogMoments, ddof: float = 1) -> np.ndarray:
    """Geometric standard deviation ``exp(s)``, s the SD of ln x with ``ddof=1`` by default.

    Dimensionless and at least 1. NaN where ``n <= ddof``.
    """
    return _exp(sd_log(m, ddof))


def gcv(m: LogMoments, ddof: float = 1) -> np.ndarray:
    """Geometric coefficient of variation ``sqrt(exp(s²) − 1)`` (Kirkwood 1979), ``ddof=1`` by default.

    ``expm1`` keeps it accurate for small s, where it approaches s itself.
    """
    with np.errstate(over="ignore"):
        return np.sqrt(np.expm1(m.var_log(ddof)))


def ci_gmean(m: LogMoments, confidence_level: float = 0.95) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """t-based confidence interval of the geometric mean: ``exp(ȳ ± t(1−α/2, n−1)·s/√n)``.

    Returns ``(low, high, factor)`` where ``factor`` is the multiplicative half-width, so the interval
    is ``gmean ×/÷ factor``. It is ``scipy.stats.ttest_1samp(ln x, 0).confidence_interval()``
    back-transformed. NaN for fewer than two values.
    """
    n = np.asarray(m.n, dtype=np.float64)
    half = t_quantile(confidence_level, n - 1) * sd_log(m, 1) / np.sqrt(np.where(n > 0, n, np.nan))
    mu = np.asarray(m.mean_log, dtype=np.float64)
    return _exp(mu - half), _exp(mu + half), _exp(half)


def dispersion_interval(m: LogMoments, z: float = 1.0, ddof: float = 1) -> tuple[np.ndarray, np.ndarray]:
    """``gmean ×/÷ gsd**z``: covers Φ(z) − Φ(−z) of a log-normal population (68.3 % at z=1, 95.4 % at 2).

    Limpert, Stahel & Abbt (2001), BioScience 51:341-352.
    """
    mu = np.asarray(m.mean_log, dtype=np.float64)
    half = float(z) * sd_log(m, ddof)
    return _exp(mu - half), _exp(mu + half)


def prediction_interval(m: LogMoments, confidence_level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Interval for one new value: ``exp(ȳ ± t(1−α/2, n−1)·s·sqrt(1 + 1/n))`` (normal theory on logs)."""
    n = np.asarray(m.n, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        half = t_quantile(confidence_level, n - 1) * sd_log(m, 1) * np.sqrt(1.0 + 1.0 / n)
    mu = np.asarray(m.mean_log, dtype=np.float64)
    return _exp(mu - half), _exp(mu + half)


def summary_fields(m: LogMoments, confidence_level: float = 0.95, ddof: float = 1) -> dict[str, np.ndarray]:
    """The columns of ``summary()`` that follow from the moments, in their documented order."""
    low, high, factor = ci_gmean(m, confidence_level)
    return {
        "n": np.asarray(m.n),
        "n_missing": np.asarray(m.n_missing),
        "n_nonpositive": np.asarray(m.n_nonpositive),
        "gmean": gmean(m),
        "gsd": gsd(m, ddof),
        "gcv": gcv(m, ddof),
        "ci_low": low,
        "ci_high": high,
        "ci_factor": factor,
    }


def linear_fields(values: np.ndarray, codes: np.ndarray, ngroups: int, *, ddof: float = 1,
                  skipna: bool = True, nonpositive: str = "drop", where: str = "the input",
                  labels: Any = None) -> dict[str, np.ndarray]:
    """Linear-scale ``median``, ``mean`` and ``sd`` (``ddof``, default 1) of the values the log
    statistics use (positive, finite), per group.

    Vectorised: each group's values are a row of a padded block (:func:`padded_blocks`, centred),
    and one ``np.partition`` of the block gives every group's median (no sort); mean and SD are taken
    on values scaled by their group's maximum, so inputs near 1e300 do not overflow.
    """
    x = as_float_array(values, where=where)
    c = np.asarray(codes)
    if np.isfinite(x).all() and bool((x > 0).all()):  # what the engine passes: every value usable
        missing = nonpositive_rows = None
        keep = c >= 0
        xs, cs = (x, c) if keep.all() else (x[keep], c[keep])
    else:
        lv = to_logs(x, where=where)
        missing, nonpositive_rows = lv.missing, lv.nonpositive
        keep = lv.valid & (c >= 0)
        xs, cs = x[keep], c[keep]
    median = np.full(ngroups, np.nan)
    mean = np.full(ngroups, np.nan)
    sd = np.full(ngroups, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        for groups, sizes, block, inside, _ in padded_blocks(xs, cs, ngroups, centred=True):
            scale = np.max(block, axis=1, where=inside, initial=-np.inf)  # the group's largest value
            nf = sizes.astype(np.float64)
            z = block / scale[:, None]  # <= 1: no overflow near 1e300; +-inf in the padding
            mz = z.sum(axis=1, where=inside) / nf
            z -= mz[:, None]
            corr = z.sum(axis=1, where=inside)  # the correction term of the two-pass algorithm
            np.square(z, out=z)
            ssz = z.sum(axis=1, where=inside) - corr * corr / nf
            mz = mz + corr / nf
            dof = nf - ddof
            sdz = np.where(dof > 0, np.sqrt(np.maximum(ssz, 0.0) / np.where(dof > 0, dof, 1.0)), np.nan)
            mean[groups] = mz * scale
            sd[groups] = sdz * scale
            mid = (block.shape[1] - 1) // 2  # every row's lower median sits in this column
            block.partition(mid, axis=1)
            low = block[:, mid]
            high = np.where(sizes % 2 == 0, np.min(block[:, mid + 1:], axis=1, initial=np.inf), low)
            median[groups] = 0.5 * low + 0.5 * high
    bad = np.zeros(ngroups, dtype=bool)
    if not skipna and missing is not None:
        bad |= np.bincount(c[missing & (c >= 0)], minlength=ngroups) > 0
    if nonpositive == "nan" and nonpositive_rows is not None:
        bad |= np.bincount(c[nonpositive_rows & (c >= 0)], minlength=ngroups) > 0
    out = {"median": median, "mean": mean, "sd": sd}
    return {k: np.where(bad, np.nan, v) for k, v in out.items()}
