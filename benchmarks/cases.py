"""Benchmark cases for every declared statistic, each against what a user would otherwise write.

Every :class:`Case` builds invented data, calls one public logstats method (``ours``) and one or more
references: the hand-written per-group loop through pandas ``groupby`` with scipy or statsmodels, or
the vectorised numpy/pandas idiom. Each reference returns a DataFrame indexed like ours, with the
fields it computes under our field names, so the runner (:func:`benchmarks.run.bench_methods`) both
times every pair side by side and reports how far their numbers agree.

All data here are invented (log-normal values with group-specific parameters; detection limits at a
group's 30 % quantile; a nested day > well > cell design); they describe no real measurement.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import integrate, optimize, special, stats

import logstats
from benchmarks.registry import Reference

LEVEL = 0.95  # confidence_level everywhere
Q = 0.95  # quantile and coverage


# --------------------------------------------------------------------------------------------- data

def method_frame(groups: int, per_group: int, seed: int = 11) -> pd.DataFrame:
    """Invented log-normal values in ``groups`` groups of about ``per_group`` (sizes vary ±50 %).

    Columns: ``g`` (group code), ``x`` (value), ``dl`` (the group's detection limit, at its 30 %
    quantile: about 30 % of values censored when it is used).
    """
    rng = np.random.default_rng(seed)
    sizes = rng.integers(max(per_group // 2, 3), per_group * 3 // 2 + 1, groups)
    mu = rng.normal(1.0, 0.5, groups)
    sigma = rng.uniform(0.3, 0.9, groups)
    g = np.repeat(np.arange(groups), sizes)
    x = np.exp(mu[g] + sigma[g] * rng.standard_normal(g.size))
    dl = np.exp(mu + sigma * stats.norm.ppf(0.30))[g]
    return pd.DataFrame({"g": g, "x": x, "dl": dl})


def nested_frame(groups: int, days: int = 4, wells: int = 3, cells: int = 4, seed: int = 12) -> pd.DataFrame:
    """Invented balanced nested design: per group, ``days`` days x ``wells`` wells x ``cells`` cells.

    Log-scale components: between days 0.10, between wells within a day 0.04, within a well 0.06.
    """
    rng = np.random.default_rng(seed)
    grid = np.meshgrid(np.arange(groups), np.arange(days), np.arange(wells), indexing="ij")
    g, d, w = (a.ravel().repeat(cells) for a in grid)
    day_eff = rng.normal(0, np.sqrt(0.10), groups * days)[g * days + d]
    well_eff = rng.normal(0, np.sqrt(0.04), groups * days * wells)[(g * days + d) * wells + w]
    y = 1.0 + day_eff + well_eff + rng.normal(0, np.sqrt(0.06), g.size)
    return pd.DataFrame({"g": g, "day": d, "well": w, "x": np.exp(y)})


def replicate_frame(levels: int, wells: int, cells: int, seed: int = 14) -> pd.DataFrame:
    """Invented design with replicate wells: ``levels`` conditions x ``wells`` wells x ``cells`` cells.

    Log-scale effects: condition 0.3 a level, wells within a condition SD 0.2, cells SD 0.7.
    """
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(levels), wells * cells)
    w = np.tile(np.repeat(np.arange(wells), cells), levels)
    well_eff = rng.normal(0.0, 0.2, levels * wells)[g * wells + w]
    y = 1.0 + 0.3 * g + well_eff + rng.normal(0.0, 0.7, g.size)
    return pd.DataFrame({"g": g, "well": w, "x": np.exp(y)})


def notation_series(n: int, seed: int = 13) -> pd.Series:
    """Invented lab column: numbers, ``<DL`` entries with several limits, and ``ND``-style words."""
    rng = np.random.default_rng(seed)
    kind = rng.choice(4, n, p=[0.6, 0.2, 0.1, 0.1])
    num = np.round(rng.lognormal(0.0, 1.0, n), 3).astype(str)
    lim = rng.choice(["<0.5", "< 0.2", "<1", "<0.05"], n)
    words = rng.choice(["ND", "n.d.", "<LOQ", "BDL", "<lod"], n)
    out = np.where(kind == 0, num, np.where(kind == 1, lim, np.where(kind == 2, words, num)))
    return pd.Series(out, name="conc", dtype=object)


# --------------------------------------------------------------------------------------------- helpers

def _logs(df: pd.DataFrame) -> Any:
    return np.log(df["x"]).groupby(df["g"])


def _per_group(df: pd.DataFrame, fn: Callable[[np.ndarray], dict[str, float]]) -> pd.DataFrame:
    """The hand-written loop: ``fn`` on each group's values, one row a group."""
    rows = {key: fn(sub.to_numpy()) for key, sub in df.groupby("g")["x"]}
    out = pd.DataFrame.from_dict(rows, orient="index")
    out.index.name = "g"
    return out


def _moments_idiom(df: pd.DataFrame) -> pd.DataFrame:
    return _logs(df).agg(["count", "mean", "std"])


# --------------------------------------------------------------------------------------------- moment stats

def _ref_gcv(df: pd.DataFrame) -> pd.DataFrame:
    s = _logs(df).std()
    return pd.DataFrame({"gcv": np.sqrt(np.expm1(s ** 2))})


def _ref_gcv_scipy(df: pd.DataFrame) -> pd.DataFrame:
    return _per_group(df, lambda v: {"gcv": float(np.sqrt(np.expm1(np.log(stats.gstd(v)) ** 2)))})


def _ref_moments(df: pd.DataFrame) -> pd.DataFrame:
    agg = _logs(df).agg(["count", "mean", "var"])
    m2 = agg["var"] * (agg["count"] - 1)
    return pd.DataFrame({"n": agg["count"], "mean_log": agg["mean"], "m2_log": m2})


def _ref_summary_scipy(df: pd.DataFrame) -> pd.DataFrame:
    def one(v: np.ndarray) -> dict[str, float]:
        ci = stats.ttest_1samp(np.log(v), 0.0).confidence_interval(LEVEL)
        return {"gmean": stats.gmean(v), "gsd": stats.gstd(v), "ci_low": np.exp(ci.low),
                "ci_high": np.exp(ci.high)}
    return _per_group(df, one)


def _ref_summary_idiom(df: pd.DataFrame) -> pd.DataFrame:
    agg = _moments_idiom(df)
    half = stats.t.ppf(0.5 + LEVEL / 2, agg["count"] - 1) * agg["std"] / np.sqrt(agg["count"])
    return pd.DataFrame({"n": agg["count"], "gmean": np.exp(agg["mean"]), "gsd": np.exp(agg["std"]),
                         "ci_low": np.exp(agg["mean"] - half), "ci_high": np.exp(agg["mean"] + half)})


def _ref_linear(df: pd.DataFrame) -> pd.DataFrame:
    lin = df.groupby("g")["x"].agg(["median", "mean", "std"]).rename(columns={"std": "sd"})
    agg = _moments_idiom(df)
    return lin.assign(n=agg["count"], gmean=np.exp(agg["mean"]), gsd=np.exp(agg["std"]))


def _ref_fit_scipy(df: pd.DataFrame) -> pd.DataFrame:
    def one(v: np.ndarray) -> dict[str, float]:
        shape, _, scale = stats.lognorm.fit(v, floc=0)
        return {"mu": np.log(scale), "sigma": shape}
    return _per_group(df, one)


def _ref_lognormal_mean_cox(df: pd.DataFrame) -> pd.DataFrame:
    """Cox's interval for the log-normal mean (Land 1972; Zhou & Gao 1997), vectorised over groups."""
    agg = _logs(df).agg(["count", "mean", "var"])
    n, m, s2 = agg["count"], agg["mean"], agg["var"]
    centre = m + s2 / 2
    half = stats.norm.ppf(0.5 + LEVEL / 2) * np.sqrt(s2 / n + s2 ** 2 / (2 * (n - 1)))
    return pd.DataFrame({"estimate": np.exp(centre), "ci_low": np.exp(centre - half),
                         "ci_high": np.exp(centre + half)})


# --------------------------------------------------------------------------------------------- upper tails

def _nct_quantile_bounds(n: Any, m: Any, s: Any) -> tuple[Any, Any, Any]:
    z = stats.norm.ppf(Q)
    a = (1 - LEVEL) / 2
    lo = stats.nct.ppf(a, n - 1, z * np.sqrt(n)) / np.sqrt(n)
    hi = stats.nct.ppf(1 - a, n - 1, z * np.sqrt(n)) / np.sqrt(n)
    return np.exp(m + z * s), np.exp(m + lo * s), np.exp(m + hi * s)


def _ref_quantile_loop(df: pd.DataFrame) -> pd.DataFrame:
    def one(v: np.ndarray) -> dict[str, float]:
        y = np.log(v)
        est, lo, hi = _nct_quantile_bounds(y.size, y.mean(), y.std(ddof=1))
        return {"estimate": est, "ci_low": lo, "ci_high": hi}
    return _per_group(df, one)


def _ref_quantile_vec(df: pd.DataFrame) -> pd.DataFrame:
    agg = _moments_idiom(df)
    est, lo, hi = _nct_quantile_bounds(agg["count"].to_numpy(), agg["mean"].to_numpy(), agg["std"].to_numpy())
    return pd.DataFrame({"estimate": est, "ci_low": lo, "ci_high": hi}, index=agg.index)


def _upper_factor(n: Any) -> Any:
    return stats.nct.ppf(LEVEL, n - 1, stats.norm.ppf(Q) * np.sqrt(n)) / np.sqrt(n)


def _ref_tolerance_loop(df: pd.DataFrame) -> pd.DataFrame:
    def one(v: np.ndarray) -> dict[str, float]:
        y = np.log(v)
        return {"tolerance_high": np.exp(y.mean() + _upper_factor(y.size) * y.std(ddof=1))}
    return _per_group(df, one)


def _ref_tolerance_vec(df: pd.DataFrame) -> pd.DataFrame:
    agg = _moments_idiom(df)
    k = _upper_factor(agg["count"].to_numpy())
    return pd.DataFrame({"tolerance_high": np.exp(agg["mean"] + k * agg["std"])})


def _two_sided_factor(n: int) -> float:
    """Exact two-sided normal tolerance factor (Odeh & Owen 1980), by quadrature and root finding."""
    nu = n - 1

    def r_of(x: float) -> float:  # Φ(x + r) − Φ(x − r) = coverage (scipy.special for scalar speed)
        return optimize.brentq(lambda r: special.ndtr(x + r) - special.ndtr(x - r) - Q, 0.0, 40.0)

    def confidence(k: float) -> float:
        integrand = lambda x: special.chdtrc(nu, nu * r_of(x) ** 2 / k ** 2) * np.exp(-n * x * x / 2)  # noqa: E731
        return np.sqrt(2 * n / np.pi) * integrate.quad(integrand, 0, 10 / np.sqrt(n))[0]

    return optimize.brentq(lambda k: confidence(k) - LEVEL, 1.0, 50.0, xtol=1e-12)


def _ref_tolerance_both_loop(df: pd.DataFrame) -> pd.DataFrame:
    def one(v: np.ndarray) -> dict[str, float]:
        y = np.log(v)
        k = _two_sided_factor(y.size)
        m, s = y.mean(), y.std(ddof=1)
        return {"tolerance_low": np.exp(m - k * s), "tolerance_high": np.exp(m + k * s)}
    return _per_group(df, one)


def _exceedance_limit(df: pd.DataFrame) -> float:
    return float(np.quantile(df["x"], 0.9))


def _ref_exceedance_loop(df: pd.DataFrame) -> pd.DataFrame:
    limit = _exceedance_limit(df)
    a = (1 - LEVEL) / 2

    def one(v: np.ndarray) -> dict[str, float]:
        y = np.log(v)
        n, m, s = y.size, y.mean(), y.std(ddof=1)
        t_obs = np.sqrt(n) * (m - np.log(limit)) / s
        # delta = sqrt(n) * Phi^-1(fraction); nct.cdf(t_obs; delta) decreases in delta
        w = 5 * np.sqrt(1 + t_obs ** 2 / (2 * (n - 1)))  # five SDs of t (scipy nct.cdf is NaN far out)
        lo = optimize.brentq(lambda d: stats.nct.cdf(t_obs, n - 1, d) - (1 - a), t_obs - w, t_obs + w)
        hi = optimize.brentq(lambda d: stats.nct.cdf(t_obs, n - 1, d) - a, t_obs - w, t_obs + w)
        return {"fraction": stats.norm.sf((np.log(limit) - m) / s), "ci_low": stats.norm.cdf(lo / np.sqrt(n)),
                "ci_high": stats.norm.cdf(hi / np.sqrt(n)), "n_exceed": int(np.sum(v > limit))}
    return _per_group(df, one)


# --------------------------------------------------------------------------------------------- scale

def _ref_scale_loop(df: pd.DataFrame) -> pd.DataFrame:
    def one(v: np.ndarray) -> dict[str, float]:
        y = np.log(v)
        _, lam, (lo, hi) = stats.boxcox(v, alpha=1 - LEVEL)
        ll_norm = stats.norm.logpdf(v, v.mean(), v.std()).sum()
        ll_lognorm = stats.norm.logpdf(y, y.mean(), y.std()).sum() - y.sum()
        return {"boxcox_lambda": lam, "boxcox_ci_low": lo, "boxcox_ci_high": hi,
                "normality_p_linear": stats.shapiro(v).pvalue, "normality_p_log": stats.shapiro(y).pvalue,
                "aic_normal": 4 - 2 * ll_norm, "aic_lognormal": 4 - 2 * ll_lognorm}
    return _per_group(df, one)


def _ref_scale_pooled(df: pd.DataFrame) -> pd.DataFrame:
    import statsmodels.api as sm

    dummies = pd.get_dummies(df["g"], dtype=float)
    y = np.log(df["x"])
    ll_x = sm.OLS(df["x"], dummies).fit().llf
    ll_log = sm.OLS(y, dummies).fit().llf - y.sum()
    per = df.groupby("g")["x"].agg(["mean", "std"])
    fit = stats.linregress(np.log(per["mean"]), np.log(per["std"]))
    half = stats.t.ppf(0.5 + LEVEL / 2, len(per) - 2) * fit.stderr
    return pd.DataFrame({"delta_aic": [2 * (ll_log - ll_x)], "spread_slope": [fit.slope],
                         "spread_slope_ci_low": [fit.slope - half],
                         "spread_slope_ci_high": [fit.slope + half]},
                        index=pd.Index(["x"], name="variable"))


# --------------------------------------------------------------------------------------------- censored

def _ref_censored_mle(df: pd.DataFrame) -> pd.DataFrame:
    rows = {}
    for key, sub in df.groupby("g"):
        x, dl = sub["x"].to_numpy(), sub["dl"].to_numpy()
        cens = x <= dl
        shape, _, scale = stats.lognorm.fit(stats.CensoredData(uncensored=x[~cens], left=dl[cens]), floc=0)
        rows[key] = {"gmean": scale, "mean_log": np.log(scale)}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


def _ref_censored_ros(df: pd.DataFrame) -> pd.DataFrame:
    from statsmodels.imputation.ros import impute_ros

    rows = {}
    for key, sub in df.groupby("g"):
        cens = (sub["x"] <= sub["dl"]).to_numpy()
        obs = np.where(cens, sub["dl"].to_numpy(), sub["x"].to_numpy())
        y = np.log(impute_ros(obs, cens))
        rows[key] = {"gmean": np.exp(y.mean()), "gsd": np.exp(y.std(ddof=1))}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


def _ref_censored_km(df: pd.DataFrame) -> pd.DataFrame:
    """Kaplan-Meier on the flipped logs (scipy.stats.ecdf, right-censored); leftover mass at the end."""
    rows = {}
    for key, sub in df.groupby("g"):
        x, dl = sub["x"].to_numpy(), sub["dl"].to_numpy()
        cens = x <= dl
        res = stats.ecdf(stats.CensoredData(uncensored=-np.log(x[~cens]), right=-np.log(dl[cens])))
        q, p = res.sf.quantiles, res.sf.probabilities
        mass = -np.diff(p, prepend=1.0)
        mean = float(np.sum(q * mass) + p[-1] * q[-1])
        rows[key] = {"gmean": np.exp(-mean)}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


# --------------------------------------------------------------------------------------------- comparisons

def _ref_fold_change(df: pd.DataFrame) -> pd.DataFrame:
    ref = np.log(df.loc[df["g"] == 0, "x"].to_numpy())
    rows = {}
    for key, sub in df.groupby("g")["x"]:
        if key == 0:
            continue
        y = np.log(sub.to_numpy())
        res = stats.ttest_ind(y, ref, equal_var=False)
        ci = res.confidence_interval(LEVEL)
        rows[key] = {"ratio": np.exp(y.mean() - ref.mean()), "ci_low": np.exp(ci.low),
                     "ci_high": np.exp(ci.high), "p_value": res.pvalue}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


def _ref_fold_change_replicate(df: pd.DataFrame) -> pd.DataFrame:
    """The two-stage idiom: mean of logs per (condition, well), then Welch's t on the well means."""
    rep = np.log(df["x"]).groupby([df["g"], df["well"]]).mean()
    ref = rep.loc[0].to_numpy()
    rows = {}
    for key, sub in rep.groupby(level="g"):
        if key == 0:
            continue
        y = sub.to_numpy()
        res = stats.ttest_ind(y, ref, equal_var=False)
        ci = res.confidence_interval(LEVEL)
        rows[key] = {"ratio": np.exp(y.mean() - ref.mean()), "ci_low": np.exp(ci.low),
                     "ci_high": np.exp(ci.high), "p_value": res.pvalue}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


def _ref_fold_change_censored(df: pd.DataFrame) -> pd.DataFrame:
    """Censored normal regression on the logs (one location per level, one common sigma), fitted with
    scipy.optimize.minimize; likelihood-ratio p-value from one restricted fit per level."""
    y, ldl = np.log(df["x"].to_numpy()), np.log(df["dl"].to_numpy())
    cens = y <= ldl
    level = df["g"].to_numpy()
    n_levels = int(level.max()) + 1

    def negll(theta: np.ndarray, lev: np.ndarray, k: int) -> float:
        mu, sig = theta[:k][lev], np.exp(theta[k])
        ll = np.where(cens, stats.norm.logcdf((ldl - mu) / sig), stats.norm.logpdf((y - mu) / sig) - theta[k])
        return -float(ll.sum())

    def fit(lev: np.ndarray, k: int) -> Any:
        start = np.r_[[y[lev == j].mean() for j in range(k)], np.log(y.std())]
        return optimize.minimize(negll, start, args=(lev, k), method="BFGS", options={"gtol": 1e-9})

    full = fit(level, n_levels)
    rows = {}
    for j in range(1, n_levels):
        lev = np.where(level == j, 0, level)
        lev = np.where(lev > j, lev - 1, lev)  # level j merged into the reference
        restricted = fit(lev, n_levels - 1)
        stat = 2 * (restricted.fun - full.fun)
        rows[j] = {"ratio": np.exp(full.x[j] - full.x[0]), "p_value": stats.chi2.sf(max(stat, 0.0), 1)}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


# --------------------------------------------------------------------------------------------- nested

def _ref_mixedlm(df: pd.DataFrame) -> pd.DataFrame:
    import statsmodels.formula.api as smf

    rows = {}
    for key, sub in df.groupby("g"):
        sub = sub.assign(y=np.log(sub["x"]))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = smf.mixedlm("y ~ 1", sub, groups="day", re_formula="1",
                              vc_formula={"well": "0 + C(well)"}).fit(reml=True)
        rows[key] = {"var_day": float(res.cov_re.iloc[0, 0]), "var_well": float(res.vcomp[0]),
                     "var_within": float(res.scale)}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("g")


PLAN = {"ratio": 1.5, "var_between": 0.04, "var_within": 0.3}


def _ref_plan(_: Any) -> pd.DataFrame:
    from statsmodels.stats.power import TTestIndPower

    power = TTestIndPower()
    rows = []
    for r in range(2, 21):
        for m in (1, 2, 5, 10, 20, 50, 100, 200, 500):
            d = np.log(PLAN["ratio"]) / np.sqrt(PLAN["var_between"] + PLAN["var_within"] / m)
            rows.append({"replicates": r, "per_replicate": m,
                         "power": power.power(effect_size=d, nobs1=r, alpha=0.05, ratio=1.0)})
    return pd.DataFrame(rows).set_index(["replicates", "per_replicate"])


ND_WORDS = r"(?i)^\s*(?:nd|n\.d\.|<\s*lod|<\s*loq|bdl)\s*$"


def _ref_split(s: pd.Series) -> pd.DataFrame:
    text = s.astype(str).str.strip()
    below = pd.to_numeric(text.str.extract(r"^<\s*([0-9.eE+-]+)$")[0], errors="coerce")
    nd = text.str.match(ND_WORDS)
    value = pd.to_numeric(text.where(below.isna() & ~nd), errors="coerce")
    limit = below.where(~nd, 0.01)
    return pd.DataFrame({"value": value.fillna(limit), "detection_limit": limit})


def warm_up() -> None:
    """Import what the references use, so that no timed call pays for an import."""
    import statsmodels.api  # noqa: F401
    import statsmodels.formula.api  # noqa: F401
    from statsmodels.imputation import ros  # noqa: F401
    from statsmodels.stats import power  # noqa: F401


# --------------------------------------------------------------------------------------------- the table

@dataclass(frozen=True)
class Case:
    """One benchmarked call: its data, ours, and what it is timed against."""

    name: str  # the row label (method and options)
    statistic: str  # the declared method (logstats.methods.METHODS) or public function
    data: Callable[[tuple[int, int]], Any]  # size -> input
    size: dict[str, tuple[int, int]]  # "quick" / "full" -> (groups, values per group) or (rows, 0)
    ours: Callable[[Any], Any]
    references: tuple[Reference, ...]
    as_fields: Callable[[Any], Any] = lambda result: result
    absolute: tuple[str, ...] = ()  # fields compared by absolute difference (values near 0)
    ours_text: str = ""
    note: str = ""
    extra: dict[str, Any] = field(default_factory=dict)


def _frame(size: tuple[int, int]) -> pd.DataFrame:
    return method_frame(*size)


def _shuffled(size: tuple[int, int]) -> pd.DataFrame:
    """``method_frame`` with its rows in random order (tables are not always sorted by group)."""
    df = method_frame(*size)
    return df.iloc[np.random.default_rng(5).permutation(len(df))].reset_index(drop=True)


def _ref_shapiro_loop(df: pd.DataFrame) -> pd.DataFrame:
    return _per_group(df, lambda v: {"normality_p_linear": stats.shapiro(v).pvalue,
                                     "normality_p_log": stats.shapiro(np.log(v)).pvalue})


def _single(col: str) -> Callable[[Any], Any]:
    return lambda res: res.rename(columns={"x": col})


def _plan_ours(_: Any) -> pd.DataFrame:
    return logstats.plan(PLAN["ratio"], var_between=PLAN["var_between"],
                         var_within=PLAN["var_within"]).set_index(["replicates", "per_replicate"])


def _r(label: str, run: Callable[..., Any], fields: str, source: str) -> Reference:
    return Reference(label, run, tuple(fields.split()), source)


_SCIPY_GM = _r("scipy per group", lambda df: _per_group(df, lambda v: {"gmean": stats.gmean(v)}), "gmean",
               "groupby.agg(scipy.stats.gmean)")
_SCIPY_SCALE = _r("scipy per group", _ref_scale_loop,
                  "boxcox_lambda boxcox_ci_low boxcox_ci_high normality_p_linear normality_p_log aic_normal "
                  "aic_lognormal",
                  "scipy.stats.boxcox(x, alpha=0.05) + shapiro(x), shapiro(ln x) + AICs per group")
CASES: tuple[Case, ...] = (
    Case("gmean", "gmean", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.gmean(by="g", columns="x"),
         (_SCIPY_GM, _r("idiom", lambda df: pd.DataFrame({"gmean": np.exp(_logs(df).mean())}), "gmean",
                        "np.exp(np.log(x).groupby(g).mean())")),
         as_fields=_single("gmean"), ours_text='gmean(by="g")'),
    Case("gsd", "gsd", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.gsd(by="g", columns="x"),
         (_r("scipy per group", lambda df: _per_group(df, lambda v: {"gsd": stats.gstd(v)}), "gsd",
             "groupby.agg(scipy.stats.gstd)"),
          _r("idiom", lambda df: pd.DataFrame({"gsd": np.exp(_logs(df).std())}), "gsd",
             "np.exp(np.log(x).groupby(g).std())")),
         as_fields=_single("gsd"), ours_text='gsd(by="g")'),
    Case("gcv", "gcv", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.gcv(by="g", columns="x"),
         (_r("scipy per group", _ref_gcv_scipy, "gcv", "sqrt(expm1(ln(scipy.stats.gstd)^2)) per group"),
          _r("idiom", _ref_gcv, "gcv", "np.sqrt(np.expm1(np.log(x).groupby(g).std()**2))")),
         as_fields=_single("gcv"), ours_text='gcv(by="g")'),
    Case("moments", "moments", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.moments(by="g", columns="x"),
         (_r("idiom", _ref_moments, "n mean_log m2_log", "np.log(x).groupby(g).agg(count, mean, var)"),),
         ours_text='moments(by="g")'),
    Case("summary", "summary", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.summary(by="g", columns="x"),
         (_r("scipy per group", _ref_summary_scipy, "gmean gsd ci_low ci_high",
             "gmean, gstd, ttest_1samp(ln x).confidence_interval() per group"),
          _r("idiom", _ref_summary_idiom, "n gmean gsd ci_low ci_high",
             "np.log + groupby count/mean/std + t.ppf + np.exp")),
         ours_text='summary(by="g")'),
    Case("summary linear=True", "summary", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.summary(by="g", columns="x", linear=True),
         (_r("idiom", _ref_linear, "n gmean gsd median mean sd",
             "groupby.agg([median, mean, std]) + the log idiom"),),
         ours_text='summary(by="g", linear=True)'),
    Case("summary linear=True unsorted", "summary", _shuffled, {"quick": (20, 500), "full": (1_000, 1_000)},
         lambda df: df.logstats.summary(by="g", columns="x", linear=True),
         (_r("idiom", _ref_linear, "n gmean gsd median mean sd",
             "groupby.agg([median, mean, std]) + the log idiom"),),
         ours_text='summary(by="g", linear=True), rows in random order'),
    Case("fit", "fit", _frame, {"quick": (200, 50), "full": (2_000, 100)},
         lambda df: df.logstats.fit(by="g", columns="x"),
         (_r("scipy per group", _ref_fit_scipy, "mu sigma", "scipy.stats.lognorm.fit(v, floc=0) per group"),),
         ours_text='fit(by="g") (uncensored; the censored fit has its own section)'),
    Case("lognormal_mean", "lognormal_mean", _frame, {"quick": (200, 50), "full": (10_000, 100)},
         lambda df: df.logstats.lognormal_mean(by="g", columns="x"),
         (_r("idiom", _ref_lognormal_mean_cox, "estimate ci_low ci_high",
             "Cox interval exp(m + s²/2 ± z·sqrt(s²/n + s⁴/(2(n−1)))) on groupby moments"),),
         ours_text='lognormal_mean(by="g") (Cox)'),
    Case("lognormal_mean method=land", "lognormal_mean", _frame, {"quick": (200, 50), "full": (1_000, 100)},
         lambda df: df.logstats.lognormal_mean(by="g", columns="x", method="land"),
         (_r("Cox idiom", _ref_lognormal_mean_cox, "estimate",
             "the Cox approximation (Land's exact interval has no scipy/statsmodels counterpart)"),),
         ours_text='lognormal_mean(by="g", method="land")',
         note="agree: the point estimate only (the intervals are different methods)"),
    Case("quantile", "quantile", _frame, {"quick": (200, 50), "full": (2_000, 100)},
         lambda df: df.logstats.quantile(by="g", columns="x", q=Q),
         (_r("scipy per group", _ref_quantile_loop, "estimate ci_low ci_high", "nct.ppf per group"),
          _r("vectorised scipy", _ref_quantile_vec, "estimate ci_low ci_high",
             "groupby moments + one nct.ppf call on the arrays")),
         ours_text='quantile(by="g", q=0.95)'),
    Case("tolerance_limit", "tolerance_limit", _frame, {"quick": (200, 50), "full": (2_000, 100)},
         lambda df: df.logstats.tolerance_limit(by="g", columns="x", coverage=Q),
         (_r("scipy per group", _ref_tolerance_loop, "tolerance_high", "nct.ppf factor per group"),
          _r("vectorised scipy", _ref_tolerance_vec, "tolerance_high",
             "groupby moments + one nct.ppf call on the arrays")),
         ours_text='tolerance_limit(by="g")'),
    Case("tolerance_limit side=both", "tolerance_limit", _frame, {"quick": (3, 50), "full": (30, 100)},
         lambda df: df.logstats.tolerance_limit(by="g", columns="x", coverage=Q, side="both"),
         (_r("scipy per group", _ref_tolerance_both_loop, "tolerance_low tolerance_high",
             "Odeh-Owen factor per group: brentq over k of integrate.quad with an inner brentq"),),
         ours_text='tolerance_limit(by="g", side="both")'),
    Case("exceedance", "exceedance", _frame, {"quick": (40, 50), "full": (1_000, 100)},
         lambda df: df.logstats.exceedance(by="g", columns="x", limit=_exceedance_limit(df)),
         (_r("scipy per group", _ref_exceedance_loop, "fraction ci_low ci_high n_exceed",
             "brentq on nct.cdf per group (both bounds)"),),
         ours_text='exceedance(by="g", limit=L)'),
    Case("scale_check", "scale_check", _frame, {"quick": (20, 50), "full": (1_000, 100)},
         lambda df: df.logstats.scale_check(by="g", columns="x"),
         (_SCIPY_SCALE,),
         absolute=("boxcox_lambda", "boxcox_ci_low", "boxcox_ci_high"), ours_text='scale_check(by="g")'),
    Case("scale_check unsorted", "scale_check", _shuffled, {"quick": (5, 400), "full": (100, 3_300)},
         lambda df: df.logstats.scale_check(by="g", columns="x"),
         (_SCIPY_SCALE,
          _r("shapiro only", _ref_shapiro_loop, "normality_p_linear normality_p_log",
             "scipy.stats.shapiro(x), shapiro(ln x) per group (no Box-Cox, no AIC)")),
         absolute=("boxcox_lambda", "boxcox_ci_low", "boxcox_ci_high"),
         ours_text='scale_check(by="g"), rows in random order',
         note="groups of 1,650-4,950 values: up to 5,000 both sides use Shapiro-Wilk (above it logstats "
              "uses D'Agostino-Pearson, where scipy's shapiro p is not accurate)"),
    Case("scale_check pooled=True", "scale_check", _frame, {"quick": (40, 50), "full": (1_000, 100)},
         lambda df: df.logstats.scale_check(by="g", columns="x", pooled=True),
         (_r("statsmodels", _ref_scale_pooled,
             "delta_aic spread_slope spread_slope_ci_low spread_slope_ci_high",
             "statsmodels OLS with group dummies on x and ln x (llf) + scipy.stats.linregress"),),
         absolute=("spread_slope", "spread_slope_ci_low", "spread_slope_ci_high"),
         ours_text='scale_check(by="g", pooled=True)'),
    Case("summary censored mle", "summary", _frame, {"quick": (10, 50), "full": (200, 100)},
         lambda df: df.logstats.summary(by="g", columns="x", detection_limit="dl"),
         (_r("scipy per group", _ref_censored_mle, "gmean mean_log",
             "scipy CensoredData + lognorm.fit(floc=0) per group"),),
         ours_text='summary(by="g", detection_limit="dl")'),
    Case("summary censored ros", "summary", _frame, {"quick": (10, 50), "full": (200, 100)},
         lambda df: df.logstats.summary(by="g", columns="x", detection_limit="dl", censored_method="ros"),
         (_r("statsmodels per group", _ref_censored_ros, "gmean gsd",
             "statsmodels.imputation.ros.impute_ros per group, then gmean/gsd"),),
         ours_text='summary(..., censored_method="ros")'),
    Case("summary censored km", "summary", _frame, {"quick": (10, 50), "full": (200, 100)},
         lambda df: df.logstats.summary(by="g", columns="x", detection_limit="dl", censored_method="km"),
         (_r("scipy per group", _ref_censored_km, "gmean",
             "scipy.stats.ecdf of CensoredData on the flipped logs per group"),),
         ours_text='summary(..., censored_method="km")'),
    Case("fold_change", "fold_change", _frame, {"quick": (20, 50), "full": (200, 100)},
         lambda df: df.logstats.fold_change(by="g", reference=0, columns="x"),
         (_r("scipy per level", _ref_fold_change, "ratio ci_low ci_high p_value",
             "scipy.stats.ttest_ind(ln x, ln x_ref, equal_var=False) + confidence_interval() per level"),),
         ours_text='fold_change(by="g", reference=0)'),
    Case("fold_change replicate= few levels", "fold_change",
         lambda size: replicate_frame(3, size[0], size[1]),
         {"quick": (4, 50), "full": (6, 5_000)},
         lambda df: df.logstats.fold_change(by="g", reference=0, columns="x", replicate="well"),
         (_r("two-stage idiom", _ref_fold_change_replicate, "ratio ci_low ci_high p_value",
             "np.log(x).groupby([g, well]).mean(), then ttest_ind(equal_var=False) per level"),),
         ours_text='fold_change(by="g", reference=0, replicate="well")',
         note="3 conditions; groups x values = wells x cells per condition"),
    Case("fold_change replicate= small design", "fold_change",
         lambda size: replicate_frame(3, size[0], size[1]), {"quick": (4, 50), "full": (4, 50)},
         lambda df: df.logstats.fold_change(by="g", reference=0, columns="x", replicate="well"),
         (_r("two-stage idiom", _ref_fold_change_replicate, "ratio ci_low ci_high p_value",
             "np.log(x).groupby([g, well]).mean(), then ttest_ind(equal_var=False) per level"),),
         ours_text='fold_change(by="g", reference=0, replicate="well")',
         note="3 conditions x 4 wells x 50 cells: fixed costs dominate"),
    Case("fold_change censored", "fold_change", _frame, {"quick": (5, 40), "full": (20, 100)},
         lambda df: df.logstats.fold_change(by="g", reference=0, columns="x", detection_limit="dl"),
         (_r("scipy", _ref_fold_change_censored, "ratio p_value",
             "censored normal regression by scipy.optimize.minimize (BFGS), LR test: one restricted fit a "
             "level"),),
         ours_text='fold_change(by="g", reference=0, detection_limit="dl")'),
    Case("variance_components", "variance_components", lambda size: nested_frame(size[0]),
         {"quick": (3, 48), "full": (30, 48)},
         lambda df: df.logstats.variance_components(by="g", nested=["day", "well"], columns="x"),
         (_r("statsmodels per group", _ref_mixedlm, "var_day var_well var_within",
             "statsmodels MixedLM (REML), day random intercept + well variance component, per group"),),
         ours_text='variance_components(by="g", nested=["day", "well"])',
         note="balanced: 4 days x 3 wells x 4 cells a group"),
    Case("plan", "plan", lambda size: None, {"quick": (171, 0), "full": (171, 0)},
         _plan_ours,
         (_r("statsmodels", _ref_plan, "power", "TTestIndPower().power over the 19 x 9 grid in a loop"),),
         ours_text="logstats.plan(1.5, var_between=0.04, var_within=0.3)"),
    Case("split_censored", "split_censored", lambda size: notation_series(size[0]),
         {"quick": (100_000, 0), "full": (1_000_000, 0)},
         lambda s: logstats.split_censored(s, nd_limit=0.01),
         (_r("pandas idiom", _ref_split, "value detection_limit",
             "str.extract / str.match + pd.to_numeric"),),
         ours_text="logstats.split_censored(s, nd_limit=0.01)"),
    Case("log", "log", _frame, {"quick": (1000, 100), "full": (10_000, 1000)},
         lambda df: df.logstats.log(columns="x")[["x"]],
         (_r("numpy", lambda df: np.log(df[["x"]]), "x", "np.log(df[[\"x\"]])"),),
         ours_text='log(columns="x")'),
    Case("exp", "exp", _frame, {"quick": (1000, 100), "full": (10_000, 1000)},
         lambda df: df.logstats.exp(columns="x")[["x"]],
         (_r("numpy", lambda df: np.exp(df[["x"]]), "x", "np.exp(df[[\"x\"]])"),),
         ours_text='exp(columns="x")'),
)
