"""Progress on long steps and a light start (issue 11, item 5).

Progress lines go to standard error only when it is a terminal and ``--quiet`` is not given; the
command line imports nothing heavy (matplotlib, dask, xarray, scipy.stats) of its own before the
arguments are parsed, so ``--help`` and a data error cost little more than ``import logstats``
(a fact of common practice for command lines: help should be instant). The data are invented.
"""

from __future__ import annotations

import functools
import io
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from logstats.cli import main


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


@pytest.fixture()
def table(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    rng = np.random.default_rng(5)
    pd.DataFrame({"arm": np.repeat(["a", "b"], 30), "x": rng.lognormal(3.0, 0.5, 60)}).to_csv(
        "t.csv", index=False)
    return tmp_path


def test_progress_only_on_a_terminal_and_not_with_quiet(table, monkeypatch, capsys):
    term = _Terminal()
    monkeypatch.setattr(sys, "stderr", term)
    assert main(["report", "t.csv", "--value", "x", "--by", "arm", "--reference", "a", "-o", "r.html"]) == 0
    lines = term.getvalue().splitlines()
    steps = [ln for ln in lines if ln.startswith("logstats: [")]
    assert any("report: figures" in ln for ln in steps) and any("report: overview" in ln for ln in steps)
    assert all(ln.split("]")[0].endswith(" s") for ln in steps)  # elapsed seconds, as numbers
    term = _Terminal()
    monkeypatch.setattr(sys, "stderr", term)
    assert main(["report", "t.csv", "--value", "x", "--by", "arm", "-o", "r.html", "--quiet"]) == 0
    assert term.getvalue() == ""
    monkeypatch.undo()
    monkeypatch.chdir(table)
    assert main(["report", "t.csv", "--value", "x", "--by", "arm", "-o", "r.html"]) == 0
    err = capsys.readouterr().err  # captured: not a terminal, so only the information line
    assert "logstats: [" not in err and "wrote r.html" in err


def test_demo_reports_progress_on_a_terminal(tmp_path, monkeypatch):
    from logstats import demo

    small = functools.partial(demo.make_cells, cells_per_well=40)  # the same screen, fewer cells
    monkeypatch.setattr(demo, "make_cells", small)
    seen: list[str] = []
    demo.run_demo(tmp_path / "d", seed=3, progress=seen.append, stream=io.StringIO())
    assert seen[0] == "generating the invented screen"
    assert "drawing the figures" in seen and any(s.startswith("report:") for s in seen)


_PROBE = """
import sys, logstats
before = set(sys.modules)
from logstats.cli import main
code = main(sys.argv[1:])
heavy = sorted(m for m in set(sys.modules) - before
               if m.split('.')[0] in ('matplotlib', 'dask', 'xarray') or m.startswith('scipy.stats'))
print('HEAVY', heavy)
"""


@pytest.mark.parametrize("argv", [["--help"], ["summary", "--help"],
                                  ["summary", "nowhere.csv", "--value", "x"],
                                  ["summary", "t.csv", "--value", "nosuch"]])
def test_no_heavy_import_of_its_own_before_parsing(table, argv):
    r = subprocess.run([sys.executable, "-c", _PROBE, *argv], capture_output=True, text=True, cwd=table,
                       timeout=120)
    assert "HEAVY []" in r.stdout, r.stdout + r.stderr
