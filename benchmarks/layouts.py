"""Moment statistics along one dimension in every memory layout, against the hand-written idiom.

A 3-D stack of invented per-cell intensities (``cell`` x ``channel`` x ``time``, log-normal) is stored
with the reduced dimension ``cell`` first, in the middle or last in memory, as float64 and as float32.
For each layout and dtype, in one process, the calls are timed side by side (interleaved, median of
``repeats`` after an untimed warm-up, as in :mod:`benchmarks.run`):

* ``xarray``: ``da.logstats.gmean("cell")`` against ``np.exp(np.log(da).mean("cell"))``;
* ``core``: ``np.exp(moments_along(x, axis=k, spread=False).mean_log)`` (the one-pass moments that
  ``gmean`` reads: counts and means, no sum of squares) against ``np.exp(np.log(x).mean(axis=k))`` on
  the bare numpy array, also with ``threads=1`` (what one core does).

Memory is the tracemalloc peak of one more call of each (numpy reports its buffers to tracemalloc),
relative to the input's size. Note that the float32 idiom takes its logs in float32 (about 1e-7
relative), while logstats takes every log in float64.

Usage::

    python -m benchmarks.layouts [--quick] [--repeats 7]

The runner calls :func:`layout_cases`; :func:`layout_table` formats its rows. Nothing here asserts a
timing.
"""

from __future__ import annotations

import argparse
import gc
import sys
import tracemalloc
from collections.abc import Callable
from pathlib import Path
from typing import Any

if __package__ in (None, ""):  # run as ``python benchmarks/layouts.py``
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np

from benchmarks.run import interleaved, max_rel_diff

#: The goal of issue 17 for the moment statistics: ours / idiom at or below this in every layout.
GOAL = 0.7
SIZES_FULL = {"cell": 2000, "channel": 4, "time": 1000}  # 8e6 values: 64 MB in float64
SIZES_QUICK = {"cell": 200, "channel": 4, "time": 250}
LAYOUTS = {  # where the reduced dimension sits in memory -> dims in memory order
    "first": ("cell", "channel", "time"),
    "middle": ("channel", "cell", "time"),
    "last": ("channel", "time", "cell"),
}


def layout_stack(layout: str, dtype: Any, sizes: dict[str, int], seed: int = 3) -> Any:
    """Invented log-normal intensities as a C-ordered xarray.DataArray with dims in ``layout`` order."""
    import xarray as xr

    dims = LAYOUTS[layout]
    rng = np.random.default_rng(seed)
    values = rng.lognormal(1.0, 0.5, tuple(sizes[d] for d in dims)).astype(dtype)
    return xr.DataArray(values, dims=dims)


def peak_over_input(fn: Callable[[], Any], nbytes: int) -> float:
    """Peak traced allocation of one call of ``fn``, relative to ``nbytes``."""
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    return peak / nbytes


def layout_cases(quick: bool = False, repeats: int | None = None) -> list[dict[str, Any]]:
    """Time every (level, layout, dtype) case; one row each (see the module docstring).

    Row fields: ``section`` ("layouts"), ``case``, ``level`` ("xarray" or "core"), ``layout``, ``dtype``,
    ``shape`` (in memory order), ``values``, ``ours_s``, ``idiom_s``, ``ours_over_idiom``, ``goal``,
    ``met``, ``ours_1thread_s`` and ``ours_1thread_over_idiom`` (core level only, else None),
    ``ours_peak_over_input``, ``idiom_peak_over_input``, ``agree`` (largest relative difference of the
    geometric means) and ``ours``/``idiom`` (what was timed).
    """
    import logstats  # noqa: F401  (registers the accessors)
    from logstats.core.moments import moments_along

    sizes = SIZES_QUICK if quick else SIZES_FULL
    repeats = repeats if repeats is not None else (3 if quick else 7)
    rows: list[dict[str, Any]] = []
    for dtype in (np.float64, np.float32):
        for layout, dims in LAYOUTS.items():
            da = layout_stack(layout, dtype, sizes)
            x = da.values
            k = dims.index("cell")
            base = {"section": "layouts", "layout": layout, "dtype": np.dtype(dtype).name,
                    "shape": [sizes[d] for d in dims], "values": int(x.size), "goal": GOAL}

            # xarray level: what a user of the accessor writes
            fns = {"ours": lambda da=da: da.logstats.gmean("cell"),
                   "idiom": lambda da=da: np.exp(np.log(da).mean("cell"))}
            t, res = interleaved(fns, repeats)
            rows.append(_row(base, "xarray", t, None, res["ours"].values, res["idiom"].values,
                             {key: peak_over_input(fn, x.nbytes) for key, fn in fns.items()},
                             'da.logstats.gmean("cell")', 'np.exp(np.log(da).mean("cell"))'))

            # core level: the bare reduction on the numpy array, also on one thread
            cfns = {"ours": lambda x=x, k=k: np.exp(moments_along(x, axis=k, spread=False).mean_log),
                    "ours_1thread": lambda x=x, k=k: np.exp(moments_along(x, axis=k, threads=1,
                                                                          spread=False).mean_log),
                    "idiom": lambda x=x, k=k: np.exp(np.log(x).mean(axis=k))}
            t, res = interleaved(cfns, repeats)
            rows.append(_row(base, "core", t, t["ours_1thread"], res["ours"], res["idiom"],
                             {key: peak_over_input(cfns[key], x.nbytes) for key in ("ours", "idiom")},
                             f"np.exp(moments_along(x, axis={k}, spread=False).mean_log)",
                             f"np.exp(np.log(x).mean(axis={k}))"))
            _progress(rows[-2])
            _progress(rows[-1])
    return rows


def _row(base: dict[str, Any], level: str, t: dict[str, float], one: float | None, ours: Any, idiom: Any,
         peaks: dict[str, float], what_ours: str, what_idiom: str) -> dict[str, Any]:
    ratio = t["ours"] / t["idiom"]
    case = f"{level} gmean, cell {base['layout']} in memory, {base['dtype']}"
    return {**base, "case": case, "level": level,
            "ours_s": t["ours"], "idiom_s": t["idiom"], "ours_over_idiom": ratio, "met": ratio <= GOAL,
            "ours_1thread_s": one, "ours_1thread_over_idiom": None if one is None else one / t["idiom"],
            "ours_peak_over_input": peaks["ours"], "idiom_peak_over_input": peaks["idiom"],
            "agree": max_rel_diff({"gmean": ours}, {"gmean": idiom}, ("gmean",)),
            "ours": what_ours, "idiom": what_idiom}


def _progress(r: dict[str, Any]) -> None:
    one = "" if r["ours_1thread_s"] is None else f", 1 thread {r['ours_1thread_over_idiom']:.2f}"
    print(f"  {r['case']}: ours {r['ours_s'] * 1e3:.1f} ms, idiom {r['idiom_s'] * 1e3:.1f} ms, "
          f"ratio {r['ours_over_idiom']:.2f}{one}; peak memory {r['ours_peak_over_input']:.2f}x vs "
          f"{r['idiom_peak_over_input']:.2f}x the input", flush=True)


def layout_table(rows: list[dict[str, Any]]) -> str:
    """A markdown table of :func:`layout_cases` rows."""
    if not rows:
        return ""
    r0 = rows[0]
    lines = [f"**Layouts**: gmean along `cell` of a {r0['values']:.0e}-value stack, the reduced dim first, "
             f"in the middle or last in memory (goal: ours / idiom <= {GOAL})", "",
             "| level | cell in memory | dtype | ours | idiom | ours / idiom | one thread / idiom | "
             "peak memory ours / idiom (x input) | agree |",
             "|---|---|---|---:|---:|---:|---:|---|---|"]
    for r in rows:
        one = "" if r["ours_1thread_over_idiom"] is None else f"{r['ours_1thread_over_idiom']:.2f}"
        lines.append(f"| {r['level']} | {r['layout']} | {r['dtype']} | {r['ours_s'] * 1e3:.1f} ms | "
                     f"{r['idiom_s'] * 1e3:.1f} ms | {r['ours_over_idiom']:.2f} | {one} | "
                     f"{r['ours_peak_over_input']:.2f} / {r['idiom_peak_over_input']:.2f} | "
                     f"{r['agree']:.0e} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (a smoke run)")
    parser.add_argument("--repeats", type=int, default=None)
    args = parser.parse_args(argv)
    print(layout_table(layout_cases(args.quick, args.repeats)))


if __name__ == "__main__":
    main()
