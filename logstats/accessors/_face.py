"""Figure and report methods shared by the accessors: they only forward to the face layer.

The drawing lives in :mod:`logstats.plot` and the report in :mod:`logstats.report`; each method imports
them inside its body, so the adapters never import matplotlib and ``import logstats`` stays free of it.
The keyword parameters are written out (as in :mod:`logstats.plot`) so that ``help()`` and
``inspect.signature`` show them.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Sequence
from pathlib import Path
from typing import Any

__all__ = ["FigureMethods", "ReportMethods"]


class FigureMethods:
    """``plot_hist``, ``plot_groups``, ``plot_qq`` and ``plot_scale`` on every accessor."""

    _obj: Any

    def _plot_source(self) -> Any:
        """What the figures draw: the object itself (a dask DataFrame computes first)."""
        return self._obj

    def plot_hist(
        self,
        value: Hashable | None = None,
        *,
        by: Any = None,
        dim: Any = None,
        bins: int | None = None,
        layout: str = "overlay",
        normal: bool = False,
        stat: str = "density",
        detection_limit: Any = None,
        nonpositive: str = "raise",
        palette: str | Sequence[str] | None = None,
        units: str | None = None,
        title: str | None = None,
        ax: Any = None,
        limit: Any = None,
    ) -> Any:
        """Log-binned histogram with the fitted log-normal density.

        Parameters
        ----------
        value : column or variable name, optional
            What to draw (needed when the data hold several numeric columns).
        by : column, index level, aligned Series or coordinate name, optional
            One histogram per group.
        dim : str or list of str, optional
            xarray: the dim(s) pooled.
        bins : int, optional
            Number of bins on the log scale (default: numpy's "auto" rule, kept in 10..60).
        layout : {"overlay", "panels"}
            Groups on one Axes, or small multiples.
        normal : bool, default False
            Also draw the normal fit (dashed).
        stat : {"density", "count"}
            Density per unit of ln x, or counts per bin.
        detection_limit : number or column name, optional
            Left-censored fit; non-detects are counted and the limit marked.
        nonpositive : {"raise", "drop", "nan"}
            Zeros and negatives: refuse, or leave out (counted).
        palette : "colorblind", "default" or a list of colours, optional
        units : str, optional
            Units for the axis label.
        title : str, optional
        ax : Axes or array of Axes, optional
        limit : number or column name, optional
            A limit in data units, drawn as a dashed line labelled "limit".

        Returns
        -------
        matplotlib Axes, or an array of Axes for ``layout="panels"``.

        Notes
        -----
        See :func:`logstats.plot.hist` for the construction.
        """
        from logstats import plot

        return plot.hist(self._plot_source(), value, by=by, dim=dim, bins=bins, layout=layout, normal=normal,
                         stat=stat, detection_limit=detection_limit, nonpositive=nonpositive,
                         palette=palette, units=units, title=title, ax=ax, limit=limit)

    def plot_groups(
        self,
        value: Hashable | None = None,
        by: Any = None,
        replicate: Any = None,
        *,
        dim: Any = None,
        confidence_level: float = 0.95,
        nonpositive: str = "raise",
        jitter: float = 0.22,
        point_alpha: float | None = None,
        max_points: int | None = 2500,
        seed: int = 0,
        palette: str | Sequence[str] | None = None,
        units: str | None = None,
        title: str | None = None,
        ax: Any = None,
        limit: Any = None,
    ) -> Any:
        """Every value, replicate geometric means and the geometric mean ×/÷ CI per group, on a log axis.

        Parameters
        ----------
        value : column or variable name, optional
        by : column, index level, aligned Series or coordinate name
            The groups along the horizontal axis.
        replicate : same kinds as ``by``, optional
            The experimental unit within each group (its means are the units of the interval).
        dim : str or list of str, optional
        confidence_level : float, default 0.95
        nonpositive : {"raise", "drop", "nan"}
        jitter : float, default 0.22
            Half-width of the horizontal jitter, in group spacings.
        point_alpha : float, optional
        max_points : int or None, default 2500
            Points drawn per group (a reproducible subset); estimates use every value.
        seed : int, default 0
        palette, units, title, ax
            As in :meth:`plot_hist`.
        limit : number or column name, optional
            A limit in data units, drawn as a dashed line labelled "limit".

        Returns
        -------
        matplotlib Axes

        Notes
        -----
        See :func:`logstats.plot.groups`.
        """
        from logstats import plot

        return plot.groups(self._plot_source(), value, by, replicate, dim=dim,
                           confidence_level=confidence_level,
                           nonpositive=nonpositive, jitter=jitter, point_alpha=point_alpha,
                           max_points=max_points, seed=seed, palette=palette, units=units, title=title,
                           ax=ax, limit=limit)

    def plot_qq(
        self,
        value: Hashable | None = None,
        *,
        by: Any = None,
        dim: Any = None,
        raw: bool | None = None,
        nonpositive: str = "raise",
        max_points: int | None = 3000,
        palette: str | Sequence[str] | None = None,
        units: str | None = None,
        title: str | None = None,
        ax: Any = None,
    ) -> Any:
        """Normal probability plot of the logs (and of the raw values beside it).

        Parameters
        ----------
        value, by, dim
            As in :meth:`plot_hist`.
        raw : bool, optional
            Add the raw-value panel (default: when ``ax`` is None or a pair of Axes).
        nonpositive : {"raise", "drop", "nan"}
        max_points : int or None, default 3000
        palette, units, title, ax
            As in :meth:`plot_hist`.

        Returns
        -------
        matplotlib Axes, or an array ``[logs, raw]``.

        Notes
        -----
        See :func:`logstats.plot.qq`.
        """
        from logstats import plot

        return plot.qq(self._plot_source(), value, by=by, dim=dim, raw=raw, nonpositive=nonpositive,
                       max_points=max_points, palette=palette, units=units, title=title, ax=ax)

    def plot_scale(
        self,
        value: Hashable | None = None,
        *,
        by: Any = None,
        dim: Any = None,
        pooled: bool = False,
        confidence_level: float = 0.95,
        margin: float = 2.0,
        detection_limit: Any = None,
        nonpositive: str = "raise",
        lambdas: Any = None,
        palette: str | Sequence[str] | None = None,
        units: str | None = None,
        title: str | None = None,
        ax: Any = None,
    ) -> Any:
        """Box-Cox profile log-likelihood (λ = 0 and 1 marked) and the mean-spread plot on log-log axes.

        Parameters
        ----------
        value, by, dim
            As in :meth:`plot_hist`.
        pooled : bool, default False
            One profile for all groups (group means removed, one common power).
        confidence_level : float, default 0.95
            Level of the shaded λ intervals.
        margin : float, default 2
            AIC margin of the verdict shown (as in ``scale_check``).
        detection_limit : number or column name, optional
        nonpositive : {"raise", "drop", "nan"}
        lambdas : array_like, optional
            Grid of powers drawn.
        palette, units, title
            As in :meth:`plot_hist`.
        ax : pair of Axes, optional

        Returns
        -------
        numpy.ndarray of two Axes ``[profile, spread]``.

        Notes
        -----
        See :func:`logstats.plot.scale` (Box & Cox 1964).
        """
        from logstats import plot

        return plot.scale(self._plot_source(), value, by=by, dim=dim, pooled=pooled,
                          confidence_level=confidence_level, margin=margin, detection_limit=detection_limit,
                          nonpositive=nonpositive, lambdas=lambdas, palette=palette, units=units, title=title,
                          ax=ax)


class ReportMethods:
    """``report`` for the pandas DataFrame accessor (mix in beside :class:`FigureMethods`)."""

    _obj: Any

    def report(
        self,
        value: Hashable | Sequence[Hashable],
        *,
        by: Hashable | Sequence[Hashable] | None = None,
        replicate: Hashable | Sequence[Hashable] | None = None,
        reference: Any = None,
        path: str | Path | None = None,
        detection_limit: Any = None,
        nonpositive: str = "raise",
        confidence_level: float = 0.95,
        adjust: str | None = "holm",
        units: str | None = None,
        unit_name: str | None = None,
        title: str | None = None,
        note: str | None = None,
        source: str | None = None,
        command: str | None = None,
        figures: bool = True,
        progress: Callable[[str], None] | None = None,
        limit: Any = None,
        nested: Sequence[Hashable] | None = None,
        margin: float = 2.0,
        censored_method: str = "mle",
        coverage: float = 0.95,
    ) -> str:
        """A self-contained HTML report of the whole analysis (see :func:`logstats.report.build_report`).

        Parameters
        ----------
        value : column name or list of names
        by : column name or list, optional
        replicate : column name, or a list of nested ones (outermost first), optional
        reference : label, optional
        path : path, optional
            Also write the HTML here.
        detection_limit : number or column name, optional
        nonpositive : {"raise", "drop", "nan"}
        confidence_level : float, default 0.95
        adjust : {"holm", "bh", None}
        units, unit_name, title, note, source, command : str, optional
        figures : bool, default True
        progress : callable, optional
        limit : number or column name, optional
            Adds the upper-tail section and draws the limit on the figures.
        nested : list of column names, optional
            Adds the variance-components section.
        margin : float, default 2
            AIC margin of the scale verdict.
        censored_method : {"mle", "ros", "km"}
        coverage : float, default 0.95
            Population share of the tolerance limits.

        Returns
        -------
        str
            The HTML document.

        Notes
        -----
        Where results feed clinical, regulatory or safety decisions (exceedance of limits, tolerance
        limits), use validated tools, qualified review, local rules and licensed practice.
        """
        from logstats import report

        return report.build_report(
            self._obj, value=value, by=by, replicate=replicate, reference=reference, path=path,
            detection_limit=detection_limit, nonpositive=nonpositive, confidence_level=confidence_level,
            adjust=adjust, units=units, unit_name=unit_name, title=title, note=note, source=source,
            command=command, figures=figures, progress=progress, limit=limit, nested=nested, margin=margin,
            censored_method=censored_method, coverage=coverage)
