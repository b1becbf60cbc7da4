"""The text form of results: significant digits, the ×/÷ notation, aligned terminal tables.

The ×/÷ notation is that of Limpert, Stahel & Abbt (2001), BioScience 51:341-352: "x̄* ×/ s*" means
the range from x̄*/s* to x̄*·s*. Rounding to significant digits is the common-practice rule (round
half to even on the binary value, as Python's own formatting does).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from logstats.format import (
    format_column,
    format_factor,
    format_interval,
    format_number,
    format_p,
    format_table,
    format_times_divide,
)


@pytest.mark.parametrize(
    ("x", "digits", "text"),
    [
        (148.31, 3, "148"),
        (2.0, 3, "2.00"),  # trailing zeros kept: the third digit is known
        (0.0012345, 3, "0.00123"),
        (12345.0, 3, "12300"),  # rounded to 3 significant digits, no exponent below 1e6
        (999_999.0, 3, "1.00e+06"),  # rounding carries into the next power of ten
        (9.9996, 3, "10.0"),
        (1.5e7, 3, "1.50e+07"),
        (3.2e-5, 2, "3.2e-05"),
        (-41.26, 3, "-41.3"),
        (0.0, 3, "0"),
        (float("nan"), 3, "nan"),
        (float("inf"), 3, "inf"),
        (None, 3, "nan"),
    ],
)
def test_format_number(x, digits, text):
    assert format_number(x, digits) == text


@pytest.mark.parametrize(
    ("factor", "text"),
    [
        (2.7183, "2.7"),  # excess 1.7183 -> two significant digits
        (1.0234, "1.023"),  # excess 0.0234 -> 0.023
        (1.5, "1.50"),
        (15.3, "15"),
        (1.0, "1"),
        (float("nan"), "nan"),
    ],
)
def test_format_factor(factor, text):
    assert format_factor(factor) == text


def test_times_divide_notation():
    # the example of the issue: 148 ×/÷ 2.7
    assert format_times_divide(148.31, 2.7183) == "148 ×/÷ 2.7"
    assert format_times_divide(148.31, 2.7183, ascii=True) == "148 x/ 2.7"
    assert format_times_divide(0.0123456, 1.0234, digits=4) == "0.01235 ×/÷ 1.0234"
    assert format_times_divide(52.0, float("nan")) == "52.0 ×/÷ nan"


def test_times_divide_reads_as_the_interval_it_stands_for():
    # Limpert et al. (2001): gmean ×/÷ s* is the interval [gmean / s*, gmean · s*]; the printed
    # numbers reproduce the interval to the digits shown.
    gm, f = 148.31, 2.7183
    text = format_times_divide(gm, f)
    g_txt, f_txt = (float(t) for t in text.split(" ×/÷ "))
    assert g_txt / f_txt == pytest.approx(gm / f, rel=0.02)
    assert g_txt * f_txt == pytest.approx(gm * f, rel=0.02)


def test_interval_and_p():
    assert format_interval(120.04, 183.2) == "120 to 183"
    assert format_interval(-1.5, 2.25) == "-1.50 to 2.25"
    assert [format_p(p) for p in (0.6412, 0.04321, 1.234e-7, 0.0, float("nan"))] == [
        "0.64", "0.043", "1.2e-07", "<1e-300", "nan"]


def test_format_column_styles():
    assert format_column([0.5, 0.0123], "p_adjusted") == ["0.50", "0.012"]
    assert format_column(np.array([3.0, np.nan]), "n_censored") == ["3", "nan"]
    assert format_column([127499.84, -38126.31], "aic_normal") == ["127499.8", "-38126.3"]
    assert format_column(pd.Series([True, False]), "converged") == ["yes", "no"]
    assert format_column(pd.Series(["log", "linear"]), "preferred") == ["log", "linear"]
    assert format_column([2.71828], "gsd") == ["2.7"]


@given(st.floats(min_value=1e-200, max_value=1e200), st.integers(min_value=1, max_value=8))
def test_format_number_round_trips_to_its_digits(x, digits):
    # invariant: the text read back differs from x by at most half a unit in the last digit kept
    back = float(format_number(x, digits))
    assert math.isclose(back, x, rel_tol=0.5 * 10.0 ** (1 - digits) + 1e-12)


@given(st.floats(min_value=1.0, max_value=1e5), st.integers(min_value=2, max_value=6))
def test_format_factor_keeps_the_excess(f, digits):
    # invariant: the factor's excess over 1 is shown to `digits` significant digits (or better)
    back = float(format_factor(f, digits))
    excess = f - 1.0
    assert abs(back - f) <= 0.5 * 10.0 ** (1 - digits) * excess * 1.0001 + 5e-13


def _frame():
    return pd.DataFrame(
        {"n": [12, 9], "gmean": [148.31, 52.0], "gsd": [2.7183, 1.0234], "p_value": [0.04321, 1.2e-7]},
        index=pd.Index(["vehicle", "drug"], name="arm"),
    )


def test_table_exact():
    assert format_table(_frame()) == (
        "arm       n   gmean ×/÷ gsd  p_value\n"
        "-------  --  --------------  -------\n"
        "vehicle  12   148 ×/÷ 2.7      0.043\n"
        "drug      9  52.0 ×/÷ 1.023  1.2e-07"
    )


def test_table_ascii_and_separate_columns():
    assert format_table(_frame(), ascii=True, times_divide=False, columns=["gmean", "gsd"]) == (
        "arm      gmean    gsd\n"
        "-------  -----  -----\n"
        "vehicle    148    2.7\n"
        "drug      52.0  1.023"
    )
    assert "x/" in format_table(_frame(), ascii=True)
    assert "×" not in format_table(_frame(), ascii=True)


def test_table_wraps_to_width_repeating_the_index():
    text = format_table(_frame(), width=30)
    blocks = text.split("\n\n")
    assert len(blocks) == 2
    assert all(b.startswith("arm") for b in blocks)
    assert max(len(line) for line in text.splitlines()) <= 30
    assert "p_value" in blocks[1]


def test_table_multiindex_nan_and_series():
    idx = pd.MultiIndex.from_tuples([("a", "x"), ("b", "x")], names=["arm", "variable"])
    t = pd.DataFrame({"gmean": [1.5, np.nan], "gsd": [2.0, np.nan], "n": [3, 0]}, index=idx)
    assert format_table(t) == (
        "arm  variable  gmean ×/÷ gsd  n\n"
        "---  --------  -------------  -\n"
        "a    x          1.50 ×/÷ 2.0  3\n"
        "b    x           nan ×/÷ nan  0"
    )
    s = pd.Series({"n": 4, "gmean": 10.0, "gsd": 1.5})
    assert format_table(s).splitlines()[-1].split() == ["4", "10.0", "×/÷", "1.50"]


def test_table_refuses_other_types():
    with pytest.raises(TypeError, match="DataFrame"):
        format_table([1, 2, 3])
