"""Every public statistic, declared once.

A :class:`Method` is data: which kernel in :mod:`logstats.stats` computes it, how it reduces (from
the log-moments, from the raw values of each group, or as a comparison between levels), what a
dask-backed input does (merge chunk moments in a tree, or load the values), which keywords it takes,
its result schema (field names, dtypes, which fields carry the data's units, how the face displays
them) and the outside reference the tests and benchmarks check it against.

The engine (:mod:`logstats.accessors._engine`) runs a method from its declaration; every adapter
(pandas, xarray, dask, plain arrays) builds its public methods from :data:`METHODS`, so a new
statistic is one entry here plus its kernel. Kernels are named by import path and imported on first
use, which keeps ``import logstats`` light.

This module sits between the adapters and the statistics layer; it imports neither pandas, xarray,
dask nor matplotlib.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from logstats.core.transform import check_nonpositive

__all__ = ["METHODS", "Field", "Method", "Param", "Policy", "get", "kernel"]


# --------------------------------------------------------------------------------------------- schema

@dataclass(frozen=True)
class Field:
    """One result field.

    ``dtype``: ``"float"``, ``"int"`` (a count), ``"bool"`` or ``"str"``. ``unit``: the field is in the
    data's units (it keeps xarray ``attrs``; the face prints the unit beside it). ``display``: how the
    face formats it (``"number"``, ``"count"``, ``"factor"`` for ×/÷ factors, ``"p"`` for p-values,
    ``"ratio"``, ``"text"``). ``choices``: the possible values of a ``"str"`` field (they travel as codes
    through dask's float blocks). ``when_poisoned``: the value a ``"str"`` field takes in a group the
    bad-value policy made undefined (``"missing"`` or ``"nonpositive"`` picks the reason).
    """

    name: str
    dtype: str = "float"
    unit: bool = False
    display: str = "number"
    choices: tuple[str, ...] = ()
    when_poisoned: str | None = None
    constant: bool = False  # the same for every group (echoes a keyword): a scalar in xarray results


@dataclass(frozen=True)
class Param:
    """A method-specific keyword: its default and one line of documentation."""

    name: str
    default: Any
    doc: str
    annotation: str = "Any"


@dataclass(frozen=True)
class Method:
    """The declaration of one public statistic (see the module docstring)."""

    name: str
    summary: str
    reduction: str  # "moments" | "values" | "compare" | "transform"
    kernel: str  # "module:function" in logstats.stats (or logstats.core for transforms)
    fields: tuple[Field, ...]
    params: tuple[Param, ...] = ()
    shape: str = "tidy"  # "tidy": one row per group; "single": the one field, groups x columns
    dask: str = "merge"  # "merge": chunk moments merged in a tree; "whole": merged, then one block;
    #                      "loads": the values are loaded (said in the docstring)
    censored: str | None = None  # kernel used when detection_limit= is given (raw values, per-row limits)
    censored_fields: tuple[Field, ...] = ()  # fields added when censoring is in play
    values_kernel: str | None = None  # a values kernel for parameter values the moments cannot serve
    values_when: tuple[str, tuple[Any, ...]] | None = None  # (param, values) that need values_kernel
    row_params: tuple[str, ...] = ()  # keywords that may hold one value per data value (aligned like data)
    variant: tuple[str, str] | None = None  # (keyword, method): a true keyword switches to that method
    pools_groups: bool = False  # one result for all groups of ``by`` together (no group axis)
    spread: bool = True  # the kernel reads m2_log; False: counts and means only (one pass, m2_log NaN)
    positional: tuple[str, ...] = ()  # keywords that come first and may be given by position
    expand: str | None = None  # a keyword that may be a list: one result per item, stacked on a new level
    reference: str = ""  # the outside reference of the tests and benchmarks
    notes: str = ""  # docstring body shared by every container
    example: str = ""  # a doctest for the pandas accessor

    def needs_values(self, params: dict[str, Any], policy: Policy) -> bool:
        """True when this call must see the raw values (not only the log-moments)."""
        if self.reduction == "values" or (policy.censoring and self.censored is not None):
            return True
        if self.values_when is not None:
            key, choices = self.values_when
            return params.get(key) in choices
        return False

    def kernel_for(self, params: dict[str, Any], policy: Policy) -> str:
        if policy.censoring and self.censored is not None:
            return self.censored
        if self.values_when is not None and self.needs_values(params, policy) and self.values_kernel:
            return self.values_kernel
        return self.kernel

    @property
    def field_names(self) -> tuple[str, ...]:
        return tuple(f.name for f in self.fields)

    def field(self, name: str) -> Field:
        for f in self.fields + self.censored_fields:
            if f.name == name:
                return f
        return known_field(name)

    def defaults(self) -> dict[str, Any]:
        return {p.name: p.default for p in self.params}

    @property
    def unit_fields(self) -> frozenset[str]:
        return frozenset(f.name for f in self.fields + self.censored_fields if f.unit)

    @property
    def accepts_detection_limit(self) -> bool:
        return self.censored is not None or any(p.name == "detection_limit" for p in self.params)


def kernel(path: str) -> Callable[..., Any]:
    """The function named ``"module:function"``, imported on first use."""
    module, _, name = path.partition(":")
    return getattr(importlib.import_module(module), name)  # type: ignore[no-any-return]


# --------------------------------------------------------------------------------------------- policy

@dataclass(frozen=True)
class Policy:
    """The one bad-value policy, validated once at the entrance and applied by the engine.

    ``skipna``: missing values are skipped and counted (``False``: a group with any is undefined).
    ``nonpositive``: zeros, negatives and ``-inf`` are refused (``"raise"``), excluded and counted
    (``"drop"``) or make the group's result NaN (``"nan"``). ``detection_limit``: None, a number or a
    per-value array (NaN = not censored), already aligned with the values by the adapter; a value at or
    below its own limit is censored, zeros included, and the ``nonpositive`` rule does not apply to it.
    ``+inf`` is always refused.
    """

    skipna: bool = True
    nonpositive: str = "raise"
    detection_limit: Any = None

    def __post_init__(self) -> None:
        check_nonpositive(self.nonpositive)
        if not isinstance(self.skipna, (bool, np.bool_)):
            raise TypeError(f"skipna must be True or False; got {self.skipna!r}")

    @property
    def kernel_nonpositive(self) -> str:
        """What a kernel does with a non-positive value: "raise" is the engine's job (it knows labels)."""
        return "drop" if self.nonpositive == "raise" else self.nonpositive

    @property
    def censoring(self) -> bool:
        return self.detection_limit is not None


# --------------------------------------------------------------------------------------------- fields

def _f(names: str, dtype: str = "float", **kw: Any) -> tuple[Field, ...]:
    return tuple(Field(n, dtype, **kw) for n in names.split())


_COUNTS = _f("n n_missing n_nonpositive", "int", display="count")
_CI = _f("ci_low ci_high", unit=True)
_LEVEL = Param("confidence_level", 0.95, "Two-sided confidence level, strictly between 0 and 1.", "float")
_DDOF = Param("ddof", 1, "Delta degrees of freedom of the spread of the logs (default 1; numpy's is 0).",
              "float")
_LIMIT = Param("detection_limit", None,
               "A number, the name of a column / variable, or an aligned array of per-value limits; a "
               "value at or below its own limit is censored (zeros included), a NaN limit means not "
               "censored. Results gain ``n_censored``; with nothing censored they equal the uncensored "
               "ones. Dask-backed data are loaded.", "Any")
_CENSORED = _f("n_censored", "int", display="count")

FIT_STATUS = ("ok", "closed_form", "degenerate", "all_censored", "too_few_detects", "not_converged",
              "empty", "missing", "nonpositive")
_CAUTION = ("Where results feed clinical, regulatory or safety decisions, they support and do not "
            "replace validated tools, qualified review, local rules and licensed practice.")


METHODS: dict[str, Method] = {}


def declare(m: Method) -> Method:
    METHODS[m.name] = m
    return m


declare(Method(
    name="gmean", summary="Geometric mean ``exp(mean(ln x))``.",
    reduction="moments", kernel="logstats.stats.finalize:gmean_fields", spread=False,
    fields=(Field("gmean", unit=True),), shape="single",
    reference="scipy.stats.gmean",
))
declare(Method(
    name="gsd", summary="Geometric standard deviation ``exp(sd(ln x))``, ``ddof=1`` (as scipy.stats.gstd).",
    reduction="moments", kernel="logstats.stats.finalize:gsd_fields",
    fields=(Field("gsd", display="factor"),), params=(_DDOF,), shape="single",
    reference="scipy.stats.gstd (ddof=1)",
))
declare(Method(
    name="gcv", summary="Geometric coefficient of variation ``sqrt(exp(s²) − 1)``, s the SD of ln x.",
    reduction="moments", kernel="logstats.stats.finalize:gcv_fields",
    fields=(Field("gcv"),), params=(_DDOF,), shape="single",
    reference="Kirkwood (1979) formula sqrt(exp(s^2)-1)",
))
declare(Method(
    name="moments",
    summary="Sufficient statistics of the logs (combinable with ``logstats.combine_moments``).",
    reduction="moments", kernel="logstats.stats.finalize:moment_fields",
    fields=(Field("n", "int", display="count"), Field("mean_log"), Field("m2_log"),
            *_f("n_missing n_nonpositive n_censored", "int", display="count")),
    reference="mpmath at 50 digits (two-pass sums of the logs)",
    notes="``m2_log`` is the sum of squared deviations of ln x from ``mean_log``. Results of the same "
          "shape merge exactly with :func:`logstats.combine_moments` (Chan, Golub & LeVeque 1979).",
))
declare(Method(
    name="summary", summary="Log-scale summary: counts, geometric mean, GSD, GCV and the t interval of "
                            "the geometric mean.",
    reduction="moments", kernel="logstats.stats.estimate:summary_fields",
    fields=(*_COUNTS, Field("gmean", unit=True), Field("gsd", display="factor"), Field("gcv"), *_CI,
            Field("ci_factor", display="factor")),
    params=(_LEVEL, _DDOF,
            Param("linear", False, "Add the linear-scale ``median``, ``mean`` and ``sd`` (ddof) of the same "
                                   "values (the median costs a sort). Dask-backed data are loaded.", "bool"),
            Param("censored_method", "mle", "With ``detection_limit``: ``\"mle\"`` (censored log-normal "
                                            "MLE), ``\"ros\"`` or ``\"km\"``.", "str"),
            _LIMIT),
    censored="logstats.stats.censored:censored_summary",
    censored_fields=_CENSORED,
    reference="scipy.stats.gmean, scipy.stats.gstd, scipy.stats.ttest_1samp(ln x).confidence_interval()",
    notes="``ci_low``/``ci_high`` is the t interval of the geometric mean, ``exp(ȳ ± t·s/√n)``, and "
          "``ci_factor`` its ×/÷ half-width; ``gsd``/``gcv`` use ``ddof`` (default 1).",
    example='>>> import pandas as pd, logstats\n'
            '>>> df = pd.DataFrame({"arm": ["a", "a", "b", "b"], "x": [1.0, 4.0, 2.0, 8.0]})\n'
            '>>> df.logstats.summary(by="arm")[["n", "gmean", "gsd"]].round(3)\n'
            '     n  gmean    gsd\narm\na    2    2.0  2.665\nb    2    4.0  2.665',
))
LINEAR = Method(
    name="linear", summary="Linear-scale median, mean and SD of the values the log statistics use.",
    reduction="values", kernel="logstats.stats.estimate:linear_fields",
    fields=(Field("median", unit=True), Field("mean", unit=True), Field("sd", unit=True)),
    params=(_DDOF,), dask="loads", reference="numpy.median, numpy.mean, numpy.std(ddof=1)",
)
declare(Method(
    name="fit", summary="Log-normal maximum-likelihood fit, left-censored at detection limits.",
    reduction="moments", kernel="logstats.stats.finalize:closed_form_fields",
    fields=(Field("mu"), Field("sigma"), Field("gmean", unit=True), Field("gsd", display="factor"),
            Field("n", "int", display="count"), Field("n_censored", "int", display="count"),
            Field("loglik"), Field("converged", "bool"), Field("se_mu"), Field("se_sigma"),
            Field("n_iter", "int", display="count"), *_f("n_missing n_nonpositive", "int", display="count"),
            Field("status", "str", display="text", choices=FIT_STATUS, when_poisoned="reason")),
    params=(_LIMIT, Param("max_iter", 100, "Most Newton iterations for censored groups.", "int"),
            Param("tol", 1e-10, "Convergence threshold of the Newton step (scale free).", "float")),
    censored="logstats.stats.finalize:censored_fit_fields",
    reference="scipy.stats.lognorm.fit(floc=0) and scipy.stats.CensoredData with a tight optimizer; "
              "Cohen (1961) lambda table",
    notes="``mu``, ``sigma`` are the MLE of the mean and SD of ln x (so ``ddof=0``), ``gmean`` = "
          "exp(mu), ``gsd`` = exp(sigma); ``n`` counts values in the fit, censored included; ``loglik`` "
          "is on the original scale. Without a detection limit the fit is the closed form from the "
          "log-moments (lazy for dask); censored groups are fitted together by Newton's method with "
          "step halving, and a wholly censored group gets NaN with its ``status``.",
))
declare(Method(
    name="scale_check", summary="Linear or log scale? Normal and log-normal fitted to the same values.",
    reduction="values", kernel="logstats.stats.scale:scale_check",
    fields=(Field("aic_normal"), Field("aic_lognormal"),
            Field("preferred", "str", display="text", choices=("log", "linear", "undecided"),
                  when_poisoned="none"),
            Field("normality_p_linear", display="p"), Field("normality_p_log", display="p"),
            Field("mean", unit=True), Field("gmean", unit=True), Field("mean_ratio"),
            Field("expected_ratio"), Field("delta_aic"),
            Field("normality_test", "str", display="text", when_poisoned="none",
                  choices=("shapiro_wilk", "dagostino_pearson")), Field("skew_linear"), Field("skew_log"),
            *_COUNTS, Field("boxcox_lambda"), Field("boxcox_ci_low"), Field("boxcox_ci_high")),
    params=(Param("margin", 2.0, "A scale is preferred only when its AIC is lower by at least this much "
                                 "(|delta_aic| < margin gives \"undecided\"; 2 is the usual rule of thumb).",
                  "float"),
            Param("pooled", False, "One verdict for all groups of ``by`` together: each group keeps its own "
                                   "location, one common spread and one common Box-Cox power; adds the "
                                   "mean-spread law across groups (``spread_slope`` and its interval).",
                  "bool"),
            _LEVEL, _LIMIT),
    censored="logstats.stats.scale:scale_check", censored_fields=_CENSORED,
    variant=("pooled", "scale_check_pooled"),
    dask="loads",
    reference="scipy.stats.norm.logpdf / lognorm.logpdf sums (AIC), scipy.stats.shapiro, "
              "scipy.stats.normaltest",
    notes="``aic_normal`` and ``aic_lognormal`` are both for the data on the original scale (the "
          "log-normal likelihood includes the Jacobian −Σ ln x). ``normality_p_linear`` / "
          "``normality_p_log`` are Shapiro–Wilk p-values (D'Agostino–Pearson beyond 5000 values, named "
          "in ``normality_test``); ``mean_ratio`` = mean / gmean and ``expected_ratio`` = exp(s²/2) "
          "(s with ddof=1), the ratio log-normality predicts. ``preferred`` is ``\"log\"`` when "
          "``delta_aic`` = aic_normal − aic_lognormal ≥ ``margin``, ``\"linear\"`` when it is ≤ −margin, "
          "else ``\"undecided\"``. ``boxcox_lambda`` is the maximum-likelihood Box-Cox power (Box & Cox "
          "1964) with its profile-likelihood interval at ``confidence_level``: 0 supports logs, 1 the "
          "linear scale, 1/2 or 1/3 a power in between.",
))
SCALE_POOLED = Method(
    name="scale_check_pooled", summary="One scale verdict across groups, and the mean-spread law.",
    reduction="values", kernel="logstats.stats.scale:scale_check_pooled",
    fields=(Field("aic_normal"), Field("aic_lognormal"), Field("delta_aic"),
            Field("preferred", "str", display="text", choices=("log", "linear", "undecided"),
                  when_poisoned="none"),
            Field("boxcox_lambda"), Field("boxcox_ci_low"), Field("boxcox_ci_high"),
            Field("spread_slope"), Field("spread_slope_ci_low"), Field("spread_slope_ci_high"),
            Field("implied_power"), Field("spread_n_groups", "int", display="count"),
            Field("n_groups", "int", display="count"), *_COUNTS, *_CENSORED,
            Field("note", "str", display="text")),
    params=(Param("margin", 2.0, "", "float"), _LEVEL, _LIMIT),
    censored="logstats.stats.scale:scale_check_pooled", dask="loads", pools_groups=True,
    reference="statsmodels OLS with group dummies (llf); scipy.stats.linregress (spread law)",
)
declare(Method(
    name="lognormal_mean", summary="Arithmetic mean implied by a log-normal, ``exp(ȳ + s²/2)``, with a CI.",
    reduction="moments", kernel="logstats.stats.finalize:lognormal_mean_fields",
    values_kernel="logstats.stats.finalize:lognormal_mean_values", values_when=("method", ("bootstrap",)),
    fields=(Field("estimate", unit=True), *_CI,
            Field("method", "str", display="text", constant=True,
                  choices=("cox", "modified_cox", "gci", "bootstrap", "land")),
            *_COUNTS),
    params=(Param("method", "cox", "``\"cox\"``, ``\"modified_cox\"``, ``\"gci\"``, ``\"bootstrap\"`` or "
                                   "``\"land\"``.", "str"),
            _LEVEL,
            Param("random_state", None, "Seed for the Monte Carlo methods (``\"gci\"``, ``\"bootstrap\"``).",
                  "Any"),
            Param("n_draws", 10000, "Monte Carlo draws or bootstrap resamples per group.", "int"),
            _LIMIT),
    dask="whole",
    censored="logstats.stats.censored:censored_lognormal_mean",
    censored_fields=_CENSORED,
    reference="Olsson (2005) worked example (Cox); Krishnamoorthy & Mathew (2003) GCI; simulated coverage",
    notes="``\"cox\"``: Land 1972, Zhou & Gao 1997; ``\"modified_cox\"``: t quantile (Armstrong 1992, "
          "Olsson 2005); ``\"gci\"``: generalized CI (Krishnamoorthy & Mathew 2003); ``\"bootstrap\"``: "
          "BCa (needs the values: dask-backed data are loaded). Monte Carlo methods are reproducible for "
          "a given ``random_state``; GCI draws are laid out over all groups, so a dask result equals the "
          "in-memory one.",
))
_TAIL_CAUTION = ("Upper-tail results are often compared with regulatory, exposure or specification "
                 "limits. " + _CAUTION)
declare(Method(
    name="quantile", summary="Log-normal percentile ``exp(ȳ + z_q·s)`` with its exact confidence interval.",
    reduction="moments", kernel="logstats.stats.finalize:quantile_fields",
    fields=(Field("q", constant=True), Field("estimate", unit=True), *_CI, *_COUNTS),
    params=(Param("q", 0.95, "Probability in (0, 1), or a list of them (one row per q, index level ``q``).",
                  "float | list[float]"), _LEVEL, _LIMIT),
    censored="logstats.stats.tails:quantile_censored", censored_fields=_CENSORED, expand="q",
    reference="scipy.stats.nct.ppf (non-central t); simulated coverage",
    notes="s with ddof=1; the interval is exact and equal-tailed, from the non-central t with n − 1 "
          "degrees of freedom and non-centrality z_q·√n. With ``detection_limit`` it comes from the "
          "censored MLE and is approximate. " + _TAIL_CAUTION,
))
declare(Method(
    name="tolerance_limit", summary="Log-normal tolerance limits: a bound that covers ``coverage`` of the "
                                    "population with ``confidence_level`` confidence.",
    reduction="moments", kernel="logstats.stats.finalize:tolerance_fields",
    fields=(Field("tolerance_low", unit=True), Field("tolerance_high", unit=True), *_COUNTS),
    params=(Param("coverage", 0.95, "Share of the population to cover, in (0, 1).", "float"),
            Param("side", "upper",
                  "``\"upper\"``, ``\"lower\"`` or ``\"both\"`` (NaN on the side not asked).",
                  "str"),
            _LEVEL, _LIMIT),
    censored="logstats.stats.tails:tolerance_limit_censored", censored_fields=_CENSORED,
    reference="scipy.stats.nct (one-sided factors); Owen/Natrella and Berthouex & Brown Table 21.1 "
              "(two-sided); simulated coverage",
    notes="One-sided limits use the exact non-central t factor; two-sided limits the exact "
          "Wald-Wolfowitz / Odeh-Owen integral computed numerically. " + _TAIL_CAUTION,
))
declare(Method(
    name="exceedance", summary="Estimated share of the population above ``limit``, with its exact interval.",
    reduction="values", kernel="logstats.stats.finalize:exceedance_values",
    fields=(Field("limit", unit=True), Field("fraction"), Field("ci_low"), Field("ci_high"),
            Field("n_exceed", "int", display="count"), *_COUNTS),
    params=(Param("limit", None, "The limit in data units: a number, or a column / variable (label) or "
                                 "aligned "
                                 "array holding one limit per group.", "Any"), _LEVEL, _LIMIT),
    censored="logstats.stats.finalize:exceedance_values", censored_fields=_CENSORED, row_params=("limit",),
    positional=("limit",),
    dask="loads",
    reference="scipy.stats.nct.cdf inverted in the non-centrality (brentq per group); simulated coverage",
    notes="``fraction`` = 1 − Φ((ln L − ȳ)/s), the plug-in estimate (s with ddof=1); ``ci_low``/``ci_high`` "
          "invert the non-central t exactly (equal tails); ``n_exceed`` counts observed values above the "
          "limit (non-detects count as not above). " + _TAIL_CAUTION,
))
declare(Method(
    name="variance_components",
    summary="Variance of the logs split into one component per nesting level and the within-unit part.",
    reduction="values", kernel="logstats.stats.finalize:variance_components_values",
    fields=(*_COUNTS, Field("design_effect"), Field("n_effective")),
    params=(Param("nested", None, "Nesting levels, outermost first (column labels / coordinate names), e.g. "
                                  "``[\"day\", \"well\"]``; an inner label is read within its outer level.",
                  "list"), _LEVEL),
    row_params=("nested_codes",), dask="loads",
    reference="statsmodels MixedLM (REML) on balanced designs; ANOVA quadratic forms (Searle, Casella & "
              "McCulloch 1992) on unbalanced ones; simulated coverage",
    notes="Per group of ``by``, for each level L: ``var_L`` (variance of the natural logs due to that "
          "level), ``gsd_L`` = exp(sqrt(var_L)), ``frac_L`` (share of the total), ``n_L`` (units at that "
          "level), ``var_L_ci_low``/``var_L_ci_high``; the same for ``within``; then ``n``, "
          "``design_effect`` and ``n_effective`` = n / design_effect. ANOVA (method of moments) "
          "estimators for the unbalanced nested classification; negative estimates are set to 0 and "
          "counted in ``n_truncated``. Intervals: exact chi-squared (within), modified large-sample "
          "(Graybill & Wang 1980) for the levels. Planning from these components: :func:`logstats.plan`.",
))
declare(Method(
    name="fold_change", summary="Ratio of geometric means of every level of ``by`` against ``reference``.",
    reduction="compare", kernel="logstats.stats.compare:fold_change_codes",
    fields=(Field("ratio", display="ratio"), Field("ci_low", display="ratio"),
            Field("ci_high", display="ratio"), Field("p_value", display="p"),
            Field("p_adjusted", display="p"), *_f("n n_reference", "int", display="count"),
            Field("log2_ratio"), Field("statistic"), Field("df"),
            *_f("n_cells n_cells_reference n_missing n_nonpositive n_missing_reference "
                "n_nonpositive_reference", "int", display="count"),
            Field("unit", "str", display="text", choices=("value", "replicate"))),
    reference="scipy.stats.ttest_ind(ln x, equal_var=False).confidence_interval(); ttest_rel; "
              "statsmodels ttost_ind; Armitage, Berry & Matthews p. 311",
    dask="merge",
))
declare(Method(
    name="log", summary="Same-shape log transform.", reduction="transform",
    kernel="logstats.core.transform:log_values", fields=(),
    params=(Param("base", "e", "``\"e\"``, 2 or 10.", "Any"),),
))
declare(Method(
    name="exp", summary="Exact inverse of ``log``.", reduction="transform",
    kernel="logstats.core.transform:exp_values", fields=(),
    params=(Param("base", "e", "``\"e\"``, 2 or 10.", "Any"),),
))


#: Methods that public methods switch to through a keyword (``variant``), not public by themselves.
VARIANTS: dict[str, Method] = {"scale_check_pooled": SCALE_POOLED}

#: Every count field of every method (integers in every container).
INT_FIELDS = frozenset(f.name for m in (*METHODS.values(), LINEAR, SCALE_POOLED)
                       for f in m.fields + m.censored_fields if f.dtype == "int") | {"n_no_replicate",
                                                                                     "n_unpaired"}


def resolve(method: Method, params: dict[str, Any]) -> Method:
    """The method a call runs: its ``variant`` when the switching keyword is true."""
    if method.variant is not None and params.get(method.variant[0]):
        return VARIANTS[method.variant[1]]
    return method


def known_field(name: str) -> Field:
    """A field a kernel returns beyond its method's declaration: typed as any method declares it."""
    for m in (*METHODS.values(), LINEAR):
        for f in m.fields + m.censored_fields:
            if f.name == name:
                return Field(name, f.dtype, unit=f.unit, display=f.display)
    return Field(name, "int", display="count") if name in INT_FIELDS else Field(name)


def get(name: str) -> Method:
    try:
        return METHODS[name]
    except KeyError:
        raise ValueError(f"unknown method {name!r}; declared: {sorted(METHODS)!r}") from None


def statistics() -> list[Method]:
    """The methods that reduce (everything but the same-shape transforms)."""
    return [m for m in METHODS.values() if m.reduction != "transform"]


def dtype_of(method: Method, name: str) -> str:
    return method.field(name).dtype


def caution() -> str:
    return _CAUTION


def ordered(names: Sequence[str], method: Method) -> list[str]:
    """Field names in declaration order, extra (undeclared) ones after them."""
    declared = [f.name for f in method.fields + method.censored_fields]
    first = [n for n in declared if n in names]
    return first + [n for n in names if n not in declared]


_ = field  # (dataclasses.field kept for declarations that need mutable defaults)
