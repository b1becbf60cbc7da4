"""Figures for log-normal data: log-binned histograms, per-group point clouds, probability plots.

Every function takes a pandas Series, a DataFrame (with ``value=`` naming the column) or an xarray
DataArray (with ``dim=``), draws on ``ax=`` when given (or a new figure), and returns what it drew
on. matplotlib is an optional dependency (``pip install 'logstats[plot]'``) imported only inside the
functions. The estimates drawn (fits, geometric means, intervals) come from the ``.logstats``
accessors; this module only arranges them.

Colours are by default the eight of Okabe & Ito (2008), distinguishable with the common forms of
colour-vision deficiency; ``palette="default"`` gives matplotlib's colour cycle instead.

Log axes are labelled in plain numbers (``40, 60, 100, 200``, not ``4 x 10^1``): every log axis
gets :func:`readable_log_axis`, whose labels adapt to the span shown (powers of ten; 2-3-5 and more
in-between labels when few powers of ten are in view; evenly spaced plain numbers over less than
about half a decade). Group labels that would collide are wrapped and turned (:func:`groups`).

References
----------
Limpert, E., Stahel, W. A. & Abbt, M. (2001). Log-normal distributions across the sciences: keys
and clues. BioScience 51:341-352 (geometric mean ×/÷ factor).
Lord, S. J., Velle, K. B., Mullins, R. D. & Fritz-Laylin, L. K. (2020). SuperPlots: communicating
reproducibility and variability in cell biology. J. Cell Biol. 219:e202001064 (cells as faint points,
replicate means as the units).
Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make figures and presentations that
are friendly to colorblind people. J*Fly (web publication; palette values from memory).
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

import logstats
from logstats.format import data_order

__all__ = ["OKABE_ITO", "boxcox_profile", "groups", "hist", "plot_groups", "plot_hist", "plot_qq",
           "plot_scale",
           "qq", "readable_log_axis", "scale"]

#: Okabe & Ito (2008) colour-blind-safe palette, the pale yellow moved towards the end (blue, orange,
#: bluish green, vermillion, reddish purple, sky blue, yellow, black).
OKABE_ITO: tuple[str, ...] = (
    "#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#000000",
)

_POLICIES = ("raise", "drop", "nan")
_MARKERS = (".", "^", "s", "D")  # beyond the palette's eight colours, groups differ by marker too
_CLOUD_OFFSET = 0.1  # the points of group i are centred at i - 0.1 ...
_EST_OFFSET = 0.3  # ... and its estimate with its interval drawn at i + 0.3


# --------------------------------------------------------------------------------------------------
# input handling (labels only)


@dataclass
class _Data:
    """A tidy frame with the value column and, optionally, a group and a replicate column."""

    frame: pd.DataFrame
    value: str
    by: str | None
    replicate: str | None
    units: str | None

    @property
    def label(self) -> str:
        if not self.units or str(self.value).rstrip().endswith(f"({self.units})"):
            return str(self.value)  # "Ozone (ppb)" with units="ppb" is not "Ozone (ppb) (ppb)"
        return f"{self.value} ({self.units})"

    def group_labels(self) -> list[Any]:
        if self.by is None:
            return [None]
        return data_order(self.frame[self.by])

    def group_masks(self) -> list[tuple[Any, np.ndarray]]:
        if self.by is None:
            return [(None, np.ones(len(self.frame), dtype=bool))]
        key = self.frame[self.by]
        levels = data_order(key)
        codes = pd.Categorical(key, categories=levels).codes
        return [(g, codes == i) for i, g in enumerate(levels)]


def _aligned_key(obj: pd.Series | pd.DataFrame, key: Any, keyword: str) -> tuple[str, pd.Series]:
    """A grouping key for a Series/DataFrame: a column, an index level, or an aligned Series/array."""
    if isinstance(key, pd.Series):
        s = key if key.index.equals(obj.index) else key.reindex(obj.index)
        return (str(key.name) if key.name is not None else keyword), s
    if isinstance(key, (np.ndarray, pd.Index, list, tuple)) and not isinstance(key, str):
        arr = np.asarray(key)
        if len(arr) != len(obj):
            raise ValueError(f"{keyword}= has length {len(arr)}, the data has {len(obj)} rows")
        return keyword, pd.Series(arr, index=obj.index)
    if isinstance(obj, pd.DataFrame) and key in obj.columns:
        return str(key), obj[key]
    if key in [n for n in obj.index.names if n is not None]:
        return str(key), pd.Series(obj.index.get_level_values(key), index=obj.index)
    where = list(obj.columns) if isinstance(obj, pd.DataFrame) else list(obj.index.names)
    raise KeyError(f"{keyword}={key!r} is not a column or index level; there are {where!r}")


def _units_of(obj: Any, value: str, units: str | None) -> str | None:
    if units is not None:
        return units
    attrs = getattr(obj, "attrs", {}) or {}
    u = attrs.get("units")
    if isinstance(u, dict):
        u = u.get(value)
    return str(u) if u else None


def _prepare(obj: Any, value: Hashable | None, by: Any, replicate: Any, dim: Any,
             units: str | None) -> _Data:
    import xarray as xr

    if isinstance(obj, xr.Dataset):
        numeric = [k for k, v in obj.data_vars.items() if v.dtype.kind in "fiu"]
        if value is None and len(numeric) == 1:
            value = numeric[0]
        if value is None or value not in obj.data_vars:
            raise KeyError(f"value={value!r} must name a data variable of the Dataset; there are {numeric!r}")
        obj = obj[value]
    if isinstance(obj, xr.DataArray):
        return _prepare_array(obj, by, replicate, dim, units)
    if isinstance(obj, pd.Series):
        name = str(obj.name) if obj.name is not None else "value"
        cols: dict[str, Any] = {name: obj.reset_index(drop=True)}
        bname = rname = None
        if by is not None:
            bname, key = _aligned_key(obj, by, "by")
            cols[bname] = key.reset_index(drop=True)
        if replicate is not None:
            rname, key = _aligned_key(obj, replicate, "replicate")
            cols[rname] = key.reset_index(drop=True)
        return _Data(pd.DataFrame(cols), name, bname, rname, _units_of(obj, name, units))
    if isinstance(obj, pd.DataFrame):
        keys = []
        bname = rname = None
        cols = {}
        if by is not None:
            bname, key = _aligned_key(obj, by, "by")
            cols[bname] = key.reset_index(drop=True)
            keys.append(bname)
        if replicate is not None:
            rname, key = _aligned_key(obj, replicate, "replicate")
            cols[rname] = key.reset_index(drop=True)
            keys.append(rname)
        if value is None:
            numeric = [c for c in obj.columns if c not in keys and pd.api.types.is_numeric_dtype(obj[c])
                       and not pd.api.types.is_bool_dtype(obj[c])]
            if len(numeric) != 1:
                raise ValueError(
                    f"value= is needed to choose the column to plot; numeric columns: {numeric!r}"
                )
            value = numeric[0]
        if value not in obj.columns:
            raise KeyError(f"value={value!r} is not a column; there are {list(obj.columns)!r}")
        s = obj[value]
        if not pd.api.types.is_numeric_dtype(s.dtype) or pd.api.types.is_bool_dtype(s.dtype):
            raise TypeError(
                f"column {value!r} has dtype {s.dtype}, which is not numeric; logstats needs positive "
                "numbers (convert it with pd.to_numeric or choose another value=)"
            )
        frame = pd.DataFrame({str(value): s.reset_index(drop=True), **cols})
        return _Data(frame, str(value), bname, rname, _units_of(obj, str(value), units))
    raise TypeError(
        f"plotting needs a pandas Series, a DataFrame or an xarray DataArray, got {type(obj).__name__}"
    )


def _prepare_array(da: Any, by: Any, replicate: Any, dim: Any, units: str | None) -> _Data:
    name = str(da.name) if da.name is not None else "value"
    if da.dtype.kind not in "fiu":
        raise TypeError(f"variable {name!r} has dtype {da.dtype}, which is not numeric")
    for key, kw in ((by, "by"), (replicate, "replicate")):
        if key is not None and key not in da.coords:
            raise KeyError(f"{kw}={key!r} is not a coordinate; there are {list(da.coords)!r}")
    if dim is not None:
        dims = [dim] if isinstance(dim, str) else list(dim)
        missing = [d for d in dims if d not in da.dims]
        if missing:
            raise ValueError(f"dim {missing!r} not found; the data has dims {list(da.dims)!r}")
        others = [d for d in da.dims if d not in dims and da.sizes[d] > 1]
        if others:
            raise ValueError(
                f"plotting along dim={dim!r} would pool the {others[0]!r} dim ({da.sizes[others[0]]} "
                f"entries); select one first, e.g. da.isel({others[0]}=0), or pass dim=None to pool all"
            )
    for key, kw in ((by, "by"), (replicate, "replicate")):
        if key is not None and dim is not None:
            cdims = da.coords[key].dims
            if any(d not in dims for d in cdims):
                raise ValueError(f"{kw}={key!r} lies along {cdims}, not along dim={dim!r}")
    flat = da.to_dataframe(name="__value__").reset_index()
    cols = {name: flat["__value__"].to_numpy()}
    if by is not None:
        cols[str(by)] = flat[by].to_numpy()
    if replicate is not None:
        cols[str(replicate)] = flat[replicate].to_numpy()
    return _Data(pd.DataFrame(cols), name, None if by is None else str(by),
                 None if replicate is None else str(replicate), _units_of(da, name, units))


def _palette(palette: str | Sequence[Any] | None) -> list[str]:
    """The colours to cycle through, as hex strings (so one colour is never read as RGB values)."""
    from matplotlib.colors import to_hex

    if palette == "default":
        import matplotlib as mpl

        colours = list(mpl.rcParams["axes.prop_cycle"].by_key().get("color", OKABE_ITO))
    elif palette is None or (isinstance(palette, str) and palette in ("colorblind", "okabe-ito")):
        colours = list(OKABE_ITO)
    elif isinstance(palette, str):
        raise ValueError(f"palette={palette!r} is not 'default', 'colorblind' or a list of colours")
    else:
        colours = list(palette)
    if not colours:
        raise ValueError("palette= is an empty list of colours")
    return [to_hex(c, keep_alpha=False) for c in colours]


def _check_policy(nonpositive: str) -> str:
    if nonpositive not in _POLICIES:
        raise ValueError(f"nonpositive={nonpositive!r} is not one of 'raise', 'drop', 'nan'")
    return nonpositive


def _log(x: Any) -> np.ndarray:
    return np.asarray(logstats.log(np.asarray(x, dtype=np.float64), nonpositive="nan"))


def _exp(y: Any) -> np.ndarray:
    return np.asarray(logstats.exp(np.asarray(y, dtype=np.float64)))


def _logs(data: _Data, nonpositive: str) -> np.ndarray:
    """Natural logs of the value column through the library's transform (NaN where not usable).

    ``nonpositive="raise"`` refuses zeros and negatives with the library's message (naming the
    column and the count); the other policies leave NaN in their place.
    """
    logged = data.frame[[data.value]].logstats.log(columns=data.value, nonpositive=nonpositive)
    return logged[data.value].to_numpy(dtype=np.float64)


def _by_group(res: pd.DataFrame | pd.Series, data: _Data) -> pd.DataFrame:
    """A per-group result in the order of :meth:`_Data.group_masks`, indexed 0, 1, …"""
    frame = res.to_frame().T if isinstance(res, pd.Series) else res
    if data.by is None:
        return frame.reset_index(drop=True)
    return frame.reindex(pd.Index(data.group_labels())).reset_index(drop=True)


def _group_name(g: Any) -> str:
    return "all" if g is None else str(g)


def _fits(data: _Data, *, detection_limit: Any, nonpositive: str) -> pd.DataFrame:
    """Per-group log-normal MLE ``mu``, ``sigma`` (ddof=0), ``n`` and ``n_censored``, from ``fit()``."""
    kw: dict[str, Any] = {"columns": data.value}
    if detection_limit is not None:
        kw["detection_limit"] = detection_limit
    else:
        kw["nonpositive"] = nonpositive
    res = _by_group(data.frame.logstats.fit(by=data.by, **kw), data)
    return res[["mu", "sigma", "n"] + [c for c in ("n_censored",) if c in res.columns]]


def _linear(data: _Data, nonpositive: str) -> pd.DataFrame:
    res = data.frame.logstats.summary(by=data.by, columns=data.value, linear=True,
                                      nonpositive="drop" if nonpositive == "raise" else nonpositive)
    return _by_group(res, data)


_LIMIT_COLOUR = "#D55E00"  # vermillion of Okabe & Ito (2008): the limit stands out from the groups


def _limit_values(obj: Any, data: _Data, limit: Any) -> np.ndarray | None:
    """Per-row limits (float) aligned with ``data.frame``, from a number or a column name; None without."""
    if limit is None:
        return None
    if isinstance(limit, (int, float, np.integer, np.floating)) and not isinstance(limit, bool):
        lim = float(limit)
        if not (lim > 0 and np.isfinite(lim)):
            raise ValueError(f"limit={limit!r} must be a positive, finite number in the data's units")
        return np.full(len(data.frame), lim)
    if isinstance(obj, pd.DataFrame) and limit in obj.columns:
        vals = pd.to_numeric(obj[limit], errors="coerce").to_numpy(dtype=np.float64)
        return vals
    raise KeyError(f"limit={limit!r} is not a number or a column of the data")


def _group_limits(limits: np.ndarray, mask: np.ndarray) -> list[float]:
    """The distinct positive limits of one group (a few are drawn, not hundreds)."""
    vals = limits[mask]
    vals = np.unique(vals[np.isfinite(vals) & (vals > 0)])
    return [float(v) for v in vals[:5]]


def _finish_axes(ax: Any) -> None:
    ax.spines[["top", "right"]].set_visible(False)


# --------------------------------------------------------------------------------------------------
# readable axes


def _plain(x: float) -> str:
    """A tick value as a plain number: ``40``, ``0.05``, ``2500``."""
    text = f"{x:.6g}"
    if "e" in text:  # only outside 1e-4 .. 1e6, where readable_log_axis uses powers of ten anyway
        text = f"{x:f}".rstrip("0").rstrip(".")
    return text


def _decades(axis: Any) -> float:
    lo, hi = sorted(axis.get_view_interval())
    if not (lo > 0 and np.isfinite(hi) and hi > lo):
        return np.inf
    return float(np.log10(hi / lo))


class _LogMajorLocator:
    """Powers of ten; over less than about half a decade, evenly spaced plain values instead (at least
    three of them in view)."""

    def __new__(cls) -> Any:
        from matplotlib import ticker

        class Locator(ticker.Locator):
            def __init__(self) -> None:
                self._log = ticker.LogLocator(base=10.0)
                self._lin = ticker.MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10])

            def set_axis(self, axis: Any) -> None:
                super().set_axis(axis)
                self._log.set_axis(axis)
                self._lin.set_axis(axis)

            def __call__(self) -> Any:
                axis: Any = self.axis
                lo, hi = axis.get_view_interval()
                return self.tick_values(lo, hi)

            def tick_values(self, vmin: float, vmax: float) -> Any:
                lo, hi = sorted((vmin, vmax))
                if lo > 0 and hi / lo < 10 ** 0.6:
                    for nbins in (5, 6, 8):  # at least three labels inside the view (not "40, 60")
                        self._lin.set_params(nbins=nbins)
                        ticks = np.asarray(self._lin.tick_values(lo, hi), dtype=float)
                        if np.count_nonzero((ticks >= lo) & (ticks <= hi)) >= 3:
                            break
                    return ticks[ticks > 0]
                return self._log.tick_values(vmin, vmax)

        return Locator()


def _log_formatter(minor: bool) -> Any:
    from matplotlib import ticker

    sci = ticker.LogFormatterSciNotation()

    class Formatter(ticker.Formatter):
        def set_axis(self, axis: Any) -> None:
            super().set_axis(axis)
            sci.set_axis(axis)

        def __call__(self, x: float, pos: int | None = None) -> str:
            if not (x > 0 and np.isfinite(x)):
                return ""
            span = _decades(self.axis)
            if minor:
                if span < 0.6 or span > 2.05:  # narrow: the majors are plain values; wide: powers only
                    return ""
                mantissa = round(x / 10 ** np.floor(np.log10(x) + 1e-9), 6)
                keep = (2.0, 5.0) if span > 1.4 else (2.0, 3.0, 5.0) if span > 1.0 else (2.0, 3.0, 4.0, 5.0,
                                                                                        6.0, 8.0)
                return _plain(x) if any(abs(mantissa - k) < 1e-6 for k in keep) else ""
            if 1e-4 <= x < 1e6:
                return _plain(x)
            return sci(x, pos)

    return Formatter()


def readable_log_axis(axis: Any) -> None:
    """Label a logarithmic matplotlib axis (``ax.xaxis`` / ``ax.yaxis``) in plain numbers.

    Powers of ten are labelled ``0.1, 1, 10, 100`` (``10^k`` only outside 1e-4 to 1e6); when less
    than about two decades are in view the in-between ticks 2 and 5 (1.4 to 2 decades), 2, 3 and 5
    (1 to 1.4) or 2, 3, 4, 5, 6 and 8 (0.6 to 1 decade) are labelled too, so data from 40 to 200
    read ``40, 50, 60, 80, 100, 200``; over less than 0.6 decades the ticks are evenly spaced plain
    values (``120, 140, 160``). The rule is read from the view limits at draw time, so it follows
    later changes of the limits.

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> ax = Figure().subplots()
    >>> _ = ax.plot([40, 200], [40, 200]); ax.set_yscale("log"); readable_log_axis(ax.yaxis)
    >>> ax.figure.draw_without_rendering()
    >>> lo, hi = ax.get_ylim()
    >>> sorted({t.get_text() for t in ax.yaxis.get_ticklabels(which="both")
    ...         if t.get_text() and lo <= t.get_position()[1] <= hi}, key=float)
    ['40', '50', '60', '80', '100', '200']
    """
    from matplotlib import ticker

    axis.set_major_locator(_LogMajorLocator())
    axis.set_major_formatter(_log_formatter(minor=False))
    axis.set_minor_locator(ticker.LogLocator(base=10.0, subs=tuple(np.arange(2.0, 10.0)), numticks=12))
    axis.set_minor_formatter(_log_formatter(minor=True))


def _renderer(fig: Any) -> Any:
    fig.draw_without_rendering()  # runs the layout engine, so positions are final
    get = getattr(fig.canvas, "get_renderer", None)
    return get() if get is not None else fig._get_renderer()  # a pyplot-free Figure


def _overlap(boxes: list[Any], pad: float = 1.0) -> bool:
    boxes = sorted(boxes, key=lambda b: b.x0)
    return any(b.x0 < a.x1 + pad for a, b in zip(boxes, boxes[1:]))


def _declutter_group_labels(ax: Any, names: list[str], details: list[str]) -> None:
    """Group tick labels that do not collide: as they are, else wrapped and turned, else smaller."""
    import textwrap

    fig = ax.figure
    stages = [(None, 0, "small"), (14, 0, "small"), (14, 30, "small"), (12, 45, "x-small"),
              (10, 90, "x-small")]
    for width, rotation, size in stages:
        labels = []
        for name, extra in zip(names, details):
            text = name if width is None else "\n".join(textwrap.wrap(name, width) or [name])
            if width is not None:
                extra = extra.replace(", ", ",\n")
            labels.append(text + (f"\n{extra}" if extra else ""))
        ax.set_xticks(range(len(labels)))
        ax.set_xticklabels(labels, fontsize=size, rotation=rotation,
                           ha="center" if rotation == 0 else "right",
                           rotation_mode="default" if rotation == 0 else "anchor")
        renderer = _renderer(fig)
        boxes = [t.get_window_extent(renderer) for t in ax.get_xticklabels() if t.get_visible()]
        if not _overlap(boxes):
            return


# --------------------------------------------------------------------------------------------------
# histogram


def hist(
    obj: Any,
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
    """Histogram on log-spaced bins with the fitted log-normal density overlaid.

    The bins are equal steps of ln x, shared by all groups, drawn on a logarithmic x-axis. With
    ``stat="density"`` a bar's height is the fraction of the group's values in it divided by the
    bin's width in ln x, i.e. a density per unit of ln x; a log-normal then draws as a bell curve,
    the normal density ``φ(ln x; μ, σ)`` with the maximum-likelihood ``μ``, ``σ`` (``ddof=0``) of
    ``.logstats.fit()``. With ``detection_limit`` the fit is left-censored, only detected values are
    binned (normalised by the group's total count, so the bars match the fitted curve) and the limit
    is marked. ``normal=True`` adds the normal distribution fitted to the linear values (mean and SD
    with ``ddof=1``), transformed to the same per-ln-x scale (``x · φ(x; m, s)``).

    Parameters
    ----------
    obj : Series, DataFrame, DataArray or Dataset
        The data; for a DataFrame ``value`` names the column (for a Dataset the variable), for a
        DataArray ``dim`` the dim(s) pooled (other dims must be selected first when ``dim`` is
        given; ``dim=None`` pools all).
    value : column name, optional
        Needed for a DataFrame with more than one numeric column.
    by : column, index level, aligned Series, or coordinate name, optional
        One histogram per group.
    bins : int, optional
        Number of bins (default: numpy's ``"auto"`` rule on the logs, kept between 10 and 60).
    layout : {"overlay", "panels"}
        Groups overlaid on one Axes, or as small multiples sharing both axes.
    normal : bool, default False
        Also draw the normal fit (dashed).
    stat : {"density", "count"}
        Density per unit of ln x, or counts per bin (the curves scaled to match).
    detection_limit : number or column name, optional
        Passed to ``.logstats.fit()``; values at or below it are non-detects.
    nonpositive : {"raise", "drop", "nan"}
        Zeros and negatives: refuse (naming the column and count), or leave them out (counted in
        the legend).
    palette : "colorblind" (default, Okabe & Ito 2008), "default" (matplotlib's cycle) or colours
    units : str, optional
        Units for the axis label (default: ``attrs["units"]`` of the data, if any).
    ax : matplotlib Axes or array of Axes, optional
        Draw here: one Axes overlays all groups; an array of Axes takes one group each.
    limit : number or column name, optional
        A limit in the data's units (regulatory, exposure or specification), drawn as a dashed
        vertical line labelled "limit" (a column: each group's own limit).

    Returns
    -------
    matplotlib.axes.Axes, or numpy.ndarray of Axes for ``layout="panels"``.

    References
    ----------
    Limpert, E., Stahel, W. A. & Abbt, M. (2001). BioScience 51:341-352 (log-normal densities on a
    logarithmic axis).
    """

    _check_policy(nonpositive)
    if layout not in ("overlay", "panels"):
        raise ValueError(f"layout={layout!r} is not 'overlay' or 'panels'")
    if stat not in ("density", "count"):
        raise ValueError(f"stat={stat!r} is not 'density' or 'count'")
    data = _prepare(obj, value, by, None, dim, units)
    limit_rows = _limit_values(obj, data, limit)
    if detection_limit is not None and isinstance(detection_limit, str):
        if not isinstance(obj, pd.DataFrame) or detection_limit not in obj.columns:
            raise KeyError(f"detection_limit={detection_limit!r} is not a column of the data")
        data.frame[detection_limit] = obj[detection_limit].to_numpy()
    y = _logs(data, "drop" if detection_limit is not None else nonpositive)
    fits = _fits(data, detection_limit=detection_limit, nonpositive=nonpositive)
    lin = _linear(data, nonpositive) if normal else None
    counts = _by_group(data.frame.logstats.moments(by=data.by, columns=data.value, nonpositive="drop"),
                       data)

    detected = np.isfinite(y)
    if detection_limit is not None:
        dl = (data.frame[detection_limit].to_numpy(dtype=float) if isinstance(detection_limit, str)
              else np.full(len(y), float(detection_limit)))
        ldl = _log(dl)
        detected &= ~(y <= ldl)
    if not detected.any():
        raise ValueError(f"column {data.value!r} has no positive values to plot")
    edges, width, grid, xgrid = _hist_bins(y[detected], bins, fits if detection_limit is not None else None)
    masks = data.group_masks()
    colors = _palette(palette)
    axes, layout = _hist_axes(ax, layout, len(masks))
    from matplotlib.lines import Line2D

    for i, (g, mask) in enumerate(masks):
        a = axes[i] if layout == "panels" else axes[0]
        c = colors[i % len(colors)]
        n_total = int(np.nan_to_num(fits["n"].iloc[i]))
        yi = y[mask & detected]
        cnt, _ = np.histogram(yi, bins=edges)
        scale = n_total * width if stat == "density" else 1.0
        heights = cnt / scale if scale > 0 else cnt * np.nan
        n_nonpos = int(counts["n_nonpositive"].iloc[i]) if detection_limit is None else 0
        label = f"{_group_name(g)} (n = {n_total}"
        if n_nonpos and nonpositive != "raise":
            label += f", {n_nonpos} ≤ 0 left out"
        if detection_limit is not None and "n_censored" in fits.columns:
            label += f", {int(fits['n_censored'].iloc[i])} censored"
        label += ")"
        a.stairs(heights, _exp(edges), fill=True, alpha=0.25 if layout == "overlay" else 0.45,
                 color=c, label=label, gid=f"bars-{i}")
        a.stairs(heights, _exp(edges), color=c, linewidth=1.0)
        mu, sigma = float(fits["mu"].iloc[i]), float(fits["sigma"].iloc[i])
        curve_scale = 1.0 if stat == "density" else n_total * width
        if np.isfinite(mu) and np.isfinite(sigma) and sigma > 0:
            a.plot(xgrid, stats.norm.pdf(grid, mu, sigma) * curve_scale, color=c, linewidth=2.0,
                   gid="lognormal-fit")
        if lin is not None:
            m, s = float(lin["mean"].iloc[i]), float(lin["sd"].iloc[i])
            if np.isfinite(m) and np.isfinite(s) and s > 0:
                a.plot(xgrid, xgrid * stats.norm.pdf(xgrid, m, s) * curve_scale, color=c, linewidth=1.5,
                       linestyle="--", gid="normal-fit")
        if layout == "panels":
            import textwrap

            a.set_title("\n".join(textwrap.wrap(label, 34)) or label, fontsize="small")
    if detection_limit is not None:
        for i, (_g, mask) in enumerate(masks):
            a = axes[i] if layout == "panels" else axes[0]
            limits = np.unique(dl[mask & np.isfinite(dl)])
            for k, lim in enumerate(limits[:5]):  # a few distinct limits are marked, not hundreds
                a.axvline(float(lim), color="0.3", linestyle=":", linewidth=1.2, gid="detection-limit",
                          label="detection limit" if (k == 0 and (i == 0 or layout == "panels")) else None)
    if limit_rows is not None:
        for i, (_g, mask) in enumerate(masks):
            a = axes[i] if layout == "panels" else axes[0]
            for k, lim in enumerate(_group_limits(limit_rows, mask)):
                a.axvline(lim, color=_LIMIT_COLOUR, linestyle="--", linewidth=1.5, gid="limit",
                          label="limit" if (k == 0 and (i == 0 or layout == "panels")) else None)
    ylabel = "density per unit of ln x" if stat == "density" else "count per bin"
    used = axes[: len(masks)] if layout == "panels" else axes[:1]
    for a in used:
        a.set_xscale("log")
        readable_log_axis(a.xaxis)
        _finish_axes(a)
    for a in used:  # every panel says what its x axis is; the y label stays on the first column
        a.tick_params(axis="x", labelbottom=True)  # also under panels of a shared grid
        a.set_xlabel(f"{data.label}, log scale", fontsize="small" if layout == "panels" else None)
        if layout != "panels" or a.get_subplotspec() is None or a.get_subplotspec().is_first_col():
            a.set_ylabel(ylabel)
    proxies = [Line2D([], [], color="0.2", linewidth=2.0, label="log-normal fit (MLE)")]
    if normal:
        proxies.append(Line2D([], [], color="0.2", linewidth=1.5, linestyle="--", label="normal fit"))
    first = used[0]
    fig = first.figure
    if layout == "panels":
        if detection_limit is not None:
            proxies.append(Line2D([], [], color="0.3", linestyle=":", label="detection limit"))
        if limit_rows is not None:
            proxies.append(Line2D([], [], color=_LIMIT_COLOUR, linestyle="--", label="limit"))
        fig.legend(handles=proxies, loc="outside lower center", ncols=len(proxies), fontsize="small",
                   frameon=False)
    else:
        handles, _ = first.get_legend_handles_labels()
        first.legend(handles=handles + proxies, fontsize="small", frameon=False, loc="upper left",
                     bbox_to_anchor=(1.0, 1.0))
    if title is not None:
        fig.suptitle(title) if layout == "panels" else first.set_title(title)
    elif layout == "overlay":
        first.set_title(f"{data.value}: log-binned histogram with fitted densities", fontsize="medium")
    return np.array(used, dtype=object) if layout == "panels" else first


def _hist_bins(y: np.ndarray, bins: int | None, censored_fits: pd.DataFrame | None
               ) -> tuple[np.ndarray, float, np.ndarray, np.ndarray]:
    """Bin edges on ln x, their width, and the grid (ln x and x) the fitted curves are drawn on.

    With a censored fit the curve reaches below the detected values, to mu - 3 sigma."""
    lo, hi = float(np.min(y)), float(np.max(y))
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    if bins is None:
        auto = np.histogram_bin_edges(y, bins="auto")
        bins = int(np.clip(len(auto) - 1, 10, 60))
    edges = np.linspace(lo, hi, int(bins) + 1)
    width = float(edges[1] - edges[0])
    pad = 0.15 * (hi - lo)
    glo, ghi = lo - pad, hi + pad
    if censored_fits is not None:
        mus, sds = censored_fits["mu"].to_numpy(dtype=float), censored_fits["sigma"].to_numpy(dtype=float)
        reach = mus - 3.0 * sds
        if np.isfinite(reach).any():
            glo = min(glo, float(np.nanmin(reach)))
    grid = np.linspace(glo, ghi, 400)
    return edges, width, grid, _exp(grid)


def _hist_axes(ax: Any, layout: str, n_groups: int) -> tuple[list[Any], str]:
    """The Axes to draw on and the layout that results (a grid of panels on one log scale, or one)."""
    import matplotlib.pyplot as plt

    if ax is None:
        if layout == "panels" and n_groups > 1:
            ncols = int(np.ceil(np.sqrt(n_groups)))
            nrows = int(np.ceil(n_groups / ncols))
            _fig, axs = plt.subplots(nrows, ncols, sharex=True, sharey=True, squeeze=False,
                                     figsize=(3.6 * ncols, 2.8 * nrows), layout="constrained")
            axes = list(axs.ravel())
            for extra in axes[n_groups:]:
                extra.set_visible(False)
            return axes, "panels"
        _fig, one = plt.subplots(figsize=(8.4, 4.2), layout="constrained")
        return [one], "overlay"
    if isinstance(ax, (np.ndarray, list, tuple)):
        axes = list(np.ravel(ax))
        if len(axes) < n_groups:
            raise ValueError(f"ax= holds {len(axes)} Axes for {n_groups} groups")
        for extra in axes[n_groups:]:
            extra.set_visible(False)
        return axes, "panels"
    return [ax], "overlay"


# --------------------------------------------------------------------------------------------------
# points per group


def groups(
    obj: Any,
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
    """Every value as a faint jittered point on a log axis, with replicate and group geometric means.

    Each group of ``by`` is one column of points. With ``replicate`` (well, animal, day …) the
    geometric mean of each replicate is a large marker in the replicate's colour, and the group's
    estimate, drawn as a black bar with its interval, is the geometric mean of the replicate means
    ×/÷ its t confidence interval with the replicates as the units (Lord et al. 2020). Without
    ``replicate`` the interval is that of the values themselves (``.logstats.summary()``).

    Parameters
    ----------
    obj : Series, DataFrame or DataArray
    value : column name, optional
    by : column, index level, aligned Series, or coordinate name
        The groups along the horizontal axis.
    replicate : same kinds as ``by``, optional
        The experimental unit within each group.
    confidence_level : float, default 0.95
    nonpositive : {"raise", "drop", "nan"}
        Zeros and negatives: refuse, or leave them out (their count is shown under the group).
    jitter : float, default 0.22
        Half-width of the horizontal jitter, in group spacings.
    point_alpha : float, optional
        Opacity of the points (default chosen from their number).
    max_points : int or None, default 2500
        Draw at most this many points per group (a reproducible random subset, ``seed``); the
        estimates always use every value. None draws all.
    seed : int, default 0
        Seed of the jitter and subset, so a figure is reproducible.
    palette, units, title, ax
        As in :func:`hist`.
    limit : number or column name, optional
        A limit in the data's units, drawn as a dashed horizontal line labelled "limit" (a column:
        each group's own limit, across that group's column).

    Returns
    -------
    matplotlib.axes.Axes

    References
    ----------
    Lord, S. J., Velle, K. B., Mullins, R. D. & Fritz-Laylin, L. K. (2020). SuperPlots:
    communicating reproducibility and variability in cell biology. J. Cell Biol. 219:e202001064.
    Limpert, E., Stahel, W. A. & Abbt, M. (2001). BioScience 51:341-352 (×/÷ intervals).
    """
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D

    _check_policy(nonpositive)
    if by is None:
        raise ValueError("groups() needs by= (the column or coordinate whose levels are compared)")
    data = _prepare(obj, value, by, replicate, dim, units)
    limit_rows = _limit_values(obj, data, limit)
    df = data.frame
    policy = "drop" if nonpositive == "raise" else nonpositive
    y = _logs(data, nonpositive)  # raises for non-positive values under "raise"
    usable = np.isfinite(y)
    if data.replicate is not None:
        rep = df.logstats.gmean(by=[data.by, data.replicate], columns=data.value, nonpositive=policy)
        rep_s = rep[data.value] if isinstance(rep, pd.DataFrame) else rep
        est = _by_group(rep_s.dropna().logstats.summary(by=data.by, confidence_level=confidence_level),
                        data)
    else:
        rep_s = None
        est = _by_group(df.logstats.summary(by=data.by, columns=data.value,
                                            confidence_level=confidence_level, nonpositive=policy), data)
    cells = _by_group(df.logstats.moments(by=data.by, columns=data.value, nonpositive="drop"), data)

    colors = _palette(palette)
    rng = np.random.default_rng(seed)
    if ax is None:
        fig, ax = plt.subplots(figsize=(max(5.0, 1.6 * len(data.group_labels()) + 3.2), 4.4),
                               layout="constrained")
    rep_labels: list[Any] = []
    shared_colors = False
    if data.replicate is not None:
        rep_codes, rep_uniques = pd.factorize(df[data.replicate], sort=True)
        rep_labels = list(rep_uniques)
        shared_colors = len(rep_labels) <= len(colors)
    ticklabels: list[str] = []
    names: list[str] = []
    for i, (g, mask) in enumerate(data.group_masks()):
        idx = np.flatnonzero(mask & usable)
        if max_points is not None and idx.size > max_points:
            idx = np.sort(rng.choice(idx, size=max_points, replace=False))
        xs = i - _CLOUD_OFFSET + rng.uniform(-jitter, jitter, size=idx.size)
        vals = df[data.value].to_numpy(dtype=float)[idx]
        alpha = point_alpha if point_alpha is not None else float(np.clip(12.0 / np.sqrt(max(idx.size, 1)),
                                                                           0.08, 0.6))
        if data.replicate is not None:
            if shared_colors:
                pc = [colors[k % len(colors)] for k in rep_codes[idx]]
            else:
                ranks = pd.factorize(df[data.replicate].to_numpy()[idx], sort=True)[0]
                pc = [colors[k % len(colors)] for k in ranks]
        else:
            pc = [colors[i % len(colors)]]
        colour_kw = {"color": pc[0]} if len(pc) == 1 else {"c": pc}
        ax.scatter(xs, vals, s=5, alpha=alpha, linewidths=0, rasterized=True, zorder=1,
                   gid=f"points-{i}", **colour_kw)
        if rep_s is not None:
            level = str(data.by)
            sub = rep_s.xs(g, level=level) if g in rep_s.index.get_level_values(level) else rep_s.iloc[:0]
            sub = sub.dropna()
            rj = i - _CLOUD_OFFSET + rng.uniform(-jitter * 0.5, jitter * 0.5, size=len(sub))
            if shared_colors:
                mc = [colors[rep_labels.index(r) % len(colors)] for r in sub.index]
            else:
                mc = [colors[k % len(colors)] for k in range(len(sub))]
            ax.scatter(rj, sub.to_numpy(dtype=float), s=60, c=mc, edgecolors="black", linewidths=0.8,
                       zorder=6, gid=f"replicates-{i}")
        gm = float(est["gmean"].iloc[i])
        lo, hi = float(est["ci_low"].iloc[i]), float(est["ci_high"].iloc[i])
        xe = i + _EST_OFFSET
        ax.hlines(gm, i - _CLOUD_OFFSET - jitter, xe + 0.08, colors="black", linewidth=0.8, zorder=4,
                  alpha=0.6)
        if np.isfinite(lo) and np.isfinite(hi):
            ax.vlines(xe, lo, hi, colors="black", linewidth=1.8, zorder=4, gid=f"interval-{i}")
            ax.hlines([lo, hi], xe - 0.06, xe + 0.06, colors="black", linewidth=1.8, zorder=4)
        ax.plot([xe], [gm], marker="D", markersize=6, color="black", zorder=5, gid=f"estimate-{i}")
        n_cells = int(cells["n"].iloc[i])
        n_np = int(cells["n_nonpositive"].iloc[i])
        names.append(_group_name(g))
        if rep_s is not None:
            line = f"{int(np.nan_to_num(est['n'].iloc[i]))} × {data.replicate}, {n_cells} values"
        else:
            line = f"{n_cells} values"
        if n_np:
            line += f"\n{n_np} ≤ 0 left out"
        ticklabels.append(line)
        if limit_rows is not None:
            for lim in _group_limits(limit_rows, mask):
                ax.hlines(lim, i - 0.5, i + 0.5, colors=_LIMIT_COLOUR, linestyles="--", linewidth=1.5,
                          zorder=3, gid="limit")
    ax.set_yscale("log")
    readable_log_axis(ax.yaxis)
    ax.set_xlim(-0.5 - _CLOUD_OFFSET, len(ticklabels) - 0.5 + _CLOUD_OFFSET / 2)
    ax.set_ylabel(f"{data.label}, log scale")
    ax.set_xlabel(str(data.by))
    _finish_axes(ax)
    pct = f"{100 * confidence_level:g} %"
    handles = [Line2D([], [], marker="o", linestyle="", markersize=3, color="0.5", alpha=0.6,
                      label="values")]
    if rep_s is not None:
        handles.append(Line2D([], [], marker="o", linestyle="", markersize=8, markerfacecolor="0.7",
                              markeredgecolor="black", label=f"{data.replicate} geometric means"))
        est_label = f"geometric mean of {data.replicate} means ×/÷ {pct} CI"
    else:
        est_label = f"geometric mean ×/÷ {pct} CI"
    handles.append(Line2D([], [], color="black", linewidth=1.8, marker="D", markersize=5, label=est_label))
    if limit_rows is not None:
        handles.append(Line2D([], [], color=_LIMIT_COLOUR, linestyle="--", linewidth=1.5, label="limit"))
    ax.legend(handles=handles, fontsize="small", frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    ax.set_title(title if title is not None else f"{data.value} by {data.by}", fontsize="medium")
    _declutter_group_labels(ax, names, ticklabels)
    return ax


# --------------------------------------------------------------------------------------------------
# probability plots


def qq(
    obj: Any,
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
    """Normal probability plot of the logs, and of the raw values beside it.

    Ordered values against standard normal quantiles (``scipy.stats.probplot``, with its
    least-squares line). Log-normal data fall on a straight line in the left panel (drawn on a
    logarithmic value axis, i.e. the logs) and curve upward in the right panel (linear values).

    Parameters
    ----------
    obj, value, by, dim
        As in :func:`hist`; each group gets its own colour.
    raw : bool, optional
        Add the panel of the raw values. Default: True when ``ax`` is None or a pair of Axes,
        False when a single Axes is given.
    nonpositive : {"raise", "drop", "nan"}
        Zeros and negatives: refuse, or leave them out of the log panel (the raw panel keeps them).
    max_points : int or None, default 3000
        At most this many points drawn per group and panel (evenly spaced in rank, so the tails are
        kept); the lines use every value.
    palette, units, title
        As in :func:`hist`.
    ax : Axes or pair of Axes, optional

    Returns
    -------
    matplotlib.axes.Axes (logs only) or numpy.ndarray of two Axes ``[logs, raw]``.
    """
    import matplotlib.pyplot as plt

    _check_policy(nonpositive)
    data = _prepare(obj, value, by, None, dim, units)
    y = _logs(data, nonpositive)
    x = data.frame[data.value].to_numpy(dtype=float)
    if raw is None:
        raw = ax is None or isinstance(ax, (np.ndarray, list, tuple))
    if ax is None:
        fig, axs = plt.subplots(1, 2 if raw else 1, figsize=(9.6 if raw else 5.0, 4.0), squeeze=False,
                                layout="constrained")
        axes = list(axs.ravel())
    elif isinstance(ax, (np.ndarray, list, tuple)):
        axes = list(np.ravel(ax))
        if raw and len(axes) < 2:
            raise ValueError("raw=True needs a pair of Axes in ax=")
        if raw and axes[0].get_shared_y_axes().joined(axes[0], axes[1]):
            raise ValueError("plot_qq: the two Axes in ax= share their y axis, so the raw-value panel "
                             "would inherit the log scale of the log panel; pass Axes created without "
                             "sharey (or raw=False)")
    else:
        if raw:
            raise ValueError("raw=True needs a pair of Axes in ax= (or pass raw=False)")
        axes = [ax]
    colors = _palette(palette)
    for i, (g, mask) in enumerate(data.group_masks()):
        c = colors[i % len(colors)]
        yi = y[mask & np.isfinite(y)]
        if yi.size >= 2:
            (osm, osr), (slope, intercept, _r) = stats.probplot(yi, dist="norm")
            keep = _thin(osm.size, max_points)
            axes[0].plot(osm[keep], _exp(osr[keep]), _MARKERS[(i // len(colors)) % len(_MARKERS)],
                         markersize=3, color=c, alpha=0.6, label=f"{_group_name(g)} ({yi.size} values)")
            axes[0].plot(osm[[0, -1]], _exp(intercept + slope * osm[[0, -1]]), color=c, linewidth=1.2)
        if raw:
            xi = x[mask & np.isfinite(x)]
            if xi.size >= 2:
                (osm, osr), (slope, intercept, _r) = stats.probplot(xi, dist="norm")
                keep = _thin(osm.size, max_points)
                axes[1].plot(osm[keep], osr[keep], _MARKERS[(i // len(colors)) % len(_MARKERS)],
                             markersize=3, color=c, alpha=0.6)
                axes[1].plot(osm[[0, -1]], intercept + slope * osm[[0, -1]], color=c, linewidth=1.2)
    axes[0].set_yscale("log")
    readable_log_axis(axes[0].yaxis)
    axes[0].set_xlabel("standard normal quantile")
    axes[0].set_ylabel(f"{data.label}, log scale")
    axes[0].set_title("logs: straight if log-normal", fontsize="medium")
    handles, _ = axes[0].get_legend_handles_labels()
    if handles and len(handles) <= 4:
        axes[0].legend(fontsize="small", frameon=False)
    elif handles:  # many groups: beside the panels, not over the points
        axes[-1 if raw else 0].legend(handles=handles, fontsize="small", frameon=False, loc="upper left",
                                      bbox_to_anchor=(1.02, 1.0), markerscale=2.0)
    _finish_axes(axes[0])
    if raw:
        axes[1].set_yscale("linear")
        axes[1].set_xlabel("standard normal quantile")
        axes[1].set_ylabel(data.label)
        axes[1].set_title("raw values: straight if normal", fontsize="medium")
        _finish_axes(axes[1])
    if title is not None:
        axes[0].figure.suptitle(title)
    return np.array(axes[:2], dtype=object) if raw else axes[0]


# --------------------------------------------------------------------------------------------------
# scale evidence


def boxcox_profile(x: Any, lambdas: Any, *, groups: Any = None) -> np.ndarray:
    r"""Box-Cox profile log-likelihood over a grid of powers, for drawing (not a statistic of a result).

    Without ``groups`` it is :func:`scipy.stats.boxcox_llf` at each ``lambda``. With ``groups`` (one
    code per value) every group keeps its own mean and all share one variance:
    ``ℓ(λ) = (λ − 1)·Σ ln x − N/2·ln(SS_within(λ)/N)`` with ``SS_within`` the within-group sum of squares
    of the transformed values (Box & Cox 1964, their one-way layout). The values are divided by their
    geometric mean first, which shifts ℓ by a constant only (so maxima and intervals are unchanged).

    Parameters
    ----------
    x : array_like of positive floats
    lambdas : array_like
        The powers.
    groups : array_like of int, optional
        Group codes ``0 .. k-1``, one per value.

    Returns
    -------
    numpy.ndarray
        ℓ at each power (same length as ``lambdas``).

    References
    ----------
    Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. Journal of the Royal
    Statistical Society B 26:211-252.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import stats
    >>> x = np.array([1.0, 2.0, 4.0, 3.0, 9.0])
    >>> bool(np.allclose(boxcox_profile(x, [0.0, 0.5]), [stats.boxcox_llf(0.0, x), stats.boxcox_llf(0.5, x)]))
    True
    """
    from scipy import special

    xs = np.asarray(x, dtype=np.float64)
    lam = np.atleast_1d(np.asarray(lambdas, dtype=np.float64))
    if groups is None:
        return np.array([stats.boxcox_llf(float(v), xs) for v in lam])
    codes = np.asarray(groups, dtype=np.intp)
    n = xs.size
    logs = np.log(xs)
    shift = logs.mean()
    scaled = np.exp(logs - shift)
    k = int(codes.max()) + 1 if n else 0
    counts = np.bincount(codes, minlength=k).astype(np.float64)
    out = np.empty(lam.size)
    for j, v in enumerate(lam):  # one pass per grid point, all groups together
        z = special.boxcox(scaled, v)
        sums = np.bincount(codes, weights=z, minlength=k)
        means = np.divide(sums, counts, out=np.zeros(k), where=counts > 0)
        ss = float(np.sum((z - means[codes]) ** 2))
        with np.errstate(divide="ignore"):
            out[j] = (v - 1.0) * float(np.sum(logs - shift)) - 0.5 * n * np.log(ss / n)
    return out


def scale(
    obj: Any,
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
    """Scale evidence in two panels: the Box-Cox profile, and the mean-spread law across groups.

    Left (linear axes): the profile log-likelihood of the Box-Cox power λ, relative to its maximum,
    per group (or one curve for all groups with ``pooled=True``: group means removed, one common
    power), with λ = 0 (logs) and λ = 1 (linear scale) marked, the maximum-likelihood λ of
    ``.logstats.scale_check()`` as a dot and its profile-likelihood interval shaded (the curve crosses
    the dotted cut-off at the interval's ends). Right (log-log axes): each group's SD against its mean
    (linear scale, SD with ``ddof=1``) with the least-squares line of log SD on log mean, whose slope
    is ``spread_slope`` of ``scale_check(pooled=True)`` (1: spread proportional to level, i.e.
    multiplicative; 0: additive); dotted guides of slope 0 and 1 pass through the groups' centre.

    Parameters
    ----------
    obj, value, by, dim
        As in :func:`hist`.
    pooled : bool, default False
        One profile for all groups together.
    confidence_level : float, default 0.95
        Level of the λ intervals (and of the cut-off drawn).
    margin : float, default 2
        AIC margin of the verdict shown in the legend (``scale_check(margin=)``).
    detection_limit : number or column name, optional
        With non-detects the profile of the uncensored likelihood would mislead, so the left panel
        then only says so; the right panel uses the detected values.
    nonpositive : {"raise", "drop", "nan"}
        Zeros and negatives: refuse, or leave them out.
    lambdas : array_like, optional
        Grid of powers (default −1.5 to 2.5, widened to include every interval).
    palette, units, title
        As in :func:`hist`.
    ax : pair of Axes, optional

    Returns
    -------
    numpy.ndarray of two Axes ``[profile, spread]``.

    References
    ----------
    Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. Journal of the Royal
    Statistical Society B 26:211-252.
    """
    import matplotlib.pyplot as plt

    _check_policy(nonpositive)
    data = _prepare(obj, value, by, None, dim, units)
    y = _logs(data, "drop" if detection_limit is not None else nonpositive)  # censored zeros are no error
    x = data.frame[data.value].to_numpy(dtype=np.float64)
    policy = "drop" if nonpositive == "raise" else nonpositive
    usable = np.isfinite(y)
    if detection_limit is not None:
        dl = (pd.to_numeric(obj[detection_limit], errors="coerce").to_numpy(dtype=float)
              if isinstance(detection_limit, str) else np.full(len(x), float(detection_limit)))
        usable &= ~(x <= dl)
    if ax is None:
        fig, axs = plt.subplots(1, 2, figsize=(10.4, 4.2), layout="constrained")
        axes = list(axs.ravel())
    else:
        axes = list(np.ravel(ax))
        if len(axes) < 2:
            raise ValueError("plot_scale needs a pair of Axes in ax= (profile, spread)")
        if axes[0].get_shared_x_axes().joined(axes[0], axes[1]) or \
                axes[0].get_shared_y_axes().joined(axes[0], axes[1]):
            raise ValueError("plot_scale: the two Axes in ax= share an axis, but the profile is on linear "
                             "axes and the spread plot on log axes; pass Axes created without sharex/sharey")
    prof, spread = axes[0], axes[1]
    colors = _palette(palette)
    masks = data.group_masks()
    kw: dict[str, Any] = dict(columns=data.value, confidence_level=confidence_level, margin=margin,
                              nonpositive=policy)
    if detection_limit is not None:
        frame = data.frame.assign(__dl__=dl)
        kw["detection_limit"] = "__dl__"
    else:
        frame = data.frame
    per = _by_group(frame.logstats.scale_check(by=data.by, **kw), data)
    pooled_res = None
    if data.by is not None and len(masks) > 1:
        pr = frame.logstats.scale_check(by=data.by, pooled=True, **kw)
        pooled_res = pr.iloc[0] if isinstance(pr, pd.DataFrame) else pr
    cut = 0.5 * float(stats.chi2.ppf(confidence_level, 1))
    if detection_limit is not None:
        prof.text(0.5, 0.5, "Box-Cox profile not drawn:\nwith non-detects the uncensored\nlikelihood would "
                  "mislead", transform=prof.transAxes, ha="center", va="center", fontsize="small",
                  color="0.3")
    else:
        if pooled or len(masks) == 1:
            res = pooled_res if (pooled and pooled_res is not None) else per.iloc[0]
            curves = [("all groups, pooled" if pooled and len(masks) > 1 else _group_name(masks[0][0]),
                       usable, res, colors[0])]
        else:
            curves = [(_group_name(g), mask & usable, per.iloc[i], colors[i % len(colors)])
                      for i, (g, mask) in enumerate(masks)]
        lo_all = [float(r["boxcox_ci_low"]) for *_, r, _c in curves if np.isfinite(r["boxcox_ci_low"])]
        hi_all = [float(r["boxcox_ci_high"]) for *_, r, _c in curves if np.isfinite(r["boxcox_ci_high"])]
        grid = (np.asarray(lambdas, dtype=np.float64) if lambdas is not None else
                np.linspace(min([-1.5, *lo_all]) - 0.25, max([2.5, *hi_all]) + 0.25, 161))
        if pooled and data.by is not None:
            codes_all = np.full(len(x), -1)
            for i, (_g, mask) in enumerate(masks):
                codes_all[mask] = i
        for name, m, res, c in curves:
            xs = x[m]
            if xs.size < 3:
                continue
            if pooled and data.by is not None and len(masks) > 1:
                codes = pd.factorize(codes_all[m])[0]
                ll = boxcox_profile(xs, grid, groups=codes)
            else:
                ll = boxcox_profile(xs, grid)
            with np.errstate(invalid="ignore"):
                rel = ll - np.nanmax(ll)
            lam, lo, hi = (float(res["boxcox_lambda"]), float(res["boxcox_ci_low"]),
                           float(res["boxcox_ci_high"]))
            label = f"{name}: λ = {lam:.2f} [{lo:.2f}, {hi:.2f}], {res['preferred']}"
            prof.plot(grid, rel, color=c, linewidth=1.8, label=label, gid="profile")
            if np.isfinite(lo) and np.isfinite(hi):
                prof.axvspan(lo, hi, color=c, alpha=0.12 if len(curves) > 1 else 0.2, linewidth=0,
                             gid="interval")
            if np.isfinite(lam):
                prof.plot([lam], [0.0], "o", color=c, markersize=5)
        prof.axhline(-cut, color="0.4", linestyle=":", linewidth=1.0)
        for v, text, at in ((0.0, "λ = 0: logs", 1.0), (1.0, "λ = 1: linear", 0.93)):
            prof.axvline(v, color="0.25", linestyle="--", linewidth=1.0, gid=f"lambda-{v:g}")
            prof.annotate(text, (v, at), xycoords=("data", "axes fraction"), xytext=(3, -3),
                          textcoords="offset points", ha="left", va="top", fontsize="small", color="0.25")
        bottom = max(-6.0 * cut, float(np.nanmin([ln.get_ydata().min() for ln in prof.lines
                                                  if ln.get_gid() == "profile"] or [-4.0 * cut])))
        prof.set_ylim(bottom, 0.6 * cut)
        handles, _ = prof.get_legend_handles_labels()
        if handles:
            # below the panel, so the key never covers a curve
            prof.legend(fontsize="x-small", frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.16),
                        ncols=2 if len(handles) > 3 else 1)
    prof.set_xscale("linear")
    prof.set_xlabel("Box-Cox power λ")
    prof.set_ylabel("profile log-likelihood − maximum")
    prof.set_title(f"Box-Cox profile ({100 * confidence_level:g} % interval shaded)", fontsize="medium")
    _finish_axes(prof)

    sub = data.frame.assign(**{data.value: np.where(usable, x, np.nan)})
    res_lin = _by_group(sub.logstats.summary(by=data.by, columns=data.value, linear=True, nonpositive="drop"),
                        data)
    means, sds = res_lin["mean"].to_numpy(dtype=float), res_lin["sd"].to_numpy(dtype=float)
    ok = np.isfinite(means) & np.isfinite(sds) & (means > 0) & (sds > 0)
    for i, (g, _m) in enumerate(masks):
        if ok[i]:
            spread.plot([means[i]], [sds[i]], "o", color=colors[i % len(colors)], markersize=7,
                        markeredgecolor="black", markeredgewidth=0.6, label=_group_name(g), gid="group")
    spread.set_xscale("log")
    spread.set_yscale("log")
    slope = float(pooled_res["spread_slope"]) if pooled_res is not None else np.nan
    if pooled_res is not None and ok.sum() >= 3 and np.isfinite(slope):
        lx, ly = np.log(means[ok]), np.log(sds[ok])
        cx, cy = float(lx.mean()), float(ly.mean())
        span = np.linspace(lx.min() - 0.1 * (np.ptp(lx) + 0.1), lx.max() + 0.1 * (np.ptp(lx) + 0.1), 50)
        lo_s, hi_s = float(pooled_res["spread_slope_ci_low"]), float(pooled_res["spread_slope_ci_high"])
        spread.plot(np.exp(span), np.exp(cy + slope * (span - cx)), color="black", linewidth=1.6,
                    gid="spread-fit", label=f"fitted slope {slope:.2f} [{lo_s:.2f}, {hi_s:.2f}]")
        for sl, text, style in ((1.0, "slope 1: multiplicative", "-."), (0.0, "slope 0: additive", ":")):
            spread.plot(np.exp(span), np.exp(cy + sl * (span - cx)), color="0.55", linestyle=style,
                        linewidth=1.0, label=text)
    else:
        why = ("mean-spread slope needs 3 or more groups" if ok.sum() < 3 else
               "mean-spread slope not computed (see the scale check's note)")
        spread.text(0.5, 0.05, why, transform=spread.transAxes,
                    ha="center", va="bottom", fontsize="small", color="0.3")
    readable_log_axis(spread.xaxis)
    readable_log_axis(spread.yaxis)
    spread.set_xlabel(f"group mean of {data.label}, log scale")
    spread.set_ylabel("group SD (ddof = 1), log scale")
    spread.set_title("spread against level across groups", fontsize="medium")
    handles, _ = spread.get_legend_handles_labels()
    if handles:
        spread.legend(fontsize="x-small", frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    _finish_axes(spread)
    if title is not None:
        prof.figure.suptitle(title)
    return np.array([prof, spread], dtype=object)


def _thin(n: int, max_points: int | None) -> np.ndarray:
    if max_points is None or n <= max_points:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, max_points).round().astype(np.intp))


#: Names as in the accessor methods (``df.logstats.plot_hist`` delegates to :func:`hist`).
plot_hist = hist
plot_groups = groups
plot_qq = qq
plot_scale = scale
