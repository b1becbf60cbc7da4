"""The HTML report as a reader meets it (issue 11, item 2), parsed with the standard library.

Wide tables scroll inside the page, groups keep the order of the data, counts say what they count,
and the provenance names the date, the command, the versions and the input file with its SHA-256
(checked against hashlib). Group statistics are checked against scipy.stats.gmean (REFERENCES.md,
"Geometric mean"). The data are invented.
"""

from __future__ import annotations

import hashlib
import html.parser
import re

import numpy as np
import pandas as pd
import pytest
import scipy
from scipy import stats

import logstats
from logstats.cli import main
from logstats.format import format_number
from logstats.report import SECTIONS, build_report


class _Doc(html.parser.HTMLParser):
    """Tables (rows of cell texts), whether each sits in a scrolling wrapper, and section texts."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[list[list[str]]] = []
        self.wrapped: list[bool] = []
        self.sections: dict[str, list[str]] = {}
        self.ids: list[str] = []
        self._open: list[tuple[str, dict]] = []
        self._cell: list[str] | None = None
        self._section = ""

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self._section = a.get("id", "")
            self.ids.append(self._section)
            self.sections[self._section] = []
        if tag == "table":
            self.tables.append([])
            self.wrapped.append(any(t == "div" and "table-wrap" in (x.get("class") or "")
                                    for t, x in self._open))
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []
        if tag not in ("meta", "img", "br"):
            self._open.append((tag, a))

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.tables[-1][-1].append("".join(self._cell).strip())
            self._cell = None
        while self._open:
            t, _ = self._open.pop()
            if t == tag:
                break

    def handle_data(self, data):
        if self._section:
            self.sections[self._section].append(data)
        if self._cell is not None:
            self._cell.append(data)


def _parse(text: str) -> _Doc:
    doc = _Doc()
    doc.feed(text)
    doc.close()
    return doc


def _ozone_like() -> pd.DataFrame:
    """Invented: daily readings over four summer months (named), two halves, a few gaps."""
    rng = np.random.default_rng(17)
    rows = []
    for m, level in {"June": 25.0, "July": 48.0, "August": 45.0, "September": 24.0}.items():
        for day in range(1, 31):
            rows.append({"Month": m, "half": "first" if day <= 15 else "second", "Day": day,
                         "Ozone (ppb)": float(np.round(level * rng.lognormal(0.0, 0.6), 1)),
                         "Wind": float(np.round(rng.uniform(2, 20), 1))})
    df = pd.DataFrame(rows)
    df.loc[[3, 40, 41], "Ozone (ppb)"] = np.nan
    return df


def test_wide_tables_scroll_inside_the_page():
    df = _ozone_like()
    text = build_report(df, value=["Ozone (ppb)", "Wind"], by=["Month", "half"], reference="June",
                        figures=False)
    doc = _parse(text)
    assert doc.tables and all(doc.wrapped)  # every table in the scrolling wrapper
    style = re.search(r"<style>(.*?)</style>", text, re.S).group(1)
    rule = re.search(r"div\.table-wrap\s*\{([^}]*)\}", style).group(1)
    assert "overflow-x: auto" in rule and "max-width: 100%" in rule
    assert 'name="viewport"' in text


def test_group_order_follows_the_data():
    df = _ozone_like()
    doc = _parse(build_report(df, value="Ozone (ppb)", by="Month", figures=False))
    overview = doc.tables[0]
    assert [r[0] for r in overview[1:]] == ["June", "July", "August", "September"]  # not alphabetical
    # numbers in numeric order, 2 < 10
    num = pd.DataFrame({"dose": np.repeat([10, 2, 1], 5), "x": np.tile([1.0, 2.0, 3.0, 4.0, 5.0], 3)})
    doc = _parse(build_report(num, value="x", by="dose", figures=False))
    assert [r[0] for r in doc.tables[0][1:]] == ["1", "2", "10"]
    # a categorical key keeps its categories' order
    cat = num.assign(dose=pd.Categorical(num["dose"].astype(str), categories=["10", "1", "2"]))
    doc = _parse(build_report(cat, value="x", by="dose", figures=False))
    assert [r[0] for r in doc.tables[0][1:]] == ["10", "1", "2"]


def test_counts_say_what_they_count():
    df = _ozone_like()
    df["week"] = df["Month"] + "-" + ((df["Day"] - 1) // 7).astype(str)
    text = build_report(df, value="Ozone (ppb)", by="Month", replicate="week", reference="June",
                        figures=False)
    doc = _parse(text)
    headers = [t[0] for t in doc.tables]
    cmp = [h for h in headers if "ratio" in h]
    assert cmp and all("n_values" in h and "n_values_reference" in h for h in cmp)
    assert "n_cells" not in text
    text = build_report(df, value="Ozone (ppb)", by="Month", replicate="week", reference="June",
                        unit_name="days", figures=False)
    assert "n_days" in text and "n_days_reference" in text and "n_cells" not in text
    assert "count week replicates" in "".join(_parse(text).sections["comparisons"])


def test_two_keys_compare_within_the_second():
    df = _ozone_like()
    doc = _parse(build_report(df, value="Ozone (ppb)", by=["Month", "half"], reference="June",
                              figures=False))
    text = "".join(doc.sections["overview"])
    assert "8 groups of Month × half" in text
    cmp = [t for t in doc.tables if "ratio" in t[0]][0]
    head = cmp[0]
    rows = {(r[head.index("half")], r[head.index("Month")]): r for r in cmp[1:]}
    assert len(rows) == 6
    x = df.dropna(subset=["Ozone (ppb)"])
    for (half, month), r in rows.items():
        gm = x.groupby(["Month", "half"])["Ozone (ppb)"].agg(lambda v: stats.gmean(v.to_numpy()))
        assert r[head.index("ratio")] == format_number(gm[(month, half)] / gm[("June", half)])


def test_provenance_from_the_command_line(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    df = _ozone_like()
    df.to_csv("ozone.csv", index=False, sep=";", decimal=",")
    argv = ["report", "ozone.csv", "--value", "Ozone (ppb)", "--by", "Month", "--by", "half",
            "--reference", "June", "-o", "r.html", "-q"]
    assert main(argv) == 0
    text = (tmp_path / "r.html").read_text(encoding="utf-8")
    doc = _parse(text)
    assert doc.ids[-2:] == ["provenance", "references"] and SECTIONS[-1] == "provenance"
    prov = "".join(doc.sections["provenance"])
    data = (tmp_path / "ozone.csv").read_bytes()
    assert hashlib.sha256(data).hexdigest() in prov  # hashlib: the reference SHA-256
    assert f"ozone.csv ({len(data):,} bytes)" in prov
    assert "logstats report ozone.csv --value 'Ozone (ppb)' --by Month --by half --reference June" in prov
    for name, version in (("logstats", logstats.__version__), ("numpy", np.__version__),
                          ("scipy", scipy.__version__), ("pandas", pd.__version__)):
        assert f"{name} {version}" in prov
    assert re.search(r"Date\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", prov)


def test_provenance_from_python_names_the_call():
    df = _ozone_like()
    prov = "".join(_parse(build_report(df, value="Ozone (ppb)", by="Month", nonpositive="drop",
                                       figures=False)).sections["provenance"])
    assert "logstats.report.build_report(df, value='Ozone (ppb)', by='Month', nonpositive='drop'" in prov
    assert "a DataFrame in memory (120 rows × 5 columns)" in prov


@pytest.mark.parametrize("reference", ["June"])
def test_empty_comparisons_are_explained(reference):
    df = _ozone_like()
    df.loc[df["Month"] == "August", "Ozone (ppb)"] = np.nan
    doc = _parse(build_report(df, value="Ozone (ppb)", by="Month", reference=reference, figures=False))
    assert "1 of 3 comparison(s) have no ratio" in "".join(doc.sections["comparisons"])
