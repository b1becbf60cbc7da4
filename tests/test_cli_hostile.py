"""Hostile files on the command line (issue 12, item 9): a `logstats: error:` line naming the file and
what to do, exit code 1, never a traceback. Expected figures are scipy.stats.gmean of the same values."""

from __future__ import annotations

import gzip

import numpy as np
import pytest
from scipy import stats

from logstats.cli import main


@pytest.fixture()
def files(tmp_path):
    table = "g,x\n" + "".join(f"{'ab'[i % 2]},{1.5 + i}\n" for i in range(20))
    full = gzip.compress(table.encode())
    (tmp_path / "trunc.csv.gz").write_bytes(full[: len(full) // 2])
    (tmp_path / "binary.csv").write_bytes(bytes(range(256)) * 8)
    (tmp_path / "fake.parquet").write_text("g,x\na,1\n")
    (tmp_path / "empty.csv").write_text("")
    (tmp_path / "names.csv").write_text('"conc, (mg/L)","say ""x"""\n1.5,a\n2.5,a\n4.0,b\n8.0,b\n')
    return tmp_path


@pytest.mark.parametrize("name,needle", [
    ("trunc.csv.gz", "truncated or corrupt"),
    ("binary.csv", "--encoding"),
    ("fake.parquet", "cannot be read as PARQUET"),
    ("empty.csv", "the file is empty"),
])
def test_broken_inputs_give_one_error_line(files, capsys, name, needle):
    code = main(["summary", str(files / name), "--value", "x"])
    err = capsys.readouterr().err
    assert code == 1
    assert err.startswith("logstats: error:") and name in err and needle in err
    assert "Traceback" not in err


def test_column_names_with_commas_and_quotes(files, capsys):
    code = main(["summary", str(files / "names.csv"), "--value", "conc, (mg/L)", "--by", 'say "x"'])
    out = capsys.readouterr().out
    assert code == 0
    # the geometric means printed to 3 significant digits: scipy.stats.gmean per group
    assert f"{stats.gmean([1.5, 2.5]):.3g}" in out and f"{stats.gmean([4.0, 8.0]):.3g}" in out
    assert np.isfinite(stats.gmean([1.5, 2.5]))
