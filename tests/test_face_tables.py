"""The command line on tables as labs export them (issue 11, items 3, 4 and 6).

Semicolon-separated files with decimal commas, other encodings, Excel workbooks, column names with
commas, quotes and units, several ``--by`` keys, empty comparisons and the help text. The numbers are
checked against scipy.stats.gmean / scipy.stats.gstd (ddof=1) per group (REFERENCES.md, "Geometric
mean"), computed from the same invented table read the plain way; the parsing itself is checked
against the table as written (a fact of common practice: European spreadsheet exports write
``;`` between fields and ``,`` as the decimal mark).
"""

from __future__ import annotations

import argparse
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from logstats import cli
from logstats.cli import main, sniff_text_table
from logstats.format import data_order, joined_key


def _samples() -> pd.DataFrame:
    """Invented: air samples at three sites over three summer months, two halves of each month."""
    rng = np.random.default_rng(11)
    rows = []
    for site, level in {"north": 40.0, "harbour": 65.0, "park": 25.0}.items():
        for month in ("June", "July", "August"):
            for half in ("first", "second"):
                x = level * rng.lognormal(0.0, 0.6, 12)
                rows.append(pd.DataFrame({"site": site, "month": month, "half": half,
                                          "conc (mg/L)": np.round(x, 3), "a,b": np.round(x * 2, 3),
                                          'say "x"': np.round(x + 1, 3), "a": 1.0, "day": np.arange(12)}))
    return pd.concat(rows, ignore_index=True)


@pytest.fixture()
def at(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("COLUMNS", "250")
    df = _samples()
    df.to_csv(tmp_path / "plain.csv", index=False)
    df.to_csv(tmp_path / "euro.csv", index=False, sep=";", decimal=",")
    df.to_csv(tmp_path / "euro.txt", index=False, sep="\t", decimal=",")
    return tmp_path


def _gm(df: pd.DataFrame, col: str, keys: list[str]) -> pd.Series:
    return df.groupby(keys)[col].agg(lambda x: stats.gmean(x.to_numpy()))  # scipy.stats.gmean


def test_semicolon_decimal_comma_is_detected_and_said(at, capsys):
    assert main(["summary", "euro.csv", "--value", "conc (mg/L)", "--by", "site", "-o", "s.csv"]) == 0
    err = capsys.readouterr().err
    assert "euro.csv: read as semicolon-separated with decimal commas (detected" in err
    out = pd.read_csv(at / "s.csv", index_col="site")
    ref = _gm(_samples(), "conc (mg/L)", ["site"])
    for site, gm in ref.items():
        assert out.loc[site, "gmean"] == pytest.approx(gm, rel=1e-12)
    # the same numbers from the plain file, where nothing is said
    assert main(["summary", "plain.csv", "--value", "conc (mg/L)", "--by", "site", "-o", "p.csv"]) == 0
    assert "detected" not in capsys.readouterr().err
    pd.testing.assert_frame_equal(pd.read_csv(at / "p.csv", index_col="site"), out)


def test_explicit_sep_decimal_and_tab(at, capsys):
    assert main(["summary", "euro.csv", "--sep", ";", "--decimal", ",", "--value", "conc (mg/L)",
                 "-o", "a.csv"]) == 0
    assert "semicolon-separated" not in capsys.readouterr().err  # the user said so: nothing to report
    assert main(["summary", "euro.txt", "--sep", "tab", "--value", "conc (mg/L)", "-o", "b.csv"]) == 0
    assert "decimal commas (detected" in capsys.readouterr().err
    a, b = pd.read_csv(at / "a.csv", index_col=0), pd.read_csv(at / "b.csv", index_col=0)
    assert a["gmean"].iloc[0] == pytest.approx(stats.gmean(_samples()["conc (mg/L)"]), rel=1e-12)
    pd.testing.assert_frame_equal(a, b)
    # a wrong decimal mark is caught with the fix named
    assert main(["summary", "euro.csv", "--sep", ";", "--decimal", ".", "--value", "conc (mg/L)"]) == 1
    err = capsys.readouterr().err
    assert "decimal comma: pass --decimal ','" in err
    assert main(["summary", "euro.csv", "--sep", "ab", "--value", "x"]) == 2


def test_sniffer_rules():
    assert sniff_text_table("x;y\n1,5;2\n3;4,25\n") == {"sep": ";", "decimal": ","}
    assert sniff_text_table("x;y\n1.234,5;2\n3;4,25\n") == {"sep": ";", "decimal": ",", "thousands": "."}
    assert sniff_text_table("x,y\n1,2\n") == {"sep": ",", "decimal": "."}
    assert sniff_text_table('name;v\n"a;b";1,5\n"c";2\n')["sep"] == ";"  # quotes respected
    assert sniff_text_table("x\ty\n1,5\t2\n") == {"sep": "\t", "decimal": ","}
    assert sniff_text_table("single\n1\n2\n") == {"sep": ",", "decimal": "."}


def test_encoding_option(at, capsys):
    df = pd.DataFrame({"Messstelle": ["Süd", "Nord"] * 5, "Konz (µg/L)": np.linspace(1.0, 9.0, 10)})
    df.to_csv(at / "win.csv", index=False, sep=";", decimal=",", encoding="cp1252")
    assert main(["summary", "win.csv", "--value", "Konz (µg/L)", "--by", "Messstelle"]) == 1
    assert "--encoding cp1252" in capsys.readouterr().err
    assert main(["summary", "win.csv", "--encoding", "cp1252", "--value", "Konz (µg/L)", "--by",
                 "Messstelle", "-o", "w.csv"]) == 0
    out = pd.read_csv(at / "w.csv", index_col=0)
    assert list(out.index) == ["Nord", "Süd"]  # natural (alphabetical) order for plain text
    assert out.loc["Süd", "gmean"] == pytest.approx(stats.gmean(df["Konz (µg/L)"][::2]), rel=1e-12)
    assert main(["summary", "win.csv", "--encoding", "klingon", "--value", "x"]) == 2


def test_excel_input(at, capsys, monkeypatch):
    pytest.importorskip("openpyxl")
    df = _samples()
    with pd.ExcelWriter(at / "book.xlsx", engine="openpyxl") as xw:
        pd.DataFrame({"note": ["cover sheet"]}).to_excel(xw, sheet_name="about", index=False)
        df.to_excel(xw, sheet_name="data", index=False)
    argv = ["summary", "book.xlsx", "--value", "conc (mg/L)", "--by", "month"]
    assert main([*argv, "--sheet", "data", "-o", "x1.csv"]) == 0
    assert main([*argv, "--sheet", "2", "-o", "x2.csv"]) == 0
    x1 = pd.read_csv(at / "x1.csv", index_col=0)
    pd.testing.assert_frame_equal(x1, pd.read_csv(at / "x2.csv", index_col=0))
    assert list(x1.index) == ["June", "July", "August"]  # calendar order, not alphabetical
    ref = _gm(df, "conc (mg/L)", ["month"])
    assert x1.loc["July", "gmean"] == pytest.approx(ref["July"], rel=1e-12)
    capsys.readouterr()
    assert main([*argv, "--sheet", "results"]) == 1
    assert "'about', 'data'" in capsys.readouterr().err
    assert main(argv) == 1  # the first sheet has no such column: named in the message
    assert "column 'conc (mg/L)'" in capsys.readouterr().err
    monkeypatch.setitem(sys.modules, "openpyxl", None)  # as if the extra were not installed
    assert main([*argv, "--sheet", "data"]) == 1
    err = capsys.readouterr().err
    assert "needs openpyxl" in err and "pip install 'logstats[xlsx]'" in err


def test_old_excel_and_fake_workbook(at, capsys):
    (at / "old.xls").write_bytes(b"\xd0\xcf\x11\xe0")
    assert main(["summary", "old.xls", "--value", "x"]) == 2
    assert "save it as .xlsx" in capsys.readouterr().err


def test_column_names_with_commas_quotes_and_units(at, capsys):
    df = _samples()
    # a column named exactly "a,b" wins over reading it as the list "a", "b"
    assert main(["summary", "plain.csv", "--value", "a,b", "-o", "c1.csv"]) == 0
    c1 = pd.read_csv(at / "c1.csv", index_col=0)
    assert list(c1.index) == ["a,b"]
    assert c1["gmean"].iloc[0] == pytest.approx(stats.gmean(df["a,b"]), rel=1e-12)
    assert main(["summary", "plain.csv", "--value", 'say "x"', "--value", "conc (mg/L)", "-o", "c2.csv"]) == 0
    assert list(pd.read_csv(at / "c2.csv", index_col=0).index) == ['say "x"', "conc (mg/L)"]


def test_comma_list_rules(at, capsys):
    assert main(["summary", "plain.csv", "--value", "conc (mg/L),a", "-o", "l.csv"]) == 0
    assert list(pd.read_csv(at / "l.csv", index_col=0).index) == ["conc (mg/L)", "a"]
    assert main(["summary", "plain.csv", "--value", "conc,ozone"]) == 1
    err = capsys.readouterr().err
    assert "'conc', 'ozone' are not columns either" in err and "Repeat --value once per column" in err


def test_by_is_repeatable_and_adds_keys(at):
    argv = ["summary", "euro.csv", "--value", "conc (mg/L)", "--by", "month", "--by", "site", "-q"]
    assert main([*argv, "-o", "two.csv"]) == 0
    out = pd.read_csv(at / "two.csv", index_col=[0, 1])
    assert out.index.names == ["month", "site"]
    df = _samples()
    ref = _gm(df, "conc (mg/L)", ["month", "site"])
    assert len(out) == len(ref) == 9
    for key, gm in ref.items():
        assert out.loc[key, "gmean"] == pytest.approx(gm, rel=1e-12)
    gsd = df.groupby(["month", "site"])["conc (mg/L)"].agg(lambda x: stats.gstd(x.to_numpy()))
    assert out["gsd"].to_numpy() == pytest.approx(gsd.reindex(out.index).to_numpy(), rel=1e-12)
    # data order: months in calendar order, sites in natural order
    assert list(dict.fromkeys(out.index.get_level_values(0))) == ["June", "July", "August"]
    # the comma form of two keys, as before
    assert main(["summary", "plain.csv", "--value", "conc (mg/L)", "--by", "month,site",
                 "-o", "old.csv"]) == 0
    pd.testing.assert_frame_equal(pd.read_csv(at / "old.csv", index_col=[0, 1]), out)


def test_compare_with_two_keys_compares_within_the_second(at, capsys):
    assert main(["compare", "euro.csv", "--value", "conc (mg/L)", "--by", "site", "--by", "month",
                 "--reference", "park", "-o", "fc.csv", "-q"]) == 0
    assert capsys.readouterr().err == ""
    out = pd.read_csv(at / "fc.csv")
    df = _samples()
    gm = _gm(df, "conc (mg/L)", ["month", "site"])
    assert len(out) == 6  # 3 months x 2 sites other than the reference
    for _, row in out.iterrows():
        assert row["ratio"] == pytest.approx(gm[(row["month"], row["site"])] / gm[(row["month"], "park")],
                                             rel=1e-10)
        # Welch's t on the logs within the month (scipy.stats.ttest_ind, equal_var=False)
        a = np.log(df.query("month == @row.month and site == @row.site")["conc (mg/L)"])
        b = np.log(df.query("month == @row.month and site == 'park'")["conc (mg/L)"])
        assert row["p_value"] == pytest.approx(stats.ttest_ind(a, b, equal_var=False).pvalue, rel=1e-8)


def test_paired_without_shared_labels_says_why_and_fails(at, capsys):
    df = _samples()
    df["unit"] = df["site"] + "-" + df["half"]  # labels never shared between sites
    df.to_csv(at / "units.csv", index=False)
    code = main(["compare", "units.csv", "--value", "conc (mg/L)", "--by", "site", "--reference", "park",
                 "--replicate", "unit", "--paired"])
    captured = capsys.readouterr()
    assert code == 1
    assert "no fold change for north: no unit label is shared with the reference 'park'" in captured.err
    assert "drop --paired" in captured.err
    assert "nothing could be computed (2 comparison(s), all empty)" in captured.err
    assert captured.out == ""


def test_count_columns_say_what_they_count(at, capsys):
    df = _samples()
    df["unit"] = df["month"] + "-" + df["half"]
    df.to_csv(at / "units.csv", index=False)
    argv = ["compare", "units.csv", "--value", "conc (mg/L)", "--by", "site", "--reference", "park",
            "--replicate", "unit"]
    assert main(argv) == 0
    cap = capsys.readouterr()
    assert "n_values" in cap.out and "n_cells" not in cap.out
    assert "n and n_reference count unit (the units); n_values and n_values_reference count rows" in cap.err
    assert main([*argv, "--unit-name", "samples", "-o", "u.csv"]) == 0
    cols = pd.read_csv(at / "u.csv").columns
    assert "n_samples" in cols and "n_samples_reference" in cols and "n_cells" not in cols


def test_group_order_rule():
    # categorical order, numbers ascending, calendar names, natural order otherwise (never plain
    # alphabetical month names; "2 < 10")
    assert data_order(pd.Categorical(["b", "a", "b"], categories=["b", "c", "a"])) == ["b", "a"]
    assert data_order([9, 5, 10, 5]) == [5, 9, 10]
    assert data_order(["Aug", "June", "jul"]) == ["June", "jul", "Aug"]
    assert data_order(["Wed", "Mon"]) == ["Mon", "Wed"]
    assert data_order(["B10", "B2", "A11"]) == ["A11", "B2", "B10"]
    assert data_order(["up", "ctrl", "down"]) == ["ctrl", "down", "up"]
    key = joined_key(pd.DataFrame({"m": ["June", "May", None], "d": [1, 2, 1]}), ["m", "d"])
    assert list(key.cat.categories) == ["May / 2", "June / 1"] and key.isna().tolist() == [False, False, True]


def _all_actions(parser: argparse.ArgumentParser):
    for action in parser._actions:
        yield parser.prog, action
        if isinstance(action, argparse._SubParsersAction):
            for sub in action.choices.values():
                yield from _all_actions(sub)


def test_every_option_of_every_subcommand_has_help():
    missing = [f"{prog} {'/'.join(a.option_strings) or a.dest}"
               for prog, a in _all_actions(cli.build_parser()) if not a.help]
    assert missing == []


def test_demo_output_and_deprecated_out(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    ns = cli.build_parser().parse_args(["demo", "--output", "d1"])
    assert ns.output == "d1" and ns.out is None
    ns = cli.build_parser().parse_args(["demo", "--out", "d2"])
    assert ns.out == "d2"
    assert main(["demo", "--out", "x", "--output", "y", "--no-files"]) == 2
    assert "--out is the old name of --output" in capsys.readouterr().err
    assert main(["demo", "--out", "z", "--no-files", "--ascii"]) == 0
    assert "--out is deprecated; use --output" in capsys.readouterr().err


def test_numbers_in_messages_are_numbers(at, capsys):
    assert main(["compare", "plain.csv", "--value", "conc (mg/L)", "--by", "day", "--reference", "99"]) == 1
    err = capsys.readouterr().err
    assert "its levels are 0, 1, 2" in err and "np.int64" not in err
