"""The ``logstats`` command line: log-scale statistics on CSV, TSV, Parquet and Excel tables.

Subcommands ``summary``, ``compare``, ``fit``, ``check``, ``tail`` (percentiles, tolerance limits,
exceedance of a limit), ``components`` (variance components of nested designs), ``plan`` (replicates
needed for a fold change), ``report`` and ``demo``; ``logstats SUBCOMMAND --help`` shows each one's
options with an example.

Non-detects as labs write them: a value column holding ``<0.5``, ``< 8``, ``ND``, ``n.d.``, ``<LOD``,
``<LOQ`` or ``BDL`` is read with :func:`logstats.split_censored` by itself (``--nd-limit`` gives the
limit of the keyword entries), the command says on standard error how many entries it read and at
which limits, and every statistic then uses the censored likelihood: nothing is substituted.
``--detection-limit NUMBER|COLUMN`` censors measured values at or below a limit as well.

Upper-tail results (``tail``, ``report --limit``) are often compared with regulatory, exposure or
specification limits: for clinical, regulatory or safety decisions use validated tools, qualified
review, and the local rules and licensed practice that apply. Tables go to the terminal, aligned,
or with ``--output FILE`` to a ``.csv``, ``.tsv`` or ``.parquet`` file; figures with ``--plot FILE``.

Tables as labs export them: ``--sep``, ``--decimal`` and ``--encoding`` say how a text table is
written; without them a semicolon-separated file with decimal commas is recognised from its first
lines (and the command says so on standard error). ``.xlsx`` workbooks are read with openpyxl
(``pip install 'logstats[xlsx]'``), the first sheet or ``--sheet``.

Column names: ``--value`` and ``--by`` are repeatable, one column per option, so names holding
commas, quotes or units (``--value "conc (mg/L)"``) work as written; a second ``--by`` adds a key.
The older comma-list form (``--value a,b``) is still read when it is unambiguous: a column of that
exact name wins; otherwise the text is split at commas only when every part names a column.

Group order: tables and figures show the groups of a categorical key in its category order, of a
numeric or date key in ascending order, of month or weekday names in calendar order, and of other
text in natural order ("dish 2" before "dish 10"); see :func:`logstats.format.data_order`.

Exit codes: 0 success, 1 a problem with the data (the message names the file, the column and what
to do) or nothing could be computed, 2 a usage error (unknown option, missing argument, unsupported
file type).
"""

from __future__ import annotations

import argparse
import contextlib
import csv
import gzip
import io
import lzma
import os
import re
import shlex
import shutil
import sys
import textwrap
import time
import warnings
import zlib
from collections.abc import Callable, Hashable, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

import logstats
from logstats.format import format_table, in_data_order, joined_key

__all__ = ["DataError", "main", "read_table", "sniff_text_table"]

EXIT_OK, EXIT_DATA, EXIT_USAGE = 0, 1, 2

_READ_SUFFIXES = {".csv": "csv", ".txt": "csv", ".tsv": "tsv", ".tab": "tsv", ".parquet": "parquet",
                  ".pq": "parquet", ".xlsx": "xlsx", ".xlsm": "xlsx"}
_COMPRESSION = (".gz", ".bz2", ".xz", ".zst", ".zip")
_TABLE_OUT = (".csv", ".tsv", ".parquet")
_PLOT_OUT = (".png", ".svg", ".pdf")
_FORMATS = ("csv", "tsv", "parquet", "xlsx")
_SEP_NAMES = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";", "pipe": "|", "space": " "}
_SNIFF_BYTES = 1 << 18  # the first 256 KiB tell the delimiter and the decimal mark
_LARGE_FILE = 50 * 1024 * 1024  # files above this size get a progress line while they are read

#: How the library's keyword hints read on the command line.
_HINTS: tuple[tuple[str, str], ...] = (
    (r"nonpositive='drop'", "--nonpositive drop"),
    (r"nonpositive='nan'", "--nonpositive nan"),
    (r"nonpositive='raise'", "--nonpositive raise"),
    (r"\bdetection_limit=", "--detection-limit "),
    (r"\bcolumns=", "--value "),
    (r"\breplicate=", "--replicate "),
    (r"\bnd_limit=", "--nd-limit "),
    (r"\bmethod='(cox|modified_cox|land|gci|bootstrap)'", r"--arithmetic-mean \1"),
    (r"\bmargin=", "--margin "),
    (r"\bnested=", "--nested "),
    (r"\breference=", "--reference "),
    (r"\bconfidence_level=", "--confidence-level "),
    (r"\bequivalence=", "--equivalence "),
    (r"(?<![\w-])by=", "--by "),
    # numbers as numbers: numpy 2 writes np.float64(2.5) where the user wrote 2.5
    (r"\bnp\.(?:float|int|uint)\d*\(([^()]*)\)", r"\1"),
    (r"\bnp\.str_\(('[^']*')\)", r"\1"),
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


class _Progress:
    """Progress lines on standard error (``logstats: [  2.1 s] drawing figures``).

    On only when standard error is a terminal and ``--quiet`` was not given, so logs and pipes stay
    clean; the elapsed time is counted from the start of the command.
    """

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled
        self.t0 = time.perf_counter()

    def __call__(self, step: str) -> None:
        if self.enabled:
            print(f"logstats: [{time.perf_counter() - self.t0:5.1f} s] {step}", file=sys.stderr, flush=True)


def _note(args: argparse.Namespace | None, text: str) -> None:
    """An informational line on standard error (what was detected, what was written); --quiet hides it."""
    if args is None or not getattr(args, "quiet", False):
        print(f"logstats: {text}", file=sys.stderr)


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
    if suffixes and suffixes[-1] == ".xls":
        raise UsageError(f"{path!r} is an old-style Excel .xls workbook, which is not read; save it as "
                         ".xlsx (or as CSV) and pass that file")
    if suffixes and suffixes[-1] in _READ_SUFFIXES:
        return _READ_SUFFIXES[suffixes[-1]]
    raise UsageError(
        f"cannot tell the format of {path!r} from its extension; name it .csv, .tsv, .parquet or .xlsx, "
        "or pass --format csv|tsv|parquet|xlsx"
    )


def _separator(text: str | None) -> str | None:
    if text is None:
        return None
    sep = _SEP_NAMES.get(text.lower(), text)
    if len(sep) != 1:
        raise UsageError(f"--sep {text!r}: give one character (',', ';', '|') or tab, comma, semicolon, "
                         "pipe, space")
    return sep


_COMMA_DECIMAL = re.compile(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?")
_DOT_DECIMAL = re.compile(r"[+-]?\d*\.\d+(?:[eE][+-]?\d+)?")
_DOT_THOUSANDS = re.compile(r"[+-]?\d{1,3}(?:\.\d{3})+(?:,\d+)?")
_SEP_WORDS = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe", " ": "space"}


def sniff_text_table(text: str, *, sep: str | None = None) -> dict[str, str]:
    """Delimiter, decimal mark and thousands separator of a text table, from its first lines.

    The delimiter is the one of comma, semicolon, tab and pipe that splits the header into the most
    fields while at least 90 % of the lines have that many (quoted fields are respected; comma wins
    ties). With a delimiter other than the comma, the decimal mark is the comma when cells such as
    ``7,4`` occur and no cell such as ``7.4`` does; then ``1.234,5`` style cells also set the
    thousands separator to ``.``. Returns ``{"sep": …, "decimal": …}`` plus ``"thousands"`` when found.

    Examples
    --------
    >>> sniff_text_table("Ozone;Wind\\n41;7,4\\n36;8\\n")
    {'sep': ';', 'decimal': ','}
    >>> sniff_text_table("a,b\\n1.5,2\\n")
    {'sep': ',', 'decimal': '.'}
    """
    lines = [ln for ln in text.splitlines()[:400] if ln.strip()]
    if not lines:
        return {"sep": sep or ",", "decimal": "."}
    if sep is None:
        best, best_width = ",", 1
        for cand in (",", ";", "\t", "|"):
            rows = list(csv.reader(lines, delimiter=cand))
            width = len(rows[0])
            same = sum(len(r) == width for r in rows) / len(rows)
            if width > best_width and same >= 0.9:
                best, best_width = cand, width
        sep = best
    out = {"sep": sep, "decimal": "."}
    if sep != ",":
        cells = [c.strip() for r in csv.reader(lines[1:], delimiter=sep) for c in r]
        comma = sum(bool(_COMMA_DECIMAL.fullmatch(c)) for c in cells)
        dot = sum(bool(_DOT_DECIMAL.fullmatch(c)) for c in cells)
        thousands = [c for c in cells if _DOT_THOUSANDS.fullmatch(c)]
        if comma and not dot:
            out["decimal"] = ","
        elif comma and all(_DOT_THOUSANDS.fullmatch(c) for c in cells if _DOT_DECIMAL.fullmatch(c)):
            out["decimal"] = ","
        if out["decimal"] == "," and thousands:
            out["thousands"] = "."
    return out


def _decode_sample(raw: bytes, encoding: str, truncated: bool, path: str) -> str:
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError as exc:
        if truncated and exc.start >= len(raw) - 4:  # a character cut at the end of the sample
            return raw[: exc.start].decode(encoding, errors="replace")
        raise DataError(
            f"{path}: is not {encoding} text (byte {raw[exc.start]:#04x} at position {exc.start}); "
            "pass --encoding with the file's encoding, e.g. --encoding cp1252 (Windows and Excel "
            "exports) or --encoding latin-1"
        ) from exc
    except LookupError as exc:
        raise UsageError(f"--encoding {encoding!r} is not an encoding Python knows (try utf-8, cp1252, "
                         "latin-1)") from exc


def _read_excel(path: str, sheet: str | None) -> pd.DataFrame:
    with open(path, "rb") as fh:
        magic = fh.read(4)
    if magic != b"PK\x03\x04":
        raise UsageError(f"{path!r} is not an Excel workbook (an .xlsx file is a zip archive); if it is "
                         "a text table, rename it or pass --format csv|tsv|parquet")
    try:
        import openpyxl
    except ImportError as exc:
        raise DataError(
            f"{path}: reading Excel .xlsx files needs openpyxl, which is not installed; install it with "
            "pip install 'logstats[xlsx]' (or save the sheet as CSV)"
        ) from exc
    wb = openpyxl.load_workbook(path, read_only=True)
    names = list(wb.sheetnames)
    wb.close()
    if sheet is None:
        chosen: str | int = 0
    elif sheet in names:
        chosen = sheet
    elif sheet.isdigit() and 1 <= int(sheet) <= len(names):
        chosen = int(sheet) - 1
    else:
        shown = ", ".join(repr(n) for n in names)
        raise DataError(f"{path}: --sheet {sheet!r} is not a sheet of the workbook; its sheets are {shown} "
                        f"(or a number 1 to {len(names)})")
    return pd.read_excel(path, sheet_name=chosen, engine="openpyxl")


def read_table(path: str, *, fmt: str | None = None, sep: str | None = None, decimal: str | None = None,
               encoding: str | None = None, sheet: str | None = None,
               notes: Callable[[str], None] | None = None,
               progress: Callable[[str], None] | None = None) -> pd.DataFrame:
    """Read a CSV, TSV, Parquet or Excel table, turning every failure into a :class:`DataError`.

    ``path`` ``"-"`` reads CSV from standard input. The format comes from the extension (``.csv``,
    ``.tsv``/``.tab``, ``.parquet``/``.pq``, ``.xlsx``, optionally compressed, e.g. ``.csv.gz``) or
    ``fmt``. For text tables ``sep``, ``decimal`` and ``encoding`` (default UTF-8) say how the file is
    written; when ``sep`` or ``decimal`` is not given, :func:`sniff_text_table` looks at the first
    lines and anything other than comma + decimal point is reported through ``notes``.
    """
    kind = _table_format(path, fmt)
    if path != "-":
        p = Path(path)
        if not p.exists():
            raise DataError(f"{path}: file not found; check the path (relative to {Path.cwd()})")
        if p.is_dir():
            raise DataError(f"{path}: is a folder, not a table file")
        if progress is not None and p.stat().st_size > _LARGE_FILE:
            progress(f"reading {path} ({p.stat().st_size / 2**20:.0f} MiB)")
    enc = encoding or "utf-8"
    try:
        if kind == "parquet":
            try:
                df = pd.read_parquet(path)
            except ImportError as exc:
                raise DataError(
                    f"{path}: reading Parquet needs pyarrow, which is not installed; install it with "
                    "pip install 'logstats[parquet]' (or convert the table to CSV)"
                ) from exc
        elif kind == "xlsx":
            df = _read_excel(path, sheet)
        else:
            kw: dict[str, Any] = {"sep": "\t" if kind == "tsv" else sep}
            source: Any = path
            compressed = path != "-" and Path(path).suffix.lower() in _COMPRESSION
            if path == "-":
                source = io.StringIO(sys.stdin.read())
            if kind == "csv" and (sep is None or decimal is None) and not compressed:
                if path == "-":
                    sample, truncated = source.getvalue()[:_SNIFF_BYTES], False
                else:
                    with open(path, "rb") as fh:
                        raw = fh.read(_SNIFF_BYTES + 1)
                    truncated = len(raw) > _SNIFF_BYTES
                    sample = _decode_sample(raw[:_SNIFF_BYTES], enc, truncated, path)
                if truncated:
                    sample = sample[: sample.rfind("\n") + 1] or sample
                found = sniff_text_table(sample.lstrip("\ufeff"), sep=sep)
                said = []
                if sep is None:
                    kw["sep"] = found["sep"]
                    if found["sep"] != ",":
                        said.append(f"{_SEP_WORDS.get(found['sep'], repr(found['sep']))}-separated")
                if decimal is None:
                    decimal = found["decimal"]
                    if decimal == ",":
                        said.append("decimal commas")
                    if "thousands" in found:
                        kw["thousands"] = found["thousands"]
                        said.append("'.' between thousands")
                if said and notes is not None:
                    notes(f"{path}: read as {' with '.join(said[:2])}"
                          + (f" and {said[2]}" if len(said) > 2 else "")
                          + " (detected from the first lines; --sep and --decimal override)")
            kw["sep"] = kw["sep"] or ","
            if decimal is not None:
                kw["decimal"] = decimal
            if kw["sep"] == kw.get("decimal"):
                raise UsageError(f"--sep and --decimal are both {kw['sep']!r}; they must differ")
            df = pd.read_csv(source, encoding=enc if path != "-" else None, **kw)
    except (DataError, UsageError):
        raise
    except (EOFError, zlib.error, gzip.BadGzipFile, lzma.LZMAError) as exc:
        raise DataError(f"{path}: cannot be decompressed ({exc}); the file looks truncated or corrupt: "
                        "copy or download it again, or pass the uncompressed table") from exc
    except pd.errors.EmptyDataError as exc:
        raise DataError(f"{path}: the file is empty; a table needs a header line naming its columns "
                        "and one line per row") from exc
    except pd.errors.ParserError as exc:
        detail = str(exc).strip().replace("Error tokenizing data. C error: ", "")
        raise DataError(
            f"{path}: malformed {kind.upper()} table ({detail}); check that every line has the same "
            f"number of fields and that text containing the delimiter is quoted, or pass --sep with "
            f"the delimiter the file uses (e.g. --sep ';' or --sep tab)"
        ) from exc
    except UnicodeDecodeError as exc:
        raise DataError(f"{path}: is not {enc} text ({exc.reason}); pass --encoding with the file's "
                        "encoding, e.g. --encoding cp1252 (Windows and Excel exports) or --encoding "
                        "latin-1") from exc
    except LookupError as exc:
        raise UsageError(f"--encoding {enc!r} is not an encoding Python knows (try utf-8, cp1252, "
                         "latin-1)") from exc
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot be read as {kind.upper()}: {exc}") from exc
    if len(df.columns) == 0:
        raise DataError(f"{path}: the table has no columns")
    if len(df) == 0:
        raise DataError(f"{path}: the table has a header ({', '.join(map(str, df.columns))}) but no rows")
    return df


def _resolve_columns(df: pd.DataFrame, path: str, items: Sequence[str] | None, option: str) -> list[Hashable]:
    """Column names from repeated ``option`` texts: an exact column name first, else a comma list.

    A text that is exactly a column's name is that column, commas and all. Otherwise it is split at
    commas only when every part is a column (the older ``--value a,b`` form); anything else is an
    error naming the table's columns.
    """
    names: dict[str, Hashable] = {str(c): c for c in df.columns}
    out: list[Hashable] = []
    for item in items or []:
        if item in names:
            found = [names[item]]
        elif "," in item:
            parts = [x.strip() for x in item.split(",") if x.strip()]
            missing = [x for x in parts if x not in names]
            if missing:
                cols = ", ".join(repr(c) for c in names)
                raise DataError(
                    f"{path}: {option} {item!r} is not a column, and as a comma list its part(s) "
                    f"{', '.join(map(repr, missing))} are not columns either; its columns are {cols}. "
                    f"Repeat {option} once per column (quote names with spaces or commas)"
                )
            found = [names[x] for x in parts]
        else:
            _check_column(df, path, item, option)
            found = [names[item]]
        out.extend(c for c in found if c not in out)
    return out


def _check_column(df: pd.DataFrame, path: str, name: str, option: str) -> None:
    if name in df.columns or name in {str(c) for c in df.columns}:
        return
    cols = ", ".join(repr(str(c)) for c in df.columns)
    near = [str(c) for c in df.columns if str(c).lower().strip() == name.lower().strip()]
    hint = f"; did you mean {near[0]!r}? (names are case-sensitive)" if near else ""
    raise DataError(
        f"{path}: column {name!r} (from {option}) is not in the table{hint}; its columns are {cols}. "
        f"Pass {option} with one of them"
    )


def _check_numeric(df: pd.DataFrame, path: str, name: Hashable, option: str = "--value") -> None:
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
    texts = s[bad].astype(str)
    flags = {t: _readable_flag(t) for t in texts.unique()[:1000]}  # non-detect notation is not at fault
    bad = bad & ~s.astype(str).map(lambda t: flags.get(t) is not None)
    if not bad.any():
        return
    pos = int(bad.to_numpy().argmax())
    shown = str(s.iloc[pos])
    hint = ""
    if _COMMA_DECIMAL.fullmatch(shown.strip()):
        hint = (" It looks like a decimal comma: pass --decimal ',' (and --sep if the file is not "
                "comma-separated).")
    raise DataError(
        f"{path}: column {name!r} is not numeric: {int(bad.sum())} entr{'y' if bad.sum() == 1 else 'ies'} "
        f"cannot be read as numbers, the first {shown!r} in data row {pos + 1} (line {pos + 2} of "
        f"a CSV with a header).{hint} Non-detects written '<0.5', 'ND', 'n.d.', '<LOD', '<LOQ' or 'BDL' "
        f"are read as censored values by themselves; correct the other entries, or choose another {option}"
    )


def _number_or_column(text: str | None, df: pd.DataFrame, path: str, option: str) -> Any:
    """An option that takes a positive number or a numeric column (``--nd-limit``, ``--detection-limit``,
    ``--limit``): None, the number, or the column's label as the table has it."""
    if text is None:
        return None
    try:
        value = float(text)
    except ValueError:
        _check_column(df, path, text, option)
        _check_numeric(df, path, text, option)
        return {str(c): c for c in df.columns}[text]
    if not value > 0:
        raise DataError(f"{path}: {option} {text} must be a positive number (in the data's units) or a "
                        "column name")
    return value


def _nd_limit(text: str | None, df: pd.DataFrame, path: str) -> Any:
    """``--nd-limit``: a number, or the column holding each row's limit (as a Series)."""
    limit = _number_or_column(text, df, path, "--nd-limit")
    return df[limit] if limit is not None and not isinstance(limit, float) else limit


def _order_levels(df: pd.DataFrame, by: Hashable, reference: Any) -> tuple[pd.DataFrame, Any]:
    """Put the reference level first (a categorical key) and match it to the column's type."""
    from logstats.report import reference_first

    try:
        return reference_first(df, by, reference)
    except ValueError as exc:
        raise DataError(f"{_cli_hint(str(exc))}. Pass --reference with one of them") from None


def _readable_flag(entry: Any) -> int | None:
    """How the library reads one entry (0 number, 1 ``<`` limit, 2 keyword, 3 missing), None if unreadable."""
    import numpy as np

    from logstats.core.notation import parse_censored

    try:
        return int(parse_censored(np.array([entry], dtype=object), nd_limit=1.0).flags[0])
    except (TypeError, ValueError):
        return None


def _limit_column(df: pd.DataFrame, value: Hashable) -> str:
    name = f"{value} detection limit"
    while name in df.columns:
        name = f"{name}_"
    return name


def _plain_number(x: float) -> str:
    return f"{x:.6g}"


def _read_censored(df: pd.DataFrame, path: str, value: Hashable, nd: Any) -> pd.DataFrame | None:
    """The value column read with :func:`logstats.split_censored` when it holds non-detects, else None.

    None for a numeric column and for a text column with entries that are neither numbers, missing
    nor non-detects (the caller then reports the first such entry as before).
    """
    import numpy as np

    s = df[value]
    if pd.api.types.is_numeric_dtype(s.dtype) or pd.api.types.is_bool_dtype(s.dtype):
        return None
    numeric = pd.to_numeric(s, errors="coerce")
    odd = np.flatnonzero((numeric.isna() & s.notna()).to_numpy())
    if odd.size == 0:
        return None
    seen: dict[str, int | None] = {}
    keyword_rows = []
    for pos in odd:  # stop at the first unreadable entry; distinct texts are read once
        text = str(s.iloc[pos])
        if text not in seen:
            seen[text] = _readable_flag(text)
        if seen[text] is None:
            return None
        if seen[text] == 2:
            keyword_rows.append(int(pos))
    if not any(f in (1, 2) for f in seen.values()):
        return None
    if keyword_rows and nd is None:
        first = keyword_rows[0]
        raise DataError(
            f"{path}: column {value!r} holds {len(keyword_rows)} non-detect entr"
            f"{'y' if len(keyword_rows) == 1 else 'ies'} written without a limit (such as "
            f"{str(s.iloc[first])!r} in data row {first + 1}, line {first + 2} of a CSV with a header); pass "
            "--nd-limit NUMBER (or --nd-limit COLUMN, one limit per row) with their detection limit"
        )
    try:
        return logstats.split_censored(s, nd_limit=nd)
    except ValueError as exc:  # e.g. --nd-limit column empty on a keyword row
        raise DataError(f"{path}: {_cli_hint(str(exc)).replace('nd_limit=', '--nd-limit ')}") from None


def _read_values(df: pd.DataFrame, args: argparse.Namespace, values: Sequence[Hashable]
                 ) -> tuple[pd.DataFrame, dict[Hashable, Any]]:
    """Value columns ready for the statistics, and each one's ``detection_limit=`` (None, number, column).

    A text column holding non-detects (``<0.5``, ``ND`` …) is read with :func:`logstats.split_censored`:
    the column becomes numbers and a hidden column holds each row's limit; ``--detection-limit`` then
    applies to the measured entries (a value at or below it is censored too). Said on standard error.
    """
    path = args.table
    given = _number_or_column(getattr(args, "detection_limit", None), df, path, "--detection-limit")
    nd = _nd_limit(getattr(args, "nd_limit", None), df, path)
    out = df
    limits: dict[Hashable, Any] = {}
    for v in values:
        split = _read_censored(out, path, v, nd)
        if split is None:
            _check_numeric(out, path, v)
            limits[v] = given
            continue
        lim = split["detection_limit"]
        if given is not None:
            other = out[given].astype(float) if isinstance(given, str) else float(given)
            lim = lim.fillna(other)
        col = _limit_column(out, v)
        if out is df:
            out = df.copy()
        out[v] = split["value"]
        out[col] = lim
        n_cens, n_kw = int(split.attrs["n_censored"]), int(split.attrs["n_keyword"])
        shown = [_plain_number(x) for x in split.attrs["limits"]]
        lims = ", ".join(shown[:8]) + (f" and {len(shown) - 8} more" if len(shown) > 8 else "")
        if n_cens:
            _note(args, f"{path}: column {v!r}: read {n_cens} non-detect entr{'y' if n_cens == 1 else 'ies'} "
                        f"as censored at their limits ({len(shown)} distinct: {lims})"
                        + (f"; {n_kw} written as keywords, at --nd-limit" if n_kw else "")
                        + ". Nothing is substituted: the statistics use the censored likelihood")
        limits[v] = col if n_cens or given is not None else None
    return out, limits


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
        _note(args, f"wrote {out} ({len(table)} rows)")
        return
    cols = [c for c in columns if c in table.columns] if columns is not None else None
    if heading:
        print(heading)
    print(format_table(table, columns=cols, digits=args.digits, ascii=_wants_ascii(args), width=_width()))


def _plot_paths(path: str, values: Sequence[Hashable]) -> list[tuple[Hashable, Path]]:
    p = Path(path)
    if len(values) == 1:
        return [(values[0], p)]
    return [(v, p.with_name(f"{p.stem}-{re.sub(r'[^A-Za-z0-9_.-]+', '_', str(v))}{p.suffix}"))
            for v in values]


def _save_plots(args: argparse.Namespace, values: Sequence[Hashable], draw: Any) -> None:
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
        args.progress(f"drawing {path}")
        axes = draw(v)
        fig = np.ravel(axes)[0].figure
        try:
            fig.savefig(path, dpi=args.dpi)
        finally:
            plt.close(fig)
        _note(args, f"wrote {path}")


# --------------------------------------------------------------------------------------------------
# subcommands


def _load(args: argparse.Namespace) -> tuple[pd.DataFrame, list[Hashable], list[Hashable]]:
    """The table, its value columns and its group keys, checked (the keys not yet put in order)."""
    df = read_table(args.table, fmt=args.format, sep=_separator(args.sep), decimal=args.decimal,
                    encoding=args.encoding, sheet=args.sheet, notes=lambda t: _note(args, t),
                    progress=args.progress)
    values = _resolve_columns(df, args.table, args.value, "--value")
    if not values:
        raise UsageError("--value needs at least one column name")
    df, args.limits = _read_values(df, args, values)
    keys = _resolve_columns(df, args.table, getattr(args, "by", None), "--by")
    for k in keys:
        if k in values:
            raise UsageError(f"--by {k!r} is also a --value column")
    for option in ("replicate", "nested"):
        given = getattr(args, option, None)
        if given is None:
            continue
        names = []
        for rep in ([given] if isinstance(given, str) else list(given)):
            _check_column(df, args.table, rep, f"--{option}")
            rep = {str(c): c for c in df.columns}[rep]
            if rep in values:
                raise UsageError(f"--{option} {rep!r} is also a --value column")
            if rep in keys:
                raise UsageError(f"--{option} {rep!r} is also a --by column")
            names.append(rep)
        if option == "replicate":  # one --replicate: that column; several: nested, outermost first
            args.replicate = names[0] if len(names) == 1 else names
        else:
            args.nested = names
    return df, values, keys


def _unit_of(replicate: Any) -> Any:
    """The experimental unit of ``--replicate``: the column, or the outermost of nested ones."""
    return replicate[0] if isinstance(replicate, list) else replicate


def _per_value(values: list[Hashable], limits: dict[Hashable, Any],
               run: Callable[[Any, Any], Any]) -> pd.DataFrame:
    """``run(columns, detection_limit)`` once when the value columns share one limit, else per column.

    Results of single columns are stacked with a ``variable`` level (last), as the accessors do for
    several columns.
    """
    specs = [limits.get(v) for v in values]
    if all(repr(x) == repr(specs[0]) for x in specs):
        res = run(_one_or_many(values), specs[0])
        if isinstance(res, pd.Series):
            res = res.to_frame().T
            res.index = pd.Index(values, name="variable")
        return res
    frames = []
    for v, dl in zip(values, specs):
        res = run(v, dl)
        if isinstance(res, pd.Series):
            res = res.to_frame().T
            res.index = pd.Index([v], name="variable")
        else:
            levels = list(range(1, res.index.nlevels + 1)) + [0]
            res = pd.concat({v: res}, names=["variable"]).reorder_levels(levels)
        frames.append(res)
    return pd.concat(frames)


def _censoring(limits: dict[Hashable, Any], values: Sequence[Hashable]) -> bool:
    return any(limits.get(v) is not None for v in values)


def _dl_kw(dl: Any) -> dict[str, Any]:
    return {} if dl is None else {"detection_limit": dl}


def _by(keys: Sequence[Hashable]) -> Any:
    """``by=`` for the accessors: None, one key, or a list of keys."""
    if not keys:
        return None
    return keys[0] if len(keys) == 1 else list(keys)


def _plot_key(df: pd.DataFrame, keys: Sequence[Hashable]) -> Any:
    """``by=`` for the figures: one key, or several joined into one (``"5 / first half"``)."""
    if len(keys) <= 1:
        return _by(keys)
    return joined_key(df, keys)


def _one_or_many(values: list[Hashable]) -> Hashable | list[Hashable]:
    return values[0] if len(values) == 1 else values


_TAIL_CAUTION = ("Caution: upper-tail results (percentiles, tolerance limits, exceedance of a limit) are "
                 "often compared with regulatory, exposure or specification limits. For clinical, "
                 "regulatory or safety decisions use validated tools, qualified review, and the local "
                 "rules and licensed practice that apply; this output supports and does not replace them.")


def _footer(args: argparse.Namespace, text: str) -> None:
    """A closing paragraph: under the table on standard output, or on standard error with --output."""
    wrapped = textwrap.fill(text, min(_width(), 100))
    if getattr(args, "output", None) is None:
        print()
        print(wrapped)
    else:
        print(wrapped, file=sys.stderr)


def _censored_columns(res: pd.DataFrame, cols: list[str]) -> list[str]:
    return cols + [c for c in ("n_censored",) if c in res.columns and c not in cols]


def _cmd_summary(args: argparse.Namespace) -> int:
    df, values, keys = _load(args)
    df = in_data_order(df, keys)
    censored = _censoring(args.limits, values)
    if censored and args.linear:
        raise UsageError("--linear does not combine with non-detects: a linear median, mean and SD would "
                         "treat the limits as measurements (see --arithmetic-mean for the log-normal mean)")
    args.progress("summary")

    def run(columns: Any, dl: Any) -> Any:
        kw: dict[str, Any] = dict(by=_by(keys), columns=columns, confidence_level=args.confidence_level,
                                  nonpositive=args.nonpositive, linear=args.linear)
        if dl is not None:
            kw.update(detection_limit=dl, censored_method=args.censored_method)
        return df.logstats.summary(**kw)

    res = _per_value(values, args.limits, run)
    cols = ["n", "n_missing", "n_nonpositive", "gmean", "gsd", "ci_low", "ci_high"]
    if censored:
        cols.append("n_censored")
    if args.linear:
        cols += ["median", "mean", "sd"]
    if args.arithmetic_mean is not None:
        def run_mean(columns: Any, dl: Any) -> Any:
            return df.logstats.lognormal_mean(by=_by(keys), columns=columns, method=args.arithmetic_mean,
                                              confidence_level=args.confidence_level,
                                              nonpositive=args.nonpositive, random_state=args.seed,
                                              **_dl_kw(dl))

        am = _per_value(values, args.limits, run_mean)
        am = am[["estimate", "ci_low", "ci_high"]].rename(
            columns={"estimate": "arith_mean", "ci_low": "arith_ci_low", "ci_high": "arith_ci_high"})
        res = res.join(am)
        cols += ["arith_mean", "arith_ci_low", "arith_ci_high"]
    _emit(res, args, columns=cols if not args.all_columns else None)
    if censored and args.output is None:
        how = {"mle": "the censored log-normal maximum likelihood fit",
               "ros": "robust regression on order statistics (Helsel's plotting positions)",
               "km": "the Kaplan-Meier estimate on the flipped logs"}[args.censored_method]
        _note(args, f"non-detects: gmean, gsd and the interval come from {how}; no value is substituted")
    if args.arithmetic_mean is not None and args.output is None:
        _note(args, f"arith_mean: the arithmetic mean a log-normal fit implies, interval by the "
                    f"{args.arithmetic_mean!r} method")
    _save_plots(args, values, lambda v: _plot().hist(df, v, by=_plot_key(df, keys), layout="panels",
                                                      nonpositive=args.nonpositive, units=args.units,
                                                      normal=True, detection_limit=args.limits.get(v)))
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


def _row_label(idx: Any) -> str:
    parts = idx if isinstance(idx, tuple) else (idx,)
    return " / ".join(str(p) for p in parts)


def _empty_reasons(res: pd.DataFrame, args: argparse.Namespace, ref: Any) -> tuple[list[str], bool]:
    """Why rows of a comparison hold no ratio, one line per such row; and whether all rows are so."""
    ratio = res["ratio"] if "ratio" in res.columns else pd.Series(dtype=float)
    bad = ratio.isna().to_numpy()
    unit = str(_unit_of(args.replicate)) if args.replicate is not None else "value"
    lines = []
    for label, row in res[bad].iterrows():
        n, n_ref = int(row.get("n", 0) or 0), int(row.get("n_reference", 0) or 0)
        where = _row_label(label)
        if args.paired and n == 0 and int(row.get("n_unpaired", 0) or 0) > 0:
            lines.append(f"{where}: no {unit} label is shared with the reference {ref!r} "
                         f"({int(row['n_unpaired'])} {unit}(s) left unpaired), and --paired pairs "
                         f"replicates by label; check that --replicate {unit} names the same replicates "
                         "in both groups, or drop --paired")
        elif n == 0 and n_ref == 0:
            lines.append(f"{where}: neither this group nor the reference {ref!r} has a usable {unit} here")
        elif n == 0:
            lines.append(f"{where}: this group has no usable {unit} (missing, non-positive or not present "
                         "in this stratum)")
        elif n_ref == 0:
            lines.append(f"{where}: the reference {ref!r} has no usable {unit} here")
        else:
            lines.append(f"{where}: {n} {unit}(s) against {n_ref} in the reference, too few for a ratio")
    return lines, bool(bad.size) and bool(bad.all())


def _cmd_compare(args: argparse.Namespace) -> int:
    from logstats.format import count_label

    df, values, keys = _load(args)
    by = keys[0]
    try:
        df, ref = _order_levels(df, by, args.reference)
    except DataError as exc:
        raise DataError(f"{args.table}: {exc}") from None
    df = in_data_order(df, keys)
    unit = _unit_of(args.replicate)
    kw: dict[str, Any] = dict(replicate=args.replicate, paired=args.paired,
                              equal_var=args.equal_var, confidence_level=args.confidence_level,
                              adjust=None if args.adjust == "none" else args.adjust,
                              nonpositive=args.nonpositive)
    if len(keys) > 1:  # further --by keys stratify: the levels of the first are compared within each
        kw["within"] = _by(keys[1:])
    eq = _parse_equivalence(args.equivalence)
    if eq is not None:
        kw["equivalence"] = eq
    args.progress("fold changes")
    res = _per_value(values, args.limits,
                     lambda columns, dl: df.logstats.fold_change(by, ref, columns=columns, **kw,
                                                                 **_dl_kw(dl)))
    reasons, nothing = _empty_reasons(res, args, ref)
    for line in reasons:
        print(f"logstats: {'error' if nothing else 'warning'}: {args.table}: no fold change for {line}",
              file=sys.stderr)
    if nothing:
        print(f"logstats: error: {args.table}: nothing could be computed ({len(reasons)} comparison(s), "
              "all empty)", file=sys.stderr)
        return EXIT_DATA
    cols = ["ratio", "ci_low", "ci_high", "p_value", "p_adjusted", "n", "n_reference"]
    if isinstance(args.replicate, list):
        for level in args.replicate[1:]:
            cols += [f"n_{level}", f"n_{level}_reference"]
    if args.replicate is not None:
        cols += ["n_cells", "n_cells_reference"]
    if _censoring(args.limits, values):
        cols += ["n_censored", "n_censored_reference"]
    if eq is not None:
        cols += ["equivalence_p", "equivalent"]
    names = {c: count_label(c, unit_name=args.unit_name) for c in res.columns}
    res = res.rename(columns=names)
    cols = [names.get(c, c) for c in cols]
    _emit(res, args, columns=cols if not args.all_columns else None)
    if args.replicate is not None and args.output is None:
        rows = names.get("n_cells", "n_values")
        nested = (f"; values are averaged on the log scale up {' > '.join(map(str, args.replicate))}"
                  if isinstance(args.replicate, list) else "")
        _note(args, f"n and n_reference count {unit} (the units); {rows} and {rows}_reference "
                    f"count rows{nested}")
    if _censoring(args.limits, values) and args.output is None:
        _note(args, "non-detects: censored regression on the logs with a common spread (Wald interval, "
                    "likelihood-ratio p-value); no value is substituted")
    _save_plots(args, values, lambda v: _plot().groups(df, v, by=_plot_key(df, keys),
                                                        replicate=unit,
                                                        nonpositive=args.nonpositive, units=args.units,
                                                        confidence_level=args.confidence_level))
    return EXIT_OK


def _cmd_fit(args: argparse.Namespace) -> int:
    df, values, keys = _load(args)
    df = in_data_order(df, keys)
    args.progress("log-normal fits")

    def run(columns: Any, dl: Any) -> Any:
        kw: dict[str, Any] = {"columns": columns}
        if dl is not None:
            kw["detection_limit"] = dl
        else:
            kw["nonpositive"] = args.nonpositive
        return df.logstats.fit(by=_by(keys), **kw)

    res = _per_value(values, args.limits, run)
    _emit(res, args, columns=["mu", "sigma", "gmean", "gsd", "n", "n_censored", "loglik", "converged"]
          if not args.all_columns else None)
    _save_plots(args, values, lambda v: _plot().hist(df, v, by=_plot_key(df, keys), layout="panels",
                                                      detection_limit=args.limits.get(v),
                                                      nonpositive=args.nonpositive, units=args.units))
    return EXIT_OK


def _verdict_rule(margin: float) -> str:
    return (f"preferred: 'log' when delta_aic = aic_normal - aic_lognormal >= {margin:g}, 'linear' when it "
            f"is <= -{margin:g}, else 'undecided' (--margin). boxcox_lambda near 0 supports logs, near 1 "
            "the linear scale; its interval is the profile-likelihood one.")


def _cmd_check(args: argparse.Namespace) -> int:
    df, values, keys = _load(args)
    df = in_data_order(df, keys)
    if args.pooled and not keys:
        raise UsageError("--pooled needs --by (one verdict across the groups of --by)")
    args.progress("scale check")

    def run(columns: Any, dl: Any) -> Any:
        return df.logstats.scale_check(by=_by(keys), columns=columns, nonpositive=args.nonpositive,
                                       margin=args.margin, confidence_level=args.confidence_level,
                                       pooled=args.pooled, **_dl_kw(dl))

    res = _per_value(values, args.limits, run)
    if args.pooled:
        cols = ["n_groups", "n", "aic_normal", "aic_lognormal", "delta_aic", "preferred", "boxcox_lambda",
                "boxcox_ci_low", "boxcox_ci_high", "spread_slope", "spread_slope_ci_low",
                "spread_slope_ci_high", "implied_power", "n_censored"]
        heading = f"one verdict across the groups of {' x '.join(map(str, keys))}:"
    else:
        cols = ["aic_normal", "aic_lognormal", "delta_aic", "preferred", "boxcox_lambda", "boxcox_ci_low",
                "boxcox_ci_high", "normality_test", "normality_p_linear", "normality_p_log", "mean_ratio",
                "expected_ratio", "n_censored"]
        heading = None
    _emit(res, args, columns=cols if not args.all_columns else None,
          heading=heading if args.output is None else None)
    if args.output is None:
        rule = _verdict_rule(args.margin)
        if args.pooled:
            rule += (" spread_slope: slope of log SD on log mean over the groups (1: spread proportional "
                     "to level, multiplicative; 0: additive; 1/2: counting-like), t interval on "
                     "n_groups - 2 df.")
            notes = res["note"].dropna() if "note" in res.columns else pd.Series(dtype=object)
            for text in notes.unique():
                if text:
                    rule += f" Note: {text}"
        _footer(args, rule)
    _save_plots(args, values, lambda v: _plot().qq(df, v, by=_plot_key(df, keys),
                                                    nonpositive=args.nonpositive, units=args.units))
    if args.scale_plot is not None:
        saved, args.plot = args.plot, args.scale_plot
        try:
            _save_plots(args, values, lambda v: _plot().scale(df, v, by=_plot_key(df, keys),
                                                               pooled=args.pooled,
                                                               nonpositive=args.nonpositive,
                                                               confidence_level=args.confidence_level,
                                                               units=args.units,
                                                               detection_limit=args.limits.get(v)))
        finally:
            args.plot = saved
    return EXIT_OK


def _cmd_tail(args: argparse.Namespace) -> int:
    df, values, keys = _load(args)
    df = in_data_order(df, keys)
    limit = _number_or_column(args.limit, df, args.table, "--limit")
    qs = args.q or [0.95]
    for q in qs:
        if not 0.0 < q < 1.0:
            raise UsageError(f"--q {q:g} must lie strictly between 0 and 1, e.g. 0.95")
    if not 0.0 < args.coverage < 1.0:
        raise UsageError(f"--coverage {args.coverage:g} must lie strictly between 0 and 1, e.g. 0.95")
    acc = df.logstats
    by = _by(keys)
    common = dict(by=by, confidence_level=args.confidence_level, nonpositive=args.nonpositive)
    args.progress("percentiles")
    quant = _per_value(values, args.limits, lambda c, dl: acc.quantile(columns=c, q=qs if len(qs) > 1
                                                                        else qs[0], **common, **_dl_kw(dl)))
    args.progress("tolerance limits")
    tol = _per_value(values, args.limits, lambda c, dl: acc.tolerance_limit(
        columns=c, coverage=args.coverage, side=args.side, **common, **_dl_kw(dl)))
    exc = None
    if limit is not None:
        args.progress("exceedance")
        exc = _per_value(values, args.limits, lambda c, dl: acc.exceedance(columns=c, limit=limit, **common,
                                                                            **_dl_kw(dl)))
    censored = _censoring(args.limits, values)
    cens = ["n_censored"] if censored else []
    pct = f"{100 * args.confidence_level:g} %"
    if args.output is not None:  # one wide table: a row per group
        wide = quant.copy()
        if "q" in (wide.index.names or []):
            wide = wide["estimate ci_low ci_high".split()].unstack("q")
            wide.columns = [f"q{q:g}_{k}" for k, q in wide.columns]
        else:
            wide = wide[["estimate", "ci_low", "ci_high"]].add_prefix(f"q{qs[0]:g}_")
        wide = wide.join(tol[["n", *cens, "tolerance_low", "tolerance_high"]])
        if exc is not None:
            wide = wide.join(exc[["limit", "fraction", "ci_low", "ci_high", "n_exceed"]].rename(
                columns={"fraction": "exceed_fraction", "ci_low": "exceed_ci_low",
                         "ci_high": "exceed_ci_high"}))
        _emit(wide, args)
    else:
        _emit(quant, args,
              columns=None if args.all_columns else ["estimate", "ci_low", "ci_high", "n", *cens],
              heading=f"percentiles of the fitted log-normal, exp(mean + z_q sd) with the exact {pct} "
                      "interval (non-central t):")
        print()
        side = {"upper": "upper", "lower": "lower", "both": "two-sided"}[args.side]
        sides = {"upper": ["tolerance_high"], "lower": ["tolerance_low"],
                 "both": ["tolerance_low", "tolerance_high"]}[args.side]
        _emit(tol, args, columns=None if args.all_columns else [*sides, "n", *cens],
              heading=f"{side} tolerance limits covering {100 * args.coverage:g} % of the population with "
                      f"{pct} confidence:")
        if exc is not None:
            print()
            _emit(exc, args, columns=None if args.all_columns else ["limit", "fraction", "ci_low", "ci_high",
                                                                      "n_exceed", "n", *cens],
                  heading=f"share of the population above the limit, with its exact {pct} interval; "
                          "n_exceed counts observed values above it:")
        if censored:
            print()
            print(textwrap.fill("Non-detects: the estimates come from the censored log-normal maximum "
                                "likelihood fit; their intervals are then approximate.", min(_width(), 100)))
    _footer(args, _TAIL_CAUTION)
    _save_plots(args, values, lambda v: _plot().hist(df, v, by=_plot_key(df, keys), layout="panels",
                                                      nonpositive=args.nonpositive, units=args.units,
                                                      detection_limit=args.limits.get(v),
                                                      limit=limit))
    return EXIT_OK


def _cmd_components(args: argparse.Namespace) -> int:
    df, values, keys = _load(args)
    df = in_data_order(df, keys)
    if not args.nested:
        raise UsageError("--nested needs at least one column (the nesting levels, outermost first)")
    if _censoring(args.limits, values):
        raise UsageError("variance components take no non-detects yet (no censored form); pass a column "
                         "of measured values")
    args.progress("variance components")
    res = df.logstats.variance_components(by=_by(keys), columns=_one_or_many(values), nested=args.nested,
                                          confidence_level=args.confidence_level,
                                          nonpositive=args.nonpositive)
    if isinstance(res, pd.Series):
        res = res.to_frame().T
        res.index = pd.Index(values, name="variable")
    levels = [*map(str, args.nested), "within"]
    cols = ["n"] + [f"n_{lv}" for lv in levels[:-1]]
    for lv in levels:
        cols += [f"var_{lv}", f"gsd_{lv}", f"frac_{lv}"]
    cols += ["design_effect", "n_effective"]
    _emit(res, args, columns=cols if not args.all_columns else None)
    if args.output is None:
        inner = " within ".join(reversed(levels[:-1]))
        text = (f"Variance of the natural logs split by level ({inner}; 'within' is the spread inside the "
                "innermost unit). gsd_L = exp(sqrt(var_L)) is that level's spread factor, frac_L its "
                "share of "
                "the total; n_effective = n / design_effect independent values. ANOVA (method of moments) "
                "estimators for unbalanced nesting; --all-columns shows the intervals.")
        trunc = int(pd.to_numeric(res.get("n_truncated", pd.Series(dtype=float)), errors="coerce").fillna(0)
                    .sum())
        if trunc:
            text += (f" {trunc} negative estimate(s) were set to 0 (counted in n_truncated): that level "
                     "shows no spread beyond what the level below explains.")
        _footer(args, text)
    return EXIT_OK


def _int_list(text: str | None, option: str) -> list[int] | None:
    if text is None:
        return None
    try:
        return [int(x) for x in text.replace(" ", "").split(",") if x]
    except ValueError as exc:
        raise UsageError(f"{option} {text!r}: give whole numbers separated by commas, e.g. 3,4,6,8") from exc


def _cmd_plan(args: argparse.Namespace) -> int:
    res = logstats.plan(args.ratio, var_between=args.var_between, var_within=args.var_within,
                        alpha=args.alpha, power=args.power,
                        replicates=_int_list(args.replicates, "--replicates"),
                        per_replicate=_int_list(args.per_replicate, "--per-replicate"))
    best = res.attrs.get("smallest")
    if args.output is not None:
        _emit(res.set_index(["replicates", "per_replicate"]), args)
    else:
        grid = res.pivot(index="replicates", columns="per_replicate", values="power")
        grid.columns = [f"m={c}" for c in grid.columns]
        limit = res.groupby("replicates")["power_limit"].first()
        grid["m=inf"] = limit
        print(f"power to detect a {args.ratio:g}-fold change (two-sided alpha {args.alpha:g}) with k "
              "replicates per condition (rows) of m values each (columns):")
        print(format_table(grid, digits=args.digits, ascii=_wants_ascii(args), width=_width()))
        print()
        if best:
            print(f"smallest design reaching power {args.power:g}: {int(best['replicates'])} replicates of "
                  f"{int(best['per_replicate'])} values per condition (power {best['power']:.3f}; "
                  f"{int(best['values_per_condition'])} values per condition).")
        else:
            print(f"no design in the grid reaches power {args.power:g}; add replicates (--replicates): more "
                  "values per replicate stop helping once the between-replicate variance dominates (m=inf "
                  "is that ceiling).")
        print(textwrap.fill(
            "Two-sided two-sample t test on replicate means of the natural logs; the variance of a "
            "replicate mean is var_between + var_within / m (take both from 'logstats components'). "
            "Assumed variances are estimates: plan with some margin.", min(_width(), 100)))
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    df, values, keys = _load(args)
    ref = None
    if args.reference is not None:
        if not keys:
            raise UsageError("--reference needs --by (the column whose levels are compared)")
        try:
            df, ref = _order_levels(df, keys[0], args.reference)
        except DataError as exc:
            raise DataError(f"{args.table}: {exc}") from None
    if args.replicate is not None and not keys:
        raise UsageError("--replicate needs --by")
    specs = [args.limits.get(v) for v in values]
    if any(repr(x) != repr(specs[0]) for x in specs):
        raise DataError(f"{args.table}: the value columns have different detection limits; make one report "
                        "per --value")
    limit = _number_or_column(args.limit, df, args.table, "--limit")
    from logstats.report import build_report

    build_report(df, value=_one_or_many(values), by=_by(keys), replicate=args.replicate, reference=ref,
                 path=args.output, detection_limit=specs[0], nonpositive=args.nonpositive,
                 confidence_level=args.confidence_level, units=args.units, title=args.title,
                 source=args.table, adjust=None if args.adjust == "none" else args.adjust,
                 unit_name=args.unit_name, command=args.command_line, progress=args.progress,
                 limit=limit, nested=args.nested or None, margin=args.margin,
                 censored_method=args.censored_method, coverage=args.coverage)
    _note(args, f"wrote {args.output}")
    return EXIT_OK


def _cmd_demo(args: argparse.Namespace) -> int:
    from logstats.demo import run_demo

    if args.out is not None:
        if args.output is not None and args.output != args.out:
            raise UsageError("--out is the old name of --output; give one of them")
        _note(args, "--out is deprecated; use --output (the same folder)")
    out = args.output or args.out or "logstats-demo"
    run_demo(out, seed=args.seed, write_files=not args.no_files, ascii=_wants_ascii(args),
             width=_width(), progress=args.progress)
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
        raise argparse.ArgumentTypeError(f"--dpi must be between 20 and 1200, not {v}")
    return v


def _digits(text: str) -> int:
    try:
        v = int(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from exc
    if not 1 <= v <= 15:
        raise argparse.ArgumentTypeError(f"--digits must be between 1 and 15, not {v}")
    return v


def _decimal(text: str) -> str:
    if text not in (".", ","):
        raise argparse.ArgumentTypeError(f"{text!r}: the decimal mark is '.' or ','")
    return text


_EXAMPLES = {
    "summary": "logstats summary cells.csv --value reporter --by treatment --nonpositive drop",
    "compare": ("logstats compare cells.csv --value reporter --by treatment --reference vehicle "
                "--replicate well --nonpositive drop --plot groups.png"),
    "fit": "logstats fit cells.csv --value marker --by treatment --detection-limit marker_dl",
    "check": "logstats check cells.csv --value reporter --by treatment --nonpositive drop --plot qq.png",
    "report": ("logstats report cells.csv --value reporter --by treatment --replicate well "
               "--reference vehicle --nonpositive drop -o report.html"),
    "demo": "logstats demo --output logstats-demo --seed 7",
    "tail": "logstats tail river.csv --value nitrate --by site --limit 50 --q 0.95 --q 0.99",
    "components": "logstats components cells.csv --value reporter --by treatment --nested day --nested well",
    "plan": "logstats plan --ratio 1.5 --var-between 0.05 --var-within 0.25",
}
_LAB_EXAMPLE = {
    "summary": 'logstats summary export.csv --value "conc (mg/L)" --by site --by month',
    "fit": "logstats fit lab.csv --value conc --by site --nd-limit 0.2   (conc written 1.4, <0.5, ND)",
    "report": "logstats report plate.xlsx --sheet 2 --value signal --by arm --by day -o report.html",
}


def _wrap(text: str) -> str:
    return textwrap.fill(text, 88)


def _epilog(name: str) -> str:
    extra = f"\n  {_LAB_EXAMPLE[name]}" if name in _LAB_EXAMPLE else ""
    return (f"example:\n  {_EXAMPLES[name]}{extra}\n\n"
            "exit codes: 0 success, 1 data error (or nothing could be computed), 2 usage error")


def _add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--quiet", "-q", action="store_true",
                   help="no progress or information lines on standard error (warnings and errors stay)")


def _add_input(p: argparse.ArgumentParser, *, by_required: bool = False, by_help: str | None = None) -> None:
    p.add_argument("table", help="input table: .csv, .tsv, .parquet or .xlsx (text optionally .gz); '-' "
                                 "reads CSV from standard input")
    p.add_argument("--format", choices=_FORMATS, default=None,
                   help="table format when the extension does not tell")
    p.add_argument("--sep", metavar="CHAR", default=None,
                   help="field delimiter of a text table: ',', ';', '|' or tab (default: detected from "
                        "the first lines, ',' unless the file clearly uses another)")
    p.add_argument("--decimal", type=_decimal, metavar="MARK", default=None,
                   help="decimal mark of a text table, '.' or ',' (default: ',' when the file is not "
                        "comma-separated and its numbers are written 7,4; else '.')")
    p.add_argument("--encoding", metavar="NAME", default=None,
                   help="text encoding of the table (default utf-8; Windows and Excel exports are often "
                        "cp1252)")
    p.add_argument("--sheet", metavar="NAME|NUMBER", default=None,
                   help="sheet of an .xlsx workbook, by name or number from 1 (default the first)")
    p.add_argument("--value", action="append", required=True, metavar="COLUMN",
                   help="value column; repeat the option for several (a name with commas, quotes or "
                        "units works as written; 'a,b' is split only when no column is named 'a,b' "
                        "and both parts are columns)")
    p.add_argument("--by", action="append", required=by_required, metavar="COLUMN",
                   help=(by_help or "group column (e.g. treatment); repeat for several keys")
                   + ("" if by_required else "; optional"))
    p.add_argument("--nonpositive", choices=("raise", "drop", "nan"), default="raise",
                   help="zeros and negatives: refuse them (default), drop them (counted in "
                        "n_nonpositive) or make the group's result NaN")
    p.add_argument("--units", default=None, help="units of the values, for figure axes (e.g. 'mg/L')")
    p.add_argument("--nd-limit", metavar="NUMBER|COLUMN", default=None,
                   help="detection limit of non-detects written as words ('ND', 'n.d.', '<LOD', '<LOQ', "
                        "'BDL'); entries such as '<0.5' carry their own limit and need no option")
    _add_common(p)


def _add_detection_limit(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument("--detection-limit", metavar="NUMBER|COLUMN", default=None,
                   help="detection limit: a number or a column holding each row's limit; values at or "
                        f"below it are non-detects ({what}). A value column written '<0.5', 'ND' … is "
                        "read as censored without this option")


def _positive(text: str) -> float:
    try:
        v = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from exc
    if not (v > 0 and v < float("inf")):
        raise argparse.ArgumentTypeError(f"{text} must be a positive number")
    return v


def _nonnegative(text: str) -> float:
    try:
        v = float(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from exc
    if not (v >= 0 and v < float("inf")):
        raise argparse.ArgumentTypeError(f"{text} must be a number >= 0")
    return v


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


def _add_unit_name(p: argparse.ArgumentParser) -> None:
    p.add_argument("--unit-name", metavar="NAME", default=None,
                   help="what one row is (cells, samples, days): count columns are then named "
                        "n_NAME (default n_values)")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``logstats`` command."""
    fmt = argparse.RawDescriptionHelpFormatter
    parser = argparse.ArgumentParser(
        prog="logstats",
        description=_wrap("Log-scale statistics for right-skewed, log-normal-like measurements: geometric "
                    "means ×/÷ spreads, fold changes with the replicate as the unit, censored fits "
                    "and the linear-vs-log scale check, on CSV, TSV, Parquet and Excel tables."),
        epilog="examples:\n  logstats demo\n  " + _EXAMPLES["summary"] + "\n  " + _EXAMPLES["compare"]
               + "\n\nrun 'logstats SUBCOMMAND --help' for the options of each.",
        formatter_class=fmt,
    )
    parser.add_argument("--version", action="version", version=f"logstats {logstats.__version__}",
                        help="show the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND", required=True,
                                help="what to do (each has its own --help)")

    p = sub.add_parser("summary", help="geometric mean ×/÷ GSD and its confidence interval per group",
                       description=_wrap("Geometric mean, geometric SD and the t confidence interval of the "
                                   "geometric mean, per group of --by."),
                       epilog=_epilog("summary"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--confidence-level", type=_level, default=0.95,
                   help="confidence level of the interval (default 0.95)")
    p.add_argument("--linear", action="store_true", help="add the linear-scale median, mean and SD")
    _add_detection_limit(p, "the censored log-normal fit, not substitution")
    p.add_argument("--censored-method", choices=("mle", "ros", "km"), default="mle",
                   help="with non-detects: maximum likelihood (default), robust regression on order "
                        "statistics, or Kaplan-Meier")
    p.add_argument("--arithmetic-mean", choices=("cox", "modified_cox", "land", "gci", "bootstrap"),
                   default=None, help="add the arithmetic mean implied by the log-normal fit with its "
                                      "interval by this method (land: exact)")
    p.add_argument("--seed", type=int, default=None,
                   help="random seed of the Monte Carlo methods of --arithmetic-mean (gci, bootstrap)")
    _add_output(p, plot_help="log-binned histograms with the fitted densities")
    p.set_defaults(func=_cmd_summary, subparser=p)

    p = sub.add_parser("compare", help="fold changes of every group against a reference group",
                       description=_wrap(
                           "Ratio of geometric means of every level of --by against --reference, with "
                           "confidence interval and p-value (Welch's t on the logs). With --replicate "
                           "the replicate (well, animal, day), not the cell, is the unit. A second --by "
                           "stratifies: the levels of the first are compared within each of its levels."),
                       epilog=_epilog("compare"), formatter_class=fmt)
    _add_input(p, by_required=True,
               by_help="the column whose levels are compared; a second --by compares within its levels")
    p.add_argument("--reference", required=True, metavar="LEVEL",
                   help="the level of the first --by compared against (e.g. vehicle)")
    p.add_argument("--replicate", metavar="COLUMN", action="append", default=None,
                   help="replicate column: its geometric means are the units; repeat for nested "
                        "replicates, outermost first (--replicate day --replicate well)")
    p.add_argument("--paired", action="store_true",
                   help="pair replicates sharing a label with the reference's (needs --replicate)")
    p.add_argument("--equal-var", action="store_true", help="Student's pooled t instead of Welch's")
    p.add_argument("--adjust", choices=("holm", "bh", "none"), default="holm",
                   help="multiplicity adjustment of the p-values (default holm)")
    p.add_argument("--equivalence", metavar="LOW,HIGH", default=None,
                   help="equivalence limits on the ratio, e.g. 0.8,1.25 (two one-sided tests)")
    p.add_argument("--confidence-level", type=_level, default=0.95,
                   help="confidence level of the intervals (default 0.95)")
    _add_detection_limit(p, "censored regression on the logs with a common spread")
    _add_unit_name(p)
    _add_output(p, plot_help="every value with replicate means and geometric mean ×/÷ CI per group")
    p.set_defaults(func=_cmd_compare, subparser=p)

    p = sub.add_parser("fit", help="log-normal maximum-likelihood fit, left-censored at a detection limit",
                       description=_wrap(
                           "Maximum-likelihood mu and sigma (ddof=0) of a log-normal per group; with "
                           "--detection-limit values at or below it are non-detects."),
                       epilog=_epilog("fit"), formatter_class=fmt)
    _add_input(p)
    _add_detection_limit(p, "left-censored fit")
    _add_output(p, plot_help="histograms with the (censored) fit")
    p.set_defaults(func=_cmd_fit, subparser=p)

    p = sub.add_parser("check", help="linear or log scale? AIC, normality p-values and mean ratios",
                       description=_wrap("Compares the normal and log-normal fits to the same values (AIC on "
                                   "the original scale), normality p-values on both scales, and the "
                                   "arithmetic/geometric mean ratio with the one log-normality predicts."),
                       epilog=_epilog("check"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--margin", type=_nonnegative, default=2.0,
                   help="a scale is preferred only when its AIC is lower by at least this much, else "
                        "'undecided' (default 2)")
    p.add_argument("--pooled", action="store_true",
                   help="one verdict across the groups of --by (group means removed, one common Box-Cox "
                        "power) and the mean-spread slope over the groups")
    p.add_argument("--confidence-level", type=_level, default=0.95,
                   help="level of the Box-Cox and slope intervals (default 0.95)")
    _add_detection_limit(p, "censored likelihoods on both scales")
    p.add_argument("--scale-plot", metavar="FILE", default=None,
                   help="also draw the Box-Cox profile and the mean-spread plot to FILE (.png, .svg, .pdf)")
    _add_output(p, plot_help="normal probability plots of the logs and the raw values")
    p.set_defaults(func=_cmd_check, subparser=p)

    p = sub.add_parser("report", help="one self-contained HTML report of the whole analysis",
                       description=_wrap("Overview, scale check, summary, comparisons, figures, methods, "
                                   "cautions and provenance (date, command, versions, input checksum) "
                                   "in one HTML file with the figures embedded (no network)."),
                       epilog=_epilog("report"), formatter_class=fmt)
    _add_input(p, by_help="group column; repeat for several keys (the first is the one compared)")
    p.add_argument("--replicate", metavar="COLUMN", action="append", default=None,
                   help="replicate column (well, animal, day): comparisons use its means as the units; "
                        "repeat for nested replicates, outermost first (adds the variance components)")
    p.add_argument("--nested", metavar="COLUMN", action="append", default=None,
                   help="nesting level for the variance-components section, outermost first; repeat")
    p.add_argument("--limit", metavar="NUMBER|COLUMN", default=None,
                   help="a limit in the data's units: adds the upper-tail section (percentiles, tolerance "
                        "limits, exceedance) and draws the limit on the figures")
    p.add_argument("--coverage", type=_level, default=0.95,
                   help="population share of the tolerance limits (default 0.95)")
    p.add_argument("--margin", type=_nonnegative, default=2.0,
                   help="AIC margin of the scale verdict (default 2)")
    p.add_argument("--censored-method", choices=("mle", "ros", "km"), default="mle",
                   help="with non-detects: how the summary is estimated (default mle)")
    p.add_argument("--reference", metavar="LEVEL", default=None,
                   help="level of the first --by the others are compared with (no comparisons without)")
    p.add_argument("--detection-limit", metavar="NUMBER|COLUMN", default=None,
                   help="detection limit: every table then treats values at or below it as censored "
                        "(and counts them)")
    p.add_argument("--confidence-level", type=_level, default=0.95,
                   help="confidence level of the intervals (default 0.95)")
    p.add_argument("--adjust", choices=("holm", "bh", "none"), default="holm",
                   help="multiplicity adjustment of the comparisons (default holm)")
    p.add_argument("--title", default=None, help="title of the report (default names the values)")
    _add_unit_name(p)
    p.add_argument("--output", "-o", metavar="FILE.html", default="report.html",
                   help="where to write the report (default report.html)")
    p.set_defaults(func=_cmd_report, subparser=p)

    p = sub.add_parser("tail", help="upper tail: percentiles, tolerance limits and exceedance of a limit",
                       description=_wrap(
                           "Percentiles of the fitted log-normal with exact intervals (non-central t), "
                           "tolerance limits (a bound covering --coverage of the population with "
                           "--confidence-level confidence) and, with --limit, the estimated share of the "
                           "population above the limit with its exact interval, per group. " + _TAIL_CAUTION),
                       epilog=_epilog("tail"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--limit", metavar="NUMBER|COLUMN", default=None,
                   help="limit in the data's units (or a column with each group's limit): exceedance")
    p.add_argument("--q", type=float, action="append", default=None, metavar="P",
                   help="percentile as a probability, e.g. 0.95; repeat for several (default 0.95)")
    p.add_argument("--coverage", type=float, default=0.95,
                   help="population share covered by the tolerance limits (default 0.95)")
    p.add_argument("--side", choices=("upper", "lower", "both"), default="upper",
                   help="tolerance limit side (default upper)")
    p.add_argument("--confidence-level", type=_level, default=0.95,
                   help="confidence level of every interval (default 0.95)")
    _add_detection_limit(p, "censored maximum likelihood; intervals then approximate")
    _add_output(p, plot_help="histograms with the limit marked")
    p.set_defaults(func=_cmd_tail, subparser=p)

    p = sub.add_parser("components", help="variance components of a nested design (day > well > cell)",
                       description=_wrap(
                           "Splits the variance of the natural logs into one component per nesting level "
                           "(--nested, outermost first; an inner label is read within its outer level) "
                           "and the spread within the innermost unit, with GSD form, shares, design effect "
                           "and the effective number of independent values."),
                       epilog=_epilog("components"), formatter_class=fmt)
    _add_input(p)
    p.add_argument("--nested", metavar="COLUMN", action="append", default=None, required=True,
                   help="nesting level, outermost first; repeat (--nested day --nested well)")
    p.add_argument("--confidence-level", type=_level, default=0.95,
                   help="confidence level of the component intervals (default 0.95)")
    _add_output(p, plot_help="nothing yet (no figure for components)")
    p.set_defaults(func=_cmd_components, subparser=p)

    p = sub.add_parser("plan", help="how many replicates and values per replicate to detect a fold change",
                       description=_wrap(
                           "Power of a two-sided two-sample t test on replicate means of the logs over a "
                           "grid of designs (replicates per condition x values per replicate), and the "
                           "smallest design reaching --power. The variances are those of the natural "
                           "logs, e.g. from 'logstats components'."),
                       epilog=_epilog("plan"), formatter_class=fmt)
    p.add_argument("--ratio", type=_positive, required=True, help="fold change to detect, e.g. 1.5")
    p.add_argument("--var-between", type=_nonnegative, required=True,
                   help="variance of the logs between replicates")
    p.add_argument("--var-within", type=_nonnegative, required=True,
                   help="variance of the logs within a replicate")
    p.add_argument("--alpha", type=_level, default=0.05, help="two-sided significance level (default 0.05)")
    p.add_argument("--power", type=_level, default=0.8, help="target power (default 0.8)")
    p.add_argument("--replicates", metavar="K,K,...", default=None,
                   help="replicates per condition to try (default 2 to 20)")
    p.add_argument("--per-replicate", metavar="M,M,...", default=None,
                   help="values per replicate to try (default 1,2,5,10,20,50,100,200,500)")
    p.add_argument("--output", "-o", metavar="FILE", default=None,
                   help="write the long table to FILE (.csv, .tsv or .parquet)")
    p.add_argument("--digits", type=_digits, default=3, help="significant digits shown (default 3)")
    p.add_argument("--ascii", action="store_true", help="plain ASCII output")
    _add_common(p)
    p.set_defaults(func=_cmd_plan, subparser=p)

    p = sub.add_parser("demo", help="run the whole analysis on an invented example data set",
                       description=_wrap(
                           "Generates an invented reporter-fluorescence screen (4 treatments x 6 wells x "
                           "~1,500 cells), prints the key tables and writes the table, figures, report "
                           "and imaging stack."),
                       epilog=_epilog("demo"), formatter_class=fmt)
    p.add_argument("--output", "-o", default=None, metavar="DIR",
                   help="output folder (default ./logstats-demo)")
    p.add_argument("--out", default=None, metavar="DIR", help="deprecated name of --output")
    p.add_argument("--seed", type=int, default=2024, help="random seed (default 2024)")
    p.add_argument("--no-files", action="store_true", help="print the tables only, write nothing")
    p.add_argument("--ascii", action="store_true", help="plain ASCII output ('x/' for '×/÷')")
    _add_common(p)
    p.set_defaults(func=_cmd_demo, subparser=p)
    return parser


def _usage_checks(args: argparse.Namespace) -> None:
    if args.command in ("summary", "compare", "fit", "check", "tail", "components", "plan"):
        _check_suffix(args.output, _TABLE_OUT, "--output")
        _check_suffix(getattr(args, "plot", None), _PLOT_OUT, "--plot")
        _check_suffix(getattr(args, "scale_plot", None), _PLOT_OUT, "--scale-plot")
    if args.command == "report":
        _check_suffix(args.output, (".html", ".htm"), "--output")
    if args.command == "compare" and args.paired and args.replicate is None:
        raise UsageError("--paired needs --replicate (the label that pairs replicates)")
    if args.command == "compare":
        _parse_equivalence(args.equivalence)
    if getattr(args, "sep", None) is not None:
        _separator(args.sep)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``logstats`` command line; returns the exit code (0 ok, 1 data error, 2 usage error)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        args, extra = parser.parse_known_args(argv)
        sub = getattr(args, "subparser", parser)
        if extra:  # reported by the subcommand, so its usage line is the one shown
            sub.error(f"unrecognized arguments: {' '.join(extra)}")
    except SystemExit as exc:  # --help, --version, or an argparse usage error
        return int(exc.code) if isinstance(exc.code, int) else (0 if exc.code is None else EXIT_USAGE)
    args.command_line = "logstats " + shlex.join(argv)
    args.progress = _Progress(not args.quiet and sys.stderr.isatty())
    where = getattr(args, "table", None) or getattr(args, "output", None) or "logstats"
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
