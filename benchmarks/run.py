"""Time logstats against scipy per group and the hand-written idiom, side by side in one process.

Usage (from the repository root)::

    python -m benchmarks                 # everything: several minutes on 2 cores
    python -m benchmarks --quick         # small smoke run (< 60 s); what CI runs
    python -m benchmarks --only grouped xarray --repeats 7
    python benchmarks/run.py --quick     # the same as a script
    python -m benchmarks --readme        # also rewrite the results block of benchmarks/README.md

Each timing is the median of ``--repeats`` calls, the implementations of one case interleaved so they
share the machine's state; a first untimed call of each warms caches and imports (a reference slower
than ten seconds per call is timed once, on that first call). Ratios are reported as ``ours / idiom``
(below 1 is faster than the idiom) and ``scipy / ours`` (how many times faster than scipy per group).
Every pair is also compared: ``agree`` is the largest relative difference of the shared fields.
Memory is measured in a fresh subprocess per case: the growth of resident memory (Linux peak-RSS
mark, reset just before the call) and the tracemalloc peak, both relative to the value column's size.
Figures go to ``benchmarks/results/latest.json`` (and a time-stamped copy); a table is printed.
Benchmarks are not tests: nothing here asserts a timing.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import gc
import json
import os
import platform
import statistics
import subprocess
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

if __package__ in (None, ""):  # run as ``python benchmarks/run.py``: make the package importable
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np
import pandas as pd

from benchmarks.memory import reset_peak as _reset_peak
from benchmarks.memory import status as _status
from benchmarks.registry import ALONG, GROUPED

ROOT = Path(__file__).resolve().parent.parent
RESULTS = Path(__file__).resolve().parent / "results"
README = Path(__file__).resolve().parent / "README.md"
SECTIONS = ("grouped", "xarray", "memory", "fit", "out_of_core", "methods", "layouts", "startup")
SLOW_CALL = 10.0  # seconds: a reference this slow is timed once

FULL: dict[str, Any] = {
    "grouped": [(rows, groups, "int") for rows in (1_000_000, 10_000_000) for groups in (100, 1_000, 100_000)]
    + [(1_000_000, 1_000, "str")],
    "grouped_single": [(10_000_000, 1_000)],  # gmean and gsd alone
    "scipy_subsample": {(10_000_000, 100_000): 10},  # time scipy on 1/10 of the groups, scale by 10
    "xarray_shape": (4, 5, 1_000_000),  # 2e7 values (160 MB)
    "xarray_chunk": 100_000,  # cells per dask chunk: 2e6 values, 16 MB
    "memory": [(10_000_000, 100), (10_000_000, 1_000), (10_000_000, 100_000), (1_000_000, 1_000)],
    "fit": (200, 500),
    "out_of_core_gb": 4.0,
    "distributed": True,
    "slow_call": SLOW_CALL,
    "startup_runs": 5,
    "startup_warm": True,
}
QUICK: dict[str, Any] = {
    "grouped": [(100_000, 100, "int"), (100_000, 1_000, "int"), (100_000, 1_000, "str")],
    "grouped_single": [(100_000, 1_000)],
    "scipy_subsample": {},
    "xarray_shape": (2, 5, 20_000),
    "xarray_chunk": 5_000,
    "memory": [(1_000_000, 1_000)],
    "fit": (20, 200),
    "out_of_core_gb": 0.1,
    "distributed": False,
    "slow_call": 0.2,  # a smoke run: a call slower than this is timed once (its first call)
    "startup_runs": 3,
    "startup_warm": False,  # the sections before have read every file already
}


# --------------------------------------------------------------------------- data (invented)

def grouped_frame(rows: int, groups: int, key: str = "int", seed: int = 0) -> pd.DataFrame:
    """Invented per-cell intensities (log-normal) with a well label of ``groups`` levels."""
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, groups, rows)
    g: Any = codes if key == "int" else pd.Series(np.char.add("w", codes.astype("U6")), dtype="str")
    return pd.DataFrame({"g": g, "x": rng.lognormal(1.0, 0.5, rows)})


def censored_frame(groups: int, per_group: int, seed: int = 1) -> pd.DataFrame:
    """Invented assay: log-normal values per group, each group's detection limit at its 30 % quantile."""
    from scipy import stats

    rng = np.random.default_rng(seed)
    mu = rng.normal(1.0, 0.5, groups)
    sigma = 0.7
    g = np.repeat(np.arange(groups), per_group)
    x = np.exp(mu[g] + sigma * rng.standard_normal(groups * per_group))
    limit = np.exp(mu + sigma * stats.norm.ppf(0.30))[g]
    return pd.DataFrame({"g": g, "x": x, "dl": limit})


# --------------------------------------------------------------------------- timing

def _time(fn: Callable[[], Any]) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def interleaved(fns: dict[str, Callable[[], Any]], repeats: int,
                slow: float = SLOW_CALL) -> tuple[dict[str, float], dict[str, Any]]:
    """Median seconds per implementation, calls interleaved; also each first call's result.

    An implementation whose first call takes longer than ``slow`` seconds is not repeated: that call
    is its measurement.
    """
    times: dict[str, list[float]] = {k: [] for k in fns}
    results: dict[str, Any] = {}
    for k, fn in fns.items():
        t, results[k] = _time(fn)
        if t > slow:
            times[k].append(t)  # too slow to repeat: the first call is the measurement
    for _ in range(repeats):
        for k, fn in fns.items():
            if times[k] and times[k][0] > slow:
                continue
            gc.collect()
            times[k].append(_time(fn)[0])
    return {k: statistics.median(v) for k, v in times.items()}, results


def max_rel_diff(ours: Any, ref: Any, fields: tuple[str, ...]) -> float:
    """Largest relative difference over the shared fields (and groups) of two results."""
    worst = 0.0
    for f in fields:
        if isinstance(ours, pd.DataFrame):
            a, b = ours[f].align(ref[f], join="inner")
            a, b = a.to_numpy(dtype=float), b.to_numpy(dtype=float)
        else:
            a, b = np.asarray(ours[f], dtype=float), np.asarray(ref[f], dtype=float)
        ok = np.isfinite(a) & np.isfinite(b)
        if ok.any():
            worst = max(worst, float(np.max(np.abs(a[ok] - b[ok]) / np.maximum(np.abs(b[ok]), 1e-300))))
    return worst


# --------------------------------------------------------------------------- sections

def bench_grouped(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    out = []
    cases = [("summary", r, g, k) for r, g, k in cfg["grouped"]]
    cases += [(stat, r, g, "int") for r, g in cfg["grouped_single"] for stat in ("gmean", "gsd")]
    for stat, rows, groups, key in cases:
        pairing = GROUPED[stat]
        df = grouped_frame(rows, groups, key)
        idiom = pairing.reference("idiom")
        scipy_ref = pairing.reference("scipy per group")
        fns = {"ours": lambda df=df, p=pairing: p.ours(df, "g", "x"),
               "idiom": lambda df=df, r=idiom: r.run(df, "g", "x")}
        t, res = interleaved(fns, repeats)
        ours_fields = pairing.as_fields(res["ours"], "x")
        factor = cfg["scipy_subsample"].get((rows, groups), 1)
        sub = df if factor == 1 else df[df["g"] < groups // factor]
        n_sub = int(sub["g"].nunique())
        t_scipy, res_scipy = interleaved({"scipy": lambda sub=sub, r=scipy_ref: r.run(sub, "g", "x")},
                                         repeats if groups <= 1_000 else 1, cfg["slow_call"])
        scipy_s = t_scipy["scipy"] * (groups / n_sub)
        rec = {
            "section": "grouped", "statistic": stat, "rows": rows, "groups": groups, "key": key,
            "ours_s": t["ours"], "idiom_s": t["idiom"], "scipy_s": scipy_s,
            "ours_over_idiom": t["ours"] / t["idiom"], "scipy_over_ours": scipy_s / t["ours"],
            "agree_idiom": max_rel_diff(ours_fields, res["idiom"], idiom.fields),
            "agree_scipy": max_rel_diff(ours_fields, res_scipy["scipy"], scipy_ref.fields),
            "scipy_note": "" if factor == 1 else
            f"scipy timed on {n_sub:,} of {groups:,} groups ({len(sub):,} of {rows:,} rows), scaled by "
            f"{groups / n_sub:.2f}",
        }
        out.append(rec)
        _progress(rec)
    return out


def bench_xarray(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    import xarray as xr

    rng = np.random.default_rng(2)
    shape = cfg["xarray_shape"]
    values = rng.lognormal(1.0, 0.5, shape)
    da_np = xr.DataArray(values, dims=("channel", "time", "cell"))
    da_dask = da_np.chunk({"cell": cfg["xarray_chunk"]})
    out = []
    for backend, arr in (("numpy", da_np), ("dask", da_dask)):
        for stat in ("gmean", "summary"):
            pairing = ALONG[stat]

            def run(f: Callable[..., Any], arr: Any = arr, lazy: bool = backend == "dask") -> Any:
                res = f(arr, "cell")
                return res.compute() if lazy else res

            fns = {"ours": lambda p=pairing: run(p.ours)}
            fns.update({r.label: (lambda r=r: run(r.run)) for r in pairing.references})
            t, res = interleaved(fns, repeats)
            for ref in pairing.references:
                rec = {
                    "section": "xarray", "statistic": stat, "backend": backend, "values": int(np.prod(shape)),
                    "shape": list(shape), "chunk_cells": cfg["xarray_chunk"] if backend == "dask" else None,
                    "reference": ref.label, "ours_s": t["ours"], "ref_s": t[ref.label],
                    "ours_over_ref": t["ours"] / t[ref.label],
                    "agree": max_rel_diff(res["ours"], res[ref.label], ref.fields),
                }
                out.append(rec)
                _progress(rec)
    return out


def bench_fit(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    groups, per_group = cfg["fit"]
    df = censored_frame(groups, per_group)
    if not hasattr(df.logstats, "fit"):
        print("fit: skipped (df.logstats.fit does not exist yet)")
        return [{"section": "fit", "skipped": "df.logstats.fit does not exist"}]
    pairing = GROUPED["fit"]
    ref = pairing.reference("scipy per group")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scipy's optimiser may warn on a group; the timing still counts
        t, res = interleaved({"ours": lambda: pairing.ours(df, "g", "x", "dl"),
                              "scipy": lambda: ref.run(df, "g", "x", "dl")}, repeats, cfg["slow_call"])
    ours, theirs = res["ours"], res["scipy"]
    rec = {
        "section": "fit", "groups": groups, "per_group": per_group,
        "censored_fraction": float((df["x"] <= df["dl"]).mean()),
        "ours_s": t["ours"], "scipy_s": t["scipy"], "scipy_over_ours": t["scipy"] / t["ours"],
        "max_abs_diff_mu": float(np.max(np.abs(ours["mu"] - theirs["mu"]))),
        "max_abs_diff_sigma": float(np.max(np.abs(ours["sigma"] - theirs["sigma"]))),
        "all_converged": bool(np.all(ours["converged"])),
    }
    _progress(rec)
    return [rec]


def agreement(ours: Any, ref: Any, fields: tuple[str, ...], absolute: tuple[str, ...] = ()) -> dict[str, Any]:
    """How far two tables agree on their shared fields, rows matched by index.

    ``max_rel``: the largest relative difference over the fields not in ``absolute``; ``max_abs``: the
    largest absolute difference over those in ``absolute`` (values near zero, such as a Box-Cox power);
    ``nan_mismatch``: entries finite on one side only; ``compared``: rows compared.
    """
    rel = ab = 0.0
    mismatch = rows = 0
    for f in fields:
        a, b = ours[f].align(ref[f], join="inner")
        a, b = a.to_numpy(dtype=float), b.to_numpy(dtype=float)
        rows = max(rows, a.size)
        fa, fb = np.isfinite(a), np.isfinite(b)
        mismatch += int(np.sum(fa != fb))
        ok = fa & fb
        if not ok.any():
            continue
        d = np.abs(a[ok] - b[ok])
        if f in absolute:
            ab = max(ab, float(d.max()))
        else:
            rel = max(rel, float(np.max(d / np.maximum(np.abs(b[ok]), 1e-300))))
    return {"max_rel": rel, "max_abs": ab if absolute else None, "nan_mismatch": mismatch, "compared": rows}


def bench_methods(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    """Every declared statistic (benchmarks/cases.py) against what a user would otherwise write."""
    from benchmarks.cases import CASES, warm_up

    warm_up()
    gc.freeze()  # the modules just imported: see main()
    mode = "quick" if cfg["quick"] else "full"
    out = []
    wanted = cfg.get("cases")
    for case in CASES:
        if wanted and not any(w in case.name for w in wanted):
            continue
        t_case = time.perf_counter()
        size = case.size[mode]
        data = case.data(size)
        fns: dict[str, Callable[[], Any]] = {"ours": lambda c=case, d=data: c.ours(d)}
        fns.update({r.label: (lambda r=r, d=data: r.run(d)) for r in case.references})
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # scipy/statsmodels optimisers may warn; the timing still counts
            t, res = interleaved(fns, repeats, cfg["slow_call"])
        ours = case.as_fields(res["ours"])
        for ref in case.references:
            rec = {"section": "methods", "case": case.name, "statistic": case.statistic,
                   "groups": size[0], "per_group": size[1], "rows": int(len(data)) if data is not None else 0,
                   "ours": case.ours_text, "reference": ref.label, "reference_code": ref.source,
                   "ours_s": t["ours"], "ref_s": t[ref.label], "ref_over_ours": t[ref.label] / t["ours"],
                   "fields": list(ref.fields), "note": case.note, "wall_s": time.perf_counter() - t_case,
                   **agreement(ours, res[ref.label], ref.fields, case.absolute)}
            out.append(rec)
            _progress(rec)
    return out


STARTUP = {  # label -> argv after the interpreter
    "import logstats": ["-c", "import logstats"],
    "logstats --help": ["-m", "logstats", "--help"],
    "import pandas, xarray, scipy.stats": ["-c", "import pandas, xarray, scipy.stats"],
}
_HEAVY = ("dask", "matplotlib", "statsmodels", "pyarrow", "distributed")


def bench_startup(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    """Whole-process start-up times (median of ``startup_runs`` subprocesses, one untimed first run)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))

    def run(argv: list[str]) -> float:
        t0 = time.perf_counter()
        subprocess.run([sys.executable, *argv], cwd=ROOT, env=env, check=True, capture_output=True)
        return time.perf_counter() - t0

    if cfg["startup_warm"]:
        for argv in STARTUP.values():
            run(argv)  # untimed: the page cache
    times: dict[str, list[float]] = {k: [] for k in STARTUP}
    for _ in range(cfg["startup_runs"]):
        for label, argv in STARTUP.items():
            times[label].append(run(argv))
    base = statistics.median(times["import pandas, xarray, scipy.stats"])
    code = ("import sys, json; before = set(sys.modules); import logstats; "
            f"print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}} & set({list(_HEAVY)!r}))))")
    proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True,
                          check=True)
    heavy = json.loads(proc.stdout.strip().splitlines()[-1])
    out = []
    for label in STARTUP:
        med = statistics.median(times[label])
        rec = {"section": "startup", "command": label, "median_s": med, "runs": len(times[label]),
               "over_baseline": med / base,
               "imports_heavy": heavy if label == "import logstats" else None}
        out.append(rec)
        _progress(rec)
    return out


def bench_layouts(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    """Moment statistics in every memory layout and dtype (benchmarks/layouts.py, when present)."""
    try:
        from benchmarks.layouts import layout_cases
    except ImportError:
        print("layouts: skipped (benchmarks/layouts.py is not there)")
        return [{"section": "layouts", "skipped": "benchmarks/layouts.py not present"}]
    return layout_cases(cfg["quick"], repeats)


# --------------------------------------------------------------------------- memory (subprocesses)

def memory_child(rows: int, groups: int, impl: str) -> None:
    """(Subprocess) peak extra memory of one grouped call, printed as JSON."""
    import tracemalloc

    pairing = GROUPED["summary"]
    fn = pairing.ours if impl == "ours" else pairing.reference("idiom").run
    fn(grouped_frame(1_000, 10, seed=9), "g", "x")  # imports and first-call paths, on other data
    df = grouped_frame(rows, groups)
    gc.collect()
    before = _reset_peak()
    fn(df, "g", "x")
    rss_extra = None if before is None else _status("VmHWM") - before
    gc.collect()
    tracemalloc.start()
    fn(df, "g", "x")
    tm_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(json.dumps({"rss_extra": rss_extra, "tracemalloc_peak": tm_peak, "column_bytes": rows * 8}))


def _child(code: str, timeout: float = 3600) -> dict[str, Any]:
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, env=env,
                          timeout=timeout)
    if proc.returncode != 0:
        raise RuntimeError(f"benchmark subprocess failed:\n{proc.stderr[-3000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def bench_memory(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    out = []
    for rows, groups in cfg["memory"]:
        rec: dict[str, Any] = {"section": "memory", "rows": rows, "groups": groups,
                               "column_mb": rows * 8 / 2**20}
        for impl in ("ours", "idiom"):
            r = _child(f"from benchmarks.run import memory_child; memory_child({rows}, {groups}, {impl!r})")
            col = r["column_bytes"]
            rec[f"{impl}_rss_over_column"] = None if r["rss_extra"] is None else r["rss_extra"] / col
            rec[f"{impl}_tracemalloc_over_column"] = r["tracemalloc_peak"] / col
        out.append(rec)
        _progress(rec)
    return out


def out_of_core_child(gb: float, distributed: bool) -> None:
    """(Subprocess) summarise a lazily generated ``gb``-gigabyte stack along ``cell``; JSON figures."""
    import dask
    import dask.array as dsa
    import xarray as xr

    import logstats  # noqa: F401

    mu = np.array([0.5, 2.0, -1.0, 1.0])
    sigma = np.array([0.3, 0.8, 1.5, 1.0])
    chunk = 1_000_000  # cells per chunk: 4e6 values, 32 MB
    n_cells = int(gb * 1e9 / 8 / len(mu))

    def stack() -> Any:
        z = dsa.random.default_rng(7).standard_normal((len(mu), n_cells), chunks=(len(mu), chunk))
        return xr.DataArray(np.exp(mu[:, None] + sigma[:, None] * z), dims=("channel", "cell"))

    def check(res: Any) -> bool:
        n = res["n"].values
        se_mu, se_sd = sigma / np.sqrt(n), sigma / np.sqrt(2.0 * (n - 1))
        return bool(np.all(np.abs(np.log(res["gmean"].values) - mu) < 5 * se_mu)
                    and np.all(np.abs(np.log(res["gsd"].values) - sigma) < 5 * se_sd)
                    and np.all(n == n_cells))

    def sized(n: int) -> Any:  # a small run first: imports, thread pool
        z = dsa.random.default_rng(1).standard_normal((len(mu), n), chunks=(len(mu), chunk))
        return xr.DataArray(np.exp(z), dims=("channel", "cell"))

    arr = stack()
    rec: dict[str, Any] = {"nbytes": int(arr.size * 8), "chunk_mb": len(mu) * chunk * 8 / 2**20,
                           "n_chunks": int(np.ceil(n_cells / chunk))}
    if not distributed:
        with dask.config.set(scheduler="threads"):
            sized(2 * chunk).logstats.summary("cell").compute()
            before = _reset_peak()
            t, res = _time(lambda: arr.logstats.summary("cell").compute())
        rec.update(seconds=t, peak_rss=_status("VmHWM"), rss_growth=None if before is None else
                   _status("VmHWM") - before, matches_parameters=check(res), scheduler="threads (2)")
    else:
        from dask.distributed import Client, LocalCluster

        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                          memory_limit="4GiB") as cluster, Client(cluster) as client:
            sized(2 * chunk).logstats.summary("cell").compute()
            client.run(_reset_peak)
            before = _reset_peak()
            t, res = _time(lambda: arr.logstats.summary("cell").compute())
            workers = client.run(_status, "VmHWM")
        rec.update(seconds=t, worker_peak_rss=sorted(workers.values()), client_peak_rss=_status("VmHWM"),
                   client_rss_growth=None if before is None else _status("VmHWM") - before,
                   matches_parameters=check(res), scheduler="distributed LocalCluster, 2 worker processes")
    print(json.dumps(rec))


def bench_out_of_core(cfg: dict[str, Any], repeats: int) -> list[dict[str, Any]]:
    out = []
    modes = [False, True] if cfg["distributed"] else [False]
    for dist in modes:
        gb = cfg["out_of_core_gb"]
        r = _child(f"from benchmarks.run import out_of_core_child; out_of_core_child({gb}, {dist})")
        r["section"] = "out_of_core"
        out.append(r)
        _progress(r)
    return out


BENCHES = {"grouped": bench_grouped, "xarray": bench_xarray, "memory": bench_memory, "fit": bench_fit,
           "out_of_core": bench_out_of_core, "methods": bench_methods, "layouts": bench_layouts,
           "startup": bench_startup}


# --------------------------------------------------------------------------- reporting

def machine() -> dict[str, Any]:
    info: dict[str, Any] = {"python": platform.python_version(), "platform": platform.platform(),
                            "cores": os.cpu_count()}
    try:
        lscpu = subprocess.run(["lscpu"], capture_output=True, text=True, timeout=10).stdout
        info["cpu"] = next((ln.split(":", 1)[1].strip() for ln in lscpu.splitlines()
                            if ln.startswith("Model name")), platform.processor())
    except (OSError, subprocess.SubprocessError):
        info["cpu"] = platform.processor()
    try:
        with open("/proc/meminfo") as f:
            info["ram_gb"] = round(int(f.readline().split()[1]) / 2**20, 1)
    except OSError:
        info["ram_gb"] = None
    import importlib.metadata as md

    for pkg in ("logstats", "numpy", "scipy", "pandas", "xarray", "dask", "distributed"):
        try:
            info[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            info[pkg] = None
    return info


def _fmt_s(s: float) -> str:
    return f"{s * 1e3:.1f} ms" if s < 1 else f"{s:.2f} s"


def _num(n: int) -> str:
    return f"{n:.0e}".replace("e+0", "e") if n >= 1_000_000 else f"{n:,}"


def table(results: list[dict[str, Any]], info: dict[str, Any]) -> str:
    versions = ", ".join(f"{k} {info[k]}" for k in ("numpy", "scipy", "pandas", "xarray", "dask",
                                                     "distributed", "logstats"))
    lines = [f"Machine: {info.get('cpu')}, {info.get('cores')} cores, {info.get('ram_gb')} GB RAM; "
             f"Python {info['python']}; {versions}.", ""]
    g = [r for r in results if r["section"] == "grouped"]
    if g:
        lines += ["**Grouped** (`df.logstats.<stat>(by=\"g\", columns=\"x\")`; idiom: `np.log` + groupby "
                  "mean/std/count + `np.exp`; scipy: `groupby.agg([gmean, gstd])`)", "",
                  "| statistic | rows | groups | key | ours | idiom | ours / idiom | scipy per group | "
                  "scipy / ours | agree (idiom, scipy) |",
                  "|---|---:|---:|---|---:|---:|---:|---:|---:|---|"]
        notes = []
        for r in g:
            mark = " *" if r["scipy_note"] else ""
            if r["scipy_note"]:
                notes.append(f"\\* {r['scipy_note']}.")
            lines.append(f"| {r['statistic']} | {_num(r['rows'])} | {r['groups']:,} | {r['key']} | "
                         f"{_fmt_s(r['ours_s'])} | {_fmt_s(r['idiom_s'])} | {r['ours_over_idiom']:.2f} | "
                         f"{_fmt_s(r['scipy_s'])}{mark} | {r['scipy_over_ours']:,.0f}x | "
                         f"{r['agree_idiom']:.0e}, {r['agree_scipy']:.0e} |")
        lines += [""] + notes + ([""] if notes else [])
    x = [r for r in results if r["section"] == "xarray"]
    if x:
        chunk = next((r["chunk_cells"] for r in x if r["chunk_cells"]), None)
        lines += [f"**xarray** along `cell`, {x[0]['values']:.0e} values, shape {tuple(x[0]['shape'])}; dask "
                  f"chunks of {chunk or 0:,} cells, threaded scheduler",
                  "",
                  "| statistic | backend | ours | reference | reference time | ours / reference | agree |",
                  "|---|---|---:|---|---:|---:|---|"]
        for r in x:
            lines.append(f"| {r['statistic']} | {r['backend']} | {_fmt_s(r['ours_s'])} | {r['reference']} | "
                         f"{_fmt_s(r['ref_s'])} | {r['ours_over_ref']:.2f} | {r['agree']:.0e} |")
        lines.append("")
    m = [r for r in results if r["section"] == "memory"]
    if m:
        lines += ["**Peak extra memory** of the grouped summary, relative to the value column (fresh "
                  "subprocess per figure; RSS: growth of the peak-RSS mark; tracemalloc: peak traced)", "",
                  "| rows | groups | column | ours RSS | ours tracemalloc | idiom RSS | idiom tracemalloc |",
                  "|---:|---:|---:|---:|---:|---:|---:|"]
        for r in m:
            def f(v: Any) -> str:
                return "n/a" if v is None else f"{v:.2f}x"
            lines.append(f"| {_num(r['rows'])} | {r['groups']:,} | {r['column_mb']:.0f} MB | "
                         f"{f(r['ours_rss_over_column'])} | {f(r['ours_tracemalloc_over_column'])} | "
                         f"{f(r['idiom_rss_over_column'])} | {f(r['idiom_tracemalloc_over_column'])} |")
        lines.append("")
    fit = [r for r in results if r["section"] == "fit"]
    if fit:
        r = fit[0]
        if "skipped" in r:
            lines += [f"**Censored fit**: skipped ({r['skipped']}).", ""]
        else:
            lines += ["**Censored fit** (`df.logstats.fit(by=\"g\", detection_limit=\"dl\")`), "
                      f"{r['groups']} groups x {r['per_group']} values, {100 * r['censored_fraction']:.0f} % "
                      "censored, against scipy per group (`CensoredData` + `lognorm.fit(floc=0)`)", "",
                      "| ours | scipy per group | scipy / ours | max abs diff mu, sigma | all converged |",
                      "|---:|---:|---:|---|---|",
                      f"| {_fmt_s(r['ours_s'])} | {_fmt_s(r['scipy_s'])} | {r['scipy_over_ours']:,.0f}x | "
                      f"{r['max_abs_diff_mu']:.0e}, {r['max_abs_diff_sigma']:.0e} | "
                      f"{r['all_converged']} |", ""]
    o = [r for r in results if r["section"] == "out_of_core"]
    if o:
        lines += ["**Larger than memory**: `summary(\"cell\")` of a lazily generated log-normal stack", "",
                  "| scheduler | data | chunk | time | peak RSS | matches generating parameters |",
                  "|---|---:|---:|---:|---|---|"]
        for r in o:
            if "worker_peak_rss" in r:
                peak = ("workers " + ", ".join(f"{v / 2**20:.0f}" for v in r["worker_peak_rss"])
                        + f" MiB; client {r['client_peak_rss'] / 2**20:.0f} MiB")
            else:
                peak = f"{r['peak_rss'] / 2**20:.0f} MiB (growth {(r['rss_growth'] or 0) / 2**20:.0f} MiB)"
            lines.append(f"| {r['scheduler']} | {r['nbytes'] / 1e9:.1f} GB | {r['chunk_mb']:.0f} MB | "
                         f"{_fmt_s(r['seconds'])} | {peak} | {r['matches_parameters']} |")
        lines.append("")
    ms = [r for r in results if r["section"] == "methods"]
    if ms:
        lines += ["**Every method** (`df.logstats.<method>(by=\"g\", columns=\"x\", ...)` on invented "
                  "log-normal groups of varying size; ratio = reference time / ours, above 1 means logstats "
                  "is faster; "
                  "agree: largest relative difference of the fields both compute, absolute where marked)", "",
                  "| case | groups x values | reference | ours | reference time | reference / ours | agree | "
                  "fields |",
                  "|---|---|---|---:|---:|---:|---|---|"]
        for r in ms:
            agree = f"{r['max_rel']:.0e}"
            if r["max_abs"] is not None:
                agree += f"; abs {r['max_abs']:.0e}"
            if r["nan_mismatch"]:
                agree += f"; {r['nan_mismatch']} NaN on one side"
            size = f"{r['groups']:,} x ~{r['per_group']}" if r["per_group"] else f"{r['groups']:,}"
            lines.append(f"| {r['case']} | {size} | {r['reference']}: {r['reference_code']} | "
                         f"{_fmt_s(r['ours_s'])} | {_fmt_s(r['ref_s'])} | {r['ref_over_ours']:,.2f} | "
                         f"{agree} | "
                         f"{', '.join(r['fields'])} |")
        notes = sorted({f"{r['case']}: {r['note']}" for r in ms if r["note"]})
        lines += [""] + [f"* {n}." for n in notes] + ([""] if notes else [])
    lay = [r for r in results if r["section"] == "layouts" and "skipped" not in r]
    if lay:
        from benchmarks.layouts import layout_table

        lines += [layout_table(lay), ""]
    st = [r for r in results if r["section"] == "startup"]
    if st:
        lines += [f"**Start-up**: whole processes, median of {st[0]['runs']} runs each (interleaved)",
                  "", "| command | median | / `import pandas, xarray, scipy.stats` |", "|---|---:|---:|"]
        for r in st:
            lines.append(f"| `{r['command']}` | {_fmt_s(r['median_s'])} | {r['over_baseline']:.2f} |")
        heavy = next(r["imports_heavy"] for r in st if r["imports_heavy"] is not None)
        lines += ["", "`import logstats` imports " + (", ".join(heavy) if heavy else "none") + " of "
                  + ", ".join(_HEAVY) + " (dask and matplotlib must not be among them; pandas itself "
                  "imports pyarrow when it is installed).", ""]
    return "\n".join(lines)


def _progress(rec: dict[str, Any]) -> None:
    brief = {k: (f"{v:.4g}" if isinstance(v, float) else v) for k, v in rec.items()
             if not isinstance(v, (list, dict)) and k not in ("section", "ours", "reference_code", "note")}
    print("  " + ", ".join(f"{k}={v}" for k, v in brief.items()), flush=True)


def update_readme(text: str, quick: bool, only: list[str] | None = None) -> None:
    """Rewrite the results block; with ``only`` (some sections), keep the rest of the block and put
    this run's tables in a sub-block of their own (replacing an earlier one for the same sections)."""
    start, end = "<!-- results:start -->", "<!-- results:end -->"
    readme = README.read_text()
    if start not in readme or end not in readme:
        raise SystemExit(f"{README} has no {start} ... {end} block to update")
    head, rest = readme.split(start, 1)
    block, tail = rest.split(end, 1)
    stamp = _dt.date.today().isoformat() + (" (--quick)" if quick else "")
    if not only or set(only) == set(SECTIONS):
        README.write_text(f"{head}{start}\nLatest run: {stamp}.\n\n{text}\n{end}{tail}")
        return
    key = " ".join(s for s in SECTIONS if s in only)
    sub_start, sub_end = f"<!-- sections:{key} -->", f"<!-- /sections:{key} -->"
    if sub_start in block and sub_end in block:
        before, after = block.split(sub_start, 1)
        block = before + after.split(sub_end, 1)[1]
    sub = f"{sub_start}\nSections {', '.join(key.split())}: run {stamp}.\n\n{text}\n{sub_end}\n"
    README.write_text(f"{head}{start}{block.rstrip()}\n\n{sub}{end}{tail}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="small sizes: a smoke run in well under a minute")
    ap.add_argument("--only", nargs="+", choices=SECTIONS, default=list(SECTIONS), help="sections to run")
    ap.add_argument("--cases", nargs="+", default=None,
                    help="methods section: only the cases whose name contains one of these words")
    ap.add_argument("--repeats", type=int, default=None, help="timed calls per implementation (median)")
    ap.add_argument("--output", type=Path, default=None, help="JSON file (default benchmarks/results/)")
    ap.add_argument("--readme", action="store_true", help="rewrite the results block of benchmarks/README.md")
    args = ap.parse_args(argv)
    cfg = dict(QUICK if args.quick else FULL, quick=args.quick, cases=args.cases)
    repeats = args.repeats or (3 if args.quick else 5)
    info = machine()
    t0 = time.perf_counter()
    results: list[dict[str, Any]] = []
    for name in SECTIONS:
        if name in args.only:
            print(f"[{name}]", flush=True)
            t_section = time.perf_counter()
            gc.collect()
            gc.freeze()  # what is alive now is never garbage: keeps the gc.collect() before each call short
            results += BENCHES[name](cfg, repeats)
            print(f"[{name}: {time.perf_counter() - t_section:.1f} s]", flush=True)
    elapsed = time.perf_counter() - t0
    text = table(results, info)
    print()
    print(text)
    print(f"({elapsed:.0f} s)")
    payload = {"when": _dt.datetime.now().isoformat(timespec="seconds"), "quick": args.quick,
               "repeats": repeats, "elapsed_s": elapsed, "machine": info, "results": results}
    RESULTS.mkdir(exist_ok=True)
    paths = [args.output] if args.output else [
        RESULTS / ("latest-quick.json" if args.quick else "latest.json"),
        RESULTS / f"{_dt.datetime.now():%Y%m%d-%H%M%S}{'-quick' if args.quick else ''}.json"]
    for p in paths:
        p.write_text(json.dumps(payload, indent=1, default=str))
    print("wrote " + ", ".join(str(p) for p in paths))
    if args.readme:
        update_readme(text, args.quick, args.only)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
