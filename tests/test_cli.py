"""The ``logstats`` command line, end to end.

The end-to-end cases run ``python -m logstats`` in subprocesses (started together, so the module
costs about one interpreter start per core); the many option checks call ``main(argv)`` in process.
Numbers are checked against scipy: scipy.stats.gmean, scipy.stats.gstd (ddof=1), Welch's
scipy.stats.ttest_ind on the logs (REFERENCES.md, "Comparing groups") and scipy.stats.lognorm.fit
with floc=0 for the log-normal MLE.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from logstats.cli import main
from logstats.format import format_number

PNG = b"\x89PNG\r\n\x1a\n"


def _cells() -> pd.DataFrame:
    """Invented: three arms x four dishes x 60 cells; a second channel with a detection limit."""
    rng = np.random.default_rng(8)
    rows = []
    for arm, level in {"ctrl": 50.0, "up": 90.0, "down": 30.0}.items():
        for d in range(4):
            dish = level * rng.lognormal(0.0, 0.25)
            x = dish * rng.lognormal(0.0, 0.8, 60)
            y = rng.lognormal(2.5, 0.7, 60)
            rows.append(pd.DataFrame({"arm": arm, "dish": f"{arm}{d}", "signal": np.round(x, 4),
                                      "dim": np.round(np.where(y <= 8.0, 8.0, y), 4), "lim": 8.0}))
    return pd.concat(rows, ignore_index=True)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    df = _cells()
    df.to_csv(d / "cells.csv", index=False)
    df.to_csv(d / "cells.tsv", sep="\t", index=False)
    df.to_parquet(d / "cells.parquet")
    z = df.copy()
    z.loc[[0, 5, 200], "signal"] = [0.0, -2.0, 0.0]
    z.to_csv(d / "zeros.csv", index=False)
    (d / "empty.csv").write_text("")
    (d / "header.csv").write_text("arm,signal\n")
    (d / "malformed.csv").write_text("arm,signal\nctrl,1.5\nctrl,2.5,7\nup,3.0\n")
    (d / "text.csv").write_text("arm,signal\nctrl,1.5\nctrl,n/a?\nup,3.0\n")
    (d / "table.xlsx").write_text("not really")
    return d


def _run_all(cmds: dict[str, list[str]], cwd) -> dict[str, subprocess.CompletedProcess]:
    env = dict(os.environ, PYTHONIOENCODING="utf-8", COLUMNS="250", MPLBACKEND="Agg")
    procs = {k: subprocess.Popen([sys.executable, *argv], cwd=cwd, env=env, stdout=subprocess.PIPE,
                                 stderr=subprocess.PIPE, text=True, encoding="utf-8")
             for k, argv in cmds.items()}
    out = {}
    for k, p in procs.items():
        stdout, stderr = p.communicate(timeout=120)
        out[k] = subprocess.CompletedProcess(p.args, p.returncode, stdout, stderr)
    return out


@pytest.fixture(scope="module")
def runs(files):
    m = ["-m", "logstats"]
    no_pyarrow = ("import sys; sys.modules['pyarrow'] = None; sys.modules['fastparquet'] = None; "
                  "from logstats.cli import main; sys.exit(main(sys.argv[1:]))")
    return _run_all({
        "print": m + ["summary", "cells.csv", "--value", "signal", "--by", "arm"],
        "usage": m + ["summary", "cells.csv", "--value", "signal", "--bogus"],
        "missing": m + ["summary", "cells.csv", "--value", "sgnal", "--by", "arm"],
        "text": m + ["summary", "text.csv", "--value", "signal"],
        "empty": m + ["summary", "empty.csv", "--value", "signal"],
        "malformed": m + ["summary", "malformed.csv", "--value", "signal"],
        "compare": m + ["compare", "cells.csv", "--value", "signal", "--by", "arm", "--reference", "ctrl",
                        "--replicate", "dish", "--output", "fc.csv", "--plot", "groups.png"],
        "parquet": ["-c", no_pyarrow, "summary", "cells.parquet", "--value", "signal"],
    }, cwd=files)


# -------------------------------------------------------------------------- subprocess end to end

def test_summary_prints_aligned_table(runs):
    r = runs["print"]
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert lines[0].split()[:2] == ["arm", "n"] and "gmean ×/÷ gsd" in lines[0]
    assert set(lines[1]) <= {"-", " "}
    assert [ln.split()[0] for ln in lines[2:]] == ["ctrl", "down", "up"]
    assert len({len(ln.rstrip()) for ln in lines[:2]}) == 1  # header and rule line up


def test_usage_error_exit_2(runs):
    r = runs["usage"]
    assert r.returncode == 2
    assert "usage: logstats summary" in r.stderr and "--bogus" in r.stderr


def test_missing_column_names_file_and_column(runs):
    r = runs["missing"]
    assert r.returncode == 1
    assert r.stderr.startswith("logstats: error: cells.csv: column 'sgnal' (from --value)")
    assert "'signal'" in r.stderr and "Pass --value" in r.stderr
    assert "Traceback" not in r.stderr


def test_non_numeric_column(runs):
    r = runs["text"]
    assert r.returncode == 1
    assert "text.csv: column 'signal' is not numeric" in r.stderr
    assert "'n/a?'" in r.stderr and "data row 2" in r.stderr


def test_empty_file(runs):
    r = runs["empty"]
    assert r.returncode == 1
    assert "logstats: error: empty.csv: the file is empty" in r.stderr


def test_malformed_csv(runs):
    r = runs["malformed"]
    assert r.returncode == 1
    assert "malformed.csv: malformed CSV table" in r.stderr and "line 3" in r.stderr


def test_compare_with_replicates_matches_welch_on_dish_means(runs, files):
    r = runs["compare"]
    assert r.returncode == 0, r.stderr
    assert (files / "groups.png").read_bytes()[:8] == PNG
    out = pd.read_csv(files / "fc.csv", index_col="arm")
    assert list(out.index) == ["down", "up"]  # the reference is left out, the others sorted
    df = _cells()
    dish = np.log(df.groupby(["arm", "dish"])["signal"].apply(stats.gmean))
    for arm in ("down", "up"):
        res = stats.ttest_ind(dish[arm], dish["ctrl"], equal_var=False)  # Welch on replicate log-means
        ci = res.confidence_interval(0.95)
        assert out.loc[arm, "p_value"] == pytest.approx(res.pvalue, rel=1e-9)
        ratio = np.exp(dish[arm].mean() - dish["ctrl"].mean())
        assert out.loc[arm, "ratio"] == pytest.approx(ratio, rel=1e-12)
        assert out.loc[arm, "ci_low"] == pytest.approx(np.exp(ci.low), rel=1e-9)
        assert out.loc[arm, "ci_high"] == pytest.approx(np.exp(ci.high), rel=1e-9)
        assert out.loc[arm, "n"] == 4 and out.loc[arm, "n_reference"] == 4


def test_parquet_without_pyarrow(runs):
    r = runs["parquet"]
    assert r.returncode == 1
    assert "cells.parquet: reading Parquet needs pyarrow" in r.stderr
    assert "pip install 'logstats[parquet]'" in r.stderr


# -------------------------------------------------------------------------- in process

@pytest.fixture
def at(files, monkeypatch):
    monkeypatch.chdir(files)
    monkeypatch.setenv("COLUMNS", "250")
    return files


@pytest.mark.parametrize("sub", ["summary", "compare", "fit", "check", "report", "demo"])
def test_help_with_example(sub, capsys):
    assert main([sub, "--help"]) == 0
    text = capsys.readouterr().out
    assert f"usage: logstats {sub}" in text
    assert f"example:\n  logstats {sub}" in text


def test_top_level_help_and_version(capsys):
    assert main(["--help"]) == 0
    assert "summary" in capsys.readouterr().out
    assert main(["--version"]) == 0
    assert main([]) == 2  # a subcommand is required


@pytest.mark.parametrize("fmt_file", ["cells.tsv", "cells.parquet"])
def test_tsv_and_parquet_inputs(at, fmt_file, capsys):
    assert main(["summary", fmt_file, "--value", "signal", "--ascii"]) == 0
    out = capsys.readouterr().out
    assert "x/" in out and "×" not in out
    gm = stats.gmean(_cells()["signal"].to_numpy())
    assert out.splitlines()[2].split()[0] == "signal"
    assert f"{gm:.3g}" in out


def test_nonpositive_hint_and_drop(at, capsys):
    assert main(["summary", "zeros.csv", "--value", "signal", "--by", "arm"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("logstats: error: zeros.csv: column 'signal' holds 3 value(s) at or below zero")
    assert "--nonpositive drop" in err and "nonpositive='drop'" not in err
    assert main(["summary", "zeros.csv", "--value", "signal", "--by", "arm", "--nonpositive", "drop",
                 "--output", "z.csv"]) == 0
    out = pd.read_csv(at / "z.csv", index_col="arm")
    assert out["n_nonpositive"].sum() == 3 and out.loc["ctrl", "n_nonpositive"] == 3


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["summary", "cells.csv", "--value", "signal", "--output", "out.xlsx"], "must end in .csv"),
        (["summary", "cells.csv", "--value", "signal", "--plot", "f.gif"], "must end in .png"),
        (["summary", "cells.csv", "--value", "signal", "--confidence-level", "95"], "between 0 and 1"),
        (["summary", "table.xlsx", "--value", "signal"], "--format csv|tsv|parquet"),
        (["compare", "cells.csv", "--value", "signal", "--by", "arm", "--reference", "ctrl", "--paired"],
         "--paired needs --replicate"),
        (["compare", "cells.csv", "--value", "signal", "--by", "arm", "--reference", "ctrl",
          "--equivalence", "0.8"], "LOW,HIGH"),
        (["compare", "cells.csv", "--value", "signal", "--by", "arm"], "--reference"),
        (["report", "cells.csv", "--value", "signal", "-o", "r.txt"], "must end in .html"),
        (["summary", "cells.csv", "--value", "signal", "--by", "signal"], "also a --value"),
    ],
)
def test_usage_errors(at, argv, message, capsys):
    assert main(argv) == 2
    assert message in capsys.readouterr().err


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["summary", "nowhere.csv", "--value", "signal"], "nowhere.csv: file not found"),
        (["summary", "header.csv", "--value", "signal"], "header.csv: the table has a header"),
        (["compare", "cells.csv", "--value", "signal", "--by", "arm", "--reference", "placebo"],
         "cells.csv: --reference 'placebo' is not a level of 'arm'; its levels are 'ctrl'"),
        (["summary", "cells.csv", "--value", "signal", "--by", "Arm"], "did you mean 'arm'?"),
        (["fit", "cells.csv", "--value", "dim", "--detection-limit", "limit"],
         "column 'limit' (from --detection-limit)"),
        (["fit", "cells.csv", "--value", "dim", "--detection-limit", "-3"], "positive number"),
        (["summary", "cells.csv", "--value", "arm"], "column 'arm' is not numeric"),
    ],
)
def test_data_errors(at, argv, message, capsys):
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert err.startswith("logstats: error: ")
    assert message in err


def test_fit_with_detection_limit_against_scipy(at):
    assert main(["fit", "cells.csv", "--value", "dim", "--detection-limit", "lim", "--output", "f.csv"]) == 0
    out = pd.read_csv(at / "f.csv", index_col=0)
    y = _cells()["dim"].to_numpy()
    cens = y <= 8.0
    data = stats.CensoredData(uncensored=y[~cens], left=np.full(int(cens.sum()), 8.0))

    def tight(func, x0, args=(), disp=0):
        return optimize.fmin(func, x0, args=args, xtol=1e-10, ftol=1e-12, disp=disp)

    s, _, scale = stats.lognorm.fit(data, floc=0, optimizer=tight)  # scipy censored MLE reference
    assert out["n_censored"].iloc[0] == cens.sum()
    assert out["mu"].iloc[0] == pytest.approx(np.log(scale), rel=1e-6)
    assert out["sigma"].iloc[0] == pytest.approx(s, rel=1e-6)
    # a number works as well as a column
    assert main(["fit", "cells.csv", "--value", "dim", "--detection-limit", "8", "--output", "g.csv"]) == 0
    pd.testing.assert_frame_equal(pd.read_csv(at / "g.csv", index_col=0), out)


def test_fit_uncensored_and_check(at, capsys):
    assert main(["fit", "cells.csv", "--value", "signal", "--by", "arm"]) == 0
    text = capsys.readouterr().out
    x = _cells().query("arm == 'up'")["signal"].to_numpy()
    s, _, scale = stats.lognorm.fit(x, floc=0)  # closed-form MLE (ddof=0)
    row = [ln for ln in text.splitlines() if ln.startswith("up ")][0].split()
    assert row[1:3] == [format_number(np.log(scale)), format_number(s)]
    assert main(["check", "cells.csv", "--value", "signal", "--by", "arm", "--plot", "qq.png"]) == 0
    text = capsys.readouterr().out
    assert "aic_lognormal" in text and "preferred" in text
    assert (at / "qq.png").read_bytes()[:8] == PNG


def test_several_values_and_one_plot_each(at, capsys):
    assert main(["summary", "cells.csv", "--value", "signal,dim", "--by", "arm", "--linear",
                 "--plot", "h.svg"]) == 0
    out = capsys.readouterr()
    assert "variable" in out.out and "median" in out.out
    assert (at / "h-signal.svg").read_text().lstrip().startswith("<?xml")
    assert (at / "h-dim.svg").exists()
    assert main(["summary", "cells.csv", "--value", "signal", "--value", "dim", "--output", "v.parquet"]) == 0
    assert list(pd.read_parquet(at / "v.parquet").index) == ["signal", "dim"]


def test_report_command(at, capsys):
    assert main(["report", "cells.csv", "--value", "signal", "--by", "arm", "--replicate", "dish",
                 "--reference", "down", "-o", "rep.html"]) == 0
    text = (at / "rep.html").read_text(encoding="utf-8")
    assert 'id="comparisons"' in text and "data:image/png;base64," in text
    assert "<code>cells.csv</code>" in text
    assert "wrote rep.html" in capsys.readouterr().err


def test_warnings_are_reported_as_messages(at, capsys):
    df = _cells()
    df.loc[[1, 2], "arm"] = np.nan
    df.to_csv(at / "nokey.csv", index=False)
    assert main(["summary", "nokey.csv", "--value", "signal", "--by", "arm"]) == 0
    err = capsys.readouterr().err
    assert err.startswith("logstats: warning: nokey.csv: 2 row(s) have a missing value")


def test_summary_output_file_matches_scipy(at, capsys):
    assert main(["summary", "cells.csv", "--value", "signal", "--by", "arm", "--output", "s.csv"]) == 0
    assert "wrote s.csv" in capsys.readouterr().err
    out = pd.read_csv(at / "s.csv", index_col="arm")
    df = _cells()
    for arm, sub in df.groupby("arm"):
        x = sub["signal"].to_numpy()
        assert out.loc[arm, "gmean"] == pytest.approx(stats.gmean(x), rel=1e-12)  # scipy.stats.gmean
        assert out.loc[arm, "gsd"] == pytest.approx(stats.gstd(x), rel=1e-12)  # scipy.stats.gstd, ddof=1
        assert out.loc[arm, "n"] == len(x)
