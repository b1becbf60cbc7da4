"""The face of the new statistics: non-detects, scale evidence, upper tails, nested designs, planning.

Outside references: scipy.stats.CensoredData with scipy.stats.norm fitted by a tight optimizer (the
censored log-normal MLE); scipy.stats.nct (exact percentile interval); scipy.stats.boxcox_llf (the
Box-Cox profile); statsmodels TTestIndPower (the planning power). The data are invented.
"""

from __future__ import annotations

import inspect

import matplotlib
import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from logstats import plot
from logstats.cli import main

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402


def _lab() -> pd.DataFrame:
    """Invented river-sampling table: three sites, two lab limits, '<' notation and a few 'ND'."""
    rng = np.random.default_rng(11)
    rows = []
    for site, mu in (("upstream", 0.3), ("mill", 1.2), ("delta", 0.8)):
        x = rng.lognormal(mu, 0.7, 30)
        lim = np.where(np.arange(30) % 2 == 0, 0.8, 1.5)
        for i, (v, dl) in enumerate(zip(x, lim)):
            text = f"<{dl:g}" if v <= dl else f"{v:.4f}"
            rows.append({"site": site, "day": f"d{i % 5}", "well": f"w{i % 2}",
                         "conc": "ND" if (i == 7 and v <= dl) else text, "raw": v, "dl": dl})
    return pd.DataFrame(rows)


@pytest.fixture()
def at(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _lab().to_csv("lab.csv", index=False)
    return tmp_path


def test_censored_column_is_read_and_fitted_like_scipy(at, capsys):
    assert main(["fit", "lab.csv", "--value", "conc", "--by", "site", "--nd-limit", "0.8",
                 "--output", "f.csv"]) == 0
    err = capsys.readouterr().err
    assert "non-detect entr" in err and "distinct" in err and "Nothing is substituted" in err
    out = pd.read_csv("f.csv", index_col=0)
    df = _lab()
    sub = df[df.site == "mill"]
    cens = sub.raw.to_numpy() <= sub.dl.to_numpy()
    y = np.log(np.where(cens, sub.dl, sub.raw.round(4)))  # the table holds 4 decimals
    data = stats.CensoredData(uncensored=y[~cens], left=y[cens])  # scipy censored normal on the logs

    def tight(func, x0, args=(), disp=0):
        return optimize.fmin(func, x0, args=args, xtol=1e-10, ftol=1e-12, disp=disp)

    mu, sigma = stats.norm.fit(data, optimizer=tight)
    assert out.loc["mill", "n_censored"] == cens.sum()
    assert out.loc["mill", "mu"] == pytest.approx(mu, rel=1e-6)
    assert out.loc["mill", "sigma"] == pytest.approx(sigma, rel=1e-6)
    assert out.loc["mill", "gmean"] == pytest.approx(np.exp(mu), rel=1e-6)


def test_summary_with_non_detects_never_substitutes(at, capsys):
    assert main(["summary", "lab.csv", "--value", "conc", "--by", "site", "--nd-limit", "0.8",
                 "--censored-method", "ros"]) == 0
    text = capsys.readouterr()
    assert "n_censored" in text.out and "robust regression on order statistics" in text.err
    # keyword entries without a limit: a data error naming the option that handles them
    if (_lab().conc == "ND").any():
        assert main(["summary", "lab.csv", "--value", "conc"]) == 1
        assert "--nd-limit" in capsys.readouterr().err


def test_unreadable_entry_still_named_without_blanking_advice(at, capsys):
    pd.DataFrame({"x": ["1.5", "<0.5", "oops", "2"]}).to_csv("bad.csv", index=False)
    assert main(["summary", "bad.csv", "--value", "x"]) == 1
    err = capsys.readouterr().err
    assert "'oops'" in err and "data row 3" in err and "blank" not in err


def test_check_margin_and_pooled(at, capsys):
    assert main(["check", "lab.csv", "--value", "raw", "--by", "site", "--margin", "1000"]) == 0
    out = capsys.readouterr().out
    assert "undecided" in out and "boxcox_lambda" in out  # |delta AIC| < 1000 everywhere
    assert main(["check", "lab.csv", "--value", "raw", "--by", "site", "--pooled", "--output", "p.csv"]) == 0
    res = pd.read_csv("p.csv", index_col=0)
    assert {"spread_slope", "spread_slope_ci_low", "n_groups"} <= set(res.columns)
    assert res["n_groups"].iloc[0] == 3


def test_tail_quantile_against_nct_and_caution(at, capsys):
    assert main(["tail", "lab.csv", "--value", "raw", "--by", "site", "--limit", "5", "--q", "0.9",
                 "--q", "0.99"]) == 0
    out = capsys.readouterr().out
    assert "tolerance_high" in out and "n_exceed" in out
    assert "validated tools" in out and "licensed practice" in out
    assert main(["tail", "lab.csv", "--value", "raw", "--by", "site", "--q", "0.95", "-o", "t.csv"]) == 0
    res = pd.read_csv("t.csv", index_col=0)
    y = np.log(_lab().query("site == 'delta'").raw.to_numpy())
    n, m, s = y.size, y.mean(), y.std(ddof=1)
    z = stats.norm.ppf(0.95)
    # exact interval of the percentile: scipy.stats.nct with n-1 df, non-centrality z*sqrt(n)
    lo = np.exp(m + s * stats.nct.ppf(0.025, n - 1, z * np.sqrt(n)) / np.sqrt(n))
    hi = np.exp(m + s * stats.nct.ppf(0.975, n - 1, z * np.sqrt(n)) / np.sqrt(n))
    assert res.loc["delta", "q0.95_estimate"] == pytest.approx(np.exp(m + z * s), rel=1e-9)
    assert res.loc["delta", "q0.95_ci_low"] == pytest.approx(lo, rel=1e-6)
    assert res.loc["delta", "q0.95_ci_high"] == pytest.approx(hi, rel=1e-6)


def test_components_nested_compare_and_plan(at, capsys):
    assert main(["components", "lab.csv", "--value", "raw", "--by", "site", "--nested", "day",
                 "--nested", "well"]) == 0
    out = capsys.readouterr().out
    assert "gsd_day" in out and "frac_within" in out and "n_effective" in out
    assert main(["compare", "lab.csv", "--value", "raw", "--by", "site", "--reference", "upstream",
                 "--replicate", "day", "--replicate", "well", "-o", "c.csv"]) == 0
    res = pd.read_csv("c.csv", index_col=0)
    assert (res["n"] == 5).all()  # five days are the units
    assert main(["plan", "--ratio", "1.5", "--var-between", "0.05", "--var-within", "0.25",
                 "--replicates", "4,8", "--per-replicate", "1,20"]) == 0
    out = capsys.readouterr().out
    assert "smallest design" in out
    from statsmodels.stats.power import TTestIndPower  # reference: two-sample t power

    d = np.log(1.5) / np.sqrt(0.05 + 0.25 / 20)
    ref = TTestIndPower().power(effect_size=d, nobs1=8, alpha=0.05, ratio=1.0, alternative="two-sided")
    assert main(["plan", "--ratio", "1.5", "--var-between", "0.05", "--var-within", "0.25",
                 "--replicates", "8", "--per-replicate", "20", "-o", "p.csv"]) == 0
    assert pd.read_csv("p.csv")["power"].iloc[0] == pytest.approx(ref, abs=1e-6)


def test_report_with_limit_nested_and_detection_limit(at):
    assert main(["report", "lab.csv", "--value", "conc", "--by", "site", "--reference", "upstream",
                 "--nd-limit", "0.8", "--limit", "5", "-o", "r.html", "-q"]) == 0
    text = (at / "r.html").read_text(encoding="utf-8")
    assert 'id="upper-tail"' in text and "licensed practice" in text and "undecided" in text
    assert "no value is substituted" in text
    assert main(["report", "lab.csv", "--value", "raw", "--by", "site", "--reference", "upstream",
                 "--replicate", "day", "--replicate", "well", "-o", "n.html", "-q"]) == 0
    assert 'id="variance-components"' in (at / "n.html").read_text(encoding="utf-8")


def test_boxcox_profile_against_scipy():
    x = _lab().raw.to_numpy()
    grid = np.linspace(-1, 2, 7)
    ref = np.array([stats.boxcox_llf(v, x) for v in grid])  # scipy.stats.boxcox_llf
    assert np.allclose(plot.boxcox_profile(x, grid), ref, rtol=1e-12)
    pooled = plot.boxcox_profile(x, grid, groups=np.zeros(x.size, int))
    assert np.allclose(pooled - pooled[0], ref - ref[0], atol=1e-9)  # one group: same up to a constant


def test_plot_scale_axes_and_limit_lines():
    df = _lab()
    axs = df.logstats.plot_scale("raw", by="site")
    assert axs[0].get_xscale() == "linear" and axs[1].get_xscale() == "log" and axs[1].get_yscale() == "log"
    assert {ln.get_gid() for ln in axs[0].lines} >= {"lambda-0", "lambda-1", "profile"}
    plt.close(axs[0].figure)
    ax = df.logstats.plot_groups("raw", by="site", limit=5.0)
    assert any(c.get_gid() == "limit" for c in ax.collections)
    assert "limit" in [t.get_text() for t in ax.get_legend().get_texts()]
    plt.close(ax.figure)


def test_forwarding_signatures_are_real():
    from logstats.accessors._face import FigureMethods, ReportMethods

    for name, func in (("plot_hist", plot.hist), ("plot_groups", plot.groups), ("plot_qq", plot.qq),
                       ("plot_scale", plot.scale)):
        got = list(inspect.signature(getattr(FigureMethods, name)).parameters)[1:]
        assert got == list(inspect.signature(func).parameters)[1:], name
    params = inspect.signature(ReportMethods.report).parameters
    assert {"limit", "nested", "detection_limit", "margin"} <= set(params)
