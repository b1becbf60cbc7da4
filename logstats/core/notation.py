"""Reading non-detects as laboratories write them: ``<0.5``, ``ND``, ``<LOQ`` … (numpy only).

:func:`parse_censored` turns a 1-D column of entries (text, numbers, or a mix) into a numeric value
column and a per-row detection-limit column (NaN = not censored), the form every censored statistic
in :mod:`logstats.stats.censored` takes. Parsing is done once per **distinct** entry (lab tables repeat
few distinct texts), so a million rows with a handful of limits cost one ``np.unique`` pass.
"""

from __future__ import annotations

import re
from typing import Any, NamedTuple

import numpy as np

__all__ = ["ND_KEYWORDS", "ParsedEntries", "parse_censored"]

#: Entries (compared case-insensitively, whitespace removed) meaning "not detected, limit given by nd_limit".
ND_KEYWORDS: tuple[str, ...] = ("nd", "n.d.", "n.d", "<lod", "<loq", "<dl", "bdl")
#: Text entries read as missing (compared case-insensitively after stripping).
MISSING_TEXT: tuple[str, ...] = ("", "nan", "na", "n/a")

#: ``flags`` codes of :class:`ParsedEntries`.
MEASURED, CENSORED_LIMIT, CENSORED_KEYWORD, MISSING = 0, 1, 2, 3

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_COMMA_NUMBER = r"(?P<int>\d+),(?P<frac>\d+)"
_RE_NUMBER = re.compile(rf"^{_NUMBER}$")
_RE_LESS = re.compile(rf"^(?:<=?|≤)\s*(?P<num>{_NUMBER})$")
_RE_COMMA = re.compile(rf"^{_COMMA_NUMBER}$")
_RE_LESS_COMMA = re.compile(rf"^(?:<=?|≤)\s*{_COMMA_NUMBER}$")
_SHOW = 5  # offending entries quoted in an error message


class ParsedEntries(NamedTuple):
    """Result of :func:`parse_censored`; unpacks as ``value, limit, flags``.

    Attributes
    ----------
    value : ndarray of float64
        The measured value, or the limit for a censored entry (a censored value is "at or below" it),
        NaN for a missing entry.
    limit : ndarray of float64
        The detection limit of a censored entry, NaN for measured and missing entries.
    flags : ndarray of int8
        ``0`` measured, ``1`` censored by ``<`` notation, ``2`` censored by a keyword (limit from
        ``nd_limit``), ``3`` missing.
    """

    value: np.ndarray
    limit: np.ndarray
    flags: np.ndarray

    @property
    def n_censored(self) -> int:
        """Number of censored entries (``<`` notation and keywords)."""
        return int(np.count_nonzero((self.flags == CENSORED_LIMIT) | (self.flags == CENSORED_KEYWORD)))

    @property
    def n_keyword(self) -> int:
        """Number of entries censored by a keyword (``ND``, ``<LOQ`` …) at ``nd_limit``."""
        return int(np.count_nonzero(self.flags == CENSORED_KEYWORD))

    @property
    def n_missing(self) -> int:
        """Number of missing entries (NaN, None, empty text, ``NA``)."""
        return int(np.count_nonzero(self.flags == MISSING))

    @property
    def limits(self) -> np.ndarray:
        """The distinct detection limits of the censored entries, ascending."""
        return np.unique(self.limit[~np.isnan(self.limit)])


def _comma_is_decimal(int_part: str, frac_part: str) -> bool:
    """A single comma is a decimal comma unless it could be a thousands separator (``1,234``)."""
    thousands_like = 1 <= len(int_part) <= 3 and int_part[0] != "0" and len(frac_part) == 3
    return not thousands_like


def _parse_text(entry: str) -> tuple[int, float] | None:
    """(flag, number) for one distinct text entry; None when unreadable."""
    s = entry.strip()
    low = s.lower()
    if low in MISSING_TEXT:
        return MISSING, np.nan
    if re.sub(r"\s+", "", low) in ND_KEYWORDS:
        return CENSORED_KEYWORD, np.nan
    if _RE_NUMBER.match(s):
        return MEASURED, float(s)
    m = _RE_LESS.match(s)
    if m:
        return CENSORED_LIMIT, float(m.group("num"))
    m = _RE_COMMA.match(s) or _RE_LESS_COMMA.match(s)
    if m and _comma_is_decimal(m.group("int"), m.group("frac")):
        num = float(f"{m.group('int')}.{m.group('frac')}")
        return (CENSORED_LIMIT if s[0] in "<≤" else MEASURED), num
    return None


def _is_missing_scalar(v: Any) -> bool:
    if v is None:
        return True
    try:
        return bool(v != v) or type(v).__name__ in ("NAType", "NaTType")
    except (TypeError, ValueError):
        return type(v).__name__ in ("NAType", "NaTType")


def _positions_message(pos: np.ndarray, entries: list[Any]) -> str:
    shown = ", ".join(f"position {int(p)}: {e!r}" for p, e in zip(pos[:_SHOW], entries[:_SHOW]))
    more = f" (first {_SHOW} shown)" if pos.size > _SHOW else ""
    return shown + more


def parse_censored(entries: Any, *, nd_limit: Any = None, where: str = "the input") -> ParsedEntries:
    r"""Split entries written in laboratory notation into values and per-row detection limits.

    Parameters
    ----------
    entries : array_like, 1-D
        Text, numbers, or a mix (an object array). Read per entry, surrounding whitespace ignored:

        * a number, or text of a decimal number (``"3.2"``, ``"1e-3"``, ``"-0.4"``): measured, limit NaN;
        * ``"<0.5"``, ``"< 0.5"``, ``"<=0.5"``, ``"≤0.5"``: censored at 0.5 (value 0.5, limit 0.5);
        * ``"ND"``, ``"n.d."``, ``"<LOD"``, ``"<LOQ"``, ``"<DL"``, ``"BDL"`` (any case, inner spaces
          ignored): censored at ``nd_limit``;
        * NaN, None, ``pandas.NA``, ``""``, ``"nan"``, ``"NA"``, ``"n/a"``: missing (value and limit NaN).

        A **decimal comma** (``"0,5"``, ``"<0,5"``) is accepted only where it cannot be a thousands
        separator: one comma, no point, and not 1-3 digits (first not 0) followed by exactly three
        (``"1,234"`` is refused as ambiguous; ``"0,125"`` and ``"12,5"`` are read as 0.125 and 12.5).
    nd_limit : None, float or array_like, optional
        Detection limit for keyword entries: one number, or one per row (NaN where unknown). Must be
        positive and finite where used.
    where : str
        Phrase naming the data in error messages (e.g. ``"column 'conc'"``).

    Returns
    -------
    ParsedEntries
        Unpacks as ``(value, limit, flags)`` (float64, float64, int8 arrays of the input's length);
        ``.n_censored``, ``.n_keyword``, ``.n_missing`` and ``.limits`` (distinct limits) summarise it.

    Raises
    ------
    ValueError
        Unreadable entries (the message gives their count, the first positions and the entries);
        keyword entries with no limit known (names ``nd_limit``); a limit at or below zero.
    TypeError
        Booleans, complex numbers or other objects that are neither numbers nor text.

    Notes
    -----
    The input is never modified. Text is classified once per distinct entry (``np.unique`` with
    ``return_inverse``), so the cost is one factorisation plus a regular expression per distinct text.
    A censored entry's value is its limit, so "at or below the limit" marks it censored downstream.
    Positions are 0-based row positions in ``entries``.

    Examples
    --------
    >>> import numpy as np
    >>> out = parse_censored(np.array(["1.2", "<0.5", " ND ", "", "< 0.2", "3"], dtype=object),
    ...                      nd_limit=0.5)
    >>> out.value
    array([1.2, 0.5, 0.5, nan, 0.2, 3. ])
    >>> out.limit
    array([nan, 0.5, 0.5, nan, 0.2, nan])
    >>> out.n_censored, out.limits
    (3, array([0.2, 0.5]))
    """
    arr = np.asarray(entries)
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise ValueError(f"{where} must be 1-D; got an array of shape {arr.shape}")
    n = arr.shape[0]
    flags = np.zeros(n, dtype=np.int8)
    num = np.full(n, np.nan)
    kind = arr.dtype.kind
    if kind == "b":
        raise TypeError(f"{where} holds booleans; expected numbers or text such as '<0.5' or 'ND'")
    if kind == "c":
        raise TypeError(f"{where} is complex; expected real numbers or text such as '<0.5' or 'ND'")
    if kind in "fiu":
        num = arr.astype(np.float64)  # a new array: the input is never written
        flags[np.isnan(num)] = MISSING
    elif kind in "US" or kind == "O":
        if kind == "O":
            is_text = np.fromiter((isinstance(v, (str, bytes)) for v in arr), dtype=bool, count=n)
            other = np.flatnonzero(~is_text)
            if other.size:
                vals = arr[other]
                miss = np.fromiter((_is_missing_scalar(v) for v in vals), dtype=bool, count=other.size)
                numeric = (int, float, np.integer, np.floating)
                isnum = np.fromiter(
                    (isinstance(v, numeric) and not isinstance(v, (bool, np.bool_)) for v in vals),
                    dtype=bool, count=other.size)
                bad = ~miss & ~isnum
                if bad.any():
                    pos = other[bad]
                    raise TypeError(
                        f"{where} holds {pos.size} entr{'y' if pos.size == 1 else 'ies'} that are neither "
                        f"numbers nor text ({_positions_message(pos, list(arr[pos]))}); expected numbers or "
                        "text such as '3.2', '<0.5' or 'ND'"
                    )
                flags[other[miss]] = MISSING
                nums = other[~miss]
                num[nums] = np.array([float(v) for v in arr[nums]], dtype=np.float64)
            text_pos = np.flatnonzero(is_text)
            texts = np.array([v.decode() if isinstance(v, bytes) else v for v in arr[text_pos]], dtype=str)
        else:
            text_pos = np.arange(n)
            texts = arr.astype(str)
        if text_pos.size:
            uniq, inv = np.unique(texts, return_inverse=True)
            parsed = [_parse_text(u) for u in uniq]
            unreadable = np.array([p is None for p in parsed], dtype=bool)
            if unreadable.any():
                rows = np.flatnonzero(unreadable[inv])
                pos = text_pos[rows]
                raise ValueError(
                    f"{where} holds {pos.size} entr{'y' if pos.size == 1 else 'ies'} that cannot be read as "
                    f"a number, a limit such as '<0.5', or a non-detect keyword "
                    f"({_positions_message(pos, list(texts[rows]))}); fix or blank "
                    f"{'it' if pos.size == 1 else 'them'} (blank entries are counted as missing)"
                )
            u_flag = np.array([p[0] for p in parsed], dtype=np.int8)  # type: ignore[index]
            u_num = np.array([p[1] for p in parsed], dtype=np.float64)  # type: ignore[index]
            flags[text_pos] = u_flag[inv]
            num[text_pos] = u_num[inv]
    else:
        raise TypeError(f"{where} has dtype {arr.dtype}; expected numbers or text such as '<0.5' or 'ND'")

    limit = np.where(flags == CENSORED_LIMIT, num, np.nan)
    kw = np.flatnonzero(flags == CENSORED_KEYWORD)
    if kw.size:
        if nd_limit is None:
            raise ValueError(
                f"{where} holds {kw.size} non-detect entr{'y' if kw.size == 1 else 'ies'} without a limit "
                f"({_positions_message(kw, list(arr[kw]))}); pass nd_limit= (a number, or one limit per "
                "row) to censor them at a known limit"
            )
        nl = np.asarray(nd_limit)
        if nl.dtype.kind not in "fiu":
            raise TypeError(f"nd_limit must be a number or an array of numbers; got dtype {nl.dtype}")
        nl = nl.astype(np.float64)
        if nl.ndim == 0:
            kw_lim = np.full(kw.size, float(nl))
        elif nl.shape == (n,):
            kw_lim = nl[kw]
        else:
            raise ValueError(f"nd_limit has shape {nl.shape}; expected a number or shape ({n},)")
        unknown = np.isnan(kw_lim)
        if unknown.any():
            pos = kw[unknown]
            raise ValueError(
                f"{where} holds {pos.size} non-detect entr{'y' if pos.size == 1 else 'ies'} whose nd_limit "
                f"is NaN ({_positions_message(pos, list(arr[pos]))}); give nd_limit= a limit for those rows"
            )
        limit[kw] = kw_lim
        num[kw] = kw_lim
    bad_lim = ~np.isnan(limit) & ~((limit > 0) & np.isfinite(limit))
    if bad_lim.any():
        pos = np.flatnonzero(bad_lim)
        raise ValueError(
            f"{where} holds {pos.size} censored entr{'y' if pos.size == 1 else 'ies'} whose limit is not "
            f"positive and finite ({_positions_message(pos, list(arr[pos]))}); a detection limit must be "
            "> 0 (check the entry, or nd_limit= for keyword entries)"
        )
    return ParsedEntries(value=num, limit=limit, flags=flags)
