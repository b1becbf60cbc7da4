"""Figures that cannot mislead (issue 11, item 1), read from the matplotlib objects themselves.

Every figure the report and the command line draw is checked panel by panel: the scale of each axis
is the one its label and the caption name; log axes over less than two decades are labelled in plain
numbers; tick and group labels do not overlap (bounding boxes from the Agg renderer); every panel of
a grid says what it shows; the default colours are those of Okabe & Ito (2008), as listed from
memory in logstats.plot.OKABE_ITO (a fact of common practice: the eight-colour set is the usual
colour-blind-safe choice). The data are invented.
"""

from __future__ import annotations

import re

import matplotlib
import numpy as np
import pandas as pd
import pytest

from logstats import cli, plot, report

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

PLAIN = re.compile(r"^\d+(\.\d+)?$")


def _narrow(n_groups: int = 3, long_names: bool = False) -> pd.DataFrame:
    """Invented: values between about 40 and 200 (less than one decade), a few groups."""
    rng = np.random.default_rng(3)
    rows = []
    for i in range(n_groups):
        name = f"treatment arm number {i + 1} (high dose)" if long_names else f"g{i + 1}"
        x = np.clip(90.0 * rng.lognormal(0.0, 0.3, 40), 41.0, 199.0)
        rows.append(pd.DataFrame({"arm": name, "plate": [f"p{k % 4}" for k in range(40)], "conc": x}))
    return pd.concat(rows, ignore_index=True)


def _visible_labels(axis, renderer) -> list:
    lo, hi = sorted(axis.get_view_interval())
    out = []
    for which in ("major", "minor"):
        locs = axis.get_majorticklocs() if which == "major" else axis.get_minorticklocs()
        labels = axis.get_ticklabels(minor=which == "minor")
        for loc, lab in zip(locs, labels):
            if lab.get_text() and lab.get_visible() and lo <= loc <= hi:
                out.append(lab)
    return out


def _scale_matches_label(ax) -> None:
    for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
        label = axis.get_label().get_text()
        if scale == "log":
            assert "log scale" in label, (label, scale)
        elif label:
            assert "log scale" not in label, (label, scale)


def _no_overlap(texts, renderer) -> None:
    boxes = [t.get_window_extent(renderer) for t in texts]
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not a.overlaps(b), (a, b)


def _check_figure(fig) -> None:
    fig.draw_without_rendering()
    renderer = fig._get_renderer()
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        _scale_matches_label(ax)
        for axis in (ax.xaxis, ax.yaxis):
            _no_overlap(_visible_labels(axis, renderer), renderer)


def test_plain_log_ticks_on_narrow_data():
    df = _narrow()
    ax = plot.groups(df, "conc", by="arm")
    fig = ax.figure
    fig.draw_without_rendering()
    texts = [t.get_text() for t in _visible_labels(ax.yaxis, fig.canvas.get_renderer())]
    assert texts and all(PLAIN.match(t) for t in texts), texts
    assert {"50", "100"} <= set(texts)  # plain numbers, never 10^2 or 5 x 10^1
    assert not any("$" in t or "10^" in t for t in texts)
    plt.close(fig)
    axs = plot.qq(df, "conc", by="arm")
    axs[0].figure.draw_without_rendering()
    texts = [t.get_text() for t in _visible_labels(axs[0].yaxis, axs[0].figure.canvas.get_renderer())]
    assert texts and all(PLAIN.match(t) for t in texts), texts
    plt.close(axs[0].figure)


@pytest.mark.parametrize(("lo", "hi", "expected"), [
    (40.0, 200.0, ["40", "50", "60", "80", "100", "200"]),   # under one decade: 2-3-4-5-6-8 labels
    (12.0, 240.0, ["20", "30", "50", "100", "200"]),          # 1.3 decades: 2-3-5
    (5.0, 400.0, ["5", "10", "20", "50", "100", "200"]),      # 1.9 decades: 2-5
    (120.0, 180.0, ["120", "140", "160", "180"]),             # a fraction of a decade: even steps
    (21.0, 66.0, ["30", "40", "50", "60"]),                   # at least three of them (not "40, 60")
    (0.5, 5000.0, ["1", "10", "100", "1000"]),               # wide: powers of ten, still plain
])
def test_log_tick_labels_follow_the_span(lo, hi, expected):
    from matplotlib.figure import Figure

    ax = Figure().subplots()
    ax.set_yscale("log")
    ax.set_ylim(lo, hi)
    plot.readable_log_axis(ax.yaxis)
    ax.figure.draw_without_rendering()
    got = sorted({t.get_text() for t in _visible_labels(ax.yaxis, ax.figure._get_renderer())}, key=float)
    assert got == expected


def test_long_group_labels_do_not_overlap():
    df = _narrow(n_groups=9, long_names=True)
    ax = plot.groups(df, "conc", by="arm", replicate="plate")
    fig = ax.figure
    fig.draw_without_rendering()
    renderer = fig.canvas.get_renderer()
    labels = [t for t in ax.get_xticklabels() if t.get_text()]
    assert len(labels) == 9
    _no_overlap(labels, renderer)
    # had to be wrapped (or turned) to fit: "treatment arm number 1 (high dose)" is not one line
    assert all(t.get_rotation() != 0 or t.get_text().count("\n") >= 3 for t in labels)
    plt.close(fig)


def test_report_figures_scales_labels_and_panels(monkeypatch):
    df = _narrow(n_groups=5)
    drawn: list = []
    monkeypatch.setattr(report, "FIGURE_LOG", drawn)
    report.build_report(df, value="conc", by="arm", replicate="plate", reference="g1")
    assert len(drawn) == 4  # the scale section's Box-Cox / mean-spread figure joined the three
    for caption, fig in drawn:
        _check_figure(fig)
        axes = [a for a in fig.axes if a.get_visible()]
        if caption.startswith("Box-Cox profile"):
            assert "left, linear axes" in caption and "right, log-log axes" in caption
            assert axes[0].get_xscale() == axes[0].get_yscale() == "linear"
            assert axes[1].get_xscale() == axes[1].get_yscale() == "log"
        elif caption.startswith("Histogram"):
            assert "log x axis" in caption
            assert len(axes) == 5
            for a in axes:  # every panel of the grid says what it shows
                assert a.get_title() and a.get_xlabel().endswith("log scale")
                assert a.get_xscale() == "log"
                assert any(t.get_text() for t in a.get_xticklabels())
        elif caption.startswith("Every value"):
            assert "log y axis" in caption and axes[0].get_yscale() == "log"
        else:
            assert axes[0].get_yscale() == "log" and axes[1].get_yscale() == "linear"


def test_cli_figures_scales_and_palette(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _narrow(n_groups=4).to_csv("narrow.csv", index=False)
    monkeypatch.setattr(plt, "close", lambda *a, **k: None)  # keep the figures to read them
    plt.close("all")
    before = set(plt.get_fignums())
    for argv in (["summary", "narrow.csv", "--value", "conc", "--by", "arm", "--plot", "h.png"],
                 ["compare", "narrow.csv", "--value", "conc", "--by", "arm", "--reference", "g1",
                  "--replicate", "plate", "--plot", "g.png"],
                 ["check", "narrow.csv", "--value", "conc", "--by", "arm", "--plot", "q.png"],
                 ["fit", "narrow.csv", "--value", "conc", "--by", "arm", "--plot", "f.png"]):
        assert cli.main([*argv, "-q"]) == 0
    figs = [plt.figure(n) for n in plt.get_fignums() if n not in before]
    assert len(figs) == 4
    for fig in figs:
        _check_figure(fig)
    # default colours: Okabe & Ito (2008), first group in blue #0072B2, the second in orange
    hist_axes = [a for a in figs[0].axes if a.get_visible()]
    faces = [matplotlib.colors.to_hex(a.patches[0].get_facecolor(), keep_alpha=False) for a in hist_axes]
    assert faces[:2] == [plot.OKABE_ITO[0].lower(), plot.OKABE_ITO[1].lower()]
    monkeypatch.undo()
    for fig in figs:
        plt.close(fig)


def test_palette_default_and_opt_out():
    df = _narrow(n_groups=2)
    ax = plot.hist(df, "conc", by="arm")
    face = matplotlib.colors.to_hex(ax.patches[0].get_facecolor(), keep_alpha=False)
    assert face == plot.OKABE_ITO[0].lower()
    plt.close(ax.figure)
    ax = plot.hist(df, "conc", by="arm", palette="default")
    first = matplotlib.rcParams["axes.prop_cycle"].by_key()["color"][0]
    assert matplotlib.colors.to_hex(ax.patches[0].get_facecolor(), keep_alpha=False) == \
        matplotlib.colors.to_hex(first)
    plt.close(ax.figure)


def test_group_order_follows_the_data_in_figures():
    df = pd.DataFrame({"month": ["June"] * 5 + ["July"] * 5 + ["August"] * 5,
                       "x": np.tile([40.0, 60.0, 80.0, 100.0, 150.0], 3)})
    ax = plot.groups(df, "x", by="month")
    names = [t.get_text().split("\n")[0] for t in ax.get_xticklabels()]
    assert names == ["June", "July", "August"]
    plt.close(ax.figure)
