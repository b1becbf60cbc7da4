"""The invented demo: its data set, its stack, and ``logstats demo`` writing every file it lists.

Checks of the simulated data use scipy.stats.gmean / gstd as references and the design of the
simulation itself (treatments x wells, detection limit, background-subtracted zeros).
"""

from __future__ import annotations

import io
import re

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
import xarray as xr  # noqa: E402
from scipy import stats  # noqa: E402

from logstats import demo  # noqa: E402
from logstats.cli import main  # noqa: E402


@pytest.fixture(scope="module")
def cells() -> pd.DataFrame:
    return demo.make_cells()


def test_cells_design(cells):
    assert list(cells.columns) == ["treatment", "well", "cell", "reporter", "marker", "marker_dl"]
    assert list(cells["treatment"].cat.categories) == ["vehicle", "LS-101", "LS-202", "LS-303"]
    wells = cells.groupby("treatment", observed=True)["well"].nunique()
    assert wells.tolist() == [6, 6, 6, 6]
    per_well = cells.groupby("well").size()
    assert per_well.between(1275, 1725).all() and 30_000 < len(cells) < 42_000
    assert cells.attrs["note"].startswith("Invented")
    assert "invented" in demo.__doc__.lower() and "invented" in demo.make_cells.__doc__.lower()


def test_cells_bad_values_as_described(cells):
    rep = cells["reporter"]
    assert 1 <= int((rep <= 0).sum()) <= 20  # a handful of background-subtracted values at or below 0
    dl = cells["marker_dl"]
    mk = cells["marker"]
    # non-detects are reported as the limit or as 0, never as a value between them
    assert not ((mk > 0) & (mk < dl)).any()
    assert (mk == 0).sum() > 0 and (mk == dl).sum() > 0


def test_cells_reproducible_and_seeded():
    a = demo.make_cells(seed=3, cells_per_well=40)
    pd.testing.assert_frame_equal(a, demo.make_cells(seed=3, cells_per_well=40))
    assert not a["reporter"].equals(demo.make_cells(seed=4, cells_per_well=40)["reporter"])


def test_simulated_spread_and_well_effect(cells):
    # within one well ln(reporter) has SD 0.85 (simulation parameter); scipy.stats.gstd reference
    pos = cells[cells["reporter"] > 0]
    gsd = pos.groupby("well")["reporter"].apply(stats.gstd)
    assert gsd.median() == pytest.approx(np.exp(0.85), rel=0.05)
    # the well effect makes well geometric means vary more than cell sampling alone would allow
    wm = np.log(pos.groupby("well")["reporter"].apply(stats.gmean))
    within = (np.log(gsd) ** 2 / pos.groupby("well").size()).mean()
    resid = wm - wm.groupby(pos.groupby("well")["treatment"].first()).transform("mean")
    assert resid.var(ddof=1) > 5 * within


def test_stack(cells):
    da = demo.make_stack()
    assert da.dims == ("cell", "channel", "time")
    assert list(da["channel"].values) == ["reporter", "marker"]
    assert da["time"].attrs["units"] == "h" and da.attrs["units"] == "a.u."
    assert (da > 0).all() and "Invented" in da.attrs["note"]
    # the LS-202 reporter builds up to about 1.8-fold over 24 h (simulation design, not a test of
    # the library): compare geometric means at 24 h and 0 h with scipy.stats.gmean
    sub = da.sel(channel="reporter").where(da["treatment"] == "LS-202", drop=True)
    ratio = stats.gmean(sub.sel(time=24.0).values) / stats.gmean(sub.sel(time=0.0).values)
    assert ratio == pytest.approx(1.8, rel=0.1)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "results"
    buf = io.StringIO()
    files = demo.run_demo(out, seed=2024, stream=buf, width=200)
    return out, files, buf.getvalue()


def test_run_demo_writes_every_listed_file(demo_run):
    out, files, text = demo_run
    names = sorted(p.name for p in files)
    assert names == sorted(["cells.csv", "reporter-histogram.png", "reporter-by-well.png",
                            "reporter-probability.png", "marker-censored-fit.png", "report.html",
                            "stack.nc"])
    listed = text.split("files written:")[1].split()
    assert listed == [str(p) for p in files]
    for p in files:
        assert p.exists() and p.stat().st_size > 0
        assert p.parent == out
    for p in files:
        if p.suffix == ".png":
            assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    back = pd.read_csv(out / "cells.csv")
    assert len(back) == len(demo.make_cells())
    nc = xr.open_dataarray(out / "stack.nc")
    try:
        assert nc.dims == ("cell", "channel", "time")
    finally:
        nc.close()
    html_text = (out / "report.html").read_text(encoding="utf-8")
    assert "Invented example data" in html_text and 'id="comparisons"' in html_text


def test_run_demo_prints_the_key_tables(demo_run, cells):
    _, _, text = demo_run
    assert text.startswith("Invented example data")
    assert "nonpositive='drop' left out 12" in text
    for heading in ("the well as the unit", "each cell as a unit", "linear or log scale",
                    "left-censored log-normal fit"):
        assert heading in text
    # the summary line of vehicle carries the scipy geometric mean of its positive values
    x = cells.loc[(cells["treatment"] == "vehicle") & (cells["reporter"] > 0), "reporter"].to_numpy()
    line = [ln for ln in text.splitlines() if ln.startswith("vehicle ")][0]
    assert f"{stats.gmean(x):.3g} ×/÷ " in line


def test_per_cell_intervals_are_the_narrow_ones(demo_run):
    # pseudo-replication: the per-cell fold-change intervals are narrower than the per-well ones
    _, _, text = demo_run
    blocks = text.split("the same with each cell as a unit")
    wells, per_cell = blocks[0].split("the well as the unit")[1], blocks[1]

    def widths(block):
        rows = [ln.split() for ln in block.splitlines() if re.match(r"LS-\d{3} ", ln)]
        return [float(r[3]) / float(r[2]) for r in rows[:3]]

    assert all(c < w for c, w in zip(widths(per_cell), widths(wells)))


def test_demo_command_no_files(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["demo", "--no-files", "--seed", "5", "--ascii"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("Invented example data")
    assert "x/" in out and "files written" not in out
    assert list(tmp_path.iterdir()) == []
