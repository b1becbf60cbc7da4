"""The ``logstats`` command line: log-scale statistics on CSV, TSV and Parquet tables.

Subcommands ``summary``, ``compare``, ``fit``, ``check``, ``report`` and ``demo``; ``logstats
SUBCOMMAND --help`` shows each one's options with an example. Tables go to the terminal, aligned,
or with ``--output FILE`` to a ``.csv``, ``.tsv`` or ``.parquet`` file; figures with ``--plot FILE``.

Exit codes: 0 success, 1 a problem with the data (the message names the file, the column and what
to do), 2 a usage error (unknown option, missing argument, unsupported file type).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import re
import shutil
import sys
import textwrap
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

import logstats
from logstats.format import format_table

__all__ = ["DataError", "main", "read_table"]

EXIT_OK, EXIT_DATA, EXIT_USAGE = 0, 1, 2

_READ_SUFFIXES = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".parquet": "parquet", ".pq": "parquet"}
_COMPRESSION = (".gz", ".bz2", ".xz", ".zst", ".zip")
_TABLE_OUT = (".csv", ".tsv", ".parquet")
_PLOT_OUT = (".png", ".svg", ".pdf")

#: How the library's keyword hints read on the command line.
_HINTS: tuple[tuple[str, str], ...] = (
    (r"nonpositive='drop'", "--nonpositive drop"),
    (r"nonpositive='nan'", "--nonpositive nan"),
    (r"nonpositive='raise'", "--nonpositive raise"),
    (r"detection_limit= \(fit\)", "--detection-limit (logstats fit)"),
    (r"\bdetection_limit=", "--detection-limit "),
    (r"\bcolumns=", "--value "),
    (r"\breplicate=", "--replicate "),
    (r"\breference=", "--reference "),
    (r"\bconfidence_level=", "--confidence-level "),
    (r"\bequivalence=", "--equivalence "),
    (r"(?<![\w-])by=", "--by "),
)


class DataError(Exception):
    """A problem with the input data; printed as ``logstats: error: <file>: <message>``, exit 1."""


class UsageError(Exception):
    """A problem with the arguments; printed with the usage line, exit 2."""


def _cli_hint(message: str) -> str:
    for pattern, repl in _HINTS:
        message = re.sub(pattern, repl, message)
    return message.replace("  ", " ")


def _message(exc: BaseException) -> str:
    if isinstance(exc, KeyError) and exc.args:
        return str(exc.args[0])
    return str(exc)


# --------------------------------------------------------------------------------------------------
# reading and checking tables


def _table_format(path: str, fmt: str | None) -> str:
    if fmt is not None:
        return fmt
    if path == "-":
        return "csv"
    p = Path(path)
    suffixes = [s.lower() for s in p.suffixes]
    while suffixes and suffixes[-1] in _COMPRESSION:
        suffixes.pop()
    if suffixes and suffixes[-1] in _READ_SUFFIXES:
        return _READ_SUFFIXES[suffixes[-1]]
    raise UsageError(
        f"cannot tell the format of {path!r} from its extension; name it .csv, .tsv or .parquet, "
        "or pass --format csv|tsv|parquet"
    )


def read_table(path: str, *, fmt: str | None = None) -> pd.DataFrame:
    """Read a CSV, TSV or Parquet table, turning every failure into a :class:`DataError`.

    ``path`` ``"-"`` reads CSV from standard input. The format comes from the extension (``.csv``,
    ``.tsv``/``.tab``, ``.parquet``/``.pq``, optionally compressed, e.g. ``.csv.gz``) or ``fmt``.
    """
    kind = _table_format(path, fmt)
    if path != "-":
        p = Path(path)
        if not p.exists():
            raise DataError(f"{path}: file not found; check the path (relative to {Path.cwd()})")
        if p.is_dir():
            raise DataError(f"{path}: is a folder, not a table file")
    try:
        if kind == "parquet":
            try:
                df = pd.read_parquet(path)
            except ImportError as exc:
                raise DataError(
                    f"{path}: reading Parquet needs pyarrow, which is not installed; install it with "
                    "pip install 'logstats[parquet]' (or convert the table to CSV)"
                ) from exc
        else:
            source: Any = sys.stdin if path == "-" else path
            df = pd.read_csv(source, sep="\t" if kind == "tsv" else ",")
    except DataError:
        raise
    except pd.errors.EmptyDataError as exc:
        raise DataError(f"{path}: the file is empty; a table needs a header line naming its columns "
                        "and one line per row") from exc
    except pd.errors.ParserError as exc:
        detail = str(exc).strip().replace("Error tokenizing data. C error: ", "")
        other = "tab" if kind == "csv" else "comma"
        raise DataError(
            f"{path}: malformed {kind.upper()} table ({detail}); check that every line has the same "
            f"number of fields and that text containing the delimiter is quoted, or pass "
            f"--format {'tsv' if other == 'tab' else 'csv'} if the file is {other}-separated"
        ) from exc
    except UnicodeDecodeError as exc:
        raise DataError(f"{path}: is not UTF-8 text ({exc.reason}); save it as UTF-8 CSV") from exc
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot be read as {kind.upper()}: {exc}") from exc
    if len(df.columns) == 0:
        raise DataError(f"{path}: the table has no columns")
    if len(df) == 0:
        raise DataError(f"{path}: the table has a header ({', '.join(map(str, df.columns))}) but no rows")
    return df


def _split_values(items: Sequence[str] | None) -> list[str]:
    out: list[str] = []
    for item in items or []:
        out.extend(v.strip() for v in item.split(",") if v.strip())
    return out


def _check_column(df: pd.DataFrame, path: str, name: str, option: str) -> None:
    if name in df.columns:
        return
    cols = ", ".join(repr(str(c)) for c in df.columns)
    near = [str(c) for c in df.columns if str(c).lower() == name.lower()]
    hint = f"; did you mean {near[0]!r}? (names are case-sensitive)" if near else ""
    raise DataError(
        f"{path}: column {name!r} (from {option}) is not in the table{hint}; its columns are {cols}. "
        f"Pass {option} with one of them"
    )


def _check_numeric(df: pd.DataFrame, path: str, name: str, option: str = "--value") -> None:
    s = df[name]
    if pd.api.types.is_bool_dtype(s.dtype):
        raise DataError(f"{path}: column {name!r} holds true/false values, not measurements; "
                        f"choose another {option}")
    if pd.api.types.is_numeric_dtype(s.dtype):
        return
    parsed = pd.to_numeric(s, errors="coerce")
    bad = parsed.isna() & s.notna()
    if not bad.any():
        return
    pos = int(bad.to_numpy().argmax())
    shown = s.iloc[pos]
    raise DataError(
        f"{path}: column {name!r} is not numeric: {int(bad.sum())} entr{'y' if bad.sum() == 1 else 'ies'} "
        f"cannot be read as numbers, the first {str(shown)!r} in data row {pos + 1} (line {pos + 2} of "
        f"a CSV with a header). Fix or blank such entries (empty cells count as missing), or choose "
        f"another {option}"
    )


def _order_levels(df: pd.DataFrame, by: str, reference: Any) -> tuple[pd.DataFrame, Any]:
    """Put the reference level first (a categorical key) and match it to the column's type."""
    from logstats.report import reference_first

    try:
        return reference_first(df, by, reference)
    except ValueError as exc:
        raise DataError(f"{exc}. Pass --reference with one of them") from None


def _detection_limit(text: str | None, df: pd.DataFrame, path: str) -> Any:
    if text is None:
        return None
    try:
        value = float(text)
    except ValueError:
        _check_column(df, path, text, "--detection-limit")
        _check_numeric(df, path, text, "--detection-limit")
        return text
    if not value > 0:
        raise DataError(f"{path}: --detection-limit {text} must be a positive number or a column name")
    return value


# --------------------------------------------------------------------------------------------------
# output


def _wants_ascii(args: argparse.Namespace) -> bool:
    if getattr(args, "ascii", False):
        return True
    enc = getattr(sys.stdout, "encoding", None) or "ascii"
    try:
        "×÷≤".encode(enc)
    except (LookupError, UnicodeEncodeError):
        return True
    return False


def _width() -> int:
    return shutil.get_terminal_size((100, 24)).columns


def _check_suffix(path: str | None, allowed: Sequence[str], option: str) -> None:
    if path is None:
        return
    if Path(path).suffix.lower() not in allowed:
        raise UsageError(f"{option} {path!r}: the file name must end in {', '.join(allowed)}")


def _emit(table: pd.DataFrame, args: argparse.Namespace, *, columns: Sequence[str] | None = None,
          heading: str | None = None) -> None:
    out = getattr(args, "output", None)
    if out is not None:
        suffix = Path(out).suffix.lower()
        if suffix == ".parquet":
            try:
                table.to_parquet(out)
            except ImportError as exc:
                raise DataError(f"{out}: writing Parquet needs pyarrow; install it with "
                                "pip install 'logstats[parquet]' or write .csv") from exc
        else:
            table.to_csv(out, sep="\t" if suffix == ".tsv" else ",")
        print(f"logstats: wrote {out} ({len(table)} rows)", file=sys.stderr)
        return
    cols = [c for c in columns if c in table.columns] if columns is not None else None
    if heading:
        print(heading)
    print(format_table(table, columns=cols, digits=args.digits, ascii=_wants_ascii(args), width=_width()))


def _plot_paths(path: str, values: Sequence[str]) -> list[tuple[str, Path]]:
    p = Path(path)
    if len(values) == 1:
        return [(values[0], p)]
    return [(v, p.with_name(f"{p.stem}-{re.sub(r'[^A-Za-z0-9_.-]+', '_', v)}{p.suffix}")) for v in values]


def _save_plots(args: argparse.Namespace, values: Sequence[str], draw: Any) -> None:
    if args.plot is None:
        return
    try:
        import matplotlib
    except ImportError as exc:
        raise DataError(f"{args.plot}: figures need matplotlib; install it with "
                        "pip install 'logstats[plot]'") from exc
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np

    for v, path in _plot_paths(args.plot, values):
        axes = draw(v)
        fig = np.ravel(axes)[0].figure
        try:
            fig.savefig(path, dpi=args.dpi)
        finally:
            plt.close(fig)
        print(f"logstats: wrote {path}", file=sys.stderr)


# --------------------------------------------------------------------------------------------------
# subcommands


def _load(args: argparse.Namespace) -> tuple[pd.DataFrame, list[str]]:
    df = read_table(args.table, fmt=args.format)
    values = _split_values(args.value)
    if not values:
        raise UsageError("--value needs at least one column name")
    for v in values:
        _check_column(df, args.table, v, "--value")
        _check_numeric(df, args.table, v)
    for opt in ("by", "replicate"):
        name = getattr(args, opt, None)
        if name is not None:
            _check_column(df, args.table, name, f"--{opt}")
            if name in values:
                raise UsageError(f"--{opt} {name!r} is also a --value column")
    return df, values


def _one_or_many(values: list[str]) -> str | list[str]:
    return values[0] if len(values) == 1 else values


def _cmd_summary(args: argparse.Namespace) -> int:
    df, values = _load(args)
    res = df.logstats.summary(by=args.by, columns=_one_or_many(values),
                              confidence_level=args.confidence_level, nonpositive=args.nonpositive,
                              linear=args.linear)
    if isinstance(res, pd.Series):
        res = res.to_frame().T
        res.index = pd.Index(values, name="variable")
    cols = ["n", "n_missing", "n_nonpositive", "gmean", "gsd", "ci_low", "ci_high"]
    if args.linear:
        cols += ["median", "mean", "sd"]
    _emit(res, args, columns=cols if not args.all_columns else None)
    _save_plots(args, values, lambda v: _plot().hist(df, v, by=args.by, layout="panels",
                                                      nonpositive=args.nonpositive, units=args.units,
                                                      normal=True))
    return EXIT_OK


def _plot() -> Any:
    from logstats import plot

    return plot


def _parse_equivalence(text: str | None) -> tuple[float, float] | None:
    if text is None:
        return None
    try:
        low, high = (float(x) for x in text.split(","))
    except ValueError as exc:
        raise UsageError(f"--equivalence {text!r}: give two ratios LOW,HIGH, e.g. 0.8,1.25") from exc
    return low, high


def _cmd_compare(args: argparse.Namespace) -> int:
    df, values = _load(args)
    try:
        df, ref = _order_levels(df, args.by, args.reference)
    except DataError as exc:
        raise DataError(f"{args.table}: {exc}") from None
    kw: dict[str, Any] = dict(columns=_one_or_many(values), replicate=args.replicate, paired=args.paired,
                              equal_var=args.equal_var, confidence_level=args.confidence_level,
                              adjust=None if args.adjust == "none" else args.adjust,
                              nonpositive=args.nonpositive)
    eq = _parse_equivalence(args.equivalence)
    if eq is not None:
        kw["equivalence"] = eq
    res = df.logstats.fold_change(args.by, ref, **kw)
    if not args.keep_reference:
        idx = res.index
        res = res[idx.get_level_values(args.by) != ref] if args.by in (idx.names or []) else res
    cols = ["ratio", "ci_low", "ci_high", "p_value", "p_adjusted", "n", "n_reference"]
    if args.replicate is not None:
        cols += ["n_cells", "n_cells_reference"]
    if eq is not None:
        cols += ["equivalence_p", "equivalent"]
    _emit(res, args, columns=cols if not args.all_columns else None)
    _save_plots(args, values, lambda v: _plot().groups(df, v, by=args.by, replicate=args.replicate,
                                                        nonpositive=args.nonpositive, units=args.units,
                                                        confidence_level=args.confidence_level))
    return EXIT_OK


def _cmd_fit(args: argparse.Namespace) -> int:
    df, values = _load(args)
    dl = _detection_limit(args.detection_limit, df, args.table)
    kw: dict[str, Any] = {"columns": _one_or_many(values)}
    if dl is not None:
        kw["detection_limit"] = dl
    else:
        kw["nonpositive"] = args.nonpositive
    res = df.logstats.fit(by=args.by, **kw)
    if isinstance(res, pd.Series):
        res = res.to_frame().T
        res.index = pd.Index(values, name="variable")
    _emit(res, args, columns=["mu", "sigma", "n", "n_censored", "loglik", "converged"]
          if not args.all_columns else None)
    _save_plots(args, values, lambda v: _plot().hist(df, v, by=args.by, layout="panels",
                                                      detection_limit=dl, nonpositive=args.nonpositive,
                                                      units=args.units))
    return EXIT_OK


def _cmd_check(args: argparse.Namespace) -> int:
    df, values = _load(args)
    res = df.logstats.scale_check(by=args.by, columns=_one_or_many(values), nonpositive=args.nonpositive)
    if isinstance(res, pd.Series):
        res = res.to_frame().T
        res.index = pd.Index(values, name="variable")
    _emit(res, args, columns=["aic_normal", "aic_lognormal", "delta_aic", "preferred", "normality_test",
                              "normality_p_linear", "normality_p_log", "mean_ratio", "expected_ratio"]
          if not args.all_columns else None)
    _save_plots(args, values, lambda v: _plot().qq(df, v, by=args.by, nonpositive=args.nonpositive,
                                                    units=args.units))
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    df, values = _load(args)
    ref = None
    if args.reference is not None:
        if args.by is None:
            raise UsageError("--reference needs --by (the column whose levels are compared)")
        try:
            df, ref = _order_levels(df, args.by, args.reference)
        except DataError as exc:
            raise DataError(f"{args.table}: {exc}") from None
    if args.replicate is not None and args.by is None:
        raise UsageError("--replicate needs --by")
    dl = _detection_limit(args.detection_limit, df, args.table)
    from logstats.report import build_report

    build_report(df, value=_one_or_many(values), by=args.by, replicate=args.replicate, reference=ref,
                 path=args.output, detection_limit=dl, nonpositive=args.nonpositive,
                 confidence_level=args.confidence_level, units=args.units, title=args.title,
                 source=args.table, adjust=None if args.adjust == "none" else args.adjust)
    print(f"logstats: wrote {args.output}", file=sys.stderr)
    return EXIT_OK


def _cmd_demo(args: argparse.Namespace) -> int:
    from logstats.demo import run_demo

    run_demo(args.out, seed=args.seed, write_files=not args.no_files, ascii=_wants_ascii(args),
             width=_width())
    return EXIT_OK


# --------------------------------------------------------------------------------------------------
# the parser


def _level(text: str) -> float:
    try:
        v = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from exc
    if not 0.0 < v < 1.0:
        raise argparse.ArgumentTypeError(f"{text} must lie strictly between 0 and 1, e.g. 0.95")
    return v


def _dpi(text: str) -> int:
    try:
        v = int(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from exc
    if not 20 <= v <= 1200:
        raise argparse.ArgumentTypeError("--dpi must be between 20 and 1200")
    return v


def _digits(text: str) -> int:
    try:
        v = int(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from exc
    if not 1 <= v <= 15:
        raise argparse.ArgumentTypeError("--digits must be between 1 and 15")
    return v


_EXAMPLES = {
    "summary": "logstats summary cells.csv --value reporter --by treatment --nonpositive drop",
    "compare": ("logstats compare cells.csv --value reporter --by treatment --reference vehicle "
                "--replicate well --nonpositive drop --plot groups.png"),
    "fit": "logstats fit cells.csv --value marker --by treatment --detection-limit marker_dl",
    "check": "logstats check cells.csv --value reporter --by treatment --nonpositive drop --plot qq.png",
    "report": ("logstats report cells.csv --value reporter --by treatment --replicate well "
               "--reference vehicle --nonpositive drop -o report.html"),
    "demo": "logstats demo --out logstats-demo --seed 7",
}


def _wrap(text: str) -> str:
    return textwrap.fill(text, 88)


def _epilog(name: str) -> str:
    return f"example:\n  {_EXAMPLES[name]}\n\nexit codes: 0 success, 1 data error, 2 usage error"


def _add_input(p: argparse.ArgumentParser, *, by_required: bool = False) -> None:
    p.add_argument("table", help="input table: .csv, .tsv or .parquet (optionally .gz); '-' reads CSV "
                                 "from standard input")
    p.add_argument("--format", choices=("csv", "tsv", "parquet"), default=None,
                   help="table format when the extension does not tell")
    p.add_argument("--value", action="append", required=True, metavar="COLUMN",
                   help="value column(s): repeat the option or give a comma list")
    p.add_argument("--by", required=by_required, metavar="COLUMN",
                   help="group column (e.g. treatment)" + ("" if by_required else "; optional"))
    p.add_argument("--nonpositive", choices=("raise", "drop", "nan"), default="raise",
                   help="zeros and negatives: refuse them (default), drop them (counted in "
                        "n_nonpositive) or make the group's result NaN")
    p.add_argument("--units", default=None, help="units of the values, for figure axes")


def _add_output(p: argparse.ArgumentParser, *, plot_help: str) -> None:
    p.add_argument("--output", "-o", metavar="FILE", default=None,
                   help="write the table to FILE (.csv, .tsv or .parquet) instead of printing it")
    p.add_argument("--plot", metavar="FILE", default=None,
                   help=f"also draw {plot_help} to FILE (.png, .svg or .pdf); with several values one "
                        "file per value")
    p.add_argument("--dpi", type=_dpi, default=120, help="resolution of PNG figures (default 120)")
    p.add_argument("--digits", type=_digits, default=3, help="significant digits shown (default 3)")
    p.add_argument("--ascii", action="store_true", help="plain ASCII output ('x/' for '×/÷')")
    p.add_argument("--all-columns", action="store_true", help="show every result column")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``logstats`` command."""
    fmt = argparse.RawDescriptionHelpFormatter
    parser = argparse.ArgumentParser(
        prog="logstats",
        description=_wrap("Log-scale statistics for right-skewed, log-normal-like measurements: geometric "
                    "means ×/÷ spreads, fold changes with the replicate as the unit, censored fits "
                    "and the linear-vs-log scale check, on CSV, TSV and Parquet tables."),
        epilog="examples:\n  logstats demo\n  " + _EXAMPLES["summary"] + "\n  " + _EXAMPLES["compare"]
               + "\n\nrun 'logstats SUBCOMMAND --help' for the options of each.",
        formatter_class=fmt,
    )
    parser.add_argument("--version", action="version", version=f"logstats {logstats.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND", required=True)

    p = sub.add_parser("summary", help="geometric mean ×/÷ GSD and its confidence interval per group",
                       description=_wrap("Geometric mean, geometric SD and the t confidence interval of the "
                                   "geometric mean, per group of --by."),
                       epilog=_epilog("summary"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--confidence-level", type=_level, default=0.95, help="default 0.95")
    p.add_argument("--linear", action="store_true", help="add the linear-scale median, mean and SD")
    _add_output(p, plot_help="log-binned histograms with the fitted densities")
    p.set_defaults(func=_cmd_summary, subparser=p)

    p = sub.add_parser("compare", help="fold changes of every group against a reference group",
                       description=_wrap(
                           "Ratio of geometric means of every level of --by against --reference, with "
                           "confidence interval and p-value (Welch's t on the logs). With --replicate "
                           "the replicate (well, animal, day), not the cell, is the unit."),
                       epilog=_epilog("compare"), formatter_class=fmt)
    _add_input(p, by_required=True)
    p.add_argument("--reference", required=True, metavar="LEVEL", help="the level compared against")
    p.add_argument("--replicate", metavar="COLUMN", default=None,
                   help="replicate column: its geometric means are the units")
    p.add_argument("--paired", action="store_true",
                   help="pair replicates sharing a label with the reference's (needs --replicate)")
    p.add_argument("--equal-var", action="store_true", help="Student's pooled t instead of Welch's")
    p.add_argument("--adjust", choices=("holm", "bh", "none"), default="holm",
                   help="multiplicity adjustment (default holm)")
    p.add_argument("--equivalence", metavar="LOW,HIGH", default=None,
                   help="equivalence limits on the ratio, e.g. 0.8,1.25 (two one-sided tests)")
    p.add_argument("--confidence-level", type=_level, default=0.95, help="default 0.95")
    p.add_argument("--keep-reference", action="store_true", help="keep the reference's own row")
    _add_output(p, plot_help="every value with replicate means and geometric mean ×/÷ CI per group")
    p.set_defaults(func=_cmd_compare, subparser=p)

    p = sub.add_parser("fit", help="log-normal maximum-likelihood fit, left-censored at a detection limit",
                       description=_wrap(
                           "Maximum-likelihood mu and sigma (ddof=0) of a log-normal per group; with "
                           "--detection-limit values at or below it are non-detects."),
                       epilog=_epilog("fit"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--detection-limit", metavar="NUMBER|COLUMN", default=None,
                   help="detection limit: a number or the name of a column holding each row's limit")
    _add_output(p, plot_help="histograms with the (censored) fit")
    p.set_defaults(func=_cmd_fit, subparser=p)

    p = sub.add_parser("check", help="linear or log scale? AIC, normality p-values and mean ratios",
                       description=_wrap("Compares the normal and log-normal fits to the same values (AIC on "
                                   "the original scale), normality p-values on both scales, and the "
                                   "arithmetic/geometric mean ratio with the one log-normality predicts."),
                       epilog=_epilog("check"), formatter_class=fmt)
    _add_input(p)
    _add_output(p, plot_help="normal probability plots of the logs and the raw values")
    p.set_defaults(func=_cmd_check, subparser=p)

    p = sub.add_parser("report", help="one self-contained HTML report of the whole analysis",
                       description=_wrap("Overview, scale check, summary, comparisons, figures, methods and "
                                   "cautions in one HTML file with the figures embedded (no network)."),
                       epilog=_epilog("report"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--replicate", metavar="COLUMN", default=None)
    p.add_argument("--reference", metavar="LEVEL", default=None)
    p.add_argument("--detection-limit", metavar="NUMBER|COLUMN", default=None)
    p.add_argument("--confidence-level", type=_level, default=0.95)
    p.add_argument("--adjust", choices=("holm", "bh", "none"), default="holm")
    p.add_argument("--title", default=None)
    p.add_argument("--output", "-o", metavar="FILE.html", default="report.html",
                   help="where to write the report (default report.html)")
    p.set_defaults(func=_cmd_report, subparser=p)

    p = sub.add_parser("demo", help="run the whole analysis on an invented example data set",
                       description=_wrap(
                           "Generates an invented reporter-fluorescence screen (4 treatments x 6 wells x "
                           "~1,500 cells), prints the key tables and writes the table, figures, report "
                           "and imaging stack."),
                       epilog=_epilog("demo"), formatter_class=fmt)
    p.add_argument("--out", default="logstats-demo", metavar="DIR",
                   help="output folder (default ./logstats-demo)")
    p.add_argument("--seed", type=int, default=2024, help="random seed (default 2024)")
    p.add_argument("--no-files", action="store_true", help="print the tables only, write nothing")
    p.add_argument("--ascii", action="store_true", help="plain ASCII output")
    p.set_defaults(func=_cmd_demo, subparser=p)
    return parser


def _usage_checks(args: argparse.Namespace) -> None:
    if args.command in ("summary", "compare", "fit", "check"):
        _check_suffix(args.output, _TABLE_OUT, "--output")
        _check_suffix(args.plot, _PLOT_OUT, "--plot")
    if args.command == "report":
        _check_suffix(args.output, (".html", ".htm"), "--output")
    if args.command == "compare" and args.paired and args.replicate is None:
        raise UsageError("--paired needs --replicate (the label that pairs replicates)")
    if args.command == "compare":
        _parse_equivalence(args.equivalence)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``logstats`` command line; returns the exit code (0 ok, 1 data error, 2 usage error)."""
    parser = build_parser()
    try:
        args, extra = parser.parse_known_args(argv)
        sub = getattr(args, "subparser", parser)
        if extra:  # reported by the subcommand, so its usage line is the one shown
            sub.error(f"unrecognized arguments: {' '.join(extra)}")
    except SystemExit as exc:  # --help, --version, or an argparse usage error
        return int(exc.code) if isinstance(exc.code, int) else (0 if exc.code is None else EXIT_USAGE)
    where = getattr(args, "table", None) or getattr(args, "out", None) or "logstats"
    where = "<stdin>" if where == "-" else where
    try:
        _usage_checks(args)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", logstats.LogstatsWarning)
            try:
                code = args.func(args)
            finally:
                for w in caught:
                    if issubclass(w.category, logstats.LogstatsWarning):
                        print(f"logstats: warning: {where}: {_cli_hint(str(w.message))}", file=sys.stderr)
                    else:
                        warnings.showwarning(w.message, w.category, w.filename, w.lineno)
        return code
    except UsageError as exc:
        sub.print_usage(sys.stderr)
        print(f"logstats {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except DataError as exc:
        print(f"logstats: error: {_cli_hint(str(exc))}", file=sys.stderr)
        return EXIT_DATA
    except (ValueError, TypeError, KeyError, NotImplementedError) as exc:
        print(f"logstats: error: {where}: {_cli_hint(_message(exc))}", file=sys.stderr)
        return EXIT_DATA
    except BrokenPipeError:  # e.g. piped into head: stop quietly
        with contextlib.suppress(OSError, ValueError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
