"""Variance components of nested designs and replicate-level power (logstats.stats.nested, plan).

Outside references: statsmodels MixedLM (REML) for balanced designs, the balanced and unbalanced
one-way ANOVA estimators by hand, Searle's expectation of a quadratic form for the unbalanced
coefficients, Kish's design effect, statsmodels TTestIndPower and Cohen's power table for the power,
and simulation for interval coverage and for the power. All data are invented (simulated).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from logstats.accessors.planning import plan
from logstats.stats.nested import plan_power, variance_components

ZERO = np.zeros


def _nested_data(rng, groups, sizes, sds, drop=0.0, mu=1.0):
    """Balanced nested logs (then rows dropped at random): returns y, group codes, level codes."""
    total = int(np.prod(sizes))
    g = np.repeat(np.arange(groups), total)
    level_codes = []
    unit = g.copy()
    y = np.full(g.size, mu)
    inner = total
    for size, sd in zip(sizes[:-1], sds[:-1]):
        inner //= size
        code = np.tile(np.repeat(np.arange(size), inner), groups * total // (size * inner))
        unit = unit * size + code
        y = y + rng.normal(0.0, sd, int(unit.max()) + 1)[unit]
        level_codes.append(code)
    y = y + rng.normal(0.0, sds[-1], g.size)
    keep = rng.random(g.size) >= drop
    return y[keep], g[keep], [c[keep] for c in level_codes]


def _mixedlm(y, levels):
    """REML fit of statsmodels MixedLM: first level as groups, the others as nested variance components."""
    import statsmodels.formula.api as smf

    # a variance component's labels are read within the group (l0) only: make inner labels unique
    full = [levels[0]]
    for c in levels[1:]:
        full.append(full[-1] * (int(c.max()) + 1) + c)
    data = pd.DataFrame({"y": y, **{f"l{i}": c for i, c in enumerate(full)}})
    vc = {f"l{i}": f"0 + C(l{i})" for i in range(1, len(levels))}
    model = smf.mixedlm("y ~ 1", data, groups="l0", re_formula="1", vc_formula=vc)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = model.fit(reml=True, method="bfgs", gtol=1e-12)
    return [float(res.cov_re.iloc[0, 0]), *map(float, res.vcomp), float(res.scale)]


# --- reference: statsmodels MixedLM (REML); ANOVA = REML for balanced data with no negative estimate ---

@pytest.mark.parametrize("sizes,sds", [((6, 4, 5), (0.5, 0.3, 0.4)), ((5, 3, 2, 4), (0.4, 0.3, 0.2, 0.3))])
def test_balanced_equals_mixedlm_reml(sizes, sds):
    rng = np.random.default_rng(11)
    y, g, levels = _nested_data(rng, 1, sizes, sds)
    names = [f"l{i}" for i in range(len(levels))]
    out = variance_components(np.exp(y), g, 1, levels, names=names)
    assert out["n_truncated"][0] == 0
    ref = _mixedlm(y, levels)  # statsmodels MixedLM, REML, nested variance components
    ours = [out[f"var_{nm}"][0] for nm in [*names, "within"]]
    np.testing.assert_allclose(ours, ref, rtol=1e-6, atol=1e-9)
    for i, nm in enumerate(names):
        assert out[f"n_{nm}"][0] == np.prod(sizes[: i + 1])


# --- reference: balanced one-way ANOVA by hand, var_between = (MSB - MSW) / m ---

def test_one_way_balanced_hand_formula_all_groups():
    rng = np.random.default_rng(2)
    a, m, G = 7, 5, 30
    y = rng.normal(0, 0.4, (G, a, 1)) + rng.normal(0, 0.6, (G, a, m))
    g = np.repeat(np.arange(G), a * m)
    well = np.tile(np.repeat(np.arange(a), m), G)
    out = variance_components(np.exp(y.ravel()), g, G, [well], names=["well"])
    means = y.mean(axis=2)
    msb = m * ((means - means.mean(axis=1, keepdims=True)) ** 2).sum(axis=1) / (a - 1)
    msw = ((y - means[..., None]) ** 2).sum(axis=(1, 2)) / (a * (m - 1))
    raw = (msb - msw) / m  # one-way random-effects ANOVA estimator (textbook, e.g. Searle et al. 1992 ch. 3)
    np.testing.assert_allclose(out["var_well"], np.maximum(raw, 0), rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(out["var_within"], msw, rtol=1e-12)
    assert (out["n_truncated"] == (raw < 0)).all()
    total = np.maximum(raw, 0) + msw
    icc = np.maximum(raw, 0) / total
    np.testing.assert_allclose(out["frac_well"], icc, rtol=1e-12)
    # Kish (1965) design effect of cluster sampling, 1 + (m - 1) * ICC, and n / deff
    np.testing.assert_allclose(out["design_effect"], 1 + (m - 1) * icc, rtol=1e-12)
    np.testing.assert_allclose(out["n_effective"], a * m / (1 + (m - 1) * icc), rtol=1e-12)
    np.testing.assert_allclose(out["gsd_well"], np.exp(np.sqrt(out["var_well"])), rtol=1e-15)
    # balanced one-fold MLS interval, Burdick & Graybill (1992; chapter from memory), coded apart
    alpha = 0.025
    f1, f2 = a - 1, a * (m - 1)
    g1, h1 = 1 - 1 / stats.f.isf(alpha, f1, 1e12), 1 / stats.f.ppf(alpha, f1, 1e12) - 1
    g2, h2 = 1 - 1 / stats.f.isf(alpha, f2, 1e12), 1 / stats.f.ppf(alpha, f2, 1e12) - 1
    fa, fb = stats.f.isf(alpha, f1, f2), stats.f.ppf(alpha, f1, f2)
    g12 = ((fa - 1) ** 2 - g1**2 * fa**2 - h2**2) / fa
    h12 = ((1 - fb) ** 2 - h1**2 * fb**2 - g2**2) / fb
    vl = g1**2 * msb**2 + h2**2 * msw**2 + g12 * msb * msw
    vu = h1**2 * msb**2 + g2**2 * msw**2 + h12 * msb * msw
    np.testing.assert_allclose(out["var_well_ci_low"], np.maximum((msb - msw - np.sqrt(vl)) / m, 0),
                               rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(out["var_well_ci_high"], np.maximum((msb - msw + np.sqrt(vu)) / m, 0),
                               rtol=1e-7, atol=1e-12)
    # exact chi-squared interval of the within variance (textbook)
    np.testing.assert_allclose(out["var_within_ci_low"], msw * f2 / stats.chi2.isf(0.025, f2), rtol=1e-12)
    np.testing.assert_allclose(out["var_within_ci_high"], msw * f2 / stats.chi2.ppf(0.025, f2), rtol=1e-12)


# --- reference: unbalanced one-way, n0 = (N - sum n_i^2 / N) / (a - 1) (Snedecor & Cochran; Sokal &
#     Rohlf, nested anova with unequal n; from memory) ---

def test_one_way_unbalanced_n0():
    rng = np.random.default_rng(5)
    n_i = np.array([2, 7, 3, 12, 5, 1, 9])
    well = np.repeat(np.arange(n_i.size), n_i)
    y = rng.normal(0, 0.5, n_i.size)[well] + rng.normal(0, 0.3, well.size)
    N, a = n_i.sum(), n_i.size
    means = np.bincount(well, y) / n_i
    msb = (n_i * (means - y.mean()) ** 2).sum() / (a - 1)
    msw = ((y - means[well]) ** 2).sum() / (N - a)
    n0 = (N - (n_i**2).sum() / N) / (a - 1)
    out = variance_components(np.exp(y), ZERO(N, dtype=int), 1, [well], names=["well"])
    np.testing.assert_allclose(out["var_well"], max((msb - msw) / n0, 0), rtol=1e-12)
    np.testing.assert_allclose(out["var_within"], msw, rtol=1e-12)
    icc = out["frac_well"][0]
    m_w = (n_i**2).sum() / N  # size-weighted mean cluster size: exact design effect of the plain mean
    np.testing.assert_allclose(out["design_effect"], 1 + (m_w - 1) * icc, rtol=1e-12)


# --- reference: Searle's expectation of a quadratic form, E(y'Ay) = tr(A V) + mu'A mu (Searle 1971,
#     Linear Models, Theorem 1 of ch. 2; from memory), with dense matrices for an unbalanced design ---

def _dense_anova(y, levels):
    n = y.size
    units = [np.zeros(n, dtype=int)]
    for c in levels:
        _, u = np.unique(np.stack([units[-1], c], axis=1), axis=0, return_inverse=True)
        units.append(u.ravel())
    units.append(np.arange(n))

    def proj(u):
        z = (u[:, None] == np.arange(u.max() + 1)[None, :]).astype(float)
        return z @ np.linalg.solve(z.T @ z, z.T), z

    P, Z = zip(*(proj(u) for u in units))
    L = len(levels)
    A = [P[i] - P[i - 1] for i in range(1, L + 2)]  # sums of squares of levels 1..L and within
    V = [Z[j] @ Z[j].T for j in range(1, L + 1)] + [np.eye(n)]
    coef = np.array([[np.trace(a @ v) for v in V] for a in A])  # E(SS_i) = sum_j coef_ij var_j
    ss = np.array([y @ a @ y for a in A])
    return np.linalg.solve(coef, ss)


@pytest.mark.parametrize("sizes,sds,drop", [((5, 4, 6), (0.6, 0.4, 0.3), 0.45),
                                           ((4, 3, 3, 4), (0.6, 0.5, 0.4, 0.3), 0.4)])
def test_unbalanced_coefficients_match_quadratic_form_expectations(sizes, sds, drop):
    rng = np.random.default_rng(8)
    y, g, levels = _nested_data(rng, 1, sizes, sds, drop=drop)
    names = [f"l{i}" for i in range(len(levels))]
    out = variance_components(np.exp(y), g, 1, levels, names=names)
    ref = _dense_anova(y, levels)
    assert (ref > 0).all() and out["n_truncated"][0] == 0
    ours = [out[f"var_{nm}"][0] for nm in [*names, "within"]]
    np.testing.assert_allclose(ours, ref, rtol=1e-9)


def test_unbalanced_differs_from_reml_but_close():
    # statsmodels MixedLM (REML): for unbalanced data ANOVA and REML differ; both estimate the same thing
    rng = np.random.default_rng(3)
    y, g, levels = _nested_data(rng, 1, (8, 4, 6), (0.5, 0.3, 0.4), drop=0.3)
    out = variance_components(np.exp(y), g, 1, levels, names=["day", "well"])
    ref = _mixedlm(y, levels)
    ours = [out["var_day"][0], out["var_well"][0], out["var_within"][0]]
    np.testing.assert_allclose(ours, ref, rtol=0.25)


# --- vectorisation over groups, label handling, counts ---

def test_groups_at_once_equal_groups_one_by_one_and_labels_read_within_outer():
    rng = np.random.default_rng(4)
    y, g, levels = _nested_data(rng, 5, (4, 3, 5), (0.4, 0.3, 0.5), drop=0.3)
    # well codes 0..2 repeat across days and groups: read within their day and group
    whole = variance_components(np.exp(y), g, 5, levels, names=["day", "well"])
    for k in range(5):
        sel = g == k
        one = variance_components(np.exp(y[sel]), ZERO(sel.sum(), dtype=int), 1,
                                  [c[sel] for c in levels], names=["day", "well"])
        for key, arr in one.items():
            np.testing.assert_allclose(whole[key][k], arr[0], rtol=1e-10, err_msg=key)
        # unique labels per unit give the same answer as the repeated ones
        uniq = levels[0][sel] * 100 + levels[1][sel] * 7 + 1000
        again = variance_components(np.exp(y[sel]), ZERO(sel.sum(), dtype=int), 1,
                                    [levels[0][sel] + 50, uniq], names=["day", "well"])
        np.testing.assert_allclose(again["var_well"], one["var_well"], rtol=1e-12)
        assert again["n_well"][0] == len(set(zip(levels[0][sel], levels[1][sel])))


def test_bad_values_are_counted_and_policies():
    x = np.exp(np.array([0.1, 0.3, -0.2, 0.5, 0.9, 0.7, 1.0, -0.1, 0.2, 0.0, 0.4, 0.6]))
    x[1], x[5], x[7] = np.nan, 0.0, -3.0
    well = np.repeat([0, 1, 2, 3], 3)
    well[10] = -1  # missing label
    g = np.array([0] * 6 + [1] * 6)
    g[11] = -1  # no group: ignored, not counted
    x0, w0 = x.copy(), well.copy()
    out = variance_components(x, g, 2, [well], names=["well"])
    np.testing.assert_array_equal(x, x0)  # inputs never mutated
    np.testing.assert_array_equal(well, w0)
    assert list(out["n_missing"]) == [1, 0] and list(out["n_nonpositive"]) == [1, 1]
    assert list(out["n_unlabelled"]) == [0, 1] and list(out["n"]) == [4, 3]
    assert np.isfinite(out["var_within"]).all()
    nan = variance_components(x, g, 2, [well], names=["well"], nonpositive="nan")
    assert np.isnan(nan["var_well"]).all() and list(nan["n"]) == [4, 3]
    strict = variance_components(x, g, 2, [well], names=["well"], skipna=False)
    assert np.isnan(strict["var_within"][0]) and np.isfinite(strict["var_within"][1])
    assert strict["n_missing"][0] == 1 and strict["n_well"][0] == 2


def test_degenerate_groups_give_nan_without_warnings():
    # group 0 empty, 1 a single value, 2 one cell per well (within not estimable), 3 one well (no df),
    # 4 constant values, 5 fine
    x = np.exp(np.r_[0.3, 0.1, 0.2, 0.3, 0.1, 0.2, 0.3, 0.5, 0.5, 0.5, 0.5, 0.1, 0.2, 0.4, 0.8])
    g = np.r_[1, 2, 2, 2, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5]
    well = np.r_[0, 0, 1, 2, 0, 0, 0, 0, 0, 1, 1, 0, 0, 1, 1]
    out = variance_components(x, g, 6, [well], names=["well"])
    for key in ("var_well", "var_within", "frac_well", "design_effect"):
        assert np.isnan(out[key][[0, 1, 2]]).all(), key
    assert np.isnan(out["var_well"][3]) and np.isfinite(out["var_within"][3])
    assert out["var_well"][4] == 0 and out["var_within"][4] == 0 and np.isnan(out["frac_well"][4])
    assert np.isfinite(out["var_well"][5]) and out["n"][0] == 0 and out["n_well"][2] == 3


def test_truncation_counted():
    # between-well spread smaller than expected from the cells: ANOVA estimate negative -> 0
    y = np.r_[0.0, 1.0, 0.0, 1.0, 0.1, 0.9, 0.05, 0.95]
    well = np.repeat([0, 1, 2, 3], 2)
    out = variance_components(np.exp(y), ZERO(8, dtype=int), 1, [well], names=["well"])
    assert out["var_well"][0] == 0 and out["n_truncated"][0] == 1 and out["frac_within"][0] == 1


@pytest.mark.parametrize("kwargs,error,match", [
    ({"names": ["well", "day"]}, ValueError, "names has 2"),
    ({"names": ["within"]}, ValueError, "within"),
    ({"names": [3]}, TypeError, "strings"),
    ({"confidence_level": 1.5}, ValueError, "confidence_level"),
    ({"nonpositive": "zero"}, ValueError, "nonpositive"),
])
def test_bad_arguments(kwargs, error, match):
    x = np.exp(np.arange(6.0))
    args = {"names": ["well"], **kwargs}
    with pytest.raises(error, match=match):
        variance_components(x, ZERO(6, dtype=int), 1, [np.repeat([0, 1], 3)], **args)


def test_bad_nested_codes():
    x = np.exp(np.arange(6.0))
    with pytest.raises(ValueError, match=r"nested_codes\[0\] has shape"):
        variance_components(x, ZERO(6, dtype=int), 1, [np.zeros(5, dtype=int)], names=["well"])
    with pytest.raises(TypeError, match="integers"):
        variance_components(x, ZERO(6, dtype=int), 1, [np.zeros(6)], names=["well"])
    with pytest.raises(ValueError, match="empty"):
        variance_components(x, ZERO(6, dtype=int), 1, [], names=[])
    with pytest.raises(ValueError, match=r"\+inf"):
        variance_components(np.r_[x[:5], np.inf], ZERO(6, dtype=int), 1, [np.repeat([0, 1], 3)],
                            names=["well"])


# --- simulated coverage of the intervals (all replicates as groups in one call) ---
# Measured with 4000 replicates per row (seed 0), nominal 0.95; day / well / within:
#   balanced 6x4x5, sds (0.5, 0.3, 0.4):             0.954 0.949 0.956
#   balanced 6x4x5, sds (0.1, 0.1, 0.5):             0.952 0.951 0.956
#   6x4x5 with 40% of cells dropped, (0.5, 0.3, 0.4): 0.950 0.944 0.948
#   6x4x5 with 40% dropped, (0.1, 0.1, 0.5):          0.953 0.957 0.948
#   4x3x10 with 50% dropped, (0.5, 0.3, 0.4):         0.956 0.940 0.950
#   true var_day = 0 (bounds clipped at 0):            0.97-0.98 for day

@pytest.mark.parametrize("sizes,sds,drop", [((6, 4, 5), (0.5, 0.3, 0.4), 0.0),
                                           ((6, 4, 5), (0.1, 0.1, 0.5), 0.4),
                                           ((4, 3, 10), (0.5, 0.3, 0.4), 0.5)])
def test_interval_coverage(sizes, sds, drop):
    R = 3000
    rng = np.random.default_rng(20240615)
    y, g, levels = _nested_data(rng, R, sizes, sds, drop=drop)
    out = variance_components(np.exp(y), g, R, levels, names=["day", "well"])
    se = np.sqrt(0.95 * 0.05 / R)
    for key, sd in zip(["day", "well", "within"], sds):
        ok = np.isfinite(out[f"var_{key}_ci_low"])
        cov = np.mean((out[f"var_{key}_ci_low"][ok] <= sd**2) & (sd**2 <= out[f"var_{key}_ci_high"][ok]))
        assert abs(cov - 0.95) < 4 * se + 0.01, (key, cov)  # MLS is approximate when unbalanced


# --- power: statsmodels TTestIndPower, Cohen's table, simulation ---

def test_plan_power_matches_statsmodels():
    from statsmodels.stats.power import TTestIndPower

    k = np.arange(2, 21)[:, None]
    m = np.array([1, 2, 5, 10, 20, 50, 100, 200, 500])[None, :]
    for ratio, vb, vw, alpha in [(1.5, 0.02, 0.3, 0.05), (0.7, 0.1, 0.05, 0.01), (3.0, 0.0, 1.0, 0.1)]:
        ours = plan_power(ratio, vb, vw, k, m, alpha)
        v = vb + vw / m
        ref = np.array([[TTestIndPower().power(effect_size=np.log(ratio) / np.sqrt(v[0, j]), nobs1=int(kk),
                                               alpha=alpha, ratio=1.0, alternative="two-sided")
                         for j in range(m.shape[1])] for kk in k[:, 0]])
        np.testing.assert_allclose(ours, ref, atol=1e-6)  # statsmodels TTestIndPower (non-central t)


def test_plan_cohen_table():
    # Cohen (1988), Table 2.4.1 (from memory): d = 0.5, two-sided alpha 0.05, 64 per group -> power 0.80
    grid = plan(np.exp(0.5), var_between=1.0, var_within=0.0, replicates=[64], per_replicate=[1])
    assert abs(grid["power"].iloc[0] - 0.80) < 0.005


def test_plan_power_simulated():
    # simulation: nested data, t test on replicate mean logs (scipy.stats.ttest_ind); binomial error
    rng = np.random.default_rng(7)
    R, k, m, ratio, vb, vw = 20000, 4, 8, 1.6, 0.03, 0.2
    def replicate_means():
        return rng.normal(0, np.sqrt(vb), (R, k)) + rng.normal(0, np.sqrt(vw), (R, k, m)).mean(axis=2)

    a = replicate_means()
    b = np.log(ratio) + replicate_means()
    p = stats.ttest_ind(b, a, axis=1).pvalue
    sim = np.mean(p < 0.05)
    want = plan_power(ratio, vb, vw, np.array([k]), np.array([m]), 0.05)[0]
    assert abs(sim - want) < 4 * np.sqrt(want * (1 - want) / R)


def test_plan_frame():
    grid = plan(1.5, var_between=0.02, var_within=0.3)
    assert list(grid.columns[:3]) == ["replicates", "per_replicate", "power"]
    assert {"meets_target", "var_replicate_mean", "power_limit"} <= set(grid.columns)
    assert len(grid) == 19 * 9 and grid["replicates"].min() == 2 and grid["per_replicate"].max() == 500
    best = grid.attrs["smallest"]
    hits = grid[grid["power"] >= 0.8]
    first = hits.sort_values(["replicates", "per_replicate"]).iloc[0]
    assert (best["replicates"], best["per_replicate"]) == (first["replicates"], first["per_replicate"])
    # the cost trade-off: power never exceeds the infinitely-many-cells limit and approaches it
    assert (grid["power"] <= grid["power_limit"] + 1e-12).all()
    at500 = grid[grid["per_replicate"] == 500]
    np.testing.assert_allclose(at500["power"], at500["power_limit"], atol=0.02)
    assert plan(1.01, var_between=1.0, var_within=1.0, replicates=[2, 3]).attrs["smallest"] is None
    # 1/ratio gives the same power (two-sided)
    np.testing.assert_allclose(plan(1 / 1.5, var_between=0.02, var_within=0.3)["power"], grid["power"],
                               rtol=1e-12)


@pytest.mark.parametrize("kwargs,error,match", [
    ({"ratio": 1.0}, ValueError, "ratio"),
    ({"ratio": -2.0}, ValueError, "ratio"),
    ({"ratio": "2"}, TypeError, "ratio"),
    ({"var_between": -0.1}, ValueError, "var_between"),
    ({"var_within": -0.1}, ValueError, "var_within"),
    ({"var_between": 0.0, "var_within": 0.0}, ValueError, "both 0"),
    ({"alpha": 0.0}, ValueError, "alpha"),
    ({"power": 1.0}, ValueError, "power"),
    ({"replicates": [1, 2]}, ValueError, "replicates holds 1"),
    ({"per_replicate": [0, 5]}, ValueError, "per_replicate"),
    ({"per_replicate": [2.5]}, TypeError, "per_replicate"),
])
def test_plan_bad_input(kwargs, error, match):
    args = {"ratio": 1.5, "var_between": 0.02, "var_within": 0.3, **kwargs}
    ratio = args.pop("ratio")
    with pytest.raises(error, match=match):
        plan(ratio, **args)
