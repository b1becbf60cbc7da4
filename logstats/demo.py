"""An invented example: a reporter-fluorescence imaging screen, analysed end to end.

**The data are invented** (simulated with numpy for this package; no real experiment is behind them).
The scenario: a cell line carrying a fluorescent reporter is imaged after treatment with a vehicle
(the reference) or one of three made-up compounds, ``LS-101``, ``LS-202`` and ``LS-303``, in six wells
each, with about 1,500 cells segmented per well. Per cell there are two channels:

- ``reporter``: log-normal across cells, with a well-to-well random effect, so the answer with the
  well as the unit differs from the (pseudo-replicated) per-cell answer. The simulated fold changes
  against vehicle are 1.0 (LS-101, no effect), 1.8 (LS-202) and 0.6 (LS-303). The values are
  background-subtracted, so a handful are at or below zero.
- ``marker``: a dim second channel with a detection limit ``marker_dl``; values at or below it are
  non-detects, reported by the (invented) imaging software either as the limit itself or as 0.

:func:`make_stack` gives a matching ``cell × channel × time`` DataArray, and :func:`run_demo` (the
``logstats demo`` command) prints the key tables and writes the table, figures, report and stack.
"""

from __future__ import annotations

import importlib.util
import sys
from collections.abc import Callable
from pathlib import Path
from typing import IO, Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

__all__ = ["INVENTED_NOTE", "TREATMENTS", "make_cells", "make_stack", "run_demo"]

#: One sentence stating that the example is invented; printed by the demo and stored in attrs.
INVENTED_NOTE = (
    "Invented example data: a simulated reporter-fluorescence imaging screen (vehicle and three "
    "made-up compounds, 6 wells each); no real experiment is behind these numbers."
)

#: Treatments and the fold change of the reporter simulated for each (vehicle is the reference).
TREATMENTS: dict[str, float] = {"vehicle": 1.0, "LS-101": 1.0, "LS-202": 1.8, "LS-303": 0.6}
#: Fold change of the marker channel simulated for each treatment.
MARKER_EFFECT: dict[str, float] = {"vehicle": 1.0, "LS-101": 1.0, "LS-202": 1.0, "LS-303": 1.5}

_ROWS = "BCDE"  # plate rows, one per treatment
_REPORTER_GMEAN = 150.0  # a.u., vehicle
_REPORTER_SIGMA = 0.85  # SD of ln(reporter) between cells of one well
_WELL_SIGMA = 0.18  # SD of the well effect on ln(reporter)
_MARKER_GMEAN = 40.0
_MARKER_SIGMA = 0.9
_MARKER_DL = 25.0


def make_cells(seed: int = 2024, *, cells_per_well: int = 1500) -> pd.DataFrame:
    """The invented per-cell table: one row per cell.

    Columns ``treatment``, ``well``, ``cell``, ``reporter`` (a.u., background-subtracted, a few
    values at or below zero), ``marker`` (a.u., non-detects reported as the limit or as 0) and
    ``marker_dl`` (the detection limit). ``df.attrs`` records the units and that the data are
    invented. The number of cells per well varies by ±15 % around ``cells_per_well``.

    Parameters
    ----------
    seed : int, default 2024
        Seed of ``numpy.random.default_rng``; the same seed gives the same table.
    cells_per_well : int, default 1500

    Returns
    -------
    pandas.DataFrame

    Examples
    --------
    >>> df = make_cells(seed=1, cells_per_well=50)
    >>> sorted(df["treatment"].unique())
    ['LS-101', 'LS-202', 'LS-303', 'vehicle']
    >>> df.groupby("treatment")["well"].nunique().tolist()
    [6, 6, 6, 6]
    >>> df.attrs["note"].startswith("Invented")
    True
    """
    rng = np.random.default_rng(seed)
    parts = []
    for t, (name, fold) in enumerate(TREATMENTS.items()):
        for col in range(2, 8):
            well = f"{_ROWS[t]}{col:02d}"
            n = int(rng.integers(int(cells_per_well * 0.85), int(cells_per_well * 1.15) + 1))
            # a product of independent factors: typical level × treatment × well × cell
            well_factor = rng.lognormal(0.0, _WELL_SIGMA)
            reporter = _REPORTER_GMEAN * fold * well_factor * rng.lognormal(0.0, _REPORTER_SIGMA, size=n)
            marker = _MARKER_GMEAN * MARKER_EFFECT[name] * rng.lognormal(0.0, _MARKER_SIGMA, size=n)
            parts.append(pd.DataFrame({
                "treatment": name,
                "well": well,
                "cell": np.arange(1, n + 1),
                "reporter": reporter,
                "marker": marker,
            }))
    df = pd.concat(parts, ignore_index=True)
    # background subtraction leaves a handful of cells at or below zero
    bad = rng.choice(len(df), size=12, replace=False)
    rep = df["reporter"].to_numpy(copy=True)
    rep[bad[:4]] = 0.0
    rep[bad[4:]] = -np.round(rng.uniform(0.5, 8.0, size=bad.size - 4), 2)
    df["reporter"] = np.round(rep, 2)
    # non-detects: at or below the limit, reported as the limit or as 0 (half the wells each)
    mk = df["marker"].to_numpy(copy=True)
    nd = mk <= _MARKER_DL
    as_zero = df["well"].str[1:].astype(int).to_numpy() % 2 == 0
    mk[nd & as_zero] = 0.0
    mk[nd & ~as_zero] = _MARKER_DL
    df["marker"] = np.round(mk, 2)
    df["marker_dl"] = _MARKER_DL
    df["treatment"] = pd.Categorical(df["treatment"], categories=list(TREATMENTS))
    df.attrs["units"] = {"reporter": "a.u.", "marker": "a.u.", "marker_dl": "a.u."}
    df.attrs["note"] = INVENTED_NOTE
    return df


def make_stack(seed: int = 2024, *, cells_per_treatment: int = 100) -> xr.DataArray:
    """The invented imaging stack: a ``cell × channel × time`` DataArray of intensities.

    Cells are tracked over four time points (0, 2, 6 and 24 h) in the two channels; ``treatment``
    and ``well`` are coordinates along ``cell``. Under LS-202 the reporter rises over time to the
    1.8-fold of :func:`make_cells`, under LS-303 it falls to 0.6-fold. All values are positive.

    Parameters
    ----------
    seed : int, default 2024
    cells_per_treatment : int, default 100

    Returns
    -------
    xarray.DataArray
        Named ``intensity``, ``attrs["units"] = "a.u."``, ``attrs["note"]`` saying it is invented.

    Examples
    --------
    >>> da = make_stack(seed=1, cells_per_treatment=10)
    >>> da.dims, da.sizes["channel"], da.sizes["time"]
    (('cell', 'channel', 'time'), 2, 4)
    >>> da.attrs["note"].startswith("Invented")
    True
    """
    rng = np.random.default_rng(seed)
    times = np.array([0.0, 2.0, 6.0, 24.0])
    k = int(cells_per_treatment)
    names = list(TREATMENTS)
    treatment = np.repeat(names, k)
    well = np.array([f"{_ROWS[i]}{2 + (j % 6):02d}" for i in range(len(names)) for j in range(k)])
    fold = np.repeat([TREATMENTS[t] for t in names], k)
    mfold = np.repeat([MARKER_EFFECT[t] for t in names], k)
    # the treatment effect builds up over 24 h: fold ** (t / 24) on each cell's own baseline
    ramp = np.power(fold[:, None], times[None, :] / 24.0)
    mramp = np.power(mfold[:, None], times[None, :] / 24.0)
    base_r = _REPORTER_GMEAN * rng.lognormal(0.0, _REPORTER_SIGMA, size=(k * len(names), 1))
    base_m = _MARKER_GMEAN * rng.lognormal(0.0, _MARKER_SIGMA, size=(k * len(names), 1))
    drift = rng.lognormal(0.0, 0.15, size=(k * len(names), 2, times.size))  # frame-to-frame noise
    data = np.stack([base_r * ramp, base_m * mramp], axis=1) * drift
    da = xr.DataArray(
        np.round(data, 3),
        dims=("cell", "channel", "time"),
        coords={
            "cell": np.arange(1, k * len(names) + 1),
            "channel": ["reporter", "marker"],
            "time": ("time", times, {"units": "h"}),
            "treatment": ("cell", treatment),
            "well": ("cell", well),
        },
        name="intensity",
        attrs={"units": "a.u.", "note": INVENTED_NOTE},
    )
    return da


def _netcdf_engine() -> Literal["netcdf4", "scipy"] | None:
    if importlib.util.find_spec("netCDF4") is not None:
        return "netcdf4"
    if importlib.util.find_spec("scipy") is not None:
        return "scipy"
    return None


def run_demo(out: str | Path = "logstats-demo", *, seed: int = 2024, write_files: bool = True,
             stream: IO[str] | None = None, ascii: bool = False, width: int | None = None,
             progress: Callable[[str], None] | None = None) -> list[Path]:
    """Generate the invented data, print the key tables and (optionally) write every output file.

    Prints: the summary of ``reporter`` by treatment (its values at or below zero dropped with
    ``nonpositive="drop"`` and counted); the fold changes against vehicle with the well as the unit
    next to the per-cell answer; the linear-vs-log scale check; and the left-censored fit of
    ``marker``. Writes ``cells.csv``, the figures (PNG), ``report.html`` and, when a netCDF engine
    (netCDF4 or scipy) is importable, ``stack.nc`` into ``out``, and ends with the list of files.

    Parameters
    ----------
    out : path, default "logstats-demo"
        Output folder (created if needed).
    seed : int, default 2024
    write_files : bool, default True
        False prints the tables only.
    stream : text stream, optional
        Where to print (default ``sys.stdout``).
    ascii : bool, default False
        Plain ASCII tables (``x/`` for ``×/÷``).
    width : int, optional
        Line width for the tables.
    progress : callable, optional
        Called with a short text before each step that takes a while (the command line prints these
        on standard error when it is a terminal).

    Returns
    -------
    list of pathlib.Path
        The files written (empty with ``write_files=False``).
    """
    from logstats.format import format_table

    stream = stream if stream is not None else sys.stdout

    def say(text: str = "") -> None:
        print(text, file=stream)

    def table(df: Any, columns: list[str] | None = None) -> None:
        cols = [c for c in columns if c in df.columns] if columns is not None else None
        say(format_table(df, columns=cols, ascii=ascii, width=width))
        say()

    step = progress if progress is not None else (lambda text: None)
    step("generating the invented screen")
    df = make_cells(seed=seed)
    say(INVENTED_NOTE)
    say(f"{len(df)} cells in {df['well'].nunique()} wells, treatments: {', '.join(TREATMENTS)} "
        f"(seed {seed})")
    say()

    acc = df.logstats
    step("summary, fold changes, scale check and censored fit")
    summ = acc.summary(by="treatment", columns="reporter", nonpositive="drop", linear=True)
    n_np = int(summ["n_nonpositive"].sum())
    say(f"reporter by treatment: nonpositive='drop' left out {n_np} background-subtracted value(s) at "
        "or below zero (counted in n_nonpositive):")
    for t, k in summ["n_nonpositive"].items():
        if k:
            say(f"  {t}: {int(k)}")
    say()
    table(summ, ["n", "n_nonpositive", "gmean", "gsd", "ci_low", "ci_high", "median", "mean"])

    cols = ["ratio", "ci_low", "ci_high", "p_value", "p_adjusted", "n", "n_reference"]
    wells = acc.fold_change(by="treatment", reference="vehicle", replicate="well", columns="reporter",
                            nonpositive="drop")
    cells = acc.fold_change(by="treatment", reference="vehicle", columns="reporter", nonpositive="drop")
    say("fold change of reporter against vehicle, the well as the unit (n = wells):")
    table(_drop_reference(wells, "vehicle"), cols)
    say("the same with each cell as a unit (pseudo-replication: intervals far too narrow, for "
        "contrast only):")
    table(_drop_reference(cells, "vehicle"), cols)

    say("linear or log scale? (reporter, by treatment)")
    check = acc.scale_check(by="treatment", columns="reporter", nonpositive="drop")
    table(check, ["aic_normal", "aic_lognormal", "preferred", "normality_p_linear", "normality_p_log",
                  "mean_ratio", "expected_ratio"])

    n_nd = int((df["marker"] <= df["marker_dl"]).sum())
    say(f"marker: {n_nd} non-detect(s) at or below marker_dl (reported as the limit or as 0); "
        "left-censored log-normal fit with detection_limit='marker_dl':")
    fit = acc.fit(by="treatment", columns="marker", detection_limit="marker_dl")
    table(fit, ["mu", "sigma", "n", "n_censored", "loglik", "converged"])

    written: list[Path] = []
    if not write_files:
        return written
    out_dir = Path(out)
    out_dir.mkdir(parents=True, exist_ok=True)
    csv = out_dir / "cells.csv"
    df.to_csv(csv, index=False)
    written.append(csv)
    step("drawing the figures")
    written.extend(_figures(df, out_dir))
    from logstats.report import build_report

    report = out_dir / "report.html"
    build_report(df, value="reporter", by="treatment", replicate="well", reference="vehicle",
                 nonpositive="drop", path=report, units="a.u.", unit_name="cells",
                 title="logstats demo: invented reporter-fluorescence screen", note=INVENTED_NOTE,
                 source=f"invented data, make_cells(seed={seed})",
                 command=f"logstats.demo.run_demo({str(out)!r}, seed={seed})", progress=progress)
    written.append(report)
    engine = _netcdf_engine()
    if engine is not None:
        nc = out_dir / "stack.nc"
        step("writing the imaging stack")
        make_stack(seed=seed).to_netcdf(nc, engine=engine)
        written.append(nc)
    else:
        say("(no netCDF engine importable: install netCDF4 or scipy to write stack.nc)")
    say("files written:")
    for p in written:
        say(f"  {p}")
    return written


def _drop_reference(table: pd.DataFrame, reference: Any) -> pd.DataFrame:
    idx = table.index
    if isinstance(idx, pd.MultiIndex):
        return table[idx.get_level_values(0) != reference]
    return table[idx != reference]


def _figures(df: pd.DataFrame, out_dir: Path) -> list[Path]:
    """Draw the demo figures on pyplot-free Figures (the caller's matplotlib backend is left alone)."""
    from matplotlib.figure import Figure

    from logstats import plot

    def panels() -> tuple[Figure, Any]:
        fig = Figure(figsize=(8.0, 6.0), layout="constrained")
        return fig, fig.subplots(2, 2, sharex=True, sharey=True)

    def one(width: float, height: float, ncols: int = 1) -> tuple[Figure, Any]:
        fig = Figure(figsize=(width, height), layout="constrained")
        return fig, fig.subplots(1, ncols)

    jobs: list[tuple[str, tuple[Figure, Any], Any]] = [
        ("reporter-histogram.png", panels(), lambda ax: plot.hist(
            df, "reporter", by="treatment", nonpositive="drop", normal=True, units="a.u.", ax=ax)),
        ("reporter-by-well.png", one(9.6, 4.4), lambda ax: plot.groups(
            df, "reporter", by="treatment", replicate="well", nonpositive="drop", units="a.u.", ax=ax)),
        ("reporter-probability.png", one(10.0, 4.2, ncols=2), lambda ax: plot.qq(
            df, "reporter", by="treatment", nonpositive="drop", units="a.u.", ax=ax)),
        ("marker-censored-fit.png", panels(), lambda ax: plot.hist(
            df, "marker", by="treatment", detection_limit="marker_dl", units="a.u.", ax=ax)),
    ]
    files = []
    for name, (fig, axes), draw in jobs:
        draw(axes)
        path = out_dir / name
        fig.savefig(path, dpi=100)
        files.append(path)
    return files
