"""logstats: log-scale statistics for multiplicative data in pandas and xarray.

``import logstats`` registers the ``.logstats`` accessor on pandas Series/DataFrame and xarray
DataArray/Dataset (and dask DataFrame when dask is installed). Array-level functions with an
``axis=`` argument are importable from here too.
"""

from typing import Any

from logstats.accessors import pandas as _pandas_accessor  # noqa: F401  (registers the accessors)
from logstats.accessors import xarray as _xarray_accessor  # noqa: F401
from logstats.accessors.arrays import (
    combine_moments,
    exceedance,
    exp,
    fit,
    gcv,
    gmean,
    gsd,
    log,
    lognormal_mean,
    moments,
    quantile,
    scale_check,
    summary,
    tolerance_limit,
)
from logstats.accessors.dask import register_when_imported as _register_dask_dataframe
from logstats.accessors.notation import split_censored
from logstats.accessors.planning import plan
from logstats.core.moments import LogMoments
from logstats.core.transform import LogstatsWarning

__version__ = "0.1.0"

_register_dask_dataframe()  # ddf.logstats on dask DataFrames, once dask.dataframe is imported


def adjust_p(p: Any, method: str | None = "holm", *, families: Any = None) -> Any:
    """Adjusted p-values (``"holm"``: Holm 1979; ``"bh"``: Benjamini & Hochberg 1995) of a plain array.

    See :func:`logstats.stats.compare.adjust_p` (imported on first use, so ``import logstats`` stays light).

    Examples
    --------
    >>> import logstats
    >>> logstats.adjust_p([0.01, 0.04, 0.03], method="holm").round(2).tolist()
    [0.03, 0.06, 0.06]
    """
    from logstats.stats.compare import adjust_p as _adjust_p

    return _adjust_p(p, method, families=families)

__all__ = [
    "LogMoments",
    "LogstatsWarning",
    "__version__",
    "adjust_p",
    "combine_moments",
    "exceedance",
    "exp",
    "fit",
    "gcv",
    "gmean",
    "gsd",
    "log",
    "lognormal_mean",
    "moments",
    "plan",
    "quantile",
    "scale_check",
    "split_censored",
    "summary",
    "tolerance_limit",
]
