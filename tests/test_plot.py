"""Figures drawn with the Agg backend: log axes, one artist per group, the overlays against scipy.

References used below:
- scipy.stats.lognorm.fit(x, floc=0) for the log-normal MLE, and scipy.stats.lognorm.pdf for its
  density; the density of ln x is x·f(x) (change of variables, common practice).
- scipy.stats.CensoredData with lognorm.fit for the left-censored MLE (REFERENCES.md).
- scipy.stats.ttest_1samp(ln x).confidence_interval(), back-transformed, for the interval of a
  geometric mean (REFERENCES.md).
- Filliben's order-statistic medians for normal probability plots, as in the NIST/SEMATECH
  e-Handbook's "normal probability plot" page (formula from memory):
  m_n = 0.5**(1/n), m_1 = 1 − m_n, m_i = (i − 0.3175)/(n + 0.365) otherwise; quantiles Φ⁻¹(m_i).
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402
from matplotlib.colors import to_hex  # noqa: E402
from scipy import optimize, stats  # noqa: E402

import logstats  # noqa: E402, F401
from logstats import plot  # noqa: E402


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


@pytest.fixture(scope="module")
def cells() -> pd.DataFrame:
    """Invented: three arms x four dishes x 150 cells, log-normal with a dish effect."""
    rng = np.random.default_rng(11)
    rows = []
    for arm, level in {"ctrl": 100.0, "low": 140.0, "high": 260.0}.items():
        for d in range(4):
            dish = level * rng.lognormal(0.0, 0.2)
            rows.append(pd.DataFrame({"arm": arm, "dish": f"{arm}-{d}",
                                      "signal": dish * rng.lognormal(0.0, 0.7, 150)}))
    df = pd.concat(rows, ignore_index=True)
    df["arm"] = pd.Categorical(df["arm"], categories=["ctrl", "low", "high"])
    return df


def _lines(ax, gid):
    return [ln for ln in ax.get_lines() if ln.get_gid() == gid]


def test_hist_log_axis_groups_and_lognormal_overlay(cells):
    ax = plot.hist(cells, "signal", by="arm")
    assert ax.get_xscale() == "log"
    bars = [p for p in ax.patches if (p.get_gid() or "").startswith("bars-")]
    assert len(bars) == 3  # one filled histogram per group
    fits = _lines(ax, "lognormal-fit")
    assert len(fits) == 3
    # each overlay is the MLE log-normal density of ln x: x · lognorm.pdf(x) (scipy reference)
    for line, arm in zip(fits, ["ctrl", "low", "high"]):
        x = cells.loc[cells["arm"] == arm, "signal"].to_numpy()
        s, _, scale = stats.lognorm.fit(x, floc=0)
        xd, yd = line.get_data()
        np.testing.assert_allclose(yd, xd * stats.lognorm.pdf(xd, s, scale=scale), rtol=1e-6)
    assert "signal" in ax.get_xlabel()


def test_hist_density_integrates_to_one_in_log_units(cells):
    ax = plot.hist(cells, "signal", by="arm")
    for bar in [p for p in ax.patches if (p.get_gid() or "").startswith("bars-")]:
        # a StepPatch: heights per unit of ln x over log-spaced edges; every value is binned, so the
        # area (in ln x) is exactly 1 (definition of a density histogram)
        heights, edges = bar.get_data().values, bar.get_data().edges
        assert np.sum(heights * np.diff(np.log(edges))) == pytest.approx(1.0, rel=1e-12)


def test_hist_normal_overlay_on_request(cells):
    x = cells.loc[cells["arm"] == "ctrl", "signal"].to_numpy()
    ax = plot.hist(cells.loc[cells["arm"] == "ctrl"], "signal", normal=True)
    (line,) = _lines(ax, "normal-fit")
    xd, yd = line.get_data()
    # normal fitted to the linear values (mean, SD with ddof=1; numpy reference), per unit of ln x
    np.testing.assert_allclose(yd, xd * stats.norm.pdf(xd, x.mean(), x.std(ddof=1)), rtol=1e-9)
    assert not _lines(plot.hist(cells, "signal"), "normal-fit")


def test_hist_uses_the_axes_passed_in(cells):
    fig, ax = plt.subplots()
    out = plot.hist(cells, "signal", by="arm", ax=ax)
    assert out is ax
    assert len(fig.axes) == 1


def test_hist_panels_one_axes_per_group(cells):
    axes = plot.hist(cells, "signal", by="arm", layout="panels")
    assert len(axes) == 3
    assert all(a.get_xscale() == "log" for a in axes)
    assert [a.get_title().split(" (")[0] for a in axes] == ["ctrl", "low", "high"]
    fig, grid = plt.subplots(2, 2)
    out = plot.hist(cells, "signal", by="arm", ax=grid)
    assert list(out) == list(grid.ravel()[:3])
    assert not grid.ravel()[3].get_visible()


def test_hist_censored_fit_matches_scipy():
    # invented: log-normal with a detection limit; values at or below it reported as the limit
    rng = np.random.default_rng(5)
    x = rng.lognormal(3.0, 0.8, 400)
    dl = 15.0
    df = pd.DataFrame({"conc": np.where(x <= dl, dl, x)})
    ax = plot.hist(df, "conc", detection_limit=dl)
    (line,) = _lines(ax, "lognormal-fit")
    # reference: scipy's censored MLE with a tight optimizer (REFERENCES.md)
    data = stats.CensoredData(uncensored=x[x > dl], left=np.full(int((x <= dl).sum()), dl))

    def tight(func, x0, args=(), disp=0):
        return optimize.fmin(func, x0, args=args, xtol=1e-10, ftol=1e-12, disp=disp)

    s, _, scale = stats.lognorm.fit(data, floc=0, optimizer=tight)
    xd, yd = line.get_data()
    np.testing.assert_allclose(yd, xd * stats.lognorm.pdf(xd, s, scale=scale), rtol=1e-5)
    assert [ln.get_xdata()[0] for ln in _lines(ax, "detection-limit")] == [dl]
    assert "censored" in " ".join(t.get_text() for t in ax.get_legend().get_texts())


def test_hist_nonpositive_policy(cells):
    df = cells.copy()
    df.loc[[0, 1, 2], "signal"] = [0.0, -1.0, 0.0]
    with pytest.raises(ValueError, match="'signal'.*nonpositive='drop'"):
        plot.hist(df, "signal", by="arm")
    ax = plot.hist(df, "signal", by="arm", nonpositive="drop")
    legend = " ".join(t.get_text() for t in ax.get_legend().get_texts())
    assert "3 ≤ 0 left out" in legend


def test_groups_points_replicates_and_interval(cells):
    ax = plot.groups(cells, "signal", by="arm", replicate="dish", max_points=None)
    assert ax.get_yscale() == "log"
    pts = [c for c in ax.collections if (c.get_gid() or "").startswith("points-")]
    reps = [c for c in ax.collections if (c.get_gid() or "").startswith("replicates-")]
    assert len(pts) == 3 and len(reps) == 3
    assert [len(c.get_offsets()) for c in pts] == [600, 600, 600]
    assert [len(c.get_offsets()) for c in reps] == [4, 4, 4]
    for i, arm in enumerate(["ctrl", "low", "high"]):
        sub = cells[cells["arm"] == arm]
        dish_gm = sub.groupby("dish")["signal"].apply(stats.gmean).to_numpy()
        # replicate markers sit at the dishes' geometric means (scipy.stats.gmean)
        np.testing.assert_allclose(np.sort(reps[i].get_offsets()[:, 1]), np.sort(dish_gm), rtol=1e-12)
        # the interval: t CI of the mean of the dish log-means, back-transformed (scipy reference)
        ci = stats.ttest_1samp(np.log(dish_gm), 0.0).confidence_interval(0.95)
        (seg,) = [c for c in ax.collections if c.get_gid() == f"interval-{i}"][0].get_segments()
        np.testing.assert_allclose(sorted(seg[:, 1]), np.exp([ci.low, ci.high]), rtol=1e-10)
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert labels[0] == "ctrl\n4 × dish, 600 values"


def test_groups_without_replicate_uses_cells(cells):
    fig, ax = plt.subplots()
    out = plot.groups(cells, "signal", by="arm", ax=ax, confidence_level=0.9)
    assert out is ax
    x = np.log(cells.loc[cells["arm"] == "high", "signal"].to_numpy())
    ci = stats.ttest_1samp(x, 0.0).confidence_interval(0.9)
    (seg,) = [c for c in ax.collections if c.get_gid() == "interval-2"][0].get_segments()
    np.testing.assert_allclose(sorted(seg[:, 1]), np.exp([ci.low, ci.high]), rtol=1e-10)
    assert not [c for c in ax.collections if (c.get_gid() or "").startswith("replicates-")]
    with pytest.raises(ValueError, match="by="):
        plot.groups(cells, "signal")


def test_groups_reproducible_subset(cells):
    a = plot.groups(cells, "signal", by="arm", max_points=50, seed=3)
    b = plot.groups(cells, "signal", by="arm", max_points=50, seed=3)
    pa = [c.get_offsets() for c in a.collections if (c.get_gid() or "").startswith("points-")]
    pb = [c.get_offsets() for c in b.collections if (c.get_gid() or "").startswith("points-")]
    assert [len(p) for p in pa] == [50, 50, 50]
    for u, v in zip(pa, pb):
        np.testing.assert_array_equal(u, v)


def _filliben(n):
    m = (np.arange(1, n + 1) - 0.3175) / (n + 0.365)
    m[-1] = 0.5 ** (1.0 / n)
    m[0] = 1.0 - m[-1]
    return stats.norm.ppf(m)


def test_qq_logs_and_raw(cells):
    x = cells.loc[cells["arm"] == "ctrl", "signal"].to_numpy()
    axes = plot.qq(pd.Series(x, name="signal"))
    assert len(axes) == 2
    logs, raw = axes
    assert logs.get_yscale() == "log" and raw.get_yscale() == "linear"
    pts = logs.get_lines()[0]
    # ordered values against Filliben's normal order-statistic medians (NIST e-Handbook)
    np.testing.assert_allclose(pts.get_xdata(), _filliben(x.size), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(pts.get_ydata(), np.sort(x), rtol=1e-12)
    np.testing.assert_allclose(raw.get_lines()[0].get_ydata(), np.sort(x), rtol=0)
    # log-normal data: straight on the log panel, bent on the raw one (correlation of the plot)
    r_log = np.corrcoef(pts.get_xdata(), np.log(pts.get_ydata()))[0, 1]
    r_raw = np.corrcoef(raw.get_lines()[0].get_xdata(), raw.get_lines()[0].get_ydata())[0, 1]
    assert r_log > 0.995 > r_raw


def test_qq_single_axes_and_groups(cells):
    fig, ax = plt.subplots()
    out = plot.qq(cells, "signal", by="arm", ax=ax)
    assert out is ax
    assert len([ln for ln in ax.get_lines() if ln.get_linestyle() == "None"]) == 3
    with pytest.raises(ValueError, match="pair of Axes"):
        plot.qq(cells, "signal", ax=ax, raw=True)


def test_colour_blind_palette(cells):
    ax = plot.hist(cells, "signal", by="arm", palette="colorblind")
    bars = [p for p in ax.patches if (p.get_gid() or "").startswith("bars-")]
    assert [to_hex(b.get_facecolor()[:3]) for b in bars] == [c.lower() for c in plot.OKABE_ITO[:3]]
    with pytest.raises(ValueError, match="palette"):
        plot.hist(cells, "signal", palette="rainbow")


def test_series_dataarray_and_dataset_inputs(cells):
    s = cells.set_index("arm")["signal"]
    ax = plot.hist(s, by="arm")
    assert len(_lines(ax, "lognormal-fit")) == 3
    rng = np.random.default_rng(2)
    da = xr.DataArray(rng.lognormal(2.0, 0.5, (60, 2)), dims=("cell", "channel"),
                      coords={"arm": ("cell", np.repeat(["p", "q"], 30)), "channel": ["c1", "c2"]},
                      name="intensity", attrs={"units": "photons"})
    ax = plot.hist(da.sel(channel="c1"), by="arm", dim="cell")
    assert len(_lines(ax, "lognormal-fit")) == 2
    assert ax.get_xlabel().startswith("intensity (photons)")
    with pytest.raises(ValueError, match="select one first"):
        plot.hist(da, dim="cell")
    ax = plot.groups(da.to_dataset().sel(channel="c2"), "intensity", by="arm")
    assert ax.get_yscale() == "log"
    with pytest.raises(KeyError, match="coordinate"):
        plot.hist(da, by="dose")


def test_bad_inputs(cells):
    with pytest.raises(KeyError, match="'nope'"):
        plot.hist(cells, "nope")
    with pytest.raises(TypeError, match="not numeric"):
        plot.hist(cells, "dish")
    with pytest.raises(ValueError, match="value="):
        plot.hist(cells.assign(other=1.0))
    with pytest.raises(TypeError, match="Series, a DataFrame"):
        plot.hist([1.0, 2.0])
    before = cells.copy()
    plot.groups(cells, "signal", by="arm", replicate="dish")
    pd.testing.assert_frame_equal(cells, before)  # inputs are never mutated


def test_accessor_methods_delegate(cells):
    ax = cells.logstats.plot_hist("signal", by="arm")
    assert ax.get_xscale() == "log"
    ax = cells.logstats.plot_groups("signal", by="arm", replicate="dish")
    assert ax.get_yscale() == "log"
    axes = cells["signal"].logstats.plot_qq()
    assert axes[0].get_yscale() == "log"


def test_png_renders(cells, tmp_path):
    ax = plot.groups(cells, "signal", by="arm", replicate="dish")
    path = tmp_path / "g.png"
    ax.figure.savefig(path)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
