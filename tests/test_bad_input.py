"""Table-driven bad input: each row gives the data, the call, and the expected result or error."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

import logstats  # noqa: F401  (registers the accessors)


def frame(values, groups=None, dtype=None):
    values = pd.array(values, dtype=dtype) if dtype else values
    g = groups if groups is not None else ["a"] * len(values)
    return pd.DataFrame({"g": g, "x": values})


# name, data factory, call, expected ("ok", check) or (error type, regex that must appear)
CASES = [
    ("zeros raise", lambda: frame([1.0, 0.0, 2.0]), lambda d: d.logstats.summary(by="g"),
     (ValueError, r"column 'x'.*1 value\(s\) at or below zero.*'a'.*nonpositive='drop'")),
    ("negatives drop counted", lambda: frame([1.0, -3.0, 4.0]),
     lambda d: d.logstats.summary(by="g", nonpositive="drop"),
     ("ok", lambda r: r.loc["a", "n"] == 2 and r.loc["a", "n_nonpositive"] == 1)),
    ("-inf is non-positive", lambda: frame([1.0, -np.inf, 4.0]),
     lambda d: d.logstats.summary(by="g", nonpositive="drop"),
     ("ok", lambda r: r.loc["a", "n_nonpositive"] == 1)),
    ("+inf refused", lambda: frame([1.0, np.inf]), lambda d: d.logstats.summary(by="g"),
     (ValueError, r"column 'x'.*\+inf.*NaN")),
    ("NaN skipped and counted", lambda: frame([1.0, np.nan, 4.0]), lambda d: d.logstats.summary(by="g"),
     ("ok", lambda r: r.loc["a", "n"] == 2 and r.loc["a", "n_missing"] == 1 and r.loc["a", "gmean"] == 2.0)),
    ("None in object column", lambda: frame(np.array([1.0, None, 4.0], dtype=object)),
     lambda d: d.logstats.gmean(columns="x"),
     (TypeError, r"'x'.*not numeric")),
    ("pd.NA in Float64", lambda: frame([1.0, pd.NA, 4.0], dtype="Float64"),
     lambda d: d.logstats.summary(by="g"),
     ("ok", lambda r: r.loc["a", "n_missing"] == 1 and r.loc["a", "gmean"] == pytest.approx(2.0))),
    ("text column named", lambda: pd.DataFrame({"g": ["a"], "x": ["12"]}),
     lambda d: d.logstats.summary(by="g", columns="x"), (TypeError, r"'x' \(.*\) are not numeric")),
    ("boolean column named", lambda: frame([True, False]),
     lambda d: d.logstats.summary(by="g", columns="x"), (TypeError, r"'x'.*not numeric")),
    ("datetime column skipped by default",
     lambda: pd.DataFrame({"g": ["a", "a"], "t": pd.to_datetime(["2026-01-01", "2026-01-02"]),
                           "x": [1.0, 2.0]}),
     lambda d: d.logstats.summary(by="g"), ("ok", lambda r: list(r.index) == ["a"])),
    ("no numeric columns", lambda: pd.DataFrame({"g": ["a"], "s": ["x"]}),
     lambda d: d.logstats.summary(by="g"), (TypeError, r"no numeric value columns.*columns=")),
    ("empty frame", lambda: frame([]), lambda d: d.logstats.summary(by="g", columns="x"),
     ("ok", lambda r: len(r) == 0)),
    ("one-value group NaN spread", lambda: frame([2.0, 3.0, 5.0], ["a", "a", "b"]),
     lambda d: d.logstats.summary(by="g"),
     ("ok", lambda r: np.isnan(r.loc["b", "gsd"]) and r.loc["b", "gmean"] == pytest.approx(5.0))),
    ("all-missing group", lambda: frame([np.nan, np.nan, 5.0], ["a", "a", "b"]),
     lambda d: d.logstats.summary(by="g"),
     ("ok", lambda r: r.loc["a", "n"] == 0 and r.loc["a", "n_missing"] == 2
      and np.isnan(r.loc["a", "gmean"]))),
    ("float32 computed in float64", lambda: frame(np.array([1.5, 2.5], dtype=np.float32)),
     lambda d: d.logstats.gmean(by="g"),
     ("ok", lambda r: r.loc["a", "x"] == pytest.approx(np.sqrt(1.5 * 2.5), rel=1e-15))),
    ("int64 near 2**62", lambda: frame(np.array([2**62, 2**61], dtype=np.int64)),
     lambda d: d.logstats.gmean(by="g"),
     ("ok", lambda r: r.loc["a", "x"] == pytest.approx(2.0**61.5, rel=1e-15))),
    ("1e-300 and 1e300", lambda: frame([1e-300, 1e300]), lambda d: d.logstats.gmean(by="g"),
     ("ok", lambda r: r.loc["a", "x"] == pytest.approx(1.0, rel=1e-12))),
    ("duplicate index labels", lambda: frame([1.0, 4.0]).set_axis([0, 0]),
     lambda d: d.logstats.gmean(by="g"), ("ok", lambda r: r.loc["a", "x"] == pytest.approx(2.0))),
    ("unknown policy", lambda: frame([1.0]), lambda d: d.logstats.gmean(nonpositive="zero"),
     (ValueError, r"nonpositive='zero' is not one of")),
    ("xarray text variable", lambda: xr.DataArray(np.array(["a", "b"]), dims="cell"),
     lambda d: d.logstats.gmean("cell"), (TypeError, r"not numeric")),
    ("xarray +inf", lambda: xr.DataArray([1.0, np.inf], dims="cell", name="gfp"),
     lambda d: d.logstats.gmean("cell"), (ValueError, r"variable 'gfp'.*\+inf")),
]


@pytest.mark.parametrize("name,make,call,expected", CASES, ids=[c[0] for c in CASES])
def test_bad_input_table(name, make, call, expected):
    data = make()
    before = data.copy(deep=True)
    kind, check = expected
    if kind == "ok":
        assert check(call(data)), name
    else:
        with pytest.raises(kind, match=check):
            call(data)
    # inputs are never mutated
    if isinstance(data, pd.DataFrame):
        pd.testing.assert_frame_equal(data, before)
    else:
        xr.testing.assert_identical(data, before)
