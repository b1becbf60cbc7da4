"""The log transform and its bad-value policy (numpy only).

Every value that enters logstats passes through :func:`to_logs`: it takes the natural (or base 2/10)
logarithm, classifies each value as *valid*, *missing* (NaN, None, pd.NA after conversion) or
*non-positive* (zero, negative, ``-inf``), and refuses ``+inf`` outright. The counts are kept so that
nothing is ever dropped without being reported; the policies are applied from those counts, so the
same rule holds for in-memory and chunked (dask) data.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

__all__ = [
    "NONPOSITIVE_POLICIES",
    "LogstatsWarning",
    "LoggedValues",
    "as_float_array",
    "check_base",
    "check_nonpositive",
    "describe_where",
    "exp_values",
    "log_base_factor",
    "log_values",
    "posinf_message",
    "to_logs",
]

NonPositive = Literal["raise", "drop", "nan"]
NONPOSITIVE_POLICIES: tuple[str, ...] = ("raise", "drop", "nan")
_BASES = {"e": 1.0, 2: np.log(2.0), "2": np.log(2.0), 10: np.log(10.0), "10": np.log(10.0)}


class LogstatsWarning(UserWarning):
    """Warnings issued by logstats itself (never numpy's RuntimeWarnings)."""


def describe_where(column: Any = None, group: Any = None) -> str:
    """A phrase such as ``column 'gfp', group 'drug_a'`` for error messages."""
    parts = []
    if column is not None:
        parts.append(f"column {column!r}")
    if group is not None:
        parts.append(f"group {group!r}")
    return ", ".join(parts) if parts else "the input"


def check_nonpositive(nonpositive: str) -> str:
    if nonpositive not in NONPOSITIVE_POLICIES:
        raise ValueError(
            f"nonpositive={nonpositive!r} is not one of {', '.join(map(repr, NONPOSITIVE_POLICIES))}"
        )
    return nonpositive


def check_base(base: Any) -> float:
    """Return ln(base) for base ``"e"``, 2 or 10 (strings or numbers)."""
    try:
        return float(_BASES[base])
    except (KeyError, TypeError):
        raise ValueError(f"base={base!r} is not supported; use 'e', 2 or 10") from None


def log_base_factor(base: Any) -> float:
    """ln(base): divide natural logs by it to get logs in ``base``."""
    return check_base(base)


def as_float_array(values: Any, *, where: str = "the input") -> np.ndarray:
    """Convert to a float64 array without mutating the input.

    float32 and integer inputs are computed in float64 (int64 values beyond 2**53 lose their last
    bits, as in any float64 computation). Booleans and text are refused with a TypeError.
    """
    arr = np.asarray(values)
    kind = arr.dtype.kind
    if kind == "b":
        raise TypeError(f"{where} holds booleans; logstats needs positive numbers (cast explicitly if meant)")
    if kind in "fiu":
        return arr.astype(np.float64, copy=False)
    if kind == "O":
        try:
            out = np.array(
                [np.nan if (v is None or _is_na(v)) else v for v in arr.ravel()], dtype=np.float64
            )
        except (TypeError, ValueError):
            bad = next((v for v in arr.ravel() if not _is_number(v)), None)
            raise TypeError(f"{where} holds non-numeric values such as {bad!r}") from None
        return out.reshape(arr.shape)
    if kind == "c":
        raise TypeError(f"{where} is complex; logstats needs positive real numbers")
    raise TypeError(f"{where} has dtype {arr.dtype}, which is not numeric")


def _is_na(v: Any) -> bool:
    try:
        return bool(v != v) or type(v).__name__ in ("NAType", "NaTType")
    except (TypeError, ValueError):
        return type(v).__name__ in ("NAType", "NaTType")


def _is_number(v: Any) -> bool:
    return v is None or isinstance(v, (int, float, np.number)) and not isinstance(v, bool) or _is_na(v)


@dataclass(frozen=True)
class LoggedValues:
    """Natural logs of the valid values, NaN elsewhere, with masks of what was excluded."""

    y: np.ndarray
    missing: np.ndarray
    nonpositive: np.ndarray
    #: True when every value is valid (then both masks are all False and need not be scanned).
    clean: bool = False

    @property
    def valid(self) -> np.ndarray:
        return ~(self.missing | self.nonpositive)


#: Values logged and summed at a time by :func:`to_logs` (the sum reads the block while it is in cache).
LOG_BLOCK = 1 << 16


def _log_and_sum(x: np.ndarray) -> tuple[np.ndarray, float]:
    """``np.log(x)`` and the sum of the logs, block by block for long contiguous input."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if x.size <= 2 * LOG_BLOCK or not x.flags.c_contiguous:
            y = np.log(x)
            return y, float(np.sum(y))
        y = np.empty(x.shape, dtype=np.result_type(x.dtype, np.float16))
        xf, yf = x.reshape(-1), y.reshape(-1)
        total = 0.0
        for start in range(0, xf.size, LOG_BLOCK):
            part = yf[start : start + LOG_BLOCK]
            np.log(xf[start : start + LOG_BLOCK], out=part)
            total += float(np.add.reduce(part))
        return y, total


def to_logs(values: Any, *, where: str = "the input") -> LoggedValues:
    """Natural logs of ``values`` with the missing and non-positive entries marked.

    ``+inf`` raises a ValueError naming ``where``. ``-inf``, zero and negatives are non-positive. The
    returned ``y`` (always a new array; the input is never written) holds NaN at every excluded entry;
    numpy's RuntimeWarnings never escape. One log pass and no full-size temporaries beyond the masks.
    """
    x = as_float_array(values, where=where)
    y, total = _log_and_sum(x)
    # the common case: nothing missing, non-positive or infinite. The sum of the logs tells (NaN and
    # ±inf spoil it; logs are below 745 in size, so no sum of finite logs overflows): no mask is built
    if np.isfinite(total):
        return LoggedValues(y=y, missing=np.zeros(y.shape, dtype=bool),
                            nonpositive=np.zeros(y.shape, dtype=bool), clean=True)
    posinf = y == np.inf  # only log(+inf) is +inf
    if posinf.any():
        raise ValueError(posinf_message(where, int(posinf.sum())))
    missing = np.isnan(x)
    nonpositive = x <= 0  # NaN compares False; -inf is <= 0
    y[nonpositive] = np.nan  # log gave -inf for 0 and NaN for negatives: make both NaN
    return LoggedValues(y=y, missing=missing, nonpositive=nonpositive)


def log_values(
    values: Any,
    *,
    base: Any = "e",
    skipna: bool = True,
    nonpositive: str = "raise",
    where: str = "the input",
) -> np.ndarray:
    """Same-shape log transform with the bad-value policy.

    ``nonpositive="raise"`` refuses zeros and negatives with a message naming ``where`` and the count;
    ``"drop"`` and ``"nan"`` both put NaN in their place. Missing values stay NaN (``skipna`` has no
    effect on a same-shape transform; it is accepted for symmetry).
    """
    check_nonpositive(nonpositive)
    factor = check_base(base)
    lv = to_logs(values, where=where)
    nbad = 0 if lv.clean else int(np.count_nonzero(lv.nonpositive))
    if nbad and nonpositive == "raise":
        raise ValueError(nonpositive_message(where, nbad))
    if factor == 1.0:
        return lv.y
    fn = np.log2 if factor == _BASES[2] else np.log10
    with np.errstate(divide="ignore", invalid="ignore"):
        return fn(np.where(lv.valid, as_float_array(values, where=where), np.nan))


def exp_values(values: Any, *, base: Any = "e", where: str = "the input") -> np.ndarray:
    """Exact inverse of :func:`log_values`: ``base ** values`` (NaN stays NaN)."""
    y = as_float_array(values, where=where)
    factor = check_base(base)
    with np.errstate(over="ignore"):
        if factor == 1.0:
            return np.exp(y)
        b = {np.log(2.0): 2.0, np.log(10.0): 10.0}[factor]
        return np.power(b, y)


def _groups_phrase(groups: Sequence[Any] | None) -> str:
    """`` (in group(s) 'a', 'b' and 3 more)`` for error messages; empty without groups."""
    if not groups:
        return ""
    shown = ", ".join(repr(g) for g in list(groups)[:5])
    more = f" and {len(groups) - 5} more" if len(groups) > 5 else ""
    return f" (in group(s) {shown}{more})"


def posinf_message(where: str, count: int, groups: Sequence[Any] | None = None) -> str:
    """The refusal of ``+inf`` (``count`` values of it in ``where``, in ``groups``)."""
    return (
        f"{where} holds {count} value(s) of +inf{_groups_phrase(groups)}; logstats refuses +inf always "
        "(replace it with NaN to have it skipped and counted as missing)"
    )


def nonpositive_message(where: str, count: int, groups: Sequence[Any] | None = None) -> str:
    """The refusal of zeros and negatives, naming the groups and the keywords that would handle them."""
    return (
        f"{where} holds {count} value(s) at or below zero{_groups_phrase(groups)}; their logarithm is "
        "undefined. "
        "Pass nonpositive='drop' to exclude and count them, nonpositive='nan' to make the affected "
        "results NaN, or detection_limit= if they are non-detects (values at or below a limit)"
    )
