"""The HTML report, parsed with the standard library's html.parser: sections, tables, inline images.

Numbers in the report are checked against scipy (scipy.stats.gmean, scipy.stats.gstd with ddof=1,
scipy.stats.ttest_ind with equal_var=False on the logs: REFERENCES.md, "Comparing groups").
"""

from __future__ import annotations

import base64
import html.parser

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import logstats
from logstats.format import format_number, format_times_divide
from logstats.report import SECTIONS, build_report


class _Doc(html.parser.HTMLParser):
    """Collects section ids, tables (as lists of rows of cell texts), images and external refs."""

    def __init__(self) -> None:
        super().__init__()
        self.sections: list[str] = []
        self.tables: list[list[list[str]]] = []
        self.table_section: list[str] = []
        self.images: list[str] = []
        self.external: list[str] = []
        self.tags: list[str] = []
        self._cell: list[str] | None = None
        self._section = ""
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        if tag == "section":
            self._section = a.get("id", "")
            self.sections.append(self._section)
        elif tag == "table":
            self.tables.append([])
            self.table_section.append(self._section)
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []
        elif tag == "img":
            self.images.append(a.get("src", ""))
        for key in ("src", "href"):
            v = a.get(key)
            if v and not v.startswith("data:") and not v.startswith("#"):
                self.external.append(v)

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.tables[-1][-1].append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def _parse(text: str) -> _Doc:
    doc = _Doc()
    doc.feed(text)
    doc.close()
    return doc


@pytest.fixture(scope="module")
def plates() -> pd.DataFrame:
    """Invented: colony areas on plates, three media x five plates x 40 colonies, a few zeros."""
    rng = np.random.default_rng(21)
    rows = []
    for medium, level in {"base": 2.0, "rich": 3.1, "<poor & odd>": 1.2}.items():
        for p in range(5):
            plate = level * rng.lognormal(0.0, 0.15)
            rows.append(pd.DataFrame({"medium": medium, "plate": f"{medium[:4]}{p}",
                                      "area": plate * rng.lognormal(0.0, 0.6, 40)}))
    df = pd.concat(rows, ignore_index=True)
    df.loc[[3, 77], "area"] = 0.0
    return df


@pytest.fixture(scope="module")
def report(plates) -> str:
    return build_report(plates, value="area", by="medium", replicate="plate", reference="base",
                        nonpositive="drop", units="mm²", note="Invented colony data for a test.")


def test_sections_in_order(report):
    doc = _parse(report)
    assert [s for s in doc.sections if s in SECTIONS] == list(SECTIONS)
    assert "references" in doc.sections


def test_self_contained(report):
    doc = _parse(report)
    assert doc.external == []  # nothing fetched: no external src or href
    assert "script" not in doc.tags and "link" not in doc.tags
    assert len(doc.images) == 4  # scale evidence (Box-Cox, mean-spread), histogram, groups, probability plots
    for src in doc.images:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    assert report.startswith("<!DOCTYPE html>")


def test_overview_counts(report, plates):
    doc = _parse(report)
    (overview,) = [t for t, s in zip(doc.tables, doc.table_section) if s == "overview"]
    header, *rows = overview
    assert header == ["medium", "n", "n_missing", "n_nonpositive"]
    by_medium = {r[0]: r for r in rows}
    for medium, sub in plates.groupby("medium"):
        assert by_medium[medium][1] == str(int((sub["area"] > 0).sum()))
        assert by_medium[medium][3] == str(int((sub["area"] <= 0).sum()))
    assert sum(int(r[3]) for r in rows) == 2
    assert f"{len(plates)} rows" in "".join(doc.text)


def test_summary_table_against_scipy(report, plates):
    doc = _parse(report)
    summary = [t for t, s in zip(doc.tables, doc.table_section) if s == "summary"][0]
    header, *rows = summary
    col = header.index("gmean ×/÷ gsd")
    for r in rows:
        x = plates.loc[(plates["medium"] == r[0]) & (plates["area"] > 0), "area"].to_numpy()
        # scipy.stats.gmean and scipy.stats.gstd (ddof=1)
        assert r[col] == format_times_divide(stats.gmean(x), stats.gstd(x))


def test_comparisons_replicate_and_cells(report, plates):
    doc = _parse(report)
    tables = [t for t, s in zip(doc.tables, doc.table_section) if s == "comparisons"]
    assert len(tables) == 2  # replicate as unit, then per cell for contrast
    header, *rows = tables[0]
    assert [r[0] for r in rows] == ["<poor & odd>", "rich"]  # the reference row is left out
    pos = plates[plates["area"] > 0]
    plate_logs = np.log(pos.groupby(["medium", "plate"])["area"].apply(stats.gmean))
    for r in rows:
        res = stats.ttest_ind(plate_logs[r[0]], plate_logs["base"], equal_var=False)  # Welch on logs
        assert r[header.index("p_value")] == logstats.format.format_p(res.pvalue)
        ratio = np.exp(plate_logs[r[0]].mean() - plate_logs["base"].mean())
        assert r[header.index("ratio")] == format_number(ratio)
        assert r[header.index("n")] == "5"


def test_text_from_the_data_is_escaped(report):
    assert "&lt;poor &amp; odd&gt;" in report
    assert "<poor & odd>" not in report


def test_methods_and_cautions(report):
    doc = _parse(report)
    text = " ".join(doc.text)
    for source in ("Limpert", "Welch", "Lord", "Holm", "Akaike", "Shapiro"):
        assert source in text
    assert "validated tools" in text and "qualified" in text and "licensed practice" in text
    assert "Invented colony data" in text


def test_path_detection_limit_and_no_figures(plates, tmp_path):
    df = plates.assign(lim=0.8)
    out = tmp_path / "r.html"
    text = build_report(df, value="area", by="medium", detection_limit="lim", path=out, figures=False,
                        nonpositive="drop")
    assert out.read_text(encoding="utf-8") == text
    doc = _parse(text)
    assert doc.images == []
    overview = [t for t, s in zip(doc.tables, doc.table_section) if s == "overview"][0]
    assert overview[0][-1] == "n_censored"
    censored = {r[0]: int(r[-1]) for r in overview[1:]}
    for medium, sub in df.groupby("medium"):
        assert censored[medium] == int((sub["area"] <= 0.8).sum())  # at or below the limit, zeros included
    assert "left-censored" in text


def test_report_errors(plates):
    with pytest.raises(KeyError, match="'nope'"):
        build_report(plates, value="nope", by="medium")
    with pytest.raises(ValueError, match="reference='none'.*not a level"):
        build_report(plates, value="area", by="medium", reference="none", nonpositive="drop")
    with pytest.raises(ValueError, match="nonpositive='drop'"):
        build_report(plates, value="area", by="medium", figures=False)
    with pytest.raises(TypeError, match="DataFrame"):
        build_report(plates["area"], value="area")


def test_accessor_delegates(plates):
    text = plates.logstats.report(value="area", by="medium", nonpositive="drop", figures=False)
    assert _parse(text).sections[:3] == ["overview", "scale-check", "summary"]


def test_every_report_panel_on_the_scale_its_caption_names(plates, monkeypatch):
    """Regression: the raw-value probability plot shared the log axis of the log panel beside it, so
    skewed data looked straight. Each panel's scale is read from the Axes the report drew on (the
    captions say which panels are on a log axis); no two panels on different scales are linked."""
    from logstats import report as report_module

    drawn: list = []
    monkeypatch.setattr(report_module, "FIGURE_LOG", drawn)
    build_report(plates, value="area", by="medium", replicate="plate", reference="base",
                 nonpositive="drop")
    assert drawn
    seen_qq = False
    for caption, fig in drawn:
        axes = [a for a in fig.axes if a.get_visible()]
        for a in axes:
            for b in axes:
                if a is b:
                    continue
                # panels that share an axis must be on the same scale on that axis
                if a.get_shared_y_axes().joined(a, b):
                    assert a.get_yscale() == b.get_yscale(), caption
                if a.get_shared_x_axes().joined(a, b):
                    assert a.get_xscale() == b.get_xscale(), caption
        if caption.startswith("Normal probability plots"):
            seen_qq = True
            logs, raw = axes[:2]
            assert "left, log axis" in caption and "right, linear axis" in caption
            assert logs.get_yscale() == "log" and raw.get_yscale() == "linear"
            assert not logs.get_shared_y_axes().joined(logs, raw)
            # the raw panel really shows raw values: its data limits are the sample's own range
            lo, hi = raw.dataLim.intervaly
            x = plates["area"].to_numpy(dtype=float)  # zeros stay in the raw panel
            assert lo <= np.nanmin(x) * 1.0001 and hi >= np.nanmax(x) * 0.9999
        elif caption.startswith("Histogram"):
            assert all(a.get_xscale() == "log" for a in axes)
        elif caption.startswith("Box-Cox profile"):  # left linear axes, right log-log axes
            assert "left, linear axes" in caption and "right, log-log axes" in caption
            prof, spread = axes[:2]
            assert prof.get_xscale() == "linear" and prof.get_yscale() == "linear"
            assert spread.get_xscale() == "log" and spread.get_yscale() == "log"
        else:
            assert all(a.get_yscale() == "log" for a in axes)
    assert seen_qq


def test_qq_refuses_axes_that_share_the_value_axis(plates):
    import matplotlib.pyplot as plt

    from logstats import plot

    fig, axs = plt.subplots(1, 2, sharey=True)
    with pytest.raises(ValueError, match="share their y axis"):
        plot.qq(plates, "area", ax=axs, nonpositive="drop")
    plt.close(fig)
