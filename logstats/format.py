"""Text form of results: numbers with sensible significant digits, ``×/÷`` spreads, aligned tables.

A log-normal quantity is best written as its geometric mean times-or-divided-by a factor, the
``×/÷`` notation of Limpert, Stahel & Abbt (2001): ``148 ×/÷ 2.7`` reads "from 148/2.7 to 148·2.7".
Every function here only formats numbers it is given; none computes a statistic.

Digits
------
Values are rounded to ``digits`` significant digits (trailing zeros kept, so ``2.00`` says that the
third digit is known). A factor such as a GSD or the ×/÷ half-width of an interval is at least 1 and
what it measures is its excess over 1, so the factor is given with as many decimals as show that
excess to ``digits − 1`` significant digits: ``2.7183 → 2.7``, ``1.0234 → 1.023``, ``15.3 → 15``.

References
----------
Limpert, E., Stahel, W. A. & Abbt, M. (2001). Log-normal distributions across the sciences: keys
and clues. BioScience 51:341-352 (the ×/÷ notation, "times/divide").
"""

from __future__ import annotations

import math
import re
from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "TIMES_DIVIDE",
    "TIMES_DIVIDE_ASCII",
    "count_label",
    "data_order",
    "format_column",
    "format_factor",
    "format_interval",
    "format_number",
    "format_p",
    "format_table",
    "format_times_divide",
    "in_data_order",
    "is_text_column",
    "joined_key",
]

#: The ×/÷ sign, and its ASCII fallback.
TIMES_DIVIDE = "×/÷"
TIMES_DIVIDE_ASCII = "x/"

#: Columns shown as p-values (two significant digits).
_P_COLUMNS = frozenset({"p_value", "p_adjusted", "equivalence_p", "normality_p_linear", "normality_p_log"})
#: Columns shown as whole numbers even when stored as floats (NaN allowed).
_COUNT_COLUMNS = frozenset({
    "n", "n_missing", "n_nonpositive", "n_censored", "n_reference", "n_cells", "n_cells_reference",
    "n_no_replicate", "n_unpaired", "rows", "groups",
})
#: Columns that are multiplicative factors (at least 1).
_FACTOR_COLUMNS = frozenset({"gsd", "ci_factor"})
#: Columns compared by differences (AIC, log-likelihood): one decimal, never rounded to 3 digits.
_FIXED_COLUMNS = frozenset({"aic_normal", "aic_lognormal", "aic", "loglik", "delta_aic"})


def _finite(x: Any) -> float | None:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _special(x: Any) -> str | None:
    """The text for missing or infinite values, or None for a finite number."""
    if x is None or x is pd.NA or x is pd.NaT:
        return "nan"
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(v):
        return "nan"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    return None


def _sci_parts(v: float, sig: int) -> tuple[str, int]:
    """``v`` rounded to ``sig`` significant digits, as (mantissa text, decimal exponent)."""
    text = f"{v:.{max(sig, 1) - 1}e}"
    mant, exp = text.split("e")
    return mant, int(exp)


def format_number(x: Any, digits: int = 3) -> str:
    """``x`` rounded to ``digits`` significant digits, in fixed notation from 1e-4 up to 1e6.

    Trailing zeros are kept (``2.00``); larger and smaller magnitudes use an exponent.

    Examples
    --------
    >>> format_number(148.31), format_number(2.0), format_number(0.0012345), format_number(12345)
    ('148', '2.00', '0.00123', '12300')
    >>> format_number(1.5e7), format_number(float("nan")), format_number(0)
    ('1.50e+07', 'nan', '0')
    """
    special = _special(x)
    if special is not None:
        return special
    v = float(x)
    if v == 0.0:
        return "0"
    digits = max(int(digits), 1)
    mant, exp = _sci_parts(v, digits)
    if -4 <= exp < 6:
        dec = max(digits - 1 - exp, 0)
        return f"{float(f'{mant}e{exp}'):.{dec}f}"
    return f"{mant}e{exp:+03d}"


def format_factor(factor: Any, digits: int = 2) -> str:
    """A multiplicative factor (≥ 1) with its excess over 1 to ``digits`` significant digits.

    Examples
    --------
    >>> format_factor(2.7183), format_factor(1.0234), format_factor(15.3), format_factor(1.5)
    ('2.7', '1.023', '15', '1.50')
    >>> format_factor(1.0)
    '1'
    """
    special = _special(factor)
    if special is not None:
        return special
    f = float(factor)
    digits = max(int(digits), 1)
    excess = f - 1.0
    if f >= 1e6 or excess < 0.0:
        return format_number(f, digits + 1)
    if excess == 0.0:
        return "1"
    _, exp = _sci_parts(excess, digits)
    dec = min(max(digits - 1 - exp, 0), 12)
    return f"{f:.{dec}f}"


def format_times_divide(gmean: Any, factor: Any, digits: int = 3, *, ascii: bool = False) -> str:
    """A geometric mean and its multiplicative spread, ``"148 ×/÷ 2.7"`` (Limpert et al. 2001).

    Parameters
    ----------
    gmean : float
        The geometric mean (or any point estimate on the ratio scale).
    factor : float
        The ×/÷ factor, at least 1: a GSD (the interval then covers about 68 % of a log-normal
        population) or the half-width factor of a confidence interval.
    digits : int, default 3
        Significant digits of ``gmean``; the factor's excess over 1 gets ``digits − 1`` (at least 1).
    ascii : bool, default False
        Write ``x/`` instead of ``×/÷``.

    Returns
    -------
    str

    References
    ----------
    Limpert, E., Stahel, W. A. & Abbt, M. (2001). Log-normal distributions across the sciences: keys
    and clues. BioScience 51:341-352.

    Examples
    --------
    >>> format_times_divide(148.31, 2.7183)
    '148 ×/÷ 2.7'
    >>> format_times_divide(0.0123456, 1.0234, digits=4, ascii=True)
    '0.01235 x/ 1.0234'
    """
    sign = TIMES_DIVIDE_ASCII if ascii else TIMES_DIVIDE
    return f"{format_number(gmean, digits)} {sign} {format_factor(factor, max(int(digits) - 1, 1))}"


def format_interval(low: Any, high: Any, digits: int = 3) -> str:
    """An interval as ``"120 to 183"`` (unambiguous with negative bounds, and plain ASCII).

    Examples
    --------
    >>> format_interval(120.04, 183.2)
    '120 to 183'
    """
    return f"{format_number(low, digits)} to {format_number(high, digits)}"


def format_p(p: Any) -> str:
    """A p-value to two significant digits; an underflowed 0 is shown as ``<1e-300``.

    Examples
    --------
    >>> format_p(0.6412), format_p(0.04321), format_p(1.234e-7), format_p(0.0)
    ('0.64', '0.043', '1.2e-07', '<1e-300')
    """
    special = _special(p)
    if special is not None:
        return special
    v = float(p)
    if v <= 0.0:
        return "<1e-300"
    return format_number(v, 2)


# --------------------------------------------------------------------------------------------------
# tables


def _column_kind(name: Hashable, s: pd.Series) -> str:
    key = str(name)
    if pd.api.types.is_bool_dtype(s.dtype):
        return "bool"
    if key in _P_COLUMNS or key.startswith("p_"):
        return "p"
    if (key in _COUNT_COLUMNS or pd.api.types.is_integer_dtype(s.dtype)
            or (key.startswith("n_") and pd.api.types.is_numeric_dtype(s.dtype))):
        return "count"
    if key in _FACTOR_COLUMNS:
        return "factor"
    if key in _FIXED_COLUMNS:
        return "fixed"
    if pd.api.types.is_numeric_dtype(s.dtype):
        return "number"
    return "text"


def _cell(v: Any, kind: str, digits: int) -> str:
    if kind == "bool":
        if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
            return "nan"
        return "yes" if bool(v) else "no"
    if kind == "p":
        return format_p(v)
    if kind == "count":
        fv = _finite(v)
        return (_special(v) or "nan") if fv is None else str(int(round(fv)))
    if kind == "factor":
        return format_factor(v, max(digits - 1, 1))
    if kind == "fixed":
        fv = _finite(v)
        return (_special(v) or "nan") if fv is None else f"{fv:.1f}"
    if kind == "number":
        return format_number(v, digits)
    return "" if v is None else str(v)


def format_column(values: Any, name: Hashable = None, *, digits: int = 3) -> list[str]:
    """Format one result column cell by cell, choosing the style from its name and dtype.

    p-values (``p_value``, ``p_adjusted`` …) get two significant digits, counts (``n``,
    ``n_censored`` …) whole numbers, factors (``gsd``, ``ci_factor``) :func:`format_factor`,
    AICs and log-likelihoods (compared by their differences) one decimal, other numbers
    :func:`format_number`, booleans ``yes``/``no``, and anything else ``str``.

    Examples
    --------
    >>> format_column([0.5, 0.0123], "p_value"), format_column([3.0, 4.0], "n")
    (['0.50', '0.012'], ['3', '4'])
    """
    s = values if isinstance(values, pd.Series) else pd.Series(list(values) if not isinstance(
        values, np.ndarray) else values)
    kind = _column_kind("" if name is None else name, s)
    return [_cell(v, kind, digits) for v in s.to_numpy(dtype=object)]


def is_text_column(values: pd.Series, name: Hashable = None) -> bool:
    """True when :func:`format_column` would left-align the column (text, not numbers)."""
    return _column_kind("" if name is None else name, values) == "text"


class _Column:
    """One rendered column: header, cells and alignment (``"left"``, ``"right"`` or ``"sign"``)."""

    def __init__(self, header: str, cells: list[str], align: str, split: str = "") -> None:
        self.header = header
        self.cells = cells
        self.align = align
        self.split = split
        if align == "sign":
            parts = [c.split(split, 1) if split in c else [c, ""] for c in cells]
            self.left = max([len(a.rstrip()) for a, _ in parts] + [0])
            self.right = max([len(b.lstrip()) for _, b in parts] + [0])
            body = self.left + (len(split) + 2 if self.right else 0) + self.right
            self.width = max(len(header), body)
            self._parts = parts
        else:
            self.width = max([len(header)] + [len(c) for c in cells])

    def render(self, i: int) -> str:
        if self.align == "sign":
            a, b = self._parts[i]
            text = a.rstrip().rjust(self.left)
            if b:
                text += f" {self.split} " + b.lstrip().ljust(self.right)
            return text.rjust(self.width) if len(text) < self.width else text
        c = self.cells[i]
        return c.ljust(self.width) if self.align == "left" else c.rjust(self.width)

    def render_header(self) -> str:
        return self.header.ljust(self.width) if self.align == "left" else self.header.rjust(self.width)


def _index_columns(df: pd.DataFrame) -> list[_Column]:
    idx = df.index
    if isinstance(idx, pd.RangeIndex) and idx.name is None:
        return []
    cols = []
    for level in range(idx.nlevels):
        values = idx.get_level_values(level)
        name = idx.names[level]
        cells = [str(v) for v in values]
        cols.append(_Column("" if name is None else str(name), cells, "left"))
    return cols


def format_table(
    table: pd.DataFrame | pd.Series,
    *,
    digits: int = 3,
    ascii: bool = False,
    times_divide: bool = True,
    columns: Sequence[Hashable] | None = None,
    width: int | None = None,
) -> str:
    """Render a result table (``summary()``, ``fit()``, ``fold_change()`` …) aligned for a terminal.

    Parameters
    ----------
    table : DataFrame or Series
        A tidy result; its index (group keys, possibly a MultiIndex) is shown as the left columns.
        A Series (one result without ``by``) is shown as one row.
    digits : int, default 3
        Significant digits of estimates; p-values get two, counts are whole numbers.
    ascii : bool, default False
        Plain ASCII: ``x/`` instead of ``×/÷``.
    times_divide : bool, default True
        When the table has ``gmean`` and ``gsd``, show them as one column ``gmean ×/÷ gsd``
        (:func:`format_times_divide`), aligned on the sign.
    columns : list, optional
        Columns to show, in this order (default all).
    width : int, optional
        Maximum line width (e.g. the terminal's). Wider tables are split into blocks of columns, each
        repeating the index columns. Default: no limit.

    Returns
    -------
    str
        Lines joined by newlines, without a trailing newline.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"n": [12, 9], "gmean": [148.31, 52.0], "gsd": [2.7183, 1.0234],
    ...                   "p_value": [0.04321, 1.2e-7]}, index=pd.Index(["vehicle", "drug"], name="arm"))
    >>> print(format_table(t))
    arm       n   gmean ×/÷ gsd  p_value
    -------  --  --------------  -------
    vehicle  12   148 ×/÷ 2.7      0.043
    drug      9  52.0 ×/÷ 1.023  1.2e-07
    """
    if isinstance(table, pd.Series):
        table = table.to_frame().T
        table.index = pd.RangeIndex(1)
    if not isinstance(table, pd.DataFrame):
        raise TypeError(f"format_table needs a pandas DataFrame or Series, got {type(table).__name__}")
    df = table if columns is None else table.loc[:, list(columns)]
    sign = TIMES_DIVIDE_ASCII if ascii else TIMES_DIVIDE
    body: list[_Column] = []
    names = list(df.columns)
    combine = times_divide and "gmean" in names and "gsd" in names
    for name in names:
        if combine and name == "gsd":
            continue
        if combine and name == "gmean":
            cells = [format_times_divide(g, f, digits, ascii=ascii)
                     for g, f in zip(df["gmean"].to_numpy(), df["gsd"].to_numpy())]
            body.append(_Column(f"gmean {sign} gsd", cells, "sign", split=sign))
            continue
        s = df[name]
        kind = _column_kind(name, s)
        cells = [_cell(v, kind, digits) for v in s.to_numpy(dtype=object)]
        body.append(_Column(str(name), cells, "left" if kind == "text" else "right"))
    index = _index_columns(df)
    blocks = _blocks(index, body, width)
    out: list[str] = []
    for block in blocks:
        cols = index + block
        if out:
            out.append("")
        out.append("  ".join(c.render_header() for c in cols).rstrip())
        out.append("  ".join("-" * c.width for c in cols))
        for i in range(len(df)):
            out.append("  ".join(c.render(i) for c in cols).rstrip())
    return "\n".join(out)


def _blocks(index: list[_Column], body: list[_Column], width: int | None) -> list[list[_Column]]:
    if width is None or not body:
        return [body]
    base = sum(c.width + 2 for c in index)
    blocks: list[list[_Column]] = [[]]
    used = base
    for c in body:
        need = c.width + 2
        if blocks[-1] and used + need - 2 > width:
            blocks.append([])
            used = base
        blocks[-1].append(c)
        used += need
    return blocks


# --------------------------------------------------------------------------------------------------
# the order of groups and what a count counts


_MONTHS = ("january", "february", "march", "april", "may", "june", "july", "august", "september",
           "october", "november", "december")
_WEEKDAYS = ("monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday")
_CALENDARS = tuple(
    {**{n: i for i, n in enumerate(names)}, **{n[:3]: i for i, n in enumerate(names)}, **extra}
    for names, extra in ((_MONTHS, {"sept": 8}), (_WEEKDAYS, {"tues": 1, "thur": 3, "thurs": 3}))
)


def _natural_key(text: str) -> tuple[tuple[int, int, str], ...]:
    """Sort key reading digit runs as numbers: ``"well 2" < "well 10"``, case ignored."""
    return tuple((0, int(part), "") if part.isdigit() else (1, 0, part.casefold())
                 for part in re.split(r"(\d+)", text) if part)


def data_order(values: Any) -> list[Any]:
    """The levels of a group key in the order tables, figures and reports show them.

    One rule everywhere in the face: a categorical key keeps the order of its categories (those
    present); a numeric or date key is in ascending order (``2 < 10``, months ``5 < 6 < 7``); a text
    key whose levels are all month names (or all weekday names, full or abbreviated, English) is in
    calendar order, so ``June, July, August`` never becomes ``August, July, June``; any other text
    key is in natural order: alphabetical with digit runs read as numbers (``"dish 2" < "dish 10"``,
    ``"B02" < "B10"``), case ignored. Missing keys are left out.

    Examples
    --------
    >>> data_order(["June", "July", "August", "June"])
    ['June', 'July', 'August']
    >>> data_order([10, 2, 2, 33])
    [2, 10, 33]
    >>> data_order(["dish 10", "dish 2", "Dish 1"])
    ['Dish 1', 'dish 2', 'dish 10']
    """
    s = values if isinstance(values, pd.Series) else pd.Series(values)
    if isinstance(s.dtype, pd.CategoricalDtype):
        present = pd.unique(s.cat.codes[s.cat.codes >= 0].to_numpy())
        return [s.cat.categories[i] for i in sorted(int(c) for c in present)]
    uniq = list(pd.unique(s.dropna()))
    numeric = pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype)
    if numeric or pd.api.types.is_datetime64_any_dtype(s.dtype) or pd.api.types.is_bool_dtype(s.dtype):
        uniq = sorted(uniq)
    else:
        folded = [str(v).strip().casefold().rstrip(".") for v in uniq]
        calendar = next((c for c in _CALENDARS if folded and all(f in c for f in folded)), None)
        if calendar is not None:
            order = sorted(range(len(uniq)), key=lambda i: (calendar[folded[i]], _natural_key(str(uniq[i]))))
        else:
            order = sorted(range(len(uniq)), key=lambda i: (_natural_key(str(uniq[i])), str(uniq[i])))
        uniq = [uniq[i] for i in order]
    return [v.item() if isinstance(v, (np.integer, np.floating)) else v for v in uniq]


def in_data_order(df: pd.DataFrame, keys: Sequence[Hashable]) -> pd.DataFrame:
    """``df`` with each key column a categorical in :func:`data_order` (``df`` itself is untouched).

    The accessors keep a categorical key's order, so every table drawn from the result follows it.
    Keys that already are categorical are left as they are.
    """
    new = {k: pd.Categorical(df[k], categories=data_order(df[k])) for k in keys
           if not isinstance(df[k].dtype, pd.CategoricalDtype)}
    if not new:
        return df
    out = df.copy(deep=False)
    for k, v in new.items():
        out[k] = v
    return out


def joined_key(df: pd.DataFrame, keys: Sequence[Hashable], *, sep: str = " / ") -> pd.Series:
    """One group key from several columns: labels ``"5 / first half"``, ordered key by key.

    The combinations present in the data, ordered by the first key's :func:`data_order`, then the
    second's, and so on; a row missing any key gets a missing label. The Series is named after the
    keys joined by ``sep`` and is aligned with ``df``.

    Examples
    --------
    >>> df = pd.DataFrame({"m": ["June", "May", "June"], "h": [2, 1, 1]})
    >>> list(joined_key(df, ["m", "h"]).cat.categories)
    ['May / 1', 'June / 1', 'June / 2']
    """
    keys = list(keys)
    cats = [pd.Categorical(df[k], categories=data_order(df[k])) for k in keys]
    codes = pd.DataFrame({i: c.codes for i, c in enumerate(cats)})
    valid = (codes >= 0).all(axis=1).to_numpy()
    combos = codes[valid].drop_duplicates().sort_values(list(codes.columns))
    labels = [sep.join(str(cats[i].categories[c]) for i, c in enumerate(row))
              for row in combos.itertuples(index=False)]
    pos = pd.MultiIndex.from_frame(combos).get_indexer(pd.MultiIndex.from_frame(codes))
    pos = np.where(valid, pos, -1)
    return pd.Series(pd.Categorical.from_codes(pos, categories=labels), index=df.index,
                     name=sep.join(map(str, keys)))


def count_label(column: str, *, unit_name: str | None = None) -> str:
    """The header shown for a count of values in a comparison: say what is counted.

    ``n_cells``/``n_cells_reference`` (the library's names for the values counted beside the
    replicates) become ``n_values``/``n_values_reference``, or ``n_<unit_name>`` when the user names
    what one row is (``unit_name="cells"``, ``"days"``). Other columns are returned unchanged.

    Examples
    --------
    >>> count_label("n_cells")
    'n_values'
    >>> count_label("n_cells_reference", unit_name="days")
    'n_days_reference'
    >>> count_label("n")
    'n'
    """
    unit = re.sub(r"\W+", "_", unit_name.strip()).strip("_") if unit_name else "values"
    if column == "n_cells":
        return f"n_{unit or 'values'}"
    if column == "n_cells_reference":
        return f"n_{unit or 'values'}_reference"
    return column
