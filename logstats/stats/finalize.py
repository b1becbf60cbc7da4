"""Moment kernels: each maps :class:`~logstats.core.moments.LogMoments` to the result fields of one method.

These are the ``kernel`` entries of the moment-based declarations in :mod:`logstats.methods`. They see
moments to which the engine has already applied the bad-value policy (``mean_log`` is NaN wherever the
policy makes a group undefined) and return ``dict[str, ndarray]`` of the moments' shape. The formulas
live in :mod:`logstats.stats.estimate`, :mod:`logstats.stats.censored` and :mod:`logstats.stats.lnmean`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from logstats.core.moments import LogMoments, moments_by_codes
from logstats.stats import estimate

__all__ = ["closed_form_fields", "gcv_fields", "gmean_fields", "gsd_fields", "lognormal_mean_fields",
           "lognormal_mean_values", "moment_fields"]


def moment_fields(m: LogMoments) -> dict[str, np.ndarray]:
    return m.to_dict()


def gmean_fields(m: LogMoments) -> dict[str, np.ndarray]:
    return {"gmean": estimate.gmean(m)}


def gsd_fields(m: LogMoments, *, ddof: float = 1) -> dict[str, np.ndarray]:
    return {"gsd": estimate.gsd(m, ddof)}


def gcv_fields(m: LogMoments, *, ddof: float = 1) -> dict[str, np.ndarray]:
    return {"gcv": estimate.gcv(m, ddof)}


def closed_form_fields(m: LogMoments, *, max_iter: int = 100, tol: float = 1e-10) -> dict[str, np.ndarray]:
    """The uncensored log-normal MLE from the moments, in the fields of the censored fit.

    ``status`` is ``"closed_form"``, ``"degenerate"`` (all logs equal: the MLE does not exist, sigma 0
    and loglik +inf) or ``"empty"``; ``converged`` is True for a closed-form fit. ``max_iter`` and
    ``tol`` belong to the censored fit and have no effect here.
    """
    from logstats.stats.censored import closed_form_fit

    cf = closed_form_fit(m)
    n = np.asarray(m.n)
    mu, sigma, degenerate = cf["mu"], cf["sigma"], cf["degenerate"]
    empty = n == 0
    status = np.where(empty, "empty", np.where(degenerate, "degenerate", "closed_form")).astype(object)
    ok = ~empty & ~degenerate & np.isfinite(mu)
    sigma = np.where(degenerate, 0.0, sigma)
    with np.errstate(over="ignore"):
        return {
            "mu": mu,
            "sigma": sigma,
            "gmean": np.exp(mu),
            "gsd": np.exp(sigma),
            "n": n,
            "n_censored": np.asarray(m.n_censored),
            "loglik": np.where(degenerate, np.inf, cf["loglik"]),
            "converged": ok,
            "se_mu": np.where(ok, cf["se_mu"], np.nan),
            "se_sigma": np.where(ok, cf["se_sigma"], np.nan),
            "n_iter": np.zeros(n.shape, dtype=np.int64),
            "status": status,
        }


def lognormal_mean_fields(m: LogMoments, *, method: str = "cox", confidence_level: float = 0.95,
                          random_state: Any = None, n_draws: int = 10000) -> dict[str, np.ndarray]:
    """:func:`logstats.stats.lnmean.lognormal_mean` of the moments (every method but the bootstrap)."""
    from logstats.stats.lnmean import lognormal_mean

    res = lognormal_mean(m, method=method, confidence_level=confidence_level, random_state=random_state,
                         n_draws=n_draws)
    return {"estimate": res["estimate"], "ci_low": res["ci_low"], "ci_high": res["ci_high"],
            "method": res["method"], "n": np.asarray(m.n)}


def lognormal_mean_values(values: np.ndarray, codes: np.ndarray, ngroups: int, *, method: str = "bootstrap",
                          confidence_level: float = 0.95, random_state: Any = None,
                          n_draws: int = 10000) -> dict[str, np.ndarray]:
    """The log-normal mean of methods that need the values themselves (the BCa bootstrap)."""
    from logstats.stats.lnmean import lognormal_mean

    m = moments_by_codes(values, codes, ngroups)
    res = lognormal_mean(m, method=method, confidence_level=confidence_level, random_state=random_state,
                         n_draws=n_draws, values=values, codes=codes)
    return {"estimate": res["estimate"], "ci_low": res["ci_low"], "ci_high": res["ci_high"],
            "method": res["method"], "n": np.asarray(m.n)}


def censored_fit_fields(values: np.ndarray, codes: np.ndarray, ngroups: int, *, detection_limit: Any,
                        max_iter: int = 100, tol: float = 1e-10) -> dict[str, np.ndarray]:
    """The censored MLE (:func:`logstats.stats.censored.fit_lognormal`) with ``gmean`` = exp(mu) and
    ``gsd`` = exp(sigma) beside ``mu`` and ``sigma``."""
    from logstats.stats.censored import fit_lognormal

    res = dict(fit_lognormal(values, codes, ngroups, detection_limit=detection_limit, max_iter=max_iter,
                             tol=tol))
    with np.errstate(over="ignore", invalid="ignore"):
        res["gmean"] = np.exp(res["mu"])
        res["gsd"] = np.exp(res["sigma"])
    return res


def quantile_fields(m: LogMoments, *, q: float = 0.95,
                    confidence_level: float = 0.95) -> dict[str, np.ndarray]:
    from logstats.stats.tails import quantile

    return dict(quantile(m, q=q, confidence_level=confidence_level))


def tolerance_fields(m: LogMoments, *, coverage: float = 0.95, side: str = "upper",
                     confidence_level: float = 0.95) -> dict[str, np.ndarray]:
    from logstats.stats.tails import tolerance_limit

    return dict(tolerance_limit(m, coverage=coverage, confidence_level=confidence_level, side=side))


def _group_limit(limit: Any, values: np.ndarray, codes: np.ndarray, ngroups: int) -> np.ndarray:
    """One exceedance limit per group from a number or per-value limits (constant within a group)."""
    if limit is None:
        raise ValueError("exceedance() needs limit= (the limit in data units: a number, or a column / "
                         "variable holding one limit per group)")
    lim = np.broadcast_to(np.asarray(limit, dtype=np.float64), values.shape)
    if np.ndim(limit) == 0:
        return np.full(ngroups, float(limit))
    lo = np.full(ngroups, np.inf)
    hi = np.full(ngroups, -np.inf)
    np.minimum.at(lo, codes, lim)
    np.maximum.at(hi, codes, lim)
    seen = np.isfinite(lo)
    varies = seen & (lo != hi)
    if varies.any():
        raise ValueError(f"limit= takes one limit per group; {int(varies.sum())} group(s) hold rows with "
                         "different limits (split the table by limit, or pass one number)")
    return np.where(seen, lo, np.nan)


def exceedance_values(values: np.ndarray, codes: np.ndarray, ngroups: int, *, limit: Any,
                      confidence_level: float = 0.95, detection_limit: Any = None) -> dict[str, np.ndarray]:
    """Estimated share above ``limit`` with its exact interval (:func:`logstats.stats.tails.exceedance`,
    or the censored version), and ``n_exceed``, the values observed above the limit (a non-detect
    counts as not above)."""
    from logstats.stats import tails

    glim = _group_limit(limit, values, codes, ngroups)
    rows = np.broadcast_to(np.asarray(limit, dtype=np.float64), values.shape)
    if detection_limit is None:
        out = dict(tails.exceedance(moments_by_codes(values, codes, ngroups), limit=glim,
                                    confidence_level=confidence_level))
        detected = np.ones(values.shape, dtype=bool)
        out["n"] = np.bincount(codes, minlength=ngroups).astype(np.int64)
    else:
        out = dict(tails.exceedance_censored(values, codes, ngroups, detection_limit=detection_limit,
                                             limit=glim, confidence_level=confidence_level))
        dl = np.broadcast_to(np.asarray(detection_limit, dtype=np.float64), values.shape)
        with np.errstate(invalid="ignore"):
            detected = ~(values <= dl)
    with np.errstate(invalid="ignore"):
        above = detected & (values > rows)
    out["n_exceed"] = np.bincount(codes[above], minlength=ngroups).astype(np.int64)
    return out


def variance_components_values(values: np.ndarray, codes: np.ndarray, ngroups: int, *,
                               nested_codes: list[np.ndarray], names: list[str],
                               confidence_level: float = 0.95) -> dict[str, np.ndarray]:
    """:func:`logstats.stats.nested.variance_components` with the level names in the field names."""
    from logstats.stats.nested import variance_components

    return dict(variance_components(values, codes, ngroups, list(nested_codes), names=list(names),
                                    confidence_level=confidence_level))
