"""``logstats.split_censored``: laboratory notation (``<0.5``, ``ND``) to a value and a detection limit.

Label handling only: the parsing is :func:`logstats.core.notation.parse_censored`.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from logstats.core.notation import parse_censored

__all__ = ["split_censored"]


def split_censored(series: pd.Series, *, nd_limit: Any = None) -> pd.DataFrame:
    """Split a column written as labs export it into ``value`` and ``detection_limit`` (same index).

    ``"<0.5"`` and ``"< 0.5"`` become value 0.5 with limit 0.5 (censored: at or below the limit);
    ``"ND"``, ``"n.d."``, ``"<LOD"``, ``"<LOQ"``, ``"BDL"`` (any case) are censored at ``nd_limit``;
    numbers and numeric text are measured (limit NaN, i.e. not censored); empty and NaN entries are
    missing. Pass the result's columns to any statistic: ``detection_limit="detection_limit"``.

    Parameters
    ----------
    series : pandas.Series
        The column as read (text, numbers or a mix). Never modified.
    nd_limit : None, number or Series, optional
        The limit of keyword entries (``ND`` and the like): one number, or a Series aligned on the index
        (one limit per row, NaN where unknown). A keyword entry without a known limit is an error
        naming its rows and ``nd_limit``.

    Returns
    -------
    pandas.DataFrame
        Columns ``value`` and ``detection_limit`` (float64) on the series' index; ``attrs`` hold the
        counts (``n_censored``, ``n_keyword``, ``n_missing``) and the distinct ``limits``.

    Examples
    --------
    >>> import pandas as pd, logstats
    >>> logstats.split_censored(pd.Series(["1.2", "<0.5", "ND", 3]), nd_limit=0.2)
       value  detection_limit
    0    1.2              NaN
    1    0.5              0.5
    2    0.2              0.2
    3    3.0              NaN
    """
    if not isinstance(series, pd.Series):
        raise TypeError(f"split_censored takes a pandas Series, not {type(series).__name__}")
    limit: Any = nd_limit
    if isinstance(nd_limit, pd.Series):
        limit = nd_limit.reindex(series.index).to_numpy(dtype=np.float64, na_value=np.nan)
    where = f"column {series.name!r}" if series.name is not None else "the series"
    parsed = parse_censored(series.to_numpy(dtype=object), nd_limit=limit, where=where)
    out = pd.DataFrame({"value": parsed.value, "detection_limit": parsed.limit}, index=series.index)
    out.attrs.update(n_censored=parsed.n_censored, n_keyword=parsed.n_keyword, n_missing=parsed.n_missing,
                     limits=list(np.asarray(parsed.limits, dtype=np.float64)))
    return out
