"""logstats: log-scale statistics for multiplicative data in pandas and xarray.

``import logstats`` registers the ``.logstats`` accessor on pandas Series/DataFrame and xarray
DataArray/Dataset (and dask DataFrame when dask is installed). Array-level functions with an
``axis=`` argument are importable from here too.
"""

from logstats.accessors import pandas as _pandas_accessor  # noqa: F401  (registers the accessors)
from logstats.accessors import xarray as _xarray_accessor  # noqa: F401
from logstats.accessors.arrays import (
    combine_moments,
    exp,
    fit,
    gcv,
    gmean,
    gsd,
    log,
    lognormal_mean,
    moments,
    scale_check,
    summary,
)
from logstats.accessors.dask import register_dask_dataframe as _register_dask_dataframe
from logstats.core.moments import LogMoments
from logstats.core.transform import LogstatsWarning
from logstats.stats.compare import adjust_p

__version__ = "0.1.0"

_register_dask_dataframe()  # ddf.logstats on dask DataFrames; a no-op without dask

__all__ = [
    "LogMoments",
    "LogstatsWarning",
    "__version__",
    "adjust_p",
    "combine_moments",
    "exp",
    "fit",
    "gcv",
    "gmean",
    "gsd",
    "log",
    "lognormal_mean",
    "moments",
    "scale_check",
    "summary",
]
