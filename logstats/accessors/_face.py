"""Figure methods shared by every accessor: they only forward to the face layer (``logstats.plot``).

The drawing itself lives in the face layer; the import happens inside each method, so the adapters
never import matplotlib and ``import logstats`` stays free of it.
"""

from __future__ import annotations

from typing import Any

__all__ = ["FigureMethods"]


class FigureMethods:
    _obj: Any

    def _plot_source(self) -> Any:
        """What the figures draw: the object itself (a dask DataFrame computes first)."""
        return self._obj

    def plot_hist(self, *args: Any, **kwargs: Any) -> Any:
        """Log-binned histogram with the fitted log-normal density; see :func:`logstats.plot.hist`."""
        from logstats import plot

        return plot.hist(self._plot_source(), *args, **kwargs)

    def plot_groups(self, *args: Any, **kwargs: Any) -> Any:
        """Every value, replicate means and gmean ×/÷ CI per group; see :func:`logstats.plot.groups`."""
        from logstats import plot

        return plot.groups(self._plot_source(), *args, **kwargs)

    def plot_qq(self, *args: Any, **kwargs: Any) -> Any:
        """Normal probability plot of the logs; see :func:`logstats.plot.qq`."""
        from logstats import plot

        return plot.qq(self._plot_source(), *args, **kwargs)
